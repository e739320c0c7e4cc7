"""Rotation helpers of scoring against scipy.spatial.transform.Rotation (the reference)."""

import numpy as np
from scipy.spatial.transform import Rotation

from bench.scoring.metrics import quat_rotate, quat_to_rpy


def test_quat_to_rpy_matches_scipy_intrinsic_zyx():
    rng = np.random.default_rng(0)
    R = Rotation.random(200, random_state=rng)
    xyzw = R.as_quat()
    wxyz = np.concatenate([xyzw[:, 3:], xyzw[:, :3]], axis=1)
    yaw_pitch_roll = R.as_euler("ZYX")  # intrinsic z-y-x: yaw, pitch, roll
    rpy = quat_to_rpy(wxyz)
    np.testing.assert_allclose(rpy[:, 0], yaw_pitch_roll[:, 2], atol=1e-9)
    np.testing.assert_allclose(rpy[:, 1], yaw_pitch_roll[:, 1], atol=1e-9)
    np.testing.assert_allclose(rpy[:, 2], yaw_pitch_roll[:, 0], atol=1e-9)


def test_quat_rotate_matches_scipy_apply():
    rng = np.random.default_rng(1)
    R = Rotation.random(50, random_state=rng)
    v = rng.standard_normal((50, 3))
    xyzw = R.as_quat()
    wxyz = np.concatenate([xyzw[:, 3:], xyzw[:, :3]], axis=1)
    np.testing.assert_allclose(quat_rotate(wxyz, v), R.apply(v), atol=1e-12)
