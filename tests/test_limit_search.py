"""The breaking-point search: generic behaviour, and a case with a known physical answer.

Known answer (Coulomb friction; inclined-plane statics, any first-year
mechanics textbook): a block on an incline of angle theta with static friction
coefficient mu stays put while tan(theta) < mu and slides once tan(theta) > mu,
so the steepest incline it stays on is atan(mu). The incline is built in
MuJoCo (a flat box on a plane, gravity tilted by theta), so the test checks
the search against real simulated physics, not against a formula it was given.
"""

from __future__ import annotations

import math

import mujoco
import pytest

from bench.search.limit import Evaluation, find_limit, rate_predicate

# ------------------------------------------------------------------ generic


def step_at(threshold: float, calls: list | None = None):
    def rate(v: float) -> float:
        if calls is not None:
            calls.append(v)
        return 1.0 if v <= threshold else 0.0

    return rate


@pytest.mark.parametrize("k", [1, 2, 3])
def test_finds_a_step_within_tol(k):
    calls: list = []
    r = find_limit(rate_predicate(step_at(3.7, calls)), 0.0, 10.0, tol=0.01, points_per_round=k)
    assert r.status == "found" and r.monotone
    p, f = r.bracket
    assert p <= 3.7 < f and f - p <= 0.01 and r.limit == p
    # bisection (k = 1) needs about log2(10 / 0.01) = 10 rounds after the two ends
    assert r.rounds - 1 <= math.ceil(math.log(1000) / math.log(k + 1)) + 1
    assert len(calls) == len(r.points) == len(set(calls))


def test_min_direction_and_integer_values():
    # passes from 17 upwards (e.g. the fewest steps a staircase may have): smallest passing value
    r = find_limit(rate_predicate(lambda v: 1.0 if v >= 17 else 0.0), 0, 100, direction="min", integer=True,
                   points_per_round=2)
    assert r.status == "found" and r.limit == 17 and r.bracket == (17, 16)
    assert all(float(p.value).is_integer() for p in r.points)


def test_out_of_range_answers_are_reported_not_invented():
    below = find_limit(rate_predicate(step_at(-1.0)), 0.0, 10.0, tol=0.1)
    assert below.status == "below-range" and below.limit is None and len(below.points) == 2
    above = find_limit(rate_predicate(step_at(20.0)), 0.0, 10.0, tol=0.1)
    assert above.status == "above-range" and above.limit == 10.0


def test_pass_rate_threshold_and_non_monotone_curves():
    # a smooth pass rate, judged at 0.5: the answer is where the rate crosses one half
    r = find_limit(rate_predicate(lambda v: 1.0 / (1.0 + math.exp(v - 4.0)), required=0.5), 0, 10, tol=0.01)
    assert abs(r.limit - 4.0) <= 0.01
    # a pass island (6, 7) beyond the first fail at 3: plain bisection never sees it ...
    def island(values):
        return [Evaluation(1.0, v < 3 or 6 < v < 7) for v in values]

    r = find_limit(island, 0, 10, tol=0.1)
    assert r.monotone and 2.9 <= r.limit < 3.0
    # ... 19 points a round (0.5, 1.0, ... 9.5) do: 3.0 fails, 6.5 passes. Flagged, and the first fail wins.
    r = find_limit(island, 0, 10, tol=0.1, points_per_round=19)
    assert not r.monotone and 2.9 <= r.limit < 3.0


def test_bad_arguments():
    with pytest.raises(ValueError):
        find_limit(rate_predicate(step_at(1)), 5, 5)
    with pytest.raises(ValueError):
        find_limit(rate_predicate(step_at(1)), 0, 5, direction="up")


# ------------------------------------------------------------------ box on an incline

BOX_XML = """
<mujoco>
  <!-- elliptic cones and a high impratio: contact that really sticks below the friction limit -->
  <option timestep="0.002" cone="elliptic" impratio="100"/>
  <worldbody>
    <geom name="incline" type="plane" size="5 5 0.1" friction="{mu} 0.005 0.0001"/>
    <body name="box" pos="0 0 0.02">
      <freejoint/>
      <geom type="box" size="0.1 0.1 0.02" mass="1" friction="{mu} 0.005 0.0001"/>
    </body>
  </worldbody>
</mujoco>
"""
SLIP_M = 1e-3  # "stays put": moves less than 1 mm down the incline in 0.8 s (common practice, no source)


def box_stays(angle_deg: float, mu: float) -> float:
    """1.0 when a box of friction ``mu`` stays on an incline of ``angle_deg``, else 0.0."""
    m = mujoco.MjModel.from_xml_string(BOX_XML.format(mu=mu))
    th = math.radians(angle_deg)
    m.opt.gravity[:] = (9.81 * math.sin(th), 0.0, -9.81 * math.cos(th))  # the incline, seen from its own frame
    d = mujoco.MjData(m)
    while d.time < 0.2:  # settle the contact
        mujoco.mj_step(m, d)
    x0 = float(d.qpos[0])
    while d.time < 1.0:
        mujoco.mj_step(m, d)
    return 1.0 if abs(float(d.qpos[0]) - x0) < SLIP_M else 0.0


@pytest.mark.parametrize("mu", [0.3, 0.6, 1.2])
def test_steepest_incline_a_box_stays_on_is_atan_mu(mu):
    r = find_limit(rate_predicate(lambda a: box_stays(a, mu)), 1.0, 70.0, tol=0.05, points_per_round=2)
    expected = math.degrees(math.atan(mu))  # Coulomb: stays while tan(angle) < mu
    assert r.status == "found" and r.monotone
    assert abs(r.limit - expected) < 0.1, f"mu={mu}: found {r.limit:.3f} deg, atan(mu) = {expected:.3f} deg"
    assert r.bracket[0] <= expected + 0.05 and r.bracket[1] >= expected - 0.05
