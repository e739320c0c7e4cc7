"""``bench baseline save RESULTS_DIR -o baseline.json``: freeze a results folder as a baseline."""

from __future__ import annotations

from pathlib import Path

ORDER = 40


def register(sub) -> None:
    p = sub.add_parser("baseline", help="save a results folder as a baseline for `bench compare`",
                       description="Baselines: the metrics of a results folder, kept for later comparison.")
    actions = p.add_subparsers(dest="action", metavar="ACTION")
    s = actions.add_parser("save", help="write baseline.json from a results folder",
                           description="Write the status and metrics of every scenario in RESULTS_DIR to a baseline "
                                       "file. Re-saving over an existing baseline keeps its tolerance overrides.")
    s.add_argument("results", metavar="RESULTS_DIR", help="the --out folder of a `bench run` (or --bench-out of pytest)")
    s.add_argument("-o", "--output", default="baseline.json", metavar="FILE", help="baseline file (default baseline.json)")
    s.set_defaults(func=save)
    p.set_defaults(func=lambda args: (p.print_help(), 2)[1])


def save(args) -> int:
    import sys

    from bench.report.baseline import BaselineError, load_baseline, make_baseline, read_results, save_baseline
    from bench.report.history import git_state

    out = Path(args.output)
    try:
        results = read_results(args.results)
        keep = load_baseline(out) if out.is_file() else None
    except BaselineError as exc:
        print(f"bench baseline save: {exc}", file=sys.stderr)
        return 2
    baseline = make_baseline(results, git=git_state("."), keep=keep)
    save_baseline(out, baseline)
    from bench.report.record import as_record

    records = [as_record(r) for r in results]     # read_results has checked each as a run record
    controllers = sorted({r.controller for r in records})
    statuses: dict[str, int] = {}
    for r in records:
        statuses[r.status] = statuses.get(r.status, 0) + 1
    kept = ""
    if keep is not None:
        n = len(baseline["tolerances"]) + sum(bool(e.get("tolerances")) for e in baseline["scenarios"].values())
        kept = f"; kept {n} tolerance override(s) from the old file"
    print(f"baseline of {len(results)} scenario(s) ({', '.join(f'{n} {s}' for s, n in sorted(statuses.items()))}; "
          f"controller {', '.join(controllers)}) written to {out}{kept}")
    return 0
