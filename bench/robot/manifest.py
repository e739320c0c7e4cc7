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

from bench.fileio import not_regular

REQUIRED_SENSORS = ("orientation", "gyro", "accelerometer")
_REQUIRED_KEYS = (
    "name", "mjcf", "trunk", "imu_site", "sensors", "joints", "actuators",
    "torque_limits", "feet", "fall_geoms", "nominal_pose", "nominal_height",
)
_OPTIONAL_KEYS = ("description",)


class RobotError(ValueError):
    """A problem with a robot manifest or its MJCF; names the file and the field."""

    def __init__(self, path: Path | str, field: str, message: str, hint: str = ""):
        self.path = str(path)
        self.field = field
        self.message = message
        self.hint = hint
        text = f"{self.path}: {field}: {message}"
        if hint:
            text += f" (hint: {hint})"
        super().__init__(text)


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
    """Read, validate and return the manifest at `path` (raises RobotError)."""
    path = Path(path).expanduser().resolve()
    special = not_regular(path)
    if special is not None:   # never opened: reading a FIFO would wait forever
        raise RobotError(path, "manifest", f"the manifest is {special}, not a regular file")
    if not path.is_file():
        raise RobotError(path, "manifest", "file not found")
    try:
        doc = yaml.safe_load(path.read_text(encoding="utf-8"))
    except yaml.YAMLError as exc:
        raise RobotError(path, "manifest", f"not valid YAML: {exc}") from None
    if not isinstance(doc, dict):
        raise RobotError(path, "manifest", "expected a mapping at the top level")

    missing = [k for k in _REQUIRED_KEYS if k not in doc]
    if missing:
        raise RobotError(path, missing[0], "required field missing",
                         f"a manifest needs: {', '.join(_REQUIRED_KEYS)}")
    unknown = sorted(set(doc) - set(_REQUIRED_KEYS) - set(_OPTIONAL_KEYS))
    if unknown:
        raise RobotError(path, unknown[0], "unknown field",
                         f"accepted fields: {', '.join(_REQUIRED_KEYS + _OPTIONAL_KEYS)}")

    name = _string(path, doc, "name")
    mjcf_rel = _string(path, doc, "mjcf")
    mjcf_path = (path.parent / mjcf_rel).resolve()
    special = not_regular(mjcf_path)
    if special is not None:
        raise RobotError(path, "mjcf", f"MJCF {mjcf_rel!r} is {special}, not a regular file",
                         "give the path of the robot's MJCF file")
    if not mjcf_path.is_file():
        raise RobotError(path, "mjcf", f"MJCF file not found: {mjcf_path}",
                         "the path is relative to the manifest")
    trunk = _string(path, doc, "trunk")
    imu_site = _string(path, doc, "imu_site")

    sensors_raw = doc["sensors"]
    if not isinstance(sensors_raw, dict):
        raise RobotError(path, "sensors", "expected a mapping role -> sensor name",
                         f"roles: {', '.join(REQUIRED_SENSORS)}")
    for role in REQUIRED_SENSORS:
        if role not in sensors_raw:
            raise RobotError(path, f"sensors.{role}", "required sensor role missing")
    sensors = {str(k): _string(path, sensors_raw, k, f"sensors.{k}") for k in sensors_raw}

    joints = _names(path, doc, "joints")
    if not joints:
        raise RobotError(path, "joints", "at least one joint is required")
    if len(set(joints)) != len(joints):
        raise RobotError(path, "joints", "joint names must be unique")
    n = len(joints)
    actuators = _names(path, doc, "actuators")
    if len(actuators) != n:
        raise RobotError(path, "actuators", f"expected {n} entries (one per joint), got {len(actuators)}")
    torque_limits = _floats(path, doc, "torque_limits", n)
    if np.any(torque_limits <= 0):
        raise RobotError(path, "torque_limits", "every limit must be > 0")
    nominal_pose = _floats(path, doc, "nominal_pose", n)

    feet_raw = doc["feet"]
    if not isinstance(feet_raw, list) or not feet_raw:
        raise RobotError(path, "feet", "expected a non-empty list of {name, site, geom}")
    feet = []
    for i, item in enumerate(feet_raw):
        field = f"feet[{i}]"
        if not isinstance(item, dict):
            raise RobotError(path, field, "expected a mapping {name, site, geom}")
        for key in ("name", "site", "geom"):
            if key not in item:
                raise RobotError(path, f"{field}.{key}", "required field missing")
        feet.append(Foot(*(_string(path, item, k, f"{field}.{k}") for k in ("name", "site", "geom"))))
    if len({f.name for f in feet}) != len(feet):
        raise RobotError(path, "feet", "foot names must be unique")

    fall_geoms = _names(path, doc, "fall_geoms")

    nominal_height = doc["nominal_height"]
    if isinstance(nominal_height, bool) or not isinstance(nominal_height, (int, float)) \
            or not math.isfinite(nominal_height) or nominal_height <= 0:
        raise RobotError(path, "nominal_height", f"expected a positive number of metres, got {nominal_height!r}")

    torque_limits.setflags(write=False)
    nominal_pose.setflags(write=False)
    manifest = RobotManifest(
        name=name, mjcf_path=mjcf_path, manifest_path=path, trunk=trunk, imu_site=imu_site,
        sensors=sensors, joints=joints, actuators=actuators, torque_limits=torque_limits,
        feet=tuple(feet), fall_geoms=fall_geoms, nominal_pose=nominal_pose,
        nominal_height=float(nominal_height),
    )
    _check_against_mjcf(manifest)
    return manifest


# --- field readers -------------------------------------------------------------------

def _string(path: Path, doc: dict, key: Any, field: str | None = None) -> str:
    value = doc[key]
    if not isinstance(value, str) or not value:
        raise RobotError(path, field or str(key), f"expected a non-empty string, got {value!r}")
    return value


def _names(path: Path, doc: dict, key: str) -> tuple[str, ...]:
    value = doc[key]
    if not isinstance(value, list) or not all(isinstance(v, str) and v for v in value):
        raise RobotError(path, key, "expected a list of names")
    return tuple(value)


def _floats(path: Path, doc: dict, key: str, n: int) -> np.ndarray:
    value = doc[key]
    if not isinstance(value, list) or not all(
            isinstance(v, (int, float)) and not isinstance(v, bool) for v in value):
        raise RobotError(path, key, "expected a list of numbers")
    if len(value) != n:
        raise RobotError(path, key, f"expected {n} entries (one per joint), got {len(value)}")
    arr = np.asarray(value, dtype=float)
    if not np.all(np.isfinite(arr)):
        raise RobotError(path, key, "entries must be finite")
    return arr


# --- cross-check with the compiled MJCF ----------------------------------------------

def _check_against_mjcf(man: RobotManifest) -> None:
    import mujoco  # local: keeps `import bench.robot.manifest` light

    path = man.manifest_path
    try:
        model = mujoco.MjSpec.from_file(str(man.mjcf_path)).compile()
    except Exception as exc:  # MuJoCo raises ValueError with its own parser message
        raise RobotError(path, "mjcf", f"MJCF {man.mjcf_path.name} does not compile: {exc}") from None

    def lookup(kind: mujoco.mjtObj, name: str, field: str, what: str) -> int:
        idx = mujoco.mj_name2id(model, kind, name)
        if idx < 0:
            raise RobotError(path, field, f"no {what} named {name!r} in {man.mjcf_path.name}")
        return idx

    trunk_id = lookup(mujoco.mjtObj.mjOBJ_BODY, man.trunk, "trunk", "body")
    free = [j for j in range(model.njnt) if model.jnt_bodyid[j] == trunk_id
            and int(model.jnt_type[j]) == int(mujoco.mjtJoint.mjJNT_FREE)]
    if not free:
        raise RobotError(path, "trunk", f"body {man.trunk!r} has no freejoint",
                         "the trunk must be the floating base")
    lookup(mujoco.mjtObj.mjOBJ_SITE, man.imu_site, "imu_site", "site")
    for role, sensor in man.sensors.items():
        lookup(mujoco.mjtObj.mjOBJ_SENSOR, sensor, f"sensors.{role}", "sensor")

    for i, (jname, aname) in enumerate(zip(man.joints, man.actuators)):
        jid = lookup(mujoco.mjtObj.mjOBJ_JOINT, jname, f"joints[{i}]", "joint")
        if int(model.jnt_type[jid]) not in (int(mujoco.mjtJoint.mjJNT_HINGE), int(mujoco.mjtJoint.mjJNT_SLIDE)):
            raise RobotError(path, f"joints[{i}]", f"joint {jname!r} must be a hinge or slide")
        aid = lookup(mujoco.mjtObj.mjOBJ_ACTUATOR, aname, f"actuators[{i}]", "actuator")
        if (int(model.actuator_trntype[aid]) != int(mujoco.mjtTrn.mjTRN_JOINT)
                or model.actuator_trnid[aid, 0] != jid):
            raise RobotError(path, f"actuators[{i}]",
                             f"actuator {aname!r} does not drive joint {jname!r}",
                             "actuators must be listed in the same order as joints")
        if model.jnt_limited[jid]:
            lo, hi = model.jnt_range[jid]
            if not lo - 1e-9 <= man.nominal_pose[i] <= hi + 1e-9:
                raise RobotError(path, f"nominal_pose[{i}]",
                                 f"{man.nominal_pose[i]} is outside the range [{lo}, {hi}] of joint {jname!r}")

    for i, foot in enumerate(man.feet):
        lookup(mujoco.mjtObj.mjOBJ_SITE, foot.site, f"feet[{i}].site", "site")
        lookup(mujoco.mjtObj.mjOBJ_GEOM, foot.geom, f"feet[{i}].geom", "geom")
    for i, gname in enumerate(man.fall_geoms):
        lookup(mujoco.mjtObj.mjOBJ_GEOM, gname, f"fall_geoms[{i}]", "geom")
