"""SO(3) helpers, checked against the reference implementation
``scipy.spatial.transform.Rotation``."""

import numpy as np
import pytest
from scipy.spatial.transform import Rotation  # reference

from bench.controllers import so3


def _wxyz(rot: Rotation) -> np.ndarray:
    x, y, z, w = rot.as_quat()
    return np.array([w, x, y, z])


RNG = np.random.default_rng(7)
ROTS = list(Rotation.random(50, random_state=3)) + [
    Rotation.identity(),
    Rotation.from_rotvec([1e-10, 0, 0]),
    Rotation.from_rotvec([0, 0, np.pi - 1e-7]),
    Rotation.from_rotvec([np.pi / np.sqrt(2) * 0.999999, np.pi / np.sqrt(2) * 0.999999 * 0, 0]),
    Rotation.from_rotvec([0.0, 2.5, -1.2]),
]


@pytest.mark.parametrize("rot", ROTS)
def test_quat_to_mat_matches_reference(rot):
    np.testing.assert_allclose(so3.quat_to_mat(_wxyz(rot)), rot.as_matrix(), atol=1e-12)


@pytest.mark.parametrize("rot", ROTS)
def test_log_matches_reference(rot):
    ref = rot.as_rotvec()
    np.testing.assert_allclose(so3.so3_log(rot.as_matrix()), ref, atol=1e-7)
    np.testing.assert_allclose(so3.quat_log(_wxyz(rot)), ref, atol=1e-9)


@pytest.mark.parametrize("rot", ROTS)
def test_exp_matches_reference(rot):
    w = rot.as_rotvec()
    np.testing.assert_allclose(so3.so3_exp(w), Rotation.from_rotvec(w).as_matrix(), atol=1e-12)
    np.testing.assert_allclose(so3.so3_log(so3.so3_exp(w)), w, atol=1e-7)


@pytest.mark.parametrize("rot", ROTS)
def test_mat_to_quat_round_trip(rot):
    q = so3.mat_to_quat(rot.as_matrix())
    ref = _wxyz(rot)
    ref = ref if ref[0] >= 0 else -ref
    np.testing.assert_allclose(q, ref, atol=1e-9)


def test_quat_mul_matches_reference():
    for a, b in zip(Rotation.random(20, random_state=1), Rotation.random(20, random_state=2)):
        np.testing.assert_allclose(
            so3.quat_to_mat(so3.quat_mul(_wxyz(a), _wxyz(b))), (a * b).as_matrix(), atol=1e-12
        )


def test_skew_is_cross_product():
    for _ in range(10):
        v, u = RNG.normal(size=3), RNG.normal(size=3)
        np.testing.assert_allclose(so3.skew(v) @ u, np.cross(v, u), atol=1e-12)


def test_rot_z_and_yaw_and_roll_pitch_match_reference():
    for yaw, pitch, roll in RNG.uniform([-3, -1.4, -3], [3, 1.4, 3], size=(20, 3)):
        rot = Rotation.from_euler("ZYX", [yaw, pitch, roll])
        r = rot.as_matrix()
        assert so3.yaw_of_mat(r) == pytest.approx(yaw, abs=1e-9)
        assert so3.roll_pitch_of_mat(r) == pytest.approx((roll, pitch), abs=1e-9)
        np.testing.assert_allclose(so3.rot_z(yaw), Rotation.from_euler("z", yaw).as_matrix(), atol=1e-12)


def test_out_arrays_are_reused():
    out = np.empty((3, 3))
    assert so3.quat_to_mat(np.array([1.0, 0, 0, 0]), out=out) is out
    v = np.empty(3)
    assert so3.so3_log(np.eye(3), out=v) is v
