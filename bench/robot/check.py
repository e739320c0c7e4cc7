"""Measuring what a robot manifest claims: the robot-only half of ``bench robot check``.

Owns :func:`measure`, which poses the nominal robot model (no world) and
returns one :class:`Measurement` per check, each with the manifest's claim,
the measured value, a tolerance and the outside relation it rests on:

- total mass: the sum of body masses against MuJoCo's ``mj_getTotalmass``;
- standing height: the trunk height at which the lowest foot point of the
  nominal pose touches flat ground (forward kinematics, ``mj_kinematics``),
  against the manifest's ``nominal_height``;
- reach: per leg, the largest distance from the leg's first joint to its foot
  over a grid of joint angles inside the ranges, and how much of it the
  nominal pose uses (a leg near full extension is near a singular pose);
- joint-limit margins of the nominal pose;
- torque to stand: each foot carrying an equal share of the weight, joint
  torques from the Jacobian-transpose relation ``tau = J^T f`` (static
  equilibrium of a serial chain), against the torque limits.

The settled stand (a joint PD on flat ground) needs the simulator and is
measured by the command, which adds it to the table.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass

import mujoco
import numpy as np

from bench.robot.model import NominalRobot

#: Standing height may differ from the manifest by this much, m: half of the 2 cm height-error budget the
#: bundled scenarios use (the bench's own choice).
HEIGHT_TOLERANCE_M = 0.01
#: A nominal pose closer than this to a joint limit is flagged, rad (common practice, no source).
LIMIT_MARGIN_MIN_RAD = 0.05
#: Share of full reach above which a standing leg is close to straight (singular), flagged (common practice,
#: no source).
REACH_SHARE_MAX = 0.95
#: Standing torque as a share of the limit above which a robot has little left for walking, warned (common
#: practice, no source); above 1 it cannot stand.
STAND_TORQUE_WARN = 0.5
GRAVITY = 9.81


@dataclass
class Measurement:
    name: str
    claimed: str
    measured: str
    tolerance: str
    ok: bool | None             # False: the manifest and the robot disagree (exit 1); None: information
    note: str = ""              # a warning or the relation used
    value: float | None = None  # the measured number, for tests and JSON


def _posed(robot: NominalRobot) -> mujoco.MjData:
    d = mujoco.MjData(robot.model)
    d.qpos[:] = robot.nominal_qpos
    mujoco.mj_kinematics(robot.model, d)
    mujoco.mj_comPos(robot.model, d)
    return d


def lowest_foot_z(robot: NominalRobot, d: mujoco.MjData) -> float:
    from bench.robot.draft import _lowest_z

    return min(_lowest_z(robot.model, d, int(g)) for g in robot.foot_geom_ids)


def kinematic_height(robot: NominalRobot) -> float:
    """Trunk origin height above flat ground with the nominal pose and the lowest foot point at ground level."""
    d = _posed(robot)
    return float(d.xpos[robot.trunk_body_id, 2] - lowest_foot_z(robot, d))


def _leg_joints(robot: NominalRobot) -> list[list[int]]:
    """Manifest joint indices of each foot's leg: the joints on the path from the trunk to the foot site."""
    m = robot.model
    out = []
    for site in robot.foot_site_ids:
        bodies, b = set(), int(m.site_bodyid[site])
        while b not in (robot.trunk_body_id, 0):
            bodies.add(b)
            b = int(m.body_parentid[b])
        out.append([i for i, j in enumerate(robot.joint_ids) if int(m.jnt_bodyid[j]) in bodies])
    return out


def measure(robot: NominalRobot) -> list[Measurement]:
    m, man = robot.model, robot.manifest
    out: list[Measurement] = []

    total = float(mujoco.mj_getTotalmass(m))
    summed = float(m.body_mass.sum())
    out.append(Measurement("total mass", f"{summed:.3f} kg (sum of bodies)", f"{total:.3f} kg",
                           "1e-9 kg", abs(total - summed) < 1e-9, "MuJoCo mj_getTotalmass", total))

    h = kinematic_height(robot)
    out.append(Measurement("standing height (kinematic)", f"{man.nominal_height:.3f} m", f"{h:.3f} m",
                           f"{HEIGHT_TOLERANCE_M:g} m", abs(h - man.nominal_height) <= HEIGHT_TOLERANCE_M,
                           "nominal pose, lowest foot point on flat ground", h))

    legs = _leg_joints(robot)
    d = _posed(robot)
    shares = []
    for foot, (name, idx) in enumerate(zip(robot.manifest.foot_names, legs)):
        if not idx:
            continue
        reach, nominal = _reach(robot, idx, foot)
        shares.append((name, nominal / reach if reach > 0 else float("nan"), reach))
    worst = max(shares, key=lambda s: s[1]) if shares else None
    if worst is not None:
        out.append(Measurement("leg extension at stance", f"< {REACH_SHARE_MAX:.0%} of reach",
                               f"{worst[1]:.0%} ({worst[0]}, reach {worst[2]:.3f} m)", "-",
                               worst[1] <= REACH_SHARE_MAX, "joint-range grid, first joint to foot", worst[1]))

    lo, hi = robot.joint_range[:, 0], robot.joint_range[:, 1]
    q = robot.nominal_pose
    margins = np.where(robot.joint_limited, np.minimum(q - lo, hi - q), np.inf)
    j = int(np.argmin(margins))
    out.append(Measurement("joint-limit margin at stance", f">= {LIMIT_MARGIN_MIN_RAD:g} rad",
                           f"{margins[j]:.3f} rad ({man.joints[j]})" if np.isfinite(margins[j]) else "no limits",
                           "-", bool(margins[j] >= LIMIT_MARGIN_MIN_RAD), "", float(margins[j])))

    ratio, which = stand_torque_ratio(robot, d)
    note = "tau = J^T f, weight shared equally by the feet"
    if 1.0 >= ratio > STAND_TORQUE_WARN:
        note = f"warning: over {STAND_TORQUE_WARN:.0%} of the limit just to stand; " + note
    out.append(Measurement("torque to stand / limit", "<= 100 %", f"{ratio:.0%} ({man.joints[which]})", "-",
                           ratio <= 1.0, note, ratio))
    return out


def stand_torque_ratio(robot: NominalRobot, d: mujoco.MjData | None = None) -> tuple[float, int]:
    """Largest |tau| / limit over the joints standing still, and the joint where it is."""
    m = robot.model
    d = d if d is not None else _posed(robot)
    share = robot.mass_kg * GRAVITY / robot.num_feet
    tau = np.zeros(m.nv)
    jac = np.zeros((3, m.nv))
    for site in robot.foot_site_ids:
        mujoco.mj_jacSite(m, d, jac, None, int(site))
        # the ground pushes each foot up with its share; the legs hold it: tau = -J^T f_ground
        tau -= jac.T @ np.array([0.0, 0.0, share])
    joint_tau = tau[robot.joint_dof_adr]
    ratios = np.abs(joint_tau) / robot.torque_limits
    i = int(np.argmax(ratios))
    return float(ratios[i]), i


def _reach(robot: NominalRobot, idx: list[int], foot: int, steps: int = 9) -> tuple[float, float]:
    """(largest first-joint-to-foot distance over a grid of the leg's joint angles, the nominal one)."""
    m = robot.model
    d = mujoco.MjData(m)
    d.qpos[:] = robot.nominal_qpos
    site = int(robot.foot_site_ids[foot])
    first = int(robot.joint_ids[idx[0]])
    mujoco.mj_kinematics(m, d)
    nominal = float(np.linalg.norm(d.site_xpos[site] - d.xanchor[first]))
    grids = []
    for i in idx:
        lo, hi = (robot.joint_range[i] if robot.joint_limited[i] else (-np.pi, np.pi))
        grids.append(np.linspace(lo, hi, steps))
    best = nominal
    adr = robot.joint_qpos_adr[idx]
    for combo in itertools.product(*grids[:4]):       # at most 4 joints per leg on the grid
        d.qpos[adr[:len(combo)]] = combo
        mujoco.mj_kinematics(m, d)
        best = max(best, float(np.linalg.norm(d.site_xpos[site] - d.xanchor[first])))
    return best, nominal
