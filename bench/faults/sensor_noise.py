"""Fault kind ``sensor_noise``: Gaussian noise plus a bias on one sensor from ``at`` on.

The draws come from the episode's generator, in tick order and, within a tick, in the order
the faults are written, so an episode is reproducible from (scenario, seed).
"""

from __future__ import annotations

from typing import ClassVar

import numpy as np

from bench.faults.registry import Effect, FaultContext, FaultKind
from bench.faults.sensors import OBS_FIELDS, Sensor
from bench.fieldspec import AT, frozen, spec


@frozen
class SensorNoise:
    """Gaussian noise (plus a bias) on one sensor from `at` on."""

    kind: ClassVar[str] = "sensor_noise"
    at: float = spec(0.0, **AT)
    sensor: Sensor = spec(doc="which sensor")
    std: float = spec(doc="noise standard deviation, in the sensor's unit", ge=0.0, le=1e3)
    bias: float = spec(0.0, doc="constant offset, in the sensor's unit", ge=-1e3, le=1e3)

    def label(self) -> str:
        return f"{self.sensor} noise std {self.std:g}" + (f", bias {self.bias:g}" if self.bias else "")


class SensorNoiseEffect(Effect):
    """Adds ``std * N(0, 1) + bias`` to the sensor; on the orientation, composes a small random rotation."""

    order = 20

    def __init__(self, items, ctx: FaultContext):
        import mujoco

        self._axis_angle, self._mul = mujoco.mju_axisAngle2Quat, mujoco.mju_mulQuat
        self.rng = ctx.rng
        self.steps = [(ctx.first_tick(f.at), OBS_FIELDS[f.sensor], f) for _, f in items]
        self.active: list = []

    def switch_ticks(self):
        return [k for k, _, _ in self.steps]

    def switch(self, k: int) -> None:
        self.active = [(name, f.std, f.bias) for k_on, name, f in self.steps if k >= k_on]
        self.observing = True

    def observe(self, obs) -> None:
        for name, std, bias in self.active:
            arr = getattr(obs, name)
            if name == "imu_quat":
                # A random small rotation (std in rad per axis) composed with the true one.
                rv = self.rng.standard_normal(3) * std + bias
                dq = np.empty(4)
                self._axis_angle(dq, rv / (np.linalg.norm(rv) + 1e-12), float(np.linalg.norm(rv)))
                out = np.empty(4)
                self._mul(out, arr, dq)
                arr[:] = out
            else:
                arr += self.rng.standard_normal(arr.shape) * std + bias


KIND = FaultKind(schema=SensorNoise, compile=SensorNoiseEffect)
