"""Terrain-aware stepping from a height scan: a steppability map, foothold adjustment, swing apex.

The reference stacks use this module only when the observation carries a height scan
(``obs.height_scan`` not None); without one nothing here runs.

Scan layout: ``heights`` (nx, ny) world z of the terrain at grid points whose offsets
``scan_xy`` (nx, ny, 2) are given in the yaw-aligned trunk frame (x forward, y left, origin the
trunk origin projected vertically); NaN where a point dropped out. The grid is regular: the
origin and the two step vectors are read from ``scan_xy`` itself, so any size, resolution or
offset works.

Foothold adjustment rule: *nearest safe cell on a steppability map*. An *edge point* is one whose
height differs from a grid neighbour's by more than ``max_step_m`` (a riser, a block side, a gap),
or a dropout. A cell is safe when no edge point lies within ``edge_margin_m`` of it (a square
window: a morphological dilation of the edges) and the height range over that window is at most
``max_roughness_m`` plus what a plane of ``max_slope_deg`` spans across it (so ramps stay
steppable, bumps and steeper ground do not). The heuristic foothold of ``swing.py`` is moved to
the nearest safe cell within ``max_shift_m``; when no cell in reach is safe it stays where it is.
"Nearest" weighs a shift
against the direction of travel by ``back_weight`` (a shift backward counts that many times its
length; common practice, no source): a foot moved back behind an edge leaves the leg stretched
behind the hip for the whole stance, one moved forward onto the next tread does not. To keep
the target from jumping back and forth across an edge while the heuristic point moves during a
swing, the previous tick's shift is kept while the shifted point is still safe (hysteresis).

Swing apex: the highest scan point within ``foot_radius_m`` sideways of the straight segment from
lift-off to foothold, plus the foot-site height and the clearance.

Local normal: a least-squares plane over the valid points of a ``normal_window_m`` square around
the foothold (the same normal equations as ``ground.py``); on a stair tread it is vertical. On an
unsafe cell (an edge within the margin) there is none: a plane fitted across a riser would tilt
the friction pyramid by tens of degrees, and the stack keeps the world-vertical one instead.
"""

from __future__ import annotations

import math

import numpy as np


def fit_plane(xyz) -> tuple[float, float, float]:
    """Least-squares plane ``z = h + gx x + gy y`` through points (N, 3), N >= 3 not collinear.

    Returns ``(h, gx, gy)``. Solved from the 3x3 normal equations (the stacks' ground estimate
    solves the same system in closed form on Python floats)."""
    p = np.asarray(xyz, dtype=float)
    a = np.column_stack([np.ones(len(p)), p[:, 0], p[:, 1]])
    sol = np.linalg.solve(a.T @ a, a.T @ p[:, 2])
    return float(sol[0]), float(sol[1]), float(sol[2])


def plane_normal(gx: float, gy: float) -> tuple[float, float, float]:
    """Unit upward normal of the plane ``z = h + gx x + gy y``."""
    n = math.sqrt(1.0 + gx * gx + gy * gy)
    return -gx / n, -gy / n, 1.0 / n


def _sep(a: np.ndarray, k: int, op) -> np.ndarray:
    """Elementwise ``op`` (np.maximum or np.minimum) over the (2k+1)^2 window of every interior cell,
    shape (nx-2k, ny-2k): two one-dimensional passes of shifted slices (the square window is separable)."""
    w = 2 * k + 1
    n0 = a.shape[0] - w + 1
    r = a[0:n0].copy()
    for d in range(1, w):
        op(r, a[d:d + n0], out=r)
    n1 = a.shape[1] - w + 1
    c = r[:, 0:n1].copy()
    for d in range(1, w):
        op(c, r[:, d:d + n1], out=c)
    return c


def _window_range(h: np.ndarray, k: int) -> np.ndarray:
    """Per cell: max - min of ``h`` over the (2k+1)^2 window, NaN when any point there is NaN or
    the window leaves the grid."""
    nx, ny = h.shape
    out = np.full((nx, ny), np.nan)
    if nx < 2 * k + 1 or ny < 2 * k + 1:
        return out
    # NaN propagates through max/min: a window with a dropout is not safe
    out[k:nx - k, k:ny - k] = _sep(h, k, np.maximum) - _sep(h, k, np.minimum)
    return out


def _window_max(b: np.ndarray, k: int) -> np.ndarray:
    """Per cell: any True in the (2k+1)^2 window; True where the window leaves the grid."""
    nx, ny = b.shape
    out = np.ones((nx, ny), dtype=bool)
    if nx < 2 * k + 1 or ny < 2 * k + 1:
        return out
    out[k:nx - k, k:ny - k] = _sep(b, k, np.logical_or)
    return out


class HeightScanMap:
    """The latest scan in world coordinates, its steppability mask and the queries the stack needs.

    Parameters
    ----------
    scan_xy: (nx, ny, 2) point offsets in the yaw-aligned trunk frame (m).
    edge_margin_m: half-width of the safety window around a foothold (m).
    max_roughness_m: largest height range within the window for a safe cell, beyond the slope allowance (m).
    max_step_m: a height jump between neighbouring points larger than this is an edge (m).
    max_slope_deg: steepest plane whose height range across the window is still allowed.
    max_shift_m: farthest a foothold is moved from the heuristic point (m).
    foot_radius_m: half-width of the band searched for the swing apex (m).
    normal_window_m: half-width of the window of the local plane fit (m).
    """

    def __init__(self, scan_xy, edge_margin_m: float = 0.05, max_roughness_m: float = 0.03,
                 max_shift_m: float = 0.12, foot_radius_m: float = 0.03, normal_window_m: float = 0.04,
                 back_weight: float = 2.0, max_step_m: float = 0.02, max_slope_deg: float = 25.0) -> None:
        xy = np.asarray(scan_xy, dtype=float)
        if xy.ndim != 3 or xy.shape[2] != 2 or xy.shape[0] < 2 or xy.shape[1] < 2:
            raise ValueError(f"height scan points must have shape (nx >= 2, ny >= 2, 2), got {xy.shape}")
        self.shape = xy.shape[:2]
        self.origin = xy[0, 0].copy()
        self.ex = xy[1, 0] - xy[0, 0]          # step of index i, trunk frame
        self.ey = xy[0, 1] - xy[0, 0]          # step of index j
        basis = np.column_stack([self.ex, self.ey])
        if abs(np.linalg.det(basis)) < 1e-12:
            raise ValueError("height scan points are not a 2-D grid")
        self.inv_basis = np.linalg.inv(basis)  # trunk-frame offset -> fractional (i, j)
        self.res = float(min(np.linalg.norm(self.ex), np.linalg.norm(self.ey)))
        self.edge_margin_m = float(edge_margin_m)
        self.max_roughness_m = float(max_roughness_m)
        self.max_shift_m = float(max_shift_m)
        self.foot_radius_m = float(foot_radius_m)
        # window half-width in cells: an edge line (half a cell beyond its edge points) is then at least
        # (k + 1/2) cells = edge_margin_m from a safe cell's centre
        self._k_edge = max(1, int(math.ceil(edge_margin_m / self.res - 0.5 - 1e-9)))
        self._k_normal = max(1, int(round(normal_window_m / self.res)))
        self.max_step_m = float(max_step_m)
        window_m = 2 * self._k_edge * self.res
        self._max_range = self.max_roughness_m + window_m * math.tan(math.radians(max_slope_deg))
        # search offsets in cells, cheapest first, for travel forward (+1), backward (-1) and none (0)
        ks = int(math.ceil(max_shift_m / self.res))
        offs = [(di, dj) for di in range(-ks, ks + 1) for dj in range(-ks, ks + 1)]
        self._search = {}
        for sign in (1, -1, 0):
            cost, keep = [], []
            for di, dj in offs:
                v = di * self.ex + dj * self.ey
                if float(np.linalg.norm(v)) > max_shift_m + 1e-9:
                    continue
                along = sign * float(v[0])       # trunk-frame x is the heading
                w = back_weight if along < 0.0 else 1.0
                cost.append(math.hypot(w * v[0], v[1]))
                keep.append((di, dj))
            order = sorted(range(len(keep)), key=lambda n: (cost[n], keep[n]))
            self._search[sign] = [keep[n] for n in order]
        self.heights = np.full(self.shape, np.nan)
        self.finite = False
        self.safe = np.zeros(self.shape, dtype=bool)
        self.pose = (0.0, 0.0, 1.0, 0.0)        # trunk x, y, cos yaw, sin yaw
        self.shift = {}                          # foot -> last shift (dx, dy), hysteresis

    # ------------------------------------------------------------------ update
    def update(self, heights, trunk_x: float, trunk_y: float, yaw: float) -> None:
        """Take a new scan taken with the trunk at ``(trunk_x, trunk_y)`` heading ``yaw``."""
        h = np.asarray(heights, dtype=float)
        if h.shape != self.shape:
            raise ValueError(f"height scan has shape {h.shape}, its points {self.shape}")
        self.heights = h
        self.pose = (float(trunk_x), float(trunk_y), math.cos(yaw), math.sin(yaw))
        k = self._k_edge
        edge = ~np.isfinite(h)
        self.finite = not edge.any()             # every point read (no dropout, nothing off the terrain)
        with np.errstate(invalid="ignore"):
            for axis in (0, 1):
                jump = np.abs(np.diff(h, axis=axis)) > self.max_step_m   # NaN compares False
                lo = [slice(None), slice(None)]
                hi = [slice(None), slice(None)]
                lo[axis], hi[axis] = slice(None, -1), slice(1, None)
                edge[tuple(lo)] |= jump
                edge[tuple(hi)] |= jump
            any_edge = _window_max(edge, k)
            rng = _window_range(h, k)
            self.safe = (~any_edge) & (rng <= self._max_range)   # NaN compares False: unsafe

    # ------------------------------------------------------------------ frames
    def to_index(self, x: float, y: float) -> tuple[float, float]:
        """Fractional grid index of world point ``(x, y)``."""
        tx, ty, c, s = self.pose
        dx, dy = x - tx, y - ty
        bx, by = c * dx + s * dy - self.origin[0], -s * dx + c * dy - self.origin[1]
        ib = self.inv_basis
        return ib[0, 0] * bx + ib[0, 1] * by, ib[1, 0] * bx + ib[1, 1] * by

    def to_world(self, fi: float, fj: float) -> tuple[float, float]:
        tx, ty, c, s = self.pose
        bx = self.origin[0] + fi * self.ex[0] + fj * self.ey[0]
        by = self.origin[1] + fi * self.ex[1] + fj * self.ey[1]
        return tx + c * bx - s * by, ty + s * bx + c * by

    def _cell(self, x: float, y: float) -> tuple[int, int] | None:
        fi, fj = self.to_index(x, y)
        i, j = int(round(fi)), int(round(fj))
        if 0 <= i < self.shape[0] and 0 <= j < self.shape[1]:
            return i, j
        return None

    # ----------------------------------------------------------------- queries
    def height_at(self, x: float, y: float) -> float:
        """Scan height at the cell nearest ``(x, y)``; NaN outside the scan or at a dropout."""
        c = self._cell(x, y)
        return float(self.heights[c]) if c is not None else math.nan

    def is_safe(self, x: float, y: float) -> bool:
        c = self._cell(x, y)
        return bool(self.safe[c]) if c is not None else False

    def adjust(self, foot: int, x: float, y: float, travel: int = 0) -> tuple[float, float, bool]:
        """Foothold near the heuristic point ``(x, y)``: ``(x', y', found)``.

        ``travel``: +1 walking forward, -1 backward, 0 neither (which shifts cost more).
        Keeps last tick's shift of ``foot`` while it still lands on a safe cell; otherwise the
        nearest safe cell within ``max_shift_m`` (its centre); otherwise ``(x, y, False)``."""
        last = self.shift.get(foot)
        if last is not None:
            sx, sy = x + last[0], y + last[1]
            if math.hypot(*last) <= self.max_shift_m and self.is_safe(sx, sy):
                return sx, sy, True
        fi, fj = self.to_index(x, y)
        i0, j0 = int(round(fi)), int(round(fj))
        nx, ny = self.shape
        safe = self.safe
        for di, dj in self._search[travel]:
            i, j = i0 + di, j0 + dj
            if 0 <= i < nx and 0 <= j < ny and safe[i, j]:
                # move by whole cells from the heuristic point (keeps its sub-cell position)
                wx, wy = self.to_world(fi + di, fj + dj)
                self.shift[foot] = (wx - x, wy - y)
                return wx, wy, True
        self.shift.pop(foot, None)
        return x, y, False

    def forget(self, foot: int) -> None:
        """Drop the hysteresis of ``foot`` (call at lift-off)."""
        self.shift.pop(foot, None)

    def max_height_along(self, x0: float, y0: float, x1: float, y1: float) -> float:
        """Highest valid scan point within ``foot_radius_m`` of the segment; NaN when none."""
        fi0, fj0 = self.to_index(x0, y0)
        fi1, fj1 = self.to_index(x1, y1)
        nx, ny = self.shape
        r = self.foot_radius_m / self.res
        ilo = max(int(math.floor(min(fi0, fi1) - r)), 0)
        ihi = min(int(math.ceil(max(fi0, fi1) + r)), nx - 1)
        jlo = max(int(math.floor(min(fj0, fj1) - r)), 0)
        jhi = min(int(math.ceil(max(fj0, fj1) + r)), ny - 1)
        if ilo > ihi or jlo > jhi:
            return math.nan
        ii, jj = np.mgrid[ilo:ihi + 1, jlo:jhi + 1]
        # distance (in cells) from each grid point to the segment
        dx, dy = fi1 - fi0, fj1 - fj0
        ll = dx * dx + dy * dy
        t = np.zeros(ii.shape) if ll < 1e-12 else np.clip(((ii - fi0) * dx + (jj - fj0) * dy) / ll, 0.0, 1.0)
        d = np.hypot(ii - (fi0 + t * dx), jj - (fj0 + t * dy))
        h = self.heights[ilo:ihi + 1, jlo:jhi + 1][d <= r + 0.5]
        h = h[np.isfinite(h)]
        return float(h.max()) if h.size else math.nan

    def normal_at(self, x: float, y: float) -> tuple[float, float, float] | None:
        """Upward unit normal of the least-squares plane of the scan around ``(x, y)`` (world), or None."""
        c = self._cell(x, y)
        if c is None or not self.safe[c]:
            # off the scan, or near an edge: a plane fitted across a riser is no contact normal
            return None
        k = self._k_normal
        i, j = c
        i0, i1 = max(i - k, 0), min(i + k + 1, self.shape[0])
        j0, j1 = max(j - k, 0), min(j + k + 1, self.shape[1])
        ii, jj = np.mgrid[i0:i1, j0:j1]
        h = self.heights[i0:i1, j0:j1]
        ok = np.isfinite(h)
        if ok.sum() < 3:
            return None
        bx = self.origin[0] + ii[ok] * self.ex[0] + jj[ok] * self.ey[0]
        by = self.origin[1] + ii[ok] * self.ex[1] + jj[ok] * self.ey[1]
        try:
            _, gxb, gyb = fit_plane(np.column_stack([bx, by, h[ok]]))
        except np.linalg.LinAlgError:
            return None
        # slope in trunk-yaw axes -> world axes
        _, _, cy, sy = self.pose
        gx, gy = cy * gxb - sy * gyb, sy * gxb + cy * gyb
        return plane_normal(gx, gy)
