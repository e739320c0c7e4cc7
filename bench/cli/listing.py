"""``bench list [scenarios|controllers|criteria|faults]``: what is available, one per line."""

from __future__ import annotations

from pathlib import Path


def register(sub) -> None:
    p = sub.add_parser("list", help="list bundled scenarios, controllers, criteria or fault kinds",
                       description="List what is available, one per line with a short description.")
    p.add_argument("what", nargs="?", choices=["scenarios", "controllers", "criteria", "faults"], default="scenarios")
    p.add_argument("--path", action="append", default=[], metavar="DIR",
                   help="scenario folders to list (default: the bundled scenarios)")
    p.set_defaults(func=run)


def bundled_scenarios_dir() -> Path:
    import bench

    here = Path(bench.__file__).resolve().parents[1] / "scenarios"
    if here.is_dir():
        return here
    from importlib.resources import files

    return Path(str(files("bench") / "_data" / "scenarios"))


def run(args) -> int:
    if args.what == "controllers":
        from bench.controllers.registry import available

        infos = list(available())
        width = max((len(i.name) for i in infos), default=0)   # one column, however long the names
        for info in infos:
            print(f"{info.name:<{width}}  {info.description}")
    elif args.what == "criteria":
        from bench.scenario.criteria import all_criteria, criterion_names, load_errors

        loaded = all_criteria()
        for name in criterion_names():
            crit = loaded.get(name)
            text = getattr(crit, "description", "") if crit is not None else f"(cannot be loaded: {load_errors.get(name)})"
            print(f"{name:<24} {text}")
    elif args.what == "faults":
        from bench.faults import fault_kinds
        from bench.faults.registry import load_errors

        for name, kind in fault_kinds().items():
            doc = (kind.schema.__doc__ or "").strip().splitlines()
            print(f"{name:<24} {doc[0] if doc else ''}")
        for name, why in sorted(load_errors.items()):
            print(f"{name:<24} (cannot be loaded: {why})")
    else:
        from bench.cli.common import load_or_report

        paths = args.path or [str(bundled_scenarios_dir())]
        scenarios = load_or_report(paths)
        if scenarios is None:
            return 2
        for sc in scenarios:
            desc = " ".join((sc.description or "").split())
            print(f"{sc.id:<36} {shorten(desc, 100)}")
    return 0


def shorten(text: str, width: int) -> str:
    """``text`` cut at a word boundary to at most ``width`` characters, with an ellipsis when cut."""
    if len(text) <= width:
        return text
    cut = text[:width - 1]
    if text[width - 1] != " " and " " in cut:   # the cut falls inside a word: drop that word
        cut = cut[:cut.rfind(" ")]
    return cut.rstrip(" ,;:.-") + "\u2026"
ORDER = 30
