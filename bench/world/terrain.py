"""Terrain: scenario terrain pieces -> MuJoCo geoms plus an exact ground-height query.

Pieces are laid along +x in order of their ``start``. Each piece begins at the
current ground level (0 at the origin) and the ground continues flat at the
level the piece ends at. With no pieces the ground is an infinite plane at z=0.
With pieces, every section is a box (or a heightfield) sitting on a catch-all
plane well below the lowest level, so that a patch's friction or softness is
never mixed with the plane's.

Each piece kind is a builder registered with :func:`terrain_piece`; the
built-ins are registered exactly as an extension would register its own.
Terrain geoms get ``priority=1`` so that their friction and contact softness,
not the robot's, decide a contact (MuJoCo's geom priority rule).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Callable

import mujoco
import numpy as np

BOX = mujoco.mjtGeom.mjGEOM_BOX
PLANE = mujoco.mjtGeom.mjGEOM_PLANE
HFIELD = mujoco.mjtGeom.mjGEOM_HFIELD

#: Thickness of section boxes below their top surface, m.
SECTION_DEPTH_M = 1.0
#: Length of the flat run-in before the first piece and run-out after the last, m.
RUN_OUT_M = 30.0
#: Width of the run-in and run-out sections, m (pieces use their own width).
RUN_OUT_WIDTH_M = 20.0
#: Stretches of ground shorter than this along x get no geom (MuJoCo refuses a box of size 0, and
#: a valid length such as 1e-300 m is 0 once added to a start); their height still counts.
MIN_GEOM_LENGTH_M = 1e-9
#: Slopes gentler than this (but not flat) hang their box on a fixed body of their own (see ``_slope``).
#: MuJoCo 4.0.0 drops a geom rotation of 1e-4 deg (quaternion part 8.7e-7) and keeps 3e-4 deg (2.6e-6),
#: measured with ``geom_sameframe``; this bound is 0.01 deg (8.7e-5), far from either.
BODY_FRAME_SLOPE_DEG = 0.01

TERRAIN_RGBA = (0.52, 0.55, 0.50, 1.0)
STEP_RGBA = (0.62, 0.58, 0.50, 1.0)
ICE_RGBA = (0.70, 0.86, 0.95, 1.0)
SOFT_RGBA = (0.45, 0.36, 0.25, 1.0)


@dataclass
class Section:
    """One stretch of the height profile: ``height(x, y)`` valid on ``[x0, x1)``."""

    x0: float
    x1: float
    height: Callable[[np.ndarray, np.ndarray], np.ndarray]
    kind: str


@dataclass
class TerrainContext:
    """What a piece builder may touch: the spec's world body and the profile so far."""

    spec: mujoco.MjSpec
    friction: float
    level: float = 0.0
    sections: list[Section] = field(default_factory=list)
    geom_names: list[str] = field(default_factory=list)
    counter: int = 0

    def name(self, kind: str) -> str:
        self.counter += 1
        return f"terrain_{self.counter:02d}_{kind}"

    def box(self, kind: str, x0: float, x1: float, top: float, width: float,
            rgba=TERRAIN_RGBA, friction: float | None = None, solref=None,
            y_center: float = 0.0, depth: float = SECTION_DEPTH_M) -> str:
        """Add an axis-aligned box spanning x in [x0, x1] whose top surface is at ``top`` (none if too short)."""
        if not x1 - x0 >= MIN_GEOM_LENGTH_M:
            return ""
        name = self.name(kind)
        mu = self.friction if friction is None else friction
        g = self.spec.worldbody.add_geom(
            name=name, type=BOX,
            size=[(x1 - x0) / 2.0, width / 2.0, depth / 2.0],
            pos=[(x0 + x1) / 2.0, y_center, top - depth / 2.0],
            rgba=list(rgba), friction=[mu, 0.005, 0.0001], priority=1, contype=1, conaffinity=3,
        )
        if solref is not None:
            g.solref = list(solref)
        self.geom_names.append(name)
        return name


PieceBuilder = Callable[[object, TerrainContext], None]
_builders: dict[str, PieceBuilder] = {}


def terrain_piece(kind: str) -> Callable[[PieceBuilder], PieceBuilder]:
    """Register a builder for terrain pieces whose ``kind`` is ``kind``."""

    def deco(fn: PieceBuilder) -> PieceBuilder:
        _builders[kind] = fn
        return fn

    return deco


def registered_pieces() -> list[str]:
    return sorted(_builders)


def _flat(level: float) -> Callable[[np.ndarray, np.ndarray], np.ndarray]:
    return lambda x, y: np.full(np.shape(x), level, dtype=float)


def _piece_end(piece) -> float:
    kind = piece.kind
    if kind == "stairs":
        return piece.start + piece.steps * piece.run
    if kind == "blocks":
        n = len(piece.heights)
        return piece.start + n * piece.block_length + max(n - 1, 0) * piece.gap
    return piece.start + piece.length


@terrain_piece("slope")
def _slope(piece, ctx: TerrainContext) -> None:
    a = math.radians(piece.angle_deg)
    x0, x1 = piece.start, piece.start + piece.length
    z0 = ctx.level
    rise = piece.length * math.tan(a)
    t = math.tan(a)
    ctx.sections.append(Section(x0, x1, lambda x, y, z0=z0, x0=x0, t=t: z0 + (np.asarray(x) - x0) * t, "slope"))
    ctx.level = z0 + rise
    if not x1 - x0 >= MIN_GEOM_LENGTH_M:
        return
    name = ctx.name("slope")
    half_len = piece.length / (2.0 * math.cos(a))
    # A box tilted about y whose top face runs exactly from (x0, z0) to (x1, z0 + rise).
    cx, cz = (x0 + x1) / 2.0, z0 + rise / 2.0
    d = SECTION_DEPTH_M / 2.0
    # Shift the centre down along the surface normal so the top face is the slope.
    nx, nz = -math.sin(a), math.cos(a)
    quat = [math.cos(-a / 2.0), 0.0, math.sin(-a / 2.0), 0.0]
    pos = [cx - nx * d, 0.0, cz - nz * d]
    holder, frame = ctx.spec.worldbody, dict(pos=pos, quat=quat)
    if a != 0.0 and abs(piece.angle_deg) < BODY_FRAME_SLOPE_DEG:
        # MuJoCo's compiler takes a geom rotation this close to none for none (the geom then shares its
        # body's frame: a flat box half-way up); a fixed body of its own keeps the rotation.
        holder, frame = ctx.spec.worldbody.add_body(name=name, **frame), {}
    holder.add_geom(
        name=name, type=BOX, size=[half_len, piece.width / 2.0, d], **frame,
        rgba=list(TERRAIN_RGBA), friction=[ctx.friction, 0.005, 0.0001], priority=1, contype=1, conaffinity=3,
    )
    ctx.geom_names.append(name)


@terrain_piece("stairs")
def _stairs(piece, ctx: TerrainContext) -> None:
    sign = 1.0 if piece.direction == "up" else -1.0
    z = ctx.level
    for i in range(piece.steps):
        x0 = piece.start + i * piece.run
        top = z + sign * (i + 1) * piece.rise
        ctx.box("step", x0, x0 + piece.run, top, piece.width, rgba=STEP_RGBA)
        ctx.sections.append(Section(x0, x0 + piece.run, _flat(top), "stairs"))
    ctx.level = z + sign * piece.steps * piece.rise


@terrain_piece("blocks")
def _blocks(piece, ctx: TerrainContext) -> None:
    z = ctx.level
    x = piece.start
    for i, h in enumerate(piece.heights):
        ctx.box("block", x, x + piece.block_length, z + h, piece.width, rgba=STEP_RGBA)
        ctx.sections.append(Section(x, x + piece.block_length, _flat(z + h), "blocks"))
        x += piece.block_length
        if piece.gap > 0 and i < len(piece.heights) - 1:
            ctx.box("gap", x, x + piece.gap, z, piece.width)
            ctx.sections.append(Section(x, x + piece.gap, _flat(z), "blocks"))
            x += piece.gap


@terrain_piece("friction_patch")
def _friction_patch(piece, ctx: TerrainContext) -> None:
    x0, x1 = piece.start, piece.start + piece.length
    ctx.box("friction", x0, x1, ctx.level, piece.width, rgba=ICE_RGBA, friction=piece.friction)
    ctx.sections.append(Section(x0, x1, _flat(ctx.level), "friction_patch"))


@terrain_piece("soft_patch")
def _soft_patch(piece, ctx: TerrainContext) -> None:
    x0, x1 = piece.start, piece.start + piece.length
    ctx.box("soft", x0, x1, ctx.level, piece.width, rgba=SOFT_RGBA,
            solref=(piece.timeconst, piece.dampratio))
    ctx.sections.append(Section(x0, x1, _flat(ctx.level), "soft_patch"))


#: Gaussian filter std per metre of wavelength, so that bumps are ``wavelength`` apart on average
#: along a line: sqrt(3) / (2 pi sqrt(2)) (see :func:`rough_heights`).
SIGMA_PER_WAVELENGTH = math.sqrt(3.0) / (2.0 * math.pi * math.sqrt(2.0))


def rough_heights(nrow: int, ncol: int, cell_size: float, wavelength: float, seed: int) -> np.ndarray:
    """Seeded smooth random field in [0, 1], shape (nrow, ncol), tapered to 0 at the border.

    White noise from ``numpy.random.default_rng(seed)`` is low-pass filtered with a
    Gaussian kernel of standard deviation ``sigma = wavelength * sqrt(3) / (2 pi sqrt(2))``
    (see :data:`SIGMA_PER_WAVELENGTH`), then scaled so that its minimum is 0 and its
    maximum 1. A cosine taper one wavelength wide brings it to 0 at the patch edges
    so there is no step where the patch meets the surrounding ground.

    Why that sigma: filtering white noise with a Gaussian of std ``sigma`` gives a
    stationary Gaussian field whose autocorrelation is Gaussian with std
    ``s = sqrt(2) sigma``. Along any straight line, the mean number of local maxima
    per metre of such a process is ``sqrt(m4 / m2) / (2 pi)`` (spectral moments; the
    standard level-crossing result of random-process theory), which for this
    autocorrelation is ``sqrt(3) / (2 pi s)``. Setting the mean distance between
    neighbouring bumps to ``wavelength`` gives the sigma above.
    """
    rng = np.random.default_rng(seed)
    noise = rng.standard_normal((nrow, ncol))
    sigma_cells = max(wavelength * SIGMA_PER_WAVELENGTH / cell_size, 0.5)
    radius = int(math.ceil(3 * sigma_cells))
    k = np.exp(-0.5 * (np.arange(-radius, radius + 1) / sigma_cells) ** 2)
    k /= k.sum()
    # Separable convolution with wrap-free padding.
    padded = np.pad(noise, radius, mode="reflect")
    rows = np.apply_along_axis(lambda r: np.convolve(r, k, mode="valid"), 1, padded)
    smooth = np.apply_along_axis(lambda c: np.convolve(c, k, mode="valid"), 0, rows)
    smooth -= smooth.min()
    peak = smooth.max()
    if peak > 0:
        smooth /= peak

    def taper(n: int) -> np.ndarray:
        w = np.ones(n)
        m = min(int(round(wavelength / cell_size)), n // 2)
        if m > 0:
            ramp = 0.5 - 0.5 * np.cos(np.linspace(0.0, math.pi, m, endpoint=False))
            w[:m] = ramp
            w[n - m:] = ramp[::-1]
        return w

    field_ = smooth * np.outer(taper(nrow), taper(ncol))
    lo, hi = field_.min(), field_.max()
    if hi > lo:
        field_ = (field_ - lo) / (hi - lo)
    return field_


@terrain_piece("rough")
def _rough(piece, ctx: TerrainContext) -> None:
    x0, x1 = piece.start, piece.start + piece.length
    if not x1 - x0 >= MIN_GEOM_LENGTH_M:
        ctx.sections.append(Section(x0, x1, _flat(ctx.level), "rough"))
        return
    ncol = max(int(round(piece.length / piece.cell_size)) + 1, 3)
    nrow = max(int(round(piece.width / piece.cell_size)) + 1, 3)
    seed = piece.seed if piece.seed is not None else ctx_seed(ctx)
    data = rough_heights(nrow, ncol, piece.cell_size, piece.wavelength, seed)
    name = ctx.name("rough")
    hf = ctx.spec.add_hfield(name=name, nrow=nrow, ncol=ncol,
                             size=[piece.length / 2.0, piece.width / 2.0, piece.height, SECTION_DEPTH_M])
    hf.userdata = data.ravel().tolist()
    z = ctx.level
    ctx.spec.worldbody.add_geom(
        name=name, type=HFIELD, hfieldname=name, pos=[(x0 + x1) / 2.0, 0.0, z],
        rgba=list(TERRAIN_RGBA), friction=[ctx.friction, 0.005, 0.0001], priority=1, contype=1, conaffinity=3,
    )
    ctx.geom_names.append(name)
    height = piece.height
    xs = np.linspace(x0, x1, ncol)
    ys = np.linspace(-piece.width / 2.0, piece.width / 2.0, nrow)

    def h(x, y, data=data, xs=xs, ys=ys, z=z, height=height):
        x = np.asarray(x, dtype=float)
        y = np.asarray(y, dtype=float)
        fx = np.clip((x - xs[0]) / (xs[1] - xs[0]), 0, len(xs) - 1 - 1e-9)
        fy = np.clip((y - ys[0]) / (ys[1] - ys[0]), 0, len(ys) - 1 - 1e-9)
        ix, iy = np.floor(fx).astype(int), np.floor(fy).astype(int)
        ax, ay = fx - ix, fy - iy
        v = (data[iy, ix] * (1 - ax) * (1 - ay) + data[iy, ix + 1] * ax * (1 - ay)
             + data[iy + 1, ix] * (1 - ax) * ay + data[iy + 1, ix + 1] * ax * ay)
        inside = np.abs(y) <= ys[-1]
        return z + np.where(inside, height * v, 0.0)

    ctx.sections.append(Section(x0, x1, h, "rough"))


def ctx_seed(ctx: TerrainContext) -> int:
    return getattr(ctx, "seed", 0)


@dataclass(frozen=True)
class GroundTable:
    """Ground height along the path (y = 0) sampled every ``1 / per_m`` m: a per-tick lookup.

    ``heights[i]`` is the exact height query at ``xs[i]``. Both come from one array of sample points,
    so they always have the same length whatever the extent; :meth:`index` maps a position to the
    sample at or just before it, clamped to the first and last sample.
    """

    x0: float
    per_m: float
    xs: np.ndarray
    heights: np.ndarray

    @property
    def last(self) -> int:
        return len(self.heights) - 1

    def index(self, x: float) -> int:
        return min(max(int((x - self.x0) * self.per_m), 0), self.last)

    def at(self, x: float) -> float:
        """Table height for the trunk at ``x`` (the sample at or just before it)."""
        return float(self.heights[self.index(x)])


@dataclass
class Terrain:
    """The built terrain: geom names and an exact height query ``height_at(x, y)``."""

    sections: list[Section]
    geom_names: list[str]
    is_plane: bool
    start_level: float = 0.0

    def extent_x(self) -> tuple[float, float]:
        """The x range the terrain covers (a plane: a generous range around the origin)."""
        if self.is_plane or not self.sections:
            return (-50.0, 50.0)
        return (self.sections[0].x0, self.sections[-1].x1)

    def height_at(self, x, y) -> np.ndarray:
        """Ground height under points (x, y), vectorised; outside all pieces the nearest flat level.

        ``x`` and ``y`` broadcast against each other (a scalar ``y`` is a line at that y); shapes that
        do not broadcast raise ``ValueError`` naming both.
        """
        x = np.atleast_1d(np.asarray(x, dtype=float))
        y = np.atleast_1d(np.asarray(y, dtype=float))
        if x.shape != y.shape:
            try:
                x, y = (np.array(a) for a in np.broadcast_arrays(x, y))
            except ValueError:
                raise ValueError(f"height_at: x of shape {x.shape} and y of shape {y.shape} do not match") from None
        out = np.zeros_like(x)
        if self.is_plane:
            return out
        x0s = np.array([s.x0 for s in self.sections])
        idx = np.clip(np.searchsorted(x0s, x, side="right") - 1, 0, len(self.sections) - 1)
        for i in np.unique(idx):
            m = idx == i
            out[m] = self.sections[i].height(x[m], y[m])
        return out

    def ground_table(self, per_m: float) -> GroundTable:
        """The ground along y = 0 over :meth:`extent_x`, ``per_m`` samples per metre (at least one)."""
        x0, x1 = self.extent_x()
        # np.arange decides the number of samples and their places; nothing else recounts them
        # (a separately computed ceil((x1 - x0) * per_m) is one more for some extents).
        xs = np.arange(x0, x1, 1.0 / per_m)
        if not len(xs):
            xs = np.array([x0], dtype=float)
        xs.setflags(write=False)
        heights = self.height_at(xs, 0.0)
        heights.setflags(write=False)
        return GroundTable(float(x0), float(per_m), xs, heights)


def build_terrain(spec: mujoco.MjSpec, pieces, friction: float, seed: int) -> Terrain:
    """Add the ground for ``pieces`` to ``spec`` and return its height profile."""
    if not pieces:
        spec.worldbody.add_geom(
            name="ground", type=PLANE, size=[0, 0, 0.05], rgba=list(TERRAIN_RGBA),
            friction=[friction, 0.005, 0.0001], priority=1, contype=1, conaffinity=3, material="ground_mat",
        )
        return Terrain([], ["ground"], is_plane=True)

    ctx = TerrainContext(spec=spec, friction=friction)
    ctx.seed = seed  # type: ignore[attr-defined]
    ordered = sorted(pieces, key=lambda p: p.start)
    x = ordered[0].start - RUN_OUT_M
    ctx.box("runin", x, ordered[0].start, 0.0, RUN_OUT_WIDTH_M)
    ctx.sections.append(Section(x, ordered[0].start, _flat(0.0), "flat"))
    x = ordered[0].start
    for piece in ordered:
        if piece.start > x + 1e-9:
            ctx.box("flat", x, piece.start, ctx.level, piece.width if hasattr(piece, "width") else 3.0)
            ctx.sections.append(Section(x, piece.start, _flat(ctx.level), "flat"))
        try:
            builder = _builders[piece.kind]
        except KeyError:
            raise ValueError(f"no terrain builder registered for {piece.kind!r}") from None
        builder(piece, ctx)
        x = _piece_end(piece)
    ctx.box("runout", x, x + RUN_OUT_M, ctx.level, RUN_OUT_WIDTH_M)
    ctx.sections.append(Section(x, x + RUN_OUT_M, _flat(ctx.level), "flat"))
    levels = [0.0, ctx.level] + [float(np.min(s.height(np.array([s.x0, s.x1]), np.zeros(2)))) for s in ctx.sections]
    base = min(levels) - SECTION_DEPTH_M - 0.5
    spec.worldbody.add_geom(
        name="ground", type=PLANE, size=[0, 0, 0.05], pos=[0, 0, base], rgba=[0.3, 0.3, 0.3, 1],
        friction=[friction, 0.005, 0.0001], priority=1, contype=1, conaffinity=3, material="ground_mat",
    )
    return Terrain(ctx.sections, ctx.geom_names + ["ground"], is_plane=False)
