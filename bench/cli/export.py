"""``bench export SCENARIO -o world.xml``: write the compiled world as standalone MJCF."""

from __future__ import annotations

import sys

from bench.cli import UsageError
from bench.cli.common import load_or_report


def register(sub) -> None:
    p = sub.add_parser("export", help="write the compiled world of a scenario as MJCF",
                       description="Compile a scenario's world (robot, terrain, payloads) and write it as MJCF.")
    p.add_argument("scenario", metavar="SCENARIO", help="a scenario file")
    p.add_argument("-o", "--output", required=True, metavar="FILE", help="MJCF file to write")
    p.add_argument("--variant", metavar="ID", help="which matrix variant to export (default: the first)")
    p.set_defaults(func=run)


def run(args) -> int:
    from bench.world.build import build_world, export_mjcf

    scenarios = load_or_report([args.scenario])
    if scenarios is None:
        return 2
    if args.variant:
        chosen = [s for s in scenarios if s.id == args.variant]
        if not chosen:
            raise UsageError(f"no variant {args.variant!r}; variants: {', '.join(s.id for s in scenarios)}")
        sc = chosen[0]
    else:
        sc = scenarios[0]
    try:
        world = build_world(sc)
        export_mjcf(world, args.output)
    except OSError as exc:
        raise UsageError(f"cannot write {args.output}: {exc}") from None
    except Exception as exc:  # noqa: BLE001 - reported, never a traceback
        print(f"{sc.source}: the world could not be built: {type(exc).__name__}: {exc}", file=sys.stderr)
        return 2
    print(f"wrote {args.output} ({sc.id})")
    return 0
ORDER = 40
