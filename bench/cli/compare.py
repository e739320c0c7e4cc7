"""``bench compare RESULTS_DIR baseline.json``: what regressed, improved, is new or missing; exit 1 on a regression."""

from __future__ import annotations

import sys

ORDER = 41


def register(sub) -> None:
    p = sub.add_parser("compare", help="compare a results folder with a baseline (exit 1 on a regression)",
                       description="Compare every scenario's status and metrics in RESULTS_DIR with BASELINE. "
                                   "A metric regressed when it got worse by more than abs + rel * |baseline| "
                                   "(defaults per metric kind, overrides in the baseline's 'tolerances'). "
                                   "Exit 0 no regression, 1 a regression, 2 invalid input.")
    p.add_argument("results", metavar="RESULTS_DIR", help="the --out folder of a `bench run`")
    p.add_argument("baseline", metavar="BASELINE", help="a file written by `bench baseline save`")
    p.add_argument("--all", action="store_true", help="also list the metrics that stayed the same")
    p.add_argument("--include-timing", action="store_true",
                   help="also compare wall-clock metrics (controller compute time); left out by default because "
                        "they depend on the machine and its load")
    p.add_argument("--strict", action="store_true",
                   help="also exit 1 when a baseline scenario is missing from the results")
    p.set_defaults(func=run)


def run(args) -> int:
    from bench.cli.common import print_table
    from bench.report.baseline import TABLE_HEADER, BaselineError, compare, load_baseline, read_results, table_rows

    try:
        baseline = load_baseline(args.baseline)
        results = read_results(args.results)
    except BaselineError as exc:
        print(f"bench compare: {exc}", file=sys.stderr)
        return 2
    cmp = compare(baseline, results, include_timing=args.include_timing)
    b_ctrl = sorted({str(e.get("controller")) for e in baseline["scenarios"].values()})
    r_ctrl = sorted({str(r.get("controller")) for r in results})
    if b_ctrl != r_ctrl:
        print(f"note: baseline controller {', '.join(b_ctrl)}; results controller {', '.join(r_ctrl)}")
    rows = table_rows(cmp.rows, include_same=args.all)
    if rows:
        print_table(rows, TABLE_HEADER)
    regressed = cmp.scenarios_with("regressed")
    improved = sorted(set(cmp.scenarios_with("improved")) - set(regressed))
    n_metrics = len(cmp.regressions())
    print(f"{len(results)} scenario(s) against {args.baseline}: {len(regressed)} regressed ({n_metrics} row(s)), "
          f"{len(improved)} improved, {len(cmp.new)} new, {len(cmp.missing)} missing")
    if regressed:
        return 1
    if args.strict and cmp.missing:
        return 1
    return 0
