"""Two minimal controllers: ``zero`` (no torque) and ``joint-pd`` (holds the nominal pose).

They are registered through the ``bench.controllers`` entry point group, exactly
as a user's controller would be, and serve as floor references: a scenario that
``zero`` passes measures nothing.
"""

from __future__ import annotations

import numpy as np

from bench.controllers.base import Observation


class ZeroController:
    """Applies no torque; the robot collapses under gravity."""

    name = "zero"

    def reset(self, robot, control_dt: float) -> None:
        self._tau = np.zeros(len(robot.manifest.joints))

    def step(self, obs: Observation, command: np.ndarray) -> np.ndarray:
        return self._tau


class JointPDController:
    """Holds the nominal standing pose with joint-space PD; ignores the command."""

    name = "joint-pd"

    def __init__(self, kp: float = 150.0, kd: float = 3.0) -> None:
        self.kp = kp
        self.kd = kd

    def reset(self, robot, control_dt: float) -> None:
        self._q0 = np.asarray(robot.nominal_pose, dtype=float).copy()
        self._tau = np.zeros_like(self._q0)

    def step(self, obs: Observation, command: np.ndarray) -> np.ndarray:
        tau = self._tau
        np.subtract(self._q0, obs.joint_pos, out=tau)
        tau *= self.kp
        tau -= self.kd * obs.joint_vel
        return tau
