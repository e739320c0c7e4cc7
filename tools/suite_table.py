"""Print the bundled suite's results table (Markdown) from two results folders.

    python tools/suite_table.py RESULTS_A RESULTS_B [--labels force-qp-l1,force-qp]

Each folder is what ``bench run scenarios/ --out DIR`` wrote. One row per
episode id (trial episodes are folded into one row per trial scenario, read
from ``summary.json``'s ``trials``): a pass shows the worst trunk height error
and pitch error after ``score_from``; a fall, when it fell; any other failure,
the deciding criterion (the earliest violation). The first lines are each run's
summary counts. Used for docs/explanation/reference-stacks.md.
"""

from __future__ import annotations

import argparse
import json
from pathlib import Path


def _results(folder: Path) -> tuple[dict[str, dict], dict, dict[str, dict]]:
    summary = json.loads((folder / "summary.json").read_text())
    by_id: dict[str, dict] = {}
    for entry in summary.get("results", []):
        path = folder / entry["result"] if entry.get("result") else None
        if path is not None and path.is_file():
            r = json.loads(path.read_text())
            by_id[r["scenario"]] = r
    if not by_id:   # older summaries: read every result.json under the folder
        for path in sorted(folder.glob("*/result.json")):
            r = json.loads(path.read_text())
            by_id[r["scenario"]] = r
    trials = {t["scenario"]: t for t in summary.get("trials", [])}
    return by_id, summary, trials


def _fmt(v: float) -> str:
    return f"{v:.3g}"


def cell(r: dict | None) -> str:
    if r is None:
        return "not run"
    m = r.get("metrics", {})
    if r.get("passed"):
        h = m.get("height_error_max")
        p = m.get("pitch_error_deg_max")
        return f"pass ({100 * h:.1f} cm / {p:.1f}°)" if h is not None and p is not None else "pass"
    if r.get("episode_status") == "fell" or r.get("status") == "fell":
        return f"**fell** at {r.get('sim_time_s', 0.0):.1f} s"
    if r.get("status") in ("error", "timeout"):
        return f"**{r['status']}**: {r.get('reason', '')}"
    d = r.get("deciding") or {}
    if d.get("name") and d.get("value") is not None and d.get("limit") is not None:
        op = ">" if d["value"] > d["limit"] else "<"
        return f"**fail** {d['name']} {_fmt(d['value'])} {op} {_fmt(d['limit'])}"
    return f"**fail** {r.get('reason', '')}"


def trial_cell(t: dict | None) -> str:
    if t is None:
        return "not run"
    lo, hi = t["interval"]
    word = "pass" if t["verdict"] == "passed" else "**fail**"
    return f"{word}: {t['passed']}/{t['trials']}, 95 % interval [{lo:.2f}, {hi:.2f}]"


def table(folders: list[Path], labels: list[str]) -> str:
    runs = [_results(f) for f in folders]
    trial_ids = set().union(*(set(t) for _, _, t in runs))
    rows: dict[str, list[str]] = {}
    for i, (by_id, _, trials) in enumerate(runs):
        for sid, r in by_id.items():
            base = sid.split("[", 1)[0]
            if base in trial_ids and "[trial" in sid:
                continue
            rows.setdefault(sid, ["not run"] * len(runs))[i] = cell(r)
        for sid, t in trials.items():
            rows.setdefault(f"{sid} ({t['trials']} trials)", ["not run"] * len(runs))[i] = trial_cell(t)
    sources = {}
    for by_id, _, _ in runs:
        for sid, r in by_id.items():
            sources.setdefault(sid.split("[", 1)[0], r.get("source", ""))
    out = []
    for label, (_, s, _) in zip(labels, runs):
        out.append(f"- `{label}`: {s.get('passed', 0)} passed, {s.get('failed', 0)} failed, "
                   f"{s.get('errors', 0)} errors (episodes)")
    out += ["", "| folder | scenario | " + " | ".join(labels) + " |", "|---|---|" + "---|" * len(labels)]

    def folder_of(sid: str) -> str:
        src = sources.get(sid.split("[", 1)[0].split(" (", 1)[0], "")
        parts = Path(src).parts
        return parts[-2] if len(parts) >= 2 else ""

    for sid in sorted(rows, key=lambda s: (folder_of(s), s)):
        out.append(f"| {folder_of(sid)} | `{sid}` | " + " | ".join(rows[sid]) + " |")
    return "\n".join(out)


def main() -> None:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("folders", nargs="+", type=Path)
    p.add_argument("--labels", default=None, help="comma-separated column names (default: the controllers)")
    a = p.parse_args()
    labels = a.labels.split(",") if a.labels else []
    for f in a.folders[len(labels):]:
        by_id, _, _ = _results(f)
        labels.append(next(iter(by_id.values()))["controller"] if by_id else f.name)
    print(table(a.folders, labels))


if __name__ == "__main__":
    main()
