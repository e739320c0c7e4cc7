"""``bench render RESULT_DIR...``: review videos from recorded results (replayed, never re-simulated)."""

from __future__ import annotations

import sys
from pathlib import Path

from bench.cli import UsageError

ORDER = 20


#: ``--size`` names for common frame sizes.
SIZE_NAMES = {"360p": (640, 360), "540p": (960, 540), "720p": (1280, 720), "1080p": (1920, 1080)}


def add_video_options(p) -> None:
    """Camera, size, frame rate, slow motion and preview; shared with ``bench run --video`` and ``bench report``."""
    from bench.render.defaults import CAMERAS, DEFAULT_SIZE, PREVIEW_FORMATS

    p.add_argument("--camera", default="follow", choices=CAMERAS,
                   help="follow: tracks the trunk smoothly and looks ahead along the heading, rising and falling "
                        "with the terrain (default); track: the older trunk-fixed view; side, top: fixed views")
    p.add_argument("--size", default=None, metavar="WxH",
                   help=f"frame size, e.g. 1920x1080 or one of {', '.join(SIZE_NAMES)} (default "
                        f"{DEFAULT_SIZE[0]}x{DEFAULT_SIZE[1]}; a side-by-side video's panels are half that unless a "
                        "size is given)")
    p.add_argument("--width", type=int, default=None, metavar="PX", help="frame width (overrides --size)")
    p.add_argument("--height", type=int, default=None, metavar="PX", help="frame height (overrides --size)")
    p.add_argument("--fps", type=float, default=30.0, metavar="N", help="frames per second (default 30)")
    p.add_argument("--slowmo", type=float, default=1.0, metavar="F",
                   help="play F times slower than simulated time (default 1.0; 2 = half speed)")
    p.add_argument("--preview", default="gif", choices=PREVIEW_FORMATS,
                   help="a short looping animation beside each main video, for pull-request comments: "
                        "gif (default), webp, or none")


def parse_size(text: str) -> tuple[int, int]:
    """``1280x720`` or a name from :data:`SIZE_NAMES` -> (width, height); UsageError otherwise."""
    t = str(text).strip().lower()
    if t in SIZE_NAMES:
        return SIZE_NAMES[t]
    parts = t.replace("*", "x").split("x")
    if len(parts) == 2 and all(x.strip().isdigit() for x in parts):
        return int(parts[0]), int(parts[1])
    raise UsageError(f"--size: {text!r} is not WIDTHxHEIGHT (e.g. 1280x720) or one of {', '.join(SIZE_NAMES)}")


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


def options_from(args, compare: bool = False, **extra):
    """VideoOptions from the parsed options; ``compare``: for a side-by-side video, whose two panels are half the
    default size each when no size was given. Raises UsageError naming the option."""
    from bench.render.defaults import DEFAULT_SIZE
    from bench.render.video import VideoOptions

    size = getattr(args, "size", None)
    if size is not None:
        w, h = parse_size(size)
    elif compare:
        w, h = DEFAULT_SIZE[0] // 2, DEFAULT_SIZE[1] // 2
    else:
        w, h = DEFAULT_SIZE
    w = args.width if getattr(args, "width", None) is not None else w
    h = args.height if getattr(args, "height", None) is not None else h
    opts = VideoOptions(camera=args.camera, width=w, height=h, fps=args.fps, slowmo=args.slowmo,
                        preview=getattr(args, "preview", "gif"), **extra)
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
    cmp_opts = options_from(args, compare=True, violation_clip=not args.no_clip) if args.compare else None
    dirs = result_dirs(args.dirs, args.only) if args.dirs else []
    made, failed = [], 0
    try:
        if args.compare:
            a, b = args.compare
            for d in (a, b):
                if not (Path(d) / "result.json").is_file():
                    raise UsageError(f"--compare: {Path(d) / 'result.json'}: no such file")
            try:
                made.append(render_compare(a, b, args.out, cmp_opts, scenario=args.scenario, roots=args.root))
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
