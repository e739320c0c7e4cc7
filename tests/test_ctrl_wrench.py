"""Desired body wrench: gravity compensation from the nominal model, PD terms,
and the SO(3)-log orientation error (reference: scipy.spatial.transform.Rotation)."""

import numpy as np
import pytest
from scipy.spatial.transform import Rotation  # reference

from bench.controllers.wrench import DesiredWrench

M = 12.0
INERTIA = np.diag([0.1, 0.25, 0.3])
Z3 = np.zeros(3)
I3 = np.eye(3)


def _make(**kw):
    return DesiredWrench(M, INERTIA, kp_pos=(40, 50, 100), kd_pos=(10, 12, 20),
                         kp_rot=(200, 250, 150), kd_rot=(25, 30, 20), **kw)


def test_at_the_desired_state_it_is_pure_gravity_compensation():
    w = _make().compute(np.array([0.1, 0.2, 0.3]), Z3, I3, Z3, np.array([0.1, 0.2, 0.3]), Z3, I3, Z3)
    np.testing.assert_allclose(w, [0, 0, M * 9.81, 0, 0, 0], atol=1e-12)


def test_position_and_velocity_terms():
    wr = _make()
    w = wr.compute(np.array([0.0, 0.0, 0.25]), np.array([0.1, 0.0, 0.0]), I3, Z3,
                   np.array([0.05, -0.02, 0.30]), np.zeros(3), I3, Z3)
    np.testing.assert_allclose(w[0:3], M * np.array([40 * 0.05 - 10 * 0.1, 50 * -0.02, 100 * 0.05 + 9.81]))
    np.testing.assert_allclose(wr.error_state[0:3], [-0.05, 0.02, -0.05])
    np.testing.assert_allclose(wr.error_state[6:9], [0.1, 0.0, 0.0])


@pytest.mark.parametrize("seed", range(10))
def test_orientation_error_is_the_so3_log_and_restores(seed):
    rng = np.random.default_rng(seed)
    actual = Rotation.from_rotvec(rng.normal(scale=0.8, size=3))
    desired = Rotation.from_rotvec(rng.normal(scale=0.8, size=3))
    wr = _make()
    R, Rd = actual.as_matrix(), desired.as_matrix()
    w = wr.compute(Z3, Z3, R, Z3, Z3, Z3, Rd, Z3)
    e_body = (actual.inv() * desired).as_rotvec()            # rotation from actual to desired, body axes
    np.testing.assert_allclose(wr.error_state[3:6], -e_body, atol=1e-9)
    expected = R @ INERTIA @ (np.array([200, 250, 150]) * e_body)
    np.testing.assert_allclose(w[3:6], expected, atol=1e-9)
    # the torque turns the body toward the desired attitude (positive work along e)
    assert np.dot(w[3:6], R @ e_body) > 0


def test_small_roll_gives_restoring_torque():
    wr = _make()
    R = Rotation.from_euler("x", 0.1).as_matrix()
    w = wr.compute(Z3, Z3, R, Z3, Z3, Z3, I3, Z3)
    assert w[3] == pytest.approx(-0.1 * 200 * 0.1, rel=1e-6)   # -theta * kp_roll * Ixx
    assert abs(w[4]) < 1e-9 and abs(w[5]) < 1e-9


def test_angular_velocity_error_and_yaw_rate_command():
    wr = _make()
    R = Rotation.from_euler("z", 0.7).as_matrix()
    w = wr.compute(Z3, Z3, R, np.array([0.0, 0.0, 0.2]), Z3, Z3, R, np.array([0.0, 0.0, 0.5]))
    np.testing.assert_allclose(wr.error_state[9:12], [0, 0, -0.3], atol=1e-12)
    assert w[5] == pytest.approx(0.3 * 20 * 0.3)


def test_feed_forward_slot_scales_with_nominal_mass_and_inertia():
    wr = _make()
    wr.a_ff[:] = [1.0, 0.0, 2.0, 0.5, 0.0, 0.0]
    w = wr.compute(Z3, Z3, I3, Z3, Z3, Z3, I3, Z3)
    np.testing.assert_allclose(w, [M * 1.0, 0, M * (2.0 + 9.81), 0.1 * 0.5, 0, 0], atol=1e-12)
