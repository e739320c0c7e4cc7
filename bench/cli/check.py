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
        for sc in scenarios:
            print(f"ok  {sc.id}  ({sc.source})")
        print(f"{len(scenarios)} scenario{'s' if len(scenarios) != 1 else ''} valid")
    return 0
ORDER = 20
