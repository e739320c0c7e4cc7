"""The result files page: result.json (`RunRecord`), summary.json, trace.npz and baseline files."""

from __future__ import annotations

import dataclasses

from bench.docgen import Page
from bench.docgen.md import code, docstring, rst_to_md, table

PAGE = Page(
    file="result-files.md",
    title="Result files",
    sources="bench/report/record.py, bench/report/results.py, bench/execute/trials.py, bench/sim/trace.py "
            "and bench/report/baseline.py",
    for_whom="**For** anyone reading what a run wrote from another tool; **at the end** you know every key "
             "of result.json, summary.json, trace.npz and a baseline file. Keys are only ever added, never "
             "renamed or dropped.",
)


def _type_name(tp) -> str:
    """The JSON type of a record field (from its annotation)."""
    text = tp if isinstance(tp, str) else getattr(tp, "__name__", str(tp))
    parts = []
    for alt in (a.strip() for a in text.split(" | ")):
        if alt == "None":
            parts.append("null")
        elif alt.startswith(("tuple", "list")):
            parts.append("list")
        elif alt in ("str",):
            parts.append("string")
        elif alt == "int":
            parts.append("integer")
        elif alt == "float":
            parts.append("number")
        elif alt == "bool":
            parts.append("true/false")
        else:
            parts.append("object")
    return " or ".join(dict.fromkeys(parts))


def body() -> str:
    from bench.execute.trials import TRIAL_ENTRY_DOCS
    from bench.report import baseline, record, results
    from bench.sim import trace

    rec_rows = []
    for f in dataclasses.fields(record.RunRecord):
        if f.name == "extra":
            continue
        required = "always" if f.name in record.REQUIRED_KEYS else (
            "when it applies" if f.name in record._OPTIONAL else "always (added later: may be absent in old files)")
        rec_rows.append([code(f.name), _type_name(f.type), required, record.KEY_DOCS.get(f.name, "")])
    keys = trace.CONTRACT_KEYS + trace.EXTRA_KEYS + trace.OPTIONAL_KEYS
    keys += tuple(k for k in trace.KEY_DOCS if k not in keys)   # key patterns such as signal_<name>
    trace_rows = [[code(k), "documented" if k in trace.CONTRACT_KEYS else
                   "extra, when used" if k in trace.OPTIONAL_KEYS else "extra", trace.KEY_DOCS.get(k, "")]
                  for k in keys]
    tol_rows = [[code(kind), t.direction, t.abs, t.rel] for kind, t in baseline.KINDS.items()]
    return "\n".join([
        "```text",
        "<results folder>/",
        "  summary.json            the run: counts and one entry per episode",
        "  summary.md              a short Markdown summary of what did not pass, and why",
        "  history.sqlite          every episode appended as it finishes",
        "  <scenario id>/",
        "    result.json           one episode's record",
        "    trace.npz             one row per control tick",
        "    plots.png             time series with limits and events",
        "    media.json            videos made for this scenario (when any were)",
        "```",
        "",
        "## result.json",
        "",
        rst_to_md(docstring(record)),
        "",
        f"`status` is one of {', '.join(code(s) for s in record.STATUSES)}.",
        "",
        table(["key", "type", "present", "meaning"], rec_rows),
        "Keys this bench does not know (a newer bench's, a plugin's) are kept when a file is read and "
        "written back.",
        "",
        "## summary.json",
        "",
        table(["key", "meaning"], [[code(k), v] for k, v in results.SUMMARY_DOCS.items()]),
        "One `trials` entry:",
        "",
        table(["key", "meaning"], [[code(k), v] for k, v in TRIAL_ENTRY_DOCS.items()]),
        "## trace.npz",
        "",
        rst_to_md(docstring(trace).split("\n\n")[0]),
        " The file is a NumPy `.npz`; scalars the scoring needs are stored as `meta_<name>` keys.",
        "",
        table(["key", "kind", "shape and meaning"], trace_rows),
        "## Baseline files",
        "",
        rst_to_md(docstring(baseline)),
        "",
        "Default tolerances by kind of metric (`abs + rel * |baseline|`; common practice, no source):",
        "",
        table(["kind", "better", "abs", "rel"], tol_rows),
        f"Accepted tolerance keys: {', '.join(code(k) for k in baseline.TOLERANCE_KEYS)}; directions: "
        f"{', '.join(code(d) for d in baseline.DIRECTIONS)}.",
    ])
