"""``bench render RESULT_DIR...``: review videos from recorded results (replayed, never re-simulated)."""

from __future__ import annotations

import sys
from pathlib import Path

from bench.cli import UsageError

ORDER = 20


def add_video_options(p) -> None:
    """Camera, size, frame rate and slow motion; shared with ``bench run --video``."""
    p.add_argument("--camera", default="track", choices=("track", "side", "top"),
                   help="trunk-tracking camera, or a fixed side or top view (default track)")
    p.add_argument("--width", type=int, default=640, metavar="PX", help="frame width (default 640)")
    p.add_argument("--height", type=int, default=360, metavar="PX", help="frame height (default 360)")
    p.add_argument("--fps", type=float, default=30.0, metavar="N", help="frames per second (default 30)")
    p.add_argument("--slowmo", type=float, default=1.0, metavar="F",
                   help="play F times slower than simulated time (default 1.0; 2 = half speed)")


def register(sub) -> None:
    p = sub.add_parser(
        "render", help="render review videos of recorded results",
        description="Render MP4 review videos from result folders written by `bench run`: the recorded episode is "
                    "replayed exactly, with force arrows, events, command, a live metric and the verdict drawn on. "
                    "A failed scenario also gets a slowed-down clip around its first violation. RESULT_DIR is a "
                    "scenario's folder (with result.json) or a results folder (every scenario in it). "
                    "Exit 0 when every video was made, 1 when any could not be, 2 on invalid input.")
    p.add_argument("dirs", nargs="*", metavar="RESULT_DIR", help="scenario result folder or results folder")
    p.add_argument("--compare", nargs=2, metavar=("A_DIR", "B_DIR"),
                   help="side by side: two result folders of the same scenario, time-synchronised")
    add_video_options(p)
    p.add_argument("--out", default="videos", metavar="DIR", help="where videos go (default videos/)")
    p.add_argument("--only", choices=("all", "failed"), default="all",
                   help="in a results folder, render every scenario or only those that did not pass (default all)")
    p.add_argument("--no-clip", action="store_true", help="no extra clip around the first violation")
    p.add_argument("--scenario", default=None, metavar="FILE",
                   help="scenario file to rebuild the world from (default: the 'source' in result.json)")
    p.add_argument("--root", action="append", default=[], metavar="DIR",
                   help="extra folder that scenarios may reference files in (repeatable)")
    p.set_defaults(func=run)


def options_from(args, **extra):
    from bench.render.video import VideoOptions

    opts = VideoOptions(camera=args.camera, width=args.width, height=args.height, fps=args.fps, slowmo=args.slowmo,
                        **extra)
    problems = opts.problems()
    if problems:
        raise UsageError("; ".join(problems))
    return opts


def result_dirs(paths: list[str], only: str = "all") -> list[tuple[Path, bool]]:
    """Scenario result folders under ``paths`` (a scenario folder itself, or every one in a results folder),
    each with whether it was found inside a results folder (then a missing trace is skipped, not an error)."""
    import json

    found: list[tuple[Path, bool]] = []
    for given in paths:
        d = Path(given)
        if (d / "result.json").is_file():
            found.append((d, False))
            continue
        if not d.is_dir():
            raise UsageError(f"{d}: no such folder")
        subs = sorted(p.parent for p in d.glob("*/result.json"))
        if not subs:
            raise UsageError(f"{d}: no result.json in it or in its sub-folders (run `bench run` first)")
        for s in subs:
            if only == "failed":
                try:
                    if json.loads((s / "result.json").read_text()).get("status") == "passed":
                        continue
                except (OSError, ValueError):
                    pass
            found.append((s, True))
    return found


def run(args) -> int:
    from bench.render.compare import render_compare
    from bench.render.gl import RenderUnavailable
    from bench.render.replay import RenderInputError
    from bench.render.video import render_result

    if not args.dirs and not args.compare:
        raise UsageError("give a RESULT_DIR or --compare A_DIR B_DIR")
    opts = options_from(args, violation_clip=not args.no_clip)
    dirs = result_dirs(args.dirs, args.only) if args.dirs else []
    made, failed = [], 0
    try:
        if args.compare:
            a, b = args.compare
            for d in (a, b):
                if not (Path(d) / "result.json").is_file():
                    raise UsageError(f"--compare: {Path(d) / 'result.json'}: no such file")
            try:
                made.append(render_compare(a, b, args.out, opts, scenario=args.scenario, roots=args.root))
            except RenderUnavailable:
                raise
            except RenderInputError as exc:
                print(f"bench render: {exc}", file=sys.stderr)
                return 2
            except Exception as exc:  # noqa: BLE001
                print(f"bench render: --compare: no video made: {type(exc).__name__}: {exc}", file=sys.stderr)
                return 1
        for d, in_folder in dirs:
            if in_folder and not (d / "trace.npz").is_file():
                print(f"{d}: skipped, no trace recorded")
                continue
            try:
                made.extend(render_result(d, args.out, opts, scenario=args.scenario, roots=args.root))
            except RenderUnavailable:
                raise
            except RenderInputError as exc:
                print(f"bench render: {exc}", file=sys.stderr)
                failed += 1
            except Exception as exc:  # noqa: BLE001 - one folder's fault; the others still get their videos
                print(f"bench render: {d}: no video made: {type(exc).__name__}: {exc}", file=sys.stderr)
                failed += 1
    except RenderUnavailable as exc:
        print(f"bench render: no video made: {exc}", file=sys.stderr)
        return 1
    for p in made:
        print(p)
    print(f"{len(made)} video{'s' if len(made) != 1 else ''} in {args.out}/"
          + (f"; {failed} result folder{'s' if failed != 1 else ''} could not be rendered" if failed else ""))
    return 1 if failed else 0
