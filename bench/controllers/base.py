"""The controller protocol and the observation a controller sees each control tick.

A controller is given the nominal robot (robot-only model, no world) once in
``reset`` and then, every control tick, an :class:`Observation` and the current
velocity command ``[vx, vy, yaw_rate]`` (body frame). It returns joint torques in
manifest order. The runner preallocates the observation arrays and updates them
in place, so a controller may keep references to them between ticks. A controller
that replaces or deletes one of the observation's arrays (or its ``privileged``
part) is given a fresh observation object at the next tick.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Protocol, runtime_checkable

import numpy as np

from bench.sensing_info import SensingInfo  # noqa: F401 - re-exported: what ``robot.sensing`` holds

if TYPE_CHECKING:  # pragma: no cover - typing only
    from bench.robot.model import NominalRobot


@dataclass
class Privileged:
    """True state the runner exposes for convenience; marked privileged because a
    real robot would have to estimate it."""

    base_pos: np.ndarray = field(default_factory=lambda: np.zeros(3))  # world, m
    base_linvel: np.ndarray = field(default_factory=lambda: np.zeros(3))  # world, m/s


@dataclass
class Observation:
    """Sensor readings at one control tick (arrays updated in place by the runner)."""

    t: float = 0.0  # simulation time of this tick, s
    imu_quat: np.ndarray = field(default_factory=lambda: np.array([1.0, 0.0, 0.0, 0.0]))  # w,x,y,z world
    imu_gyro: np.ndarray = field(default_factory=lambda: np.zeros(3))  # body rad/s
    imu_accel: np.ndarray = field(default_factory=lambda: np.zeros(3))  # body specific force m/s^2
    joint_pos: np.ndarray = field(default_factory=lambda: np.zeros(0))  # (J,) rad
    joint_vel: np.ndarray = field(default_factory=lambda: np.zeros(0))  # (J,) rad/s
    foot_contact: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=bool))  # (F,) foot touching the ground, manifest foot order
    privileged: Privileged | None = field(default_factory=Privileged)  # None when the scenario says privileged: false
    # Extra sensors (scenario key ``sensing:``); None when the scenario does not configure them.
    height_scan: np.ndarray | None = None   # (nx, ny) world z of the terrain, m; NaN: no reading
    foot_force: np.ndarray | None = None    # (F,) normal force N, or (F, 3) world-frame force N
    joint_torque: np.ndarray | None = None  # (J,) measured joint torque, N m
    gait_hint: str | None = None  # the command's gait hint (stand, trot, pace, bound, walk) or None; a controller may ignore it

    @classmethod
    def zeros(cls, n_joints: int, n_feet: int) -> "Observation":
        """An observation with arrays of the right sizes, for runners and tests."""
        return cls(
            joint_pos=np.zeros(n_joints),
            joint_vel=np.zeros(n_joints),
            foot_contact=np.zeros(n_feet, dtype=bool),
        )


@runtime_checkable
class Controller(Protocol):
    """What the runner calls. ``stats`` is optional.

    Optional, all looked up once per episode: ``reset`` may also declare a ``seed`` (int) and/or ``rng``
    (``numpy.random.Generator``) keyword, derived from the episode seed (:mod:`bench.controllers.seeding`);
    ``signals``, a mapping of name to number or small array, is recorded every tick into ``trace.npz``
    (:mod:`bench.sim.signals`); ``close()`` is called once when the episode ends. ``name`` (str) is what
    the controller calls itself: recorded as ``controller_name`` in result.json, and the ``controller``
    of the result when the run was given a controller object or factory instead of a name.
    """

    def reset(self, robot: "NominalRobot", control_dt: float) -> None: ...

    def step(self, obs: Observation, command: np.ndarray) -> np.ndarray: ...
