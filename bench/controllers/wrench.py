"""Desired body wrench: PD on the trunk pose and twist plus gravity compensation.

Uses only the *nominal* robot (mass ``m`` and whole-body inertia ``I_b`` about the
centre of mass in the trunk frame). With position ``p``, world velocity ``v``,
rotation ``R`` (trunk to world) and body angular velocity ``w``::

    a_lin = Kp_p (p_des - p) + Kd_p (v_des - v) + a_ff_lin          (world, m/s^2)
    e_R   = log(R^T R_des)                                           (body, rad)
    a_ang = Kp_R e_R + Kd_w (R^T w_des_world - w) + a_ff_ang         (body, rad/s^2)
    F     = m (a_lin + g e_z)
    T     = R (I_b a_ang)

``(F, T)`` is the wrench the ground must apply about the COM (world axes). The
orientation error goes through the SO(3) logarithm, so it is exact for large
errors and has no Euler-angle singularity. ``a_ff`` is an acceleration-level
feed-forward slot: the L1 augmentation writes its adaptive term there.

The error state is also exposed in the form the L1 block uses: per channel
(x, y, z world; roll, pitch, yaw body) the tracking error ``actual - desired``
and its rate, see :attr:`DesiredWrench.error_state`.
"""

from __future__ import annotations

import numpy as np

from bench.controllers import so3

GRAVITY = 9.81


class DesiredWrench:
    """PD + gravity-compensation wrench on the single rigid body.

    Parameters
    ----------
    mass_kg: nominal mass.
    inertia_body: (3,3) nominal inertia about the COM, trunk frame.
    kp_pos, kd_pos: (3,) linear stiffness (1/s^2) and damping (1/s), x y z world.
    kp_rot, kd_rot: (3,) angular stiffness and damping, roll pitch yaw body.
    The gains are accelerations per unit error, so they are the reference
    model's natural-frequency squared and twice damping ratio times frequency.
    """

    def __init__(
        self,
        mass_kg: float,
        inertia_body: np.ndarray,
        kp_pos=(50.0, 50.0, 100.0),
        kd_pos=(14.0, 14.0, 20.0),
        kp_rot=(300.0, 300.0, 100.0),
        kd_rot=(35.0, 35.0, 20.0),
        gravity: float = GRAVITY,
    ) -> None:
        self.mass_kg = float(mass_kg)
        self.inertia = np.array(inertia_body, dtype=float)
        self.kp_pos = np.array(kp_pos, dtype=float)
        self.kd_pos = np.array(kd_pos, dtype=float)
        self.kp_rot = np.array(kp_rot, dtype=float)
        self.kd_rot = np.array(kd_rot, dtype=float)
        self.kp = np.concatenate([self.kp_pos, self.kp_rot])
        self.kd = np.concatenate([self.kd_pos, self.kd_rot])
        self.gravity = float(gravity)
        self._mg = self.mass_kg * self.gravity
        self.wrench = np.zeros(6)
        self.a_ff = np.zeros(6)
        self.accel = np.zeros(6)         # commanded (x y z world, roll pitch yaw body) accelerations
        self.error_state = np.zeros(12)  # [e_pos(3), e_rot(3), e_vel(3), e_angvel(3)], actual - desired
        # per-tick arithmetic is on Python floats (3-vectors: far cheaper than numpy calls)
        self._kp = [float(v) for v in self.kp]
        self._kd = [float(v) for v in self.kd]
        self._inertia = [[float(v) for v in row] for row in self.inertia]
        self._inv_inertia = np.linalg.inv(self.inertia)
        self._body3 = np.zeros(3)
        self._ang3 = np.zeros(3)
        self._es = [0.0] * 12
        self._rel = np.zeros((3, 3))
        self._log = np.zeros(3)

    def update_errors(self, p, v, rot, w_body, p_des, v_des, rot_des, w_des_world) -> np.ndarray:
        """Refresh :attr:`error_state` (actual - desired). Inputs are 3-sequences
        (``rot``/``rot_des`` 3x3 arrays)."""
        np.matmul(rot.T, rot_des, out=self._rel)
        lx, ly, lz = so3.so3_log(self._rel, out=self._log).tolist()   # body rotation toward desired
        r = rot.tolist()
        wx, wy, wz = w_des_world[0], w_des_world[1], w_des_world[2]
        es = self._es
        es[0] = p[0] - p_des[0]; es[1] = p[1] - p_des[1]; es[2] = p[2] - p_des[2]
        es[3] = -lx; es[4] = -ly; es[5] = -lz
        es[6] = v[0] - v_des[0]; es[7] = v[1] - v_des[1]; es[8] = v[2] - v_des[2]
        # w_body - R^T w_des
        es[9] = w_body[0] - (r[0][0] * wx + r[1][0] * wy + r[2][0] * wz)
        es[10] = w_body[1] - (r[0][1] * wx + r[1][1] * wy + r[2][1] * wz)
        es[11] = w_body[2] - (r[0][2] * wx + r[1][2] * wy + r[2][2] * wz)
        self._rot_list = r
        self.error_state[:] = es
        return self.error_state

    def set_rot_gains(self, kp_rot, kd_rot) -> None:
        """Replace the attitude stiffness and damping (roll pitch yaw) from the next wrench on."""
        self.kp_rot[:] = kp_rot
        self.kd_rot[:] = kd_rot
        self.kp[3:6] = self.kp_rot
        self.kd[3:6] = self.kd_rot
        self._kp = [float(v) for v in self.kp]
        self._kd = [float(v) for v in self.kd]

    def accel_of(self, dw) -> list[float]:
        """The accelerations (x y z world, roll pitch yaw body) a wrench ``dw`` (F world, T world
        about the COM) gives the nominal body at the attitude of the last :meth:`update_errors`:
        ``dF / m`` and ``I^-1 R^T dT``, the inverse of the scaling in :meth:`compute_wrench`."""
        m = self.mass_kg
        r = self._rot_list
        tx, ty, tz = dw[3], dw[4], dw[5]
        b = self._body3                 # R^T dT
        b[0] = r[0][0] * tx + r[1][0] * ty + r[2][0] * tz
        b[1] = r[0][1] * tx + r[1][1] * ty + r[2][1] * tz
        b[2] = r[0][2] * tx + r[1][2] * ty + r[2][2] * tz
        ax, ay, az = np.matmul(self._inv_inertia, b, out=self._ang3).tolist()
        return [dw[0] / m, dw[1] / m, dw[2] / m, ax, ay, az]

    def compute_wrench(self, rot=None) -> np.ndarray:
        """Desired wrench (6,) = (F world, T world about the COM) from the last
        errors (``rot`` as given to :meth:`update_errors`)."""
        es, kp, kd = self._es, self._kp, self._kd
        ff = self.a_ff.tolist()
        acc = [ff[0] - kp[0] * es[0] - kd[0] * es[6], ff[1] - kp[1] * es[1] - kd[1] * es[7],
               ff[2] - kp[2] * es[2] - kd[2] * es[8], ff[3] - kp[3] * es[3] - kd[3] * es[9],
               ff[4] - kp[4] * es[4] - kd[4] * es[10], ff[5] - kp[5] * es[5] - kd[5] * es[11]]
        self.accel[:] = acc
        m = self.mass_kg
        ax, ay, az = acc[3], acc[4], acc[5]
        i = self._inertia
        tx = i[0][0] * ax + i[0][1] * ay + i[0][2] * az
        ty = i[1][0] * ax + i[1][1] * ay + i[1][2] * az
        tz = i[2][0] * ax + i[2][1] * ay + i[2][2] * az
        r = self._rot_list
        w = self.wrench
        w[:] = (m * acc[0], m * acc[1], m * acc[2] + self._mg,
                r[0][0] * tx + r[0][1] * ty + r[0][2] * tz,
                r[1][0] * tx + r[1][1] * ty + r[1][2] * tz,
                r[2][0] * tx + r[2][1] * ty + r[2][2] * tz)
        return w

    def compute(self, p, v, rot, w_body, p_des, v_des, rot_des, w_des_world) -> np.ndarray:
        """``update_errors`` then ``compute_wrench``."""
        self.update_errors(p, v, rot, w_body, p_des, v_des, rot_des, w_des_world)
        return self.compute_wrench(rot)
