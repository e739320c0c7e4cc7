"""``bench envelope SCENARIO --x PATH LO HI --y PATH LO HI``: where in a plane of two fields a scenario passes.

The plane is judged on a coarse grid and refined where the pass/fail boundary
crosses it (see :mod:`bench.search.envelope`); each point runs the scenario's
trials when it has them and is judged as ``bench run`` judges trials. Writes
``envelope.json``, ``envelope.csv`` and ``envelope.png`` (polar when the x field
is a direction, ``--polar``) under ``--out``, and every episode's result files
under ``--out/episodes``. Exit 0 when the map is made, 2 on invalid input.
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

from bench.cli.common import (add_controller_param_option, add_privileged_option, add_robot_option,
                               controller_params_from, load_or_report)
from bench.cli.run import add_execution_options, executor_options

ORDER = 36


def register(sub) -> None:
    from bench.run.plan import DEFAULT_CONTROLLER

    p = sub.add_parser("envelope", help="map where a scenario passes over two fields at once",
                       description=__doc__.splitlines()[0].split(": ", 1)[1] + " Refines the grid near the "
                       "pass/fail boundary instead of sampling it all. Exit 0 when the map is made, 2 on invalid "
                       "input.")
    p.add_argument("scenario", metavar="SCENARIO", help="scenario file")
    p.add_argument("--x", nargs=3, metavar=("PATH", "LO", "HI"), dest="x_axis",
                   help="first field (dotted path, e.g. payloads.crate.mass) and its range")
    p.add_argument("--y", nargs=3, metavar=("PATH", "LO", "HI"), dest="y_axis",
                   help="second field and its range")
    p.add_argument("--polar", action="store_true",
                   help="the x field is a direction in degrees over a full turn: it wraps, and the map is polar")
    p.add_argument("--direction-of", nargs=3, metavar=("PATH", "LO", "HI"), dest="vector",
                   help="instead of --x/--y: a force vector (e.g. disturbances.0.push.force) by its direction in "
                        "the horizontal plane (a full turn, polar map) and its magnitude from LO to HI")
    p.add_argument("--grid", type=int, default=5, metavar="N", help="points per axis of the first grid (default 5)")
    p.add_argument("--levels", type=int, default=3, metavar="N",
                   help="refinements of cells the boundary crosses; each halves the cell (default 3)")
    p.add_argument("--budget", type=int, default=200, metavar="N", help="most points judged (default 200)")
    p.add_argument("--trials", type=int, default=None, metavar="N", help="trials per point (default the scenario's)")
    p.add_argument("--controller", default=DEFAULT_CONTROLLER, metavar="NAME", help="controller to map")
    p.add_argument("--out", default="bench-envelope", metavar="DIR", help="output folder (default bench-envelope/)")
    p.add_argument("--root", action="append", default=[], metavar="DIR",
                   help="extra folder that scenarios may reference files in (repeatable)")
    add_robot_option(p)
    add_privileged_option(p)
    add_controller_param_option(p)
    add_execution_options(p)
    p.set_defaults(func=run)


def _axis(spec: list[str], name: str, periodic: bool = False):
    from bench.cli import UsageError
    from bench.search.envelope import Axis

    path, lo, hi = spec
    try:
        lo_v, hi_v = float(lo), float(hi)
    except ValueError:
        raise UsageError(f"--{name} {path} {lo} {hi}: LO and HI must be numbers") from None
    if not lo_v < hi_v:
        raise UsageError(f"--{name}: expected LO < HI, got {lo} {hi}")
    return Axis(path, lo_v, hi_v, label=path, periodic=periodic)


def run(args) -> int:
    from bench.cli import UsageError
    from bench.errors import ScenarioErrors
    from bench.run.execute import open_executor
    from bench.run.plan import check_controller, check_controller_params
    from bench.search.envelope import map_envelope, write_map
    from bench.search.envelope_plot import plot_envelope
    from bench.search.scenario import PlanePredicate
    from bench.sim.episode import EpisodeLimits

    if args.vector:
        if args.x_axis or args.y_axis:
            raise UsageError("--direction-of replaces --x and --y")
        path = args.vector[0]
        x = _axis([path, "0", "360"], "direction-of", True)
        x.label = f"direction of {path}, deg"
        y = _axis(args.vector, "direction-of")
        y.label = f"magnitude of {path}"
    elif args.x_axis and args.y_axis:
        x, y = _axis(args.x_axis, "x", args.polar), _axis(args.y_axis, "y")
    else:
        raise UsageError("give --x PATH LO HI and --y PATH LO HI, or --direction-of PATH LO HI")
    if args.grid < 2 or args.levels < 0 or args.budget < args.grid ** 2:
        raise UsageError(f"--grid must be >= 2, --levels >= 0 and --budget at least grid^2 ({args.grid ** 2})")
    scenarios = load_or_report([args.scenario], args.root, robot=args.robot,
                               no_privileged=getattr(args, "no_privileged", False))
    if scenarios is None:
        return 2
    if len(scenarios) > 1:
        raise UsageError(f"{args.scenario} defines {len(scenarios)} scenarios; map one without a matrix")
    sc = scenarios[0]
    check_controller(args.controller)
    params = controller_params_from(args)
    check_controller_params(args.controller, params)
    out = Path(args.out)
    executor = open_executor(args.workers, args.cluster, **executor_options(args))
    t0 = time.perf_counter()
    try:
        pred = PlanePredicate(sc, x.path, y.path, vector=bool(args.vector), controller=args.controller,
                              controller_params=params,
                              executor=executor,
                              limits=EpisodeLimits(), trials=args.trials, out_dir=out / "episodes")
        pred.check_plane((x.lo, x.hi), (y.lo, y.hi))
        x.integer, y.integer = pred.integer, pred.y_integer
        print(f"bench envelope: {sc.id} with {args.controller}; {x.path} in [{x.lo:g}, {x.hi:g}]"
              f"{' (direction, wraps)' if x.periodic else ''} by {y.path} in [{y.lo:g}, {y.hi:g}]; "
              f"{len(pred.trial_scenarios)} trial(s) per point", flush=True)
        env = map_envelope(pred, x, y, grid=args.grid, levels=args.levels, budget=args.budget)
    except ScenarioErrors as exc:
        for err in exc.errors:
            print(f"{err}  (--x {' '.join(args.x_axis)} --y {' '.join(args.y_axis)})", file=sys.stderr)
        print("the plane gives an invalid scenario; nothing more was run", file=sys.stderr)
        return 2
    finally:
        executor.close()
    out.mkdir(parents=True, exist_ok=True)
    write_map(env, str(out / "envelope"))
    plot_envelope(env, out / "envelope.png", title=f"{sc.id} with {args.controller}")
    n_ok = sum(p.passed for p in env.points)
    rx, ry = env.resolution
    print(f"{len(env.points)} points ({pred.episodes} episodes) in {time.perf_counter() - t0:.1f} s: {n_ok} passed, "
          f"{len(env.points) - n_ok} failed; boundary located to {rx:.3g} x {ry:.3g}"
          + (" (point budget reached)" if env.budget_hit else ""))
    print(f"wrote {out}/envelope.png, envelope.json, envelope.csv")
    return 0
