"""The metrics and criteria page: the criteria registry and `bench.scoring.metrics.METRIC_DOCS`."""

from __future__ import annotations

from bench.docgen import Page
from bench.docgen.md import code, docstring, num, rst_to_md, table

PAGE = Page(
    file="metrics-and-criteria.md",
    title="Metrics and criteria",
    sources="bench/scoring/metrics.py, bench/scoring/criteria.py and bench/scoring/verdict.py",
    for_whom="**For** anyone setting `criteria:` in a scenario or reading `metrics` in result.json; "
             "**at the end** you know every metric, every criterion a scenario may set, what it limits, "
             "and how the deciding criterion and margins are chosen.",
)


def _limits(c) -> str:
    if getattr(c, "limit_doc", None):   # a criterion whose limit is not one number says what is written
        return c.limit_doc
    if getattr(c, "boolean", False):
        return "`true` / `false`"
    lo, hi = getattr(c, "ge", None), getattr(c, "le", None)
    if lo is None and hi is None:
        return "a number"
    return f"[{num(lo) if lo is not None else '-inf'}, {num(hi) if hi is not None else 'inf'}]"


def body() -> str:
    from bench.scenario.criteria import all_criteria
    from bench.scoring import metrics, verdict

    crit_rows = []
    for name, c in sorted(all_criteria().items()):
        if not type(c).__module__.startswith("bench."):
            continue  # a plugin's criterion is documented by the plugin
        direction = {"max": "ceiling (value <= limit)", "min": "floor (value >= limit)"}.get(
            getattr(c, "direction", ""), "")
        if getattr(c, "scope", "") == "trials":
            direction += ", over a scenario's trials"
        crit_rows.append([code(name), code(getattr(c, "metric", "")) if getattr(c, "metric", "") else
                          code(c.reads) if getattr(c, "reads", None) else
                          ("`fell`" if name == "no_fall" else "(trials)"),
                          (getattr(c, "unit", "") or "").strip(), _limits(c), direction, c.description])
    met_rows = [[code(k), v] for k, v in sorted(metrics.METRIC_DOCS.items())]
    return "\n".join([
        "## Criteria",
        "",
        "A scenario's `criteria:` maps a criterion name to its limit. `no_fall` is implied unless the "
        "scenario says `no_fall: false`; in a file that extends another, `name: null` drops an inherited "
        "criterion. `bench list criteria` prints the same list, with any a plugin registers in the entry "
        "point group `bench.criteria`.",
        "",
        table(["criterion", "metric", "unit", "limit written", "kind", "meaning"], crit_rows),
        "## Metrics",
        "",
        rst_to_md(docstring(metrics).split("\n\n", 1)[1]),
        "",
        f"Every metric is computed for every episode and written to `metrics` in result.json. "
        f"Velocity tracking leaves out {num(metrics.COMMAND_SETTLE_S)} s after each command change. "
        f"Metrics named `controller.<name>` come from a controller's optional `stats()`. Metrics that hold "
        f"wall-clock time (`controller_ms_*`, `controller.*_ms_*`) differ run to run and are left out of "
        f"baseline comparisons unless asked.",
        "",
        table(["metric", "meaning"], met_rows),
        "## The deciding criterion and margins",
        "",
        rst_to_md(docstring(verdict).split("\n\n", 1)[1]),
    ])
