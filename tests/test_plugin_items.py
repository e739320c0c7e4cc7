"""The pytest plugin in-process (pytester): collection, ids, markers, failure report, JUnit XML, fixture, baseline."""

from __future__ import annotations

import json
import sqlite3
import xml.etree.ElementTree as ET

import pytest

# Imported here, before any in-process pytest run: pytester drops the modules a run imported when it
# ends, and numpy and MuJoCo cannot be loaded twice in one process.
import bench.controllers.simple  # noqa: F401
import bench.controllers.stacks  # noqa: F401 - the controller check imports it
import bench.execute.job  # noqa: F401
import bench.report.history  # noqa: F401
import bench.scenario  # noqa: F401
from bench.cli import main as bench_main

try:   # the hypothesis plugin imports hypothesis at the end of every in-process run: keep it loaded
    import hypothesis  # noqa: F401
except ImportError:  # pragma: no cover
    pass

pytest_plugins = ["pytester"]

BASE = """
robot: quad12
duration: 1.0
timestep: 0.002
control_rate: 250
payloads:
  - {name: crate, mass: 2.0, size: [0.2, 0.15, 0.1], offset: [0, 0, 0.08]}
criteria:
  no_fall: true
  height_error_max: 0.08
"""
STAND = """
extends: _base.yaml
name: stand
tags: [payload, smoke]
matrix:
  payloads.crate.mass: [1, 3]
"""
TIGHT = """
extends: _base.yaml
name: tight
tags: [strict]
criteria:
  height_error_max: 0.001
"""
PYPROJECT = """
[tool.pytest.ini_options]
bench_scenarios = ["scen"]
bench_controller = "joint-pd"
bench_out = "out"
"""


@pytest.fixture
def project(pytester):
    pytester.makepyprojecttoml(PYPROJECT)
    scen = pytester.mkdir("scen")
    (scen / "_base.yaml").write_text(BASE)
    (scen / "stand.yaml").write_text(STAND)
    (scen / "tight.yaml").write_text(TIGHT)
    pytester.makepyfile(test_plain="def test_plain():\n    assert True\n")
    return pytester


def test_harmless_when_not_configured(pytester):
    (pytester.path / "_base.yaml").write_text(BASE)
    (pytester.path / "stand.yaml").write_text(STAND)
    pytester.makepyfile(test_plain="def test_plain():\n    assert True\n")
    res = pytester.runpytest("-W", "error")
    res.assert_outcomes(passed=1)
    assert not (pytester.path / "bench-results").exists()


def test_items_ids_and_markers(project):
    res = project.runpytest("--co", "-q", "--strict-markers")
    assert res.ret == 0
    ids = [line for line in res.outlines if "::" in line]
    # Every matrix variant is its own item; the `_base.yaml` partial is not collected.
    assert ids == ["scen/stand.yaml::stand[mass=1]", "scen/stand.yaml::stand[mass=3]", "scen/tight.yaml::tight",
                   "test_plain.py::test_plain"]
    res = project.runpytest("--co", "-q", "-m", "payload", "--strict-markers")
    assert [x for x in res.outlines if "::" in x] == ["scen/stand.yaml::stand[mass=1]", "scen/stand.yaml::stand[mass=3]"]
    res = project.runpytest("--co", "-q", "-m", "not bench")
    assert [x for x in res.outlines if "::" in x] == ["test_plain.py::test_plain"]


def test_failure_report_junit_xml_summary_and_history(project):
    res = project.runpytest("--junitxml=junit.xml")
    res.assert_outcomes(passed=3, failed=1)
    text = res.stdout.str()
    assert "tight: failed: height_error_max: " in text and "> limit 0.001 m (first at 0.50 s)" in text
    header = next(line for line in res.outlines if line.startswith("criterion"))
    assert header.split() == ["criterion", "value", "limit", "first", "violation"]
    row = next(line for line in res.outlines if line.startswith("height_error_max "))
    assert row.split()[2:] == ["0.001", "0.500", "s", "FAIL"]
    assert "trace:  out/tight/trace.npz" in text and "result: out/tight/result.json" in text
    assert "Traceback" not in text
    res.stdout.fnmatch_lines(["3 scenario run(s): 1 failed, 2 passed; results in out", "history: out/history.sqlite"])

    suite = ET.parse(project.path / "junit.xml").getroot().find("testsuite")
    cases = {c.get("name"): c for c in suite.iter("testcase")}
    assert set(cases) == {"test_plain", "stand[mass=1]", "stand[mass=3]", "tight"}
    assert cases["tight"].find("failure") is not None and cases["stand[mass=1]"].find("failure") is None
    props = {p.get("name"): p.get("value") for p in cases["stand[mass=3]"].iter("property")}
    assert props["bench.status"] == "passed" and props["bench.controller"] == "joint-pd"
    assert props["bench.criterion.height_error_max"] == "passed"
    assert 0 < float(props["bench.metric.height_error_max"]) < 0.08
    assert props["bench.trace"] == "out/stand.mass-3/trace.npz"

    summary = json.loads((project.path / "out" / "summary.json").read_text())
    assert (summary["total"], summary["passed"], summary["failed"]) == (3, 2, 1)
    assert [r["result"] for r in summary["results"]] == ["stand.mass-1/result.json", "stand.mass-3/result.json",
                                                         "tight/result.json"]
    con = sqlite3.connect(project.path / "out" / "history.sqlite")
    assert con.execute("SELECT source FROM runs").fetchall() == [("pytest",)]
    assert con.execute("SELECT scenario, status FROM results ORDER BY scenario").fetchall() == [
        ("stand[mass=1]", "passed"), ("stand[mass=3]", "passed"), ("tight", "failed")]


def test_bad_scenario_is_a_located_collection_error(project):
    (project.path / "scen" / "broken.yaml").write_text("name: broken\nrobot: quad12\nduration: -1\n")
    res = project.runpytest("-q")
    text = res.stdout.str()
    assert "scen/broken.yaml:3:11: duration:" in text
    assert "Traceback" not in text and res.ret != 0


def test_unknown_controller_is_a_usage_error_before_anything_runs(project):
    # as bench run: an unknown controller is invalid input (pytest's usage error), not N failed items
    res = project.runpytest("-q", "--bench-controller", "no-such-ctrl", "-k", "tight")
    assert res.ret == pytest.ExitCode.USAGE_ERROR
    err = res.stderr.str()
    assert "unknown controller 'no-such-ctrl'" in err and "force-qp-l1" in err and "joint-pd" in err
    assert not (project.path / "out").exists()


def test_explicit_scenario_file_is_collected_without_configuration(pytester):
    (pytester.path / "_base.yaml").write_text(BASE)
    (pytester.path / "stand.yaml").write_text(STAND)
    res = pytester.runpytest("stand.yaml", "-q", "--bench-controller", "joint-pd", "--bench-out", "o", "--bench-no-history")
    res.assert_outcomes(passed=2)
    assert (pytester.path / "o" / "summary.json").is_file() and not (pytester.path / "o" / "history.sqlite").exists()


def test_bench_run_fixture(project):
    project.makepyfile(test_fixture="""
        import pytest
        from bench.controllers.simple import JointPDController

        def test_soft_gains(bench_run):
            run = bench_run("scen/stand.yaml", JointPDController(kp=60.0, kd=2.0), variant="mass=3")
            assert run.passed and run.status == "passed"
            assert run.criteria["height_error_max"]["limit"] == 0.08
            assert run.metrics["height_error_max"] < 0.05
            assert run.trace_path.is_file() and len(run.trace["t"]) == 250

        def test_assert_passed_shows_the_table(bench_run):
            run = bench_run("scen/tight.yaml")      # the configured controller
            with pytest.raises(AssertionError) as e:
                run.assert_passed()
            assert "height_error_max" in str(e.value) and "FAIL" in str(e.value)

        def test_needs_a_variant(bench_run):
            bench_run("scen/stand.yaml")
    """)
    res = project.runpytest("-q", "test_fixture.py", "--junitxml=j.xml")
    res.assert_outcomes(passed=2, failed=1)
    assert "defines stand[mass=1], stand[mass=3]; pick one with variant=" in res.stdout.str()
    cases = {c.get("name"): c for c in ET.parse(project.path / "j.xml").iter("testcase")}
    props = [(p.get("name"), p.get("value")) for p in cases["test_soft_gains"].iter("property")]
    assert props[0] == ("bench.scenario", "stand[mass=3]") and ("bench.controller", "joint-pd") in props


def test_baseline_option_fails_a_regressed_item_whose_criteria_pass(project):
    res = project.runpytest("-q", "-k", "stand")
    res.assert_outcomes(passed=2, deselected=2)
    assert bench_main(["baseline", "save", str(project.path / "out"), "-o", str(project.path / "baseline.json")]) == 0
    project.makepyfile(softpd="""
        from bench.controllers.simple import JointPDController

        class SoftPD(JointPDController):
            def __init__(self):
                super().__init__(kp=40.0, kd=2.0)
    """)
    project.syspathinsert()
    res = project.runpytest("-q", "-k", "stand", "--bench-baseline", "baseline.json",
                            "--bench-controller", "softpd:SoftPD")
    res.assert_outcomes(failed=2, deselected=2)
    text = res.stdout.str()
    assert "stand[mass=1]: passed its criteria, but regressed against the baseline baseline.json" in text
    assert "result: out/stand.mass-1/result.json" in text
    row = next(line for line in res.outlines if line.startswith("regressed") and "height_error_max" in line)
    assert "stand[mass=1]" in row and "(lower is better)" in row
    assert "criterion" not in text     # its own criteria passed: only the regression is reported
    assert "baseline baseline.json: 2 regressed" in text
    # The same controller as the baseline: nothing regressed.
    project.runpytest("-q", "-k", "stand", "--bench-baseline", "baseline.json").assert_outcomes(passed=2, deselected=2)


def test_bad_configuration_is_a_usage_error(project):
    res = project.runpytest("--bench-scenarios", "nowhere")
    assert res.ret == pytest.ExitCode.USAGE_ERROR
    assert "--bench-scenarios:" in res.stderr.str() and "nowhere: no such file or folder" in res.stderr.str()
    (project.path / "baseline.json").write_text('{"format": "other"}')
    res = project.runpytest("--bench-baseline", "baseline.json")
    assert res.ret == pytest.ExitCode.USAGE_ERROR
    assert "not a baseline file" in res.stderr.str()


def test_glob_and_history_off_from_the_ini_file(pytester):
    pytester.makepyprojecttoml(PYPROJECT + 'bench_glob = ["*.scenario.yaml"]\nbench_history = "none"\n')
    scen = pytester.mkdir("scen")
    (scen / "_base.yaml").write_text(BASE)
    (scen / "tight.scenario.yaml").write_text(TIGHT)
    (scen / "robot-notes.yaml").write_text("not: a scenario\n")     # outside the glob: left alone
    res = pytester.runpytest("-q", "--co")
    assert [x for x in res.outlines if "::" in x] == ["scen/tight.scenario.yaml::tight"]
    pytester.runpytest("-q").assert_outcomes(failed=1)
    assert (pytester.path / "out" / "tight" / "result.json").is_file()
    assert not (pytester.path / "out" / "history.sqlite").exists()


TRIALS = """
extends: _base.yaml
name: tri
tags: [trials]
trials: 6
randomize:
  payloads.crate.mass: [1.0, 40.0]
criteria:
  pass_rate_min: {rate}
  height_error_max: 0.02
"""


def test_trials_scenario_is_one_item_per_trial_and_a_verdict_judged_like_bench_run(project):
    """`trials:` gives an item per trial (xdist can spread them) and a verdict item, run last, that decides
    on the Wilson bound as `bench run` does."""
    (project.path / "scen" / "tri.yaml").write_text(TRIALS.format(rate=0.5))
    res = project.runpytest("--co", "-q", "-m", "trials")
    assert [x for x in res.outlines if "::" in x] == [f"scen/tri.yaml::tri[trial={k}]" for k in range(6)] + [
        "scen/tri.yaml::tri"]

    res = project.runpytest("-q", "-m", "trials", "--junitxml=junit.xml")
    text = res.stdout.str()
    # the trial items pass (their trial ran); the terminal counts the failed trials apart; the verdict fails
    outcomes = res.parseoutcomes()
    assert outcomes["failed"] == 1 and outcomes["deselected"] == 4
    last = res.outlines[-1]
    assert res.ret == 1
    assert "Traceback" not in text
    # the same trials through the command line
    assert bench_main(["run", str(project.path / "scen" / "tri.yaml"), "--controller", "joint-pd", "--workers", "1",
                       "--out", str(project.path / "cli"), "--no-plots", "--no-history"]) == 1
    cli = json.loads((project.path / "cli" / "summary.json").read_text())
    plug = json.loads((project.path / "out" / "summary.json").read_text())
    (ct,), (pt,) = cli["trials"], plug["trials"]
    assert ct["trials"] == 6 and 0 < ct["passed"] < 6 and ct["verdict"] == "failed"   # the fixture is a real mix
    assert f"{ct['passed']} trial passed, {6 - ct['passed']} trial failed" in last
    for key in ("trials", "passed", "rate", "interval", "required", "verdict", "failing", "trials_needed"):
        assert pt[key] == ct[key], key
    assert [r["result"] for r in plug["results"]] == [f"tri.trial-{k}/result.json" for k in range(6)]
    for k in range(6):
        a = json.loads((project.path / "out" / f"tri.trial-{k}" / "result.json").read_text())
        b = json.loads((project.path / "cli" / f"tri.trial-{k}" / "result.json").read_text())
        assert a["status"] == b["status"] and a["seed"] == b["seed"] and a["trial_of"] == b["trial_of"] == "tri"
        assert a["trace_sha256"] == b["trace_sha256"]    # the same episode, bit for bit
    # The failure report: the trials table, each failing trial's criteria, how to re-run one alone.
    lo, hi = ct["interval"]
    row = next(line for line in res.outlines if line.startswith("tri ") and "failed" in line)
    assert f"{ct['passed']}/6" in row and f"[{lo:.2f}, {hi:.2f}]" in row
    first = ct["failing"][0]
    assert f"{first}: failed: height_error_max" in text
    assert f"re-run one trial alone: bench run scen/tri.yaml --only '{first}'" in text
    cases = {c.get("name"): c for c in ET.parse(project.path / "junit.xml").iter("testcase")}
    props = [(p.get("name"), p.get("value")) for p in cases["tri"].iter("property")]
    d = dict(props)
    assert d["bench.trials.verdict"] == "failed" and d["bench.trials.passed"] == f"{ct['passed']}/6"
    assert float(d["bench.trials.interval_low"]) == pytest.approx(lo)
    for k in range(6):   # each trial's own item carries its run
        trial = dict((p.get("name"), p.get("value")) for p in cases[f"tri[trial={k}]"].iter("property"))
        assert trial["bench.scenario"] == f"tri[trial={k}]" and cases[f"tri[trial={k}]"].find("failure") is None
    # deselected trial items: the verdict item runs those trials itself and reaches the same verdict
    res = project.runpytest("-q", "-m", "trials", "--deselect", "scen/tri.yaml::tri[trial=1]",
                            "--deselect", "scen/tri.yaml::tri[trial=4]", "--bench-out", "out2")
    assert res.parseoutcomes()["failed"] == 1
    again = json.loads((project.path / "out2" / "summary.json").read_text())["trials"][0]
    assert again["passed"] == ct["passed"] and again["verdict"] == "failed"

    # A lower required rate that the same trials meet: the item passes.
    (project.path / "scen" / "tri.yaml").write_text(TRIALS.format(rate=round(lo - 0.05, 2)))
    res = project.runpytest("-q", "-m", "trials")
    res.assert_outcomes(passed=1, deselected=4)
