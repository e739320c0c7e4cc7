"""``bench history [SCENARIO] [--metric NAME] [--db PATH]``: the trend of a scenario over recorded runs.

Without SCENARIO: every scenario in the database with its number of runs and last status.
With it: one row per recorded run (time, commit, controller, status, metric values), then, for each
metric, the first run where it got worse than the first run shown beyond tolerance (the tolerances
of ``bench compare``), and the last run before it that was still within tolerance.
"""

from __future__ import annotations

import sys
from pathlib import Path

ORDER = 42
DEFAULT_DB = "bench-results/history.sqlite"


def register(sub) -> None:
    p = sub.add_parser("history", help="trend of a scenario over recorded runs; the first run that got worse",
                       description="Show what `bench run` and pytest sessions recorded. Exit 0, or 2 when the "
                                   "database or the scenario is not found.")
    p.add_argument("scenario", nargs="?", metavar="SCENARIO", help="scenario id (omit to list scenarios)")
    p.add_argument("--metric", action="append", default=[], metavar="NAME",
                   help="metric to show (repeatable; default: the metrics of the scenario's criteria)")
    p.add_argument("--db", default=DEFAULT_DB, metavar="PATH", help=f"history database (default {DEFAULT_DB})")
    p.add_argument("--controller", default=None, metavar="NAME",
                   help="only runs with this controller (default: the controller of the latest run)")
    p.add_argument("--last", type=int, default=None, metavar="N", help="only the last N runs")
    p.add_argument("--baseline", default=None, metavar="FILE",
                   help="take tolerance overrides from this baseline file")
    p.set_defaults(func=run)


def _criteria_metrics(entries) -> list[str]:
    """The metrics that the latest run's criteria limit (``fell`` for no_fall), in criteria order."""
    from bench.report.baseline import criterion_directions

    criteria = entries[-1].criteria if entries else []
    names = ["fell"] if any(c.get("name") == "no_fall" for c in criteria) else []
    return names + list(criterion_directions(criteria))


def _cell(x) -> str:
    return "-" if x is None else f"{x:.4g}"


def run(args) -> int:
    from bench.cli.common import print_table
    from bench.report.baseline import BaselineError, criterion_directions, load_baseline, tolerance_for
    from bench.report.history import History, first_regression, first_status_regression

    db = Path(args.db)
    if not db.is_file():
        print(f"bench history: {db}: no history database here (`bench run --out DIR` writes DIR/history.sqlite; "
              f"give --db PATH)", file=sys.stderr)
        return 2
    overrides: list = []
    if args.baseline:
        try:
            base = load_baseline(args.baseline)
        except BaselineError as exc:
            print(f"bench history: {exc}", file=sys.stderr)
            return 2
        overrides = [base.get("tolerances")]
        if args.scenario:
            overrides.append(base["scenarios"].get(args.scenario, {}).get("tolerances"))
    with History(db) as h:
        if not args.scenario:
            rows = [[s["scenario"], str(s["results"]), ", ".join(s["controllers"]), s["last_status"],
                     s["last_time"][:19].replace("T", " "),
                     (s["last_commit"] or "-")[:10] + ("+dirty" if s["last_dirty"] else "")] for s in h.scenarios()]
            if not rows:
                print(f"{db}: no results recorded yet")
                return 0
            print_table(rows, ["scenario", "runs", "controllers", "last status", "last run (UTC)", "commit"])
            return 0
        everything = h.trend(args.scenario)
        if not everything:
            known = [s["scenario"] for s in h.scenarios()]
            hint = f"; recorded: {', '.join(known[:12])}" + (" ..." if len(known) > 12 else "") if known else ""
            print(f"bench history: scenario {args.scenario!r} is not in {db}{hint}", file=sys.stderr)
            return 2
        controller = args.controller or everything[-1].controller
        entries = [e for e in everything if e.controller == controller]
        if not entries:
            print(f"bench history: no runs of {args.scenario!r} with controller {controller!r} in {db}",
                  file=sys.stderr)
            return 2
    if args.last:
        entries = entries[-args.last:]
    for i, e in enumerate(entries, 1):
        e.index = i
    metrics = args.metric or _criteria_metrics(entries)
    others = sorted({e.controller for e in everything} - {controller})
    print(f"{args.scenario} with controller {controller}: {len(entries)} run(s) in {db}"
          + (f" (also recorded with: {', '.join(others)}; pick one with --controller)" if others else ""))
    rows = []
    for j, e in enumerate(entries):
        changed = "*" if j and e.content_hash != entries[j - 1].content_hash else ""
        rows.append([f"#{e.index}", e.time_label(), e.commit_label(), e.status + changed]
                    + [_cell(e.metrics.get(m)) for m in metrics])
    print_table(rows, ["run", "time (UTC)", "commit", "status"] + metrics)
    if any("*" in r[3] for r in rows):
        print("* the scenario file changed at this run; comparisons restart there")

    status = first_status_regression(entries)
    if status is not None:
        good, bad = status
        print(f"status: first not passed at {bad.describe()}: {bad.status}"
              + (f" ({bad.reason})" if bad.reason else "") + f"; last passed: {good.describe()}")
    judged = metrics if args.metric else sorted({m for e in entries for m in e.metrics})
    senses = criterion_directions(entries[-1].criteria)
    findings = [f for f in (first_regression(entries, m, tolerance_for(m, senses, *overrides)) for m in judged) if f]
    found = len(findings)
    # One block per run where something first got worse, one row per metric.
    for key in sorted({(f.first_worse.index, f.last_good.index) for f in findings}):
        group = [f for f in findings if (f.first_worse.index, f.last_good.index) == key]
        print(f"got worse beyond tolerance first at {group[0].first_worse.describe()}; "
              f"last within tolerance: {group[0].last_good.describe()}")
        rows = [[f"  {f.metric}", f"{f.reference.metrics[f.metric]:.4g} at #{f.reference.index}",
                 f"{f.first_worse.metrics[f.metric]:.4g}", f"{f.tolerance.describe()}, {f.tolerance.direction} is better",
                 "still worse" if f.still_worse else "back within tolerance"] for f in group]
        print_table(rows, ["  metric", "reference", "then", "tolerance", "at the latest run"])
    if not found and status is None:
        shown = "the metrics shown" if args.metric else "any metric"
        print(f"no run got worse than #{entries[0].index} beyond tolerance in {shown}")
    return 0
