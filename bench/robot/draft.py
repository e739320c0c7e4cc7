"""Drafting a robot manifest from a model: ``bench robot init MODEL``.

Owns :func:`draft_manifest`, which reads an MJCF (or a URDF, which MuJoCo
compiles) and proposes every field of a manifest, and :func:`manifest_text`,
which writes the proposal as YAML with a comment on each guessed field.

How each field is found (all of it is a guess for a person to review):

- the floating base: the one body under the world with a free joint (a URDF
  has none: its root link gets one);
- legs: each subtree of the trunk that holds actuated joints; legs are ordered
  front to back, left before right, and named FL, FR, RL, RR for four legs
  (L1.., R1.. otherwise); joints within a leg from the trunk outwards;
- feet: the distal body of each leg, its colliding geom and a site on it (a
  site is added at the lowest point of the foot geom when there is none);
- fall geoms: the colliding geoms of the trunk and of every leg body but the
  foot's;
- torque limits: the actuator's control range times its gear (the smaller of
  that and its force range); for a URDF, the joints' effort limits;
- nominal pose: each foot straight under its leg's first joint at 70 % of the
  leg's full extension (common practice for a standing quadruped, no source),
  solved by damped least squares on the robot-only model, from the middle of
  each joint's range so that knees bend the way their ranges allow;
- nominal height: from the nominal pose alone, the trunk height at which the
  lowest foot geom point touches flat ground (kinematics only, no settling).

When the model lacks something the bench needs (a foot site, an IMU site and
its sensors, a motor on a joint), the draft adds it to a copy of the model
that :func:`write_draft` writes next to the manifest, and says so.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import mujoco
import numpy as np

#: Share of a leg's full extension the drafted standing pose uses (common practice, no source).
STANCE_EXTENSION = 0.70
#: Sensors the bench reads, by role, and the MuJoCo sensor type that provides each.
IMU_SENSORS = {"orientation": mujoco.mjtSensor.mjSENS_FRAMEQUAT, "gyro": mujoco.mjtSensor.mjSENS_GYRO,
               "accelerometer": mujoco.mjtSensor.mjSENS_ACCELEROMETER}


class DraftError(ValueError):
    """The model cannot be drafted (no floating base, closed chains, no legs): a message for the user."""


@dataclass
class LegDraft:
    name: str
    joints: list[str]
    actuators: list[str]
    torque_limits: list[float]
    foot_body: str
    foot_site: str
    foot_geom: str
    pose: list[float] = field(default_factory=list)


@dataclass
class Draft:
    """A proposed manifest plus the notes a reviewer needs."""

    name: str
    mjcf: str                         # relative to the manifest
    trunk: str
    imu_site: str
    sensors: dict[str, str]
    legs: list[LegDraft]
    fall_geoms: list[str]
    nominal_height: float
    notes: dict[str, str] = field(default_factory=dict)      # field -> how it was guessed
    added: list[str] = field(default_factory=list)           # what the copy of the model adds
    spec: mujoco.MjSpec | None = None                        # the model, with any additions
    source: Path | None = None

    @property
    def joints(self) -> list[str]:
        return [j for leg in self.legs for j in leg.joints]


def _is_collider(m: mujoco.MjModel, g: int) -> bool:
    return bool(m.geom_contype[g] or m.geom_conaffinity[g])


def _children(m: mujoco.MjModel, b: int) -> list[int]:
    return [c for c in range(1, m.nbody) if m.body_parentid[c] == b and c != b]


def _subtree(m: mujoco.MjModel, b: int) -> list[int]:
    out, todo = [], [b]
    while todo:
        x = todo.pop()
        out.append(x)
        todo.extend(_children(m, x))
    return sorted(out)


def _name(m: mujoco.MjModel, kind: mujoco.mjtObj, i: int, fallback: str) -> str:
    return mujoco.mj_id2name(m, kind, i) or fallback


def _load_spec(path: Path) -> tuple[mujoco.MjSpec, bool]:
    """The model as an MjSpec, and whether it came from a URDF."""
    is_urdf = path.suffix.lower() == ".urdf"
    try:
        spec = mujoco.MjSpec.from_file(str(path))
    except Exception as exc:  # MuJoCo's parser message names the line
        raise DraftError(f"{path}: MuJoCo cannot read this model: {' '.join(str(exc).split())}") from None
    if is_urdf:
        # MuJoCo fuses a URDF's jointless root link into the world by default; the trunk must stay a body.
        spec.compiler.fusestatic = False
        spec.compiler.discardvisual = True
    return spec, is_urdf


def _compile(spec: mujoco.MjSpec, path: Path) -> mujoco.MjModel:
    spec.option.jacobian = mujoco.mjtJacobian.mjJAC_DENSE
    try:
        return spec.compile()
    except Exception as exc:  # noqa: BLE001
        raise DraftError(f"{path}: the model does not compile: {' '.join(str(exc).split())}") from None


def _find_trunk(spec: mujoco.MjSpec, m: mujoco.MjModel, is_urdf: bool, path: Path, added: list[str]) -> int:
    roots = _children(m, 0)
    free = [b for b in roots if any(int(m.jnt_type[j]) == int(mujoco.mjtJoint.mjJNT_FREE)
                                    for j in range(m.njnt) if m.jnt_bodyid[j] == b)]
    if len(free) == 1:
        return free[0]
    if len(free) > 1:
        raise DraftError(f"{path}: {len(free)} bodies have a free joint "
                         f"({', '.join(_name(m, mujoco.mjtObj.mjOBJ_BODY, b, str(b)) for b in free)}); "
                         "the bench needs one robot with one floating base")
    movable_roots = [b for b in roots if m.body_dofnum[b] == 0 and len(_subtree(m, b)) > 1]
    if is_urdf and len(movable_roots) == 1:
        body = spec.body(_name(m, mujoco.mjtObj.mjOBJ_BODY, movable_roots[0], ""))
        body.add_freejoint()
        added.append(f"a free joint on the root link {body.name!r} (a URDF fixes its root to the world)")
        return movable_roots[0]
    raise DraftError(f"{path}: no floating base: no body under the world has a free joint"
                     + ("; add <freejoint/> to the trunk body" if not is_urdf else ""))


def draft_manifest(model_path: str | Path, name: str | None = None) -> Draft:
    """Propose a manifest for the robot in ``model_path`` (MJCF or URDF); raises :class:`DraftError`."""
    path = Path(model_path).expanduser().resolve()
    if not path.is_file():
        raise DraftError(f"{path}: not a file")
    spec, is_urdf = _load_spec(path)
    added: list[str] = []
    notes: dict[str, str] = {}
    m = _compile(spec, path)
    trunk = _find_trunk(spec, m, is_urdf, path, added)
    named = _name_geoms(spec, m)
    if named:
        added.append(f"names for {named} unnamed geom(s) of the robot (<body>_geom<k>), so the manifest can "
                     "refer to them")
    if added:
        m = _compile(spec, path)
    if m.neq:
        raise DraftError(f"{path}: the model has {m.neq} equality constraint(s) (closed chains or couplings); "
                         "the drafting here handles open-chain legs only: write the manifest by hand")
    trunk_name = _name(m, mujoco.mjtObj.mjOBJ_BODY, trunk, "trunk")

    # --- legs: subtrees of the trunk with hinge or slide joints ----------------------------------
    leg_roots = [c for c in _children(m, trunk)
                 if any(m.body_dofnum[b] for b in _subtree(m, c))]
    if len(leg_roots) < 2:
        raise DraftError(f"{path}: found {len(leg_roots)} jointed subtree(s) under the trunk "
                         f"{trunk_name!r}; a legged robot needs at least two legs")
    hinge_slide = (int(mujoco.mjtJoint.mjJNT_HINGE), int(mujoco.mjtJoint.mjJNT_SLIDE))
    d = mujoco.MjData(m)
    mujoco.mj_kinematics(m, d)
    legs_raw = []
    for root in leg_roots:
        bodies = _subtree(m, root)
        leaves = [b for b in bodies if not _children(m, b)]
        if len(leaves) != 1:
            raise DraftError(f"{path}: the leg under {_name(m, mujoco.mjtObj.mjOBJ_BODY, root, str(root))!r} "
                             f"branches into {len(leaves)} ends; the drafting here expects one foot per leg")
        chain, b = [], leaves[0]
        while b != trunk:
            chain.append(b)
            b = int(m.body_parentid[b])
        chain.reverse()
        joints = [j for b in chain for j in range(m.njnt) if m.jnt_bodyid[j] == b]
        bad = [j for j in joints if int(m.jnt_type[j]) not in hinge_slide]
        if bad:
            raise DraftError(f"{path}: joint {_name(m, mujoco.mjtObj.mjOBJ_JOINT, bad[0], str(bad[0]))!r} in a "
                             "leg is not a hinge or slide")
        anchor = d.xanchor[joints[0]].copy() if joints else d.xpos[root].copy()
        legs_raw.append((anchor, chain, joints))
    trunk_pos = d.xpos[trunk].copy()
    # front to back, then left (y > 0) before right
    legs_raw.sort(key=lambda leg: (-round(float(leg[0][0] - trunk_pos[0]), 3),
                                   -round(float(leg[0][1] - trunk_pos[1]), 3)))
    leg_names = _leg_names([leg[0] - trunk_pos for leg in legs_raw])

    # --- actuators and limits --------------------------------------------------------------------
    act_of_joint: dict[int, int] = {}
    for a in range(m.nu):
        if int(m.actuator_trntype[a]) == int(mujoco.mjtTrn.mjTRN_JOINT):
            act_of_joint.setdefault(int(m.actuator_trnid[a, 0]), a)
    legs: list[LegDraft] = []
    spec_changed = False
    for (anchor, chain, joints), lname in zip(legs_raw, leg_names):
        jnames, anames, limits = [], [], []
        for j in joints:
            jn = _name(m, mujoco.mjtObj.mjOBJ_JOINT, j, f"joint{j}")
            jnames.append(jn)
            a = act_of_joint.get(j)
            if a is not None:
                anames.append(_name(m, mujoco.mjtObj.mjOBJ_ACTUATOR, a, f"actuator{a}"))
                limits.append(_torque_limit(m, a, j))
            else:
                effort = float(m.jnt_actfrcrange[j, 1]) if m.jnt_actfrclimited[j] else 0.0
                if effort <= 0:
                    raise DraftError(f"{path}: joint {jn!r} has no actuator and no effort limit; add a motor "
                                     "(or an effort limit in the URDF) so the bench knows its torque limit")
                motor = spec.add_actuator(name=f"{jn}_motor", target=jn,
                                          trntype=mujoco.mjtTrn.mjTRN_JOINT)
                motor.ctrlrange = [-effort, effort]
                motor.ctrllimited = True
                anames.append(motor.name)
                limits.append(effort)
                spec_changed = True
        foot = chain[-1]
        fgeoms = [g for g in range(m.ngeom) if m.geom_bodyid[g] == foot and _is_collider(m, g)]
        if not fgeoms:
            raise DraftError(f"{path}: the foot body {_name(m, mujoco.mjtObj.mjOBJ_BODY, foot, str(foot))!r} "
                             "has no colliding geom")
        fgeom = min(fgeoms, key=lambda g: _lowest_z(m, d, g))     # the one that reaches lowest
        fsites = [s for s in range(m.nsite) if m.site_bodyid[s] == foot]
        if fsites:
            fsite = _name(m, mujoco.mjtObj.mjOBJ_SITE, fsites[0], "")
        else:
            fsite = f"{lname}_foot"
            body = spec.body(_name(m, mujoco.mjtObj.mjOBJ_BODY, foot, ""))
            body.add_site(name=fsite, pos=m.geom_pos[fgeom].tolist(), size=[0.005, 0, 0])
            added.append(f"site {fsite!r} at the centre of foot geom "
                         f"{_name(m, mujoco.mjtObj.mjOBJ_GEOM, fgeom, '')!r}")
            spec_changed = True
        legs.append(LegDraft(lname, jnames, anames, limits, _name(m, mujoco.mjtObj.mjOBJ_BODY, foot, ""),
                             fsite, _name(m, mujoco.mjtObj.mjOBJ_GEOM, fgeom, f"geom{fgeom}")))

    # --- IMU -------------------------------------------------------------------------------------
    imu_site, sensors, imu_added = _imu(spec, m, trunk, trunk_name)
    added += imu_added
    spec_changed = spec_changed or bool(imu_added)
    if spec_changed or added:
        m = _compile(spec, path)
        d = mujoco.MjData(m)

    # --- fall geoms: trunk and leg bodies but the feet -------------------------------------------
    foot_bodies = {mujoco.mj_name2id(m, mujoco.mjtObj.mjOBJ_BODY, leg.foot_body) for leg in legs}
    leg_bodies = {b for _, chain, _ in legs_raw for b in chain}
    fall = [_name(m, mujoco.mjtObj.mjOBJ_GEOM, g, f"geom{g}") for g in range(m.ngeom)
            if _is_collider(m, g) and m.geom_bodyid[g] in ({trunk} | leg_bodies) - foot_bodies]

    # --- nominal pose and height -----------------------------------------------------------------
    pose_by_joint = _stance_pose(m, trunk, legs)
    for leg in legs:
        leg.pose = [pose_by_joint[j] for j in leg.joints]
    height = _standing_height(m, trunk, legs, pose_by_joint)

    notes.update({
        "trunk": "the body with the free joint" + (" (added for the URDF's root link)" if is_urdf else ""),
        "joints": "each leg from the trunk outwards; legs front to back, left before right",
        "actuators": "the motor driving each joint" + (" (some added: see the note on the model)"
                                                       if any("motor" in a for a in added) else ""),
        "torque_limits": "actuator control range x gear (or the force range when smaller), N m",
        "feet": "the last body of each leg, its lowest colliding geom and a site on it",
        "fall_geoms": "colliding geoms of the trunk and of the leg bodies above the feet; drop any that "
                      "may touch the ground in normal use (e.g. a belly plate on a crouching robot)",
        "nominal_pose": f"feet under the legs' first joints at {STANCE_EXTENSION:.0%} of full extension "
                        "(common practice, no source); check the knees bend the intended way",
        "nominal_height": "kinematic: trunk height with the nominal pose and the lowest foot point on flat "
                          "ground; `bench robot check` compares it with a settled stand",
        "imu_site": "a site on the trunk whose name contains 'imu', else the first trunk site"
                    + (" (added)" if imu_added else ""),
    })
    return Draft(name=name or (spec.modelname or path.stem), mjcf=path.name, trunk=trunk_name, imu_site=imu_site,
                 sensors=sensors, legs=legs, fall_geoms=fall, nominal_height=height, notes=notes, added=added,
                 spec=spec, source=path)


def _name_geoms(spec: mujoco.MjSpec, m: mujoco.MjModel) -> int:
    """Give every unnamed geom of a named body the name ``<body>_geom<k>``; return how many were named."""
    count = 0
    for b in range(1, m.nbody):
        bname = mujoco.mj_id2name(m, mujoco.mjtObj.mjOBJ_BODY, b)
        if not bname:
            continue
        for k, g in enumerate(spec.body(bname).geoms):
            if not g.name:
                g.name = f"{bname}_geom{k}"
                count += 1
    return count


def _leg_names(offsets: list[np.ndarray]) -> list[str]:
    if len(offsets) == 4:
        return [("F" if i < 2 else "R") + ("L" if o[1] > 0 else "R") for i, o in enumerate(offsets)]
    left = [i for i, o in enumerate(offsets) if o[1] > 0]
    right = [i for i, o in enumerate(offsets) if o[1] <= 0]
    names = [""] * len(offsets)
    for side, idx in (("L", left), ("R", right)):
        for k, i in enumerate(idx, 1):
            names[i] = f"{side}{k}"
    return names


def _torque_limit(m: mujoco.MjModel, a: int, j: int) -> float:
    gear = abs(float(m.actuator_gear[a, 0])) or 1.0
    candidates = []
    if m.actuator_ctrllimited[a]:
        candidates.append(max(abs(float(m.actuator_ctrlrange[a, 0])), abs(float(m.actuator_ctrlrange[a, 1]))) * gear)
    if m.actuator_forcelimited[a]:
        candidates.append(max(abs(float(m.actuator_forcerange[a, 0])), abs(float(m.actuator_forcerange[a, 1]))))
    if m.jnt_actfrclimited[j]:
        candidates.append(float(m.jnt_actfrcrange[j, 1]))
    return min(candidates) if candidates else 0.0


def _lowest_z(m: mujoco.MjModel, d: mujoco.MjData, g: int) -> float:
    """World z of the lowest point of geom ``g`` (exact for spheres, capsules and boxes)."""
    R = d.geom_xmat[g].reshape(3, 3)
    z, s, t = float(d.geom_xpos[g, 2]), m.geom_size[g], int(m.geom_type[g])
    if t == int(mujoco.mjtGeom.mjGEOM_SPHERE):
        return z - s[0]
    if t == int(mujoco.mjtGeom.mjGEOM_CAPSULE):
        return z - abs(R[2, 2]) * s[1] - s[0]
    if t == int(mujoco.mjtGeom.mjGEOM_BOX):
        return z - float(np.abs(R[2]) @ s)
    return z - float(m.geom_rbound[g])


def _imu(spec: mujoco.MjSpec, m: mujoco.MjModel, trunk: int, trunk_name: str):
    added: list[str] = []
    sites = [s for s in range(m.nsite) if m.site_bodyid[s] == trunk]
    named = [s for s in sites if "imu" in (mujoco.mj_id2name(m, mujoco.mjtObj.mjOBJ_SITE, s) or "").lower()]
    if named or sites:
        site = (named or sites)[0]
        site_name = _name(m, mujoco.mjtObj.mjOBJ_SITE, site, "")
    else:
        site, site_name = -1, "imu"
        spec.body(trunk_name).add_site(name=site_name, pos=[0, 0, 0], size=[0.01, 0, 0])
        added.append("site 'imu' at the trunk origin")
    sensors: dict[str, str] = {}
    for role, stype in IMU_SENSORS.items():
        found = [i for i in range(m.nsensor) if int(m.sensor_type[i]) == int(stype) and site >= 0
                 and int(m.sensor_objtype[i]) == int(mujoco.mjtObj.mjOBJ_SITE) and m.sensor_objid[i] == site]
        if found:
            sensors[role] = _name(m, mujoco.mjtObj.mjOBJ_SENSOR, found[0], "")
            continue
        sname = f"{site_name}_{role}"
        spec.add_sensor(name=sname, type=stype, objtype=mujoco.mjtObj.mjOBJ_SITE, objname=site_name)
        sensors[role] = sname
        added.append(f"sensor {sname!r} ({role}) on site {site_name!r}")
    return site_name, sensors, added


def _stance_pose(m: mujoco.MjModel, trunk: int, legs: list[LegDraft]) -> dict[str, float]:
    """Joint angles with each foot under its leg's first joint at STANCE_EXTENSION of full extension."""
    d = mujoco.MjData(m)
    jid = {leg_j: mujoco.mj_name2id(m, mujoco.mjtObj.mjOBJ_JOINT, leg_j) for leg in legs for leg_j in leg.joints}
    lo = {j: (m.jnt_range[i, 0] if m.jnt_limited[i] else -np.pi) for j, i in jid.items()}
    hi = {j: (m.jnt_range[i, 1] if m.jnt_limited[i] else np.pi) for j, i in jid.items()}
    # Full extension: every joint at zero (legs modelled hanging straight down, the usual MJCF convention).
    d.qpos[:] = m.qpos0
    mujoco.mj_kinematics(m, d)
    out: dict[str, float] = {}
    jac = np.zeros((3, m.nv))
    for leg in legs:
        site = mujoco.mj_name2id(m, mujoco.mjtObj.mjOBJ_SITE, leg.foot_site)
        first = jid[leg.joints[0]]
        anchor = d.xanchor[first].copy()
        straight = d.site_xpos[site].copy()
        target = straight.copy()
        target[2] = anchor[2] - STANCE_EXTENSION * (anchor[2] - straight[2])
        dofs = [int(m.jnt_dofadr[jid[j]]) for j in leg.joints]
        qadr = [int(m.jnt_qposadr[jid[j]]) for j in leg.joints]
        q = np.array([0.5 * (lo[j] + hi[j]) if m.jnt_limited[jid[j]] else 0.0 for j in leg.joints])
        for _ in range(200):
            d.qpos[qadr] = q
            mujoco.mj_kinematics(m, d)
            err = target - d.site_xpos[site]
            if np.linalg.norm(err) < 1e-6:
                break
            mujoco.mj_comPos(m, d)          # the Jacobian reads cdof, which mj_comPos computes
            mujoco.mj_jacSite(m, d, jac, None, site)
            Jl = jac[:, dofs]
            step = Jl.T @ np.linalg.solve(Jl @ Jl.T + 1e-4 * np.eye(3), err)    # damped least squares
            q = np.clip(q + step, [lo[j] for j in leg.joints], [hi[j] for j in leg.joints])
        out.update({j: round(float(v), 3) + 0.0 for j, v in zip(leg.joints, q)})
    return out


def _standing_height(m: mujoco.MjModel, trunk: int, legs: list[LegDraft], pose: dict[str, float]) -> float:
    """Trunk height above flat ground with the trunk level, the nominal pose and the lowest foot point at z=0."""
    d = mujoco.MjData(m)
    d.qpos[:] = m.qpos0
    free = next(j for j in range(m.njnt) if m.jnt_bodyid[j] == trunk)
    a = int(m.jnt_qposadr[free])
    d.qpos[a:a + 3] = 0.0
    d.qpos[a + 3:a + 7] = (1.0, 0.0, 0.0, 0.0)
    for j, v in pose.items():
        d.qpos[int(m.jnt_qposadr[mujoco.mj_name2id(m, mujoco.mjtObj.mjOBJ_JOINT, j)])] = v
    mujoco.mj_kinematics(m, d)
    lowest = min(_lowest_z(m, d, mujoco.mj_name2id(m, mujoco.mjtObj.mjOBJ_GEOM, leg.foot_geom)) for leg in legs)
    return round(float(d.xpos[trunk, 2] - lowest), 4)


def manifest_text(draft: Draft, mjcf_name: str) -> str:
    """The manifest as YAML text, with a comment on every guessed field."""
    n = draft.notes

    def names(xs) -> str:
        return "[" + ", ".join(xs) + "]"

    def nums(xs) -> str:
        return "[" + ", ".join(f"{x:g}" for x in xs) + "]"

    lines = [f"# Drafted by `bench robot init` from {draft.source.name if draft.source else mjcf_name}.",
             "# Every field below is a guess: review each comment, then run `bench robot check` on this file."]
    if draft.added:
        lines.append(f"# {mjcf_name} is a copy of the model with what the bench needs added:")
        lines += [f"#   - {a}" for a in draft.added]
    lines += [
        f"name: {draft.name}",
        f"mjcf: {mjcf_name}",
        f"trunk: {draft.trunk}    # {n['trunk']}",
        f"imu_site: {draft.imu_site}    # {n['imu_site']}",
        "sensors: {" + ", ".join(f"{k}: {v}" for k, v in draft.sensors.items()) + "}",
        f"# joints: {n['joints']}",
        f"joints: {names(draft.joints)}",
        f"# actuators: {n['actuators']}",
        f"actuators: {names(a for leg in draft.legs for a in leg.actuators)}",
        f"# torque_limits: {n['torque_limits']}",
        f"torque_limits: {nums(t for leg in draft.legs for t in leg.torque_limits)}",
        f"# feet: {n['feet']}",
        "feet:",
    ]
    lines += [f"  - {{name: {leg.name}, site: {leg.foot_site}, geom: {leg.foot_geom}}}" for leg in draft.legs]
    lines += [
        f"# fall_geoms: {n['fall_geoms']}",
        f"fall_geoms: {names(draft.fall_geoms)}",
        f"# nominal_pose: {n['nominal_pose']}",
        f"nominal_pose: {nums(v for leg in draft.legs for v in leg.pose)}",
        f"# nominal_height: {n['nominal_height']}",
        f"nominal_height: {draft.nominal_height:g}",
    ]
    return "\n".join(lines) + "\n"


def write_draft(draft: Draft, out: Path, *, force: bool = False) -> list[Path]:
    """Write the manifest (and, when the model needed additions, the model copy); return what was written."""
    from bench.fileio import write_atomic

    out = Path(out)
    targets = [out]
    mjcf_name = draft.mjcf
    if draft.added:
        mjcf_name = f"{Path(draft.mjcf).stem}.bench.xml"
        targets.append(out.parent / mjcf_name)
    elif draft.source is not None and draft.source.parent.resolve() != out.parent.resolve():
        import os

        mjcf_name = os.path.relpath(draft.source, out.parent.resolve())
    existing = [p for p in targets if p.exists()]
    if existing and not force:
        raise DraftError(f"{existing[0]} exists; pass --force to replace it")
    out.parent.mkdir(parents=True, exist_ok=True)
    if draft.added:
        xml = draft.spec.to_xml()
        write_atomic(targets[1], xml.encode())
    write_atomic(out, manifest_text(draft, mjcf_name).encode())
    return targets
