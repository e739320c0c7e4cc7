"""Robot-only kinematics for the controller stacks: foot positions, velocities and
Jacobians, the centre of mass, and the map from foot forces to joint torques.

It poses the *nominal* robot model (never the world) from an observation: trunk
position and velocity as given by the caller (a state estimate; by default
``obs.privileged``), orientation ``obs.imu_quat`` (the IMU
site is taken to be aligned with the trunk frame), joints ``obs.joint_pos``; then
``mj_kinematics`` + ``mj_comPos`` and one ``mj_jacSite`` per foot. Everything is
written into arrays allocated once in the constructor (or is a view of the
model's own data arrays).

Torques: a Cartesian force ``u_i`` that leg ``i`` exerts *on its foot point*
maps to joint torques ``tau = J_i^T u_i``. For a stance foot that must receive
the ground reaction ``f_i`` the leg pushes the ground with ``-f_i``, so
``u_i = -f_i`` (:meth:`LegKinematics.torques` takes ``u`` for all feet at once).
"""

from __future__ import annotations

import mujoco
import numpy as np


def _as_slice(idx: np.ndarray):
    """``slice`` equal to an index array when it is contiguous and increasing, else the array."""
    idx = np.asarray(idx, dtype=np.int64)
    if len(idx) and np.array_equal(idx, np.arange(idx[0], idx[0] + len(idx))):
        return slice(int(idx[0]), int(idx[0]) + len(idx))
    return idx


class LegKinematics:
    """Kinematic state of the nominal robot posed from observations.

    Attributes (updated by :meth:`update`): ``foot_pos`` (F,3) world,
    ``foot_vel`` (F,3) world, ``jac`` (3F, nv) translational site Jacobians,
    ``jac_joints`` (3F, J) their joint columns in manifest order, ``com`` (3,)
    world centre of mass, ``rot`` (3,3) trunk-to-world rotation, ``bias`` (J,)
    gravity + Coriolis joint torques of the nominal model (when ``with_bias``).

    Constants: ``foot_nominal_body`` (F,3) foot positions in the trunk frame at
    the nominal pose; ``foot_height_nominal`` foot-site height above the ground
    it stands on (the sphere radius for sphere feet, else the height measured
    at the nominal pose).
    """

    def __init__(self, robot, with_bias: bool = True) -> None:
        self.robot = robot
        self.model = m = robot.model
        self.data = d = mujoco.MjData(m)
        self.nv = m.nv
        self.n_feet = int(robot.num_feet)
        self.n_joints = int(robot.num_joints)
        self.with_bias = with_bias
        qa, va = int(robot.trunk_qpos_adr), int(robot.trunk_dof_adr)
        self._base_pos = d.qpos[qa:qa + 3]
        self._base_quat = d.qpos[qa + 3:qa + 7]
        self._base_vel = d.qvel[va:va + 3]
        self._base_angvel = d.qvel[va + 3:va + 6]
        self._jq = _as_slice(robot.joint_qpos_adr)
        self._jv = _as_slice(robot.joint_dof_adr)
        self._sites = [int(s) for s in robot.foot_site_ids]
        self._site_idx = np.asarray(self._sites, dtype=np.int64)
        trunk = int(robot.trunk_body_id)

        self.jac = np.zeros((3 * self.n_feet, self.nv))
        self._jac_rows = [self.jac[3 * i:3 * i + 3] for i in range(self.n_feet)]
        self._jac_args = list(zip(self._jac_rows, self._sites))   # (rows, site) per foot, for the tick's loop
        if isinstance(self._jv, slice):
            self.jac_joints = self.jac[:, self._jv]          # a view: no copy per tick
            self._copy_jac = False
        else:
            self.jac_joints = np.zeros((3 * self.n_feet, self.n_joints))
            self._copy_jac = True
        self._jac_joints_t = self.jac_joints.T
        self.foot_pos = np.zeros((self.n_feet, 3))
        self.foot_vel = np.zeros((self.n_feet, 3))
        self._foot_vel_flat = self.foot_vel.reshape(-1)
        self.com = d.subtree_com[trunk]                       # views into MjData
        self.rot = d.xmat[trunk].reshape(3, 3)
        self._bias_full = np.zeros(self.nv)
        if isinstance(self._jv, slice):
            self.bias = self._bias_full[self._jv]
        else:
            self.bias = np.zeros(self.n_joints)
        self._qvel = d.qvel
        self._site_xpos = d.site_xpos
        self._qpos_joints = d.qpos[self._jq] if isinstance(self._jq, slice) else None   # a view
        self._qvel_joints = d.qvel[self._jv] if isinstance(self._jv, slice) else None
        feet = _as_slice(self._site_idx)
        self._feet_xpos = d.site_xpos[feet] if isinstance(feet, slice) else None        # a view

        # constants at the nominal pose
        d0 = mujoco.MjData(m)
        d0.qpos[:] = robot.nominal_qpos
        mujoco.mj_kinematics(m, d0)
        r0 = d0.xmat[trunk].reshape(3, 3)
        p0 = d0.xpos[trunk]
        self.foot_nominal_body = np.array([r0.T @ (d0.site_xpos[s] - p0) for s in self._sites])
        self.foot_height_nominal = float(np.mean(robot.nominal_height + self.foot_nominal_body[:, 2]))
        # a sphere foot's site sits one radius above the ground it touches; prefer
        # that over the standing measurement (which includes contact sink)
        geoms = getattr(robot, "foot_geom_ids", None)
        if geoms is not None and len(geoms) == self.n_feet and all(
                int(m.geom_type[g]) == int(mujoco.mjtGeom.mjGEOM_SPHERE) for g in geoms):
            self.foot_height_nominal = float(np.mean([m.geom_size[g][0] for g in geoms]))

    def update(self, obs, base_pos=None, base_linvel=None) -> None:
        """Pose the nominal model from ``obs`` and refresh every attribute.

        ``base_pos`` / ``base_linvel``: trunk position and velocity (world) to pose
        it at, e.g. a state estimate; ``None`` reads ``obs.privileged``.
        """
        m, d = self.model, self.data
        if base_pos is None or base_linvel is None:
            base_pos, base_linvel = obs.privileged.base_pos, obs.privileged.base_linvel
        self._base_pos[:] = base_pos
        self._base_quat[:] = obs.imu_quat
        if self._qpos_joints is not None:
            self._qpos_joints[:] = obs.joint_pos
        else:
            d.qpos[self._jq] = obs.joint_pos
        self._base_vel[:] = base_linvel
        self._base_angvel[:] = obs.imu_gyro
        if self._qvel_joints is not None:
            self._qvel_joints[:] = obs.joint_vel
        else:
            self._qvel[self._jv] = obs.joint_vel
        mujoco.mj_kinematics(m, d)
        mujoco.mj_comPos(m, d)
        jac_site = mujoco.mj_jacSite
        for rows, s in self._jac_args:
            jac_site(m, d, rows, None, s)
        if self._feet_xpos is not None:
            self.foot_pos[:] = self._feet_xpos
        else:
            self._site_xpos.take(self._site_idx, axis=0, out=self.foot_pos)
        np.matmul(self.jac, self._qvel, out=self._foot_vel_flat)
        if self._copy_jac:
            np.take(self.jac, self._jv, axis=1, out=self.jac_joints)
        if self.with_bias:
            mujoco.mj_comVel(m, d)
            mujoco.mj_rne(m, d, 0, self._bias_full)
            if self._copy_jac:   # joint dofs not one range: bias is not a view of _bias_full
                np.take(self._bias_full, self._jv, out=self.bias)

    def torques(self, u: np.ndarray, out: np.ndarray) -> np.ndarray:
        """``out = J^T u`` for stacked per-foot Cartesian forces ``u`` (3F,) on the feet."""
        return np.matmul(self._jac_joints_t, u, out=out)
