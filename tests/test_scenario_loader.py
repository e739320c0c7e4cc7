"""Scenario loading and validation: every class of bad input gives file:line:col and the field."""

from __future__ import annotations

import textwrap
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from bench.errors import ScenarioError, ScenarioErrors
from bench.scenario import load_file, load_scenarios
from bench.scenario import yamlload
from bench.scenario.schema import Payload, Rough, Stairs

FIXTURES = Path(__file__).parent / "fixtures" / "scenarios"

MINIMAL = """\
name: t
duration: 5
"""


def write(tmp_path: Path, text: str, name: str = "s.yaml") -> Path:
    p = tmp_path / name
    p.parent.mkdir(parents=True, exist_ok=True)
    p.write_text(textwrap.dedent(text))
    return p


def errors_of(tmp_path: Path, text: str, name: str = "s.yaml") -> list[ScenarioError]:
    p = write(tmp_path, text, name)
    with pytest.raises(ScenarioErrors) as info:
        load_file(p)
    return info.value.errors


def pos(text: str, needle: str, nth: int = 0) -> tuple[int, int]:
    """1-based line, column of the nth occurrence of needle in (dedented) text."""
    text = textwrap.dedent(text)
    i = -1
    for _ in range(nth + 1):
        i = text.index(needle, i + 1)
    line = text.count("\n", 0, i) + 1
    col = i - (text.rfind("\n", 0, i) + 1) + 1
    return line, col


def one(tmp_path: Path, text: str, field: str, needle: str, *, contains: str = "", nth: int = 0) -> ScenarioError:
    errs = errors_of(tmp_path, text)
    matching = [e for e in errs if e.field == field]
    assert matching, f"no error on {field}: {[str(e) for e in errs]}"
    e = matching[0]
    assert (e.line, e.col) == pos(text, needle, nth), str(e)
    assert contains in str(e), str(e)
    assert e.path.endswith("s.yaml")
    return e


# --------------------------------------------------------------------------- valid input


def test_minimal_scenario_gets_spec_defaults(tmp_path):
    [s] = load_file(write(tmp_path, MINIMAL))
    assert s.id == "t" and s.slug == "t" and s.name == "t"
    assert s.robot.name == "quad12" and s.robot.manifest is None
    assert (s.timestep, s.control_rate, s.seed, s.score_from, s.score_from_s) == (0.001, 500.0, 0, None, 0.5)
    assert s.substeps == 2
    assert s.ground.friction == 0.8
    assert (s.initial.x, s.initial.y, s.initial.yaw_deg, s.initial.height_offset) == (0, 0, 0, 0)
    assert s.terrain == () and s.payloads == () and s.commands == () and s.criteria == {}
    assert s.trials == 1 and s.randomize == {} and s.variant == {} and s.tags == ()
    assert len(s.content_hash) == 64
    assert s.document == {"name": "t", "duration": 5}


def test_full_fixture_values(tmp_path):
    [s] = load_file(FIXTURES / "full-course.yaml")
    kinds = [t.kind for t in s.terrain]
    assert kinds == ["slope", "stairs", "stairs", "rough", "blocks", "friction_patch", "soft_patch"]
    stairs = s.terrain[1]
    assert isinstance(stairs, Stairs) and (stairs.rise, stairs.run) == (0.196, 0.254)  # from the preset
    rough = s.terrain[3]
    assert isinstance(rough, Rough) and rough.seed == 7  # defaults to the scenario seed
    water = s.payloads[1]
    assert isinstance(water, Payload) and water.drain.final_mass == 0.5
    tray = s.payloads[2]
    assert (tray.damping, tray.travel) == (2.0, 0.1)  # tray defaults filled
    assert s.payloads[0].stiffness is None  # rigid: no spring
    assert [d.kind for d in s.disturbances] == ["push", "push_train", "steady_force"]
    assert [f.kind for f in s.faults][:2] == ["derate", "derate"]
    assert s.faults[0].joints == ("FL_knee", "FR_knee") and s.faults[1].joints == "all"
    assert s.criteria["no_fall"] is True and s.criteria["drift_max"] == 0.5
    assert s.source == str(FIXTURES / "full-course.yaml")


def test_yaml_12_scalars(tmp_path):
    [s] = load_file(write(tmp_path, "name: t\nduration: 5\ntimestep: 2e-3\ncontrol_rate: 250\n"))
    assert s.timestep == 0.002 and s.substeps == 2


def test_robot_manifest_relative_to_file(tmp_path):
    (tmp_path / "robots").mkdir()
    (tmp_path / "robots" / "manifest.yaml").write_text("name: mine\n")
    [s] = load_file(write(tmp_path, MINIMAL + "robot: {manifest: robots/manifest.yaml}\n"))
    assert s.robot.name is None and s.robot.manifest == tmp_path / "robots" / "manifest.yaml"


def test_stairs_preset_explicit_rise_wins(tmp_path):
    text = MINIMAL + "terrain:\n  - stairs: {start: 1, steps: 3, preset: ibc-commercial, rise: 0.15}\n"
    [s] = load_file(write(tmp_path, text))
    assert (s.terrain[0].rise, s.terrain[0].run) == (0.15, 0.280)
    assert s.terrain[0].end == pytest.approx(1 + 3 * 0.280)


# --------------------------------------------------------------------------- unknown keys, types


def test_unknown_key_did_you_mean(tmp_path):
    text = "name: t\ndurration: 5\n"
    errs = errors_of(tmp_path, text)
    by = {e.field: e for e in errs}
    assert (by["durration"].line, by["durration"].col) == (2, 1)
    assert by["durration"].hint == "did you mean 'duration'?"
    assert "missing required field 'duration'" in by["duration"].message
    assert str(by["durration"]).endswith("s.yaml:2:1: durration: unknown key 'durration' (did you mean 'duration'?)")


def test_unknown_nested_key(tmp_path):
    text = MINIMAL + "payloads:\n  - {name: a, masss: 2, mass: 1, size: [0.1, 0.1, 0.1]}\n"
    one(tmp_path, text, "payloads.0.masss", "masss", contains="did you mean 'mass'")


def test_unknown_key_without_close_match_lists_accepted(tmp_path):
    e = one(tmp_path, MINIMAL + "ground: {zzz: 1}\n", "ground.zzz", "zzz")
    assert e.hint == "accepted: friction"


def test_wrong_type_says_what_is_accepted(tmp_path):
    text = MINIMAL + "payloads:\n  - name: a\n    mass: heavy\n    size: [0.1, 0.1, 0.1]\n"
    one(tmp_path, text, "payloads.0.mass", "heavy", contains="expected a number, got the text 'heavy'")


def test_number_with_unit_hint(tmp_path):
    e = one(tmp_path, "name: t\nduration: 5 s\n", "duration", "5 s")
    assert "write the number alone (5)" in e.hint


def test_bool_is_not_an_int(tmp_path):
    one(tmp_path, MINIMAL + "seed: true\n", "seed", "true", contains="expected an integer, got true")


def test_float_is_not_an_int(tmp_path):
    e = one(tmp_path, MINIMAL + "trials: 2.0\n", "trials", "2.0", contains="expected an integer")
    assert e.hint == "write 2"


@pytest.mark.parametrize("bad", [".nan", ".inf", "-.inf"])
def test_non_finite_floats_rejected(tmp_path, bad):
    one(tmp_path, MINIMAL + f"ground: {{friction: {bad}}}\n", "ground.friction", bad, contains="finite")


def test_vector_has_fixed_length(tmp_path):
    text = MINIMAL + "payloads:\n  - {name: a, mass: 1, size: [0.1, 0.2]}\n"
    one(tmp_path, text, "payloads.0.size", "[0.1", contains="expected exactly 3 values, got 2")


def test_vector_item_type(tmp_path):
    text = MINIMAL + "payloads:\n  - {name: a, mass: 1, size: [0.1, x, 0.1]}\n"
    one(tmp_path, text, "payloads.0.size.1", "x,", contains="expected a number")


def test_enum_choice_did_you_mean(tmp_path):
    text = MINIMAL + "payloads:\n  - {name: a, type: rigd, mass: 1, size: [0.1, 0.1, 0.1]}\n"
    e = one(tmp_path, text, "payloads.0.type", "rigd", contains="expected one of rigid, shifting, tray")
    assert e.hint == "did you mean 'rigid'?"


def test_string_expected(tmp_path):
    one(tmp_path, "name: 5\nduration: 5\n", "name", "5", contains="expected text")


# --------------------------------------------------------------------------- missing fields


def test_missing_required_points_at_parent_mapping(tmp_path):
    text = MINIMAL + "payloads:\n  - name: a\n    size: [0.1, 0.1, 0.1]\n"
    one(tmp_path, text, "payloads.0.mass", "name: a", contains="missing required field 'mass'")


def test_missing_name_points_at_top(tmp_path):
    e = one(tmp_path, "duration: 5\n", "name", "duration", contains="missing required field 'name'")
    assert (e.line, e.col) == (1, 1)


def test_stairs_without_rise_or_preset(tmp_path):
    text = MINIMAL + "terrain:\n  - stairs: {start: 1, steps: 3, run: 0.3}\n"
    one(tmp_path, text, "terrain.0.stairs.rise", "{start", contains="(or set 'preset')")


# --------------------------------------------------------------------------- ranges and physics


@pytest.mark.parametrize("mass", ["0", "-1.5"])
def test_mass_must_be_positive(tmp_path, mass):
    text = MINIMAL + f"payloads:\n  - {{name: a, mass: {mass}, size: [0.1, 0.1, 0.1]}}\n"
    one(tmp_path, text, "payloads.0.mass", mass, contains="must be more than 0 kg")


def test_stair_rise_limit(tmp_path):
    text = MINIMAL + "terrain:\n  - stairs: {start: 1, steps: 3, rise: 0.6, run: 0.3}\n"
    one(tmp_path, text, "terrain.0.stairs.rise", "0.6", contains="must be at most 0.5 m, got 0.6 m")


@pytest.mark.parametrize("duration,msg", [("0", "more than 0 s"), ("-3", "more than 0 s"), ("601", "at most 600 s")])
def test_duration_range(tmp_path, duration, msg):
    one(tmp_path, f"name: t\nduration: {duration}\n", "duration", duration, contains=msg)


def test_timestep_range(tmp_path):
    one(tmp_path, MINIMAL + "timestep: 0.05\n", "timestep", "0.05", contains="at most 0.01 s")


def test_substeps_must_be_integer(tmp_path):
    e = one(tmp_path, MINIMAL + "timestep: 0.001\ncontrol_rate: 300\n", "control_rate", "300",
            contains="not a whole number")
    assert "control_rate" in e.hint


def test_command_at_must_be_before_duration(tmp_path):
    text = MINIMAL + "commands:\n  - {at: 0, vx: 0.3}\n  - {at: 5, vx: 0}\n"
    one(tmp_path, text, "commands.1.at", "5, vx", contains="not before the end of the scenario (duration 5 s)")


def test_commands_sorted(tmp_path):
    text = MINIMAL + "commands:\n  - {at: 2, vx: 0.3}\n  - {at: 1, vx: 0}\n"
    one(tmp_path, text, "commands.1.at", "1, vx", contains="increasing time")


def test_event_after_duration(tmp_path):
    text = MINIMAL + "disturbances:\n  - push: {at: 12, duration: 0.1, force: [0, 50, 0]}\n"
    one(tmp_path, text, "disturbances.0.push.at", "12", contains="not before the end")


def test_fault_after_duration(tmp_path):
    text = MINIMAL + "faults:\n  - lock: {at: 7.5, joint: FL_knee}\n"
    one(tmp_path, text, "faults.0.lock.at", "7.5", contains="not before the end")


def test_push_train_end_may_equal_duration_but_not_exceed(tmp_path):
    ok = MINIMAL + ("disturbances:\n  - push_train: {start: 1, end: 5, count: 2, magnitude: [1, 2],"
                    " duration: [0.1, 0.2]}\n")
    load_file(write(tmp_path, ok))
    bad = ok.replace("end: 5", "end: 6")
    one(tmp_path, bad, "disturbances.0.push_train.end", "6,", contains="not before the end")


def test_score_from_before_end(tmp_path):
    one(tmp_path, MINIMAL + "score_from: 9\n", "score_from", "9", contains="not before the end")


def test_terrain_overlap(tmp_path):
    text = MINIMAL + ("terrain:\n  - slope: {start: 1, length: 2, angle_deg: 5}\n"
                      "  - rough: {start: 2.5, length: 1, height: 0.02}\n")
    e = one(tmp_path, text, "terrain.1.rough.start", "2.5", contains="overlaps terrain.0 (slope, 1 to 3 m)")
    assert e.hint == "start it at 3 m or later"


def test_terrain_out_of_order(tmp_path):
    text = MINIMAL + ("terrain:\n  - slope: {start: 5, length: 2, angle_deg: 5}\n"
                      "  - friction_patch: {start: 1, length: 1, friction: 0.2}\n")
    one(tmp_path, text, "terrain.1.friction_patch.start", "1, length", contains="in order of start")


def test_stairs_extent_counts_for_overlap(tmp_path):
    text = MINIMAL + ("terrain:\n  - stairs: {start: 1, steps: 10, rise: 0.1, run: 0.3}\n"
                      "  - slope: {start: 3.5, length: 1, angle_deg: 5}\n")
    one(tmp_path, text, "terrain.1.slope.start", "3.5", contains="overlaps")


def test_slope_angle_limit(tmp_path):
    text = MINIMAL + "terrain:\n  - slope: {start: 1, length: 2, angle_deg: -50}\n"
    one(tmp_path, text, "terrain.0.slope.angle_deg", "-50", contains="at least -45 deg")


def test_rough_heightfield_bounded(tmp_path):
    text = MINIMAL + "terrain:\n  - rough: {start: 0, length: 900, width: 90, height: 0.02, cell_size: 0.005, wavelength: 1}\n"
    one(tmp_path, text, "terrain.0.rough.cell_size", "0.005", contains="cells")


def test_soft_patch_timeconst_vs_timestep(tmp_path):
    text = MINIMAL + "timestep: 0.005\ncontrol_rate: 100\nterrain:\n  - soft_patch: {start: 0, length: 1, timeconst: 0.005}\n"
    one(tmp_path, text, "terrain.0.soft_patch.timeconst", "0.005}", contains="shorter than 2 timesteps")


def test_payload_drop_before_attach(tmp_path):
    text = MINIMAL + "payloads:\n  - {name: a, mass: 1, size: [0.1, 0.1, 0.1], attach_at: 2, drop_at: 1}\n"
    one(tmp_path, text, "payloads.0.drop_at", "1}", contains="drop_at 1 s is not after attach_at 2 s")


def test_payload_fields_by_type(tmp_path):
    text = MINIMAL + "payloads:\n  - {name: a, mass: 1, size: [0.1, 0.1, 0.1], stiffness: 100}\n"
    e = one(tmp_path, text, "payloads.0.stiffness", "100", contains="does not apply to a rigid payload")
    assert e.hint == "only for type shifting"


def test_payload_names_unique_and_not_numeric(tmp_path):
    text = MINIMAL + ("payloads:\n  - {name: a, mass: 1, size: [0.1, 0.1, 0.1]}\n"
                      "  - {name: a, mass: 1, size: [0.1, 0.1, 0.1]}\n  - {name: '7', mass: 1, size: [0.1, 0.1, 0.1]}\n")
    errs = {e.field: e for e in errors_of(tmp_path, text)}
    assert "duplicate payload name 'a'" in errs["payloads.1.name"].message
    assert "all digits" in errs["payloads.2.name"].message


def test_drain_more_than_mass(tmp_path):
    text = MINIMAL + ("payloads:\n  - name: a\n    mass: 1\n    size: [0.1, 0.1, 0.1]\n"
                      "    drain: {at: 1, duration: 1, final_mass: 2}\n")
    one(tmp_path, text, "payloads.0.drain.final_mass", "2}", contains="final_mass 2 kg is more than mass 1 kg")


def test_mass_steps_in_order(tmp_path):
    text = MINIMAL + ("payloads:\n  - name: a\n    mass: 1\n    size: [0.1, 0.1, 0.1]\n"
                      "    steps: [{at: 2, mass: 2}, {at: 1, mass: 3}]\n")
    one(tmp_path, text, "payloads.0.steps.1.at", "1, mass: 3", contains="increasing time: 1 s after 2 s")


def test_push_train_range_order(tmp_path):
    text = MINIMAL + ("disturbances:\n  - push_train: {start: 1, end: 4, count: 2, magnitude: [50, 10],"
                      " duration: [0.1, 0.2]}\n")
    one(tmp_path, text, "disturbances.0.push_train.magnitude", "[50", contains="range [50, 10] has lo > hi")


def test_derate_joints(tmp_path):
    text = MINIMAL + "faults:\n  - derate: {at: 1, joints: some, factor: 0.5}\n"
    one(tmp_path, text, "faults.0.derate.joints", "some", contains="'all' or a list of joint names")
    text = MINIMAL + "faults:\n  - derate: {at: 1, factor: 1.5}\n"
    one(tmp_path, text, "faults.0.derate.factor", "1.5", contains="at most 1")


def test_sensor_choice(tmp_path):
    text = MINIMAL + "faults:\n  - sensor_noise: {sensor: imu_gyr, std: 0.1}\n"
    e = one(tmp_path, text, "faults.0.sensor_noise.sensor", "imu_gyr", contains="expected one of")
    assert e.hint == "did you mean 'imu_gyro'?"


# --------------------------------------------------------------------------- one-key lists


def test_unknown_terrain_kind(tmp_path):
    text = MINIMAL + "terrain:\n  - slop: {start: 1, length: 2, angle_deg: 5}\n"
    e = one(tmp_path, text, "terrain.0.slop", "slop", contains="unknown terrain kind 'slop'")
    assert e.hint == "did you mean 'slope'?"


def test_fields_beside_kind(tmp_path):
    text = MINIMAL + "terrain:\n  - slope:\n    start: 1\n    length: 2\n    angle_deg: 5\n"
    e = one(tmp_path, text, "terrain.0.start", "start", contains="beside 'slope'")
    assert "indent" in e.hint


def test_two_kinds_in_one_item(tmp_path):
    text = MINIMAL + "disturbances:\n  - {push: {at: 1, duration: 0.1, force: [1, 0, 0]}, steady_force: {at: 2, force: [1, 0, 0]}}\n"
    one(tmp_path, text, "disturbances.0", "{push", contains="exactly one key")


def test_item_not_a_mapping(tmp_path):
    one(tmp_path, MINIMAL + "faults:\n  - lock\n", "faults.0", "lock", contains="one-key mapping")


# --------------------------------------------------------------------------- criteria, robot


def test_unknown_criterion_did_you_mean(tmp_path):
    e = one(tmp_path, MINIMAL + "criteria:\n  no_fal: true\n", "criteria.no_fal", "no_fal",
            contains="unknown key 'no_fal'")
    assert e.hint == "did you mean 'no_fall'?"


def test_criterion_values(tmp_path):
    one(tmp_path, MINIMAL + "criteria: {no_fall: 3}\n", "criteria.no_fall", "3", contains="true or false")
    one(tmp_path, MINIMAL + "criteria: {drift_max: -1}\n", "criteria.drift_max", "-1", contains="at least 0 m")
    one(tmp_path, MINIMAL + "criteria: {pass_rate_min: 2}\n", "criteria.pass_rate_min", "2", contains="at most 1")


def test_robot_manifest_missing(tmp_path):
    one(tmp_path, MINIMAL + "robot: {manifest: nope.yaml}\n", "robot.manifest", "nope.yaml", contains="not found")


def test_robot_wrong_shape(tmp_path):
    one(tmp_path, MINIMAL + "robot: [quad12]\n", "robot", "[quad12]", contains="robot name or {manifest: path}")
    one(tmp_path, MINIMAL + "robot: {manifst: x.yaml}\n", "robot.manifst", "manifst", contains="did you mean")


# --------------------------------------------------------------------------- all errors at once


def test_every_error_in_a_file_is_reported(tmp_path):
    text = ("name: t\nduration: 5\nseed: -1\nground: {friction: 0}\n"
            "payloads:\n  - {name: a, mass: 0, size: [0.1, 0.1, 0.1]}\n")
    fields = {e.field for e in errors_of(tmp_path, text)}
    assert {"seed", "ground.friction", "payloads.0.mass"} <= fields


def test_errors_collected_across_files(tmp_path):
    write(tmp_path, "name: a\nduration: 0\n", "one/a.yaml")
    write(tmp_path, "name: b\nduration: 5\nseeed: 1\n", "two/b.yaml")
    write(tmp_path, MINIMAL, "three/c.yaml")
    with pytest.raises(ScenarioErrors) as info:
        load_scenarios([tmp_path])
    files = sorted(Path(e.path).name for e in info.value.errors)
    assert files == ["a.yaml", "b.yaml"]
    assert len(str(info.value).splitlines()) == 2


def test_duplicate_ids_across_files(tmp_path):
    write(tmp_path, MINIMAL, "a.yaml")
    write(tmp_path, "# same name\n" + MINIMAL, "b.yaml")
    with pytest.raises(ScenarioErrors) as info:
        load_scenarios([tmp_path])
    [e] = info.value.errors
    assert e.path.endswith("b.yaml") and (e.line, e.field) == (2, "name")
    assert "duplicate scenario id 't'" in e.message and "a.yaml:1" in e.message


def test_folder_search_sorted_recursive_skips_partials(tmp_path):
    write(tmp_path, "name: z\nduration: 1\n", "z.yaml")
    write(tmp_path, "name: a\nduration: 1\n", "sub/a.yml")
    write(tmp_path, "name: m\nduration: 1\n", "m.yaml")
    write(tmp_path, "duration: 1\n", "_partial.yaml")
    write(tmp_path, "duration: 1\n", "_parts/x.yaml")
    write(tmp_path, "not yaml", "notes.txt")
    ids = [s.id for s in load_scenarios([str(tmp_path)])]
    assert ids == ["m", "a", "z"]  # sorted by path: m.yaml, sub/a.yml, z.yaml


def test_missing_path_and_empty_folder(tmp_path):
    (tmp_path / "empty").mkdir()
    with pytest.raises(ScenarioErrors) as info:
        load_scenarios([tmp_path / "nope.yaml", tmp_path / "empty"])
    msgs = [e.message for e in info.value.errors]
    assert "no such file or folder" in msgs[0] and "no *.yaml" in msgs[1]


# --------------------------------------------------------------------------- YAML level


def test_duplicate_keys_name_both_lines(tmp_path):
    text = "name: t\nduration: 5\nseed: 1\nground: {friction: 0.5}\nseed: 2\n"
    [e] = errors_of(tmp_path, text)
    assert (e.line, e.col, e.field) == (5, 1, "seed")
    assert "duplicate key 'seed' (first defined at line 3)" in e.message


def test_duplicate_nested_keys(tmp_path):
    text = MINIMAL + "payloads:\n  - name: a\n    mass: 1\n    mass: 2\n"
    [e] = errors_of(tmp_path, text)
    assert (e.line, e.col, e.field) == (6, 5, "payloads.0.mass")


def test_syntax_error_line_col(tmp_path):
    [e] = errors_of(tmp_path, "name: t\nduration: [5\nseed: 1\n")
    assert e.field == "" and "YAML syntax error" in e.message
    assert e.line == 3 and str(e).startswith(str(tmp_path / "s.yaml") + ":3:")


def test_bad_indentation(tmp_path):
    [e] = errors_of(tmp_path, "name: t\n  duration: 5\n")
    assert e.line == 2 and "YAML syntax error" in e.message


@pytest.mark.parametrize("text", ["", "\n\n", "# only a comment\n", "---\n"])
def test_empty_file(tmp_path, text):
    [e] = errors_of(tmp_path, text)
    assert (e.line, e.col) == (1, 1) and "empty" in e.message


@pytest.mark.parametrize("text,what", [("- a\n- b\n", "a list"), ("just text\n", "'just text'"), ("42\n", "'42'")])
def test_top_level_must_be_mapping(tmp_path, text, what):
    [e] = errors_of(tmp_path, text)
    assert "top level must be a mapping" in e.message and what in e.message


def test_binary_junk(tmp_path):
    p = tmp_path / "junk.yaml"
    p.write_bytes(b"name: t\nduration: 5\n\x89PNG\x00\x00\x1a")
    with pytest.raises(ScenarioErrors) as info:
        load_file(p)
    [e] = info.value.errors
    assert e.line == 3 and ("UTF-8" in e.message or "control character" in e.message)
    p.write_bytes(b"name: t\n\x00\x01\x02")
    with pytest.raises(ScenarioErrors) as info:
        load_file(p)
    assert (info.value.errors[0].line, info.value.errors[0].col) == (2, 1)


def test_non_utf8(tmp_path):
    p = tmp_path / "latin.yaml"
    p.write_bytes("name: caf\xe9\n".encode("latin-1"))
    [e] = pytest.raises(ScenarioErrors, load_file, p).value.errors
    assert (e.line, e.col) == (1, 10) and "UTF-8" in e.message


def test_file_size_limit(tmp_path, monkeypatch):
    monkeypatch.setattr(yamlload, "MAX_FILE_BYTES", 100)
    p = write(tmp_path, MINIMAL + "description: " + "x" * 200 + "\n")
    [e] = pytest.raises(ScenarioErrors, load_file, p).value.errors
    assert "limit" in e.message


def test_string_length_limit(tmp_path):
    text = MINIMAL + "description: " + "x" * (yamlload.MAX_STRING_CHARS + 1) + "\n"
    [e] = errors_of(tmp_path, text)
    assert (e.line, e.field) == (3, "description") and "longer than" in e.message


def test_deep_nesting_bounded(tmp_path):
    text = MINIMAL + "description: " + "[" * 5000 + "]" * 5000 + "\n"
    [e] = errors_of(tmp_path, text)
    assert e.line == 3 and f"deeper than {yamlload.MAX_DEPTH}" in e.message
    block = MINIMAL + "".join("  " * i + f"k{i}:\n" for i in range(40))
    [e] = errors_of(tmp_path, block)
    assert "deeper than" in e.message


def test_alias_bomb_bounded(tmp_path):
    lines = ["a0: &a0 [x, x, x, x, x, x, x, x, x]"]
    for i in range(1, 10):
        prev = f"*a{i - 1}"
        lines.append(f"a{i}: &a{i} [{', '.join([prev] * 9)}]")
    text = "name: t\nduration: 5\n" + "\n".join(lines) + "\n"
    [e] = errors_of(tmp_path, text)
    assert "after expanding aliases" in e.message or "aliases" in e.message


def test_alias_count_limit(tmp_path):
    text = MINIMAL + "x: &v 1\ntags: [" + ", ".join(["*v"] * (yamlload.MAX_ALIASES + 1)) + "]\n"
    [e] = errors_of(tmp_path, text)
    assert f"more than {yamlload.MAX_ALIASES} aliases" in e.message


def test_recursive_alias(tmp_path):
    [e] = errors_of(tmp_path, MINIMAL + "tags: &t [*t]\n")
    assert "recursive" in e.message


def test_unsafe_tags_rejected(tmp_path):
    [e] = errors_of(tmp_path, MINIMAL + "description: !!python/object/apply:os.system [echo hi]\n")
    assert e.line == 3 and "not allowed" in e.message
    [e] = errors_of(tmp_path, MINIMAL + "description: !custom x\n")
    assert "not allowed" in e.message


def test_anchors_and_merge_keys_work(tmp_path):
    text = MINIMAL + ("payloads:\n  - &box {name: a, mass: 1, size: [0.1, 0.1, 0.1]}\n"
                      "  - <<: *box\n    name: b\n    mass: -2\n")
    errs = errors_of(tmp_path, text)
    assert [(e.field, e.line) for e in errs] == [("payloads.1.mass", 7)]


def test_non_string_keys(tmp_path):
    [e] = errors_of(tmp_path, MINIMAL + "1: x\n")
    assert e.line == 3 and "keys must be plain strings" in e.message


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(st.binary(max_size=200) | st.text(max_size=200))
def test_fuzz_never_a_traceback(tmp_path, blob):
    p = tmp_path / "fuzz.yaml"
    p.write_bytes(blob if isinstance(blob, bytes) else blob.encode("utf-8", "surrogatepass"))
    try:
        load_file(p)
    except ScenarioErrors as e:
        for err in e.errors:
            assert err.line >= 1 and err.col >= 1


@settings(max_examples=100, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(st.dictionaries(st.sampled_from(["name", "duration", "seed", "terrain", "payloads", "criteria", "ground"]),
                       st.recursive(st.none() | st.booleans() | st.floats() | st.integers() | st.text(max_size=5),
                                    lambda c: st.lists(c, max_size=3) | st.dictionaries(st.text(max_size=5), c,
                                                                                         max_size=3), max_leaves=8)))
def test_fuzz_structures_give_located_errors(tmp_path, doc):
    import json

    p = tmp_path / "fuzz.yaml"
    p.write_text(json.dumps(doc).replace("NaN", ".nan").replace("-Infinity", "-.inf").replace("Infinity", ".inf"))
    try:
        load_file(p)
    except ScenarioErrors as e:
        assert all(err.line >= 1 for err in e.errors)
