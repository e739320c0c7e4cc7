"""History: every scored episode appended to an embedded SQLite database, and the trend read back.

One database file (default ``<results folder>/history.sqlite``) holds:

- ``runs``: one row per ``bench run`` or pytest session: uid, start time (UTC),
  what made it (``bench run`` / ``pytest``), the git commit and dirty flag of the
  working directory when it is inside a git checkout, host, bench and MuJoCo versions;
- ``results``: one row per scenario episode: run uid, time, scenario id, content
  hash, controller, seed, status, reason, criteria (JSON);
- ``metrics``: one row per (result, metric name) with its value.

Several processes may write at once (pytest-xdist workers, parallel CI jobs on
one machine): the database is in WAL mode, every connection waits on a lock for
up to ``timeout_s`` (busy timeout) instead of failing, and each write is one
short ``BEGIN IMMEDIATE`` transaction, so a reader never sees half a result.
WAL needs a local file system (not a network share).
"""

from __future__ import annotations

import datetime as _dt
import json
import math
import os
import socket
import sqlite3
import subprocess
import sys
import time
import uuid
from dataclasses import dataclass, field
from pathlib import Path

from bench.report.baseline import Tolerance, judge
from bench.report.results import _clean

DEFAULT_FILENAME = "history.sqlite"
SCHEMA_VERSION = 1

_SCHEMA = """
CREATE TABLE IF NOT EXISTS runs (
    run_uid        TEXT PRIMARY KEY,
    started_at     TEXT NOT NULL,
    source         TEXT NOT NULL,
    git_commit     TEXT,
    git_dirty      INTEGER,
    cwd            TEXT,
    host           TEXT,
    bench_version  TEXT,
    mujoco_version TEXT
);
CREATE TABLE IF NOT EXISTS results (
    id            INTEGER PRIMARY KEY AUTOINCREMENT,
    run_uid       TEXT NOT NULL REFERENCES runs(run_uid),
    recorded_at   TEXT NOT NULL,
    scenario      TEXT NOT NULL,
    content_hash  TEXT,
    controller    TEXT,
    seed          INTEGER,
    status        TEXT NOT NULL,
    reason        TEXT,
    criteria      TEXT
);
CREATE INDEX IF NOT EXISTS results_by_scenario ON results (scenario, id);
CREATE TABLE IF NOT EXISTS metrics (
    result_id INTEGER NOT NULL REFERENCES results(id),
    name      TEXT NOT NULL,
    value     REAL,
    PRIMARY KEY (result_id, name)
) WITHOUT ROWID;
"""


def default_path(results_dir: str | Path) -> Path:
    return Path(results_dir) / DEFAULT_FILENAME


def now_utc() -> str:
    return _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="microseconds")


def new_run_uid() -> str:
    return uuid.uuid4().hex


def git_state(cwd: str | Path = ".") -> dict | None:
    """``{"commit": sha or None, "dirty": bool}`` when ``cwd`` is inside a git checkout, else None.

    Dirty means tracked files differ from the commit (untracked files, such as a
    results folder, do not count), as ``git describe --dirty`` has it.
    """
    def git(*args: str) -> subprocess.CompletedProcess | None:
        try:
            return subprocess.run(["git", "-C", str(cwd), *args], capture_output=True, text=True, timeout=10)
        except (OSError, subprocess.SubprocessError):
            return None

    inside = git("rev-parse", "--is-inside-work-tree")
    if inside is None or inside.returncode != 0 or inside.stdout.strip() != "true":
        return None
    head = git("rev-parse", "--verify", "-q", "HEAD")
    commit = head.stdout.strip() if head is not None and head.returncode == 0 else None
    status = git("status", "--porcelain", "--untracked-files=no")
    dirty = bool(status is not None and status.returncode == 0 and status.stdout.strip())
    return {"commit": commit or None, "dirty": dirty}


def _mujoco_version() -> str | None:
    mod = sys.modules.get("mujoco")   # already imported by a run; otherwise ask the installed metadata
    if mod is not None:
        return getattr(mod, "__version__", None)
    try:
        from importlib.metadata import version

        return version("mujoco")
    except Exception:  # noqa: BLE001 - informative only
        return None


class History:
    """A connection to one history database, opened on first use."""

    def __init__(self, path: str | Path, timeout_s: float = 30.0) -> None:
        self.path = Path(path)
        self.timeout_s = float(timeout_s)
        self._con: sqlite3.Connection | None = None

    # -- connection ------------------------------------------------------------------
    def _connect(self, create: bool) -> sqlite3.Connection:
        if self._con is not None:
            return self._con
        if not create and not self.path.is_file():
            raise FileNotFoundError(f"{self.path}: no history database here (a `bench run` writes one "
                                    f"into its --out folder)")
        if create:
            self.path.parent.mkdir(parents=True, exist_ok=True)
        # Autocommit mode: transactions are opened explicitly with BEGIN IMMEDIATE.
        con = sqlite3.connect(str(self.path), timeout=self.timeout_s, isolation_level=None)
        con.execute(f"PRAGMA busy_timeout = {int(self.timeout_s * 1000)}")
        if create:
            self._init_schema(con)
        self._con = con
        return con

    def _init_schema(self, con: sqlite3.Connection) -> None:
        # Switching to WAL and creating tables take locks that a concurrent creator may hold for a moment;
        # the busy timeout covers most of it, the loop the rest.
        deadline = time.monotonic() + self.timeout_s
        while True:
            try:
                mode = con.execute("PRAGMA journal_mode = WAL").fetchone()[0]
                if str(mode).lower() != "wal":
                    raise sqlite3.OperationalError(f"could not switch {self.path} to WAL mode (got {mode})")
                con.execute("PRAGMA synchronous = NORMAL")   # safe in WAL mode; a power loss drops the last commit
                version = con.execute("PRAGMA user_version").fetchone()[0]
                if version > SCHEMA_VERSION:
                    raise sqlite3.DatabaseError(f"{self.path}: history schema {version} is newer than this bench "
                                                f"reads ({SCHEMA_VERSION}); upgrade quadruped-bench")
                if version < SCHEMA_VERSION:
                    con.execute("BEGIN IMMEDIATE")
                    try:
                        for stmt in filter(None, (s.strip() for s in _SCHEMA.split(";"))):
                            con.execute(stmt)
                        con.execute(f"PRAGMA user_version = {SCHEMA_VERSION}")
                        con.execute("COMMIT")
                    except BaseException:
                        con.execute("ROLLBACK")
                        raise
                return
            except sqlite3.OperationalError as exc:
                if "locked" not in str(exc) and "busy" not in str(exc) or time.monotonic() > deadline:
                    raise
                time.sleep(0.05)

    def close(self) -> None:
        if self._con is not None:
            self._con.close()
            self._con = None

    def __enter__(self) -> "History":
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    # -- writing ---------------------------------------------------------------------
    def begin_run(self, run_uid: str, *, source: str, started_at: str | None = None, git: dict | None = None,
                  cwd: str | Path | None = None) -> None:
        """Record a run (idempotent: every xdist worker of one session calls it with the same uid)."""
        import bench

        con = self._connect(create=True)
        con.execute("BEGIN IMMEDIATE")
        try:
            con.execute(
                "INSERT OR IGNORE INTO runs (run_uid, started_at, source, git_commit, git_dirty, cwd, host, "
                "bench_version, mujoco_version) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?)",
                (run_uid, started_at or now_utc(), source, (git or {}).get("commit"),
                 None if git is None else int(bool(git.get("dirty"))), str(cwd or os.getcwd()),
                 socket.gethostname(), bench.__version__, _mujoco_version()))
            con.execute("COMMIT")
        except BaseException:
            con.execute("ROLLBACK")
            raise

    def record(self, run_uid: str, result: dict, recorded_at: str | None = None) -> int:
        """Append one result (a result.json dict) in one transaction; return its row id."""
        con = self._connect(create=True)
        metrics = [(str(k), float(v)) for k, v in (result.get("metrics") or {}).items()
                   if isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)]
        con.execute("BEGIN IMMEDIATE")
        try:
            cur = con.execute(
                "INSERT INTO results (run_uid, recorded_at, scenario, content_hash, controller, seed, status, "
                "reason, criteria) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?)",
                (run_uid, recorded_at or now_utc(), result["scenario"], result.get("content_hash", ""),
                 result.get("controller"), result.get("seed"), result["status"], result.get("reason"),
                 json.dumps(_clean(result.get("criteria") or []), allow_nan=False)))
            rid = int(cur.lastrowid)
            con.executemany("INSERT INTO metrics (result_id, name, value) VALUES (?, ?, ?)",
                            [(rid, k, v) for k, v in metrics])
            con.execute("COMMIT")
        except BaseException:
            con.execute("ROLLBACK")
            raise
        return rid

    # -- reading ---------------------------------------------------------------------
    def scenarios(self) -> list[dict]:
        """One summary per scenario id: runs, controllers, the last status and time."""
        con = self._connect(create=False)
        rows = con.execute(
            "SELECT r.scenario, COUNT(*), GROUP_CONCAT(DISTINCT r.controller), MAX(r.id) FROM results r "
            "GROUP BY r.scenario ORDER BY r.scenario").fetchall()
        out = []
        for scenario, n, controllers, last_id in rows:
            status, at, commit, dirty = con.execute(
                "SELECT r.status, r.recorded_at, u.git_commit, u.git_dirty FROM results r "
                "LEFT JOIN runs u ON u.run_uid = r.run_uid WHERE r.id = ?", (last_id,)).fetchone()
            out.append({"scenario": scenario, "results": n, "controllers": sorted((controllers or "").split(",")),
                        "last_status": status, "last_time": at, "last_commit": commit, "last_dirty": dirty})
        return out

    def trend(self, scenario: str, controller: str | None = None) -> list["Entry"]:
        """Every recorded result of ``scenario`` (optionally one controller's), oldest first."""
        con = self._connect(create=False)
        sql = ("SELECT r.id, r.run_uid, r.recorded_at, r.content_hash, r.controller, r.seed, r.status, r.reason, "
               "r.criteria, u.git_commit, u.git_dirty, u.source FROM results r "
               "LEFT JOIN runs u ON u.run_uid = r.run_uid WHERE r.scenario = ?")
        args: list = [scenario]
        if controller is not None:
            sql += " AND r.controller = ?"
            args.append(controller)
        rows = con.execute(sql + " ORDER BY r.id", args).fetchall()
        entries = []
        for i, (rid, uid, at, h, ctrl, seed, status, reason, crit, commit, dirty, source) in enumerate(rows, 1):
            entries.append(Entry(i, rid, uid, at, h or "", ctrl, seed, status, reason,
                                 json.loads(crit) if crit else [], commit, None if dirty is None else bool(dirty),
                                 source))
        if entries:
            ids = {e.result_id: e for e in entries}
            q = ",".join("?" * len(ids))
            for rid, name, value in con.execute(
                    f"SELECT result_id, name, value FROM metrics WHERE result_id IN ({q})", list(ids)):
                ids[rid].metrics[name] = value
        return entries

    def count(self) -> int:
        con = self._connect(create=False)
        return int(con.execute("SELECT COUNT(*) FROM results").fetchone()[0])


@dataclass
class Entry:
    """One recorded result, as read back."""

    index: int             # 1-based position in the trend
    result_id: int
    run_uid: str
    recorded_at: str
    content_hash: str
    controller: str | None
    seed: int | None
    status: str
    reason: str | None
    criteria: list
    git_commit: str | None
    git_dirty: bool | None
    source: str | None
    metrics: dict[str, float] = field(default_factory=dict)

    def commit_label(self) -> str:
        if self.git_commit is None:
            return "-" if self.git_dirty is None else "(no commit)"
        return self.git_commit[:10] + ("+dirty" if self.git_dirty else "")

    def time_label(self) -> str:
        return self.recorded_at[:19].replace("T", " ")

    def describe(self) -> str:
        return f"#{self.index} ({self.time_label()} UTC, commit {self.commit_label()}, run {self.run_uid[:8]})"


@dataclass
class Finding:
    """The first run where a metric got worse than the reference run beyond tolerance."""

    metric: str
    reference: Entry
    last_good: Entry
    first_worse: Entry
    latest: Entry
    tolerance: Tolerance

    @property
    def still_worse(self) -> bool:
        ref = self.reference.metrics[self.metric]
        cur = self.latest.metrics.get(self.metric)
        return cur is not None and judge(ref, cur, self.tolerance) == "regressed"


def latest_version(entries: list[Entry]) -> list[Entry]:
    """The trailing entries that share the latest entry's content hash (the current version of the scenario)."""
    start = len(entries)
    while start > 0 and entries[start - 1].content_hash == entries[-1].content_hash:
        start -= 1
    return entries[start:]


def first_regression(entries: list[Entry], metric: str, tolerance: Tolerance) -> Finding | None:
    """The first entry whose ``metric`` is worse than the reference beyond ``tolerance``.

    The reference is the oldest entry given; when the scenario file changed
    (another content hash), the comparison restarts at the first entry of the
    new version, so only the latest version of the scenario is judged.
    """
    if not entries or tolerance.direction == "none" or tolerance.ignore:
        return None
    segment = latest_version(entries)
    ref = next((e for e in segment if metric in e.metrics), None)
    if ref is None:
        return None
    last_good = ref
    for e in segment[segment.index(ref) + 1:]:
        value = e.metrics.get(metric)
        if value is None:
            continue
        if judge(ref.metrics[metric], value, tolerance) == "regressed":
            return Finding(metric, ref, last_good, e, segment[-1], tolerance)
        last_good = e
    return None


def first_status_regression(entries: list[Entry]) -> tuple[Entry, Entry] | None:
    """(last passed, first not passed after it) in the latest version of the scenario, or None."""
    last_pass = None
    for e in latest_version(entries):
        if e.status == "passed":
            last_pass = e
        elif last_pass is not None:
            return last_pass, e
    return None


def record_results(path: str | Path, results: list[dict], *, source: str, cwd: str | Path = ".",
                   run_uid: str | None = None, git: dict | None = ..., timeout_s: float = 30.0) -> str:
    """Append a whole run (``bench run``) and return its uid. ``git=...`` means: look it up from ``cwd``."""
    uid = run_uid or new_run_uid()
    if git is ...:
        git = git_state(cwd)
    with History(path, timeout_s=timeout_s) as h:
        h.begin_run(uid, source=source, git=git, cwd=Path(cwd).resolve())
        for r in results:
            h.record(uid, r)
    return uid
