"""End to end: a throwaway controller repository in a temporary folder runs the bench's plugin with `pytest`.

The repository has a tiny package registering its own controller through the ``bench.controllers``
entry point (a ``*.dist-info`` folder on PYTHONPATH, the lightweight equivalent of installing it), a
scenario folder of its own and a ``pyproject.toml`` with the plugin options, as a user's would.
"""

from __future__ import annotations

import json
import os
import shutil
import sqlite3
import subprocess
import sys
import textwrap
import xml.etree.ElementTree as ET
from pathlib import Path

import pytest

from bench.cli import main as bench_main

CONTROLLER = '''
"""Orchard sprayer robot controller: joint PD about the nominal pose (the gain can be weakened by env)."""
import os

import numpy as np


class SprayPD:
    """Orchard sprayer joint PD."""

    name = "spray-pd"

    def __init__(self, kp=None, kd=2.0):
        self.kp = float(os.environ.get("SPRAY_KP", "60")) if kp is None else kp
        self.kd = kd

    def reset(self, robot, control_dt):
        self.q0 = np.asarray(robot.nominal_pose, dtype=float).copy()

    def step(self, obs, command):
        return self.kp * (self.q0 - obs.joint_pos) - self.kd * obs.joint_vel
'''
PYPROJECT = '''
[project]
name = "sprayctl"
version = "0.1"
dependencies = ["quadruped-bench"]

[project.entry-points."bench.controllers"]
spray-pd = "sprayctl:SprayPD"

[tool.pytest.ini_options]
testpaths = ["tests"]
bench_scenarios = ["ci/scenarios"]
bench_controller = "spray-pd"
bench_out = "bench-results"
'''
BASE = '''
robot: quad12
duration: 1.0
timestep: 0.002
control_rate: 250
payloads:
  - {name: tank, mass: 2.0, size: [0.25, 0.15, 0.1], offset: [0, 0, 0.08]}
criteria:
  no_fall: true
  height_error_max: 0.08
'''
STAND = '''
extends: _base.yaml
name: spray-stand
tags: [payload]
matrix:
  payloads.tank.mass: [1, 3]
'''
TIGHT = '''
extends: _base.yaml
name: spray-tight
criteria:
  height_error_max: 0.001
'''
UNIT_TESTS = '''
from sprayctl import SprayPD


def test_gain_default():
    assert SprayPD(kp=1.0).kp == 1.0


def test_full_tank_with_stiff_gains(bench_run):
    run = bench_run("tests/data/full-tank.yaml", SprayPD(kp=80.0))
    run.assert_passed()
    assert run.metrics["height_error_max"] < 0.03
'''
FULL_TANK = '''
name: full-tank
robot: quad12
duration: 1.0
timestep: 0.002
control_rate: 250
payloads:
  - {name: tank, mass: 4.0, size: [0.25, 0.15, 0.1], offset: [0, 0, 0.08]}
criteria:
  height_error_max: 0.05
'''
SCENARIO_ITEMS = ["ci/scenarios/spray-stand.yaml::spray-stand[mass=1]", "ci/scenarios/spray-stand.yaml::spray-stand[mass=3]",
                  "ci/scenarios/spray-tight.yaml::spray-tight"]
#: Keys and metrics that measure the machine (wall-clock), not the simulation.
TIMING_KEYS = {"wall_time_s", "realtime_factor", "controller_ms",
               "result_uid"}   # not timing, but unique per produced result by design
TIMING_METRICS = {"controller_ms_p50", "controller_ms_p99", "controller_ms_max"}


def _write(root: Path, rel: str, text: str) -> None:
    p = root / rel
    p.parent.mkdir(parents=True, exist_ok=True)
    p.write_text(textwrap.dedent(text).lstrip())


def _git(repo: Path, *args: str) -> None:
    subprocess.run(["git", "-c", "user.name=ci", "-c", "user.email=ci@example.invalid", *args], cwd=repo,
                   check=True, capture_output=True)


def run_pytest(repo: Path, *args: str, env_extra: dict | None = None) -> subprocess.CompletedProcess:
    env = {k: v for k, v in os.environ.items() if not k.startswith(("PYTEST_", "COV_"))}
    env["PYTHONPATH"] = str(repo / "src")
    env.update(env_extra or {})
    return subprocess.run([sys.executable, "-m", "pytest", "-p", "no:cacheprovider", *args], cwd=repo, env=env,
                          capture_output=True, text=True, timeout=240)


@pytest.fixture(scope="module")
def repo(tmp_path_factory):
    root = tmp_path_factory.mktemp("sprayctl")
    _write(root, "src/sprayctl/__init__.py", CONTROLLER)
    # What `pip install -e .` would leave for the entry point: a dist-info folder on the path.
    _write(root, "src/sprayctl-0.1.dist-info/METADATA", "Metadata-Version: 2.1\nName: sprayctl\nVersion: 0.1\n")
    _write(root, "src/sprayctl-0.1.dist-info/entry_points.txt", "[bench.controllers]\nspray-pd = sprayctl:SprayPD\n")
    _write(root, "pyproject.toml", PYPROJECT)
    _write(root, "ci/scenarios/_base.yaml", BASE)
    _write(root, "ci/scenarios/spray-stand.yaml", STAND)
    _write(root, "ci/scenarios/spray-tight.yaml", TIGHT)
    _write(root, "tests/test_controller.py", UNIT_TESTS)
    _write(root, "tests/data/full-tank.yaml", FULL_TANK)
    _write(root, ".gitignore", "bench-results*/\n*.xml\n")
    _git(root, "init", "-q")
    _git(root, "add", ".")
    _git(root, "commit", "-q", "-m", "sprayer controller")
    proc = run_pytest(root, "-v", "--junitxml=serial.xml")
    return root, proc


def _cases(xml_path: Path) -> dict[str, ET.Element]:
    return {f"{c.get('classname')}::{c.get('name')}": c for c in ET.parse(xml_path).iter("testcase")}


def test_items_verdicts_and_junit_xml(repo):
    root, proc = repo
    assert proc.returncode == 1, proc.stdout + proc.stderr       # spray-tight fails by design
    out = proc.stdout
    for nodeid in SCENARIO_ITEMS[:2]:
        assert f"{nodeid} PASSED" in out
    assert f"{SCENARIO_ITEMS[2]} FAILED" in out
    assert "tests/test_controller.py::test_full_tank_with_stiff_gains PASSED" in out
    assert "spray-tight: failed: height_error_max:" in out and "trace:  bench-results/spray-tight/trace.npz" in out
    assert "2 scenario run(s)" not in out and "4 scenario run(s): 1 failed, 3 passed; results in bench-results" in out
    assert "Traceback" not in out

    cases = _cases(root / "serial.xml")
    stand = cases["ci.scenarios.spray-stand.yaml::spray-stand[mass=3]"]
    props = {p.get("name"): p.get("value") for p in stand.iter("property")}
    assert props["bench.controller"] == "spray-pd"                 # the repository's own controller
    assert props["bench.status"] == "passed"
    assert 0.0 < float(props["bench.metric.height_error_max"]) < 0.08
    tight = cases["ci.scenarios.spray-tight.yaml::spray-tight"]
    assert tight.find("failure") is not None
    assert "first violation" in tight.find("failure").text
    fixture_case = cases["tests.test_controller::test_full_tank_with_stiff_gains"]
    assert {p.get("name"): p.get("value") for p in fixture_case.iter("property")}["bench.scenario"] == "full-tank"

    summary = json.loads((root / "bench-results" / "summary.json").read_text())
    # Collection order: testpaths first, then the scenario folder the plugin added.
    assert [r["scenario"] for r in summary["results"]] == ["full-tank", "spray-stand[mass=1]", "spray-stand[mass=3]",
                                                           "spray-tight"]
    con = sqlite3.connect(root / "bench-results" / "history.sqlite")
    (commit, dirty, source), = con.execute("SELECT git_commit, git_dirty, source FROM runs").fetchall()
    assert len(commit) == 40 and dirty == 0 and source == "pytest"


def _deterministic(result: dict) -> dict:
    r = {k: v for k, v in result.items() if k not in TIMING_KEYS}
    r["metrics"] = {k: v for k, v in r["metrics"].items() if k not in TIMING_METRICS}
    r["criteria"] = [c for c in r["criteria"] if c["name"] != "controller_p99_ms_max"]
    return r


def test_xdist_gives_identical_results(repo):
    root, _ = repo
    proc = run_pytest(root, "-n", "2", "--bench-out", "bench-results-n2", "--junitxml=xdist.xml")
    assert proc.returncode == 1, proc.stdout + proc.stderr
    assert "4 scenario run(s): 1 failed, 3 passed; results in bench-results-n2" in proc.stdout
    serial, xdist = root / "bench-results", root / "bench-results-n2"
    assert json.loads((xdist / "summary.json").read_text()) == json.loads((serial / "summary.json").read_text())
    for name in ("spray-stand.mass-1", "spray-stand.mass-3", "spray-tight", "full-tank"):
        a = json.loads((serial / name / "result.json").read_text())
        b = json.loads((xdist / name / "result.json").read_text())
        assert _deterministic(a) == _deterministic(b), name
    verdicts = {k: (c.find("failure") is None) for k, c in _cases(root / "serial.xml").items()}
    assert {k: (c.find("failure") is None) for k, c in _cases(root / "xdist.xml").items()} == verdicts
    # Both workers wrote into one history database under the session's run uid.
    con = sqlite3.connect(xdist / "history.sqlite")
    assert con.execute("SELECT COUNT(*) FROM runs").fetchone()[0] == 1
    assert con.execute("SELECT COUNT(*) FROM results").fetchone()[0] == 4


def test_baseline_fails_the_build_on_regression_and_history_names_the_run(repo, tmp_path, capsys):
    root, _ = repo
    base = root / "ci" / "baseline.json"
    assert bench_main(["baseline", "save", str(root / "bench-results"), "-o", str(base)]) == 0
    db = tmp_path / "history.sqlite"
    shutil.copy(root / "bench-results" / "history.sqlite", db)
    # A softer controller: its own criteria still pass, but it regressed against the baseline.
    proc = run_pytest(root, "-k", "spray-stand", "--bench-baseline", "ci/baseline.json", "--bench-out",
                      str(tmp_path / "soft"), "--bench-history", str(db), env_extra={"SPRAY_KP": "40"})
    assert proc.returncode == 1, proc.stdout + proc.stderr
    assert "2 failed, 3 deselected" in proc.stdout
    assert "spray-stand[mass=1]: passed its criteria, but regressed against the baseline ci/baseline.json" in proc.stdout
    assert "baseline ci/baseline.json: 2 regressed" in proc.stdout
    assert bench_main(["compare", str(tmp_path / "soft"), str(base)]) == 1
    capsys.readouterr()
    assert bench_main(["history", "spray-stand[mass=1]", "--db", str(db)]) == 0
    out = capsys.readouterr().out
    assert "got worse beyond tolerance first at #2 (" in out and "; last within tolerance: #1 (" in out
    assert any(line.split()[:1] == ["height_error_max"] and "still worse" in line for line in out.splitlines())
