"""Controllers that misbehave on purpose, for the fault tests (tests/test_faults_*.py).

Each holds the nominal pose with a joint PD law until tick ``at`` and then does
its one wrong thing. They are plain classes, so a test passes an instance to
``run_job``/``run_episode`` or names one on the command line as
``faulty_controllers:Name`` with ``tests/`` on ``PYTHONPATH``. The class-level
``AT`` is what the no-argument factory (the command line) uses.
"""

from __future__ import annotations

import time

import numpy as np


class _PD:
    """Joint PD about the nominal pose: stands still on flat ground."""

    AT = 5
    kp, kd = 60.0, 2.0

    def __init__(self, at: int | None = None):
        self.at = self.AT if at is None else at
        self.k = 0

    def reset(self, robot, control_dt: float) -> None:
        self.q0 = np.asarray(robot.nominal_pose, dtype=float)
        self.tau = np.zeros(len(self.q0))
        self.k = 0

    def hold(self, obs) -> np.ndarray:
        np.multiply(self.q0 - obs.joint_pos, self.kp, out=self.tau)
        self.tau -= self.kd * obs.joint_vel
        return self.tau

    def step(self, obs, command):
        k, self.k = self.k, self.k + 1
        return self.fault(obs, k) if k >= self.at else self.hold(obs)

    def fault(self, obs, k: int):  # pragma: no cover - overridden
        return self.hold(obs)


class Raises(_PD):
    """Raises RuntimeError at tick ``at``."""

    def fault(self, obs, k):
        raise RuntimeError(f"deliberate failure in tick {k}")


class RaisesInReset(_PD):
    """Raises ValueError from reset()."""

    def reset(self, robot, control_dt):
        raise ValueError("deliberate failure in reset")


class ReturnsNaN(_PD):
    """Returns a torque vector with one NaN."""

    def fault(self, obs, k):
        tau = self.hold(obs).copy()
        tau[3] = np.nan
        return tau


class ReturnsInf(_PD):
    """Returns a torque vector with one infinity."""

    def fault(self, obs, k):
        tau = self.hold(obs).copy()
        tau[0] = np.inf
        return tau


class WrongShape(_PD):
    """Returns one torque too many."""

    def fault(self, obs, k):
        return np.zeros(len(self.q0) + 1)


class WrongShape2D(_PD):
    """Returns a column instead of a vector."""

    def fault(self, obs, k):
        return np.zeros((len(self.q0), 1))


class NotNumbers(_PD):
    """Returns text."""

    def fault(self, obs, k):
        return ["a"] * len(self.q0)


class ReturnsNone(_PD):
    """Forgets to return."""

    def fault(self, obs, k):
        return None


class SpinsForever(_PD):
    """A pure-Python busy loop that never returns (a stuck iteration)."""

    def fault(self, obs, k):
        x = 0
        while True:
            x += 1


class SleepsForever(_PD):
    """Blocks in time.sleep (as on a lock or a socket)."""

    def fault(self, obs, k):
        time.sleep(3600)


class SwallowsOnce(_PD):
    """Catches the first interruption (a bare ``except``), then returns late."""

    def fault(self, obs, k):
        try:
            while True:
                pass
        except BaseException:  # noqa: BLE001 - on purpose
            pass
        return self.hold(obs)


class Slow(_PD):
    """Every call takes ``SLEEP_S`` (each under the per-tick limit; together over an episode limit)."""

    AT = 0
    SLEEP_S = 0.02

    def fault(self, obs, k):
        time.sleep(self.SLEEP_S)
        return self.hold(obs)


class SlowOnce(_PD):
    """One call at tick ``at`` takes ``SLEEP_S`` and then returns normally."""

    SLEEP_S = 0.3

    def fault(self, obs, k):
        if k == self.at:
            time.sleep(self.SLEEP_S)
        return self.hold(obs)


class WildTorques(_PD):
    """Commands absurd but finite torques (1e300 N m, alternating sign): the bench clips them."""

    def fault(self, obs, k):
        return np.full(len(self.q0), 1e300 * (1 if k % 2 else -1))


class SpinsLate(SpinsForever):
    """Spins from tick 200 on: a 1 s scenario (500 ticks) hangs, a 0.2 s one (100 ticks) never gets there."""

    AT = 200


# --- controllers that try to end, hang or blind the run (tests/test_containment.py) -------------------


class ExitsInStep(_PD):
    """Calls sys.exit(0) at tick ``at``, as a script's controller might."""

    def fault(self, obs, k):
        import sys

        sys.exit(0)


class ExitsInReset(_PD):
    """Parses options in reset() with argparse, which raises SystemExit(2) on an unknown one."""

    def reset(self, robot, control_dt):
        import argparse
        import contextlib
        import io

        with contextlib.redirect_stderr(io.StringIO()):   # argparse prints its usage first
            argparse.ArgumentParser(prog="ctrl").parse_args(["--no-such-option"])


class ExitsInInit(_PD):
    """Raises SystemExit(3) while being constructed."""

    def __init__(self, at=None):
        raise SystemExit(3)


class RaisesKeyboardInterrupt(_PD):
    """Raises KeyboardInterrupt itself (no signal involved)."""

    def fault(self, obs, k):
        raise KeyboardInterrupt


class RaisesGeneratorExit(_PD):
    """Raises GeneratorExit."""

    def fault(self, obs, k):
        raise GeneratorExit("deliberate")


class RaisesOwnBaseException(_PD):
    """Raises a BaseException subclass of its own."""

    class Escape(BaseException):
        pass

    def fault(self, obs, k):
        raise self.Escape("out of here")


class ExitsInStats(_PD):
    """Behaves, then calls sys.exit(5) from stats()."""

    AT = 10**9

    def stats(self):
        import sys

        sys.exit(5)


class _ExitsWhenConverted:
    """A torque "array" whose conversion (np.asarray calls __array__) raises SystemExit."""

    def __array__(self, dtype=None, copy=None):
        raise SystemExit(0)


class ReturnsExitingArray(_PD):
    """Returns an object whose conversion to an array calls sys.exit."""

    def fault(self, obs, k):
        return _ExitsWhenConverted()


class SendsSigint(_PD):
    """Sends SIGINT to its own process at tick ``at`` (as the user's Ctrl-C would arrive), then goes on."""

    def fault(self, obs, k):
        import os
        import signal

        if k == self.at:
            os.kill(os.getpid(), signal.SIGINT)
            time.sleep(0.5)   # the signal is delivered here
        return self.hold(obs)


class OsExits(_PD):
    """Leaves the process with os._exit(0) at tick ``at``: no exception, no cleanup."""

    def fault(self, obs, k):
        import os

        os._exit(0)


class StuckInC(_PD):
    """Blocks in native code that retries on EINTR (libc ``system`` waiting for ``sleep``): no Python
    signal handler can run, so the in-process watchdog cannot interrupt it.

    ``pidfile``: where the ``sleep`` process writes its pid, to check that it was killed too.
    """

    SLEEP_S = 60

    def __init__(self, at=None, pidfile: str = "/dev/null"):
        super().__init__(at)
        self.pidfile = pidfile

    def fault(self, obs, k):
        import ctypes

        ctypes.CDLL(None).system(f"echo $$ > {self.pidfile}; exec sleep {self.SLEEP_S}".encode())
        return self.hold(obs)


#: How long the tampering controllers below stay in the call that tampers (past one watchdog period).
TAMPER_STAY_S = 0.1


class StealsAlarm(_PD):
    """Installs its own SIGALRM handler at tick ``at`` (and returns), then spins from tick ``at + 5``."""

    def fault(self, obs, k):
        import signal

        if k == self.at:
            signal.signal(signal.SIGALRM, lambda *a: None)
            time.sleep(TAMPER_STAY_S)
            return self.hold(obs)
        if k >= self.at + 5:
            while True:
                pass
        return self.hold(obs)


class StopsAlarmTimer(_PD):
    """Stops the real-time interval timer at tick ``at`` (and returns), then spins from tick ``at + 5``."""

    def fault(self, obs, k):
        import signal

        if k == self.at:
            signal.setitimer(signal.ITIMER_REAL, 0.0, 0.0)
            time.sleep(TAMPER_STAY_S)
            return self.hold(obs)
        if k >= self.at + 5:
            while True:
                pass
        return self.hold(obs)


class BlocksAlarm(_PD):
    """Blocks SIGALRM at tick ``at`` (and returns), then spins from tick ``at + 5``."""

    def fault(self, obs, k):
        import signal

        if k == self.at:
            signal.pthread_sigmask(signal.SIG_BLOCK, [signal.SIGALRM])
            time.sleep(TAMPER_STAY_S)
            return self.hold(obs)
        if k >= self.at + 5:
            while True:
                pass
        return self.hold(obs)


class IgnoresAlarmAndSpins(_PD):
    """Sets SIGALRM to SIG_IGN and spins in the same call: only the executor's deadline kill ends it."""

    def fault(self, obs, k):
        import signal

        signal.signal(signal.SIGALRM, signal.SIG_IGN)
        while True:
            time.sleep(0.05)
