"""The extra sensors of one episode (scenario key ``sensing:``): terrain height scan, foot forces, joint torques.

Compiled once per episode by :func:`compile_sensing` (``None`` when the scenario
configures none of them, so the tick loop then runs nothing of this module).
On each control tick the episode calls :meth:`Sensors.observe` after filling the
standard observation, and :meth:`Sensors.after_physics` after the tick's last
physics step.

Height scan. Every scan casts one ray per grid point, all in one
``mj_multiRay`` call. MuJoCo casts a batch of rays from a single origin, so the
origin is put ``RAY_ORIGIN_HEIGHT_M`` (10^7 m) above the grid centre and each
ray aims at its grid point: the rays are vertical to within 2e-7 rad for a grid
of 2 m, so a hit lands at most ``r |z_hit - z_aim| / 10^7`` m sideways of its
point (r: the point's distance from the grid centre, z_aim: trunk height minus
nominal height); a box top reads to about 1e-9 m (the rounding of a 10^7 m ray
length), a slope to about 1e-7 m, a point right on a step edge may read the riser. The rays are cast in a second ``MjData`` of
the same model in which the robot (and with it every payload) is parked
``PARK_Z_M`` below the lowest terrain, so only terrain geoms can be hit (checked
per hit as well: anything else reads NaN). Terrain is static, so that data is
posed once. On MuJoCo 3.3 and 3.4 (``mj_multiRay`` without its ``normal`` argument)
the batch call misses some terrain boxes and reads the plane below them (seen on 3.3:
a 30 m run-out box read as the ground plane 1.6 m lower, for every ray of a batch
whose origin is not right above it), so there every point gets its own, exactly
vertical ``mj_ray`` instead: the same heights as the batch gives on later versions,
to the rounding of the batch's 10^7 m ray length, at about ten times the cost per scan.

Rate and latency are whole numbers of control ticks (the scenario check says so):
a scan is taken on ticks ``0, P, 2P, ...`` and is what the controller sees from
``L`` ticks later until the next scan arrives; before the first one arrives every
point reads NaN. Noise and dropout are drawn per scan from the episode's own
sensing stream (``SeedSequence([seed, 104729, 13])``), separate from the fault
stream, so adding a sensor changes no other random draw.

Foot force. The contact forces after the tick's last physics step (MuJoCo's
``mj_contactForce`` on the foot-terrain contacts of that step, as the trace's
``foot_force`` column), held to the next control tick: the value a controller
reads at tick ``k`` is the force of the last step before it (with one physics
step per tick, exactly the trace's ``foot_force`` of tick ``k - 1``). ``normal``
sums the normal components of each foot's contacts; ``3d`` is the summed force in
world axes. Zero at tick 0.

Joint torque. ``qfrc_actuator`` at the joints: the torque the actuators applied
over the last physics step, i.e. the controller's previous answer after the
torque limits and the bench's motor faults (latency, derating, limp joints).
Zero at tick 0.
"""

from __future__ import annotations

import math

import mujoco
import numpy as np

from bench.controllers.base import SensingInfo

#: Height of the common ray origin above the grid centre, m (rays vertical to r / 1e7 rad).
RAY_ORIGIN_HEIGHT_M = 1e7
#: Where the robot is parked in the ray-casting data, m below the world origin.
PARK_Z_M = -1e6
#: mj_multiRay took a ``normal`` output argument from MuJoCo 3.5 on.
_MULTIRAY_NORMAL = "normal:" in (getattr(mujoco.mj_multiRay, "__doc__", "") or "")
#: Independent random stream of the sensing noise (with the episode seed and the episode's own constant).
SENSING_STREAM = 13


def scan_grid(hs) -> np.ndarray:
    """Point offsets (nx, ny, 2) of a scenario ``HeightScan`` in the yaw-aligned trunk frame, m."""
    nx, ny = hs.shape
    r = float(hs.resolution)
    gx = float(hs.offset[0]) + (np.arange(nx) - (nx - 1) / 2.0) * r
    gy = float(hs.offset[1]) + (np.arange(ny) - (ny - 1) / 2.0) * r
    grid = np.empty((nx, ny, 2))
    grid[:, :, 0] = gx[:, None]
    grid[:, :, 1] = gy[None, :]
    return grid


def sensing_info(sensing) -> SensingInfo:
    """The description a controller gets as ``robot.sensing`` for a scenario's ``sensing`` (or None)."""
    if sensing is None:
        return SensingInfo()
    hs = sensing.height_scan
    xy = None
    if hs is not None:
        xy = scan_grid(hs)
        xy.setflags(write=False)
    return SensingInfo(
        privileged=bool(sensing.privileged), height_scan_xy=xy,
        foot_force=None if sensing.foot_force is None else str(sensing.foot_force.mode),
        joint_torque=sensing.joint_torque is not None,
        height_scan_rate_hz=None if hs is None or hs.rate is None else float(hs.rate),
        height_scan_latency_s=0.0 if hs is None else float(hs.latency),
    )


class TerrainRays:
    """Vertical rays against the world's terrain geoms only (see the module docstring)."""

    def __init__(self, world, n_rays: int):
        m = world.model
        self.m = m
        self.d = mujoco.MjData(m)
        self.d.qpos[:] = world.initial_qpos
        self.d.qpos[world.root_qpos_adr + 2] = PARK_Z_M
        mujoco.mj_kinematics(m, self.d)
        # Index -1 (no hit) lands on the extra last entry, False.
        self.is_terrain = np.zeros(m.ngeom + 1, dtype=bool)
        self.is_terrain[np.asarray(world.terrain_geom_ids, dtype=int)] = True
        self.n = int(n_rays)
        self.origin = np.zeros(3)
        self.vec = np.zeros((self.n, 3))
        self.geomid = np.zeros(self.n, dtype=np.int32)
        self.dist = np.zeros(self.n)
        self.hit = np.zeros(self.n, dtype=bool)
        self._down = np.array([0.0, 0.0, -1.0])

    def cast(self, x: np.ndarray, y: np.ndarray, cx: float, cy: float, z_aim: float, out: np.ndarray) -> None:
        """World z of the terrain under points (x, y) (flat arrays of n) into ``out``; NaN where no terrain."""
        if not _MULTIRAY_NORMAL:   # MuJoCo 3.3 and 3.4: one vertical mj_ray per point (module docstring)
            self._cast_each(x, y, z_aim, out)
            return
        oz = z_aim + RAY_ORIGIN_HEIGHT_M
        self.origin[0], self.origin[1], self.origin[2] = cx, cy, oz
        vec = self.vec
        np.subtract(x, cx, out=vec[:, 0])
        np.subtract(y, cy, out=vec[:, 1])
        vec[:, 2] = -RAY_ORIGIN_HEIGHT_M
        mujoco.mj_multiRay(self.m, self.d, self.origin, vec.reshape(-1), None, 1, -1, self.geomid, self.dist,
                           None, self.n, mujoco.mjMAXVAL)
        # hit point z = oz + dist * vec_z (vec is not normalised: dist is in units of its length)
        np.multiply(self.dist, -RAY_ORIGIN_HEIGHT_M, out=out)
        out += oz
        np.take(self.is_terrain, self.geomid, out=self.hit)
        out[~self.hit] = np.nan

    def _cast_each(self, x: np.ndarray, y: np.ndarray, z_aim: float, out: np.ndarray) -> None:
        """``cast`` with one exactly vertical ``mj_ray`` per point, from 100 m above ``z_aim``."""
        m, d, gid, is_terrain = self.m, self.d, self.geomid[:1], self.is_terrain
        z_from = float(z_aim) + 100.0
        pnt = self.origin
        down = self._down
        ray = mujoco.mj_ray
        for k, (px, py) in enumerate(zip(x.tolist(), y.tolist())):
            pnt[0], pnt[1], pnt[2] = px, py, z_from
            dist = ray(m, d, pnt, down, None, 1, -1, gid)
            out[k] = z_from - dist if dist >= 0.0 and is_terrain[gid[0]] else math.nan

    def cast_one(self, x: float, y: float, z_from: float) -> tuple[float, int]:
        """One exactly vertical ``mj_ray`` from height ``z_from``: (terrain z or NaN, geom id)."""
        gid = np.zeros(1, dtype=np.int32)
        dist = mujoco.mj_ray(self.m, self.d, np.array([x, y, z_from]), np.array([0.0, 0.0, -1.0]), None, 1, -1, gid)
        if dist < 0 or not self.is_terrain[int(gid[0])]:
            return math.nan, int(gid[0])
        return z_from - dist, int(gid[0])


class HeightScanner:
    """The height scan of one episode: grid, rays, rate, latency, noise and dropout."""

    def __init__(self, hs, world, d: mujoco.MjData, control_rate: float, rng: np.random.Generator):
        self.grid = scan_grid(hs)
        self.nx, self.ny = self.grid.shape[:2]
        n = self.nx * self.ny
        self.gx = self.grid[:, :, 0].reshape(-1).copy()
        self.gy = self.grid[:, :, 1].reshape(-1).copy()
        self.cx, self.cy = float(hs.offset[0]), float(hs.offset[1])
        self.rays = TerrainRays(world, n)
        self.period = 1 if hs.rate is None else max(int(round(control_rate / float(hs.rate))), 1)
        self.latency = int(round(float(hs.latency) * control_rate))
        self.n_slots = -(-self.latency // self.period) + 1
        self.slots = np.full((self.n_slots, self.nx, self.ny), np.nan)
        self.poses = np.zeros((self.n_slots, 3))    # trunk x, y, yaw of each held scan
        self.noise = float(hs.noise)
        self.dropout = float(hs.dropout)
        self.rng = rng
        self._x, self._y = np.zeros(n), np.zeros(n)
        self._tmp = np.zeros(n)
        self._lost = np.zeros(n, dtype=bool)
        self.out = np.full((self.nx, self.ny), np.nan)
        self.trunk = world.trunk_body_id
        self.nominal_height = float(world.robot.nominal_height)
        self.xpos, self.xmat = d.xpos, d.xmat
        self.seen = -1          # index of the scan the controller sees, -1 none yet

    def take(self, slot: int) -> None:
        """Cast a scan at the trunk's current pose into ``slots[slot]``."""
        p = self.xpos[self.trunk]
        R = self.xmat[self.trunk]
        px, py, pz = float(p[0]), float(p[1]), float(p[2])
        yaw = math.atan2(float(R[3]), float(R[0]))
        c, s = math.cos(yaw), math.sin(yaw)
        x, y, tmp = self._x, self._y, self._tmp
        np.multiply(self.gx, c, out=x)
        np.multiply(self.gy, s, out=tmp)
        x -= tmp
        x += px
        np.multiply(self.gx, s, out=y)
        np.multiply(self.gy, c, out=tmp)
        y += tmp
        y += py
        z = self.slots[slot].reshape(-1)
        self.rays.cast(x, y, px + c * self.cx - s * self.cy, py + s * self.cx + c * self.cy,
                       pz - self.nominal_height, z)
        if self.noise > 0.0:
            self.rng.standard_normal(out=tmp)
            tmp *= self.noise
            z += tmp
        if self.dropout > 0.0:
            self.rng.random(out=tmp)
            np.less(tmp, self.dropout, out=self._lost)
            z[self._lost] = np.nan
        self.poses[slot] = (px, py, yaw)

    def observe(self, k: int, obs) -> None:
        P = self.period
        if k % P == 0:
            self.take((k // P) % self.n_slots)
        if k >= self.latency:
            self.seen = (k - self.latency) // P
            np.copyto(self.out, self.slots[self.seen % self.n_slots])
        obs.height_scan = self.out

    def seen_pose(self) -> tuple[float, float, float] | None:
        """Trunk (x, y, yaw) at the instant the scan the controller now sees was taken (tests, diagnostics)."""
        if self.seen < 0:
            return None
        x, y, yaw = self.poses[self.seen % self.n_slots]
        return float(x), float(y), float(yaw)


class Sensors:
    """The configured extra sensors of one episode."""

    def __init__(self, scenario, world, m: mujoco.MjModel, d: mujoco.MjData, contacts, seed: int,
                 control_rate: float):
        cfg = scenario.sensing
        self.rng = np.random.default_rng(np.random.SeedSequence([int(seed), 104729, SENSING_STREAM]))
        self.m, self.d = m, d
        self.scan = None if cfg.height_scan is None else HeightScanner(cfg.height_scan, world, d, control_rate,
                                                                       self.rng)
        F, J = len(world.foot_site_ids), len(world.joint_dof_adr)
        self.contacts = contacts
        self.foot_mode = None if cfg.foot_force is None else cfg.foot_force.mode
        self.foot_noise = 0.0 if cfg.foot_force is None else float(cfg.foot_force.noise)
        self.force3 = np.zeros((F, 3))            # after the last physics step
        self.force_n = np.zeros(F)
        self._flags = np.zeros(F, dtype=bool)
        if self.foot_mode is not None:
            self.foot_out = np.zeros((F, 3) if self.foot_mode == "3d" else F)
        self.torque_on = cfg.joint_torque is not None
        self.torque_noise = 0.0 if cfg.joint_torque is None else float(cfg.joint_torque.noise)
        jv = np.asarray(world.joint_dof_adr, dtype=int)
        self.jv = slice(int(jv[0]), int(jv[0]) + J) if J and np.array_equal(jv, np.arange(jv[0], jv[0] + J)) else jv
        self.torque_out = np.zeros(J)

    def observe(self, k: int, obs) -> None:
        """Fill the extra fields of tick ``k``'s observation (after the standard ones)."""
        if self.scan is not None:
            self.scan.observe(k, obs)
        if self.foot_mode is not None:
            out = self.foot_out
            np.copyto(out, self.force3 if self.foot_mode == "3d" else self.force_n)
            if self.foot_noise > 0.0:
                out += self.rng.normal(0.0, self.foot_noise, out.shape)
            obs.foot_force = out
        if self.torque_on:
            out = self.torque_out
            out[:] = self.d.qfrc_actuator[self.jv]
            if self.torque_noise > 0.0:
                out += self.rng.normal(0.0, self.torque_noise, out.shape)
            obs.joint_torque = out

    def after_physics(self) -> None:
        """After the tick's last physics step: the foot forces a controller reads next tick."""
        if self.foot_mode is None:
            return
        c = self.contacts
        self._flags[:] = False
        c.classify(self.d, self._flags)
        self.force3[:] = 0.0
        c.forces(self.m, self.d, self.force3)
        if self.foot_mode == "normal":
            c.normal_forces(self.m, self.d, self.force_n)


def compile_sensing(scenario, world, m, d, contacts, seed: int, control_rate: float) -> Sensors | None:
    """The episode's extra sensors, or None when the scenario has none (nothing then runs per tick)."""
    cfg = getattr(scenario, "sensing", None)
    if cfg is None or not cfg.any_sensor:
        return None
    return Sensors(scenario, world, m, d, contacts, seed, control_rate)
