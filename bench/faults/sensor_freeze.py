"""Fault kind ``sensor_freeze``: one sensor stuck at the value it read at ``at``."""

from __future__ import annotations

from typing import ClassVar

from bench.faults.registry import Effect, FaultContext, FaultKind
from bench.faults.sensors import OBS_FIELDS, Sensor
from bench.fieldspec import AT, frozen, spec


@frozen
class SensorFreeze:
    """One sensor stuck at its last value from `at` on."""

    kind: ClassVar[str] = "sensor_freeze"
    at: float = spec(**AT)
    sensor: Sensor = spec(doc="which sensor")

    def label(self) -> str:
        return f"{self.sensor} frozen"


class SensorFreezeEffect(Effect):
    """Keeps the first reading after switch-on and writes it into the observation every tick after.

    Runs before ``sensor_noise`` (lower ``order``): noise on a frozen sensor is drawn fresh each tick.
    """

    order = 10

    def __init__(self, items, ctx: FaultContext):
        self.steps = [(ctx.first_tick(f.at), OBS_FIELDS[f.sensor]) for _, f in items]
        self.active: list[str] = []
        self.frozen: dict = {}

    def switch_ticks(self):
        return [k for k, _ in self.steps]

    def switch(self, k: int) -> None:
        self.active = [name for k_on, name in self.steps if k >= k_on]
        self.observing = True

    def observe(self, obs) -> None:
        for name in self.active:
            if name not in self.frozen:
                self.frozen[name] = getattr(obs, name).copy()
            getattr(obs, name)[:] = self.frozen[name]


KIND = FaultKind(schema=SensorFreeze, compile=SensorFreezeEffect)
