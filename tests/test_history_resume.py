"""History written as each episode finishes: a killed run plus a resume leaves every result in it exactly once;
an older database still opens and is upgraded; a damaged one is a message naming the file, not a traceback."""

from __future__ import annotations

import json
import os
import signal
import sqlite3
import subprocess
import sys
import textwrap

import pytest

from bench.cli import main
from bench.report.history import SCHEMA_VERSION, History, HistoryError, open_run, record_results


def result(i: int, value: float = 0.01, status: str = "passed") -> dict:
    return {"scenario": f"s{i}", "status": status, "reason": None, "controller": "joint-pd", "seed": 0,
            "content_hash": "h1", "result_uid": f"uid-{i:02d}", "fingerprint": "f" * 64,
            "fingerprint_parts": {"scenario": "h1", "robot": "r1"},
            "metrics": {"height_error_max": value, "fell": 0.0},
            "criteria": [{"name": "height_error_max", "value": value, "limit": 0.08, "passed": True,
                          "first_violation_s": None}]}


WRITER = textwrap.dedent("""
    import json, sys
    from bench.report.history import open_run
    db, n = sys.argv[1], int(sys.argv[2])
    results = json.loads(sys.stdin.readline())
    run = open_run(db, source="bench run", cwd=".", git=None)
    for r in results[:n]:
        run.record(r)
        print("recorded", r["result_uid"], flush=True)
    sys.stdin.readline()     # the parent kills this process here, as a SIGKILL mid-run would
""")


def test_a_killed_run_and_its_resume_record_each_result_once(tmp_path):
    db = tmp_path / "history.sqlite"
    results = [result(i, value=0.01 + i / 1000) for i in range(8)]
    proc = subprocess.Popen([sys.executable, "-c", WRITER, str(db), "3"], stdin=subprocess.PIPE,
                            stdout=subprocess.PIPE, text=True, cwd=tmp_path)
    try:
        proc.stdin.write(json.dumps(results) + "\n")
        proc.stdin.flush()
        done = [proc.stdout.readline().split()[-1] for _ in range(3)]
        assert done == ["uid-00", "uid-01", "uid-02"]
        os.kill(proc.pid, signal.SIGKILL)
    finally:
        proc.wait(30)
    assert proc.returncode == -signal.SIGKILL
    with History(db) as h:
        assert h.count() == 3                          # the killed run's finished episodes are there

    # --resume: the three finished results are read back and recorded again, then the other five
    with open_run(db, source="bench run", cwd=tmp_path, git=None) as run:
        for r in results:
            run.record(r)
    con = sqlite3.connect(db)
    assert con.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
    uids = [u for (u,) in con.execute("SELECT result_uid FROM results ORDER BY id")]
    assert sorted(uids) == [f"uid-{i:02d}" for i in range(8)]
    assert con.execute("SELECT COUNT(*) FROM metrics").fetchone()[0] == 8 * 2
    assert con.execute("SELECT COUNT(DISTINCT run_uid) FROM results").fetchone()[0] == 2
    assert con.execute("SELECT COUNT(*) FROM runs").fetchone()[0] == 2


def test_recording_a_result_again_changes_nothing(tmp_path):
    db = tmp_path / "h.sqlite"
    with open_run(db, source="bench run", cwd=tmp_path, git=None) as run:
        run.record(result(1, 0.01))
        run.record(result(1, 0.05))                     # same result_uid: ignored, the first one stands
        run.record({k: v for k, v in result(2).items() if k != "result_uid"})
        run.record({k: v for k, v in result(2).items() if k != "result_uid"})   # no uid: each is new
    with History(db) as h:
        assert h.count() == 3
        (e,) = h.trend("s1")
    assert e.metrics["height_error_max"] == 0.01 and e.result_uid == "uid-01"
    with pytest.raises(HistoryError, match="NOT NULL"):        # a broken result is an error, not skipped
        with open_run(db, source="bench run", cwd=tmp_path, git=None) as run:
            run.record(dict(result(3), status=None))
    assert e.fingerprint == "f" * 64 and e.fingerprint_parts == {"scenario": "h1", "robot": "r1"}


OLD_SCHEMA = """
CREATE TABLE runs (run_uid TEXT PRIMARY KEY, started_at TEXT NOT NULL, source TEXT NOT NULL, git_commit TEXT,
    git_dirty INTEGER, cwd TEXT, host TEXT, bench_version TEXT, mujoco_version TEXT);
CREATE TABLE results (id INTEGER PRIMARY KEY AUTOINCREMENT, run_uid TEXT NOT NULL REFERENCES runs(run_uid),
    recorded_at TEXT NOT NULL, scenario TEXT NOT NULL, content_hash TEXT, controller TEXT, seed INTEGER,
    status TEXT NOT NULL, reason TEXT, criteria TEXT);
CREATE INDEX results_by_scenario ON results (scenario, id);
CREATE TABLE metrics (result_id INTEGER NOT NULL REFERENCES results(id), name TEXT NOT NULL, value REAL,
    PRIMARY KEY (result_id, name)) WITHOUT ROWID;
PRAGMA user_version = 1;
INSERT INTO runs VALUES ('r0', '2026-01-01T00:00:00+00:00', 'bench run', NULL, NULL, '/', 'h', '0.1.0', '3.3.0');
INSERT INTO results VALUES (1, 'r0', '2026-01-01T00:00:01+00:00', 's1', 'h1', 'joint-pd', 0, 'passed', NULL, '[]');
INSERT INTO metrics VALUES (1, 'height_error_max', 0.01);
"""


def test_a_database_of_schema_1_is_read_and_upgraded(tmp_path, capsys):
    db = tmp_path / "old.sqlite"
    con = sqlite3.connect(db)
    con.executescript(OLD_SCHEMA)
    con.close()
    with History(db) as h:                              # read as it is: no new columns needed
        (old,) = h.trend("s1")
    assert old.fingerprint is None and old.fingerprint_parts == {} and old.metrics == {"height_error_max": 0.01}
    assert main(["history", "s1", "--db", str(db)]) == 0
    capsys.readouterr()

    record_results(db, [result(1, 0.012), result(1, 0.012)], source="bench run", cwd=tmp_path, git=None)
    con = sqlite3.connect(db)
    assert con.execute("PRAGMA user_version").fetchone()[0] == SCHEMA_VERSION
    cols = {row[1] for row in con.execute("PRAGMA table_info(results)")}
    assert {"result_uid", "fingerprint", "fingerprint_parts"} <= cols
    assert con.execute("SELECT COUNT(*) FROM results").fetchone()[0] == 2   # the old row and one new one
    with History(db) as h:
        old, new = h.trend("s1")
    assert old.result_uid is None and new.result_uid == "uid-01"


def _real_db(path, n=300):
    results = []
    for i in range(n):
        r = result(i % 5, value=0.01 + i / 1e4)
        r["result_uid"] = f"uid-{i}"
        r["reason"] = "x" * 200                          # fill pages so that truncation cuts real data
        results.append(r)
    record_results(path, results, source="bench run", cwd=path.parent, git=None)
    con = sqlite3.connect(path)
    con.execute("PRAGMA wal_checkpoint(TRUNCATE)")
    con.close()


@pytest.mark.parametrize("damage", ["garbage", "truncated", "foreign"])
def test_a_damaged_database_is_a_message_naming_the_file(tmp_path, capsys, damage):
    db = tmp_path / "history.sqlite"
    if damage == "garbage":
        db.write_bytes(os.urandom(4096))
    elif damage == "truncated":
        _real_db(db)
        size = db.stat().st_size
        assert size > 64 * 1024
        with open(db, "r+b") as fh:
            fh.truncate(size // 3)
    else:                                               # a SQLite file of something else
        con = sqlite3.connect(db)
        con.execute("CREATE TABLE notes (t TEXT)")
        con.close()
    for argv in (["history", "--db", str(db)], ["history", "s1", "--db", str(db)],
                 ["history", "--db", str(db), "--fail-on-regression"]):
        assert main(argv) == 2, argv
        err = capsys.readouterr().err
        assert str(db) in err and "Traceback" not in err
        assert err.startswith("bench history: ") and len(err.strip().splitlines()) == 1
    with pytest.raises(HistoryError, match=str(db)):
        with open_run(db, source="bench run", cwd=tmp_path, git=None) as run:
            run.record(result(1))


def test_a_folder_in_place_of_the_database_is_a_message(tmp_path):
    (tmp_path / "h.sqlite").mkdir()
    with pytest.raises(HistoryError, match="is not a file"):
        open_run(tmp_path / "h.sqlite", source="bench run", cwd=tmp_path, git=None)


STAND = """\
name: stand-{i}
robot: quad12
duration: 0.2
criteria:
  no_fall: true
"""


def test_bench_run_killed_then_resumed_records_each_episode_once(tmp_path):
    # Through `bench run` itself: needs the single run path, which writes history per episode.
    pytest.importorskip("bench.run.sinks", reason="bench run writes history per episode on the single run path")
    import glob
    import time

    suite = tmp_path / "suite"
    suite.mkdir()
    for i in range(8):
        (suite / f"s{i}.yaml").write_text(STAND.format(i=i))
    cmd = [sys.executable, "-m", "bench", "run", str(suite), "--controller", "joint-pd", "--out", str(tmp_path / "out"),
           "--no-plots", "--workers", "1"]
    proc = subprocess.Popen(cmd, cwd=tmp_path, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    try:
        deadline = time.monotonic() + 120
        while len(glob.glob(str(tmp_path / "out" / "*" / "result.json"))) < 3 and proc.poll() is None:
            assert time.monotonic() < deadline
            time.sleep(0.02)
        os.kill(proc.pid, signal.SIGKILL)
    finally:
        proc.wait(30)
    assert proc.returncode == -signal.SIGKILL       # killed mid-run, not finished
    with History(tmp_path / "out" / "history.sqlite") as h:
        # written as each episode finished (result.json first, then its row: the third may be in between)
        assert 2 <= h.count() < 8
    done = subprocess.run(cmd + ["--resume"], cwd=tmp_path, capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, done.stderr
    con = sqlite3.connect(tmp_path / "out" / "history.sqlite")
    rows = con.execute("SELECT scenario, COUNT(*) FROM results GROUP BY scenario ORDER BY scenario").fetchall()
    assert rows == [(f"stand-{i}", 1) for i in range(8)]
    assert con.execute("SELECT COUNT(*) FROM results WHERE fingerprint IS NULL OR result_uid IS NULL").fetchone()[0] == 0
