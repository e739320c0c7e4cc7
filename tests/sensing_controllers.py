"""Test controllers for the sensing options, importable as ``sensing_controllers:Name`` with ``tests/`` on the path."""

from __future__ import annotations

from bench.controllers.simple import JointPDController


class TruthFree(JointPDController):
    """Holds the nominal pose; refuses to run when it is handed the true trunk state."""

    def reset(self, robot, control_dt):
        if robot.sensing.privileged:
            raise RuntimeError("robot.sensing says the true state is given")
        super().reset(robot, control_dt)

    def step(self, obs, command):
        if obs.privileged is not None:
            raise RuntimeError("obs.privileged is set")
        return super().step(obs, command)
