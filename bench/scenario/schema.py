"""Declarative definition of every scenario field (the single source of truth).

Each YAML mapping is a frozen dataclass whose attribute names are the YAML
keys. Each field is declared with `spec(...)`: its default (or required), a
doc string, its unit, and its range. The generic validator (`validate.py`)
and the JSON Schema generator (`jsonschema.py`) both read these definitions,
so they cannot drift apart.

Terrain pieces, disturbances and faults are one-key mappings in YAML
(`- slope: {...}`); their dataclasses carry a class attribute `kind` equal to
that key, and the `*_KINDS` tables list them (add a class there to add a kind).
Fault kinds are the exception: each is a module of its own registered in
`bench.faults` (a user's kind too), and `FAULT_KINDS` is a live view of that
registry.

Cross-field rules that a single field cannot express (a drop before an attach,
an event after the end, overlapping terrain) live in each class's
`_problems(ctx)` method, which yields `(relative_path, message, hint)`.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Iterator, Mapping
from pathlib import Path
from typing import Any, ClassVar, Literal, Union

from bench.faults.registry import SchemaTable
from bench.faults.sensors import SENSORS  # noqa: F401 - re-exported
from bench.scenario import criteria as criteria_registry
from bench.scenario.criteria import all_criteria, criterion_names, get_criterion, unit_of
from bench.fieldspec import AT as _AT
from bench.fieldspec import (  # noqa: F401 - re-exported: the schema's declaration vocabulary
    MAX_DURATION_S,
    MAX_HFIELD_CELLS,
    MAX_LIST_ITEMS,
    MAX_STAIR_RISE_M,
    Problem,
    spec,
)
from bench.fieldspec import frozen as _frozen
from bench.gaits import GAIT_HINTS

Vec3 = tuple[float, float, float]
Range2 = tuple[float, float]

# --------------------------------------------------------------------------- robot, ground, start


@_frozen
class RobotRef:
    """The robot: a bundled model name, or a manifest file of the user's own."""

    name: str | None = spec(None, doc="bundled robot name (models/<name>/manifest.yaml)")
    manifest: Path | None = spec(None, doc="robot manifest path, resolved relative to the scenario file")


@_frozen
class Ground:
    """The ground everywhere no terrain piece says otherwise."""

    friction: float = spec(0.8, doc="sliding friction coefficient", gt=0.0, le=5.0)


@_frozen
class Initial:
    """Trunk start pose on the start ground; joints start in the nominal pose."""

    x: float = spec(0.0, doc="start x", unit="m", ge=-100.0, le=100.0)
    y: float = spec(0.0, doc="start y", unit="m", ge=-100.0, le=100.0)
    yaw_deg: float = spec(0.0, doc="start heading about z", unit="deg", ge=-360.0, le=360.0)
    height_offset: float = spec(0.0, doc="extra height above the nominal standing height", unit="m",
                                ge=-0.1, le=1.0)


# --------------------------------------------------------------------------- terrain

_WIDTH = dict(doc="width across the path (y)", unit="m", gt=0.0, le=100.0)
_START = dict(doc="x where the piece starts", unit="m", ge=-1000.0, le=1000.0)
_LENGTH = dict(doc="horizontal length along x", unit="m", gt=0.0, le=1000.0)

STAIR_PRESETS: dict[str, tuple[float, float]] = {
    # (rise, run) in m: the steepest stairs a building code allows, rounded to the mm on the allowed side
    # (from memory: IRC R311.7.5.1 riser at most 7 3/4 in = 0.19685 m, R311.7.5.2 tread at least 10 in = 0.254 m;
    #  IBC 1011.5.2 riser 4 to 7 in = 0.1016 to 0.1778 m, tread at least 11 in = 0.2794 m)
    "irc-residential": (0.196, 0.254),
    "ibc-commercial": (0.177, 0.280),
}


class TerrainPiece:
    """Base of all terrain pieces: an x extent and the ground level change across it."""

    kind: ClassVar[str]
    start: float

    @property
    def length_x(self) -> float:
        return self.length  # type: ignore[attr-defined]

    @property
    def end(self) -> float:
        return self.start + self.length_x

    @property
    def level_change(self) -> float:
        """Ground level at the end minus ground level at the start, m."""
        return 0.0


@_frozen
class Slope(TerrainPiece):
    """A ramp; positive angle goes up along +x."""

    kind: ClassVar[str] = "slope"
    start: float = spec(**_START)
    length: float = spec(**_LENGTH)
    angle_deg: float = spec(doc="incline, positive goes up", unit="deg", ge=-45.0, le=45.0)
    width: float = spec(3.0, **_WIDTH)

    @property
    def level_change(self) -> float:
        return self.length * math.tan(math.radians(self.angle_deg))


@_frozen
class Stairs(TerrainPiece):
    """A flight of steps; `preset` fills rise and run from a building code."""

    kind: ClassVar[str] = "stairs"
    start: float = spec(**_START)
    steps: int = spec(doc="number of steps", ge=1, le=500)
    rise: float = spec(doc="height of one step (filled by preset)", unit="m", gt=0.0, le=MAX_STAIR_RISE_M,
                       required_unless="preset")
    run: float = spec(doc="depth of one step (filled by preset)", unit="m", gt=0.0, le=5.0,
                      required_unless="preset")
    direction: Literal["up", "down"] = spec("up", doc="up or down along +x")
    preset: Literal["irc-residential", "ibc-commercial"] | None = spec(
        None, doc="fill rise/run from a building code: " + ", ".join(
            f"{k} (rise {r} m, run {u} m)" for k, (r, u) in STAIR_PRESETS.items()))
    width: float = spec(3.0, **_WIDTH)

    @classmethod
    def _defaults(cls, raw: Mapping[str, Any]) -> dict[str, Any]:
        preset = raw.get("preset")
        if isinstance(preset, str) and preset in STAIR_PRESETS:
            rise, run = STAIR_PRESETS[preset]
            return {"rise": rise, "run": run}
        return {}

    @property
    def length_x(self) -> float:
        return self.steps * self.run

    @property
    def level_change(self) -> float:
        return self.steps * self.rise * (1.0 if self.direction == "up" else -1.0)


@_frozen
class Rough(TerrainPiece):
    """A heightfield of random bumps in [0, height] above the level."""

    kind: ClassVar[str] = "rough"
    start: float = spec(**_START)
    length: float = spec(**_LENGTH)
    width: float = spec(3.0, **_WIDTH)
    height: float = spec(doc="highest bump above the level", unit="m", gt=0.0, le=0.5)
    wavelength: float = spec(0.2, doc="mean distance between neighbouring bumps along a line", unit="m", gt=0.0, le=10.0)
    cell_size: float = spec(0.02, doc="heightfield resolution", unit="m", ge=0.005, le=0.5)
    seed: int | None = spec(None, doc="random seed of the bumps", ge=0, le=2**32 - 1,
                            default_doc="the scenario seed")

    def _problems(self, ctx: Any) -> Iterator[Problem]:
        if self.cell_size > self.wavelength:
            yield ("cell_size",), f"cell_size {self.cell_size:g} m is coarser than wavelength {self.wavelength:g} m", \
                "use a cell_size at most the wavelength"
        cells = math.ceil(self.length / self.cell_size) * math.ceil(self.width / self.cell_size)
        if cells > MAX_HFIELD_CELLS:
            yield ("cell_size",), f"heightfield would have {cells} cells, more than {MAX_HFIELD_CELLS}", \
                "use a larger cell_size or a shorter/narrower patch"

    def _finalize(self, ctx: Any) -> Rough:
        if self.seed is None and isinstance(ctx.top.get("seed"), int):
            return dataclasses.replace(self, seed=ctx.top["seed"])
        return self


@_frozen
class Blocks(TerrainPiece):
    """A row of blocks along x, each `heights[i]` above the level (stepping stones when gap > 0)."""

    kind: ClassVar[str] = "blocks"
    start: float = spec(**_START)
    heights: tuple[float, ...] = spec(doc="height of each block above the level", unit="m", ge=0.0, le=1.0,
                                      min_items=1)
    block_length: float = spec(0.3, doc="length of one block along x", unit="m", gt=0.0, le=10.0)
    gap: float = spec(0.0, doc="gap between blocks (down to the level)", unit="m", ge=0.0, le=10.0)
    width: float = spec(3.0, **_WIDTH)

    @property
    def length_x(self) -> float:
        n = len(self.heights)
        return n * self.block_length + (n - 1) * self.gap


@_frozen
class FrictionPatch(TerrainPiece):
    """A stretch of different friction (e.g. ice 0.1)."""

    kind: ClassVar[str] = "friction_patch"
    start: float = spec(**_START)
    length: float = spec(**_LENGTH)
    width: float = spec(3.0, **_WIDTH)
    friction: float = spec(doc="sliding friction coefficient", gt=0.0, le=5.0)


@_frozen
class SoftPatch(TerrainPiece):
    """A stretch of compliant ground (MuJoCo contact solref timeconst/dampratio)."""

    kind: ClassVar[str] = "soft_patch"
    start: float = spec(**_START)
    length: float = spec(**_LENGTH)
    width: float = spec(3.0, **_WIDTH)
    timeconst: float = spec(0.05, doc="contact time constant (larger is softer)", unit="s", gt=0.0, le=1.0)
    dampratio: float = spec(1.0, doc="contact damping ratio", gt=0.0, le=10.0)

    def _problems(self, ctx: Any) -> Iterator[Problem]:
        dt = ctx.top.get("timestep")
        if isinstance(dt, float) and self.timeconst < 2 * dt:
            yield ("timeconst",), f"timeconst {self.timeconst:g} s is shorter than 2 timesteps ({2 * dt:g} s)", \
                "MuJoCo would silently stiffen it; use at least twice the timestep"


TERRAIN_KINDS: dict[str, type] = {c.kind: c for c in (Slope, Stairs, Rough, Blocks, FrictionPatch, SoftPatch)}
AnyTerrain = Union[Slope, Stairs, Rough, Blocks, FrictionPatch, SoftPatch]


def _terrain_order(items: list[tuple[int, Any]]) -> Iterator[Problem]:
    prev = None
    for i, piece in items:
        if prev is not None:
            j, before = prev
            if piece.start < before.start:
                yield (i, piece.kind, "start"), (
                    f"terrain pieces must be listed in order of start: {piece.start:g} m comes after "
                    f"terrain.{j} ({before.kind}) starting at {before.start:g} m"), "reorder the list"
            elif piece.start < before.end - 1e-9:
                yield (i, piece.kind, "start"), (
                    f"{piece.kind} starting at {piece.start:g} m overlaps terrain.{j} ({before.kind}, "
                    f"{before.start:g} to {before.end:g} m)"), f"start it at {before.end:g} m or later"
        prev = (i, piece)


# --------------------------------------------------------------------------- payloads



@_frozen
class Drain:
    """Mass leaving the payload linearly (a leaking tank)."""

    at: float = spec(**{**_AT, "doc": "time the drain starts"})
    duration: float = spec(doc="time to reach final_mass", unit="s", gt=0.0, le=MAX_DURATION_S)
    final_mass: float = spec(doc="mass when drained", unit="kg", ge=0.0, le=1000.0)


@_frozen
class MassStep:
    """A sudden change of payload mass."""

    at: float = spec(**{**_AT, "doc": "time of the change"})
    mass: float = spec(doc="new mass", unit="kg", ge=0.0, le=1000.0)


_SHIFTING_DEFAULTS = {"axis": "x", "stiffness": 400.0, "damping": 4.0, "travel": 0.05}
_TRAY_DEFAULTS = {"damping": 2.0, "travel": 0.1}


@_frozen
class Payload:
    """A load carried on the trunk: rigid, shifting along an axis on a spring, or sliding on a tray."""

    name: str = spec(doc="unique name (addresses it in dotted paths: payloads.<name>.mass)")
    type: Literal["rigid", "shifting", "tray"] = spec("rigid", doc="how the load moves on the trunk")
    mass: float = spec(doc="mass", unit="kg", gt=0.0, le=1000.0)
    size: Vec3 = spec(doc="box full lengths x, y, z", unit="m", gt=0.0, le=5.0)
    offset: Vec3 = spec((0.0, 0.0, 0.0), doc="box centre in the trunk frame", unit="m", ge=-2.0, le=2.0)
    attach_at: float | None = spec(None, **{**_AT, "doc": "time it is put on (null: from the start)"})
    drop_at: float | None = spec(None, **{**_AT, "doc": "time it falls off (null: never)"})
    drain: Drain | None = spec(None, doc="linear mass loss")
    steps: tuple[MassStep, ...] | None = spec(None, doc="sudden mass changes, in time order", min_items=1)
    axis: Literal["x", "y", "z"] | None = spec(None, doc="sliding axis (shifting)", default_doc="x for shifting")
    stiffness: float | None = spec(None, doc="centring spring (shifting)", unit="N/m", ge=0.0, le=1e6,
                                   default_doc="400 for shifting")
    damping: float | None = spec(None, doc="sliding damping (shifting, tray)", unit="N s/m", ge=0.0, le=1e5,
                                 default_doc="4 for shifting, 2 for tray")
    travel: float | None = spec(None, doc="half-range to the end stop (shifting, tray)", unit="m", gt=0.0, le=1.0,
                                default_doc="0.05 for shifting, 0.1 for tray")

    def _problems(self, ctx: Any) -> Iterator[Problem]:
        if self.name.isdigit():
            yield ("name",), f"payload name {self.name!r} is all digits", \
                "dotted paths would read it as a list index; use a word such as 'crate'"
        allowed = {"rigid": set(), "shifting": set(_SHIFTING_DEFAULTS), "tray": set(_TRAY_DEFAULTS)}[self.type]
        for key in ("axis", "stiffness", "damping", "travel"):
            if getattr(self, key) is not None and key not in allowed:
                users = [t for t, d in (("shifting", _SHIFTING_DEFAULTS), ("tray", _TRAY_DEFAULTS)) if key in d]
                yield (key,), f"{key!r} does not apply to a {self.type} payload", \
                    f"only for type {' or '.join(users)}"
        if self.attach_at is not None and self.drop_at is not None and self.drop_at <= self.attach_at:
            yield ("drop_at",), f"drop_at {self.drop_at:g} s is not after attach_at {self.attach_at:g} s", \
                "a payload must be attached before it can drop"
        if self.drain is not None and self.steps is not None:
            yield ("steps",), "a payload has either drain or steps, not both", None
        if self.drain is not None:
            if self.drain.final_mass > self.mass:
                yield ("drain", "final_mass"), f"final_mass {self.drain.final_mass:g} kg is more than mass " \
                    f"{self.mass:g} kg", "a drain only removes mass"
            if self.attach_at is not None and self.drain.at < self.attach_at:
                yield ("drain", "at"), f"drain starts at {self.drain.at:g} s, before attach_at {self.attach_at:g} s", None
            if self.drop_at is not None and self.drain.at >= self.drop_at:
                yield ("drain", "at"), f"drain starts at {self.drain.at:g} s, after drop_at {self.drop_at:g} s", None
        if self.steps is not None:
            for k in range(1, len(self.steps)):
                if self.steps[k].at <= self.steps[k - 1].at:
                    yield ("steps", k, "at"), f"steps must be in increasing time: {self.steps[k].at:g} s after " \
                        f"{self.steps[k - 1].at:g} s", None
            for k, step in enumerate(self.steps):
                if self.drop_at is not None and step.at >= self.drop_at:
                    yield ("steps", k, "at"), f"mass step at {step.at:g} s is after drop_at {self.drop_at:g} s", None
                if self.attach_at is not None and step.at < self.attach_at:
                    yield ("steps", k, "at"), f"mass step at {step.at:g} s is before attach_at {self.attach_at:g} s", None

    def _finalize(self, ctx: Any) -> Payload:
        defaults = {"shifting": _SHIFTING_DEFAULTS, "tray": _TRAY_DEFAULTS}.get(self.type, {})
        fill = {k: v for k, v in defaults.items() if getattr(self, k) is None}
        return dataclasses.replace(self, **fill) if fill else self


def _payload_names(items: list[tuple[int, Any]]) -> Iterator[Problem]:
    seen: dict[str, int] = {}
    for i, p in items:
        if p.name in seen:
            yield (i, "name"), f"duplicate payload name {p.name!r} (also payloads.{seen[p.name]})", \
                "payload names must be unique"
        else:
            seen[p.name] = i


# --------------------------------------------------------------------------- disturbances

_FORCE = dict(doc="force in the world frame", unit="N", ge=-1e4, le=1e4)
_POINT = dict(doc="application point in the trunk frame", unit="m", ge=-2.0, le=2.0)


@_frozen
class Push:
    """A short force on the trunk."""

    kind: ClassVar[str] = "push"
    at: float = spec(**{**_AT, "doc": "start time"})
    duration: float = spec(doc="how long the force lasts", unit="s", gt=0.0, le=MAX_DURATION_S)
    force: Vec3 = spec(**_FORCE)
    point: Vec3 = spec((0.0, 0.0, 0.0), **_POINT)


@_frozen
class PushTrain:
    """`count` pushes at random times in [start, end], drawn with the scenario seed."""

    kind: ClassVar[str] = "push_train"
    start: float = spec(doc="window start", unit="s", ge=0.0, le=MAX_DURATION_S, time="event")
    end: float = spec(doc="window end", unit="s", gt=0.0, le=MAX_DURATION_S, time="end")
    count: int = spec(doc="number of pushes", ge=1, le=MAX_LIST_ITEMS)
    magnitude: Range2 = spec(doc="force magnitude range [lo, hi]", unit="N", ge=0.0, le=1e4)
    duration: Range2 = spec(doc="push duration range [lo, hi]", unit="s", gt=0.0, le=10.0)
    direction: Literal["horizontal", "any"] = spec("horizontal", doc="random direction in the xy plane or in 3D")
    point: Vec3 = spec((0.0, 0.0, 0.0), **_POINT)

    def _problems(self, ctx: Any) -> Iterator[Problem]:
        if self.end <= self.start:
            yield ("end",), f"end {self.end:g} s is not after start {self.start:g} s", None
        for key in ("magnitude", "duration"):
            lo, hi = getattr(self, key)
            if lo > hi:
                yield (key,), f"range [{lo:g}, {hi:g}] has lo > hi", "write [lo, hi]"


@_frozen
class SteadyForce:
    """A constant force from `at` for `duration` (null: until the end)."""

    kind: ClassVar[str] = "steady_force"
    at: float = spec(**{**_AT, "doc": "start time"})
    duration: float | None = spec(None, doc="how long (null: until the end)", unit="s", gt=0.0, le=MAX_DURATION_S)
    force: Vec3 = spec(**_FORCE)
    point: Vec3 = spec((0.0, 0.0, 0.0), **_POINT)


DISTURBANCE_KINDS: dict[str, type] = {c.kind: c for c in (Push, PushTrain, SteadyForce)}
AnyDisturbance = Union[Push, PushTrain, SteadyForce]

# --------------------------------------------------------------------------- faults


class AnyFault:
    """One item of `faults:`: a one-key mapping naming a kind from the fault registry (`bench.faults`)."""


#: Fault kind -> schema class, a live view of the registry (built-ins and plugins alike).
FAULT_KINDS = SchemaTable()

# --------------------------------------------------------------------------- commands


@_frozen
class Command:
    """A body-frame velocity command held until the next one."""

    at: float = spec(**{**_AT, "doc": "time the command starts"})
    vx: float = spec(0.0, doc="forward velocity", unit="m/s", ge=-10.0, le=10.0)
    vy: float = spec(0.0, doc="sideways velocity", unit="m/s", ge=-10.0, le=10.0)
    yaw_rate: float = spec(0.0, doc="turn rate", unit="rad/s", ge=-20.0, le=20.0)
    gait: Literal[GAIT_HINTS] | None = spec(
        None, doc="gait hint handed to the controller (obs.gait_hint), held until a later command sets "
                  "another; a controller may ignore it", default_doc="the previous command's hint; none at first")


def _commands_sorted(items: list[tuple[int, Any]]) -> Iterator[Problem]:
    for (_, a), (i, b) in zip(items, items[1:]):
        if b.at <= a.at:
            yield (i, "at"), f"commands must be in increasing time: {b.at:g} s comes after {a.at:g} s", None


# --------------------------------------------------------------------------- sensing

#: Most points a height scan may have (the grid is cast every scan; see `bench.sim.sensing`).
MAX_SCAN_POINTS = 20_000


def scan_axis_points(extent_m: float, resolution_m: float) -> int:
    """Points along one side of a height-scan grid: every `resolution_m` across `extent_m`, both ends
    included (a spacing that does not divide the extent leaves the rest out, centred)."""
    return int(math.floor(extent_m / resolution_m + 1e-9)) + 1


def _whole_ticks(value_s: float, control_rate: float) -> float:
    """How far `value_s` is from a whole number of control ticks, in ticks."""
    ticks = value_s * control_rate
    return abs(ticks - round(ticks))


@_frozen
class HeightScan:
    """A grid of terrain heights around the trunk, yaw-aligned, from vertical rays against the terrain only."""

    size: Range2 = spec(doc="grid extent [length along the heading, width to the left]", unit="m",
                        ge=0.0, le=20.0)
    resolution: float = spec(doc="spacing between neighbouring points", unit="m", ge=0.005, le=5.0)
    offset: Range2 = spec((0.0, 0.0), doc="grid centre from the trunk origin, yaw-aligned [forward, left]",
                          unit="m", ge=-10.0, le=10.0)
    noise: float = spec(0.0, doc="standard deviation of Gaussian noise on each height", unit="m", ge=0.0, le=1.0)
    dropout: float = spec(0.0, doc="probability that a point is missing in a scan (it then reads nan)",
                          ge=0.0, le=1.0)
    rate: float | None = spec(None, doc="scans per second, held between scans; control_rate / rate must be a "
                              "whole number", unit="Hz", gt=0.0, le=10_000.0, default_doc="every control tick")
    latency: float = spec(0.0, doc="delay from a scan to the controller seeing it; a whole number of control "
                          "ticks", unit="s", ge=0.0, le=10.0)

    @property
    def shape(self) -> tuple[int, int]:
        """(points along the heading, points to the left)."""
        return (scan_axis_points(self.size[0], self.resolution), scan_axis_points(self.size[1], self.resolution))

    def _problems(self, ctx: Any) -> Iterator[Problem]:
        nx, ny = self.shape
        if nx * ny > MAX_SCAN_POINTS:
            yield ("resolution",), f"height scan would have {nx} x {ny} = {nx * ny} points, more than " \
                f"{MAX_SCAN_POINTS}", "use a coarser resolution or a smaller size"
        rate = ctx.top.get("control_rate")
        if not isinstance(rate, float):
            return
        if self.rate is not None:
            if self.rate > rate:
                yield ("rate",), f"rate {self.rate:g} Hz is faster than the control rate {rate:g} Hz", \
                    f"use at most {rate:g} Hz (or leave rate out: every control tick)"
            elif _whole_ticks(1.0 / self.rate, rate) > 1e-6:
                good = [rate / n for n in range(1, 1001) if abs(rate / n - round(rate / n, 6)) < 1e-9]
                near = sorted(good, key=lambda hz: abs(hz - self.rate))[:2]
                yield ("rate",), f"rate {self.rate:g} Hz is not the control rate {rate:g} Hz divided by a whole " \
                    "number", "e.g. rate " + " or ".join(f"{hz:g} Hz" for hz in sorted(near, reverse=True))
        if _whole_ticks(self.latency, rate) > 1e-6:
            tick = 1.0 / rate
            lo = math.floor(self.latency * rate) * tick
            yield ("latency",), f"latency {self.latency:g} s is not a whole number of control ticks " \
                f"({tick:g} s at {rate:g} Hz)", f"e.g. latency {lo:g} s or {lo + tick:g} s"


@_frozen
class FootForce:
    """Measured ground reaction force per foot."""

    mode: Literal["normal", "3d"] = spec("normal", doc="normal: the force along the contact normal, one "
                                         "number per foot; 3d: the force vector in world axes")
    noise: float = spec(0.0, doc="standard deviation of Gaussian noise on each component", unit="N",
                        ge=0.0, le=10_000.0)


@_frozen
class JointTorque:
    """Measured joint torque: the torque the actuators applied, after the bench's motor faults."""

    noise: float = spec(0.0, doc="standard deviation of Gaussian noise on each joint", unit="N m",
                        ge=0.0, le=10_000.0)


@_frozen
class Sensing:
    """What the controller senses beyond the IMU, the encoders and the contact flags."""

    privileged: bool = spec(True, doc="give the controller the true trunk position and velocity "
                            "(obs.privileged); false: obs.privileged is None")
    height_scan: HeightScan | None = spec(None, doc="terrain height grid around the trunk (obs.height_scan)")
    foot_force: FootForce | None = spec(None, doc="measured foot forces (obs.foot_force)")
    joint_torque: JointTorque | None = spec(None, doc="measured joint torques (obs.joint_torque)")

    @property
    def any_sensor(self) -> bool:
        """True when a sensor beyond today's set is on (the episode then runs the sensing step)."""
        return self.height_scan is not None or self.foot_force is not None or self.joint_torque is not None


# --------------------------------------------------------------------------- criteria


#: Default start of the scoring window, s (skips the first settling of the stance).
DEFAULT_SCORE_FROM_S = 0.5


def _parse_criteria(v: Any, raw: Any, path: tuple) -> Any:
    """criterion name -> limit, checked against the criteria registry (`bench.scenario.criteria`).

    A criterion whose limit is not a number or true/false (the gait windows of ``gait``) converts and checks it
    itself: its ``parse(validator, raw, path)`` returns the value or ``validator.INVALID`` after reporting, and
    its ``json_schema()`` gives the JSON Schema of that value.
    """
    if raw is None:
        return {}
    if not isinstance(raw, dict):
        return v.fail(path, f"expected a mapping of criterion name -> limit, got {v.describe(raw)}",
                      "e.g. criteria: {no_fall: true, drift_max: 0.3}")
    out: dict[str, float | bool] = {}
    ok = True
    for name, value in raw.items():
        p = path + (name,)
        if name not in criterion_names():
            v.unknown_key(p, name, criterion_names())
            ok = False
            continue
        info = get_criterion(name)
        if info is None:
            v.fail(p, f"criterion {name!r} cannot be loaded: {criteria_registry.load_errors.get(name, 'unknown')}",
                   "check the package that registers it (entry point group bench.criteria)", at_key=True)
            ok = False
            continue
        if value is None:  # lets a file that extends another drop an inherited criterion
            continue
        if callable(getattr(info, "parse", None)):   # a criterion whose limit is not one number (gait windows)
            got = info.parse(v, value, p)
            if got is v.INVALID:
                ok = False
            else:
                out[name] = got
            continue
        if getattr(info, "boolean", False):
            if not isinstance(value, bool):
                v.fail(p, f"{name} is a yes/no criterion: expected true or false, got {v.describe(value)}")
                ok = False
            elif value:
                out[name] = True
            continue
        got = v.convert(float, value, p, {"ge": getattr(info, "ge", None), "le": getattr(info, "le", None),
                                          "unit": unit_of(info)})
        if got is v.INVALID:
            ok = False
        else:
            out[name] = got
    return out if ok else v.INVALID


def _criteria_json() -> dict:
    props = {}
    for name, info in all_criteria().items():
        unit = unit_of(info)
        desc = str(getattr(info, "description", "")) + (f" [{unit}]" if unit else "")
        if callable(getattr(info, "json_schema", None)):
            props[name] = info.json_schema()
        elif getattr(info, "boolean", False):
            props[name] = {"description": desc, "type": ["boolean", "null"]}
        else:
            s: dict[str, Any] = {"description": desc, "type": ["number", "null"]}
            if getattr(info, "ge", None) is not None:
                s["minimum"] = info.ge
            if getattr(info, "le", None) is not None:
                s["maximum"] = info.le
            props[name] = s
    return {"type": ["object", "null"], "properties": props, "additionalProperties": False}


# --------------------------------------------------------------------------- robot, trials


def _parse_robot(v: Any, raw: Any, path: tuple) -> Any:
    if isinstance(raw, str):
        if (not raw or not all(c.isalnum() or c in "._-" for c in raw) or raw.startswith(".")
                or raw.lower().endswith((".yaml", ".yml"))):   # a file name would be looked up as a path
            return v.fail(path, f"robot name {raw!r} is not a bundled model name",
                          "use a name such as quad12, or {manifest: path/to/manifest.yaml}")
        return RobotRef(name=raw, manifest=None)
    if isinstance(raw, dict):
        extra = [k for k in raw if k != "manifest"]
        for k in extra:
            v.unknown_key(path + (k,), k, ["manifest"])
        if "manifest" not in raw:
            return v.fail(path, "missing required field 'manifest'", "robot: {manifest: path/to/manifest.yaml}",
                          field=path + ("manifest",))
        m = raw["manifest"]
        if not isinstance(m, str) or not m:
            return v.fail(path + ("manifest",), f"expected a file path, got {v.describe(m)}")
        if extra:
            return v.INVALID
        file = v.file_of(path + ("manifest",))
        manifest = (Path(file).parent / m) if file else Path(m)
        if not manifest.is_file():
            return v.fail(path + ("manifest",), f"robot manifest {str(manifest)!r} not found",
                          "the path is relative to the scenario file")
        return RobotRef(name=None, manifest=manifest)
    return v.fail(path, f"expected a robot name or {{manifest: path}}, got {v.describe(raw)}")


@_frozen
class Uniform:
    """A trial value drawn uniformly from [lo, hi]."""

    lo: float
    hi: float


@_frozen
class Choice:
    """A trial value drawn from a list."""

    values: tuple


def _parse_randomize(v: Any, raw: Any, path: tuple) -> Any:
    if raw is None:
        return {}
    if not isinstance(raw, dict):
        return v.fail(path, f"expected a mapping of dotted.path -> [lo, hi] or {{choice: [...]}}, "
                      f"got {v.describe(raw)}")
    out: dict[str, Uniform | Choice] = {}
    ok = True
    for key, value in raw.items():
        p = path + (key,)
        if isinstance(value, dict):
            if set(value) != {"choice"}:
                for k in value:
                    if k != "choice":
                        v.unknown_key(p + (k,), k, ["choice"])
                if "choice" not in value:
                    v.fail(p, "missing required field 'choice'", "write {choice: [a, b, c]}", field=p + ("choice",))
                ok = False
                continue
            choices = value["choice"]
            if not isinstance(choices, list) or not choices:
                v.fail(p + ("choice",), f"expected a non-empty list, got {v.describe(choices)}")
                ok = False
                continue
            out[key] = Choice(values=tuple(choices))
        else:
            pair = v.convert(Range2, value, p, {})
            if pair is v.INVALID:
                ok = False
                continue
            if pair[0] > pair[1]:
                v.fail(p, f"range [{pair[0]:g}, {pair[1]:g}] has lo > hi", "write [lo, hi]")
                ok = False
                continue
            out[key] = Uniform(lo=pair[0], hi=pair[1])
    return out if ok else v.INVALID


_NUMBER_PAIR = {"type": "array", "prefixItems": [{"type": "number"}, {"type": "number"}],
                "minItems": 2, "maxItems": 2, "items": False}

# --------------------------------------------------------------------------- the scenario


def _list(check: Any = None, **kw: Any) -> Any:
    """A list field (stored as a tuple); `check(items)` sees the valid `(index, item)` pairs."""
    return spec((), check=check, **kw)


@_frozen
class Scenario:
    """One validated scenario (a matrix variant or a trial is a Scenario of its own).

    YAML fields are declared with `spec`; `id`, `slug`, `source`, `content_hash`,
    `document`, `variant` and `locations` are filled by the loader.
    """

    # computed attributes (not YAML keys)
    id: str = spec("", doc="readable id: name plus [label=value,...] for variants", yaml=False)
    slug: str = spec("", doc="id made filesystem-safe ([A-Za-z0-9._-]): result folder name", yaml=False)
    source: str = spec("", doc="path of the scenario file as given", yaml=False)
    content_hash: str = spec("", doc="sha256 of the merged document as canonical JSON", yaml=False)
    document: dict = spec(None, default_factory=dict, doc="merged raw document (for derive)", yaml=False)
    variant: dict = spec(None, default_factory=dict, doc="matrix/trial labels -> values", yaml=False)
    locations: Any = dataclasses.field(default=None, repr=False, compare=False,
                                       metadata={"yaml": False, "doc": "value path -> file:line:col"})

    # YAML keys, in validation order (time scale first: later checks use it)
    duration: float = spec(doc="episode length", unit="s", gt=0.0, le=MAX_DURATION_S)
    timestep: float = spec(0.001, doc="physics timestep", unit="s", ge=1e-4, le=0.01)
    control_rate: float = spec(500.0, doc="controller rate; 1/(timestep*control_rate) must be an integer",
                               unit="Hz", gt=0.0, le=10_000.0)
    seed: int = spec(0, doc="random seed (push trains, rough terrain, trials)", ge=0, le=2**32 - 1)
    name: str = spec(doc="scenario name (its id, before any variant suffix)")
    description: str = spec("", doc="what the scenario tests")
    tags: tuple[str, ...] = spec((), doc="free labels for selecting scenarios")
    robot: RobotRef = spec(RobotRef(name="quad12"), doc="a bundled robot name (quad12) or {manifest: path}",
                           parse=_parse_robot, json={"anyOf": [
                               {"type": "string", "pattern": "^[A-Za-z0-9_-][A-Za-z0-9._-]*$"},
                               {"type": "object", "properties": {"manifest": {"type": "string"}},
                                "required": ["manifest"], "additionalProperties": False}]})
    ground: Ground = spec(Ground(), doc="ground outside terrain pieces")
    initial: Initial = spec(Initial(), doc="trunk start pose")
    score_from: float | None = spec(None, doc="error metrics are computed over t >= score_from "
                                    "(default 0.5 s, or half the duration when that is shorter)", unit="s", ge=0.0,
                                    le=MAX_DURATION_S)
    terrain: tuple[AnyTerrain, ...] = _list(_terrain_order, doc="terrain pieces along +x, in order of start")
    payloads: tuple[Payload, ...] = _list(_payload_names, doc="loads carried on the trunk")
    disturbances: tuple[AnyDisturbance, ...] = _list(doc="external forces on the trunk")
    faults: tuple[AnyFault, ...] = _list(doc="actuator and sensor faults")
    commands: tuple[Command, ...] = _list(_commands_sorted, doc="velocity commands (zero until the first)")
    sensing: Sensing = spec(Sensing(), doc="extra sensors and whether the controller sees the true state")
    criteria: dict = spec(None, default_factory=dict, doc="criterion name -> limit (or true)",
                          parse=_parse_criteria, json={"$ref": "#/$defs/criteria"})
    trials: int = spec(1, doc="number of trials (each a derived scenario with its own seed)", ge=1, le=10_000)
    randomize: dict = spec(None, default_factory=dict,
                           doc="dotted.path -> [lo, hi] or {choice: [...]}, drawn per trial",
                           parse=_parse_randomize, json={
                               "type": ["object", "null"], "additionalProperties": {"anyOf": [
                                   _NUMBER_PAIR,
                                   {"type": "object", "properties": {"choice": {"type": "array", "minItems": 1}},
                                    "required": ["choice"], "additionalProperties": False}]}})

    @property
    def score_from_s(self) -> float:
        """Start of the scoring window: ``score_from`` as written, else 0.5 s or half the duration."""
        if self.score_from is not None:
            return float(self.score_from)
        return min(DEFAULT_SCORE_FROM_S, self.duration / 2.0)

    @property
    def substeps(self) -> int:
        """Physics steps per control tick."""
        return max(1, round(1.0 / (self.timestep * self.control_rate)))

    @property
    def control_dt(self) -> float:
        return self.substeps * self.timestep

    def error(self, field: str, message: str, hint: str | None = None):
        """A `ScenarioError` located at the dotted `field` (for later stages, e.g. an unknown joint name).

        `field` is a dotted path as in `matrix:` (`faults.0.lock.joint`, `payloads.crate.mass`); a field
        that was not written (a default) is located at its nearest written parent.
        """
        from bench.errors import ScenarioError
        from bench.scenario.paths import resolve_path

        try:
            parts = resolve_path(self.document, field) if field else ()
        except ScenarioError:  # not in the document (a default): fall back to the nearest written parent
            parts = tuple(int(p) if p.isdigit() else p for p in field.split("."))
        loc = self.locations.value(parts) if self.locations is not None else None
        if loc is None:
            return ScenarioError(self.source, 1, 1, field, message, hint)
        return ScenarioError(loc.file, loc.line, loc.col, field, message, hint)

    @staticmethod
    def _value_problems(values: dict[str, Any]) -> Iterator[Problem]:
        """Checks on top-level values; run even when other fields are invalid (so all errors show at once)."""
        duration, score_from = values.get("duration"), values.get("score_from")
        if duration is not None and score_from is not None and score_from >= duration:
            # a default never fails this: it shrinks to half of a short duration
            yield ("score_from",), f"score_from {score_from:g} s is not before the end of the scenario " \
                f"(duration {duration:g} s)", "set score_from below the duration"
        timestep, rate = values.get("timestep"), values.get("control_rate")
        if timestep is None or rate is None:
            return
        ratio = 1.0 / (timestep * rate)
        if abs(ratio - round(ratio)) > 1e-6 * max(1.0, ratio) or round(ratio) < 1:
            yield ("control_rate",), (
                f"control_rate {rate:g} Hz with timestep {timestep:g} s gives "
                f"{ratio:.4g} physics steps per control tick, not a whole number"), _rate_hint(timestep, ratio)


def _rate_hint(timestep: float, ratio: float) -> str:
    """Suggest the whole-number control rates nearest to the asked one."""
    physics_hz = 1.0 / timestep
    good = []
    for n in range(1, 1001):
        hz = physics_hz / n
        if abs(hz - round(hz)) < 1e-9 * physics_hz:
            good.append((abs(n - ratio), round(hz)))
    if not good:
        return f"use 1/timestep divided by a whole number ({physics_hz:g} Hz / n)"
    best = sorted(sorted(good)[:2], key=lambda g: -g[1])
    return "e.g. control_rate " + " or ".join(f"{hz} Hz" for _, hz in best)


# The validator's hooks, by class: which classes are one-key unions and what their table is.
UNIONS: dict[Any, dict[str, type]] = {
    AnyTerrain: TERRAIN_KINDS,
    AnyDisturbance: DISTURBANCE_KINDS,
    AnyFault: FAULT_KINDS,
}
