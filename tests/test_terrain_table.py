"""The fall check's ground table: built for any valid terrain, and equal to the exact height query.

The table samples the ground along the path every centimetre; it once had one
height fewer than sample places for some starts and lengths (an ``IndexError``
that ended valid scenarios as ``error``). The property test builds the terrain
of random valid piece lists (every kind that adds sections), the table, and
queries heights; where the ground is made of boxes or a ramp, the exact query is
also checked against MuJoCo's own ray caster (``mujoco.mj_ray``) on the compiled
terrain.
"""

from __future__ import annotations

import json
import math
import textwrap

import mujoco
import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from bench.scenario.schema import Blocks, FrictionPatch, Rough, Slope, SoftPatch, Stairs
from bench.sim.episode import TABLE_PER_M
from bench.world.terrain import build_terrain, rough_heights

STEP_M = 1.0 / TABLE_PER_M
#: Slack for sample places made by repeated addition (np.arange) over a long extent, m.
PLACE_TOL_M = 1e-6


def _coord(lo: float, hi: float):
    """A position as people write it (to the centimetre), or any float in the range."""
    return st.one_of(st.integers(int(lo * 100), int(hi * 100)).map(lambda i: i / 100.0),
                     st.floats(lo, hi, allow_nan=False, allow_infinity=False))


def _size(lo: float, hi: float):
    return st.one_of(st.integers(max(int(math.ceil(lo * 100)), 1), int(hi * 100)).map(lambda i: i / 100.0),
                     st.floats(lo, hi, allow_nan=False, allow_infinity=False, exclude_min=True))


# Each maker takes the start and returns a piece; sizes stay modest so that an example is milliseconds.
PIECES = {
    "stairs": st.builds(lambda steps, rise, run, down: (lambda s: Stairs(
        start=s, steps=steps, rise=rise, run=run, direction="down" if down else "up")),
        st.integers(1, 40), _size(0.005, 0.5), _size(0.01, 5.0), st.booleans()),
    "slope": st.builds(lambda length, angle: (lambda s: Slope(start=s, length=length, angle_deg=angle)),
                       _size(0.01, 30.0), st.floats(-45.0, 45.0)),
    "blocks": st.builds(lambda heights, bl, gap: (lambda s: Blocks(start=s, heights=tuple(heights),
                                                                   block_length=bl, gap=gap)),
                        st.lists(_size(0.0, 1.0) | st.just(0.0), min_size=1, max_size=8), _size(0.01, 3.0),
                        st.just(0.0) | _size(0.0, 2.0)),
    "friction_patch": st.builds(lambda length, mu: (lambda s: FrictionPatch(start=s, length=length, friction=mu)),
                                _size(0.01, 50.0), st.floats(0.05, 2.0)),
    "soft_patch": st.builds(lambda length: (lambda s: SoftPatch(start=s, length=length)), _size(0.01, 50.0)),
    "rough": st.builds(lambda length, height, seed: (lambda s: Rough(
        start=s, length=length, width=1.0, height=height, wavelength=0.2, cell_size=0.05, seed=seed)),
        _size(0.0, 4.0), _size(0.005, 0.3), st.integers(0, 2**32 - 1)),
}


@st.composite
def terrains(draw):
    """1 to 3 pieces in order of start, each beginning where the previous ends or after a gap."""
    n = draw(st.integers(1, 3))
    x = draw(_coord(-200.0, 200.0))
    pieces = []
    for _ in range(n):
        kind = draw(st.sampled_from(sorted(PIECES)))
        piece = draw(PIECES[kind])(x)
        pieces.append(piece)
        x = x + piece.length_x + draw(st.just(0.0) | _size(0.0, 3.0))
    return pieces


def _terrain_model(pieces, seed: int = 0):
    spec = mujoco.MjSpec()
    spec.add_material(name="ground_mat")      # the catch-all plane's material, as the world builder adds it
    terrain = build_terrain(spec, pieces, 1.0, seed)
    model = spec.compile()
    data = mujoco.MjData(model)
    mujoco.mj_kinematics(model, data)
    return terrain, model, data


def _ray_z(model, data, x: float, top: float) -> float:
    """Ground height under (x, 0) by MuJoCo's ray caster."""
    geomid = np.zeros(1, dtype=np.int32)
    dist = mujoco.mj_ray(model, data, np.array([x, 0.0, top]), np.array([0.0, 0.0, -1.0]), None, 1, -1, geomid)
    assert dist >= 0, f"the ray at x={x} hit nothing"
    return top - dist


@settings(max_examples=100, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(pieces=terrains(), probes=st.lists(st.floats(0.0, 1.0), min_size=8, max_size=8))
def test_ground_table_builds_and_agrees_with_the_exact_height_for_any_valid_terrain(pieces, probes):
    terrain, model, data = _terrain_model(pieces)
    table = terrain.ground_table(TABLE_PER_M)
    x0, x1 = terrain.extent_x()

    # One sample place per height, every 1 cm from the start of the ground to its end.
    assert table.xs.shape == table.heights.shape and len(table.xs) >= 1
    assert table.x0 == x0 and table.xs[0] == x0
    assert table.xs[-1] < x1 + PLACE_TOL_M and table.xs[-1] > x1 - STEP_M - PLACE_TOL_M
    np.testing.assert_allclose(np.diff(table.xs), STEP_M, rtol=0, atol=PLACE_TOL_M)
    # Each height is the exact query at its place (the table is nothing but samples of it).
    np.testing.assert_array_equal(table.heights, terrain.height_at(table.xs, np.zeros_like(table.xs)))

    boundaries = np.array([s.x0 for s in terrain.sections] + [terrain.sections[-1].x1])
    top = float(np.max(table.heights)) + 2.0
    for u in probes:
        x = x0 - 1.0 + u * (x1 - x0 + 2.0)         # a little outside the ground at both ends too
        i = table.index(x)
        assert 0 <= i <= table.last
        assert table.at(x) == table.heights[i]
        inside = table.xs[0] <= x <= table.xs[-1]
        if inside:   # the sample at or just before x
            assert -PLACE_TOL_M <= x - table.xs[i] < STEP_M + PLACE_TOL_M
        else:        # clamped to the nearer end
            assert i == (0 if x < table.xs[0] else table.last)
        exact = float(terrain.height_at(x, 0.0)[0])
        section = terrain.sections[min(max(np.searchsorted(boundaries, x, side="right") - 1, 0),
                                       len(terrain.sections) - 1)]
        edge_near = np.any(np.abs(boundaries - x) < STEP_M + 1e-3)
        if inside and not edge_near:
            if section.kind == "slope":
                piece = next(p for p in pieces if p.kind == "slope" and p.start <= x <= p.start + p.length)
                slack = STEP_M * abs(math.tan(math.radians(piece.angle_deg))) + 1e-9
                assert abs(table.at(x) - exact) <= slack
            elif section.kind == "rough":
                piece = next(p for p in pieces if p.kind == "rough" and p.start <= x <= p.start + p.length)
                assert abs(table.at(x) - exact) <= _rough_slope_bound(piece, terrain) * STEP_M + 1e-9
            else:    # flat tops: the sample 1 cm back is on the same top
                assert table.at(x) == exact
        # Outside reference for boxes and ramps: MuJoCo's own ray cast onto the compiled terrain.
        if section.kind != "rough" and x0 < x < x1 and not np.any(np.abs(boundaries - x) < 1e-3):
            assert abs(_ray_z(model, data, x, top) - exact) < 1e-6, (x, section.kind)


def _rough_slope_bound(piece, terrain) -> float:
    """Steepest rise along x of the patch's bilinear surface (its nodes' largest step over a cell), m/m."""
    ncol = max(int(round(piece.length / piece.cell_size)) + 1, 3)
    nrow = max(int(round(piece.width / piece.cell_size)) + 1, 3)
    data = rough_heights(nrow, ncol, piece.cell_size, piece.wavelength, piece.seed)
    dx = piece.length / (ncol - 1)
    return piece.height * float(np.max(np.abs(np.diff(data, axis=1)))) / dx


def test_the_reported_extent_has_as_many_heights_as_places():
    """stairs from 0.8 m, 4 x 0.35 m: ceil(extent * 100) is one more than the samples np.arange makes."""
    pieces = [Stairs(start=0.8, steps=4, rise=0.08, run=0.35)]
    terrain, _, _ = _terrain_model(pieces)
    x0, x1 = terrain.extent_x()
    assert int(np.ceil((x1 - x0) * TABLE_PER_M)) != len(np.arange(x0, x1, STEP_M))   # the trap is there
    table = terrain.ground_table(TABLE_PER_M)
    assert len(table.heights) == len(table.xs) == len(np.arange(x0, x1, STEP_M))
    assert table.at(0.8 + 0.35 * 2.5) == pytest.approx(3 * 0.08)      # on the third tread
    assert table.at(100.0) == pytest.approx(4 * 0.08)                   # past the end: the last level


def test_height_query_with_mismatched_shapes_is_a_clear_error():
    terrain, _, _ = _terrain_model([Stairs(start=0.8, steps=4, rise=0.08, run=0.35)])
    np.testing.assert_array_equal(terrain.height_at([1.0, 2.0], 0.0), terrain.height_at([1.0, 2.0], [0.0, 0.0]))
    with pytest.raises(ValueError, match=r"x of shape \(3,\) and y of shape \(2,\) do not match"):
        terrain.height_at([1.0, 2.0, 3.0], [0.0, 0.0])


def test_reported_stairs_scenario_checks_and_runs_without_error(tmp_path):
    """The scenario of the report passed ``bench check`` and then ended as an IndexError."""
    from bench.cli import main

    path = tmp_path / "stairs.yaml"
    path.write_text(textwrap.dedent("""\
        name: stairs-report
        robot: quad12
        duration: 0.2
        seed: 1
        terrain:
          - stairs: {start: 0.8, steps: 4, rise: 0.08, run: 0.35}
        criteria: {no_fall: true}
        """))
    assert main(["check", str(path)]) == 0
    out = tmp_path / "out"
    code = main(["run", str(path), "--out", str(out), "--no-plots", "--no-history", "--controller", "joint-pd"])
    result = json.loads((out / "stairs-report" / "result.json").read_text())
    assert result["status"] == "passed", result["reason"]
    assert code == 0


@pytest.mark.parametrize("angle_deg", [1e-4, -1e-6, 0.005])
def test_a_very_gentle_slope_is_built_as_the_height_query_says(angle_deg):
    """MuJoCo's compiler takes a geom rotation of 1e-4 deg for none (a flat box half-way up, off by
    half the rise at both ends); measured here with MuJoCo's ray caster at both ends of a long ramp."""
    length = 1000.0
    terrain, model, data = _terrain_model([Slope(start=0.0, length=length, angle_deg=angle_deg)])
    rise = length * math.tan(math.radians(angle_deg))
    for x in (0.5, length / 2.0, length - 0.5):
        exact = float(terrain.height_at(x, 0.0)[0])
        assert exact == pytest.approx(x / length * rise, rel=1e-9)
        assert abs(_ray_z(model, data, x, 1.0) - exact) < 1e-9, x


@pytest.mark.parametrize("piece", [
    Stairs(start=0.8, steps=3, rise=0.05, run=1e-300),
    Blocks(start=0.8, heights=(0.1, 0.2), block_length=1e-300, gap=5e-324),
    Slope(start=0.8, length=1e-300, angle_deg=30.0),
    Rough(start=0.8, length=1e-300, width=1.0, height=0.1, wavelength=0.2, cell_size=0.05, seed=1),
    FrictionPatch(start=0.8, length=1e-300, friction=0.1),
], ids=lambda p: p.kind)
def test_pieces_of_valid_but_vanishing_length_compile(piece):
    """Lengths the schema accepts (> 0) that vanish once added to a start: no box of size 0 for MuJoCo."""
    terrain, model, _ = _terrain_model([piece])
    assert model.ngeom >= 3                                  # run-in, run-out, catch-all plane
    table = terrain.ground_table(TABLE_PER_M)
    assert table.at(0.0) == 0.0
    assert table.at(5.0) == pytest.approx(piece.level_change, abs=1e-12)
