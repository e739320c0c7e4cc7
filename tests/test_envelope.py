"""Envelope maps: quadtree refinement of a pass/fail plane, on predicates whose boundary is known exactly."""

from __future__ import annotations

import csv
import io
import json
import math

import numpy as np
import pytest

from bench.search.envelope import Axis, map_envelope, write_map
from bench.search.envelope_plot import plot_envelope
from bench.search.limit import Evaluation

R = 0.6


def disk(points):
    return [Evaluation(float(x * x + y * y < R * R), x * x + y * y < R * R) for x, y in points]


def test_refinement_brackets_a_circular_boundary_to_the_final_resolution():
    env = map_envelope(disk, Axis("a", -1, 1), Axis("b", -1, 1), grid=5, levels=4, budget=2000)
    assert env.levels_done == 4 and not env.budget_hit
    rx, ry = env.resolution
    assert rx == ry == pytest.approx(2 / (4 * 16))
    pts = np.array([(p.x, p.y) for p in env.points])
    ok = np.array([p.passed for p in env.points])
    r = np.hypot(pts[:, 0], pts[:, 1])
    assert (ok == (r < R)).all()                          # each point judged as the predicate says
    # the boundary is bracketed: within one finest cell diagonal of the circle there are points on both sides
    near = np.abs(r - R) < math.hypot(rx, ry)
    assert ok[near].any() and (~ok[near]).any()
    finest = [p for p in env.points if p.level == 4]
    assert finest and max(abs(math.hypot(p.x, p.y) - R) for p in finest) < 2 * math.hypot(rx, ry)
    # far fewer points than the full grid at that resolution (the point of refining)
    assert len(env.points) < 0.2 * (2 / rx + 1) ** 2


def test_periodic_direction_axis_wraps_and_finds_the_boundary_in_every_direction():
    def push(points):   # survives pushes up to 50 + 30 cos(direction)
        return [Evaluation(float(m < 50 + 30 * math.cos(math.radians(d))), m < 50 + 30 * math.cos(math.radians(d)))
                for d, m in points]

    env = map_envelope(push, Axis("dir", 0, 360, label="direction, deg", periodic=True),
                       Axis("mag", 0, 100, label="impulse"), grid=9, levels=3, budget=3000)
    assert max(p.x for p in env.points) < 360                  # 360 is 0 again, never judged twice
    rx, ry = env.resolution
    for d in (0.0, 90.0, 180.0, 270.0):
        col = [p for p in env.points if abs(p.x - d) < 1e-9]
        last_pass = max(p.y for p in col if p.passed)
        first_fail = min(p.y for p in col if not p.passed)
        true = 50 + 30 * math.cos(math.radians(d))
        assert last_pass < true <= first_fail and first_fail - last_pass <= ry + 1e-9


def test_budget_stops_the_refinement_and_says_so():
    env = map_envelope(disk, Axis("a", -1, 1), Axis("b", -1, 1), grid=5, levels=8, budget=120)
    assert env.budget_hit and len(env.points) == 120


def test_uniform_plane_is_not_refined():
    calls = []

    def all_pass(points):
        calls.append(len(points))
        return [Evaluation(1.0, True) for _ in points]

    env = map_envelope(all_pass, Axis("a", 0, 1), Axis("b", 0, 1), grid=4, levels=5)
    assert calls == [16] and env.levels_done == 0 and env.boundary_cells == 0


def test_data_and_picture_are_written(tmp_path):
    env = map_envelope(disk, Axis("a", -1, 1, label="payload offset, m"), Axis("b", -1, 1, label="mass"),
                       grid=5, levels=2)
    js, cs = write_map(env, str(tmp_path / "env"))
    data = json.loads(open(js).read())
    assert len(data["points"]) == len(env.points) and data["x"]["label"] == "payload offset, m"
    rows = list(csv.DictReader(io.StringIO(open(cs).read())))
    assert len(rows) == len(env.points) and {"x", "y", "passed", "pass_rate"} <= set(rows[0])
    png = plot_envelope(env, tmp_path / "env.png")
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n" and png.stat().st_size > 10_000
    polar = map_envelope(lambda pts: [Evaluation(float(m < 50), m < 50) for d, m in pts],
                         Axis("dir", 0, 360, label="direction, deg", periodic=True), Axis("mag", 0, 100), grid=9,
                         levels=2)
    assert plot_envelope(polar, tmp_path / "polar.png").stat().st_size > 10_000


def test_bench_envelope_maps_a_push_direction_and_magnitude(tmp_path):
    """The command end to end on a standing robot: weak pushes pass in every direction, strong ones fail."""
    import os
    import subprocess
    import sys
    from pathlib import Path

    repo = Path(__file__).resolve().parents[1]
    env = {**os.environ, "PYTHONPATH": str(repo)}
    cmd = [sys.executable, "-m", "bench", "envelope", str(repo / "scenarios/basics/stand-push.yaml"),
           "--direction-of", "disturbances.0.push.force", "20", "600", "--grid", "5", "--levels", "1",
           "--controller", "force-qp-l1", "--out", str(tmp_path / "env"), "--workers", "2"]
    p = subprocess.run(cmd, capture_output=True, text=True, env=env)
    assert p.returncode == 0, p.stdout + p.stderr
    data = json.loads((tmp_path / "env/envelope.json").read_text())
    pts = data["points"]
    weak = [q for q in pts if q["y"] == 20]
    strong = [q for q in pts if q["y"] == 600]
    assert weak and all(q["passed"] for q in weak)        # 2 N s: nothing to recover from
    assert strong and not any(q["passed"] for q in strong)  # 60 N s on 12 kg: 5 m/s, no stance holds that
    assert data["x"]["periodic"] and max(q["x"] for q in pts) < 360
    assert (tmp_path / "env/envelope.png").stat().st_size > 10_000
    assert len(list((tmp_path / "env/episodes").glob("*/result.json"))) == len(pts)
    bad = subprocess.run(cmd[:5] + ["--x", "payloads.0.mass", "1", "2"], capture_output=True, text=True, env=env)
    assert bad.returncode == 2 and "Traceback" not in bad.stderr
