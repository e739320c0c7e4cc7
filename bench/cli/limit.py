"""``bench limit SCENARIO --vary PATH --range LO HI``: how far can the controller go before it breaks?

Brackets and bisects one dotted path of the scenario (``payloads.crate.mass``,
``disturbances.0.push.force.1``, ``terrain.0.slope.angle_deg``) for the largest
(``--direction max``, default) or smallest (``min``) value at which the scenario
still passes, and writes the curve of (value, pass rate) as ``limit.json`` and
``limit.png`` under ``--out``, with every episode's result folder under
``episodes/``. Exit 0 when the search ran (found, or the whole range passes or
fails: the JSON says which), 1 when every episode at the easy end of the range
was an error (nothing was measured), 2 on invalid input.
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

from bench.cli.common import (add_controller_param_option, add_privileged_option, add_robot_option,
                               controller_params_from, load_or_report)
from bench.cli.run import add_execution_options, executor_options
from bench.run.plan import DEFAULT_CONTROLLER

ORDER = 15


def _positive_int(text: str) -> int:
    from bench.cli.run import _positive_int as p

    return p(text)


def register(sub) -> None:
    p = sub.add_parser(
        "limit", help="find the largest (or smallest) value of one field at which a scenario still passes",
        description="Bracketing and bisection over one dotted path of a scenario. Writes limit.json (the curve "
                    "of value and pass rate) and limit.png under --out. Exit 0 when the search ran, 1 when "
                    "nothing could be measured (every episode errored), 2 on invalid input.")
    p.add_argument("scenario", metavar="SCENARIO", help="scenario file")
    p.add_argument("--vary", required=True, metavar="PATH.TO.FIELD",
                   help="dotted path into the scenario, e.g. payloads.crate.mass or terrain.0.slope.angle_deg")
    p.add_argument("--range", required=True, nargs=2, type=float, metavar=("LO", "HI"), dest="value_range",
                   help="the values searched")
    p.add_argument("--trials", type=_positive_int, default=None, metavar="N",
                   help="trials per value (default: the scenario's own trials:, usually 1)")
    p.add_argument("--tol", type=float, default=None, metavar="X",
                   help="stop when the bracket is this narrow (default 1 %% of the range)")
    p.add_argument("--direction", choices=("max", "min"), default="max",
                   help="max: low values pass, find the largest passing one (default); min: the reverse")
    p.add_argument("--pass-rate", type=float, default=None, metavar="P", dest="pass_rate",
                   help="required pass rate per value (default: the scenario's pass_rate_min, else all trials)")
    p.add_argument("--controller", default=DEFAULT_CONTROLLER, metavar="NAME",
                   help=f"registered name, entry point or package.module:attribute (default {DEFAULT_CONTROLLER})")
    p.add_argument("--out", default="bench-limit", metavar="DIR", help="output folder (default bench-limit/)")
    p.add_argument("--seed", type=int, default=None, metavar="N", help="override the scenario's seed")
    p.add_argument("--only", default=None, metavar="ID", help="the scenario to use when the file defines several "
                                                              "(a matrix)")
    p.add_argument("--root", action="append", default=[], metavar="DIR",
                   help="extra folder that the scenario may reference files in (repeatable)")
    add_robot_option(p)
    add_privileged_option(p)
    add_controller_param_option(p)
    add_execution_options(p)
    p.set_defaults(func=run)


def _pick(scenarios, only: str | None, path: str):
    from bench.cli import UsageError

    if only is not None:
        found = [s for s in scenarios if only in (s.id, s.slug)]
        if not found:
            raise UsageError(f"--only {only!r}: {path} defines {', '.join(s.id for s in scenarios)}")
        return found[0]
    if len(scenarios) > 1:
        raise UsageError(f"{path} defines {len(scenarios)} scenarios ({', '.join(s.id for s in scenarios[:4])}"
                         f"{', ...' if len(scenarios) > 4 else ''}); pick one with --only ID")
    return scenarios[0]


def _fmt_point(label: str, p) -> str:
    word = "passed" if p.passed else "failed"
    rate = f" {round(p.pass_rate * p.trials)}/{p.trials}" if p.trials > 1 else ""
    return f"{label}={p.value:.6g} {word}{rate}"


def run(args) -> int:
    import mujoco

    import bench
    from bench.cli import UsageError
    from bench.errors import ScenarioErrors
    from bench.report.results import write_json
    from bench.run.execute import open_executor
    from bench.run.plan import check_controller, check_controller_params
    from bench.search.limit import find_limit
    from bench.search.plot import plot_curve
    from bench.search.scenario import ScenarioPredicate
    from bench.sim.episode import EpisodeLimits

    lo, hi = args.value_range
    if not lo < hi:
        raise UsageError(f"--range: expected LO < HI, got {lo:g} {hi:g}")
    if args.tol is not None and not args.tol > 0:
        raise UsageError(f"--tol must be > 0, got {args.tol:g}")
    if args.pass_rate is not None and not 0.0 < args.pass_rate <= 1.0:
        raise UsageError(f"--pass-rate must be in (0, 1], got {args.pass_rate:g}")
    scenarios = load_or_report([args.scenario], args.root, robot=args.robot,
                               no_privileged=getattr(args, "no_privileged", False))
    if scenarios is None:
        return 2
    sc = _pick(scenarios, args.only, args.scenario)
    check_controller(args.controller)          # invalid input: exit 2 before anything runs
    params = controller_params_from(args)
    check_controller_params(args.controller, params)
    executor = open_executor(args.workers, args.cluster, **executor_options(args))
    out = Path(args.out)
    t0 = time.perf_counter()
    try:
        pred = ScenarioPredicate(sc, args.vary, controller=args.controller, controller_params=params,
                                 executor=executor,
                                 limits=EpisodeLimits(), trials=args.trials, required=args.pass_rate,
                                 seed=args.seed, out_dir=out / "episodes")
        pred.check_range(lo, hi)
    except ScenarioErrors as exc:
        executor.close()
        for err in exc.errors:
            print(f"{err}  (--vary {args.vary} --range {lo:g} {hi:g})", file=sys.stderr)
        print("the range gives an invalid scenario; nothing was run", file=sys.stderr)
        return 2
    n_trials = len(pred.trial_scenarios)
    from bench.execute.trials import min_trials, wilson_interval

    if n_trials < min_trials(pred.required):
        executor.close()
        raise UsageError(f"with {n_trials} trial{'s' if n_trials != 1 else ''} per value the lower bound of the 95 % "
                         f"Wilson interval is at most {wilson_interval(n_trials, n_trials)[0]:.2f} even when all "
                         f"pass, below the required rate {pred.required:g}: nothing could pass; use --trials "
                         f"{min_trials(pred.required)} or more, or a lower --pass-rate")
    tol = args.tol if args.tol is not None else (hi - lo) / 100.0
    if pred.integer:
        tol = max(tol, 1.0)
    decimals = max(0, -int(_floor_log10(tol / 10.0)))
    per_round = max(1, executor.workers // n_trials)
    label = pred.label
    required_text = "all trials pass" if pred.required is None or pred.required >= 1 else \
        f"pass_rate_min {pred.required:g} on the Wilson lower bound"
    print(f"bench limit: {sc.id}, {args.direction} of {args.vary} in [{lo:g}, {hi:g}], tol {tol:g}; "
          f"controller {args.controller}; {n_trials} trial{'s' if n_trials != 1 else ''} per value "
          f"({required_text}); {executor.name} executor, {per_round} value{'s' if per_round != 1 else ''} per round")

    def on_round(rnd, points, bracket):
        pts = ", ".join(_fmt_point(label, p) for p in sorted(points, key=lambda q: q.value))
        br = f"  -> bracket [{bracket[0]:.6g}, {bracket[1]:.6g}]" if bracket else ""
        print(f"round {rnd}: {pts}{br}", flush=True)

    try:
        result = find_limit(pred, lo, hi, direction=args.direction, tol=tol, points_per_round=per_round,
                            integer=pred.integer, decimals=None if pred.integer else decimals, on_round=on_round)
    except ScenarioErrors as exc:
        for err in exc.errors:
            print(str(err), file=sys.stderr)
        return 2
    finally:
        executor.close()
    wall = time.perf_counter() - t0

    doc = {
        "scenario": sc.id,
        "source": str(sc.source),
        "controller": args.controller,
        "vary": args.vary,
        "direction": args.direction,
        "range": [lo, hi],
        "tol": tol,
        "trials": n_trials,
        "required": pred.required,
        "status": result.status,
        "limit": result.limit,
        "bracket": list(result.bracket) if result.bracket else None,
        "monotone": result.monotone,
        "rounds": result.rounds,
        "evaluations": len(result.points),
        "episodes": pred.episodes,
        "executor": executor.name,
        "workers": executor.workers,
        "wall_time_s": wall,
        "curve": [{"value": p.value, "pass_rate": p.pass_rate, "passed": p.passed, "trials": p.trials,
                   "interval": list(p.interval) if p.interval else None, "round": p.round, **p.detail}
                  for p in result.curve],
        "command": "bench limit " + " ".join(_quote(a) for a in sys.argv[2:]) if sys.argv[1:2] == ["limit"] else None,
        "bench_version": bench.__version__,
        "mujoco_version": mujoco.__version__,
    }
    out.mkdir(parents=True, exist_ok=True)
    write_json(out / "limit.json", doc)
    word = "largest" if args.direction == "max" else "smallest"
    plot_curve(result, out / "limit.png", xlabel=args.vary, required=pred.required,
               title=f"{sc.id} with {args.controller}: {word} passing {label}")

    easy = result.curve[0] if args.direction == "max" else result.curve[-1]
    if result.status == "found":
        print(f"{word} passing {args.vary}: {result.limit:.6g} (fails at {result.bracket[1]:.6g})"
              + ("" if result.monotone else "; the curve is not monotone, see limit.json"))
    elif result.status == "above-range":
        print(f"passes over the whole range: {args.vary} = {result.limit:.6g} still passes; widen --range")
    else:
        why = "; ".join(easy.detail.get("reasons") or [])
        print(f"fails already at {args.vary} = {easy.value:.6g}: no passing value in the range"
              + (f" ({why})" if why else ""))
    print(f"{len(result.points)} values, {pred.episodes} episodes, {wall:.1f} s; curve in {out / 'limit.json'}, "
          f"plot {out / 'limit.png'}")
    if result.status == "below-range" and easy.detail.get("statuses") in (["error"], ["timeout"], ["error", "timeout"]):
        return 1
    return 0


def _floor_log10(x: float) -> int:
    import math

    return math.floor(math.log10(x)) if x > 0 else 0


def _quote(a: str) -> str:
    import shlex

    return shlex.quote(a)
