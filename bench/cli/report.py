"""``bench report RESULTS_DIR [--against BASELINE]``: one self-contained HTML page of a results folder,
or of two runs compared (verdict changes, metric changes beyond tolerance, overlaid plots, side-by-side videos)."""

from __future__ import annotations

import sys
from pathlib import Path

ORDER = 30


def register(sub) -> None:
    from bench.cli.render import add_video_options

    p = sub.add_parser(
        "report", help="write an HTML report of a results folder, or of two runs compared",
        description="Write one self-contained HTML page for a results folder: summary counts, a table of scenarios "
                    "with status, deciding criterion and key metrics, and for each scenario its plots (embedded), "
                    "videos (linked, or embedded with --embed-videos), criteria and events. "
                    "With --against BASELINE (another results folder, or a baseline.json) the page compares the "
                    "two runs instead: verdict changes first, then metrics that moved beyond their tolerance "
                    "(the same judging as `bench compare`, regressed ones marked), and for each changed scenario "
                    "both runs' traces on the same axes and, with --videos, the side-by-side video. "
                    "Exit 0 when written, 2 when the folder holds no readable results.")
    p.add_argument("results_dir", metavar="RESULTS_DIR", help="folder written by `bench run --out` (the candidate "
                                                              "when --against is given)")
    p.add_argument("-o", "--output", default=None, metavar="FILE",
                   help="where to write the page (default RESULTS_DIR/report.html, or RESULTS_DIR/compare-report.html "
                        "with --against)")
    p.add_argument("--embed-videos", action="store_true",
                   help="put the videos inside the page (base64) so that it can be moved on its own; larger file")
    p.add_argument("--no-plots", action="store_true", help="do not draw missing plots.png from trace.npz "
                                                          "(with --against: no overlaid plots)")
    g = p.add_argument_group("two runs (--against)")
    g.add_argument("--against", default=None, metavar="BASELINE",
                   help="compare RESULTS_DIR with this baseline: a results folder of an earlier run or another "
                        "controller, or a file written by `bench baseline save` (no plots or videos then)")
    g.add_argument("--tolerances", default=None, metavar="BASELINE_JSON",
                   help="take the tolerance overrides of this baseline file (default: the built-in per-metric ones)")
    g.add_argument("--include-timing", action="store_true",
                   help="also compare wall-clock metrics (controller compute time)")
    g.add_argument("--labels", nargs=2, default=None, metavar=("BASELINE", "CANDIDATE"),
                   help="names of the two runs on the page (default baseline/candidate, or the controllers' names "
                        "when they differ)")
    g.add_argument("--videos", action="store_true",
                   help="render a side-by-side video (baseline left, candidate right) of every scenario whose "
                        "verdict changed or that regressed, and show it on the page")
    g.add_argument("--video-dir", default=None, metavar="DIR",
                   help="where those videos go (default: a videos/ folder beside the page)")
    add_video_options(g)
    p.set_defaults(func=run)


def run(args) -> int:
    if getattr(args, "against", None):
        return run_two(args)
    from bench.report.html import ReportError, write_report

    plotter = None
    if not args.no_plots:
        try:
            from bench.render.plots import plot_result as plotter
        except Exception:  # noqa: BLE001 - the page says the plots are missing
            plotter = None
    try:
        out = write_report(args.results_dir, args.output, embed_videos=args.embed_videos,
                           make_plots=not args.no_plots, plotter=plotter)
    except ReportError as exc:
        print(f"bench report: {exc}", file=sys.stderr)
        return 2
    except OSError as exc:
        print(f"bench report: cannot write {args.output or 'the report'}: {exc}", file=sys.stderr)
        return 2
    print(out)
    return 0


def run_two(args) -> int:
    """The two-run page: compare, draw the overlays, render the side-by-side videos, write."""
    from bench.cli.render import options_from
    from bench.report.compare_html import COMPARE_FILE, compare_runs, write_compare_report
    from bench.report.html import ReportError

    opts = options_from(args, compare=True) if args.videos else None     # bad video options: nothing written
    try:
        two = compare_runs(args.against, args.results_dir, tolerances=args.tolerances,
                           include_timing=args.include_timing, labels=tuple(args.labels) if args.labels else None)
    except ReportError as exc:
        print(f"bench report: {exc}", file=sys.stderr)
        return 2
    out = Path(args.output) if args.output else Path(args.results_dir) / COMPARE_FILE
    pairs = {sid: (two.baseline.entries[sid].dir, two.candidate.entries[sid].dir) for sid in two.changed
             if sid in two.baseline.entries and sid in two.candidate.entries}
    if not args.no_plots and pairs:
        try:
            from bench.render.plots import plot_overlay_dirs
        except Exception as exc:  # noqa: BLE001 - the page says the plots are missing
            print(f"plots: not drawn: {type(exc).__name__}: {exc}")
            plot_overlay_dirs = None
        for sid, (a, b) in pairs.items():
            if plot_overlay_dirs is None:
                break
            try:
                png = plot_overlay_dirs(a, b, (two.baseline.label, two.candidate.label))
            except Exception as exc:  # noqa: BLE001 - one scenario's plot, never the page
                print(f"plots: {sid}: not drawn: {type(exc).__name__}: {exc}")
                continue
            if png:
                two.overlays[sid] = png
    if args.videos:
        _videos(two, pairs, Path(args.video_dir) if args.video_dir else out.parent / "videos", opts)
    try:
        written = write_compare_report(two, out, embed_videos=args.embed_videos)
    except OSError as exc:
        print(f"bench report: cannot write {out}: {exc}", file=sys.stderr)
        return 2
    print(written)
    return 0


def _videos(two, pairs, video_dir: Path, opts) -> None:
    """Side-by-side videos of the scenarios whose verdict changed or that regressed; problems are one line each."""
    try:
        from bench.render.compare import render_compare
        from bench.render.gl import RenderUnavailable
    except Exception as exc:  # noqa: BLE001
        print(f"video: none made: {type(exc).__name__}: {exc}")
        return
    wanted = [sid for sid in two.changed if sid in pairs
              and (any(r.scenario == sid for r in two.status_rows) or two.verdict_of(sid) == "regressed")]
    for sid in wanted:
        a, b = pairs[sid]
        try:
            two.videos[sid] = render_compare(a, b, video_dir, opts, allow_changed_scenario=True)
        except RenderUnavailable as exc:
            print(f"video: none made: {exc}")
            return
        except Exception as exc:  # noqa: BLE001 - one scenario's video, never the page
            print(f"video: {sid}: not made: {type(exc).__name__}: {exc}")
    if two.videos:
        print(f"videos: {len(two.videos)} side by side in {video_dir}/")
