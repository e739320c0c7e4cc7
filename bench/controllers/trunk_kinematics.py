"""Foot positions and velocities relative to the trunk, from joint readings alone.

What a state estimator needs from the legs: where each foot is with respect to
the trunk origin and how fast it moves with respect to it, without knowing
where the trunk is in the world. The nominal robot model (robot-only) is posed
with its trunk at the origin, at rest, turned to ``orientation`` (default the
identity: results in the trunk frame; set to the IMU's quaternion: results in
world axes, already rotated), joints at ``joint_pos`` and trunk angular
velocity ``gyro`` (body frame); then ``mj_kinematics``, ``mj_comPos``,
``mj_comVel`` and one ``mj_objectVelocity`` per foot site (world axes,
centred at the site). With the trunk origin at rest at the world origin, a
site's world position *is* its position relative to the trunk origin, and its
velocity is ``w x r + J_q qdot``, the foot's velocity relative to the trunk
origin (``w`` the trunk's angular velocity).

Every result is written into arrays allocated once in the constructor.
"""

from __future__ import annotations

import mujoco
import numpy as np


def _as_slice(idx):
    """``slice`` equal to an index array when it is contiguous and increasing, else the array."""
    idx = np.asarray(idx, dtype=np.int64)
    if len(idx) and np.array_equal(idx, np.arange(idx[0], idx[0] + len(idx))):
        return slice(int(idx[0]), int(idx[0]) + len(idx))
    return idx


class TrunkFrameFeet:
    """Foot kinematics of the nominal robot relative to its trunk.

    Attributes refreshed by :meth:`update`: ``foot_pos`` (F,3) foot-site
    positions relative to the trunk origin, m; ``foot_vel`` (F,3) their
    velocities relative to the trunk origin, m/s (includes the trunk's
    rotation, ``gyro x r``); ``foot_angvel`` (F,3) angular velocity of each
    foot's body (trunk rotation included), rad/s, which says how fast a round
    foot rolls; ``rot`` (9,) the posed trunk's rotation matrix, row-major. All
    in the trunk frame while ``orientation`` is the identity (the default), in
    world axes once it is set to the trunk's orientation in the world.

    ``orientation`` (4,) ``w, x, y, z``: the trunk's orientation to pose the
    model at, written in place (``kin.orientation[:] = quat``); it need not be
    of unit length (normalised as MuJoCo does).

    Constant: ``foot_radius_m`` (F,) height of each foot site above the ground
    it touches (the sphere radius for sphere feet, else 0).
    """

    def __init__(self, robot) -> None:
        self.model = m = robot.model
        self.data = d = mujoco.MjData(m)
        self.n_feet = nf = int(robot.num_feet)
        qa, va = int(robot.trunk_qpos_adr), int(robot.trunk_dof_adr)
        d.qpos[:] = robot.nominal_qpos
        d.qpos[qa:qa + 3] = 0.0
        d.qpos[qa + 3:qa + 7] = (1.0, 0.0, 0.0, 0.0)
        d.qvel[:] = 0.0
        self.orientation = d.qpos[qa + 3:qa + 7]
        self._angvel = d.qvel[va + 3:va + 6]
        self._qpos, self._qvel = d.qpos, d.qvel
        self._jq = _as_slice(robot.joint_qpos_adr)     # a slice when contiguous: no index work per tick
        self._jv = _as_slice(robot.joint_dof_adr)
        self._sites = [int(s) for s in robot.foot_site_ids]
        self._site_idx = np.asarray(self._sites, dtype=np.int64)
        # one (rotation, translation) velocity row per foot, as mj_objectVelocity writes it
        self.foot_vel6 = np.zeros((nf, 6))
        self._vel_rows = [self.foot_vel6[i] for i in range(nf)]
        self.foot_angvel = self.foot_vel6[:, :3]
        self.foot_vel = self.foot_vel6[:, 3:]
        self.foot_pos = np.zeros((nf, 3))
        self.rot = d.xmat[int(robot.trunk_body_id)]
        self._site_xpos = d.site_xpos
        self._site_type = int(mujoco.mjtObj.mjOBJ_SITE)
        radius = np.zeros(nf)
        for i, g in enumerate(getattr(robot, "foot_geom_ids", ())):
            if int(m.geom_type[g]) == int(mujoco.mjtGeom.mjGEOM_SPHERE):
                radius[i] = float(m.geom_size[g][0])
        self.foot_radius_m = radius

    def update(self, joint_pos: np.ndarray, joint_vel: np.ndarray, gyro: np.ndarray) -> None:
        """Pose the legs from joint readings (rad, rad/s) and trunk angular velocity (body, rad/s)."""
        m, d = self.model, self.data
        self._qpos[self._jq] = joint_pos
        self._qvel[self._jv] = joint_vel
        self._angvel[:] = gyro
        mujoco.mj_kinematics(m, d)
        mujoco.mj_comPos(m, d)
        mujoco.mj_comVel(m, d)
        obj_vel, site = mujoco.mj_objectVelocity, self._site_type
        for s, row in zip(self._sites, self._vel_rows):
            obj_vel(m, d, site, s, row, 0)
        np.take(self._site_xpos, self._site_idx, axis=0, out=self.foot_pos)
