"""Test controllers for the sensing options, importable as ``sensing_controllers:Name`` with ``tests/`` on the path."""

from __future__ import annotations

import numpy as np

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


class SensingReporter(JointPDController):
    """Holds the nominal pose and sums up what the extra sensors told it, as stats (same in any process)."""

    def reset(self, robot, control_dt):
        super().reset(robot, control_dt)
        s = robot.sensing
        self.sums = {"privileged": float(s.privileged), "grid_sum": 0.0 if s.height_scan_xy is None
                     else float(np.sum(s.height_scan_xy)), "foot_3d": float(s.foot_force == "3d"),
                     "joint_torque": float(s.joint_torque), "scan_sum": 0.0, "scan_nan": 0.0, "scan_max": -1.0,
                     "force_sum": 0.0, "torque_sum": 0.0, "no_truth_ticks": 0.0, "gait_ticks": 0.0}

    def step(self, obs, command):
        s = self.sums
        if obs.height_scan is not None:
            s["scan_sum"] += float(np.nansum(obs.height_scan))
            s["scan_nan"] += float(np.isnan(obs.height_scan).sum())
            if np.isfinite(obs.height_scan).any():
                s["scan_max"] = max(s["scan_max"], float(np.nanmax(obs.height_scan)))
        if obs.foot_force is not None:
            s["force_sum"] += float(np.sum(obs.foot_force))
        if obs.joint_torque is not None:
            s["torque_sum"] += float(np.sum(np.abs(obs.joint_torque)))
        s["no_truth_ticks"] += obs.privileged is None
        s["gait_ticks"] += getattr(obs, "gait_hint", None) is not None
        return super().step(obs, command)

    def stats(self):
        return dict(self.sums)
