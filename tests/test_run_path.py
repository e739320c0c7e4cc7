"""One run path: bench check, bench run and the pytest plugin load, check, run and judge alike.

Also: unknown controllers are invalid input, --resume trusts only results with the planned
verdict fingerprint, a symlinked results folder is refused cleanly, and no planned episode
is ever missing from a run.
"""

from __future__ import annotations

import json
import shutil
import sqlite3
from pathlib import Path

import pytest

# pytester's in-process runs drop modules first imported inside them; import what the runs use up front
import bench.controllers.simple  # noqa: F401
import bench.controllers.stacks  # noqa: F401 - the controller check imports it
import bench.execute.job  # noqa: F401
import bench.pytest_plugin  # noqa: F401
import bench.render.postrun  # noqa: F401
import bench.report.history  # noqa: F401
import bench.run.execute  # noqa: F401
import bench.run.load  # noqa: F401
import bench.run.plan  # noqa: F401
import bench.run.sinks  # noqa: F401
import bench.scenario  # noqa: F401
from bench.cli import main

pytest_plugins = ["pytester"]

REPO = Path(__file__).resolve().parents[1]

GOOD = """\
name: good
duration: 0.3
criteria:
  no_fall: true
  height_error_max: 0.08
"""
STRICT = """\
name: strict
duration: 0.3
criteria:
  velocity_rmse_max: 0.000001
  height_error_max: 0.00001
  drift_max: 0.0000001
"""
BADJOINT = """\
name: badjoint
duration: 0.3
faults:
  - lock: {at: 0.1, joint: FR_nope}
criteria:
  no_fall: true
"""


def _results(out: Path) -> dict[str, dict]:
    return {p.parent.name: json.loads(p.read_text()) for p in out.glob("*/result.json")}


@pytest.fixture
def files(pytester):
    suite = pytester.mkdir("suite")
    (suite / "good.yaml").write_text(GOOD)
    (suite / "strict.yaml").write_text(STRICT)
    bad = pytester.mkdir("bad")
    (bad / "badjoint.yaml").write_text(BADJOINT)
    return pytester


def test_check_run_and_plugin_give_the_same_errors_and_verdicts(files, capsys):
    pytester = files
    # bench check: the missing joint, at its line
    assert main(["check", "bad/badjoint.yaml"]) == 2
    check_err = capsys.readouterr().err
    problem = next(line for line in check_err.splitlines() if "FR_nope" in line)
    assert problem.startswith("bad/badjoint.yaml:4:") and "faults.0.lock.joint" in problem
    # bench run: the same line, exit 2, nothing run or written
    assert main(["run", "bad/badjoint.yaml", "--controller", "joint-pd", "--out", "run-bad", "--no-plots"]) == 2
    assert problem in capsys.readouterr().err.splitlines()
    assert not Path("run-bad").exists()
    # bench run on the valid files
    assert main(["run", "suite", "--controller", "joint-pd", "--out", "run-out", "--no-plots", "--workers", "1"]) == 1
    capsys.readouterr()
    by_run = _results(pytester.path / "run-out")
    # the plugin on the same files: the bad one is a collection error with the same line, not a simulator message
    res = pytester.runpytest("-q", "-p", "no:cacheprovider", "--continue-on-collection-errors", "--bench-scenarios", "suite", "--bench-scenarios", "bad",
                             "--bench-controller", "joint-pd", "--bench-out", "plug-out", "--bench-no-history")
    res.assert_outcomes(passed=1, failed=1, errors=1)
    text = res.stdout.str()
    assert problem in text
    assert "mujoco" not in text.lower().replace("mujoco_version", "")
    by_plugin = _results(pytester.path / "plug-out")
    assert set(by_run) == set(by_plugin) == {"good", "strict"}
    for name in by_run:
        a, b = by_run[name], by_plugin[name]
        for key in ("status", "reason", "criteria", "deciding", "trace_sha256", "fingerprint", "metrics"):
            if key == "metrics":
                a_m = {k: v for k, v in a[key].items() if "ms" not in k}
                b_m = {k: v for k, v in b[key].items() if "ms" not in k}
                assert a_m == b_m, name
            elif key == "criteria":
                assert [c for c in a[key] if "ms" not in c["name"]] == [c for c in b[key] if "ms" not in c["name"]]
            else:
                assert a[key] == b[key], (name, key)
    assert by_run["good"]["status"] == "passed" and by_run["strict"]["status"] == "failed"
    # both write summary.md beside summary.json, listing the failure with its deciding criterion
    for out in ("run-out", "plug-out"):
        md = (pytester.path / out / "summary.md").read_text()
        assert "`strict`" in md and by_run["strict"]["deciding"]["name"] in md and "`good`" not in md


def test_unknown_controller_is_exit_2_with_did_you_mean(tmp_path, capsys):
    (tmp_path / "good.yaml").write_text(GOOD)
    out = tmp_path / "out"
    assert main(["run", str(tmp_path / "good.yaml"), "--controller", "force_qp", "--out", str(out)]) == 2
    err = capsys.readouterr().err
    assert "unknown controller 'force_qp'" in err and "did you mean 'force-qp'" in err
    # the names that exist, all of them, not cut off
    assert "controllers that exist: " in err and "force-qp-l1" in err and "joint-pd" in err and "zero" in err
    assert not out.exists()
    assert main(["run", str(tmp_path / "good.yaml"), "--controller", "sealed:force_qp", "--out", str(out)]) == 2
    assert "did you mean 'sealed:force-qp'" in capsys.readouterr().err and not out.exists()
    assert main(["limit", str(tmp_path / "good.yaml"), "--vary", "duration", "--range", "0.2", "0.4",
                 "--controller", "force_qp", "--out", str(tmp_path / "lim")]) == 2
    assert "did you mean 'force-qp'" in capsys.readouterr().err and not (tmp_path / "lim").exists()


def test_module_and_exec_specs_still_resolve():
    from bench.run.errors import InvalidInput
    from bench.run.plan import check_controller

    check_controller("bench.controllers.simple:ZeroTorque" if _has_zero() else "joint-pd")
    check_controller("exec:/bin/true")
    with pytest.raises(InvalidInput, match="cannot import module"):
        check_controller("no_such_module_xyz:Thing")


def _has_zero() -> bool:
    import bench.controllers.simple as simple

    return hasattr(simple, "ZeroTorque")


def test_failing_row_shows_every_failing_criterion_and_reason_names_the_deciding_one(tmp_path, capsys):
    (tmp_path / "strict.yaml").write_text(STRICT)
    out = tmp_path / "out"
    assert main(["run", str(tmp_path / "strict.yaml"), "--controller", "joint-pd", "--out", str(out),
                 "--no-plots", "--no-history", "--workers", "1"]) == 1
    printed = capsys.readouterr().out
    r = json.loads((out / "strict" / "result.json").read_text())
    failed = [c for c in r["criteria"] if not c["passed"]]
    assert len(failed) >= 2
    earliest = min(failed, key=lambda c: (c["first_violation_s"] is None, c["first_violation_s"] or 0.0,
                                          r["criteria"].index(c)))
    assert r["deciding"]["name"] == earliest["name"] and r["reason"].startswith(earliest["name"])
    assert r["deciding"]["margin"] < 0
    row = next(line for line in printed.splitlines() if line.startswith("strict"))
    for c in failed:
        assert c["name"] in row
    assert "@" in row


def test_passing_row_shows_the_least_margin(tmp_path, capsys):
    (tmp_path / "good.yaml").write_text(GOOD.replace("no_fall: true", "no_fall: true\n  roll_error_max_deg: 30"))
    out = tmp_path / "out"
    assert main(["run", str(tmp_path / "good.yaml"), "--controller", "joint-pd", "--out", str(out),
                 "--no-plots", "--no-history", "--workers", "1"]) == 0
    printed = capsys.readouterr().out
    r = json.loads((out / "good" / "result.json").read_text())
    margins = {c["name"]: c["margin"] for c in r["criteria"] if c.get("margin") is not None}
    assert set(margins) == {"height_error_max", "roll_error_max_deg"}
    least = min(margins, key=margins.get)
    assert r["deciding"]["name"] == least and r["deciding"]["margin"] == margins[least]
    assert f"{least} " in next(line for line in printed.splitlines() if line.startswith("good")) and "margin" in printed


# --------------------------------------------------------------------------- resume and the fingerprint


def _run(args, capsys) -> tuple[int, str]:
    rc = main(args)
    return rc, capsys.readouterr().err


def test_resume_refuses_a_result_whose_fingerprint_differs(tmp_path, capsys):
    (tmp_path / "good.yaml").write_text(GOOD)
    out = tmp_path / "out"
    base = ["run", str(tmp_path / "good.yaml"), "--controller", "joint-pd", "--out", str(out), "--no-plots",
            "--no-history", "--workers", "1"]
    assert main(base) == 0
    rc, err = _run(base + ["--resume"], capsys)
    assert rc == 0 and "resume: 1 of 1 results complete" in err
    path = out / "good" / "result.json"
    data = json.loads(path.read_text())
    uid = data["result_uid"]
    data["fingerprint"] = "0" * 64
    data["fingerprint_parts"] = dict(data["fingerprint_parts"], scenario="something else")
    path.write_text(json.dumps(data))
    rc, err = _run(base + ["--resume"], capsys)
    assert rc == 0 and "resume: 0 of 1 results complete" in err
    assert "good: run again: result.json was made with another scenario content" in err
    assert json.loads(path.read_text())["result_uid"] != uid           # produced again


def test_resume_reruns_when_the_robot_mjcf_changed(tmp_path, capsys):
    shutil.copytree(REPO / "models" / "quad12", tmp_path / "robot")
    (tmp_path / "good.yaml").write_text(GOOD + "robot: {manifest: robot/manifest.yaml}\n")
    out = tmp_path / "out"
    base = ["run", str(tmp_path / "good.yaml"), "--controller", "joint-pd", "--out", str(out), "--no-plots",
            "--no-history", "--workers", "1"]
    assert main(base) == 0
    mjcf = tmp_path / "robot" / "quad12.xml"
    mjcf.write_text(mjcf.read_text() + "\n<!-- edited -->\n")
    rc, err = _run(base + ["--resume"], capsys)
    assert "resume: 0 of 1 results complete" in err and "verdict fingerprint differs" in err


def test_resume_records_reused_results_in_history_exactly_once(tmp_path, capsys):
    (tmp_path / "a.yaml").write_text(GOOD)
    (tmp_path / "b.yaml").write_text(GOOD.replace("name: good", "name: other"))
    out = tmp_path / "out"
    base = ["run", str(tmp_path), "--controller", "joint-pd", "--out", str(out), "--no-plots", "--workers", "1"]
    assert main(base) == 0
    (out / "other" / "result.json").unlink()       # as if the run was killed before this one finished
    assert main(base + ["--resume"]) == 0
    con = sqlite3.connect(out / "history.sqlite")
    try:
        rows = con.execute("SELECT scenario, COUNT(*) FROM results GROUP BY scenario").fetchall()
    finally:
        con.close()
    # good: once (recorded, then reused: same result_uid); other: the lost one plus its re-run
    assert dict(rows)["good"] == 1


# --------------------------------------------------------------------------- results folders


def test_symlinked_result_folder_is_refused_before_anything_runs(tmp_path, capsys):
    (tmp_path / "good.yaml").write_text(GOOD)
    out = tmp_path / "out"
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    out.mkdir()
    (out / "good").symlink_to(elsewhere, target_is_directory=True)
    rc, err = _run(["run", str(tmp_path / "good.yaml"), "--controller", "joint-pd", "--out", str(out),
                    "--no-plots", "--no-history"], capsys)
    assert rc == 2
    assert "is a symbolic link" in err and "Traceback" not in err
    assert list(elsewhere.iterdir()) == [] and not (out / "summary.json").exists()


def test_a_result_that_cannot_be_written_is_that_episodes_error(tmp_path):
    from types import SimpleNamespace

    from bench.run.sinks import ResultFiles

    out = tmp_path / "out"
    out.mkdir()
    (out / "x").symlink_to(tmp_path, target_is_directory=True)   # appeared after planning
    outcome = SimpleNamespace(result={"status": "passed", "passed": True, "reason": None}, trace=None)
    ResultFiles(out).on_result(SimpleNamespace(index=0, slug="x"), outcome)
    assert outcome.result["status"] == "error" and "symbolic link" in outcome.result["reason"]


class _DroppingExecutor:
    """An executor that loses the second job without a word (a broken back end)."""

    name, workers = "dropping", 1

    def map(self, fn, jobs, on_error=None):
        for i, job in enumerate(jobs):
            if i != 1:
                yield i, fn(job)

    def close(self):
        pass


def test_every_planned_episode_gets_a_result(tmp_path, capsys, monkeypatch):
    import bench.run.execute as run_exec

    for name in ("a", "b", "c"):
        (tmp_path / f"{name}.yaml").write_text(GOOD.replace("name: good", f"name: {name}"))
    monkeypatch.setattr(run_exec, "open_executor", lambda *a, **k: _DroppingExecutor())
    out = tmp_path / "out"
    rc = main(["run", str(tmp_path), "--controller", "joint-pd", "--out", str(out), "--no-plots", "--no-history"])
    assert rc == 1
    summary = json.loads((out / "summary.json").read_text())
    assert summary["total"] == 3 and summary["errors"] == 1
    lost = [r for r in summary["results"] if r["status"] == "error"]
    assert lost[0]["reason"] == "episode produced no result"
    assert json.loads((out / lost[0]["result"]).read_text())["reason"] == "episode produced no result"


def test_the_fixture_checks_as_bench_check_does(files):
    pytester = files
    pytester.makepyfile(test_fix="""
        def test_bad(bench_run):
            bench_run("bad/badjoint.yaml", "joint-pd")
    """)
    res = pytester.runpytest("-q", "-p", "no:cacheprovider", "test_fix.py", "--bench-out", "fx", "--bench-no-history")
    res.assert_outcomes(failed=1)
    text = res.stdout.str()
    assert "bad/badjoint.yaml:4:28: faults.0.lock.joint: robot 'quad12' has no joint 'FR_nope'" in text
    assert not (pytester.path / "fx").exists()
