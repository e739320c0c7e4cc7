"""The robot manifest: what a robot's MJCF means to the bench.

Owns `RobotManifest` (a frozen, validated view of a `manifest.yaml`), `Foot`,
`RobotError` and `load_manifest`. A manifest names the trunk body, the IMU site
and sensors, the actuated joints and their actuators in controller order, torque
limits, feet (site + contact geom), the geoms whose ground contact is a fall,
and the nominal standing pose and height. Every name is checked against the
compiled MJCF here, so later stages can resolve names to ids without guarding.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import yaml

REQUIRED_SENSORS = ("orientation", "gyro", "accelerometer")
_REQUIRED_KEYS = (
    "name", "mjcf", "trunk", "imu_site", "sensors", "joints", "actuators",
    "torque_limits", "feet", "fall_geoms", "nominal_pose", "nominal_height",
)
_OPTIONAL_KEYS = ("description",)


class RobotError(ValueError):
    """A problem with a robot manifest or its MJCF; names the file, the field and, when known, the line.

    ``line`` and ``col`` are 1-based positions in the manifest (0 when the
    problem is not at one place, e.g. a file that cannot be read).
    """

    def __init__(self, path: Path | str, field: str, message: str, hint: str = "", line: int = 0, col: int = 0):
        self.path = str(path)
        self.field = field
        self.message = message
        self.hint = hint
        self.line = int(line)
        self.col = int(col)
        where = f"{self.path}:{self.line}:{self.col}" if self.line else self.path
        text = f"{where}: {field}: {message}" if field else f"{where}: {message}"
        if hint:
            text += f" ({hint})"
        super().__init__(text)


class RobotErrors(RobotError):
    """Every problem found in one manifest, so that a user fixes them all in one pass.

    Behaves as its first problem (``field``, ``line``...) for callers that want one;
    ``errors`` has them all and ``str()`` is one problem per line.
    """

    def __init__(self, errors: list[RobotError]):
        first = errors[0]
        super().__init__(first.path, first.field, first.message, first.hint, first.line, first.col)
        self.errors = list(errors)
        self.args = ("\n".join(str(e) for e in self.errors),)

    def __str__(self) -> str:
        return self.args[0]


@dataclass(frozen=True)
class Foot:
    name: str
    site: str
    geom: str


@dataclass(frozen=True, eq=False)
class RobotManifest:
    name: str
    mjcf_path: Path                 # absolute
    manifest_path: Path             # absolute
    trunk: str                      # body name; the body carries the freejoint
    imu_site: str
    sensors: dict[str, str]         # role (orientation/gyro/accelerometer) -> sensor name
    joints: tuple[str, ...]
    actuators: tuple[str, ...]      # same order as joints
    torque_limits: np.ndarray       # (J,) N m, read-only
    feet: tuple[Foot, ...]
    fall_geoms: tuple[str, ...]
    nominal_pose: np.ndarray        # (J,) rad, read-only
    nominal_height: float           # m, trunk origin above flat ground standing in nominal_pose

    @property
    def num_joints(self) -> int:
        return len(self.joints)

    @property
    def foot_names(self) -> tuple[str, ...]:
        return tuple(f.name for f in self.feet)


def load_manifest(path: str | Path) -> RobotManifest:
    """Read, validate and return the manifest at `path`.

    Raises :class:`RobotErrors` listing every problem found, each at its line
    and column in the manifest, with a did-you-mean where a name is close to a
    known one.
    """
    path = Path(path).expanduser().resolve()
    if not path.is_file():
        raise RobotErrors([RobotError(path, "manifest", "file not found" if not path.exists()
                                      else "not a regular file")])
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise RobotErrors([RobotError(path, "manifest", f"cannot be read: {exc}")]) from None
    return _Reader(path, text).manifest()


class _Reader:
    """Reads one manifest, collecting every problem with its place in the file."""

    def __init__(self, path: Path, text: str):
        self.path = path
        self.text = text
        self.errors: list[RobotError] = []
        self.doc = None

    # --- problems ----------------------------------------------------------------------

    def at(self, field_path: tuple, *, key: bool = False) -> tuple[int, int]:
        if self.doc is None:
            return 0, 0
        try:
            loc = self.doc.locs.key(field_path) if key else self.doc.locs.value(field_path)
        except (KeyError, LookupError):
            return 0, 0
        return loc.line, loc.col

    def problem(self, field_path: tuple, message: str, hint: str = "", *, key: bool = False) -> None:
        line, col = self.at(field_path, key=key)
        self.errors.append(RobotError(self.path, _dotted(field_path), message, hint, line, col))

    # --- reading -----------------------------------------------------------------------

    def manifest(self) -> RobotManifest:
        from bench.errors import ScenarioErrors
        from bench.scenario.yamlload import load_yaml_text

        if not self.text.strip():
            raise RobotErrors([RobotError(self.path, "manifest", "the file is empty",
                                          f"a manifest needs: {', '.join(_REQUIRED_KEYS)}", 1, 1)])
        try:
            self.doc = load_yaml_text(self.text, str(self.path))
        except ScenarioErrors as exc:
            raise RobotErrors([RobotError(self.path, e.field, e.message, e.hint or "", e.line, e.col)
                               for e in exc.errors]) from None
        doc = self.doc.data
        for k in _REQUIRED_KEYS:
            if k not in doc:
                self.errors.append(RobotError(self.path, k, "required field missing",
                                              f"a manifest needs: {', '.join(_REQUIRED_KEYS)}", 1, 1))
        from bench.suggest import did_you_mean

        accepted = _REQUIRED_KEYS + _OPTIONAL_KEYS
        for k in doc:
            if k not in accepted:
                self.problem((k,), "unknown field",
                             did_you_mean(str(k), accepted) or f"accepted fields: {', '.join(accepted)}", key=True)

        name = self.string(doc, ("name",))
        mjcf_rel = self.string(doc, ("mjcf",))
        mjcf_path = None
        if mjcf_rel is not None:
            mjcf_path = (self.path.parent / mjcf_rel).resolve()
            if not mjcf_path.exists():
                self.problem(("mjcf",), f"MJCF file not found: {mjcf_path}", "the path is relative to the manifest")
                mjcf_path = None
            elif not mjcf_path.is_file():
                self.problem(("mjcf",), f"{mjcf_path} is not a regular file", "name the robot's MJCF file")
                mjcf_path = None
        trunk = self.string(doc, ("trunk",))
        imu_site = self.string(doc, ("imu_site",))

        sensors = None
        if "sensors" in doc:
            raw = doc["sensors"]
            if not isinstance(raw, dict):
                self.problem(("sensors",), "expected a mapping role -> sensor name",
                             f"roles: {', '.join(REQUIRED_SENSORS)}")
            else:
                for role in REQUIRED_SENSORS:
                    if role not in raw:
                        self.problem(("sensors",), f"required sensor role {role!r} missing",
                                     f"roles: {', '.join(REQUIRED_SENSORS)}")
                values = {str(k): self.string(raw, ("sensors", k)) for k in raw}
                if all(v is not None for v in values.values()):
                    sensors = values

        joints = self.names(doc, ("joints",))
        n = None
        if joints is not None:
            if not joints:
                self.problem(("joints",), "at least one joint is required")
            elif len(set(joints)) != len(joints):
                dup = sorted({j for j in joints if joints.count(j) > 1})
                self.problem(("joints",), f"joint names must be unique ({', '.join(map(repr, dup))} repeated)")
            else:
                n = len(joints)
        actuators = self.names(doc, ("actuators",))
        if actuators is not None and n is not None and len(actuators) != n:
            self.problem(("actuators",), f"expected {n} entries (one per joint), got {len(actuators)}")
            actuators = None
        torque_limits = self.floats(doc, ("torque_limits",), n)
        if torque_limits is not None and np.any(torque_limits <= 0):
            for i in np.flatnonzero(torque_limits <= 0):
                self.problem(("torque_limits", int(i)), f"a torque limit must be > 0 N m, got {torque_limits[i]:g}")
            torque_limits = None
        nominal_pose = self.floats(doc, ("nominal_pose",), n)

        feet = self.feet(doc)
        fall_geoms = self.names(doc, ("fall_geoms",))

        nominal_height = doc.get("nominal_height")
        if "nominal_height" in doc and (isinstance(nominal_height, bool)
                                        or not isinstance(nominal_height, (int, float))
                                        or not math.isfinite(nominal_height) or nominal_height <= 0):
            self.problem(("nominal_height",), f"expected a positive number of metres, got {nominal_height!r}")
            nominal_height = None

        parts = (name, mjcf_path, trunk, imu_site, sensors, joints, actuators, torque_limits, feet, fall_geoms,
                 nominal_pose, nominal_height)
        if self.errors or any(p is None for p in parts):
            raise RobotErrors(self.errors or [RobotError(self.path, "manifest", "incomplete")])
        torque_limits.setflags(write=False)
        nominal_pose.setflags(write=False)
        manifest = RobotManifest(
            name=name, mjcf_path=mjcf_path, manifest_path=self.path, trunk=trunk, imu_site=imu_site,
            sensors=sensors, joints=joints, actuators=actuators, torque_limits=torque_limits,
            feet=tuple(feet), fall_geoms=fall_geoms, nominal_pose=nominal_pose,
            nominal_height=float(nominal_height),
        )
        _check_against_mjcf(manifest, self)
        if self.errors:
            raise RobotErrors(self.errors)
        return manifest

    # --- field readers (None after recording a problem) --------------------------------------

    def string(self, doc: dict, fp: tuple) -> str | None:
        if fp[-1] not in doc:
            return None   # reported as missing already
        value = doc[fp[-1]]
        if not isinstance(value, str) or not value:
            self.problem(fp, f"expected a non-empty string, got {value!r}")
            return None
        return value

    def names(self, doc: dict, fp: tuple) -> tuple[str, ...] | None:
        if fp[-1] not in doc:
            return None
        value = doc[fp[-1]]
        if not isinstance(value, list):
            self.problem(fp, f"expected a list of names, got {value!r}")
            return None
        ok = True
        for i, v in enumerate(value):
            if not isinstance(v, str) or not v:
                self.problem(fp + (i,), f"expected a name, got {v!r}")
                ok = False
        return tuple(value) if ok else None

    def floats(self, doc: dict, fp: tuple, n: int | None) -> np.ndarray | None:
        if fp[-1] not in doc:
            return None
        value = doc[fp[-1]]
        if not isinstance(value, list):
            self.problem(fp, f"expected a list of numbers, got {value!r}")
            return None
        ok = True
        for i, v in enumerate(value):
            if isinstance(v, bool) or not isinstance(v, (int, float)):
                self.problem(fp + (i,), f"expected a number, got {v!r}")
                ok = False
            elif not math.isfinite(v):
                self.problem(fp + (i,), f"entries must be finite, got {v!r}")
                ok = False
        if ok and n is not None and len(value) != n:
            self.problem(fp, f"expected {n} entries (one per joint), got {len(value)}")
            ok = False
        return np.asarray(value, dtype=float) if ok and n is not None else None

    def feet(self, doc: dict) -> list[Foot] | None:
        if "feet" not in doc:
            return None
        raw = doc["feet"]
        if not isinstance(raw, list) or not raw:
            self.problem(("feet",), "expected a non-empty list of {name, site, geom}")
            return None
        feet, ok = [], True
        for i, item in enumerate(raw):
            fp = ("feet", i)
            if not isinstance(item, dict):
                self.problem(fp, "expected a mapping {name, site, geom}")
                ok = False
                continue
            for key in ("name", "site", "geom"):
                if key not in item:
                    self.problem(fp, f"required field {key!r} missing")
            for key in item:
                if key not in ("name", "site", "geom"):
                    from bench.suggest import did_you_mean

                    self.problem(fp + (key,), "unknown field",
                                 did_you_mean(str(key), ("name", "site", "geom")) or "a foot has name, site and geom",
                                 key=True)
            vals = [self.string(item, fp + (k,)) for k in ("name", "site", "geom")]
            if any(v is None for v in vals) or set(item) - {"name", "site", "geom"}:
                ok = False
                continue
            feet.append(Foot(*vals))
        names = [f.name for f in feet]
        if len(set(names)) != len(names):
            self.problem(("feet",), "foot names must be unique")
            ok = False
        return feet if ok else None


def _dotted(fp: tuple) -> str:
    out = ""
    for p in fp:
        out += f"[{p}]" if isinstance(p, int) else (f".{p}" if out else str(p))
    return out


# --- cross-check with the compiled MJCF ----------------------------------------------

def _check_against_mjcf(man: RobotManifest, reader: _Reader) -> None:
    """Every name the manifest gives must exist in the compiled MJCF with the right kind."""
    import mujoco  # local: keeps `import bench.robot.manifest` light

    from bench.suggest import did_you_mean

    try:
        model = mujoco.MjSpec.from_file(str(man.mjcf_path)).compile()
    except Exception as exc:  # MuJoCo raises ValueError with its own parser message
        reader.problem(("mjcf",), f"MJCF {man.mjcf_path.name} does not compile: {exc}")
        return

    def names_of(kind: mujoco.mjtObj, count: int) -> list[str]:
        return [mujoco.mj_id2name(model, kind, i) or "" for i in range(count)]

    def lookup(kind: mujoco.mjtObj, name: str, fp: tuple, what: str, count: int) -> int:
        idx = mujoco.mj_name2id(model, kind, name)
        if idx < 0:
            known = [x for x in names_of(kind, count) if x]
            hint = did_you_mean(name, known) or (f"{what}s in it: {', '.join(known[:12])}"
                                                 + (", ..." if len(known) > 12 else "") if known else "")
            reader.problem(fp, f"no {what} named {name!r} in {man.mjcf_path.name}", hint)
        return idx

    BODY, SITE, SENSOR = mujoco.mjtObj.mjOBJ_BODY, mujoco.mjtObj.mjOBJ_SITE, mujoco.mjtObj.mjOBJ_SENSOR
    JOINT, ACT, GEOM = mujoco.mjtObj.mjOBJ_JOINT, mujoco.mjtObj.mjOBJ_ACTUATOR, mujoco.mjtObj.mjOBJ_GEOM
    trunk_id = lookup(BODY, man.trunk, ("trunk",), "body", model.nbody)
    if trunk_id >= 0:
        free = [j for j in range(model.njnt) if model.jnt_bodyid[j] == trunk_id
                and int(model.jnt_type[j]) == int(mujoco.mjtJoint.mjJNT_FREE)]
        if not free:
            reader.problem(("trunk",), f"body {man.trunk!r} has no freejoint", "the trunk must be the floating base")
    lookup(SITE, man.imu_site, ("imu_site",), "site", model.nsite)
    for role, sensor in man.sensors.items():
        lookup(SENSOR, sensor, ("sensors", role), "sensor", model.nsensor)

    for i, (jname, aname) in enumerate(zip(man.joints, man.actuators)):
        jid = lookup(JOINT, jname, ("joints", i), "joint", model.njnt)
        aid = lookup(ACT, aname, ("actuators", i), "actuator", model.nu)
        if jid < 0:
            continue
        if int(model.jnt_type[jid]) not in (int(mujoco.mjtJoint.mjJNT_HINGE), int(mujoco.mjtJoint.mjJNT_SLIDE)):
            reader.problem(("joints", i), f"joint {jname!r} must be a hinge or slide")
        if aid >= 0 and (int(model.actuator_trntype[aid]) != int(mujoco.mjtTrn.mjTRN_JOINT)
                         or model.actuator_trnid[aid, 0] != jid):
            reader.problem(("actuators", i), f"actuator {aname!r} does not drive joint {jname!r}",
                           "actuators must be listed in the same order as joints")
        if model.jnt_limited[jid]:
            lo, hi = model.jnt_range[jid]
            if not lo - 1e-9 <= man.nominal_pose[i] <= hi + 1e-9:
                reader.problem(("nominal_pose", i),
                               f"{man.nominal_pose[i]} is outside the range [{lo}, {hi}] of joint {jname!r}")

    for i, foot in enumerate(man.feet):
        lookup(SITE, foot.site, ("feet", i, "site"), "site", model.nsite)
        lookup(GEOM, foot.geom, ("feet", i, "geom"), "geom", model.ngeom)
    for i, gname in enumerate(man.fall_geoms):
        lookup(GEOM, gname, ("fall_geoms", i), "geom", model.ngeom)
