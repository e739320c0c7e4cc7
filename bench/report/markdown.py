"""``summary.md``: a run in Markdown, for a CI job summary or a pull-request comment.

Owns :func:`summary_markdown` and :func:`write_summary_markdown`. The page is
short on purpose: the counts, then every scenario that did not pass or that
regressed against a baseline, each with its deciding criterion (value, limit,
first violation) and links to its review video and plots when they exist, then
the trial scenarios. Passing scenarios are only counted, except with
``all_rows=True``. CI systems that show a Markdown job summary take the file as
it is (for example by appending it to the file their job-summary variable
names).
"""

from __future__ import annotations

import json
import os
from pathlib import Path

from bench.fileio import write_atomic

#: At most this many rows per table; the rest are counted in a last line.
MAX_ROWS = 50
_STATUS_MARK = {"passed": "pass", "failed": "FAIL", "error": "ERROR", "timeout": "TIMEOUT"}


def _cell(text) -> str:
    """A table cell: one line, pipes escaped."""
    return " ".join(str(text).split()).replace("|", "\\|") if text is not None else ""


def _num(x) -> str:
    if x is None:
        return "n/a"
    if isinstance(x, bool):
        return str(x).lower()
    return f"{x:.3g}" if isinstance(x, float) else str(x)


def deciding_text(result: dict) -> str:
    """The deciding criterion as one phrase: ``roll_error_max_deg 18.6 > 10 (first at 12.31 s)``."""
    from bench.report.record import RecordError, RunRecord

    try:
        rec = RunRecord.from_json(result)
    except RecordError:
        rec = None
    if rec is not None and rec.is_error:
        return rec.reason or rec.status
    if result.get("status") in ("error", "timeout"):
        return result.get("reason") or result.get("status", "")
    # the criterion scoring chose and recorded; older files: the same rule over their criteria
    c = rec.deciding.to_json() if rec is not None and rec.deciding is not None else None
    if not c:
        crits = result.get("criteria") or []
        failed = [x for x in crits if not x.get("passed")]
        if failed:
            c = min(failed, key=lambda x: (x.get("first_violation_s") is None, x.get("first_violation_s") or 0.0))
        else:
            c = crits[0] if crits else None
    if not c:
        return ""
    if c.get("name") == "no_fall":
        t = c.get("first_violation_s")
        return "no_fall" + (f" (fell at {t:.2f} s)" if t is not None and not c.get("passed") else "")
    op = "" if c.get("limit") is None else (" / " if c.get("passed") else " vs limit ")
    text = f"{c['name']} {_num(c.get('value'))}{op}{_num(c.get('limit')) if c.get('limit') is not None else ''}"
    if not c.get("passed") and c.get("first_violation_s") is not None:
        text += f" (first at {c['first_violation_s']:.2f} s)"
    return text


def _links(out_dir: Path, md_dir: Path, slug: str) -> str:
    """Links to a scenario's videos and plots, relative to the Markdown file."""
    folder = out_dir / slug
    links = []
    try:
        media = json.loads((folder / "media.json").read_text(encoding="utf-8"))
    except (OSError, ValueError):
        media = {}
    for v in media.get("videos", []) if isinstance(media, dict) else []:
        p = (folder / str(v.get("path", ""))).resolve()
        if p.is_file():
            links.append(f"[video]({Path(os.path.relpath(p, md_dir)).as_posix()})")
    plots = folder / "plots.png"
    if plots.is_file():
        links.append(f"[plots]({Path(os.path.relpath(plots, md_dir)).as_posix()})")
    return " ".join(links)


def summary_markdown(out_dir: str | Path, summary: dict, results: list[dict], *, comparison=None,
                     controller: str | None = None, md_dir: str | Path | None = None,
                     all_rows: bool = False) -> str:
    """The Markdown text for one run.

    ``summary``: the summary.json mapping; ``results``: the result.json mappings in the same order;
    ``comparison``: a :class:`bench.report.baseline.Comparison` of this run against a baseline, if any.
    """
    out_dir = Path(out_dir)
    md_dir = Path(md_dir) if md_dir is not None else out_dir
    slug_of = {e["scenario"]: str(Path(e["result"]).parent) for e in summary.get("results", [])}
    controllers = sorted({r.get("controller", "") for r in results if r.get("controller")})
    controller = controller or ", ".join(controllers)
    lines = [f"## Scenario run: {summary['passed']} of {summary['total']} passed"
             + (f" with `{controller}`" if controller else ""), ""]
    counts = [f"**{summary['passed']} passed**", f"**{summary['failed']} failed**"]
    if summary.get("errors"):
        counts.append(f"**{summary['errors']} errors or timeouts**")
    regressed_ids: list[str] = []
    if comparison is not None:
        regressed_ids = comparison.scenarios_with("regressed")
        counts.append(f"**{len(regressed_ids)} regressed** against the baseline"
                      + (f" ({len(comparison.new)} new, {len(comparison.missing)} missing)"
                         if comparison.new or comparison.missing else ""))
    lines += [", ".join(counts) + ".", ""]

    shown = [r for r in results if all_rows or r.get("status") != "passed" or r.get("scenario") in regressed_ids]
    if shown:
        lines += ["| scenario | status | deciding criterion | media |", "|---|---|---|---|"]
        for r in shown[:MAX_ROWS]:
            sid = r.get("scenario", "")
            status = _STATUS_MARK.get(r.get("status"), r.get("status"))
            if sid in regressed_ids:
                status += " (regressed)"
            lines.append(f"| `{_cell(sid)}` | {status} | {_cell(deciding_text(r))} | "
                         f"{_links(out_dir, md_dir, slug_of.get(sid, sid))} |")
        if len(shown) > MAX_ROWS:
            lines.append(f"\n... and {len(shown) - MAX_ROWS} more (see summary.json)")
        lines.append("")
    else:
        lines += ["Every scenario passed.", ""]

    if comparison is not None and comparison.regressions():
        lines += ["### Regressions against the baseline", "", "| scenario | metric | baseline | now | change |",
                  "|---|---|---|---|---|"]
        regs = comparison.regressions()
        for row in regs[:MAX_ROWS]:
            lines.append(f"| `{_cell(row.scenario)}` | {_cell(row.metric)} | {_cell(_num(row.baseline))} | "
                         f"{_cell(_num(row.current))} | {_cell(row.change or row.note)} |")
        if len(regs) > MAX_ROWS:
            lines.append(f"\n... and {len(regs) - MAX_ROWS} more")
        lines.append("")

    trials = summary.get("trials") or []
    if trials:
        lines += ["### Trial scenarios (pass rate, 95 % Wilson interval)", "",
                  "| scenario | passed | interval | required | verdict |", "|---|---|---|---|---|"]
        for t in trials:
            lo, hi = t["interval"]
            req = "all" if t.get("required") is None else f"{t['required']:g}"
            lines.append(f"| `{_cell(t['scenario'])}` | {t['passed']}/{t['trials']} | [{lo:.2f}, {hi:.2f}] | "
                         f"{req} | {_STATUS_MARK.get(t['verdict'], t['verdict'])} |")
        lines.append("")
    lines.append("Passing scenarios in simulation does not make a controller safe on hardware.")
    return "\n".join(lines) + "\n"


def write_summary_markdown(out_dir: str | Path, summary: dict, results: list[dict], **kw) -> Path:
    """Write ``summary.md`` beside ``summary.json``; return its path."""
    path = Path(out_dir) / "summary.md"
    write_atomic(path, summary_markdown(out_dir, summary, results, md_dir=Path(out_dir), **kw).encode())
    return path
