"""extends, matrix, dotted paths, derive, ids and trials."""

from __future__ import annotations

import textwrap
from pathlib import Path

import pytest

from bench.errors import ScenarioError, ScenarioErrors
from bench.scenario import (
    derive,
    expand_trials,
    get_path,
    load_file,
    load_scenarios,
    resolve_path,
    scenario_id,
    scenario_slug,
    set_path,
)
from bench.scenario.compose import BUNDLED_ROOTS, MAX_EXTENDS_DEPTH

FIXTURES = Path(__file__).parent / "fixtures" / "scenarios"


def write(tmp_path: Path, name: str, text: str) -> Path:
    p = tmp_path / name
    p.parent.mkdir(parents=True, exist_ok=True)
    p.write_text(textwrap.dedent(text))
    return p


def errors(fn, *args, **kw) -> list[ScenarioError]:
    with pytest.raises(ScenarioErrors) as info:
        fn(*args, **kw)
    return info.value.errors


# --------------------------------------------------------------------------- extends


def test_fixture_extends_and_matrix():
    scenarios = load_file(FIXTURES / "rear-load-trot.yaml")
    assert [s.id for s in scenarios] == ["rear-load-trot[mass=2]", "rear-load-trot[mass=4]", "rear-load-trot[mass=6]"]
    assert [s.slug for s in scenarios] == ["rear-load-trot.mass-2", "rear-load-trot.mass-4", "rear-load-trot.mass-6"]
    s = scenarios[2]
    assert s.variant == {"mass": 6} and s.payloads[0].mass == 6.0
    assert s.ground.friction == 0.6  # child override, deep-merged
    assert s.duration == 6.0 and s.control_rate == 250.0  # inherited
    assert s.criteria == {"no_fall": True, "height_error_max": 0.08, "distance_min": 1.5}  # drift_max dropped
    assert "extends" not in s.document and "matrix" not in s.document
    assert s.document["payloads"][0]["mass"] == 6
    assert len({x.content_hash for x in scenarios}) == 3


def test_error_in_inherited_value_points_into_base(tmp_path):
    write(tmp_path, "base.yaml", "name: base\nduration: 5\nground:\n  friction: 9\n")
    child = write(tmp_path, "child.yaml", "extends: base.yaml\nname: child\n")
    [e] = errors(load_file, child)
    assert e.path == str(tmp_path / "base.yaml") and (e.line, e.col) == (4, 13) and e.field == "ground.friction"


def test_child_values_keep_child_lines(tmp_path):
    write(tmp_path, "base.yaml", "name: base\nduration: 5\nseed: 1\n")
    child = write(tmp_path, "child.yaml", "extends: base.yaml\nname: child\n\nseed: -4\n")
    [e] = errors(load_file, child)
    assert e.path == str(child) and (e.line, e.col, e.field) == (4, 7, "seed")


def test_lists_replaced_whole_and_mappings_merged(tmp_path):
    write(tmp_path, "base.yaml", """\
        name: base
        duration: 5
        initial: {x: 1, y: 2}
        commands: [{at: 0, vx: 0.1}, {at: 1, vx: 0.2}]
    """)
    child = write(tmp_path, "child.yaml", """\
        extends: base.yaml
        name: child
        initial: {y: 3}
        commands: [{at: 0.5, vx: 0.3}]
    """)
    [s] = load_file(child)
    assert (s.initial.x, s.initial.y) == (1.0, 3.0)
    assert [(c.at, c.vx) for c in s.commands] == [(0.5, 0.3)]


def test_extends_chain(tmp_path):
    write(tmp_path, "a.yaml", "name: a\nduration: 5\nseed: 1\n")
    write(tmp_path, "sub/b.yaml", "extends: ../a.yaml\nseed: 2\ntimestep: 0.002\n")
    c = write(tmp_path, "sub/deeper/c.yaml", "extends: ../b.yaml\nname: c\n")
    [s] = load_file(c, roots=[tmp_path])
    assert (s.name, s.seed, s.timestep, s.duration) == ("c", 2, 0.002, 5.0)


def test_extends_loop_names_both_files(tmp_path):
    write(tmp_path, "a.yaml", "extends: b.yaml\nname: a\nduration: 5\n")
    write(tmp_path, "b.yaml", "extends: a.yaml\nname: b\n")
    [e] = errors(load_file, tmp_path / "a.yaml")
    assert "extends loop" in e.message
    assert "a.yaml" in str(e) and "b.yaml" in str(e)
    assert e.path == str(tmp_path / "b.yaml") and (e.line, e.col, e.field) == (1, 10, "extends")


def test_extends_self(tmp_path):
    p = write(tmp_path, "a.yaml", "extends: a.yaml\nname: a\nduration: 5\n")
    [e] = errors(load_file, p)
    assert "extends loop" in e.message


def test_extends_outside_roots(tmp_path):
    write(tmp_path, "outside.yaml", "name: o\nduration: 5\n")
    p = write(tmp_path, "inner/s.yaml", "extends: ../outside.yaml\nname: s\n")
    [e] = errors(load_file, p)
    assert "outside the allowed folders" in e.message and (e.line, e.col) == (1, 10)
    [s] = load_file(p, roots=[tmp_path])  # allowed with an explicit root
    assert s.name == "s"


def test_extends_absolute_path_outside(tmp_path):
    p = write(tmp_path, "s.yaml", "extends: /etc/passwd\nname: s\n")
    [e] = errors(load_file, p)
    assert "outside the allowed folders" in e.message


def test_folder_argument_is_a_root(tmp_path):
    write(tmp_path, "common/_base.yaml", "name: base\nduration: 5\n")
    write(tmp_path, "suite/s.yaml", "extends: ../common/_base.yaml\nname: s\n")
    [s] = load_scenarios([tmp_path])
    assert s.id == "s"


def test_extends_missing_and_bad_value(tmp_path):
    p = write(tmp_path, "s.yaml", "extends: nope.yaml\nname: s\n")
    [e] = errors(load_file, p)
    assert "not found" in e.message and e.field == "extends"
    p = write(tmp_path, "s.yaml", "extends: [a.yaml]\nname: s\n")
    [e] = errors(load_file, p)
    assert "path of another scenario file" in e.message


def test_extends_depth_limit(tmp_path):
    for i in range(MAX_EXTENDS_DEPTH + 2):
        write(tmp_path, f"f{i}.yaml", f"extends: f{i + 1}.yaml\n" if i <= MAX_EXTENDS_DEPTH else "name: x\nduration: 1\n")
    [e] = errors(load_file, tmp_path / "f0.yaml")
    assert "levels of extends" in e.message


def test_bundled_roots():
    assert BUNDLED_ROOTS[0].name == "models" and BUNDLED_ROOTS[1].name == "scenarios"


# --------------------------------------------------------------------------- matrix


def test_matrix_two_paths():
    scenarios = load_file(FIXTURES / "speed-load-grid.yaml")
    assert [s.id for s in scenarios] == [
        "speed-load-grid[mass=2,vx=0.2]", "speed-load-grid[mass=2,vx=0.4]",
        "speed-load-grid[mass=6,vx=0.2]", "speed-load-grid[mass=6,vx=0.4]"]
    assert scenarios[1].commands[1].vx == 0.4 and scenarios[1].payloads[0].mass == 2.0
    assert scenarios[0].slug == "speed-load-grid.mass-2.vx-0.2"


def test_matrix_label_collision_uses_longer_tail(tmp_path):
    p = write(tmp_path, "s.yaml", """\
        name: two
        duration: 5
        payloads:
          - {name: a, mass: 1, size: [0.1, 0.1, 0.1]}
          - {name: b, mass: 1, size: [0.1, 0.1, 0.1]}
        matrix:
          payloads.a.mass: [1]
          payloads.b.mass: [2, 3]
    """)
    assert [s.id for s in load_file(p)] == ["two[a.mass=1,b.mass=2]", "two[a.mass=1,b.mass=3]"]


def test_matrix_bad_value_points_at_matrix_line(tmp_path):
    text = """\
        name: m
        duration: 5
        payloads:
          - {name: crate, mass: 1, size: [0.1, 0.1, 0.1]}
        matrix:
          payloads.crate.mass: [2, -1, 3]
    """
    p = write(tmp_path, "s.yaml", text)
    [e] = errors(load_file, p)
    assert (e.line, e.col, e.field) == (6, 28, "payloads.0.mass") and "more than 0 kg" in e.message


def test_matrix_bad_path_did_you_mean(tmp_path):
    p = write(tmp_path, "s.yaml", """\
        name: m
        duration: 5
        payloads:
          - {name: crate, mass: 1, size: [0.1, 0.1, 0.1]}
        matrix:
          payloads.crat.mass: [2, 3]
    """)
    [e] = errors(load_file, p)
    assert (e.line, e.col) == (6, 3) and "no item named 'crat'" in e.message and e.hint == "did you mean 'crate'?"


def test_matrix_creates_missing_keys_and_unknown_ones_fail(tmp_path):
    p = write(tmp_path, "s.yaml", "name: m\nduration: 5\nmatrix:\n  ground.friction: [0.2, 0.4]\n")
    assert [s.ground.friction for s in load_file(p)] == [0.2, 0.4]
    p = write(tmp_path, "s.yaml", "name: m\nduration: 5\nmatrix:\n  grund.friction: [0.2]\n")
    [e] = errors(load_file, p)
    assert e.field == "grund" and e.line == 4 and e.hint == "did you mean 'ground'?"


def test_matrix_shape_errors(tmp_path):
    p = write(tmp_path, "s.yaml", "name: m\nduration: 5\nmatrix:\n  seed: []\n  name: [a]\n")
    errs = errors(load_file, p)
    assert {e.field for e in errs} == {"matrix.seed", "matrix.name"}
    p = write(tmp_path, "s.yaml", "name: m\nduration: 5\nmatrix:\n  seed: " + str(list(range(40))) + "\n  timestep: "
              + str([0.001] * 40) + "\n")
    [e] = errors(load_file, p)
    assert "variants" in e.message


def test_matrix_values_of_any_shape(tmp_path):
    p = write(tmp_path, "s.yaml", """\
        name: m
        duration: 5
        terrain: []
        matrix:
          terrain:
            - [{slope: {start: 1, length: 1, angle_deg: 5}}]
            - [{slope: {start: 1, length: 1, angle_deg: 99}}]
    """)
    [e] = errors(load_file, p)
    assert (e.line, e.field) == (7, "terrain.0.slope.angle_deg")


# --------------------------------------------------------------------------- paths


DOC = {"payloads": [{"name": "crate", "mass": 2}, {"name": "b", "mass": 1}],
       "terrain": [{"slope": {"start": 0, "angle_deg": 5}}], "ground": {"friction": 0.8}}


def test_get_and_set_paths():
    assert get_path(DOC, "payloads.crate.mass") == 2
    assert get_path(DOC, "payloads.1.mass") == 1
    assert get_path(DOC, "terrain.0.slope.angle_deg") == 5
    assert resolve_path(DOC, "payloads.b.mass") == ("payloads", 1, "mass")
    import copy

    d = copy.deepcopy(DOC)
    assert set_path(d, "payloads.crate.mass", 9) == (("payloads", 0, "mass"), [])
    assert set_path(d, "initial.x", 1.0) == (("initial", "x"), [("initial",)])
    assert d["payloads"][0]["mass"] == 9 and d["initial"] == {"x": 1.0}


@pytest.mark.parametrize("path,msg", [
    ("payloads.crat.mass", "no item named 'crat'"),
    ("payloads.5.mass", "has 2 items, no index 5"),
    ("ground.friction.x", "is the value 0.8"),
    ("ground..friction", "not a dotted path"),
    ("grund.friction", "has no key 'grund'"),
])
def test_bad_paths_are_scenario_errors(path, msg):
    with pytest.raises(ScenarioError) as info:
        get_path(DOC, path)
    assert msg in info.value.message and info.value.field == path


# --------------------------------------------------------------------------- derive


def test_derive_revalidates_and_labels():
    [base] = load_file(FIXTURES / "full-course.yaml")
    d = derive(base, {"payloads.box.mass": 4.5, "ground.friction": 0.3}, "mass=4.5")
    assert d.id == "full-course[mass=4.5]" and d.slug == "full-course.mass-4.5"
    assert d.variant == {"mass": 4.5}
    assert d.payloads[0].mass == 4.5 and d.ground.friction == 0.3
    assert d.content_hash != base.content_hash
    assert base.payloads[0].mass == 2.0 and base.document["payloads"][0]["mass"] == 2.0  # original untouched
    [v] = [s for s in load_file(FIXTURES / "rear-load-trot.yaml") if s.variant == {"mass": 6}]
    d2 = derive(v, {"ground.friction": 0.2}, "friction=0.2")
    assert d2.id == "rear-load-trot[mass=6,friction=0.2]" and d2.variant == {"mass": 6, "friction": 0.2}


def test_derive_invalid_value_is_located_at_the_original_value():
    [base] = load_file(FIXTURES / "full-course.yaml")
    [e] = errors(derive, base, {"payloads.box.mass": -1}, "mass=-1")
    assert e.field == "payloads.0.mass" and e.path.endswith("full-course.yaml") and e.line == 22
    [e] = errors(derive, base, {"payloads.nope.mass": 1}, "x")
    assert "no item named 'nope'" in e.message


def test_derive_keeps_inherited_locations():
    [v, *_] = load_file(FIXTURES / "rear-load-trot.yaml")
    errs = errors(derive, v, {"duration": 0.5}, "short")  # score_from 1.0 (from the base) now after the end
    by = {e.field: e for e in errs}
    assert by["score_from"].path.endswith("_base-trot.yaml") and by["score_from"].line == 12
    assert by["commands.1.at"].line == 21


# --------------------------------------------------------------------------- ids


def test_scenario_id_and_slug():
    assert scenario_id("rear-load-trot", {"mass": 6}) == "rear-load-trot[mass=6]"
    assert scenario_id("rear load/trot", {"mass": 6.0, "speed": 0.4}) == "rear-load-trot[mass=6,speed=0.4]"
    assert scenario_id("x", {"on": True, "kind": "ice cube"}) == "x[on=true,kind=ice-cube]"
    assert scenario_slug("rear-load-trot[mass=6,speed=0.4]") == "rear-load-trot.mass-6.speed-0.4"
    for nasty in ["..", ".", "", "../../etc", "/", "[]", "a/../b"]:
        slug = scenario_slug(scenario_id(nasty, {}))
        assert slug and slug not in (".", "..") and ".." not in slug and "/" not in slug and not slug.startswith(".")
    long = scenario_slug(scenario_id("a" * 300, {"v": 1}))
    assert len(long) <= 120 and long != scenario_slug(scenario_id("a" * 300, {"v": 2}))
    import re

    assert re.fullmatch(r"[A-Za-z0-9._-]+", scenario_slug("weird ☃ name[x=ü]"))


def test_duplicate_slug_across_run(tmp_path):
    write(tmp_path, "a.yaml", "name: x.m-2\nduration: 5\n")
    write(tmp_path, "b.yaml", "name: x\nduration: 5\nseed: 0\nmatrix: {seed: [2]}\n")
    # ids differ (x.m-2 vs x[seed=2]); slugs x.m-2 vs x.seed-2 differ too: fine
    assert len(load_scenarios([tmp_path])) == 2
    write(tmp_path, "c.yaml", "name: x.seed-2\nduration: 5\n")
    errs = errors(load_scenarios, [tmp_path])
    assert any("same result folder name" in e.message for e in errs)


# --------------------------------------------------------------------------- trials


def test_expand_trials_is_deterministic():
    [base] = load_file(FIXTURES / "full-course.yaml")
    t1, t2 = expand_trials(base), expand_trials(base)
    assert [t.id for t in t1] == ["full-course[trial=0]", "full-course[trial=1]", "full-course[trial=2]"]
    assert [t.seed for t in t1] == [7, 8, 9]
    assert [t.payloads[0].mass for t in t1] == [t.payloads[0].mass for t in t2]
    assert all(1.0 <= t.payloads[0].mass <= 3.0 and t.ground.friction in (0.5, 0.9) for t in t1)
    assert all(t.trials == 1 and t.randomize == {} and t.variant == {"trial": i} for i, t in enumerate(t1))
    [plain] = load_file(FIXTURES / "speed-load-grid.yaml")[:1]
    assert expand_trials(plain) == [plain]


def test_randomize_checked_at_load(tmp_path):
    p = write(tmp_path, "s.yaml", """\
        name: r
        duration: 5
        ground: {friction: 0.5}
        trials: 2
        randomize:
          ground.friction: [0.1, 9.0]
          ground.frction: [0.1, 0.2]
    """)
    errs = errors(load_file, p)
    by = {e.field: e for e in errs}
    assert "makes the scenario invalid" in by["randomize.ground.friction"].message
    assert by["randomize.ground.friction"].line == 6
    assert by["ground.frction"].line == 7 and "has no key 'frction'" in by["ground.frction"].message
