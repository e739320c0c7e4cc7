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
