"""World building: a validated Scenario -> one compiled MuJoCo model with named handles.

The robot's MJCF is loaded with ``mujoco.MjSpec``; terrain, payloads, a light and
cameras are added through the same model-editing API (no XML templates), and the
result is compiled once. Every name the episode runner needs is resolved to an
id here, so the runner's hot loop touches only arrays.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path

import mujoco
import numpy as np

from bench.faults import WorldContext, group_by_kind
from bench.fileio import write_atomic
from bench.robot.locate import resolve_robot
from bench.robot.manifest import RobotManifest
from bench.robot.model import load_robot_spec
from bench.world.payloads import PayloadSpec, add_payload
from bench.world.terrain import Terrain, build_terrain


@dataclass
class PayloadHandle:
    """Ids of one payload in the compiled world."""

    name: str
    body_id: int
    geom_id: int
    dof_adr: tuple[int, ...]
    qpos_adr: tuple[int, ...]
    unit_inertia: np.ndarray
    spec: object  # the scenario payload dataclass


@dataclass
class World:
    """A compiled world and the ids the runner and scoring need."""

    model: mujoco.MjModel
    spec: mujoco.MjSpec
    robot: RobotManifest
    terrain: Terrain
    trunk_body_id: int
    joint_qpos_adr: np.ndarray
    joint_dof_adr: np.ndarray
    actuator_ids: np.ndarray
    foot_site_ids: np.ndarray
    foot_geom_ids: np.ndarray
    fall_geom_ids: np.ndarray
    terrain_geom_ids: np.ndarray
    robot_body_ids: np.ndarray
    payloads: list[PayloadHandle]
    imu_quat_adr: int
    imu_gyro_adr: int
    imu_accel_adr: int
    root_qpos_adr: int
    root_dof_adr: int
    initial_qpos: np.ndarray
    cameras: dict[str, int] = field(default_factory=dict)

    @property
    def carried_body_ids(self) -> np.ndarray:
        """Robot bodies plus payload bodies: what ``total_mass`` and ``com_pos`` cover."""
        return np.concatenate([self.robot_body_ids, [p.body_id for p in self.payloads]]).astype(int)


def manifest_for(scenario) -> RobotManifest:
    ref = scenario.robot
    if getattr(ref, "manifest", None):
        return resolve_robot(str(ref.manifest))
    return resolve_robot(ref.name or "quad12")


def _add_visuals(spec: mujoco.MjSpec, trunk_name: str) -> None:
    spec.add_texture(name="ground_tex", type=mujoco.mjtTexture.mjTEXTURE_2D,
                     builtin=mujoco.mjtBuiltin.mjBUILTIN_CHECKER, width=256, height=256,
                     rgb1=[0.50, 0.55, 0.48], rgb2=[0.44, 0.49, 0.42])
    mat = spec.add_material(name="ground_mat", texrepeat=[8, 8], reflectance=0.0)
    mat.textures[mujoco.mjtTextureRole.mjTEXROLE_RGB] = "ground_tex"
    light = spec.worldbody.add_light(name="sun", pos=[0, 0, 6], dir=[0.2, 0.3, -1], castshadow=False,
                                     diffuse=[0.8, 0.8, 0.8])
    if hasattr(mujoco, "mjtLightType"):      # MuJoCo >= 3.3.1 names the light type
        light.type = mujoco.mjtLightType.mjLIGHT_DIRECTIONAL
    else:                                    # older releases have a flag
        light.directional = True
    trunk = spec.body(trunk_name)
    # A tracking camera (follows the trunk position, not its orientation).
    trunk.add_camera(name="track", mode=mujoco.mjtCamLight.mjCAMLIGHT_TRACKCOM,
                     pos=[-0.4, -1.6, 0.5], xyaxes=[0.97, -0.24, 0, 0.08, 0.33, 0.94])
    spec.worldbody.add_camera(name="side", pos=[2.0, -4.0, 1.0], xyaxes=[1, 0, 0, 0, 0.24, 0.97])
    spec.worldbody.add_camera(name="top", pos=[1.0, 0.0, 3.2], xyaxes=[1, 0, 0, 0, 1, 0])


def build_world(scenario, manifest: RobotManifest | None = None) -> World:
    """Compile ``scenario`` into a :class:`World`."""
    manifest = manifest or manifest_for(scenario)
    spec = load_robot_spec(manifest)
    spec.modelname = f"bench_{getattr(scenario, 'slug', scenario.name)}"
    spec.option.timestep = float(scenario.timestep)
    spec.option.jacobian = mujoco.mjtJacobian.mjJAC_DENSE
    spec.option.integrator = mujoco.mjtIntegrator.mjINT_IMPLICITFAST
    spec.visual.quality.shadowsize = 0
    _add_visuals(spec, manifest.trunk)

    robot_body_names = [b.name for b in spec.bodies if b.name and b.name != "world"]

    terrain = build_terrain(spec, list(scenario.terrain), float(scenario.ground.friction), int(scenario.seed))

    trunk = spec.body(manifest.trunk)
    payload_specs: list[PayloadSpec] = [add_payload(spec, trunk, p) for p in scenario.payloads]

    # What a fault kind needs in the model (a lock's equality constraint), added by the kind itself.
    for kind, items in group_by_kind(getattr(scenario, "faults", ())):
        if kind.build_world is not None:
            kind.build_world(items, WorldContext(spec=spec, scenario=scenario))

    model = spec.compile()
    name2id = lambda objtype, name: mujoco.mj_name2id(model, objtype, name)  # noqa: E731
    OBJ = mujoco.mjtObj

    jids = [name2id(OBJ.mjOBJ_JOINT, j) for j in manifest.joints]
    trunk_id = name2id(OBJ.mjOBJ_BODY, manifest.trunk)
    root_joint = model.body_jntadr[trunk_id]
    payloads = []
    for ps, p in zip(payload_specs, scenario.payloads):
        bid = name2id(OBJ.mjOBJ_BODY, ps.body)
        pj = [name2id(OBJ.mjOBJ_JOINT, j) for j in ps.joints]
        payloads.append(PayloadHandle(
            name=ps.name, body_id=bid, geom_id=name2id(OBJ.mjOBJ_GEOM, ps.geom),
            dof_adr=tuple(int(model.jnt_dofadr[j]) for j in pj),
            qpos_adr=tuple(int(model.jnt_qposadr[j]) for j in pj),
            unit_inertia=ps.unit_inertia, spec=p,
        ))

    def sensor_adr(name: str) -> int:
        sid = name2id(OBJ.mjOBJ_SENSOR, name)
        return int(model.sensor_adr[sid])

    world = World(
        model=model, spec=spec, robot=manifest, terrain=terrain,
        trunk_body_id=trunk_id,
        joint_qpos_adr=np.array([model.jnt_qposadr[j] for j in jids], dtype=int),
        joint_dof_adr=np.array([model.jnt_dofadr[j] for j in jids], dtype=int),
        actuator_ids=np.array([name2id(OBJ.mjOBJ_ACTUATOR, a) for a in manifest.actuators], dtype=int),
        foot_site_ids=np.array([name2id(OBJ.mjOBJ_SITE, f.site) for f in manifest.feet], dtype=int),
        foot_geom_ids=np.array([name2id(OBJ.mjOBJ_GEOM, f.geom) for f in manifest.feet], dtype=int),
        fall_geom_ids=np.array([name2id(OBJ.mjOBJ_GEOM, g) for g in manifest.fall_geoms], dtype=int),
        terrain_geom_ids=np.array([name2id(OBJ.mjOBJ_GEOM, g) for g in terrain.geom_names], dtype=int),
        robot_body_ids=np.array([name2id(OBJ.mjOBJ_BODY, b) for b in robot_body_names], dtype=int),
        payloads=payloads,
        imu_quat_adr=sensor_adr(manifest.sensors["orientation"]),
        imu_gyro_adr=sensor_adr(manifest.sensors["gyro"]),
        imu_accel_adr=sensor_adr(manifest.sensors["accelerometer"]),
        root_qpos_adr=int(model.jnt_qposadr[root_joint]),
        root_dof_adr=int(model.jnt_dofadr[root_joint]),
        initial_qpos=np.zeros(model.nq),
        cameras={n: name2id(OBJ.mjOBJ_CAMERA, n) for n in ("track", "side", "top")},
    )
    world.initial_qpos = initial_qpos(world, scenario)
    return world


def initial_qpos(world: World, scenario) -> np.ndarray:
    """Trunk at the start pose above the ground under it, joints in the nominal pose."""
    model = world.model
    q = model.qpos0.copy()
    init = scenario.initial
    x, y = float(init.x), float(init.y)
    # Feet land no lower than the ground: the trunk goes at the nominal height above
    # the highest ground under the trunk or any foot (the nominal foot layout, yawed).
    yaw = math.radians(float(init.yaw_deg))
    feet = _nominal_foot_xy(world)
    c, s = math.cos(yaw), math.sin(yaw)
    px = np.concatenate([[x], x + c * feet[:, 0] - s * feet[:, 1]])
    py = np.concatenate([[y], y + s * feet[:, 0] + c * feet[:, 1]])
    ground = float(np.max(world.terrain.height_at(px, py)))
    a = world.root_qpos_adr
    q[a:a + 3] = [x, y, ground + world.robot.nominal_height + float(init.height_offset)]
    q[a + 3:a + 7] = [math.cos(yaw / 2), 0.0, 0.0, math.sin(yaw / 2)]
    q[world.joint_qpos_adr] = world.robot.nominal_pose
    return q


def _nominal_foot_xy(world: World) -> np.ndarray:
    """Foot positions (x, y) in the trunk frame with the trunk at the origin in the nominal pose."""
    m = world.model
    d = mujoco.MjData(m)
    a = world.root_qpos_adr
    d.qpos[:] = m.qpos0
    d.qpos[a:a + 7] = [0, 0, 0, 1, 0, 0, 0]
    d.qpos[world.joint_qpos_adr] = world.robot.nominal_pose
    mujoco.mj_kinematics(m, d)
    return d.site_xpos[world.foot_site_ids, :2].copy()


def export_mjcf(world: World, path: str | Path) -> None:
    """Write the compiled world as MJCF that loads in MuJoCo on its own."""
    write_atomic(path, world.spec.to_xml().encode("utf-8"))
