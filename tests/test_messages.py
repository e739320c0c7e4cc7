"""Messages a user reads when an input is wrong: did-you-mean, tabs, extends, robot manifests."""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from bench.errors import ScenarioErrors
from bench.robot.manifest import RobotError, RobotErrors, load_manifest
from bench.suggest import closest, did_you_mean

REPO = Path(__file__).resolve().parents[1]
CRITERIA = ["height_error_max", "height_error_rms", "roll_error_max_deg", "drift_max", "distance_min", "no_fall"]


# --- did-you-mean -------------------------------------------------------------------------------

@pytest.mark.parametrize("typed, meant", [
    ("max_height_error", "height_error_max"),     # word order
    ("hieght_error_max", "height_error_max"),     # a typo
    ("min_distance", "distance_min"),
    ("nofall", "no_fall"),
    ("Drift_Max", "drift_max"),                   # case
])
def test_closest_forgives_word_order_typos_and_case(typed, meant):
    assert closest(typed, CRITERIA) == [meant]


def test_nothing_close_gives_no_suggestion():
    assert did_you_mean("throughput", CRITERIA) is None
    assert closest("zzz", CRITERIA) == []


def test_scenario_criterion_in_other_word_order_suggests_the_right_one(tmp_path):
    from bench.scenario import load_file

    p = tmp_path / "s.yaml"
    p.write_text("name: s\nduration: 1\ncriteria:\n  max_height_error: 0.02\n")
    with pytest.raises(ScenarioErrors) as err:
        load_file(str(p))
    text = str(err.value)
    assert "s.yaml:4:3" in text and "'height_error_max'" in text and "height_error_rms" not in text


def test_extends_to_a_misspelt_file_suggests_the_file_next_to_it(tmp_path):
    from bench.scenario import load_file

    shutil.copy(REPO / "scenarios/locomotion/_trot.yaml", tmp_path / "_trot.yaml")
    p = tmp_path / "s.yaml"
    p.write_text("extends: _trott.yaml\nname: s\n")
    with pytest.raises(ScenarioErrors) as err:
        load_file(str(p))
    e = err.value.errors[0]
    assert (e.line, e.field) == (1, "extends") and "did you mean '_trot.yaml'?" in str(e)


# --- tabs ---------------------------------------------------------------------------------------

@pytest.mark.parametrize("text, line, col", [
    ("name: s\nduration: 1\ncriteria:\n\tno_fall: true\n", 4, 1),
    ("name: s\ncriteria:\n  no_fall: true\n\t  drift_max: 1\n", 4, 1),
])
def test_a_tab_is_called_a_tab_at_its_column(tmp_path, text, line, col):
    from bench.scenario import load_file

    p = tmp_path / "s.yaml"
    p.write_text(text)
    with pytest.raises(ScenarioErrors) as err:
        load_file(str(p))
    e = err.value.errors[0]
    assert (e.line, e.col) == (line, col)
    assert "tab" in e.message and "spaces" in str(e)


def test_a_syntax_error_without_a_tab_does_not_mention_tabs(tmp_path):
    from bench.scenario import load_file

    p = tmp_path / "s.yaml"
    p.write_text("name: s\nduration: 1\nbad: [1, 2\n")
    with pytest.raises(ScenarioErrors) as err:
        load_file(str(p))
    assert "tab" not in str(err.value)


# --- robot manifests ----------------------------------------------------------------------------

def _manifest_copy(tmp_path: Path, edit) -> Path:
    src = REPO / "models/quad12"
    shutil.copy(src / "quad12.xml", tmp_path / "quad12.xml")
    text = (src / "manifest.yaml").read_text()
    path = tmp_path / "manifest.yaml"
    path.write_text(edit(text))
    return path


def _line_of(path: Path, needle: str) -> int:
    return next(i for i, line in enumerate(path.read_text().splitlines(), 1)
                if needle in line and not line.lstrip().startswith("#"))


def test_manifest_reports_every_problem_at_its_line_with_did_you_mean(tmp_path):
    path = _manifest_copy(tmp_path, lambda t: t.replace("nominal_height: 0.294", "nominal_heigth: 0.294")
                          .replace("FR_knee, RL_abd", "FR_kne, RL_abd")
                          .replace("geom: RL_foot_geom", "geom: RL_foot_gem")
                          .replace("torque_limits: [18.0", "torque_limits: [-18.0"))
    with pytest.raises(RobotErrors) as err:
        load_manifest(path)
    errors = err.value.errors
    by_field = {e.field: e for e in errors}
    # the misspelt key: unknown (at its line, with the right name suggested) and the real one missing
    assert by_field["nominal_heigth"].line == _line_of(path, "nominal_heigth")
    assert "'nominal_height'" in by_field["nominal_heigth"].hint
    assert "nominal_height" in by_field
    assert by_field["torque_limits[0]"].line == _line_of(path, "torque_limits")
    assert "-18" in by_field["torque_limits[0]"].message
    text = str(err.value)
    for line in text.splitlines():
        assert line.startswith(f"{path}:"), line   # manifest.yaml:line:col: field: message
    assert len(text.splitlines()) == len(errors) >= 3


def test_manifest_names_missing_from_the_mjcf_are_all_reported_with_suggestions(tmp_path):
    path = _manifest_copy(tmp_path, lambda t: t.replace("FR_knee, RL_abd", "FR_kne, RL_abd")
                          .replace("geom: RL_foot_geom", "geom: RL_foot_gem"))
    with pytest.raises(RobotErrors) as err:
        load_manifest(path)
    by_field = {e.field: e for e in err.value.errors}
    assert set(by_field) == {"joints[5]", "feet[2].geom"}
    assert "'FR_knee'" in by_field["joints[5]"].hint and by_field["joints[5]"].line == _line_of(path, "FR_kne")
    assert "'RL_foot_geom'" in by_field["feet[2].geom"].hint
    assert by_field["feet[2].geom"].line == _line_of(path, "RL_foot_gem")
    assert isinstance(err.value, RobotError) and isinstance(err.value, ValueError)


def test_manifest_yaml_error_is_located(tmp_path):
    path = _manifest_copy(tmp_path, lambda t: t.replace("trunk: trunk", "trunk: [trunk"))
    with pytest.raises(RobotErrors) as err:
        load_manifest(path)
    assert err.value.line > 0 and str(err.value).startswith(f"{path}:")


def test_bench_check_prints_manifest_problems_at_the_manifest_lines(tmp_path):
    path = _manifest_copy(tmp_path, lambda t: t.replace("FR_knee, RL_abd", "FR_kne, RL_abd")
                          .replace("geom: RL_foot_geom", "geom: RL_foot_gem"))
    sc = tmp_path / "s.yaml"
    sc.write_text("name: s\nduration: 1\nrobot: {manifest: manifest.yaml}\n")
    env = {**os.environ, "PYTHONPATH": str(REPO)}
    proc = subprocess.run([sys.executable, "-m", "bench", "check", str(sc)], capture_output=True, text=True,
                          cwd=tmp_path, env=env)
    out = proc.stdout + proc.stderr
    assert proc.returncode == 2, out
    assert "Traceback" not in out
    assert f"manifest.yaml:{_line_of(path, 'FR_kne')}:" in out and "did you mean 'FR_knee'?" in out
    assert f"manifest.yaml:{_line_of(path, 'RL_foot_gem')}:" in out
