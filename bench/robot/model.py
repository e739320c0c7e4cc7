"""The nominal robot: a robot-only MuJoCo model plus every id a consumer needs.

Owns `NominalRobot`, the view of a robot that controllers are allowed to see
(no floor, no terrain, no payloads: only what the robot's own MJCF says), and
`load_robot_spec`, the one place the robot MJCF is turned into an `MjSpec`.
All manifest names are resolved to ids once, here; consumers index arrays.
"""

from __future__ import annotations

import copy

import mujoco
import numpy as np

from bench.robot.manifest import RobotManifest
from bench.sensing_info import SensingInfo


def load_robot_spec(manifest: RobotManifest) -> mujoco.MjSpec:
    """A fresh MjSpec of the robot MJCF with the bench's solver options applied."""
    spec = mujoco.MjSpec.from_file(str(manifest.mjcf_path))
    # MuJoCo's sparse constraint Jacobian path has a solver bug we avoid everywhere.
    spec.option.jacobian = mujoco.mjtJacobian.mjJAC_DENSE
    return spec


def _ids(model: mujoco.MjModel, kind: mujoco.mjtObj, names) -> np.ndarray:
    return np.array([mujoco.mj_name2id(model, kind, n) for n in names], dtype=np.int64)


def _private_copy(manifest: RobotManifest) -> RobotManifest:
    twin = copy.deepcopy(manifest)
    for value in vars(twin).values():
        if isinstance(value, np.ndarray):
            value.setflags(write=False)   # deepcopy gives writable arrays; the manifest's are read-only
    return twin


class NominalRobot:
    """Robot-only model (floating base, gravity on, no floor) and resolved ids, manifest order.

    What a controller gets in ``reset(robot, control_dt)``. The attributes below are the stable public
    API (a test checks that each exists with the type stated); arrays are read-only. ``J`` is the number
    of joints (manifest ``joints`` order, which is also the order of ``Observation.joint_pos`` and of the
    torques ``step`` returns) and ``F`` the number of feet (manifest ``feet`` order, as
    ``Observation.foot_contact``). Ids index the arrays of ``model`` (and of an ``MjData`` made from it);
    they are not valid in the simulated world's model, which the controller never sees.

    Attributes
    ----------
    manifest : RobotManifest
        A private, frozen copy of the robot manifest (names, limits, pose); changing it changes nothing else.
    model : MjModel
        The robot-only MuJoCo model compiled from the robot's MJCF (dense Jacobians, no floor): for the
        controller's own kinematics and dynamics (``mj_kinematics``, ``mj_jac``, ``mj_rne``...).
    mass_kg : float
        Total mass of the model, kg (``mj_getTotalmass``); payloads are not included.
    trunk_body_id : int
        Body id of the trunk (the body with the free joint).
    trunk_qpos_adr : int
        First of the trunk's 7 ``qpos`` entries: position (3, m, world) then quaternion (w, x, y, z).
    trunk_dof_adr : int
        First of the trunk's 6 ``qvel`` entries: linear velocity (3, m/s, world) then angular (3, rad/s, body).
    imu_site_id : int
        Site id of the IMU (manifest ``imu_site``).
    sensor_ids : dict[str, int]
        Sensor id per role (``orientation``, ``gyro``, ``accelerometer``).
    sensor_adr : dict[str, int]
        First ``sensordata`` index per role.
    joint_ids : ndarray[int64] (J,)
        Joint ids, manifest order.
    joint_qpos_adr : ndarray[int64] (J,)
        ``qpos`` index of each joint.
    joint_dof_adr : ndarray[int64] (J,)
        ``qvel``/``qfrc`` index of each joint.
    joint_range : ndarray[float64] (J, 2)
        Lower and upper joint limit, rad (meaningful where ``joint_limited``).
    joint_limited : ndarray[bool] (J,)
        Whether each joint has a range.
    actuator_ids : ndarray[int64] (J,)
        Actuator id driving each joint (manifest ``actuators``).
    foot_site_ids : ndarray[int64] (F,)
        Site id of each foot's contact point.
    foot_geom_ids : ndarray[int64] (F,)
        Geom id of each foot (the one whose contacts count as foot contacts).
    fall_geom_ids : ndarray[int64] (G,)
        Geoms whose touching the ground is a fall.
    torque_limits : ndarray[float64] (J,)
        Largest absolute torque per joint, N m; the runner clips to it (or to less, under a derate fault).
    nominal_pose : ndarray[float64] (J,)
        Standing joint angles, rad.
    nominal_height : float
        Reference standing height of the trunk origin above flat ground, m: the manifest's value, against
        which the height criteria measure (for quad12 a settled stand with a joint PD; see the docs'
        criteria section for its spread).
    nominal_qpos : ndarray[float64] (nq,)
        Full ``qpos``: trunk upright at ``nominal_height`` above the origin, joints at ``nominal_pose``.
    trunk_inertia_body : ndarray[float64] (3, 3)
        Whole-robot inertia about its centre of mass in the trunk frame at ``nominal_qpos``, kg m^2.
    com_offset_trunk : ndarray[float64] (3,)
        Whole-robot centre of mass relative to the trunk origin in the trunk frame at ``nominal_qpos``, m.
    num_joints : int
        ``J`` (a property).
    num_feet : int
        ``F`` (a property).
    sensing : object, optional
        A ``SensingInfo``: what the controller senses beyond the standard observation (whether the true
        state is given, the height-scan points, the foot-force mode, joint torques), from the scenario's
        ``sensing:`` key, set before ``reset``; the defaults (true state given, nothing else) otherwise.
    """

    def __init__(self, manifest: RobotManifest):
        # A private copy: a controller that changes its manifest (even with object.__setattr__)
        # cannot change the one the world, the fall check and the scoring were built from.
        self.manifest = _private_copy(manifest)
        manifest = self.manifest
        self.model: mujoco.MjModel = load_robot_spec(manifest).compile()
        m = self.model
        self.mass_kg = float(mujoco.mj_getTotalmass(m))

        self.trunk_body_id = int(mujoco.mj_name2id(m, mujoco.mjtObj.mjOBJ_BODY, manifest.trunk))
        free = [j for j in range(m.njnt) if m.jnt_bodyid[j] == self.trunk_body_id
                and int(m.jnt_type[j]) == int(mujoco.mjtJoint.mjJNT_FREE)][0]
        self.trunk_qpos_adr = int(m.jnt_qposadr[free])      # 7 values: pos(3), quat wxyz(4)
        self.trunk_dof_adr = int(m.jnt_dofadr[free])        # 6 values: linvel world(3), angvel body(3)
        self.imu_site_id = int(mujoco.mj_name2id(m, mujoco.mjtObj.mjOBJ_SITE, manifest.imu_site))
        self.sensor_ids = {role: int(mujoco.mj_name2id(m, mujoco.mjtObj.mjOBJ_SENSOR, name))
                           for role, name in manifest.sensors.items()}
        self.sensor_adr = {role: int(m.sensor_adr[i]) for role, i in self.sensor_ids.items()}

        self.joint_ids = _ids(m, mujoco.mjtObj.mjOBJ_JOINT, manifest.joints)
        self.joint_qpos_adr = m.jnt_qposadr[self.joint_ids].astype(np.int64)
        self.joint_dof_adr = m.jnt_dofadr[self.joint_ids].astype(np.int64)
        self.joint_range = m.jnt_range[self.joint_ids].copy()
        self.joint_limited = m.jnt_limited[self.joint_ids].astype(bool)
        self.actuator_ids = _ids(m, mujoco.mjtObj.mjOBJ_ACTUATOR, manifest.actuators)
        self.foot_site_ids = _ids(m, mujoco.mjtObj.mjOBJ_SITE, [f.site for f in manifest.feet])
        self.foot_geom_ids = _ids(m, mujoco.mjtObj.mjOBJ_GEOM, [f.geom for f in manifest.feet])
        self.fall_geom_ids = _ids(m, mujoco.mjtObj.mjOBJ_GEOM, manifest.fall_geoms)

        self.torque_limits = np.array(manifest.torque_limits, dtype=float)
        self.nominal_pose = np.array(manifest.nominal_pose, dtype=float)
        self.nominal_height = float(manifest.nominal_height)
        for arr in (self.joint_ids, self.joint_qpos_adr, self.joint_dof_adr, self.joint_range, self.joint_limited,
                    self.actuator_ids, self.foot_site_ids, self.foot_geom_ids, self.fall_geom_ids,
                    self.torque_limits, self.nominal_pose):
            arr.setflags(write=False)

        # What the controller senses beyond the standard observation; the episode sets the scenario's.
        self.sensing: SensingInfo = SensingInfo()
        self.nominal_qpos = self._nominal_qpos()
        self.trunk_inertia_body, self.com_offset_trunk = self._nominal_inertia()
        for arr in (self.nominal_qpos, self.trunk_inertia_body, self.com_offset_trunk):
            arr.setflags(write=False)

    @property
    def num_joints(self) -> int:
        return len(self.joint_ids)

    @property
    def num_feet(self) -> int:
        return len(self.foot_site_ids)

    def _nominal_qpos(self) -> np.ndarray:
        """Full qpos: trunk upright at nominal_height above the origin, joints at nominal_pose."""
        qpos = self.model.qpos0.copy()
        a = self.trunk_qpos_adr
        qpos[a:a + 3] = (0.0, 0.0, self.nominal_height)
        qpos[a + 3:a + 7] = (1.0, 0.0, 0.0, 0.0)
        qpos[self.joint_qpos_adr] = self.nominal_pose
        return qpos

    def _nominal_inertia(self) -> tuple[np.ndarray, np.ndarray]:
        """Whole-robot inertia about its COM and the COM offset, both in the trunk frame.

        With the robot posed at `nominal_qpos`, mj_kinematics places the bodies,
        mj_comPos computes each body's inertia (`cinert`) about the tree's COM
        (`subtree_com` of the root) in world axes, and mj_crb sums those over the
        subtree into composite inertias (`crb`). The trunk is the tree root, so
        `crb[trunk]` is the whole robot's inertia about its COM; its layout is
        (Ixx, Iyy, Izz, Ixy, Ixz, Iyz, m*c(3), m). It is rotated into the trunk frame.
        """
        m = self.model
        d = mujoco.MjData(m)
        d.qpos[:] = self.nominal_qpos
        mujoco.mj_kinematics(m, d)
        mujoco.mj_comPos(m, d)
        mujoco.mj_crb(m, d)
        b = self.trunk_body_id
        c = d.crb[b]
        inertia_world = np.array([[c[0], c[3], c[4]],
                                  [c[3], c[1], c[5]],
                                  [c[4], c[5], c[2]]])
        rot = d.xmat[b].reshape(3, 3)              # trunk frame -> world
        inertia_trunk = rot.T @ inertia_world @ rot
        com_offset = rot.T @ (d.subtree_com[b] - d.xpos[b])
        return 0.5 * (inertia_trunk + inertia_trunk.T), com_offset

    def __repr__(self) -> str:
        return (f"NominalRobot({self.manifest.name!r}, joints={self.num_joints}, "
                f"feet={self.num_feet}, mass_kg={self.mass_kg:.3f})")


def _attribute_section(doc: str) -> dict[str, tuple[str, str]]:
    """``name -> (type, meaning)`` from the Attributes section of a numpy-style docstring."""
    import inspect
    import re

    section = inspect.cleandoc(doc).split("Attributes\n----------\n", 1)[1]
    out: dict[str, list[str]] = {}
    name = None
    for line in section.splitlines():
        head = re.match(r"^(\w+) : (.+)$", line)
        if head:
            name = head[1]
            out[name] = [head[2], ""]
        elif name and line.strip():
            out[name][1] = (out[name][1] + " " + line.strip()).strip()
    return {k: (t, m) for k, (t, m) in out.items()}


#: What each public attribute of `NominalRobot` holds and its declared type (``ndarray[int64] (J,)``),
#: read from its docstring's Attributes section, the one place they are written. Published by
#: `python -m bench.docgen` in docs/reference/controller-api.md; tests check that every attribute has an
#: entry and has the type stated.
ATTRIBUTE_TYPES = {k: t for k, (t, _) in _attribute_section(NominalRobot.__doc__).items()}
ATTRIBUTE_DOCS = {k: m for k, (_, m) in _attribute_section(NominalRobot.__doc__).items()}
