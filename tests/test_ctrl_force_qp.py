"""Stance force QP: static balance, friction pyramid, swing feet, fallbacks, and
agreement with a second QP solver (quadprog, the reference) on random problems."""

import numpy as np
import pytest

from bench.controllers.force_qp import ForceQP

G = 9.81
MASS = 12.0
# feet of a 0.34 m x 0.26 m stance, 0.28 m below the COM
R_FEET = np.array([[0.17, 0.13, -0.28], [0.17, -0.13, -0.28], [-0.17, 0.13, -0.28], [-0.17, -0.13, -0.28]])
ALL = np.ones(4)


def _wrench_of(r, f):
    f = f.reshape(-1, 3)
    return np.concatenate([f.sum(axis=0), np.cross(r, f).sum(axis=0)])


def test_static_four_feet_carry_the_weight():
    qp = ForceQP(mu=0.6)
    w = np.array([0, 0, MASS * G, 0, 0, 0.0])
    f = qp.solve(R_FEET, w, ALL).reshape(4, 3)
    assert f[:, 2].sum() == pytest.approx(MASS * G, rel=1e-3)
    np.testing.assert_allclose(f[:, 2], MASS * G / 4, rtol=1e-3)     # symmetric stance
    np.testing.assert_allclose(f[:, 0:2], 0.0, atol=1e-3)
    np.testing.assert_allclose(_wrench_of(R_FEET, f), w, atol=0.05)
    assert qp.fallbacks == 0 and qp.solves == 1 and qp.solve_time_s > 0


def test_friction_pyramid_and_normal_bounds_hold_under_a_large_side_demand():
    mu, fmin, fmax = 0.5, 10.0, 80.0
    qp = ForceQP(mu=mu, fz_min_n=fmin, fz_max_n=fmax)
    w = np.array([200.0, -150.0, MASS * G, 3.0, -2.0, 1.0])   # asks for more than friction allows
    f = qp.solve(R_FEET, w, ALL).reshape(4, 3)
    assert np.all(np.abs(f[:, 0]) <= mu * f[:, 2] + 1e-6)
    assert np.all(np.abs(f[:, 1]) <= mu * f[:, 2] + 1e-6)
    assert np.all(f[:, 2] >= fmin - 1e-6) and np.all(f[:, 2] <= fmax + 1e-6)


def test_swing_feet_get_zero_force_and_loads_scale_bounds():
    qp = ForceQP(fz_min_n=5.0, fz_max_n=300.0)
    load = np.array([1.0, 0.0, 0.0, 0.25])   # trot pair FL+RR, RR still ramping in
    w = np.array([0, 0, MASS * G, 0, 0, 0.0])
    f = qp.solve(R_FEET, w, load).reshape(4, 3)
    np.testing.assert_array_equal(f[1], 0.0)
    np.testing.assert_array_equal(f[2], 0.0)
    assert f[3, 2] <= 0.25 * 300.0 + 1e-6
    assert f[:, 2].sum() == pytest.approx(MASS * G, rel=1e-3)


@pytest.mark.parametrize("seed", range(20))
def test_daqp_matches_reference_solver_quadprog(seed):
    rng = np.random.default_rng(seed)
    r = R_FEET + rng.normal(scale=0.03, size=(4, 3))
    w = np.array([*rng.normal(scale=30.0, size=2), MASS * G * rng.uniform(0.5, 2.0), *rng.normal(scale=5.0, size=3)])
    load = rng.choice([0.0, 0.5, 1.0], size=4)
    if (load > 0).sum() < 2:
        load[:2] = 1.0
    prev = rng.uniform(0, 50, size=12)
    results = {}
    for solver in ("daqp", "quadprog"):
        qp = ForceQP(mu=0.6, alpha=1e-3, beta=1e-3, solver=solver)
        qp.f_prev[:] = prev
        results[solver] = qp.solve(r, w, load).copy()
        assert qp.fallbacks == 0
    np.testing.assert_allclose(results["daqp"], results["quadprog"], atol=1e-3)


def test_direct_daqp_path_gives_the_same_answer():
    rng = np.random.default_rng(1)
    a, b = ForceQP(direct=False), ForceQP(direct=True)
    for _ in range(20):
        w = np.array([*rng.normal(scale=20.0, size=2), MASS * G, *rng.normal(scale=3.0, size=3)])
        np.testing.assert_allclose(a.solve(R_FEET, w, ALL), b.solve(R_FEET, w, ALL), atol=1e-6)
    with pytest.raises(ValueError):
        ForceQP(solver="quadprog", direct=True)


def test_smoothing_term_pulls_toward_previous_solution():
    # previous forces = even support plus an internal squeeze between FL and RR
    # (equal and opposite along the line joining them: zero net wrench), so only
    # the regularisation terms decide whether the squeeze is kept
    w = np.array([0, 0, MASS * G, 0, 0, 0.0])
    prev = np.tile([0.0, 0.0, MASS * G / 4], 4)
    d = (R_FEET[3] - R_FEET[0]) / np.linalg.norm(R_FEET[3] - R_FEET[0])
    prev[0:3] += 10.0 * d
    prev[9:12] -= 10.0 * d
    dist = {}
    for beta in (1e-6, 1e-2):
        qp = ForceQP(alpha=1e-4, beta=beta, mu=2.0)
        qp.f_prev[:] = prev
        dist[beta] = np.linalg.norm(qp.solve(R_FEET, w, ALL) - prev)
    assert dist[1e-2] < 0.05 * dist[1e-6]
    assert dist[1e-6] > 10.0  # with a negligible beta the squeeze is regularised away


@pytest.mark.parametrize("direct", [False, True])
def test_infeasible_solve_falls_back_and_counts(direct):
    qp = ForceQP(fz_min_n=50.0, fz_max_n=300.0, direct=direct)
    w = np.array([0, 0, MASS * G, 0, 0, 0.0])
    f0 = qp.solve(R_FEET, w, ALL).copy()
    qp.fz_min_n = 400.0                              # min above max: infeasible
    f1 = qp.solve(R_FEET, w, ALL)
    assert qp.fallbacks == 1 and not qp.last_ok
    np.testing.assert_allclose(f1, 0.9 * f0)
    load = np.array([1.0, 0.0, 0.0, 1.0])
    f2 = qp.solve(R_FEET, w, load).reshape(4, 3)
    assert qp.fallbacks == 2
    np.testing.assert_array_equal(f2[1], 0.0)
    np.testing.assert_array_equal(f2[2], 0.0)


def test_direct_daqp_is_the_default_and_bit_identical_to_the_wrapper():
    # The reference stacks call DAQP directly by default; the direct call must hand DAQP the very
    # data the qpsolvers wrapper would (same layout, same warm start), so that episodes recorded
    # either way are identical to the last bit: over a trot-like sequence of contact patterns,
    # loads and wrenches, with the warm start carried from tick to tick.
    assert ForceQP().direct and not ForceQP(solver="quadprog").direct and not ForceQP(direct=False).direct
    rng = np.random.default_rng(7)
    wrapped, direct = ForceQP(direct=False), ForceQP()
    patterns = [ALL, np.array([1.0, 0.0, 0.0, 1.0]), np.array([1.0, 0.3, 0.3, 1.0]), np.array([0.0, 1.0, 1.0, 0.0]),
                np.array([0.6, 1.0, 1.0, 0.6])]
    for k in range(200):
        r = R_FEET + rng.normal(scale=0.02, size=(4, 3))
        w = np.array([*rng.normal(scale=20.0, size=2), MASS * G * rng.uniform(0.8, 1.3), *rng.normal(scale=3.0, size=3)])
        load = patterns[(k // 7) % len(patterns)]
        np.testing.assert_array_equal(wrapped.solve(r, w, load), direct.solve(r, w, load))
    assert wrapped.fallbacks == direct.fallbacks == 0


@pytest.mark.parametrize("direct", [False, True])
def test_solver_exception_never_raises(monkeypatch, direct):
    import qpsolvers

    def boom(*a, **k):
        raise RuntimeError("solver crashed")

    qp = ForceQP(direct=direct)
    if direct:
        monkeypatch.setattr(qp, "_daqp_solve", boom)
    else:
        monkeypatch.setattr(qpsolvers, "solve_problem", boom)
    f = qp.solve(R_FEET, np.array([0, 0, MASS * G, 0, 0, 0.0]), ALL)
    assert qp.fallbacks == 1 and np.all(np.isfinite(f))
