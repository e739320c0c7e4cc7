"""Torques a controller returns: only NaN and infinity are faults; huge finite values are clipped.

A sum of twelve torques of 1e308 overflows to infinity although every one of
them is finite (IEEE 754 double: the largest finite value is about 1.8e308), so
finiteness is decided element by element.
"""

from __future__ import annotations

import numpy as np
import pytest

from bench.execute.job import Job, run_job
from bench.scenario import load_scenarios
from bench.sim.episode import EpisodeLimits

LIMITS = EpisodeLimits(tick_timeout_s=5.0, episode_timeout_s=60.0)
AT = 3


class Returns:
    """Holds the nominal pose with a joint PD law, then from tick ``AT`` returns ``values``."""

    def __init__(self, values):
        self.values = np.asarray(values, dtype=float)

    def reset(self, robot, control_dt):
        self.q0 = np.asarray(robot.nominal_pose, dtype=float)
        self.k = 0

    def step(self, obs, command):
        self.k += 1
        if self.k > AT:
            return self.values.copy()
        return 60.0 * (self.q0 - obs.joint_pos) - 2.0 * obs.joint_vel


@pytest.fixture(scope="module")
def stand(tmp_path_factory):
    path = tmp_path_factory.mktemp("tau") / "stand.yaml"
    path.write_text("name: stand\nduration: 0.02\n")
    return load_scenarios([str(path)])[0]


@pytest.mark.parametrize("sign", [1.0, -1.0])
def test_huge_finite_torques_are_clipped_to_the_limits_not_called_non_finite(stand, sign):
    with np.errstate(over="ignore"):
        assert not np.isfinite(np.full(12, sign * 1e308).sum())     # the trap: the sum overflows
    out = run_job(Job(stand, Returns(np.full(12, sign * 1e308)), None, LIMITS))
    r = out.result
    assert "non-finite" not in (r["reason"] or ""), r["reason"]
    assert r["status"] != "error", r["reason"]
    tau = out.trace["joint_torque"]
    limits = out.trace["torque_limit"]
    assert len(tau) == 10                                          # the whole episode ran
    np.testing.assert_array_equal(tau[AT:], sign * limits[AT:])    # every joint at its limit
    assert np.all(np.abs(tau[:AT]) <= limits[:AT])


@pytest.mark.parametrize("bad", [np.nan, np.inf, -np.inf])
def test_nan_or_infinity_among_huge_torques_is_still_an_error(stand, bad):
    values = np.full(12, 1e308)
    values[7] = bad
    r = run_job(Job(stand, Returns(values), None, LIMITS)).result
    assert r["status"] == "error"
    assert "controller returned non-finite torques at tick 3 " in r["reason"]


class RaisesOnOverflow(Returns):
    """Asks NumPy to raise on overflow (a controller may), then returns huge finite torques."""

    def reset(self, robot, control_dt):
        super().reset(robot, control_dt)
        np.seterr(over="raise")


def test_huge_torques_are_clipped_even_when_the_controller_makes_numpy_raise_on_overflow(stand):
    with np.errstate():     # restores this process's settings after the controller changed them
        out = run_job(Job(stand, RaisesOnOverflow(np.full(12, 1e308)), None, LIMITS))
    r = out.result
    assert r["status"] != "error", r["reason"]
    np.testing.assert_array_equal(out.trace["joint_torque"][AT:], out.trace["torque_limit"][AT:])
