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
                   help="wall-clock limit for one controller call, s (default 2; 0 means no limit)")
    p.add_argument("--episode-timeout", type=float, default=600.0, metavar="S",
                   help="wall-clock limit for one episode, s (default 600; 0 means no limit)")
    add_execution_options(p)
    p.add_argument("--only", action="append", default=[], metavar="ID",
                   help="run only the scenario or trial with this id (or result folder name), e.g. "
                        "'full-course[trial=3]' (repeatable)")
    p.add_argument("--resume", action="store_true",
                   help="skip scenarios whose result in --out is complete and valid (result.json parses, is for "
                        "this scenario, seed and controller, and its trace.npz loads) and run the rest; the "
                        "summary lists all")
    add_media_options(p)
    p.add_argument("--history", default=None, metavar="PATH",
                   help="history database to append this run to (default <out>/history.sqlite)")
    p.add_argument("--no-history", action="store_true", help="do not record this run in the history database")
    p.set_defaults(func=run)


def add_media_options(p) -> None:
    """``--video``, ``--video-dir`` and ``--plots/--no-plots`` (owned by the render engineer)."""
    import argparse

    from bench.cli.render import add_video_options

    p.add_argument("--video", choices=("none", "failed", "all"), default="none",
                   help="review videos after the run: none, only scenarios that did not pass, or all (default none); "
                        "a video never changes a verdict or the exit code")
    p.add_argument("--video-dir", default="videos", metavar="DIR", help="where videos go (default videos/)")
    p.add_argument("--plots", action=argparse.BooleanOptionalAction, default=True,
                   help="plots.png beside every result.json (default on)")
    add_video_options(p)


def _positive_int(text: str) -> int:
    import argparse

    try:
        n = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a whole number, got {text!r}") from None
    if n < 1:
        raise argparse.ArgumentTypeError(f"must be at least 1, got {n}")
    return n


def add_execution_options(p) -> None:
    """``--workers``, ``--cluster`` and ``--in-process`` (shared with ``bench limit``)."""
    p.add_argument("--workers", type=_positive_int, default=None, metavar="N",
                   help="episodes run at once in worker processes (default: the core count; 1 = one worker "
                        "process, so that a controller that exits, crashes or hangs takes only its episode with it)")
    p.add_argument("--in-process", action="store_true",
                   help="run every episode in this process, one after another (for debuggers and profilers); "
                        "a controller that crashes the process or hangs in native code then ends the run")
    p.add_argument("--cluster", default=None, metavar="local|tcp://HOST:PORT",
                   help="run on Dask: 'local' starts a local cluster (--workers processes), an address "
                        "connects to a running scheduler")


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
    from bench.cli import UsageError
    from bench.execute import trials as trials_mod
    from bench.execute.executors import ExecutorError, make_executor
    from bench.execute.job import Job, run_job
    from bench.execute.outcomes import error_outcome
    from bench.execute.progress import Progress
    from bench.execute.schedule import longest_first
    from bench.report.results import write_outcome, write_summary
    from bench.sim.episode import EpisodeLimits

    if getattr(args, "video", "none") != "none":
        from bench.cli.render import options_from
        options_from(args)          # bad video options are invalid input: nothing is run
    scenarios = load_or_report(args.paths, args.root)
    if scenarios is None:
        return 2
    episodes, seeds, groups = trials_mod.plan(scenarios, args.seed)
    if args.only:
        all_ids = [e.id for e in episodes]
        episodes, seeds, groups, unknown = trials_mod.select(episodes, seeds, groups, args.only)
        if unknown:
            raise UsageError(f"--only: no scenario or trial with id {', '.join(map(repr, unknown))} in "
                             f"{' '.join(args.paths)}" + _close_ids(unknown, all_ids))
    limits = EpisodeLimits(tick_timeout_s=args.tick_timeout, episode_timeout_s=args.episode_timeout)
    jobs = [Job(sc, args.controller, seed, limits) for sc, seed in zip(episodes, seeds)]
    try:
        executor = make_executor(getattr(args, "workers", None), getattr(args, "cluster", None),
                                 in_process=getattr(args, "in_process", False))
    except ExecutorError as exc:
        raise UsageError(str(exc)) from None
    out = Path(args.out)
    out.mkdir(parents=True, exist_ok=True)
    trial_of = {i: g.scenario for g in groups for i in g.indices}
    results: list[dict | None] = [None] * len(jobs)
    todo = list(range(len(jobs)))
    if getattr(args, "resume", False):
        todo = _resume(out, episodes, jobs, results)
    # submission order only (longest first keeps workers busy to the end); results go back by index
    order = longest_first(jobs, todo) if executor.workers > 1 else todo
    progress = Progress(len(todo))
    try:
        for j, outcome in executor.map(run_job, [jobs[i] for i in order], on_error=error_outcome):
            i = order[j]
            if i in trial_of:
                outcome.result["trial_of"] = trial_of[i]
            write_outcome(out, episodes[i].slug, outcome)
            results[i] = outcome.result
            progress.update(passed=outcome.result["status"] == "passed")
    finally:
        progress.close()
        executor.close()
    entries = [(sc.slug, r) for sc, r in zip(episodes, results)]
    trial_summaries = trials_mod.group_summaries(groups, results)
    summary = write_summary(out, entries, trial_summaries)
    if not args.no_history:
        _record_history(args, out, [results[i] for i in todo])   # resumed results are in it already
    rows = [[sc.id, r["status"], deciding_text(r), f"{r['realtime_factor']:.1f}x"] for sc, r in zip(episodes, results)]
    print_table(rows, ["scenario", "status", "deciding criterion (value / limit)", "realtime"])
    if trial_summaries:
        print()
        print_trials(trial_summaries)
    _media(args, out, episodes, results)   # plots and videos; the count line below stays the last line
    print(f"results in {out}/")
    line = f"{summary['passed']} passed, {summary['failed']} failed"
    if summary["errors"]:
        line += f", {summary['errors']} errors"
    if trial_summaries:
        ok_groups = sum(t["verdict"] == "passed" for t in trial_summaries)
        line += f" (episodes); {ok_groups} of {len(trial_summaries)} trial scenarios passed"
    print(line)
    in_group = set(trial_of)
    plain_ok = all(r["status"] == "passed" for i, r in enumerate(results) if i not in in_group)
    groups_ok = all(t["verdict"] == "passed" for t in trial_summaries)
    return 0 if plain_ok and groups_ok else 1


def _resume(out: Path, episodes, jobs, results: list) -> list[int]:
    """Fill ``results`` with the complete results already in ``out``; return the indices still to run."""
    from bench.report.results import complete_result, remove_temp_files

    remove_temp_files(out)
    todo, redo = [], 0
    for i, (sc, job) in enumerate(zip(episodes, jobs)):
        remove_temp_files(out / sc.slug)
        seed = int(sc.seed if job.seed is None else job.seed)
        controller = job.controller if isinstance(job.controller, str) else None
        result, why = complete_result(out, sc.slug, scenario_id=sc.id, seed=seed, controller=controller,
                                      content_hash=getattr(sc, "content_hash", None) or None)
        if result is None:
            todo.append(i)
            redo += why != "no result.json"
        else:
            results[i] = result
    print(f"resume: {len(jobs) - len(todo)} of {len(jobs)} results complete in {out}/, running {len(todo)}"
          + (f" ({redo} of them incomplete or for other settings)" if redo else ""), file=sys.stderr)
    return todo


def _media(args, out: Path, episodes, results) -> None:
    """Plots and videos: never a traceback, never a different exit code."""
    try:
        from bench.cli.render import options_from
        from bench.render.postrun import after_run

        video = getattr(args, "video", "none")
        opts = options_from(args) if video != "none" else None
        after_run(out, [(sc, sc.slug, r) for sc, r in zip(episodes, results)], video=video,
                  video_dir=getattr(args, "video_dir", "videos"), plots=getattr(args, "plots", True), opts=opts)
    except Exception as exc:  # noqa: BLE001 - the results are written; media are extras
        print(f"plots/video: skipped: {type(exc).__name__}: {exc}")


def _close_ids(unknown: list[str], ids: list[str]) -> str:
    import difflib

    close = difflib.get_close_matches(unknown[0], ids, n=3, cutoff=0.5)
    note = " (a trial's id is the scenario id plus [trial=K], K from 0)" if any("[trial=" in i for i in ids) else ""
    if close:
        return f"; did you mean {', '.join(close)}?{note}"
    return f"; ids here: {', '.join(ids[:5])}{', ...' if len(ids) > 5 else ''}{note}"


def print_trials(trial_summaries: list[dict], file=None) -> None:
    """The trials table: rate, 95 % Wilson interval, required rate, verdict and failing trial ids."""
    rows = []
    for t in trial_summaries:
        lo, hi = t["interval"]
        req = "all" if t["required"] is None else f"{t['required']:g}"
        failing = ", ".join(t["failing"][:4]) + (f", +{len(t['failing']) - 4} more" if len(t["failing"]) > 4 else "")
        count = f"{t['passed']}/{t['trials']}"
        if t["trials"] < t.get("declared_trials", t["trials"]):
            count += f" ({t['trials']} of {t['declared_trials']} selected)"
        rows.append([t["scenario"], count, f"{t['rate']:.2f}", f"[{lo:.2f}, {hi:.2f}]",
                     req, t["verdict"], failing or "-"])
    print("trials (95 % Wilson interval of the pass rate; pass_rate_min is checked against its lower bound)",
          file=file)
    print_table(rows, ["scenario", "passed", "rate", "95 % interval", "required", "verdict", "failing trials"],
                file=file)
    for t in trial_summaries:
        if t["trials"] < t.get("trials_needed", 0) and t["trials"] >= t.get("declared_trials", 0):
            print(f"note: {t['scenario']}: {t['trials']} trials cannot show a pass rate of {t['required']:g} even "
                  f"if all pass (the lower bound is at most {t['trials'] / (t['trials'] + 1.959963984540054 ** 2):.2f});"
                  f" it needs at least {t['trials_needed']} trials", file=file)


def _record_history(args, out: Path, results: list[dict]) -> None:
    from bench.report.history import default_path, record_results

    path = Path(args.history) if args.history else default_path(out)
    try:
        record_results(path, results, source="bench run", cwd=Path.cwd())
    except Exception as exc:  # noqa: BLE001 - the run's own verdicts stand; say why history is missing
        print(f"warning: history not recorded in {path}: {type(exc).__name__}: {exc}", file=sys.stderr)
