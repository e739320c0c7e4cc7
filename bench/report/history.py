"""History: every scored episode recorded in an embedded SQLite database as it finishes, and the trend read back.

One database file (default ``<results folder>/history.sqlite``) holds:

- ``runs``: one row per ``bench run`` or pytest session: uid, start time (UTC),
  what made it (``bench run`` / ``pytest``), the git commit and dirty flag of the
  working directory when it is inside a git checkout, host, bench and MuJoCo versions;
- ``results``: one row per scenario episode: run uid, time, scenario id, content
  hash, controller, seed, status, reason, criteria (JSON), the result's own uid
  (``result_uid``, unique) and its verdict fingerprint (digest and parts, JSON);
- ``metrics``: one row per (result, metric name) with its value.

Written as each episode finishes (:func:`open_run`, ``RunHistory.record``): one
short ``BEGIN IMMEDIATE`` transaction per result, so a run killed at any moment
leaves every finished episode recorded and none half-recorded. A result is
keyed by its ``result_uid``: recording it again (``--resume`` re-reads finished
results) is a no-op, so each episode is in the history exactly once.

Several processes may write at once (pytest-xdist workers, parallel CI jobs on
one machine): the database is in WAL mode and every connection waits on a lock
for up to ``timeout_s`` (busy timeout) instead of failing, so a reader never sees
half a result. WAL needs a local file system (not a network share).

Comparisons over time use only comparable entries: consecutive results of one
scenario whose verdict fingerprints agree on the parts that describe the test
(:data:`COMPARED_PARTS`). Where one changes, the comparison restarts and
:func:`restart_reasons` says why.

A database written by an older bench (schema 1, no ``result_uid`` or
fingerprint columns) is read as it is and upgraded in place when written to.
Every failure to open, read or write the file is a :class:`HistoryError` whose
message names the file.
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
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path

from bench.report.baseline import Tolerance, judge

DEFAULT_FILENAME = "history.sqlite"
SCHEMA_VERSION = 2

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
    id                INTEGER PRIMARY KEY AUTOINCREMENT,
    run_uid           TEXT NOT NULL REFERENCES runs(run_uid),
    recorded_at       TEXT NOT NULL,
    scenario          TEXT NOT NULL,
    content_hash      TEXT,
    controller        TEXT,
    seed              INTEGER,
    status            TEXT NOT NULL,
    reason            TEXT,
    criteria          TEXT,
    result_uid        TEXT,
    fingerprint       TEXT,
    fingerprint_parts TEXT
);
CREATE INDEX IF NOT EXISTS results_by_scenario ON results (scenario, id);
CREATE TABLE IF NOT EXISTS metrics (
    result_id INTEGER NOT NULL REFERENCES results(id),
    name      TEXT NOT NULL,
    value     REAL,
    PRIMARY KEY (result_id, name)
) WITHOUT ROWID;
"""
#: Columns added after schema 1, with their types (added to an older database when it is written to).
_ADDED_COLUMNS = (("result_uid", "TEXT"), ("fingerprint", "TEXT"), ("fingerprint_parts", "TEXT"))
#: A result recorded twice (a resumed run re-reads finished results) is one row. NULLs (rows of
#: schema 1) do not collide in a UNIQUE index.
_UID_INDEX = "CREATE UNIQUE INDEX IF NOT EXISTS results_by_uid ON results (result_uid)"

#: Fingerprint parts that describe the test itself: when one changes between two consecutive
#: results, they are not compared. The controller's code is left out on purpose: it is what a
#: history follows over time (the first commit of the controller that made a metric worse), and
#: the controller's name is compared already. ``bench history --same-controller-code`` adds it.
COMPARED_PARTS = ("scenario", "robot", "limits", "bench", "mujoco", "numpy")
#: What a changed part means, for the user.
PART_CHANGES = {
    "scenario": "scenario file changed",
    "robot": "robot model changed (its manifest, MJCF or a file the MJCF names)",
    "controller": "controller code changed",
    "limits": "episode limits changed (tick or episode timeout)",
    "bench": "bench code changed",
    "mujoco": "MuJoCo version changed",
    "numpy": "NumPy version changed",
}
#: Parts whose values are version strings, shown as ``old -> new``.
_VERSION_PARTS = ("mujoco", "numpy")


class HistoryError(Exception):
    """The history database cannot be opened, read or written; the message names the file."""


def _json_clean(x):
    """JSON has no NaN or infinity: store them as null."""
    if isinstance(x, float) and not math.isfinite(x):
        return None
    if isinstance(x, dict):
        return {k: _json_clean(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [_json_clean(v) for v in x]
    return x


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


_NOT_A_DB_HINT = ("the file is damaged or is not a bench history database; move it away and the next "
                  "`bench run` starts a new one")


@contextmanager
def _sqlite_errors(path: Path, doing: str):
    """Turn every SQLite failure into a :class:`HistoryError` that names the file."""
    try:
        yield
    except HistoryError:
        raise
    except sqlite3.DatabaseError as exc:
        text = str(exc)
        if "locked" in text or "busy" in text:
            raise HistoryError(f"{path}: cannot {doing}: the database stayed locked by another process ({text})") \
                from None
        raise HistoryError(f"{path}: cannot {doing}: {text} ({_NOT_A_DB_HINT})") from None
    except sqlite3.Error as exc:
        raise HistoryError(f"{path}: cannot {doing}: {exc}") from None
    except OSError as exc:
        raise HistoryError(f"{path}: cannot {doing}: {exc.strerror or exc}") from None


class History:
    """A connection to one history database, opened on first use."""

    def __init__(self, path: str | Path, timeout_s: float = 30.0) -> None:
        self.path = Path(path)
        self.timeout_s = float(timeout_s)
        self._con: sqlite3.Connection | None = None
        self._writable = False
        self._columns: set[str] = set()

    # -- connection ------------------------------------------------------------------
    def _connect(self, create: bool) -> sqlite3.Connection:
        if self._con is not None and (self._writable or not create):
            return self._con
        if self._con is None and not create and not self.path.is_file():
            raise HistoryError(f"{self.path}: no history database here (a `bench run` writes one into its "
                               f"--out folder)")
        if self.path.exists() and not self.path.is_file():
            raise HistoryError(f"{self.path}: is not a file (a history database is one SQLite file)")
        with _sqlite_errors(self.path, "open the history database"):
            con = self._con
            if con is None:
                if create:
                    self.path.parent.mkdir(parents=True, exist_ok=True)
                # Autocommit mode: transactions are opened explicitly with BEGIN IMMEDIATE.
                con = sqlite3.connect(str(self.path), timeout=self.timeout_s, isolation_level=None)
                self._con = con
                try:
                    con.execute(f"PRAGMA busy_timeout = {int(self.timeout_s * 1000)}")
                    if not create:
                        self._check_readable(con)
                except BaseException:
                    self.close()
                    raise
            if create:
                try:
                    self._init_schema(con)
                except BaseException:
                    self.close()
                    raise
                self._writable = True
            self._columns = {row[1] for row in con.execute("PRAGMA table_info(results)")}
        return con

    def _check_readable(self, con: sqlite3.Connection) -> None:
        # sqlite3.connect opens anything; the first read says whether it is a database at all.
        tables = {row[0] for row in con.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
        missing = {"runs", "results", "metrics"} - tables
        if missing:
            raise HistoryError(f"{self.path}: not a bench history database (no {', '.join(sorted(missing))} "
                               f"table; {_NOT_A_DB_HINT})")
        version = con.execute("PRAGMA user_version").fetchone()[0]
        if version > SCHEMA_VERSION:
            raise HistoryError(f"{self.path}: history schema {version} is newer than this bench reads "
                               f"({SCHEMA_VERSION}); upgrade quadruped-bench")

    def _init_schema(self, con: sqlite3.Connection) -> None:
        # Switching to WAL and creating tables take locks that a concurrent creator may hold for a moment;
        # the busy timeout covers most of it, the loop the rest.
        deadline = time.monotonic() + self.timeout_s
        while True:
            try:
                mode = con.execute("PRAGMA journal_mode = WAL").fetchone()[0]
                if str(mode).lower() != "wal":
                    raise HistoryError(f"{self.path}: could not switch to WAL mode (got {mode}); a history "
                                       f"database needs a local file system")
                con.execute("PRAGMA synchronous = NORMAL")   # safe in WAL mode; a power loss drops the last commit
                version = con.execute("PRAGMA user_version").fetchone()[0]
                if version > SCHEMA_VERSION:
                    raise HistoryError(f"{self.path}: history schema {version} is newer than this bench "
                                       f"writes ({SCHEMA_VERSION}); upgrade quadruped-bench")
                if version < SCHEMA_VERSION:
                    con.execute("BEGIN IMMEDIATE")
                    try:
                        tables = {row[0] for row in con.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
                        if tables and not tables & {"runs", "results", "metrics"}:
                            # someone else's SQLite file: add nothing to it
                            raise HistoryError(f"{self.path}: not a bench history database (it holds other "
                                               f"tables: {', '.join(sorted(tables)[:5])}); give another path")
                        for stmt in filter(None, (s.strip() for s in _SCHEMA.split(";"))):
                            con.execute(stmt)
                        # schema 1 -> 2: the columns are added to a database made before them
                        have = {row[1] for row in con.execute("PRAGMA table_info(results)")}
                        for name, kind in _ADDED_COLUMNS:
                            if name not in have:
                                con.execute(f"ALTER TABLE results ADD COLUMN {name} {kind}")
                        con.execute(_UID_INDEX)
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
            self._writable = False

    def __enter__(self) -> "History":
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def _col(self, name: str) -> str:
        """``r.<name>`` when the results table has that column (an older database may not), else NULL."""
        return f"r.{name}" if name in self._columns else "NULL"

    # -- writing ---------------------------------------------------------------------
    def begin_run(self, run_uid: str, *, source: str, started_at: str | None = None, git: dict | None = None,
                  cwd: str | Path | None = None) -> None:
        """Record a run (idempotent: every xdist worker of one session calls it with the same uid)."""
        import bench

        with _sqlite_errors(self.path, "record the run"):
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
        """Record one result (a result.json dict) in one transaction; return its row id.

        Keyed on ``result["result_uid"]``: a result already recorded is left as it is (its row id is
        returned). A result without one gets a fresh uid, so it is always added.
        """
        metrics = [(str(k), float(v)) for k, v in (result.get("metrics") or {}).items()
                   if isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)]
        digest, parts = fingerprint_of(result)
        uid = str(result.get("result_uid") or new_run_uid())
        with _sqlite_errors(self.path, f"record the result of {result.get('scenario')!r}"):
            con = self._connect(create=True)
            con.execute("BEGIN IMMEDIATE")
            try:
                # Only a repeated result_uid is ignored (INSERT OR IGNORE would also drop a row that
                # breaks another constraint, silently).
                cur = con.execute(
                    "INSERT INTO results (run_uid, recorded_at, scenario, content_hash, controller, seed, "
                    "status, reason, criteria, result_uid, fingerprint, fingerprint_parts) "
                    "VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?) ON CONFLICT (result_uid) DO NOTHING",
                    (run_uid, recorded_at or now_utc(), result["scenario"], result.get("content_hash", ""),
                     result.get("controller"), result.get("seed"), result["status"], result.get("reason"),
                     json.dumps(_json_clean(result.get("criteria") or []), allow_nan=False), uid, digest,
                     json.dumps(parts, sort_keys=True) if parts else None))
                if cur.rowcount == 0:      # recorded before (a resumed run): nothing to add
                    rid = int(con.execute("SELECT id FROM results WHERE result_uid = ?", (uid,)).fetchone()[0])
                else:
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
        with _sqlite_errors(self.path, "read the history database"):
            con = self._connect(create=False)
            rows = con.execute(
                "SELECT r.scenario, COUNT(*), GROUP_CONCAT(DISTINCT r.controller), MAX(r.id) FROM results r "
                "GROUP BY r.scenario ORDER BY r.scenario").fetchall()
            out = []
            for scenario, n, controllers, last_id in rows:
                status, at, commit, dirty = con.execute(
                    "SELECT r.status, r.recorded_at, u.git_commit, u.git_dirty FROM results r "
                    "LEFT JOIN runs u ON u.run_uid = r.run_uid WHERE r.id = ?", (last_id,)).fetchone()
                out.append({"scenario": scenario, "results": n,
                            "controllers": sorted((controllers or "").split(",")),
                            "last_status": status, "last_time": at, "last_commit": commit, "last_dirty": dirty})
        return out

    def trend(self, scenario: str, controller: str | None = None) -> list["Entry"]:
        """Every recorded result of ``scenario`` (optionally one controller's), oldest first."""
        with _sqlite_errors(self.path, "read the history database"):
            con = self._connect(create=False)
            sql = ("SELECT r.id, r.run_uid, r.recorded_at, r.content_hash, r.controller, r.seed, r.status, "
                   f"r.reason, r.criteria, u.git_commit, u.git_dirty, u.source, {self._col('result_uid')}, "
                   f"{self._col('fingerprint')}, {self._col('fingerprint_parts')} FROM results r "
                   "LEFT JOIN runs u ON u.run_uid = r.run_uid WHERE r.scenario = ?")
            args: list = [scenario]
            if controller is not None:
                sql += " AND r.controller = ?"
                args.append(controller)
            rows = con.execute(sql + " ORDER BY r.id", args).fetchall()
            entries = []
            for i, (rid, uid, at, h, ctrl, seed, status, reason, crit, commit, dirty, source, ruid, fp,
                    fparts) in enumerate(rows, 1):
                entries.append(Entry(i, rid, uid, at, h or "", ctrl, seed, status, reason,
                                     _json_or(crit, []), commit, None if dirty is None else bool(dirty),
                                     source, result_uid=ruid, fingerprint=fp,
                                     fingerprint_parts=_json_or(fparts, {})))
            if entries:
                ids = {e.result_id: e for e in entries}
                q = ",".join("?" * len(ids))
                for rid, name, value in con.execute(
                        f"SELECT result_id, name, value FROM metrics WHERE result_id IN ({q})", list(ids)):
                    ids[rid].metrics[name] = value
        return entries

    def count(self) -> int:
        with _sqlite_errors(self.path, "read the history database"):
            con = self._connect(create=False)
            return int(con.execute("SELECT COUNT(*) FROM results").fetchone()[0])


def _json_or(text, default):
    if not text:
        return default
    try:
        return json.loads(text)
    except ValueError:
        return default


def fingerprint_of(result: dict) -> tuple[str | None, dict]:
    """``(digest, parts)`` of a result: ``fingerprint`` is the digest (or a ``{digest, parts}`` object),
    ``fingerprint_parts`` the parts; ``(None, {})`` for a result made before fingerprints."""
    fp = result.get("fingerprint")
    parts = result.get("fingerprint_parts")
    if isinstance(fp, dict):
        parts = parts or fp.get("parts")
        fp = fp.get("digest")
    parts = {str(k): str(v) for k, v in parts.items()} if isinstance(parts, dict) else {}
    return (str(fp) if fp else None), parts


class RunHistory:
    """One run's history writer: ``record`` each result as its episode finishes, then ``close``."""

    def __init__(self, history: History, run_uid: str) -> None:
        self.history = history
        self.run_uid = run_uid

    @property
    def path(self) -> Path:
        return self.history.path

    def record(self, result: dict) -> None:
        """Record one result in its own transaction; a result recorded before is left as it is."""
        self.history.record(self.run_uid, result)

    def close(self) -> None:
        self.history.close()

    def __enter__(self) -> "RunHistory":
        return self

    def __exit__(self, *exc) -> None:
        self.close()


def open_run(path: str | Path, *, source: str, cwd: str | Path, run_uid: str | None = None,
             git: dict | None = ..., timeout_s: float = 30.0) -> RunHistory:
    """Open (creating or upgrading) the database at ``path`` and record a run; raise :class:`HistoryError`.

    ``git=...`` means: look the checkout state up from ``cwd``. The same ``run_uid`` may be opened by
    several processes of one session (pytest-xdist workers): the run is recorded once.
    """
    uid = run_uid or new_run_uid()
    if git is ...:
        git = git_state(cwd)
    h = History(path, timeout_s=timeout_s)
    try:
        h.begin_run(uid, source=source, git=git, cwd=Path(cwd).resolve())
    except BaseException:
        h.close()
        raise
    return RunHistory(h, uid)


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
    result_uid: str | None = None
    fingerprint: str | None = None
    fingerprint_parts: dict[str, str] = field(default_factory=dict)

    def commit_label(self) -> str:
        if self.git_commit is None:
            return "-" if self.git_dirty is None else "(no commit)"
        return self.git_commit[:10] + ("+dirty" if self.git_dirty else "")

    def time_label(self) -> str:
        return self.recorded_at[:19].replace("T", " ")

    def describe(self) -> str:
        return f"#{self.index} ({self.time_label()} UTC, commit {self.commit_label()}, run {self.run_uid[:8]})"


# --------------------------------------------------------------------------- comparing like with like


def restart_reasons(previous: Entry, entry: Entry, parts: tuple[str, ...] = COMPARED_PARTS) -> list[str]:
    """Why ``entry`` cannot be compared with ``previous`` (the result before it); [] when it can.

    Both with a fingerprint: each of ``parts`` that differs. Neither: the scenario's content hash.
    Only the later one: the comparison restarts, since what the earlier result ran on is unknown.
    And in every case a different seed.
    """
    a, b = previous.fingerprint_parts, entry.fingerprint_parts
    # the seed is recorded beside the fingerprint (``--seed`` overrides the scenario's): noise,
    # trial draws and disturbances all follow it
    seed = ([f"seed changed ({previous.seed} -> {entry.seed})"]
            if previous.seed is not None and entry.seed is not None and previous.seed != entry.seed else [])
    if a and b:
        if previous.fingerprint and previous.fingerprint == entry.fingerprint:
            return seed
        out = []
        for name in parts:
            if a.get(name) == b.get(name):
                continue
            text = PART_CHANGES.get(name, f"{name} changed")
            if name in _VERSION_PARTS and a.get(name) and b.get(name):
                text += f" ({a[name]} -> {b[name]})"
            out.append(text)
        return out + seed
    out = []
    if previous.content_hash != entry.content_hash:
        out.append(PART_CHANGES["scenario"])
    if a or b:
        out.append("the result before it has no verdict fingerprint" if b else
                   "this result has no verdict fingerprint")
    return out + seed


@dataclass
class Restart:
    """Where a comparison restarts: ``entry`` cannot be compared with ``previous``, for ``reasons``."""

    entry: Entry
    previous: Entry
    reasons: list[str]

    def describe(self) -> str:
        return f"comparison restarts at {self.entry.describe()}: {'; '.join(self.reasons)}"


def restarts(entries: list[Entry], parts: tuple[str, ...] = COMPARED_PARTS) -> list[Restart]:
    """Every place in ``entries`` where the comparison restarts, oldest first."""
    out = []
    for prev, cur in zip(entries, entries[1:]):
        why = restart_reasons(prev, cur, parts)
        if why:
            out.append(Restart(cur, prev, why))
    return out


def latest_version(entries: list[Entry], parts: tuple[str, ...] = COMPARED_PARTS) -> list[Entry]:
    """The trailing entries comparable with the latest one (no restart between them)."""
    start = len(entries) - 1
    while start > 0 and not restart_reasons(entries[start - 1], entries[start], parts):
        start -= 1
    return entries[max(start, 0):]


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


def first_regression(entries: list[Entry], metric: str, tolerance: Tolerance,
                     parts: tuple[str, ...] = COMPARED_PARTS) -> Finding | None:
    """The first entry whose ``metric`` is worse than the reference beyond ``tolerance``.

    The reference is the oldest comparable entry: where the scenario, the robot, the limits,
    the bench or a library version changed (see :func:`restarts`), the comparison restarts at
    the first entry after the change, so only the latest comparable stretch is judged.
    """
    if not entries or tolerance.direction == "none" or tolerance.ignore:
        return None
    segment = latest_version(entries, parts)
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


def first_status_regression(entries: list[Entry],
                            parts: tuple[str, ...] = COMPARED_PARTS) -> tuple[Entry, Entry] | None:
    """(last passed, first not passed after it) in the latest comparable stretch, or None."""
    last_pass = None
    for e in latest_version(entries, parts):
        if e.status == "passed":
            last_pass = e
        elif last_pass is not None:
            return last_pass, e
    return None


@dataclass
class LatestChange:
    """How the latest result compares with the comparable result just before it."""

    previous: Entry
    latest: Entry
    status_worse: bool
    worse: list[tuple[str, float, float, Tolerance]]     # (metric, previous value, latest value, tolerance)

    @property
    def regressed(self) -> bool:
        return self.status_worse or bool(self.worse)


def latest_change(entries: list[Entry], tolerances: dict[str, Tolerance],
                  parts: tuple[str, ...] = COMPARED_PARTS) -> LatestChange | None:
    """The latest result against the previous comparable one (None when there is none).

    Worse: it passed before and does not now, or a metric of ``tolerances`` moved beyond its
    tolerance in its worse direction.
    """
    segment = latest_version(entries, parts)
    if len(segment) < 2:
        return None
    prev, last = segment[-2], segment[-1]
    worse = []
    for name, tol in tolerances.items():
        a, b = prev.metrics.get(name), last.metrics.get(name)
        if a is not None and b is not None and judge(a, b, tol) == "regressed":
            worse.append((name, a, b, tol))
    return LatestChange(prev, last, prev.status == "passed" and last.status != "passed", worse)


def record_results(path: str | Path, results: list[dict], *, source: str, cwd: str | Path = ".",
                   run_uid: str | None = None, git: dict | None = ..., timeout_s: float = 30.0) -> str:
    """Record a whole run at once and return its uid (each result in its own transaction)."""
    with open_run(path, source=source, cwd=cwd, run_uid=run_uid, git=git, timeout_s=timeout_s) as run:
        for r in results:
            run.record(r)
    return run.run_uid
