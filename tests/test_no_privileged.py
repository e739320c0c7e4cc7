"""Forcing the true state off for a whole run: ``--no-privileged`` (run, check, limit) and the pytest plugin's
``--bench-no-privileged`` / ``bench_no_privileged``; the result records tell such runs apart."""

from __future__ import annotations

import json
import sys
from pathlib import Path

import pytest

# Imported before any in-process pytest run (pytester drops the modules a run imported).
import bench.controllers.simple  # noqa: F401
import bench.execute.job  # noqa: F401
import bench.report.history  # noqa: F401
import bench.scenario  # noqa: F401
from bench.cli import main as bench_main
from bench.run.load import load_file_checked, without_privileged

try:
    import hypothesis  # noqa: F401
except ImportError:  # pragma: no cover
    pass

pytest_plugins = ["pytester"]

TESTS = Path(__file__).parent
STAND = """
name: stand-short
robot: quad12
duration: 0.2
criteria:
  no_fall: true
"""


@pytest.fixture
def stand(tmp_path, monkeypatch):
    monkeypatch.syspath_prepend(str(TESTS))
    p = tmp_path / "stand.yaml"
    p.write_text(STAND)
    return p


def test_without_privileged_changes_the_document_and_its_hash(stand):
    sc = load_file_checked(stand)[0]
    off = without_privileged([sc])[0]
    assert sc.sensing.privileged is True and off.sensing.privileged is False
    assert off.id == sc.id and off.content_hash != sc.content_hash
    assert off.document["sensing"] == {"privileged": False}
    assert without_privileged([off])[0] is off          # already off: the same scenario
    assert without_privileged([sc], off=False)[0] is sc


def test_bench_run_no_privileged(stand, tmp_path, capsys):
    common = ["run", str(stand), "--controller", "sensing_controllers:TruthFree", "--in-process", "--no-history"]
    assert bench_main(common + ["--out", str(tmp_path / "with")]) == 1          # handed the truth: error
    with_truth = json.loads((tmp_path / "with" / "stand-short" / "result.json").read_text())
    assert with_truth["status"] == "error" and "robot.sensing says the true state is given" in with_truth["reason"]
    assert bench_main(common + ["--out", str(tmp_path / "without"), "--no-privileged"]) == 0
    without = json.loads((tmp_path / "without" / "stand-short" / "result.json").read_text())
    assert without["status"] == "passed"
    assert without["content_hash"] != with_truth["content_hash"]
    assert bench_main(["check", str(stand), "--no-privileged", "-q"]) == 0
    # --resume does not take the run with the true state for one without it (the fingerprints differ).
    assert bench_main(common + ["--out", str(tmp_path / "with"), "--no-privileged", "--resume"]) == 0
    again = json.loads((tmp_path / "with" / "stand-short" / "result.json").read_text())
    assert again["status"] == "passed" and again["content_hash"] == without["content_hash"]


def test_plugin_ini_key_turns_the_truth_off(pytester):
    pytester.makepyprojecttoml(f"""
[tool.pytest.ini_options]
bench_scenarios = ["scen"]
bench_controller = "sensing_controllers:TruthFree"
bench_out = "out"
bench_no_privileged = true
""")
    scen = pytester.mkdir("scen")
    (scen / "stand.yaml").write_text(STAND)
    pytester.syspathinsert(str(TESTS))
    res = pytester.runpytest("-p", "no:cacheprovider", "--bench-no-history")
    res.assert_outcomes(passed=1)
    # The same without the key: the controller is handed the truth and the item fails.
    pytester.makepyprojecttoml("""
[tool.pytest.ini_options]
bench_scenarios = ["scen"]
bench_controller = "sensing_controllers:TruthFree"
bench_out = "out2"
""")
    res = pytester.runpytest("-p", "no:cacheprovider", "--bench-no-history")
    res.assert_outcomes(failed=1)
    res = pytester.runpytest("-p", "no:cacheprovider", "--bench-no-history", "--bench-no-privileged")
    res.assert_outcomes(passed=1)
