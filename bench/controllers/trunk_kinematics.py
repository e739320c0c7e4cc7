"""Foot positions and velocities relative to the trunk, in the trunk frame, from joint readings alone.

What a state estimator needs from the legs: where each foot is with respect to
the trunk origin and how fast it moves with respect to it, expressed in the
trunk frame, without knowing where the trunk is in the world. The nominal robot
model (robot-only) is posed with its trunk at the origin and unrotated, joints
at ``joint_pos`` and trunk angular velocity ``gyro`` (body frame); then
``mj_kinematics``, ``mj_comPos`` (the Jacobians need its ``cdof`` and
``subtree_com``) and one ``mj_jacSite`` per foot (translation and rotation). With the trunk frame equal
to the world frame, a site's world position *is* its trunk-frame position and
``J @ qvel`` (trunk linear velocity zero) is ``gyro x r + J_q qdot``, the foot's
velocity relative to the trunk origin seen in the trunk frame.

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
    positions relative to the trunk origin, trunk frame, m; ``foot_vel`` (F,3)
    their velocities relative to the trunk origin, trunk frame, m/s (includes
    the trunk's rotation, ``gyro x r``); ``foot_angvel`` (F,3) angular velocity
    of each foot's body (trunk rotation included), trunk frame, rad/s, which
    says how fast a round foot rolls.

    Constant: ``foot_radius_m`` (F,) height of each foot site above the ground
    it touches (the sphere radius for sphere feet, else 0).
    """

    def __init__(self, robot) -> None:
        self.model = m = robot.model
        self.data = d = mujoco.MjData(m)
        self.n_feet = int(robot.num_feet)
        qa, va = int(robot.trunk_qpos_adr), int(robot.trunk_dof_adr)
        d.qpos[:] = robot.nominal_qpos
        d.qpos[qa:qa + 3] = 0.0
        d.qpos[qa + 3:qa + 7] = (1.0, 0.0, 0.0, 0.0)
        d.qvel[:] = 0.0
        self._angvel = d.qvel[va + 3:va + 6]
        self._jq = _as_slice(robot.joint_qpos_adr)     # a slice when contiguous: no index work per tick
        self._jv = _as_slice(robot.joint_dof_adr)
        self._sites = [int(s) for s in robot.foot_site_ids]
        self._site_idx = np.asarray(self._sites, dtype=np.int64)
        self.jac = np.zeros((3 * self.n_feet, m.nv))
        self._jac_rows = [self.jac[3 * i:3 * i + 3] for i in range(self.n_feet)]
        self.jac_rot = np.zeros((3 * self.n_feet, m.nv))
        self._jac_rot_rows = [self.jac_rot[3 * i:3 * i + 3] for i in range(self.n_feet)]
        self.foot_angvel = np.zeros((self.n_feet, 3))
        self._foot_angvel_flat = self.foot_angvel.reshape(-1)
        self.foot_pos = np.zeros((self.n_feet, 3))
        self.foot_vel = np.zeros((self.n_feet, 3))
        self._foot_vel_flat = self.foot_vel.reshape(-1)
        self._qvel = d.qvel
        self._site_xpos = d.site_xpos
        radius = np.zeros(self.n_feet)
        for i, g in enumerate(getattr(robot, "foot_geom_ids", ())):
            if int(m.geom_type[g]) == int(mujoco.mjtGeom.mjGEOM_SPHERE):
                radius[i] = float(m.geom_size[g][0])
        self.foot_radius_m = radius

    def update(self, joint_pos: np.ndarray, joint_vel: np.ndarray, gyro: np.ndarray) -> None:
        """Pose the legs from joint readings (rad, rad/s) and trunk angular velocity (body, rad/s)."""
        m, d = self.model, self.data
        d.qpos[self._jq] = joint_pos
        self._qvel[self._jv] = joint_vel
        self._angvel[:] = gyro
        mujoco.mj_kinematics(m, d)
        mujoco.mj_comPos(m, d)
        rows, rot_rows = self._jac_rows, self._jac_rot_rows
        for i, s in enumerate(self._sites):
            mujoco.mj_jacSite(m, d, rows[i], rot_rows[i], s)
        np.take(self._site_xpos, self._site_idx, axis=0, out=self.foot_pos)
        np.matmul(self.jac, self._qvel, out=self._foot_vel_flat)
        np.matmul(self.jac_rot, self._qvel, out=self._foot_angvel_flat)
