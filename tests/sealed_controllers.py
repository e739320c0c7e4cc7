"""Controllers that try to escape their boundary, for tests/test_sealed.py.

Named on the command line or in a ``sealed:`` spec as ``sealed_controllers:Name``
with ``tests/`` on ``sys.path`` (pytest puts it there; the sealed child inherits
the bench process's ``sys.path``).
"""

from __future__ import annotations

import os
import subprocess
import sys
import time

import mujoco
import numpy as np

#: Environment variable naming a file where GrandchildThenHang writes its grandchild's pid.
PIDFILE_ENV = "BENCH_TEST_SEALED_PIDFILE"


class WorldGrabber:
    """Applies no torque, but walks the caller's frames to find the simulation and holds the robot up.

    In-process it finds the episode loop's ``MjData`` and ``World`` and, every tick, puts the trunk
    back at its nominal height, upright, joints at the nominal pose, at rest. In a sealed child there
    is no such frame: it applies no torque and the robot falls as physics says. ``found_world`` in
    its stats tells which happened.
    """

    name = "world-grabber"

    def reset(self, robot, control_dt: float) -> None:
        self.tau = np.zeros(robot.num_joints)
        self.height = float(robot.nominal_height)
        self.pose = np.array(robot.nominal_pose)
        self.found = 0.0
        self.frames = 0

    def _find(self):
        f = sys._getframe(1)
        while f is not None:
            self.frames += 1
            loc = f.f_locals
            d, world = loc.get("d"), loc.get("world")
            if isinstance(d, mujoco.MjData) and hasattr(world, "root_qpos_adr"):
                return d, world
            f = f.f_back
        return None, None

    def step(self, obs, command):
        d, world = self._find()
        if d is not None:
            self.found = 1.0
            qa, va = world.root_qpos_adr, world.root_dof_adr
            d.qpos[qa + 2] = self.height
            d.qpos[qa + 3:qa + 7] = (1.0, 0.0, 0.0, 0.0)
            d.qpos[world.joint_qpos_adr] = self.pose
            d.qvel[va:va + 6] = 0.0
            d.qvel[world.joint_dof_adr] = 0.0
        return self.tau

    def stats(self):
        return {"found_world": self.found, "frames_walked": float(self.frames)}


class ManifestShrinker:
    """Applies no torque and sets its manifest's nominal height to 1 mm through object.__setattr__.

    Were the manifest shared with the world, the fall threshold (a share of the nominal height)
    would drop to almost nothing and the scored height errors would change.
    """

    name = "manifest-shrinker"

    def reset(self, robot, control_dt: float) -> None:
        object.__setattr__(robot.manifest, "nominal_height", 0.001)
        self.seen = float(robot.manifest.nominal_height)
        self.tau = np.zeros(robot.num_joints)

    def step(self, obs, command):
        return self.tau

    def stats(self):
        return {"seen_nominal_height": self.seen}


class ChattyPD:
    """Holds the nominal pose with the joint PD of ``joint-pd`` and prints a line on stdout every tick."""

    def reset(self, robot, control_dt: float) -> None:
        from bench.controllers.simple import JointPDController

        self.pd = JointPDController()
        self.pd.reset(robot, control_dt)

    def step(self, obs, command):
        print(f"tick at t={obs.t}: hello\n" * 3, end="")
        return self.pd.step(obs, command)


def _start_grandchild() -> None:
    """A long-lived process started by the controller; its pid goes to $BENCH_TEST_SEALED_PIDFILE."""
    path = os.environ.get(PIDFILE_ENV)
    if path:
        proc = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(120)"])
        with open(path, "w") as f:
            f.write(str(proc.pid))


class ExitsAt:
    """Applies no torque, then calls os._exit(7) at tick 3 (the process vanishes without unwinding).

    With $BENCH_TEST_SEALED_PIDFILE set it first starts a grandchild in reset().
    """

    def reset(self, robot, control_dt: float) -> None:
        self.tau = np.zeros(robot.num_joints)
        self.k = 0
        _start_grandchild()

    def step(self, obs, command):
        self.k += 1
        if self.k > 3:
            sys.stderr.write("about to vanish\n")
            sys.stderr.flush()
            os._exit(7)
        return self.tau


class GrandchildThenHang:
    """Starts a long-lived grandchild process in reset() (its pid to $BENCH_TEST_SEALED_PIDFILE), then hangs."""

    def reset(self, robot, control_dt: float) -> None:
        self.tau = np.zeros(robot.num_joints)
        _start_grandchild()

    def step(self, obs, command):
        time.sleep(120)
        return self.tau


def module_level_factory():
    """A factory a test registers under a name of its own."""
    from bench.controllers.simple import JointPDController

    return JointPDController()


class CommandEraser:
    """Holds the pose (joint PD) and clears its command in place, as ``np.clip(command, ..., out=command)`` would.

    Were the command array the runner's own, the trace would record the cleared command and a robot
    standing still would track a 0.5 m/s command perfectly.
    """

    def reset(self, robot, control_dt: float) -> None:
        from bench.controllers.simple import JointPDController

        self.pd = JointPDController()
        self.pd.reset(robot, control_dt)

    def step(self, obs, command):
        command[:] = 0.0
        return self.pd.step(obs, command)


class _IgnoresWrites(np.ndarray):
    def __setitem__(self, key, value) -> None:
        pass


class VelocityFaker(CommandEraser):
    """Holds the pose and swaps its observed trunk velocity for an array that ignores writes, reading 0.5 m/s.

    Were the observation the runner's own, the runner's update would be lost and the trace would record
    0.5 m/s forward for a robot standing still.
    """

    def step(self, obs, command):
        if not isinstance(obs.privileged.base_linvel, _IgnoresWrites):
            obs.privileged.base_linvel = np.array([0.5, 0.0, 0.0]).view(_IgnoresWrites)
        return self.pd.step(obs, command)
