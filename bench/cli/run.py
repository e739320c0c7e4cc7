"""``bench run PATH...``: run every scenario found, write results, print a table."""

from __future__ import annotations

import sys
from pathlib import Path

from bench.cli.common import load_or_report, print_table

ORDER = 10
DEFAULT_CONTROLLER = "force-qp-l1"


def register(sub) -> None:
    p = sub.add_parser("run", help="run scenarios and score them",
                       description="Run every scenario found (a file, or a folder searched recursively for *.yaml). "
                                   "Exit 0 when all passed, 1 when any failed or errored, 2 on invalid input.")
    p.add_argument("paths", nargs="+", metavar="PATH", help="scenario file or folder")
    p.add_argument("--controller", default=DEFAULT_CONTROLLER, metavar="NAME",
                   help=f"registered name, entry point or package.module:attribute (default {DEFAULT_CONTROLLER})")
    p.add_argument("--out", default="bench-results", metavar="DIR", help="results folder (default bench-results/)")
    p.add_argument("--seed", type=int, default=None, metavar="N", help="override every scenario's seed")
    p.add_argument("--root", action="append", default=[], metavar="DIR",
                   help="extra folder that scenarios may reference files in (repeatable)")
    p.add_argument("--tick-timeout", type=float, default=2.0, metavar="S",
                   help="wall-clock limit for one controller call, s (default 2)")
    p.add_argument("--episode-timeout", type=float, default=600.0, metavar="S",
                   help="wall-clock limit for one episode, s (default 600)")
    p.set_defaults(func=run)


def deciding_text(result: dict) -> str:
    crits = result.get("criteria") or []
    failed = [c for c in crits if not c["passed"]]
    c = failed[0] if failed else (next((c for c in crits if c["name"] != "no_fall"), None) or (crits[0] if crits else None))
    if result["status"] in ("error", "timeout"):
        return (result.get("reason") or "")[:70]
    if c is None:
        return ""
    if c["name"] == "no_fall":
        return "no_fall" + ("" if c["passed"] else f" (fell at {c['first_violation_s']:.2f} s)")
    val = "n/a" if c["value"] is None else f"{c['value']:.3g}"
    lim = "" if c["limit"] is None else f" / {c['limit']:.3g}"
    return f"{c['name']} {val}{lim}"


def run(args) -> int:
    from bench.execute.executors import make_executor
    from bench.execute.job import Job, run_job
    from bench.report.results import write_outcome, write_summary
    from bench.sim.episode import EpisodeLimits

    scenarios = load_or_report(args.paths, args.root)
    if scenarios is None:
        return 2
    out = Path(args.out)
    out.mkdir(parents=True, exist_ok=True)
    limits = EpisodeLimits(tick_timeout_s=args.tick_timeout, episode_timeout_s=args.episode_timeout)
    jobs = [Job(sc, args.controller, args.seed, limits) for sc in scenarios]
    executor = make_executor(getattr(args, "workers", None), getattr(args, "cluster", None))
    results: list[dict | None] = [None] * len(jobs)
    try:
        for i, outcome in executor.map(run_job, jobs):
            write_outcome(out, scenarios[i].slug, outcome)
            results[i] = outcome.result
    finally:
        executor.close()
    entries = [(sc.slug, r) for sc, r in zip(scenarios, results)]
    summary = write_summary(out, entries)
    rows = [[sc.id, r["status"], deciding_text(r), f"{r['realtime_factor']:.1f}x"] for sc, r in zip(scenarios, results)]
    print_table(rows, ["scenario", "status", "deciding criterion (value / limit)", "realtime"])
    print(f"results in {out}/")
    line = f"{summary['passed']} passed, {summary['failed']} failed"
    if summary["errors"]:
        line += f", {summary['errors']} errors"
    print(line)
    return 0 if summary["passed"] == summary["total"] else 1
