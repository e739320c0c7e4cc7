"""Envelope maps: where in a plane of two fields a scenario passes, refined near the boundary.

Generic over the thing being tested, as :mod:`bench.search.limit` is:
``evaluate(points) -> [Evaluation]`` judges a batch of ``(x, y)`` points at
once (so an executor can run them side by side). The map is built by
quadtree refinement:

1. a coarse ``n x n`` grid over the two ranges is judged;
2. every cell whose four corners do not all agree (the pass/fail boundary
   crosses it) is split in four: its edge midpoints and centre are judged;
3. step 2 repeats on the new, smaller cells, ``levels`` times or until the
   ``budget`` of points is spent.

Cells whose corners agree are not refined: the region inside is taken to
agree with them (an island smaller than a coarse cell can be missed; say so
when it matters, or start with a finer grid). Each level halves the cell
size, so the boundary is located to ``range / ((n - 1) * 2**levels)`` along
each axis while the number of points grows with the boundary's length rather
than the map's area.

An axis may be periodic (a push direction in degrees): the cell between the
last and the first column is refined like any other.
"""

from __future__ import annotations

import csv
import io
import json
from dataclasses import dataclass, field
from typing import Callable, Sequence

from bench.search.limit import Evaluation


@dataclass
class Axis:
    """One varied field: its dotted path, label, range and whether it wraps around (an angle)."""

    path: str
    lo: float
    hi: float
    label: str = ""
    periodic: bool = False
    integer: bool = False

    def value(self, u: float) -> float:
        """The field value at ``u`` in [0, 1] along the axis."""
        v = self.lo + (self.hi - self.lo) * u
        return float(round(v)) if self.integer else float(v)


@dataclass
class MapPoint:
    u: float                     # position along the x axis, 0..1
    v: float                     # position along the y axis, 0..1
    x: float                     # the field values
    y: float
    passed: bool
    pass_rate: float
    trials: int = 1
    interval: tuple[float, float] | None = None
    level: int = 0
    detail: dict = field(default_factory=dict)


@dataclass
class EnvelopeMap:
    x: Axis
    y: Axis
    points: list[MapPoint]
    grid: int
    levels_done: int
    budget_hit: bool = False
    boundary_cells: int = 0      # cells the boundary crosses at the finest level reached

    @property
    def resolution(self) -> tuple[float, float]:
        """Cell size at the finest level reached, in the fields' own units."""
        n = (self.grid - 1) * 2 ** self.levels_done
        return ((self.x.hi - self.x.lo) / n, (self.y.hi - self.y.lo) / n)

    def to_rows(self) -> list[dict]:
        return [{"x": p.x, "y": p.y, "passed": p.passed, "pass_rate": p.pass_rate, "trials": p.trials,
                 "interval_lo": None if p.interval is None else p.interval[0],
                 "interval_hi": None if p.interval is None else p.interval[1], "level": p.level}
                for p in self.points]

    def to_json(self) -> dict:
        return {"x": vars(self.x), "y": vars(self.y), "grid": self.grid, "levels": self.levels_done,
                "budget_hit": self.budget_hit, "boundary_cells": self.boundary_cells, "resolution": list(self.resolution), "points": self.to_rows()}

    def to_csv(self) -> str:
        buf = io.StringIO()
        w = csv.DictWriter(buf, fieldnames=["x", "y", "passed", "pass_rate", "trials", "interval_lo",
                                            "interval_hi", "level"], lineterminator="\n")
        w.writeheader()
        for row in self.to_rows():
            w.writerow({k: ("" if v is None else v) for k, v in row.items()})
        return buf.getvalue()


def _key(u: float, v: float) -> tuple[int, int]:
    # positions are dyadic fractions of the coarse grid: exact as integers at a fine enough scale
    return (round(u * 2 ** 20), round(v * 2 ** 20))


def map_envelope(evaluate: Callable[[list[tuple[float, float]]], Sequence[Evaluation]], x: Axis, y: Axis, *,
                 grid: int = 5, levels: int = 3, budget: int = 400,
                 on_point: Callable[[MapPoint], None] | None = None) -> EnvelopeMap:
    """Judge ``evaluate`` over the plane ``x`` by ``y``, refining cells the boundary crosses."""
    if grid < 2:
        raise ValueError("grid must be at least 2 points per axis")
    if x.periodic and y.periodic:
        raise ValueError("at most one axis may be periodic")
    env = EnvelopeMap(x, y, [], grid, 0)
    known: dict[tuple[int, int], MapPoint] = {}

    def u_of(i: int, n: int) -> float:
        # a periodic x axis: the point after the last column is the first one again
        return (i % n) / n if x.periodic else i / n

    def judge(uvs: list[tuple[float, float]], level: int) -> None:
        fresh = []
        for u, v in uvs:
            k = _key(u, v)
            if k not in known and k not in {_key(*f) for f in fresh}:
                fresh.append((u, v))
        room = budget - len(known)
        if len(fresh) > room:
            env.budget_hit = True
            fresh = fresh[:max(room, 0)]
        if not fresh:
            return
        values = [(x.value(u), y.value(v)) for u, v in fresh]
        evals = list(evaluate(values))
        if len(evals) != len(values):
            raise ValueError(f"evaluate returned {len(evals)} judgements for {len(values)} points")
        for (u, v), (xv, yv), e in zip(fresh, values, evals):
            p = MapPoint(u, v, xv, yv, bool(e.passed), float(e.pass_rate), int(e.trials), e.interval, level,
                         dict(e.detail))
            known[_key(u, v)] = p
            env.points.append(p)
            if on_point is not None:
                on_point(p)

    # x periodic: the coarse columns cover [0, 1) and the last cell wraps to the first column
    cols = grid if not x.periodic else grid - 1
    n0 = grid - 1
    judge([(u_of(i, n0), j / n0) for i in range(cols) for j in range(grid)], 0)
    cells = [(u_of(i, n0) if not x.periodic else i / n0, j / n0, 1.0 / n0)
             for i in range(n0) for j in range(n0)]

    for level in range(1, levels + 1):
        split = []
        for (u0, v0, h) in cells:
            corners = [known.get(_key((u0 + a * h) % 1.0 if x.periodic else u0 + a * h, v0 + b * h))
                       for a in (0, 1) for b in (0, 1)]
            if any(c is None for c in corners):
                continue       # the budget ran out before this cell was finished
            if len({c.passed for c in corners}) > 1:
                split.append((u0, v0, h))
        env.boundary_cells = len(split)
        if not split:
            break
        todo = []
        for (u0, v0, h) in split:
            g = h / 2
            for a, b in ((1, 0), (0, 1), (1, 1), (2, 1), (1, 2)):
                u = u0 + a * g
                todo.append(((u % 1.0) if x.periodic else u, v0 + b * g))
        judge(todo, level)
        env.levels_done = level
        cells = [(u0 + a * h / 2, v0 + b * h / 2, h / 2) for (u0, v0, h) in split for a in (0, 1) for b in (0, 1)]
        if env.budget_hit:
            break
    return env


def write_map(env: EnvelopeMap, stem: str) -> list[str]:
    """Write ``<stem>.json`` and ``<stem>.csv``; return their paths."""
    from bench.fileio import write_atomic

    paths = [f"{stem}.json", f"{stem}.csv"]
    write_atomic(paths[0], (json.dumps(env.to_json(), indent=1) + "\n").encode())
    write_atomic(paths[1], env.to_csv().encode())
    return paths
