"""``bench check PATH...``: validate scenarios only, and show the expanded list."""

from __future__ import annotations

from bench.cli.common import add_privileged_option, add_robot_option, load_or_report


def register(sub) -> None:
    p = sub.add_parser("check", help="validate scenarios; each problem as path:line:col: message",
                       description="Validate scenario files without running them. Exit 0 when all are valid, 2 if not.")
    p.add_argument("paths", nargs="+", metavar="PATH", help="scenario file or folder (searched for *.yaml)")
    p.add_argument("--root", action="append", default=[], metavar="DIR",
                   help="extra folder that scenarios may reference files in (repeatable)")
    add_robot_option(p)
    add_privileged_option(p)
    p.add_argument("-q", "--quiet", action="store_true", help="print nothing when valid")
    p.set_defaults(func=run)


def run(args) -> int:
    scenarios = load_or_report(args.paths, args.root, robot=args.robot,
                               no_privileged=getattr(args, "no_privileged", False))
    if scenarios is None:
        return 2
    if not args.quiet:
        print_expansions(scenarios)
    return 0


def print_expansions(scenarios) -> None:
    """One line per scenario as checked, then, indented, one line per trial it expands into (the
    episodes ``bench run`` would run, by the ids ``--only`` takes); a last line counts both."""
    from bench.execute.trials import is_trial_scenario
    from bench.scenario.trials import expand_trials

    episodes = 0
    for sc in scenarios:
        print(f"ok  {sc.id}  ({sc.source})")
        if not is_trial_scenario(sc):
            episodes += 1
            continue
        trials = expand_trials(sc)
        episodes += len(trials)
        for t in trials:
            print(f"      {t.id}  seed {t.seed}{_drawn(sc, t)}")
    n = len(scenarios)
    line = f"{n} scenario{'s' if n != 1 else ''} valid"
    if episodes != n:
        line += f" ({episodes} episodes once trials are expanded)"
    print(line)


def _drawn(base, trial) -> str:
    """The randomized values of one trial, ``  key=value, ...`` (empty when nothing is randomized)."""
    keys = list((getattr(base, "randomize", None) or {}).keys())
    if not keys:
        return ""
    from bench.scenario.paths import get_path

    values = []
    for k in keys:
        try:
            values.append(f"{k}={_short(get_path(trial.document, k))}")
        except Exception:  # noqa: BLE001 - a listing only; the path was checked when loading
            continue
    return ("  " + ", ".join(values)) if values else ""


def _short(value) -> str:
    if isinstance(value, float):
        return f"{value:.4g}"
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(_short(v) for v in value) + "]"
    return str(value)
ORDER = 20
