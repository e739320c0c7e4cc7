"""Swing-leg planner: where a swinging foot lands, the path it takes there, and the
Cartesian PD force that makes the leg follow that path.

Foothold (horizontal, world frame) for a foot that lands in ``t_td`` seconds::

    p_f = h + v_cmd_hip * t_td + v_hip * T_st / 2 + k_v * (v_hip - v_cmd_hip)

``h`` is the foot's nominal position under the hip now (the nominal standing
foot position, turned by the trunk's heading only), ``v_cmd_hip`` the commanded
velocity of that point (body command turned to world plus ``yaw_rate x r``), and
``v_hip`` the measured trunk velocity. ``v_hip * T_st / 2`` is the symmetric
stance-centre term of the Raibert heuristic; ``k_v (v - v_cmd)`` is the
velocity-feedback term that steps into a velocity error to cancel it. The offset
from ``h`` is clipped to ``max_reach_m``. The landing height is the ground
estimate plus the nominal foot-site height.

Trajectory: horizontally a cubic Bezier from lift-off point to foothold with
control points (0, 0, 1, 1), i.e. ``b(s) = 3 s^2 - 2 s^3`` (zero velocity at both
ends); vertically two such cubics, up from the lift-off height to
``max(z0, zf) + swing_height_m`` in the first half of the swing and down to
``zf - touchdown_depth_m`` in the second (aiming slightly into the ground makes
contact happen on schedule when the ground estimate is a little high).

Tracking: ``u = Kp (p_des - p) + Kd (v_des - v)`` in world axes, mapped to
torques by the stack through ``tau = J^T u`` (see ``kinematics.py``), plus the
optional joint-space feed-forward of the leg's own gravity and Coriolis torques.
"""

from __future__ import annotations

import math

import numpy as np


def bezier3(s: float) -> tuple[float, float]:
    """Cubic Bezier with control points 0, 0, 1, 1: value and d/ds at ``s``."""
    if s <= 0.0:
        return 0.0, 0.0
    if s >= 1.0:
        return 1.0, 0.0
    return s * s * (3.0 - 2.0 * s), 6.0 * s * (1.0 - s)


def swing_point(p0, pf, s: float, duration_s: float, height_m: float, depth_m: float,
                apex_z: float | None = None, hold: float = 0.0):
    """Desired foot position and velocity ``(x, y, z, vx, vy, vz)`` at swing phase
    ``s`` in [0, 1], from lift-off ``p0`` to foothold ``pf`` (3-sequences).

    ``apex_z``: the apex height (world z) instead of ``max(z0, zf) + height_m`` (terrain-aware
    swing). ``hold`` in [0, 0.5): the horizontal motion waits for the first ``hold`` of the
    swing and ends ``hold`` before its end, so the foot rises before it moves toward a riser
    and comes down onto a tread vertically (0: today's path)."""
    if hold > 0.0:
        span = 1.0 - 2.0 * hold
        b, db = bezier3((s - hold) / span)
        db /= span
    # bezier3 written out (it runs three times per swinging foot per tick; same expressions)
    elif s <= 0.0:
        b = db = 0.0
    elif s >= 1.0:
        b, db = 1.0, 0.0
    else:
        b, db = s * s * (3.0 - 2.0 * s), 6.0 * s * (1.0 - s)
    rate = 1.0 / duration_s
    x0, y0, z0 = p0[0], p0[1], p0[2]
    dx, dy = pf[0] - x0, pf[1] - y0
    zf = pf[2] - depth_m
    apex = max(z0, pf[2]) + height_m if apex_z is None else apex_z
    if s < 0.5:
        h = 2.0 * s
        z_from, z_to = z0, apex
    else:
        h = 2.0 * s - 1.0
        z_from, z_to = apex, zf
    if h <= 0.0:
        bz = dbz = 0.0
    elif h >= 1.0:
        bz, dbz = 1.0, 0.0
    else:
        bz, dbz = h * h * (3.0 - 2.0 * h), 6.0 * h * (1.0 - h)
    z = z_from + (z_to - z_from) * bz
    vz = (z_to - z_from) * dbz * 2.0 * rate
    return x0 + dx * b, y0 + dy * b, z, dx * db * rate, dy * db * rate, vz


class SwingPlanner:
    """Footholds, swing trajectories and Cartesian PD for all feet.

    Parameters
    ----------
    n_feet: number of feet.
    swing_height_m: apex clearance above the higher of lift-off and landing (m).
    k_vel: velocity-feedback gain of the foothold (s): metres of extra step per
        m/s of velocity error.
    max_reach_m: clip on the horizontal foothold offset from the hip point (m).
    touchdown_depth_m: how far below the estimated ground the path ends (m).
    kp: Cartesian stiffness (N/m), scalar or per axis (3,).
    kd: Cartesian damping (N s/m), scalar or per axis (3,).

    State is kept in short Python lists (``liftoff``, ``foothold``, ``pos_des``,
    ``vel_des``; one ``[x, y, z]`` per foot): the planner runs per foot per
    tick, where list access is much cheaper than numpy element access.
    """

    def __init__(
        self,
        n_feet: int = 4,
        swing_height_m: float = 0.08,
        k_vel: float = 0.08,
        max_reach_m: float = 0.15,
        touchdown_depth_m: float = 0.01,
        kp=(600.0, 600.0, 600.0),
        kd=(15.0, 15.0, 15.0),
    ) -> None:
        self.n_feet = n_feet
        self.swing_height_m = float(swing_height_m)
        self.k_vel = float(k_vel)
        self.max_reach_m = float(max_reach_m)
        self.touchdown_depth_m = float(touchdown_depth_m)
        self.kp = [float(v) for v in np.broadcast_to(np.asarray(kp, dtype=float), (3,))]
        self.kd = [float(v) for v in np.broadcast_to(np.asarray(kd, dtype=float), (3,))]
        self.liftoff = [[0.0, 0.0, 0.0] for _ in range(n_feet)]
        self.foothold = [[0.0, 0.0, 0.0] for _ in range(n_feet)]
        self.pos_des = [[0.0, 0.0, 0.0] for _ in range(n_feet)]
        self.vel_des = [[0.0, 0.0, 0.0] for _ in range(n_feet)]
        self.apex_z: list[float | None] = [None] * n_feet   # terrain-aware apex per foot (None: default)
        self.hold = 0.0                                        # see swing_point

    def start_swing(self, foot: int, pos) -> None:
        """Record the lift-off point of ``foot``."""
        lo = self.liftoff[foot]
        lo[0], lo[1], lo[2] = float(pos[0]), float(pos[1]), float(pos[2])

    def plan_foothold(
        self,
        foot: int,
        hip_x: float,
        hip_y: float,
        off_x: float,
        off_y: float,
        v_x: float,
        v_y: float,
        vcmd_x: float,
        vcmd_y: float,
        yaw_rate_cmd: float,
        t_touchdown_s: float,
        stance_s: float,
        ground_z: float,
    ) -> list:
        """Foothold ``[x, y, z]`` of ``foot`` (stored in ``self.foothold[foot]``).

        ``(hip_x, hip_y)`` is the current nominal foot point under the hip
        (world), ``(off_x, off_y)`` its horizontal offset from the trunk origin
        (world axes, for the yaw-rate part of its commanded velocity),
        ``v`` the measured and ``vcmd`` the commanded trunk velocity (world).
        """
        vcx = vcmd_x - yaw_rate_cmd * off_y
        vcy = vcmd_y + yaw_rate_cmd * off_x
        half = 0.5 * stance_s
        k = self.k_vel
        # Raibert stance-centre term + velocity feedback, clipped; plus the hip's
        # own commanded travel until touch-down
        ox = v_x * half + k * (v_x - vcmd_x)
        oy = v_y * half + k * (v_y - vcmd_y)
        r = math.hypot(ox, oy)
        if r > self.max_reach_m:
            scale = self.max_reach_m / r
            ox *= scale
            oy *= scale
        f = self.foothold[foot]
        f[0] = hip_x + vcx * t_touchdown_s + ox
        f[1] = hip_y + vcy * t_touchdown_s + oy
        f[2] = ground_z
        return f

    def track(self, foot: int, s: float, duration_s: float, pos, vel):
        """Cartesian PD force ``(ux, uy, uz)`` on the foot toward the path point at phase ``s``."""
        px, py, pz, vx, vy, vz = swing_point(self.liftoff[foot], self.foothold[foot], s, duration_s,
                                             self.swing_height_m, self.touchdown_depth_m,
                                             self.apex_z[foot], self.hold)
        pd, vd = self.pos_des[foot], self.vel_des[foot]
        pd[0], pd[1], pd[2] = px, py, pz
        vd[0], vd[1], vd[2] = vx, vy, vz
        kp, kd = self.kp, self.kd
        return (kp[0] * (px - pos[0]) + kd[0] * (vx - vel[0]),
                kp[1] * (py - pos[1]) + kd[1] * (vy - vel[1]),
                kp[2] * (pz - pos[2]) + kd[2] * (vz - vel[2]))
