"""Rotation helpers on SO(3) for the controller stacks.

Quaternions are ``w, x, y, z`` (MuJoCo's order) and rotate body vectors into the
world. Every function has an ``out=`` form so the hot loop can reuse arrays; the
functions only do scalar arithmetic into ``out`` (no temporaries beyond floats).
"""

from __future__ import annotations

import math

import numpy as np

_SMALL = 1e-9


def skew(v: np.ndarray, out: np.ndarray | None = None) -> np.ndarray:
    """The matrix ``[v]x`` with ``[v]x @ u == cross(v, u)``."""
    if out is None:
        out = np.empty((3, 3))
    x, y, z = float(v[0]), float(v[1]), float(v[2])
    out[0, 0] = 0.0; out[0, 1] = -z; out[0, 2] = y
    out[1, 0] = z; out[1, 1] = 0.0; out[1, 2] = -x
    out[2, 0] = -y; out[2, 1] = x; out[2, 2] = 0.0
    return out


def quat_to_mat(q: np.ndarray, out: np.ndarray | None = None) -> np.ndarray:
    """Rotation matrix of a (not necessarily unit) quaternion ``w, x, y, z``."""
    if out is None:
        out = np.empty((3, 3))
    w, x, y, z = float(q[0]), float(q[1]), float(q[2]), float(q[3])
    n = w * w + x * x + y * y + z * z
    s = 2.0 / n if n > _SMALL else 0.0
    xx, yy, zz = x * x * s, y * y * s, z * z * s
    xy, xz, yz = x * y * s, x * z * s, y * z * s
    wx, wy, wz = w * x * s, w * y * s, w * z * s
    out[0, 0] = 1.0 - yy - zz; out[0, 1] = xy - wz; out[0, 2] = xz + wy
    out[1, 0] = xy + wz; out[1, 1] = 1.0 - xx - zz; out[1, 2] = yz - wx
    out[2, 0] = xz - wy; out[2, 1] = yz + wx; out[2, 2] = 1.0 - xx - yy
    return out


def mat_to_quat(r: np.ndarray, out: np.ndarray | None = None) -> np.ndarray:
    """Unit quaternion ``w, x, y, z`` (w >= 0) of a rotation matrix."""
    if out is None:
        out = np.empty(4)
    tr = r[0, 0] + r[1, 1] + r[2, 2]
    if tr > 0.0:
        s = 2.0 * math.sqrt(tr + 1.0)
        w = 0.25 * s
        x = (r[2, 1] - r[1, 2]) / s
        y = (r[0, 2] - r[2, 0]) / s
        z = (r[1, 0] - r[0, 1]) / s
    elif r[0, 0] > r[1, 1] and r[0, 0] > r[2, 2]:
        s = 2.0 * math.sqrt(1.0 + r[0, 0] - r[1, 1] - r[2, 2])
        w = (r[2, 1] - r[1, 2]) / s
        x = 0.25 * s
        y = (r[0, 1] + r[1, 0]) / s
        z = (r[0, 2] + r[2, 0]) / s
    elif r[1, 1] > r[2, 2]:
        s = 2.0 * math.sqrt(1.0 + r[1, 1] - r[0, 0] - r[2, 2])
        w = (r[0, 2] - r[2, 0]) / s
        x = (r[0, 1] + r[1, 0]) / s
        y = 0.25 * s
        z = (r[1, 2] + r[2, 1]) / s
    else:
        s = 2.0 * math.sqrt(1.0 + r[2, 2] - r[0, 0] - r[1, 1])
        w = (r[1, 0] - r[0, 1]) / s
        x = (r[0, 2] + r[2, 0]) / s
        y = (r[1, 2] + r[2, 1]) / s
        z = 0.25 * s
    if w < 0.0:
        w, x, y, z = -w, -x, -y, -z
    out[0] = w; out[1] = x; out[2] = y; out[3] = z
    return out


def so3_exp(w: np.ndarray, out: np.ndarray | None = None) -> np.ndarray:
    """Rotation matrix ``exp([w]x)`` of a rotation vector (Rodrigues' formula)."""
    if out is None:
        out = np.empty((3, 3))
    x, y, z = float(w[0]), float(w[1]), float(w[2])
    th2 = x * x + y * y + z * z
    if th2 < 1e-12:
        a = 1.0 - th2 / 6.0
        b = 0.5 - th2 / 24.0
    else:
        th = math.sqrt(th2)
        a = math.sin(th) / th
        b = (1.0 - math.cos(th)) / th2
    out[0, 0] = 1.0 - b * (y * y + z * z); out[0, 1] = -a * z + b * x * y; out[0, 2] = a * y + b * x * z
    out[1, 0] = a * z + b * x * y; out[1, 1] = 1.0 - b * (x * x + z * z); out[1, 2] = -a * x + b * y * z
    out[2, 0] = -a * y + b * x * z; out[2, 1] = a * x + b * y * z; out[2, 2] = 1.0 - b * (x * x + y * y)
    return out


def so3_log(r: np.ndarray, out: np.ndarray | None = None) -> np.ndarray:
    """Rotation vector ``w`` with ``exp([w]x) == r``, ``|w| <= pi``.

    Goes through the quaternion so it stays accurate near 0 and near pi.
    """
    if out is None:
        out = np.empty(3)
    # nine Python floats: element access on them is far cheaper than on the array (same values)
    (r00, r01, r02), (r10, r11, r12), (r20, r21, r22) = r.tolist() if isinstance(r, np.ndarray) else r
    tr = r00 + r11 + r22
    if tr > 0.0:
        s = 2.0 * math.sqrt(tr + 1.0)
        qw = 0.25 * s
        qx = (r21 - r12) / s
        qy = (r02 - r20) / s
        qz = (r10 - r01) / s
    elif r00 > r11 and r00 > r22:
        s = 2.0 * math.sqrt(1.0 + r00 - r11 - r22)
        qw = (r21 - r12) / s
        qx = 0.25 * s
        qy = (r01 + r10) / s
        qz = (r02 + r20) / s
    elif r11 > r22:
        s = 2.0 * math.sqrt(1.0 + r11 - r00 - r22)
        qw = (r02 - r20) / s
        qx = (r01 + r10) / s
        qy = 0.25 * s
        qz = (r12 + r21) / s
    else:
        s = 2.0 * math.sqrt(1.0 + r22 - r00 - r11)
        qw = (r10 - r01) / s
        qx = (r02 + r20) / s
        qy = (r12 + r21) / s
        qz = 0.25 * s
    return _quat_log(qw, qx, qy, qz, out)


def _quat_log(qw: float, qx: float, qy: float, qz: float, out: np.ndarray) -> np.ndarray:
    if qw < 0.0:
        qw, qx, qy, qz = -qw, -qx, -qy, -qz
    sn = math.sqrt(qx * qx + qy * qy + qz * qz)
    if sn < 1e-12:
        k = 2.0 / qw if qw > _SMALL else 0.0
    else:
        k = 2.0 * math.atan2(sn, qw) / sn
    out[0] = k * qx; out[1] = k * qy; out[2] = k * qz
    return out


def quat_log(q: np.ndarray, out: np.ndarray | None = None) -> np.ndarray:
    """Rotation vector of a unit quaternion ``w, x, y, z`` (shortest, ``|w| <= pi``)."""
    if out is None:
        out = np.empty(3)
    return _quat_log(float(q[0]), float(q[1]), float(q[2]), float(q[3]), out)


def quat_mul(a: np.ndarray, b: np.ndarray, out: np.ndarray | None = None) -> np.ndarray:
    """Hamilton product ``a * b`` (rotate by ``b`` first, then ``a``)."""
    if out is None:
        out = np.empty(4)
    aw, ax, ay, az = float(a[0]), float(a[1]), float(a[2]), float(a[3])
    bw, bx, by, bz = float(b[0]), float(b[1]), float(b[2]), float(b[3])
    out[0] = aw * bw - ax * bx - ay * by - az * bz
    out[1] = aw * bx + ax * bw + ay * bz - az * by
    out[2] = aw * by - ax * bz + ay * bw + az * bx
    out[3] = aw * bz + ax * by - ay * bx + az * bw
    return out


def yaw_of_mat(r: np.ndarray) -> float:
    """Heading angle (rotation about world z) of the body x axis."""
    return math.atan2(r[1, 0], r[0, 0])


def rot_z(yaw: float, out: np.ndarray | None = None) -> np.ndarray:
    """Rotation about z by ``yaw`` rad."""
    if out is None:
        out = np.empty((3, 3))
    c, s = math.cos(yaw), math.sin(yaw)
    out[...] = ((c, -s, 0.0), (s, c, 0.0), (0.0, 0.0, 1.0))   # one assignment, not nine element writes
    return out


def roll_pitch_of_mat(r: np.ndarray) -> tuple[float, float]:
    """Roll and pitch (z-y-x Euler convention) of a rotation matrix, rad."""
    pitch = math.asin(max(-1.0, min(1.0, -r[2, 0])))
    roll = math.atan2(r[2, 1], r[2, 2])
    return roll, pitch
