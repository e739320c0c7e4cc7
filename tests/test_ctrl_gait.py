"""Gait scheduler: phases, contact schedule, swing phase and jolt-free start/stop."""

import numpy as np
import pytest

from bench.controllers.gait import GaitScheduler

DT = 0.002


def _run(g, seconds, run=True):
    rows = []
    for _ in range(int(round(seconds / DT))):
        g.update(DT, run)
        rows.append((g.phi, g.contact.copy(), g.swing_phase.copy(), g.load.copy(), g.running))
    return rows


def test_stand_is_all_contact_full_load():
    g = GaitScheduler()
    rows = _run(g, 1.0, run=False)
    for phi, c, s, load, running in rows:
        assert c.all() and (load == 1).all() and (s == 0).all() and not running
    assert g.mode == "stand"


@pytest.mark.parametrize("period, duty", [(0.4, 0.6), (0.5, 0.7), (0.3, 0.5)])
def test_trot_schedule(period, duty):
    g = GaitScheduler(period_s=period, duty=duty, load_ramp=0.0 if duty == 0.5 else 0.05)
    rows = _run(g, 4 * period)
    contact = np.array([r[1] for r in rows])
    # diagonal pairs move together, opposite pairs half a period apart
    np.testing.assert_array_equal(contact[:, 0], contact[:, 3])
    np.testing.assert_array_equal(contact[:, 1], contact[:, 2])
    # stance fraction equals the duty factor
    assert contact.mean(axis=0) == pytest.approx([duty] * 4, abs=0.02)
    # never fewer than two feet down
    assert contact.sum(axis=1).min() == 2
    # swing phase in [0, 1], increasing through a swing at 1 / swing duration
    swing = np.array([r[2] for r in rows])
    assert swing.min() >= 0.0 and swing.max() <= 1.0
    rate = np.diff(swing[:, 0])[(~contact[1:, 0]) & (~contact[:-1, 0])] / DT
    assert rate == pytest.approx(np.full(rate.shape, 1.0 / g.swing_duration_s), rel=1e-6)
    # a swing lasts (1 - duty) * period
    lifts = np.flatnonzero(contact[:-1, 0] & ~contact[1:, 0])
    lands = np.flatnonzero(~contact[:-1, 0] & contact[1:, 0])
    lands = lands[lands > lifts[0]]
    n = min(len(lifts), len(lands))
    assert (lands[:n] - lifts[:n]) * DT == pytest.approx((1 - duty) * period, abs=2 * DT)
    # swing feet carry no load
    load = np.array([r[3] for r in rows])
    assert (load[~contact] == 0).all()


def test_start_and_stop_do_not_jolt():
    g = GaitScheduler(period_s=0.4, duty=0.6, load_ramp=0.05, min_run_s=0.3)
    rows = _run(g, 0.2, run=False) + _run(g, 1.03, run=True) + _run(g, 0.6, run=False) + _run(g, 0.5, run=True)
    load = np.array([r[3] for r in rows])
    running = np.array([r[4] for r in rows])
    # a ramp of 0.05 * 0.4 s = 20 ms over a C1 smoothstep: at most 1.5 * DT / 20 ms per tick
    assert np.abs(np.diff(load, axis=0)).max() <= 1.5 * DT / 0.02 + 1e-9
    # it stopped and restarted
    assert running[120] and not running[-260] and running[-1]
    # phase is continuous: frozen while standing, advancing by DT / period while running
    phi = np.array([r[0] for r in rows])
    step = np.mod(np.diff(phi), 1.0)
    assert step.max() <= DT / 0.4 + 1e-9


def test_stop_waits_for_min_run_and_lands_in_double_support():
    g = GaitScheduler(period_s=0.4, duty=0.6, min_run_s=0.5)
    _run(g, 0.1, run=True)
    rows = _run(g, 0.3, run=False)
    assert all(r[4] for r in rows)  # still stepping before min_run_s
    rows = _run(g, 0.5, run=False)
    assert not g.running and g.contact.all() and (g.load == 1).all()


def test_time_to_touchdown():
    g = GaitScheduler(period_s=0.4, duty=0.6)
    _run(g, 0.05)
    for i in range(4):
        if g.contact[i]:
            assert g.time_to_touchdown_s(i) == 0.0
        else:
            assert 0 < g.time_to_touchdown_s(i) <= g.swing_duration_s


# ------------------------------------------------------------------ gaits other than the trot

from bench.controllers.gait import GAIT_OFFSETS, GAIT_TUNING  # noqa: E402

FL, FR, RL, RR = range(4)


def _hinted(gait, seconds=3.0):
    g = GaitScheduler(period_s=0.32, duty=0.6, load_ramp=0.05)
    g.request(gait)
    rows = _run(g, seconds)
    return g, np.array([r[1] for r in rows]), np.array([r[3] for r in rows])


@pytest.mark.parametrize("gait, together, apart", [
    ("pace", [(FL, RL), (FR, RR)], [(FL, FR), (FL, RR)]),
    ("bound", [(FL, FR), (RL, RR)], [(FL, RL), (FL, RR)]),
])
def test_pace_and_bound_pair_the_right_legs(gait, together, apart):
    g, contact, _ = _hinted(gait)
    spec = GAIT_TUNING[gait]
    assert (g.gait, g.period_s, g.duty) == (gait, spec["period_s"], spec["duty"])
    for i, j in together:
        np.testing.assert_array_equal(contact[:, i], contact[:, j])
    for i, j in apart:
        # half a cycle apart: the states agree only while both stand, 2 d - 1 of the time
        assert np.mean(contact[:, i] == contact[:, j]) == pytest.approx(2 * g.duty - 1, abs=0.03)
    assert contact.mean(axis=0) == pytest.approx([g.duty] * 4, abs=0.02)
    assert contact.sum(axis=1).min() == 2


def test_walk_lifts_one_leg_at_a_time_in_order_rl_fl_rr_fr():
    g, contact, load = _hinted("walk", seconds=4.0)
    assert g.duty >= 0.75
    assert (~contact).sum(axis=1).max() == 1            # never two feet off
    assert contact.mean(axis=0) == pytest.approx([g.duty] * 4, abs=0.02)
    lifts = [(k, i) for k in range(1, len(contact)) for i in range(4) if contact[k - 1, i] and not contact[k, i]]
    order = [i for _, i in lifts]
    cycle = [RL, FL, RR, FR]
    assert len(order) >= 8
    assert all(cycle[(cycle.index(a) + 1) % 4] == b for a, b in zip(order, order[1:]))   # a rotation of the cycle
    gaps = np.diff([k for k, _ in lifts]) * DT
    assert gaps == pytest.approx(np.full(len(gaps), g.period_s / 4), abs=1.5 * DT)
    # all four feet fully loaded between two swings: the walk has its stand points
    assert (load.min(axis=1) == 1.0).any()


def test_every_tuned_gait_has_full_load_stand_points():
    """The stand-point condition of the module docstring holds for every tuned gait."""
    for gait, spec in GAIT_TUNING.items():
        gap = 0.25 if gait == "walk" else 0.5
        assert spec["duty"] - (1 - gap) >= 2 * spec["load_ramp"] - 1e-12, gait
        assert len(GAIT_OFFSETS[gait]) == 4


def _switch_rows(script):
    """Run ``[(seconds, run, gait or None), ...]``; return per-tick rows and the ticks where the gait changed."""
    g = GaitScheduler(period_s=0.32, duty=0.6, load_ramp=0.05, min_run_s=0.3)
    rows, gaits = [], []
    for seconds, run, gait in script:
        if gait is not None:
            g.request(gait)
        for _ in range(int(round(seconds / DT))):
            g.update(DT, run)
            rows.append((g.contact.copy(), g.load.copy(), g.running, g.phase.copy()))
            gaits.append(g.gait)
    switches = [k for k in range(1, len(gaits)) if gaits[k] != gaits[k - 1]]
    return g, rows, gaits, switches


def test_gait_changes_happen_with_every_foot_down_and_fully_loaded():
    g, rows, gaits, switches = _switch_rows([
        (0.3, False, None), (1.0, True, "trot"), (1.0, True, "bound"), (1.0, True, "pace"),
        (1.5, True, "walk"), (1.0, True, "trot"), (1.0, False, "stand" if False else None)])
    assert [gaits[k] for k in switches] == ["bound", "pace", "walk", "trot"]
    load = np.array([r[1] for r in rows])
    contact = np.array([r[0] for r in rows])
    for k in switches:
        # at the switch tick, and the tick before it in the old gait, every foot stands with load 1
        assert contact[k].all() and (load[k] == 1.0).all()
        assert contact[k - 1].all() and (load[k - 1] >= 1.0 - 1e-9).all()
        # it keeps stepping: the switch does not stop the gait
        assert rows[k + 1][2]
    # no load jumps anywhere (load ramps of the shortest tuned gait: 0.05 * 0.16 s = 8 ms over a smoothstep)
    shortest = min(0.05 * 0.32, *(v["load_ramp"] * v["period_s"] for v in GAIT_TUNING.values()))
    assert np.abs(np.diff(load, axis=0)).max() <= 1.5 * DT / shortest + 1e-9
    # contacts never jump from swing to a different gait's swing at the switch: the first lift-off after a
    # switch is preceded by a load ramp-down of that foot
    for k in switches:
        nxt = next(j for j in range(k, len(contact)) if not contact[j].all())
        lifted = ~contact[nxt]
        assert (load[nxt - 1][lifted] < 0.5).all()
    assert not g.running and contact[-1].all()


def test_a_switch_picks_the_stand_point_closest_in_stance_progress():
    """Trot -> walk: the first walk step is taken by a leg of the trot pair that has stood longest."""
    g, rows, gaits, switches = _switch_rows([(0.6, True, "trot"), (1.0, True, "walk")])
    k = switches[0]
    contact = np.array([r[0] for r in rows])
    landings = [j for j in range(1, k) if (~contact[j - 1] & contact[j]).any()]
    landed_last = set(np.flatnonzero(~contact[landings[-1] - 1] & contact[landings[-1]]))
    nxt = next(j for j in range(k, len(contact)) if not contact[j].all())
    first_lifted = set(np.flatnonzero(~contact[nxt]))
    assert len(first_lifted) == 1 and first_lifted.isdisjoint(landed_last)
    # and the stance progress (phase / duty) of every leg moved as little as the walk's stand points allow
    before = rows[k - 1][3] / 0.6
    after = rows[k][3] / g.duty
    assert np.abs(np.minimum(after, 1) - np.minimum(before, 1)).max() < 0.35


def test_standing_scheduler_takes_a_new_gait_at_once_and_an_unknown_one_is_refused():
    g = GaitScheduler(period_s=0.32, duty=0.6)
    g.request("bound")
    assert g.gait == "bound" and not g.running and g.contact.all() and (g.load == 1).all()
    g.request("bound")   # the same gait again: nothing pending
    assert g.switches == 1
    with pytest.raises(ValueError, match="unknown gait 'gallop'"):
        g.request("gallop")
