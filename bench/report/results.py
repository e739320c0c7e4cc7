"""Result files: ``result.json``, ``trace.npz`` and ``summary.json`` under the results folder.

Every file is written atomically (a temporary file ``.<name>.<random>.tmp`` in
the same folder, flushed and fsynced, then renamed over the target), so a run
killed at any moment leaves only whole files, plus at most one temporary file
per file being written, which ``bench run --resume`` removes. ``result.json`` is
written last and marks a scenario as complete; ``complete_result`` tells whether
a folder holds a complete, valid result (what ``--resume`` skips).
"""

from __future__ import annotations

import hashlib
import json
import math
import os
from pathlib import Path

from bench.fileio import remove_temp_files, write_atomic  # noqa: F401 - re-exported
from bench.report.record import REQUIRED_KEYS, RecordError, RunRecord, as_record

#: Keys every result.json has; a file without one of them is not a complete result.
RESULT_KEYS = REQUIRED_KEYS
#: Trace arrays that depend on the wall clock, left out of the trace digest.
UNTIMED_EXCLUDE = ("controller_ms",)
#: Trace keys of the signals a controller logs (``bench.sim.signals``); left out of ``trace_sha256``.
SIGNAL_PREFIX = "signal_"


def _clean(x):
    """JSON has no NaN or infinity: write them as null."""
    if isinstance(x, float) and not math.isfinite(x):
        return None
    if isinstance(x, dict):
        return {k: _clean(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [_clean(v) for v in x]
    return x


def write_json(path: Path, obj) -> None:
    write_atomic(path, (json.dumps(_clean(obj), indent=2, allow_nan=False) + "\n").encode())


class ResultFolderError(ValueError):
    """A scenario's results folder cannot be written safely; the message says which and why."""


def scenario_dir(out_dir: Path, slug: str) -> Path:
    """``<out_dir>/<slug>``; raises :class:`ResultFolderError` when writing there would leave ``out_dir``.

    The slug is restricted to ``[A-Za-z0-9._-]`` by the scenario layer; anything else is refused, and so
    is a results folder that is a symbolic link (this run's files would land wherever it points).
    """
    if not slug or slug in (".", "..") or "/" in slug or "\\" in slug or "\0" in slug:
        raise ResultFolderError(f"scenario id {slug!r} would write outside {out_dir}")
    d = Path(out_dir) / slug
    if d.is_symlink():
        try:
            target = os.readlink(d)
        except OSError:
            target = "?"
        raise ResultFolderError(f"results folder {d} is a symbolic link (to {target}); remove it or choose "
                                f"another results folder")
    if d.exists() and not d.is_dir():
        raise ResultFolderError(f"results folder {d} exists and is not a folder")
    return d


def write_outcome(out_dir: Path, slug: str, outcome) -> Path:
    """Write one scenario's files; return the path of its result.json."""
    d = scenario_dir(out_dir, slug)
    d.mkdir(parents=True, exist_ok=True)
    # An earlier run's result.json goes first: until the new one is in place the folder is incomplete,
    # so a result.json never sits beside a trace.npz of another run.
    for stale in ("result.json",) + (() if outcome.trace is not None else ("trace.npz",)):
        try:
            os.unlink(d / stale)
        except FileNotFoundError:
            pass
    if outcome.trace is not None:
        write_atomic(d / "trace.npz", outcome.trace.to_npz_bytes())
    # result.json last: its presence marks the scenario as complete.
    write_json(d / "result.json", outcome.result)
    return d / "result.json"


#: What each key of summary.json means (documented by `python -m bench.docgen`; keys are only added).
SUMMARY_DOCS = {
    "total": "episodes in this run",
    "passed": "episodes that passed",
    "failed": "episodes that failed their criteria",
    "errors": "episodes that ended in `error` or `timeout`",
    "results": "one entry per episode in run order: `scenario`, `status`, `reason`, `result` (path of its "
               "result.json relative to the results folder)",
    "trials": "present when the run had trial scenarios: one entry per trial scenario (keys below)",
}


def write_summary(out_dir: Path, entries: list[tuple[str, dict]], trials: list[dict] | None = None) -> dict:
    """``entries``: (slug, result) pairs in run order; ``trials``: one entry per trial scenario, if any."""
    results = []
    for slug, r in entries:
        # a plugin entry holds only scenario, status and reason; a result.json mapping is read as a record
        rec = as_record(r) if "criteria" in r else None
        results.append({"scenario": rec.scenario if rec else r["scenario"],
                        "status": rec.status if rec else r["status"],
                        "reason": rec.reason if rec else r["reason"], "result": f"{slug}/result.json"})
    summary = {
        "total": len(results),
        "passed": sum(r["status"] == "passed" for r in results),
        "failed": sum(r["status"] == "failed" for r in results),
        "errors": sum(r["status"] in ("error", "timeout") for r in results),
        "results": results,
    }
    if trials:
        summary["trials"] = trials
    write_json(Path(out_dir) / "summary.json", summary)
    return summary


def trace_digest(arrays) -> str:
    """SHA-256 of a trace's arrays (names, dtypes, shapes and bytes, in name order), without the timing ones
    and without the controller's own signals (``signal_*``: what it reports about itself, not what the bench
    measured; a controller that starts logging one keeps its digests).

    Two episodes with the same scenario, seed and controller give the same digest (the bench is
    deterministic); the npz file's own bytes differ (zip entries carry a timestamp).
    """
    import numpy as np  # local: keeps this module light for readers of JSON only

    h = hashlib.sha256()
    for key in sorted(arrays):
        if key in UNTIMED_EXCLUDE or key.startswith(SIGNAL_PREFIX):   # signals: the controller's own account
            continue
        a = np.ascontiguousarray(arrays[key])
        h.update(f"{key}|{a.dtype.str}|{a.shape}|".encode())
        h.update(a.tobytes())
    return h.hexdigest()


def complete_result(out_dir: Path, slug: str, *, scenario_id: str | None = None, seed: int | None = None,
                    controller: str | None = None, content_hash: str | None = None) -> tuple[dict | None, str]:
    """``(result, "")`` when ``<out_dir>/<slug>`` holds a complete, valid result, else ``(None, why)``.

    Complete and valid: ``result.json`` parses, is a mapping with every contract key, belongs to this
    scenario id, seed, controller and scenario content (when given), and its ``trace.npz`` loads with
    the contract keys and, when the result records one, the same trace digest. An ``error`` or
    ``timeout`` result may have no trace (the world could not be built, the worker died).
    """
    import numpy as np

    from bench.sim.trace import CONTRACT_KEYS

    d = Path(out_dir) / slug
    try:
        result = json.loads((d / "result.json").read_text(encoding="utf-8"))
    except FileNotFoundError:
        return None, "no result.json"
    except (OSError, UnicodeDecodeError, ValueError) as exc:
        return None, f"result.json unreadable: {exc}"
    if not isinstance(result, dict):
        return None, "result.json is not a mapping"
    missing = [k for k in RESULT_KEYS if k not in result]
    if missing:
        return None, f"result.json lacks {', '.join(missing)}"
    try:
        rec = RunRecord.from_json(result)
    except RecordError as exc:
        return None, f"result.json: {exc}"
    for key, want in (("scenario", scenario_id), ("seed", seed), ("controller", controller),
                      ("content_hash", content_hash)):
        if want is not None and getattr(rec, key) != want:
            return None, f"result.json is for another {key} ({getattr(rec, key)!r}, this run {want!r})"
    trace = d / "trace.npz"
    if not trace.exists():
        if rec.is_error and not rec.trace_sha256:
            return result, ""
        return None, "no trace.npz"
    try:
        with np.load(trace, allow_pickle=False) as z:
            names = set(z.files)
            lacking = [k for k in CONTRACT_KEYS if k not in names]
            if lacking:
                return None, f"trace.npz lacks {', '.join(lacking)}"
            want_digest = rec.trace_sha256
            if want_digest and trace_digest({k: z[k] for k in z.files if not k.startswith("meta_")}) != want_digest:
                return None, "trace.npz does not match result.json (digest differs)"
    except Exception as exc:  # noqa: BLE001 - a torn or foreign file of any kind is just "not complete"
        return None, f"trace.npz unreadable: {type(exc).__name__}: {exc}"
    return result, ""
