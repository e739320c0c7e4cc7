"""Result files: ``result.json``, ``trace.npz`` and ``summary.json`` under the results folder.

Every file is written atomically (a temporary file in the same folder, flushed,
then renamed), so a run killed at any moment leaves only whole files.
"""

from __future__ import annotations

import json
import math
import os
import tempfile
from pathlib import Path


def _clean(x):
    """JSON has no NaN or infinity: write them as null."""
    if isinstance(x, float) and not math.isfinite(x):
        return None
    if isinstance(x, dict):
        return {k: _clean(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [_clean(v) for v in x]
    return x


def write_atomic(path: Path, data: bytes) -> None:
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp")
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        raise


def write_json(path: Path, obj) -> None:
    write_atomic(path, (json.dumps(_clean(obj), indent=2, allow_nan=False) + "\n").encode())


def scenario_dir(out_dir: Path, slug: str) -> Path:
    d = (Path(out_dir) / slug)
    # The slug is restricted to [A-Za-z0-9._-] by the scenario layer; refuse anything that escapes.
    if d.resolve().parent != Path(out_dir).resolve():
        raise ValueError(f"scenario id {slug!r} would write outside {out_dir}")
    return d


def write_outcome(out_dir: Path, slug: str, outcome) -> Path:
    """Write one scenario's files; return the path of its result.json."""
    d = scenario_dir(out_dir, slug)
    d.mkdir(parents=True, exist_ok=True)
    if outcome.trace is not None:
        write_atomic(d / "trace.npz", outcome.trace.to_npz_bytes())
    # result.json last: its presence marks the scenario as complete.
    write_json(d / "result.json", outcome.result)
    return d / "result.json"


def write_summary(out_dir: Path, entries: list[tuple[str, dict]]) -> dict:
    """``entries``: (slug, result) pairs in run order."""
    results = [{"scenario": r["scenario"], "status": r["status"], "reason": r["reason"],
                "result": f"{slug}/result.json"} for slug, r in entries]
    summary = {
        "total": len(results),
        "passed": sum(r["status"] == "passed" for r in results),
        "failed": sum(r["status"] == "failed" for r in results),
        "errors": sum(r["status"] in ("error", "timeout") for r in results),
        "results": results,
    }
    write_json(Path(out_dir) / "summary.json", summary)
    return summary
