"""``bench history [SCENARIO] [--metric NAME] [--db PATH] [--fail-on-regression]``: the trend of a scenario.

Without SCENARIO: every scenario in the database with its number of runs and last status.
With it: one row per recorded run (time, commit, controller, status, metric values), where the
comparison restarts and why (the scenario, the robot model, the limits, the bench, a library or the seed
changed: results on either side are not compared), then, for each metric, the first run where it
got worse than the first comparable run beyond tolerance (the tolerances of ``bench compare``),
and the last run before it that was still within tolerance.

``--fail-on-regression`` makes it a gate for CI: exit 1 when the latest run (of SCENARIO, or of
every scenario and controller recorded) is worse than the comparable run just before it.
"""

from __future__ import annotations

import sys
from pathlib import Path

ORDER = 42
DEFAULT_DB = "bench-results/history.sqlite"

EXIT_CODES = ("Exit codes: 0 shown (with --fail-on-regression: no regression); 1 only with --fail-on-regression: "
              "the latest run is worse than the previous comparable run beyond tolerance, or passed before and "
              "does not now; 2 invalid input: no database at --db, a damaged or foreign file, an unknown "
              "scenario or controller, an unreadable --baseline.")


def register(sub) -> None:
    p = sub.add_parser("history", help="trend of a scenario over recorded runs; the first run that got worse",
                       description="Show what `bench run` and pytest sessions recorded. Runs are compared only "
                                   "with runs of the same scenario file, robot model files, limits, bench code "
                                   "and MuJoCo/NumPy versions, and the same seed; where one changed, the comparison "
                                   "restarts and "
                                   "the reason is printed. " + EXIT_CODES)
    p.add_argument("scenario", nargs="?", metavar="SCENARIO", help="scenario id (omit to list scenarios)")
    p.add_argument("--metric", action="append", default=[], metavar="NAME",
                   help="metric to show (repeatable; default: the metrics of the scenario's criteria)")
    p.add_argument("--db", default=DEFAULT_DB, metavar="PATH", help=f"history database (default {DEFAULT_DB})")
    p.add_argument("--controller", default=None, metavar="NAME",
                   help="only runs with this controller (default: the controller of the latest run)")
    p.add_argument("--last", type=int, default=None, metavar="N", help="only the last N runs")
    p.add_argument("--baseline", default=None, metavar="FILE",
                   help="take tolerance overrides from this baseline file")
    p.add_argument("--same-controller-code", action="store_true",
                   help="also restart the comparison where the controller's code changed (by default runs of "
                        "one controller name are compared across its code changes: finding the change that "
                        "made it worse is what the history is for)")
    p.add_argument("--fail-on-regression", action="store_true",
                   help="exit 1 when the latest run is worse than the previous comparable run beyond tolerance "
                        "(every scenario and controller recorded, or SCENARIO only)")
    p.set_defaults(func=run)


def _criteria_metrics(entries) -> list[str]:
    """The metrics that the latest run's criteria limit (``fell`` for no_fall), in criteria order."""
    from bench.report.baseline import criterion_directions

    criteria = entries[-1].criteria if entries else []
    names = ["fell"] if any(c.get("name") == "no_fall" for c in criteria) else []
    return names + list(criterion_directions(criteria))


def _cell(x) -> str:
    return "-" if x is None else f"{x:.4g}"


def _err(text: str) -> int:
    print(f"bench history: {text}", file=sys.stderr)
    return 2


def run(args) -> int:
    from bench.report.baseline import BaselineError, load_baseline
    from bench.report.history import COMPARED_PARTS, History, HistoryError

    db = Path(args.db)
    if not db.is_file():
        return _err(f"{db}: no history database here (`bench run --out DIR` writes DIR/history.sqlite; give --db PATH)")
    if args.last is not None and args.last < 1:
        return _err(f"--last must be at least 1, got {args.last}")
    overrides: list = []
    base = None
    if args.baseline:
        try:
            base = load_baseline(args.baseline)
        except BaselineError as exc:
            return _err(str(exc))
        overrides = [base.get("tolerances")]
        if args.scenario:
            overrides.append(base["scenarios"].get(args.scenario, {}).get("tolerances"))
    parts = COMPARED_PARTS + (("controller",) if args.same_controller_code else ())
    try:
        with History(db) as h:
            if not args.scenario:
                if args.fail_on_regression:
                    return _gate_all(h, db, args, parts, base)
                return _list(h, db)
            everything = h.trend(args.scenario)
    except HistoryError as exc:
        return _err(str(exc))
    if not everything:
        try:
            with History(db) as h:
                known = [s["scenario"] for s in h.scenarios()]
        except HistoryError as exc:
            return _err(str(exc))
        hint = f"; recorded: {', '.join(known[:12])}" + (" ..." if len(known) > 12 else "") if known else ""
        return _err(f"scenario {args.scenario!r} is not in {db}{hint}")
    controller = args.controller or everything[-1].controller
    entries = [e for e in everything if e.controller == controller]
    if not entries:
        return _err(f"no runs of {args.scenario!r} with controller {controller!r} in {db}")
    if args.last:
        entries = entries[-args.last:]
    for i, e in enumerate(entries, 1):
        e.index = i
    others = sorted({e.controller for e in everything} - {controller})
    print(f"{args.scenario} with controller {controller}: {len(entries)} run(s) in {db}"
          + (f" (also recorded with: {', '.join(others)}; pick one with --controller)" if others else ""))
    _report(entries, args, parts, overrides)
    if args.fail_on_regression:
        change = _latest_change(entries, args, parts, overrides)
        if change is not None and change.regressed:
            print(_regression_line(args.scenario, controller, change))
            return 1
        print(_no_regression_line(change))
    return 0


def _list(h, db: Path) -> int:
    from bench.cli.common import print_table

    rows = [[s["scenario"], str(s["results"]), ", ".join(s["controllers"]), s["last_status"],
             s["last_time"][:19].replace("T", " "),
             (s["last_commit"] or "-")[:10] + ("+dirty" if s["last_dirty"] else "")] for s in h.scenarios()]
    if not rows:
        print(f"{db}: no results recorded yet")
        return 0
    print_table(rows, ["scenario", "runs", "controllers", "last status", "last run (UTC)", "commit"])
    return 0


def _tolerances(entries, metrics, overrides) -> dict:
    from bench.report.baseline import criterion_directions, tolerance_for

    senses = criterion_directions(entries[-1].criteria)
    return {m: tolerance_for(m, senses, *overrides) for m in metrics}


def _report(entries, args, parts, overrides) -> None:
    from bench.cli.common import print_table
    from bench.report.history import first_regression, first_status_regression, latest_version, restart_reasons, \
        restarts

    metrics = args.metric or _criteria_metrics(entries)
    where = restarts(entries, parts)
    restart_at = {r.entry.index for r in where}
    rows = []
    for e in entries:
        rows.append([f"#{e.index}", e.time_label(), e.commit_label(), e.status + ("*" if e.index in restart_at else "")]
                    + [_cell(e.metrics.get(m)) for m in metrics])
    print_table(rows, ["run", "time (UTC)", "commit", "status"] + metrics)
    for r in where:
        print(f"* {r.describe()}")
    if "controller" not in parts:
        code = [cur.index for prev, cur in zip(entries, entries[1:]) if restart_reasons(prev, cur, ("controller",))
                and cur.fingerprint_parts and prev.fingerprint_parts]
        if code:
            print(f"controller code changed at {', '.join(f'#{i}' for i in code)} (compared across it; "
                  f"--same-controller-code restarts the comparison there instead)")

    segment = latest_version(entries, parts)
    status = first_status_regression(entries, parts)
    if status is not None:
        good, bad = status
        print(f"status: first not passed at {bad.describe()}: {bad.status}"
              + (f" ({bad.reason})" if bad.reason else "") + f"; last passed: {good.describe()}")
    judged = metrics if args.metric else sorted({m for e in entries for m in e.metrics})
    tols = _tolerances(entries, judged, overrides)
    findings = [f for f in (first_regression(entries, m, tols[m], parts) for m in judged) if f]
    # One block per run where something first got worse, one row per metric.
    for key in sorted({(f.first_worse.index, f.last_good.index) for f in findings}):
        group = [f for f in findings if (f.first_worse.index, f.last_good.index) == key]
        print(f"got worse beyond tolerance first at {group[0].first_worse.describe()}; "
              f"last within tolerance: {group[0].last_good.describe()}")
        rows = [[f"  {f.metric}", f"{f.reference.metrics[f.metric]:.4g} at #{f.reference.index}",
                 f"{f.first_worse.metrics[f.metric]:.4g}",
                 f"{f.tolerance.describe()}, {f.tolerance.direction} is better",
                 "still worse" if f.still_worse else "back within tolerance"] for f in group]
        print_table(rows, ["  metric", "reference", "then", "tolerance", "at the latest run"])
    if not findings and status is None:
        shown = "the metrics shown" if args.metric else "any metric"
        print(f"no run got worse than #{segment[0].index} beyond tolerance in {shown}")


def _latest_change(entries, args, parts, overrides):
    from bench.report.history import latest_change

    last_two = entries[-2:]
    judged = args.metric or sorted({m for e in last_two for m in e.metrics})
    return latest_change(entries, _tolerances(entries, judged, overrides), parts)


def _regression_line(scenario: str, controller: str, change) -> str:
    what = []
    if change.status_worse:
        what.append(f"status {change.previous.status} -> {change.latest.status}"
                    + (f" ({change.latest.reason})" if change.latest.reason else ""))
    for name, a, b, tol in change.worse:
        what.append(f"{name} {a:.4g} -> {b:.4g} (tolerance {tol.describe()}, {tol.direction} is better)")
    return (f"regression: {scenario} with {controller}: {change.latest.describe()} is worse than "
            f"{change.previous.describe()}: {'; '.join(what)}")


def _no_regression_line(change) -> str:
    if change is None:
        return "no regression: no earlier comparable run to compare the latest with"
    return f"no regression: {change.latest.describe()} is within tolerance of {change.previous.describe()}"


def _gate_all(h, db: Path, args, parts, base: dict | None) -> int:
    """``--fail-on-regression`` without SCENARIO: the latest run of every scenario and controller."""
    summaries = h.scenarios()
    if not summaries:
        print(f"{db}: no results recorded yet; no regression")
        return 0
    checked = regressed = uncompared = 0
    for s in summaries:
        everything = h.trend(s["scenario"])
        controllers = [args.controller] if args.controller else sorted({e.controller for e in everything},
                                                                        key=str)
        for controller in controllers:
            entries = [e for e in everything if e.controller == controller]
            if not entries:
                continue
            for i, e in enumerate(entries, 1):
                e.index = i
            checked += 1
            overrides = [] if base is None else [base.get("tolerances"),
                                                 base["scenarios"].get(s["scenario"], {}).get("tolerances")]
            change = _latest_change(entries, args, parts, overrides)
            if change is None:
                uncompared += 1
            elif change.regressed:
                regressed += 1
                print(_regression_line(s["scenario"], controller, change))
    if args.controller and not checked:
        return _err(f"no runs with controller {args.controller!r} in {db}")
    tail = f" ({uncompared} with no earlier comparable run)" if uncompared else ""
    if regressed:
        print(f"{regressed} of {checked} latest run(s) got worse than the previous comparable run{tail}")
        return 1
    print(f"no regression: {checked} latest run(s) within tolerance of the previous comparable run{tail}")
    return 0
