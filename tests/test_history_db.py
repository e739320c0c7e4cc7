"""History: the SQLite database, concurrent writers, git state, `bench run --history` and `bench history`."""

from __future__ import annotations

import multiprocessing as mp
import sqlite3
import subprocess
from pathlib import Path


from bench.cli import main
from bench.report.baseline import tolerance_for
from bench.report.history import SCHEMA_VERSION, History, first_regression, git_state, record_results

SCENARIO = Path(__file__).parent / "fixtures" / "bench_plugin" / "stand-1s.yaml"


def result(sid="stand", value=0.01, status="passed", content_hash="h1", controller="joint-pd") -> dict:
    return {"scenario": sid, "status": status, "reason": None, "controller": controller, "seed": 0,
            "content_hash": content_hash, "metrics": {"height_error_max": value, "fell": 0.0, "nan": float("nan")},
            "criteria": [{"name": "height_error_max", "value": value, "limit": 0.08, "passed": True,
                          "first_violation_s": None}]}


def test_round_trip_and_wal_mode(tmp_path):
    db = tmp_path / "h.sqlite"
    uid = record_results(db, [result("a"), result("b", 0.02)], source="bench run", cwd=tmp_path, git=None)
    with History(db) as h:
        entries = h.trend("b")
        assert [s["scenario"] for s in h.scenarios()] == ["a", "b"]
    assert len(entries) == 1 and entries[0].run_uid == uid and entries[0].source == "bench run"
    assert entries[0].metrics == {"height_error_max": 0.02, "fell": 0.0}   # non-finite values are not stored
    assert entries[0].criteria[0]["limit"] == 0.08 and entries[0].git_commit is None
    con = sqlite3.connect(db)
    assert con.execute("PRAGMA journal_mode").fetchone()[0] == "wal"
    assert con.execute("PRAGMA user_version").fetchone()[0] == SCHEMA_VERSION == 2


def _writer(db: str, uid: str, worker: int, n: int, start) -> None:
    start.wait()
    with History(db) as h:
        h.begin_run(uid, source="pytest", git=None)
        for i in range(n):
            h.record(uid, result(f"s{worker}", value=i / 1000))


def test_concurrent_writers_do_not_corrupt_it(tmp_path):
    # Four processes create the database and write at the same moment, as pytest-xdist workers do.
    db, uid, n = str(tmp_path / "h.sqlite"), "0" * 32, 40
    ctx = mp.get_context("spawn")
    start = ctx.Event()
    procs = [ctx.Process(target=_writer, args=(db, uid, w, n, start)) for w in range(4)]
    for p in procs:
        p.start()
    start.set()
    for p in procs:
        p.join(60)
    assert [p.exitcode for p in procs] == [0, 0, 0, 0]
    con = sqlite3.connect(db)
    assert con.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
    assert con.execute("SELECT COUNT(*) FROM runs").fetchone()[0] == 1
    assert con.execute("SELECT COUNT(*) FROM results").fetchone()[0] == 4 * n
    assert con.execute("SELECT COUNT(*) FROM metrics").fetchone()[0] == 4 * n * 2
    with History(db) as h:
        assert [e.metrics["height_error_max"] for e in h.trend("s2")] == [i / 1000 for i in range(n)]


def test_first_regression_names_the_first_run_beyond_tolerance(tmp_path):
    db = tmp_path / "h.sqlite"
    for v in (0.010, 0.012, 0.020, 0.011, 0.022):
        record_results(db, [result("a", v)], source="bench run", git=None)
    with History(db) as h:
        entries = h.trend("a")
    tol = tolerance_for("height_error_max")      # 0.005 + 10 %: 0.010 may grow to 0.016
    f = first_regression(entries, "height_error_max", tol)
    assert (f.reference.index, f.last_good.index, f.first_worse.index) == (1, 2, 3)
    assert f.still_worse                                 # the latest, 0.022, is worse too
    # A changed scenario file restarts the comparison at its first run.
    record_results(db, [result("a", 0.030, content_hash="h2")], source="bench run", git=None)
    record_results(db, [result("a", 0.031, content_hash="h2")], source="bench run", git=None)
    with History(db) as h:
        assert first_regression(h.trend("a"), "height_error_max", tol) is None


def _git(cwd, *args):
    subprocess.run(["git", "-c", "user.name=ci", "-c", "user.email=ci@example.invalid", *args], cwd=cwd,
                   check=True, capture_output=True)


def test_git_state(tmp_path):
    assert git_state(tmp_path) is None
    _git(tmp_path, "init", "-q")
    assert git_state(tmp_path) == {"commit": None, "dirty": False}
    (tmp_path / "ctrl.py").write_text("K = 1\n")
    _git(tmp_path, "add", "ctrl.py")
    _git(tmp_path, "commit", "-q", "-m", "first")
    (tmp_path / "untracked-results.txt").write_text("x")
    state = git_state(tmp_path)
    assert len(state["commit"]) == 40 and state["dirty"] is False   # untracked files do not count
    (tmp_path / "ctrl.py").write_text("K = 2\n")
    assert git_state(tmp_path)["dirty"] is True


def test_bench_run_appends_to_the_history(tmp_path, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    out = tmp_path / "res"
    args = ["run", str(SCENARIO), "--controller", "joint-pd", "--out", str(out), "--no-plots"]
    assert main(args + ["--no-history"]) == 0
    assert not (out / "history.sqlite").exists()
    assert main(args) == 0
    assert main(args + ["--history", str(tmp_path / "elsewhere.sqlite")]) == 0
    with History(out / "history.sqlite") as h:
        (e,) = h.trend("stand-1s")
    assert e.status == "passed" and e.controller == "joint-pd" and e.source == "bench run"
    assert e.content_hash and e.metrics["height_error_max"] > 0 and e.git_commit is None
    assert History(tmp_path / "elsewhere.sqlite").count() == 1
    capsys.readouterr()


def test_history_command(tmp_path, capsys):
    db = tmp_path / "h.sqlite"
    for v in (0.010, 0.012, 0.020):
        record_results(db, [result("stand[mass=1]", v), result("tight", 0.03, status="failed")],
                       source="bench run", git={"commit": "c0ffee" + "0" * 34, "dirty": v > 0.015})
    assert main(["history", "--db", str(db)]) == 0
    out = capsys.readouterr().out
    assert "stand[mass=1]  3     joint-pd" in out and "failed" in out

    assert main(["history", "stand[mass=1]", "--db", str(db)]) == 0
    out = capsys.readouterr().out.splitlines()
    assert out[0].startswith("stand[mass=1] with controller joint-pd: 3 run(s)")
    assert out[1].split() == ["run", "time", "(UTC)", "commit", "status", "height_error_max"]
    assert out[-5].split()[-1] == "0.02" and "c0ffee0000+dirty" in out[-5]
    assert out[-4].startswith("got worse beyond tolerance first at #3 (") and "commit c0ffee0000+dirty" in out[-4]
    assert "; last within tolerance: #2 (" in out[-4]
    assert out[-1].split() == ["height_error_max", "0.01", "at", "#1", "0.02", "0.005", "+", "10%,", "lower", "is",
                               "better", "still", "worse"]

    assert main(["history", "stand[mass=1]", "--metric", "fell", "--db", str(db)]) == 0
    assert "no run got worse than #1 beyond tolerance in the metrics shown" in capsys.readouterr().out
    assert main(["history", "nope", "--db", str(db)]) == 2
    assert "recorded: stand[mass=1], tight" in capsys.readouterr().err
    assert main(["history", "--db", str(tmp_path / "none.sqlite")]) == 2
