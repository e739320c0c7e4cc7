"""L1 adaptive block on a plant with a known answer.

Plant: a vertical 1-D mass under gravity. The controller believes it is
``m0 = 1 kg`` (gravity compensation and PD scaled by ``m0``); the truth is
``m = 1.5 kg``. Baseline: ``F = m0 (-Kp e - Kd e_dot + g + u)``, ``e = x - r``,
step ``r = 0.1 m`` at t = 0. Control at 500 Hz with the force held between
samples (the plant is integrated exactly).

Analytic PD-only behaviour (``k = m0 / m``):
``e_ddot + k Kd e_dot + k Kp e = g (k - 1)``, so the steady-state error is
``e_ss = -g (m/m0 - 1) / Kp`` (= -4.9 cm here) and the transient is the
second-order response with ``wn^2 = k Kp``, ``2 zeta wn = k Kd``.

Reference model (what the baseline would do with the right mass):
``e_ddot = -Kp e - Kd e_dot`` (critically damped, wn = 10 rad/s).

Bound for the L1-augmented loop. The deviation ``d = x - x_ref`` obeys
``d = H(s) (u + sigma)`` with ``H(s) = 1 / (s^2 + Kd s + Kp)``. The adaptive law
estimates ``sigma`` within one sample up to the factor ``exp(-a Ts)``, and the
filter passes ``C(s) = wc / (s + wc)`` of it, so
``u + sigma ~ (1 - C(s)) sigma + C(s) [(1 - exp(-a Ts)) sigma + (sigma(t) - sigma(t - Ts))]``
and::

    |d| <= ||H (1 - C)||_L1 sigma_max + ||H C||_L1 ((1 - exp(-a Ts)) sigma_max + Ts sigma_rate_max)
           + ||H C||_inf-peak * Ts * sigma_jump

where for an input-gain error ``sigma = (1 - m/m0)(x_ddot + g)``; along the
reference response ``sigma_max = |1 - m/m0| (max |x_ref_ddot| + g)``,
``sigma_rate_max = |1 - m/m0| max |x_ref_dddot|`` and the step makes
``sigma`` jump by ``sigma_jump = |1 - m/m0| Kp |r|`` at t = 0 (seen one sample
late). A 25 % margin covers the difference between the actual and the reference
accelerations inside ``sigma``. All norms are computed numerically below.
"""

import numpy as np
import pytest
from scipy import signal

from bench.controllers.l1 import L1Adaptive

G = 9.81
M0, M_TRUE = 1.0, 1.5
KP, KD = 100.0, 20.0
TS = 0.002
STEP = 0.1
T_END = 2.0
WC = 100.0
POLE = 5.0


def _simulate(use_l1: bool, m_true: float = M_TRUE):
    am = np.array([[0.0, 1.0], [-KP, -KD]])
    bm = np.array([[0.0], [1.0]])
    l1 = L1Adaptive(am, bm, TS, bandwidth=WC, predictor_pole=POLE)
    x, v = 0.0, 0.0
    n = int(round(T_END / TS))
    xs = np.empty(n + 1)
    xs[0] = x
    state = np.zeros(2)
    for k in range(n):
        e, ed = x - STEP, v
        state[0], state[1] = e, ed
        u = float(l1.update(state)[0]) if use_l1 else 0.0
        force = M0 * (-KP * e - KD * ed + G + u)
        a = force / m_true - G
        x += v * TS + 0.5 * a * TS * TS
        v += a * TS
        xs[k + 1] = x
    return np.arange(n + 1) * TS, xs


def _reference(t):
    wn = np.sqrt(KP)
    return STEP - STEP * (1.0 + wn * t) * np.exp(-wn * t)


def _pd_analytic(t):
    k = M0 / M_TRUE
    wn = np.sqrt(k * KP)
    zeta = k * KD / (2.0 * wn)
    e_ss = -G * (M_TRUE / M0 - 1.0) / KP
    e0 = -STEP
    wd = wn * np.sqrt(1.0 - zeta**2)
    e = e_ss + (e0 - e_ss) * np.exp(-zeta * wn * t) * (np.cos(wd * t) + zeta * wn / wd * np.sin(wd * t))
    return STEP + e


def _l1_norm(num, den, t_end=3.0, n=300001):
    t = np.linspace(0.0, t_end, n)
    _, y = signal.impulse((num, den), T=t)
    return np.trapezoid(np.abs(y), t), np.max(np.abs(y))


def _bound():
    h_den = [1.0, KD, KP]
    # H (1 - C) = s / ((s + wc)(s^2 + Kd s + Kp)),  H C = wc / ((s + wc)(s^2 + Kd s + Kp))
    den3 = np.polymul([1.0, WC], h_den)
    n_h1c, _ = _l1_norm([1.0, 0.0], den3)
    n_hc, peak_hc = _l1_norm([WC], den3)
    t = np.linspace(0.0, 3.0, 300001)
    wn = np.sqrt(KP)
    e0 = STEP
    xdd = e0 * wn**2 * (1.0 - wn * t) * np.exp(-wn * t)       # x_ref'' for the step
    xddd = e0 * wn**3 * (wn * t - 2.0) * np.exp(-wn * t)
    gain_err = abs(1.0 - M_TRUE / M0)
    sigma_max = gain_err * (np.max(np.abs(xdd)) + G)
    sigma_rate = gain_err * np.max(np.abs(xddd))
    sigma_jump = gain_err * KP * STEP
    gamma = (n_h1c * sigma_max
             + n_hc * ((1.0 - np.exp(-POLE * TS)) * sigma_max + TS * sigma_rate)
             + peak_hc * TS * sigma_jump)
    return 1.25 * gamma


def test_pd_only_shows_the_analytic_steady_state_and_transient():
    t, x = _simulate(use_l1=False)
    e_ss = -G * (M_TRUE / M0 - 1.0) / KP
    assert x[-1] - STEP == pytest.approx(e_ss, abs=5e-4)              # -4.9 cm
    np.testing.assert_allclose(x, _pd_analytic(t), atol=2e-3)          # ZOH at 500 Hz vs continuous
    # and it is far from the reference model
    assert np.max(np.abs(x - _reference(t))) > 0.04


def test_l1_tracks_the_reference_model_within_the_derived_bound():
    t, x = _simulate(use_l1=True)
    gamma = _bound()
    dev = np.max(np.abs(x - _reference(t)))
    assert dev <= gamma, (dev, gamma)
    # the bound itself is under 30 % of the PD-only steady-state error (4.9 cm)
    assert gamma < 0.3 * G * (M_TRUE / M0 - 1.0) / KP
    # steady state: the one-sample law leaves (1 - exp(-a Ts)) of the PD error
    e_ss_pd = G * (M_TRUE / M0 - 1.0) / KP
    assert abs(x[-1] - STEP) <= (1.0 - np.exp(-POLE * TS)) * e_ss_pd * 1.2 + 1e-5


def test_l1_settles_when_the_reference_model_does():
    t, x = _simulate(use_l1=True)
    band = 0.02 * STEP
    ref = _reference(t)
    t_ref = t[np.flatnonzero(np.abs(ref - STEP) > band)[-1] + 1]       # 0.58 s for wn = 10
    assert t_ref == pytest.approx(5.834 / np.sqrt(KP), abs=0.01)
    outside = np.flatnonzero(np.abs(x - STEP) > band)
    t_l1 = t[outside[-1] + 1]
    assert abs(t_l1 - t_ref) <= 0.05
    t_pd, x_pd = _simulate(use_l1=False)
    assert np.abs(x_pd[t_pd > 1.0] - STEP).min() > band  # PD-only never settles into the band


def test_no_model_error_means_no_adaptive_action():
    _, x_l1 = _simulate(use_l1=True, m_true=M0)
    t, x_pd = _simulate(use_l1=False, m_true=M0)
    assert np.max(np.abs(x_l1 - x_pd)) < 1e-3
    assert np.max(np.abs(x_pd - _reference(t))) < 2e-3


def test_generic_dimensions_and_clip():
    # three decoupled double integrators, two matched channels on the first two
    am = np.zeros((6, 6))
    am[0:3, 3:6] = np.eye(3)
    am[3:6, 0:3] = -4.0 * np.eye(3)
    am[3:6, 3:6] = -4.0 * np.eye(3)
    bm = np.zeros((6, 2))
    bm[3, 0] = bm[4, 1] = 1.0
    block = L1Adaptive(am, bm, 0.01, bandwidth=[20.0, 40.0], u_max=0.5)
    x = np.zeros(6)
    for _ in range(5):
        u = block.update(x)
        assert u.shape == (2,)
        x[3] += 0.1  # unmodelled acceleration on channel 0
    assert np.all(np.abs(block.u) <= 0.5)
    with pytest.raises(ValueError):
        L1Adaptive(np.eye(2), np.ones((2, 1)), 0.01, 10.0)


def test_constant_uncertainty_is_estimated_in_a_few_samples_with_the_documented_bias():
    """Piecewise-constant law: for a constant matched sigma the estimate is within
    a few per cent after one sample and settles at exp(-a Ts) sigma."""
    from scipy.linalg import expm

    am = np.array([[0.0, 1.0], [-KP, -KD]])
    bm = np.array([[0.0], [1.0]])
    block = L1Adaptive(am, bm, TS, bandwidth=40.0, predictor_pole=POLE)
    step = expm(np.block([[am, bm], [np.zeros((1, 3))]]) * TS)   # exact ZOH of the plant
    x, sigma = np.zeros(2), 2.0
    est = []
    for _ in range(400):
        u = float(block.update(x)[0])
        est.append(float(block.sigma_matched[0]))
        x = (step @ np.r_[x, sigma + u])[:2]
    assert est[1] == pytest.approx(sigma, rel=0.03)
    assert est[-1] == pytest.approx(np.exp(-POLE * TS) * sigma, rel=1e-4)
    assert -block.u[0] == pytest.approx(np.exp(-POLE * TS) * sigma, rel=1e-3)   # filtered input caught up


# ------------------------------------------------------------------ applied input, new reference model

def _block(am=None):
    am = np.array([[0.0, 1.0], [-100.0, -20.0]]) if am is None else am
    bm = np.array([[0.0], [1.0]])
    return L1Adaptive(am, bm, dt=0.002, bandwidth=40.0, predictor_pole=5.0, u_max=3.0)


def test_applied_input_advances_the_predictor_like_the_ode_with_that_input():
    """``add_applied(du)`` after ``update(x)``: the prediction is the exact one-period solution of
    ``xh_dot = As (xh - x) + Am x + Bm (u + du) + sigma_h`` (x, u, du, sigma_h held), here checked by
    integrating that ODE numerically (scipy.integrate.solve_ivp), with u clipped (u_max) as in a windup."""
    from scipy.integrate import solve_ivp

    blk = _block()
    blk.update(np.array([0.0, 0.0]))
    x = np.array([0.03, -0.2])
    xh0 = blk.x_hat.copy()
    u = blk.update(x).copy()
    assert abs(u[0]) == pytest.approx(3.0)          # clipped: the case the correction is for
    du = np.array([-1.7])
    blk.add_applied(du)
    sigma_h = blk.sigma_hat                         # from x_tilde = xh0 - x
    a_s = -blk.a * np.eye(2)

    def rhs(_t, xh):
        return a_s @ (xh - x) + blk.am @ x + blk.bm @ (u + du) + sigma_h

    sol = solve_ivp(rhs, (0.0, blk.dt), xh0, rtol=1e-12, atol=1e-14)
    np.testing.assert_allclose(blk.x_hat, sol.y[:, -1], rtol=0, atol=1e-10)


def test_new_reference_model_acts_like_a_block_built_with_it():
    am2 = np.array([[0.0, 1.0], [-400.0, -40.0]])
    changed, built = _block(), _block(am2)
    changed.set_am(am2)
    rng = np.random.default_rng(3)
    for _ in range(200):
        x = rng.normal(scale=0.05, size=2)
        np.testing.assert_array_equal(changed.update(x), built.update(x))
        np.testing.assert_array_equal(changed.x_hat, built.x_hat)
    with pytest.raises(ValueError, match="Hurwitz"):
        changed.set_am(np.array([[0.0, 1.0], [100.0, -20.0]]))
