"""History compares like with like: a changed robot, scenario, limit, bench or library restarts the comparison
and `bench history` says why; `--fail-on-regression` gates on the latest run against the previous comparable one."""

from __future__ import annotations

import itertools

import pytest

from bench.cli import main
from bench.report.baseline import tolerance_for
from bench.report.history import History, first_regression, latest_version, record_results, restarts

PARTS = {"scenario": "s1", "robot": "r1", "controller": "c1", "limits": "l1", "bench": "b1", "mujoco": "3.3.0",
         "numpy": "2.1.0"}
_uid = itertools.count()


def result(value: float, status: str = "passed", sid: str = "walk", name: str = "joint-pd", **changed) -> dict:
    parts = dict(PARTS, **changed)
    return {"scenario": sid, "status": status, "reason": None if status == "passed" else "fell at 0.5 s",
            "controller": name, "seed": 0, "content_hash": parts["scenario"],
            "result_uid": f"u{next(_uid)}", "fingerprint": "|".join(parts[k] for k in sorted(parts)),
            "fingerprint_parts": parts, "metrics": {"height_error_max": value, "fell": float(status != "passed")},
            "criteria": [{"name": "height_error_max", "value": value, "limit": 0.08, "passed": status == "passed",
                          "first_violation_s": None}]}


def write(db, *results) -> None:
    for r in results:
        record_results(db, [r], source="bench run", cwd=db.parent, git=None)


def trend(db, sid="walk"):
    with History(db) as h:
        return h.trend(sid)


TOL = tolerance_for("height_error_max")     # 0.005 + 10 %, lower is better


def test_a_changed_robot_model_restarts_the_comparison(tmp_path, capsys):
    db = tmp_path / "h.sqlite"
    write(db, result(0.010), result(0.011), result(0.030, robot="r2"), result(0.031, robot="r2"))
    entries = trend(db)
    # 0.030 is far worse than 0.010, but it ran on another robot model: nothing to report
    assert first_regression(entries, "height_error_max", TOL) is None
    assert [e.index for e in latest_version(entries)] == [3, 4]
    (r,) = restarts(entries)
    assert r.entry.index == 3 and r.reasons == ["robot model changed (its manifest, MJCF or a file the MJCF names)"]

    assert main(["history", "walk", "--db", str(db)]) == 0
    out = capsys.readouterr().out
    assert "* comparison restarts at #3 (" in out and "): robot model changed (its manifest, MJCF" in out
    assert "no run got worse than #3 beyond tolerance in any metric" in out
    assert "got worse" not in out.replace("no run got worse", "")


@pytest.mark.parametrize("part, words", [
    ("scenario", "scenario file changed"),
    ("limits", "episode limits changed (tick or episode timeout)"),
    ("bench", "bench code changed"),
    ("mujoco", "MuJoCo version changed (3.3.0 -> 4.0.0)"),
    ("numpy", "NumPy version changed (2.1.0 -> 4.0.0)"),
])
def test_each_part_names_its_change(tmp_path, part, words):
    db = tmp_path / "h.sqlite"
    write(db, result(0.010), result(0.030, **{part: "4.0.0"}))
    (r,) = restarts(trend(db))
    assert r.reasons == [words]


def test_several_changes_are_all_named(tmp_path, capsys):
    db = tmp_path / "h.sqlite"
    write(db, result(0.010), result(0.010, robot="r2", mujoco="4.0.0"))
    assert main(["history", "walk", "--db", str(db)]) == 0
    line = next(x for x in capsys.readouterr().out.splitlines() if "comparison restarts" in x)
    assert line.endswith("robot model changed (its manifest, MJCF or a file the MJCF names); "
                         "MuJoCo version changed (3.3.0 -> 4.0.0)")


def test_another_seed_restarts_the_comparison(tmp_path):
    db = tmp_path / "h.sqlite"
    other = result(0.030)
    other["seed"] = 7
    write(db, result(0.010), other)
    (r,) = restarts(trend(db))
    assert r.reasons == ["seed changed (0 -> 7)"]


def test_controller_code_changes_are_compared_across_unless_asked(tmp_path, capsys):
    # What a history is for: the controller change that made a metric worse is found, not hidden.
    db = tmp_path / "h.sqlite"
    write(db, result(0.010), result(0.011), result(0.030, controller="c2"))
    f = first_regression(trend(db), "height_error_max", TOL)
    assert f is not None and (f.reference.index, f.first_worse.index) == (1, 3)
    assert main(["history", "walk", "--db", str(db)]) == 0
    out = capsys.readouterr().out
    assert "controller code changed at #3 (compared across it" in out
    assert "got worse beyond tolerance first at #3 (" in out

    assert main(["history", "walk", "--db", str(db), "--same-controller-code"]) == 0
    out = capsys.readouterr().out
    assert "comparison restarts at #3 (" in out and "): controller code changed" in out
    assert "got worse beyond tolerance" not in out


def test_results_without_a_fingerprint_are_not_compared_with_results_with_one(tmp_path, capsys):
    db = tmp_path / "h.sqlite"
    old = result(0.010)
    del old["fingerprint"], old["fingerprint_parts"]
    write(db, old, result(0.030), result(0.031))
    (r,) = restarts(trend(db))
    assert r.entry.index == 2 and r.reasons == ["the result before it has no verdict fingerprint"]
    assert first_regression(trend(db), "height_error_max", TOL) is None


def test_fail_on_regression_compares_the_latest_with_the_previous_comparable_run(tmp_path, capsys):
    db = tmp_path / "h.sqlite"
    write(db, result(0.010), result(0.011))
    argv = ["history", "walk", "--db", str(db), "--fail-on-regression"]
    assert main(argv) == 0
    assert "no regression: #2 (" in capsys.readouterr().out

    write(db, result(0.030))                          # worse than #2 beyond 0.005 + 10 %
    assert main(argv) == 1
    line = capsys.readouterr().out.splitlines()[-1]
    assert line.startswith("regression: walk with joint-pd: #3 (") and " is worse than #2 (" in line
    assert line.endswith("height_error_max 0.011 -> 0.03 (tolerance 0.005 + 10%, lower is better)")

    write(db, result(0.030, robot="r2"))              # another robot: nothing comparable before it
    assert main(argv) == 0
    assert "no regression: no earlier comparable run" in capsys.readouterr().out

    write(db, result(0.031, status="failed", robot="r2"))
    assert main(argv) == 1
    assert "status passed -> failed (fell at 0.5 s)" in capsys.readouterr().out


def test_fail_on_regression_over_every_scenario(tmp_path, capsys):
    db = tmp_path / "h.sqlite"
    write(db, result(0.010, sid="a"), result(0.010, sid="b"), result(0.010, sid="b", name="other"))
    assert main(["history", "--db", str(db), "--fail-on-regression"]) == 0
    assert "no regression: 3 latest run(s)" in capsys.readouterr().out
    write(db, result(0.010, sid="a"), result(0.050, sid="b", name="other"))
    assert main(["history", "--db", str(db), "--fail-on-regression"]) == 1
    out = capsys.readouterr().out.splitlines()
    assert len(out) == 2 and out[0].startswith("regression: b with other: #2 (")
    assert out[1].startswith("1 of 3 latest run(s) got worse")
    assert main(["history", "--db", str(db), "--fail-on-regression", "--controller", "joint-pd"]) == 0
    capsys.readouterr()
    assert main(["history", "--db", str(db), "--fail-on-regression", "--controller", "nope"]) == 2
    assert "no runs with controller 'nope'" in capsys.readouterr().err


def test_bad_input_is_exit_2_and_help_lists_the_exit_codes(tmp_path, capsys):
    assert main(["history", "--db", str(tmp_path / "none.sqlite"), "--fail-on-regression"]) == 2
    assert "none.sqlite: no history database here" in capsys.readouterr().err
    db = tmp_path / "h.sqlite"
    write(db, result(0.01))
    assert main(["history", "walk", "--db", str(db), "--last", "0"]) == 2
    assert "--last must be at least 1" in capsys.readouterr().err
    with pytest.raises(SystemExit) as exc:
        main(["history", "--help"])
    assert exc.value.code == 0
    text = " ".join(capsys.readouterr().out.split())
    assert "Exit codes: 0 shown" in text and "1 only with --fail-on-regression" in text
    assert "2 invalid input" in text


def test_bench_run_resume_and_history_see_an_mjcf_change(tmp_path, capsys, monkeypatch):
    # Through `bench run`: needs the single run path, which fingerprints each episode.
    pytest.importorskip("bench.run.sinks", reason="bench run fingerprints episodes on the single run path")
    import shutil
    from pathlib import Path

    repo = Path(__file__).resolve().parents[1]
    shutil.copytree(repo / "models" / "quad12", tmp_path / "robot")
    (tmp_path / "s.yaml").write_text("name: mine\nrobot: {manifest: robot/manifest.yaml}\nduration: 0.2\n"
                                     "criteria:\n  no_fall: true\n")
    monkeypatch.chdir(tmp_path)
    argv = ["run", "s.yaml", "--controller", "joint-pd", "--out", "out", "--no-plots", "--workers", "1", "--resume"]
    assert main(argv) == 0
    assert main(argv) == 0                           # nothing changed: reused, not recorded again
    assert History(tmp_path / "out" / "history.sqlite").count() == 1
    xml = tmp_path / "robot" / "quad12.xml"
    xml.write_text(xml.read_text().replace("quad12: the open", "quad12 (edited): the open", 1))
    assert main(argv) == 0                           # the MJCF changed: run again, a second row
    capsys.readouterr()
    assert main(["history", "mine", "--db", "out/history.sqlite"]) == 0
    out = capsys.readouterr().out
    assert "mine with controller joint-pd: 2 run(s)" in out
    assert "* comparison restarts at #2 (" in out and "robot model changed" in out
