"""Disturbances apply the force they promise, drawn reproducibly from the seed.

Reference for all of them: the impulse-momentum theorem (Newton's second law
integrated over time), checked on the robot floating with gravity off and out of
reach of the ground, so that the disturbance is the only external force.
"""

from __future__ import annotations

import math

import mujoco
import numpy as np
import pytest

from bench.controllers.simple import ZeroController
from bench.robot.model import NominalRobot
from bench.sim.episode import run_episode
from bench.sim.events import compile_forces, push_train_draws
from bench.world.build import build_world

TRAIN = """
    name: gusts
    duration: 1.2
    seed: {seed}
    initial: {{height_offset: 1.0}}
    payloads:
      - {{name: tank, type: shifting, mass: 2.0, size: [0.1, 0.1, 0.1], axis: y, stiffness: 300, damping: 3}}
    disturbances:
      - push_train: {{start: 0.2, end: 0.7, count: 5, magnitude: [20, 60], duration: [0.02, 0.08],
                      direction: {direction}, point: [0.1, 0.05, 0.02]}}
"""


def _floating(sc):
    world = build_world(sc)
    world.model.opt.gravity[:] = 0.0
    ep = run_episode(world, sc, ZeroController(), NominalRobot(world.robot))
    assert ep.status == "completed", ep.reason
    return world, ep.trace


def _com_velocity(t, com, t0, t1):
    """Centre-of-mass velocity over [t0, t1] by a least-squares line (it is constant when no force acts)."""
    sel = (t >= t0) & (t <= t1)
    return np.array([np.polyfit(t[sel], com[sel, i], 1)[0] for i in range(3)])


@pytest.mark.parametrize("direction", ["horizontal", "any"])
def test_push_train_impulse_equals_the_momentum_change(write_scenario, load_one, direction):
    sc = load_one(write_scenario(TRAIN.format(seed=4, direction=direction)))
    world, tr = _floating(sc)
    dt = float(world.model.opt.timestep)
    draws = push_train_draws(sc.disturbances[0], sc.seed, 0)
    assert len(draws) == 5
    # Each push acts over whole physics steps: the impulse is force x (steps x dt).
    sched, _ = compile_forces(sc.disturbances, sc.seed, dt, sc.duration)
    impulse = (sched.force * ((sched.k1 - sched.k0) * dt)[:, None]).sum(axis=0)
    drawn = sum(f * d for _, d, f in draws)
    # Rounding each end to a step moves an impulse by at most |f| dt (half a step at either end).
    assert np.abs(impulse - drawn).max() <= sum(np.linalg.norm(f) for _, _, f in draws) * dt + 1e-12
    last_end = max(t + d for t, d, _ in draws)
    assert last_end < 0.85
    mass = mujoco.mj_getTotalmass(world.model)                 # MuJoCo's own total (robot + tank)
    assert mass == pytest.approx(14.0)
    dv = _com_velocity(tr["t"], tr["com_pos"], 0.9, 1.19) - _com_velocity(tr["t"], tr["com_pos"], 0.0, 0.19)
    # Impulse-momentum: J = M dv (internal forces, here the sloshing tank and the legs, cancel out).
    np.testing.assert_allclose(mass * dv, impulse, atol=2e-3 * np.linalg.norm(impulse) + 1e-3)


def test_push_train_draws_are_in_range_and_reproducible(write_scenario, load_one):
    sc = load_one(write_scenario(TRAIN.format(seed=4, direction="horizontal")))
    d = sc.disturbances[0]
    draws = push_train_draws(d, 4, 0)
    times = [t for t, _, _ in draws]
    assert times == sorted(times) and all(0.2 <= t <= 0.7 for t in times)
    for _, dur, f in draws:
        assert 0.02 <= dur <= 0.08
        assert 20 <= np.linalg.norm(f) <= 60
        assert f[2] == 0.0                          # horizontal
    again = push_train_draws(d, 4, 0)
    other = push_train_draws(d, 5, 0)
    for a, b in zip(draws, again):
        assert a[0] == b[0] and a[1] == b[1] and np.array_equal(a[2], b[2])
    assert any(not np.allclose(a[2], b[2]) for a, b in zip(draws, other))
    # The scenario seed decides the episode: two runs of the same scenario record the same forces.
    _, tr1 = _floating(sc)
    _, tr2 = _floating(sc)
    np.testing.assert_array_equal(tr1["ext_force"], tr2["ext_force"])
    assert np.abs(tr1["ext_force"]).max() > 19.0


def test_steady_force_accelerates_the_com_at_f_over_m(write_scenario, load_one):
    # Reference: Newton's second law, a_com = F / M, over the interval of the force, and the same velocity after.
    sc = load_one(write_scenario("""
        name: tow
        duration: 1.0
        initial: {height_offset: 1.0}
        disturbances:
          - steady_force: {at: 0.2, duration: 0.5, force: [14.0, -6.0, 3.0], point: [0.2, 0.0, 0.0]}
    """))
    world, tr = _floating(sc)
    mass = mujoco.mj_getTotalmass(world.model)
    t, com = tr["t"], tr["com_pos"]
    sel = (t > 0.25) & (t < 0.65)
    accel = np.array([2.0 * np.polyfit(t[sel], com[sel, i], 2)[0] for i in range(3)])
    np.testing.assert_allclose(accel, np.array([14.0, -6.0, 3.0]) / mass, rtol=2e-3)
    dv = _com_velocity(t, com, 0.75, 0.99) - _com_velocity(t, com, 0.0, 0.19)
    np.testing.assert_allclose(mass * dv, np.array([14.0, -6.0, 3.0]) * 0.5, atol=5e-3)
    on = (t >= 0.2) & (t < 0.7)
    np.testing.assert_array_equal(tr["ext_force"][on], np.broadcast_to([14.0, -6.0, 3.0], tr["ext_force"][on].shape))
    assert not tr["ext_force"][~on].any()


def test_steady_force_without_duration_lasts_to_the_end(write_scenario, load_one):
    sc = load_one(write_scenario("""
        name: wind
        duration: 0.5
        disturbances:
          - steady_force: {at: 0.1, force: [0, 8, 0]}
    """))
    sched, events = compile_forces(sc.disturbances, sc.seed, sc.timestep, sc.duration)
    assert sched.k0[0] == 100 and sched.k1[0] == 500
    assert math.isclose(events[0].t_end, 0.5)
