"""``bench run PATH...``: run every scenario found, write results, print a table."""

from __future__ import annotations

import sys
from pathlib import Path

from bench.cli.common import (add_controller_param_option, add_privileged_option, add_robot_option,
                               controller_params_from, load_or_report)
from bench.report.tables import RESULT_HEADER, deciding_text, print_table, print_trials, result_rows  # noqa: F401
from bench.run.plan import DEFAULT_CONTROLLER

ORDER = 10


def register(sub) -> None:
    p = sub.add_parser("run", help="run scenarios and score them",
                       description="Run every scenario found (a file, or a folder searched recursively for *.yaml). "
                                   "Exit 0 when all passed, 1 when any failed or errored, 2 on invalid input.")
    p.add_argument("paths", nargs="+", metavar="PATH", help="scenario file or folder")
    p.add_argument("--controller", default=DEFAULT_CONTROLLER, metavar="NAME",
                   help=f"registered name, entry point, package.module:attribute, exec:PROGRAM ARGS or "
                        f"sealed:NAME (default {DEFAULT_CONTROLLER})")
    add_controller_param_option(p)
    p.add_argument("--sealed", action="store_true",
                   help="run a Python controller in a child process of its own (the same as "
                        "--controller sealed:NAME): it cannot reach the world or the scoring objects")
    p.add_argument("--out", default="bench-results", metavar="DIR", help="results folder (default bench-results/)")
    p.add_argument("--seed", type=int, default=None, metavar="N", help="override every scenario's seed")
    p.add_argument("--root", action="append", default=[], metavar="DIR",
                   help="extra folder that scenarios may reference files in (repeatable)")
    add_robot_option(p)
    add_privileged_option(p)
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
    p.add_argument("--clean", action="store_true",
                   help="first remove results in --out that this run does not produce (earlier runs' scenario "
                        "folders); without it they are kept and a warning names them")
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


def run(args) -> int:
    from bench.run import execute as run_exec
    from bench.run import sinks as run_sinks
    from bench.run.plan import check_out_folders, make_plan, resume, resume_lines
    from bench.sim.episode import EpisodeLimits

    if getattr(args, "video", "none") != "none":
        from bench.cli.render import options_from
        options_from(args)          # bad video options are invalid input: nothing is run
    params = controller_params_from(args)
    scenarios = load_or_report(args.paths, args.root, robot=args.robot,
                               no_privileged=getattr(args, "no_privileged", False))
    if scenarios is None:
        return 2
    limits = EpisodeLimits(tick_timeout_s=args.tick_timeout, episode_timeout_s=args.episode_timeout)
    if args.sealed and not args.controller.startswith(("sealed:", "exec:")):
        args.controller = f"sealed:{args.controller}"
    plan = make_plan(scenarios, controller=args.controller, limits=limits, seed=args.seed, only=args.only,
                     where=" ".join(args.paths), controller_params=params)
    out = Path(args.out)
    check_out_folders(plan, out)
    executor = run_exec.open_executor(getattr(args, "workers", None), getattr(args, "cluster", None),
                                      **executor_options(args))
    results: dict[int, dict] = {}
    todo = [e.index for e in plan.episodes]
    try:
        try:
            out.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            from bench.run.errors import InvalidInput

            raise InvalidInput(f"--out {out}: cannot create the results folder: {exc.strerror or exc}") from None
        _stale_results(plan, out, clean=args.clean)
        if getattr(args, "resume", False):
            resumed = resume(plan, out)
            results.update(resumed.results)
            todo = resumed.todo
            for line in resume_lines(plan, resumed, out):
                print(line, file=sys.stderr)
        sinks: list = [run_sinks.ResultFiles(out)]
        if not args.no_history:
            from bench.report.history import default_path

            path = Path(args.history) if args.history else default_path(out)
            sinks.append(run_sinks.HistorySink(path, source="bench run", cwd=Path.cwd()))
        progress = run_sinks.ProgressSink(len(todo))
        sinks.append(progress)
        try:
            run_exec.reuse(sinks, plan, results)
            results.update(run_exec.execute(plan, todo, executor, sinks))
        finally:
            run_exec.close_sinks(sinks)
    finally:
        executor.close()
    summary, trial_summaries = run_sinks.write_run_summary(out, plan, results)
    ordered = [results[e.index] for e in plan.episodes]
    print_table(result_rows(ordered), RESULT_HEADER)
    if trial_summaries:
        print()
        print_trials(trial_summaries)
    _media(args, out, plan, results)   # plots and videos; the count line below stays the last line
    run_sinks.write_run_markdown(out, plan, results, summary, controller=plan.controller_name)
    print(f"results in {out}/")
    line = f"{summary['passed']} passed, {summary['failed']} failed"
    if summary["errors"]:
        line += f", {summary['errors']} errors"
    if trial_summaries:
        ok_groups = sum(t["verdict"] == "passed" for t in trial_summaries)
        line += f" (episodes); {ok_groups} of {len(trial_summaries)} trial scenarios passed"
    print(line)
    from bench.report.record import as_record

    plain_ok = all(as_record(results[e.index]).passed for e in plan.episodes if e.trial_of is None)
    groups_ok = all(t["verdict"] == "passed" for t in trial_summaries)
    return 0 if plain_ok and groups_ok else 1


def executor_options(args) -> dict:
    """Options of the execution back end beyond --workers/--cluster (``--in-process``), only when given."""
    return {"in_process": True} if getattr(args, "in_process", False) else {}


def _media(args, out: Path, plan, results) -> None:
    """Plots and videos: never a traceback, never a different exit code."""
    from bench.run.sinks import media_after_run

    try:
        from bench.cli.render import options_from

        video = getattr(args, "video", "none")
        opts = options_from(args) if video != "none" else None
    except Exception as exc:  # noqa: BLE001 - the results are written; media are extras
        print(f"plots/video: skipped: {type(exc).__name__}: {exc}")
        return
    media_after_run(out, plan, results, video=video, video_dir=getattr(args, "video_dir", "videos"),
                    plots=getattr(args, "plots", True), opts=opts)


def _stale_results(plan, out: Path, *, clean: bool) -> None:
    """Result folders in ``out`` that this run will not write: removed with ``--clean``, else named in a warning.

    Only folders that hold a ``result.json`` count (and are ever removed), so nothing else in ``out`` is touched.
    """
    import shutil

    mine = {e.scenario.slug for e in plan.episodes}
    stale = sorted(p for p in out.iterdir() if p.is_dir() and not p.is_symlink() and p.name not in mine
                   and (p / "result.json").is_file())
    if not stale:
        return
    if clean:
        for p in stale:
            shutil.rmtree(p, ignore_errors=True)
        print(f"--clean: removed {len(stale)} earlier result folder{'s' if len(stale) != 1 else ''} from {out}/",
              file=sys.stderr)
        return
    names = ", ".join(p.name for p in stale[:5]) + (f", +{len(stale) - 5} more" if len(stale) > 5 else "")
    print(f"warning: {out}/ also holds {len(stale)} result folder{'s' if len(stale) != 1 else ''} from an earlier "
          f"run that this run does not replace ({names}); summary.json lists only this run. Use --clean to remove "
          f"them first, or a fresh --out folder", file=sys.stderr)
