"""``bench report RESULTS_DIR``: one self-contained HTML page of a results folder."""

from __future__ import annotations

import sys

ORDER = 30


def register(sub) -> None:
    p = sub.add_parser(
        "report", help="write an HTML report of a results folder",
        description="Write one self-contained HTML page for a results folder: summary counts, a table of scenarios "
                    "with status, deciding criterion and key metrics, and for each scenario its plots (embedded), "
                    "videos (linked, or embedded with --embed-videos), criteria and events. "
                    "Exit 0 when written, 2 when the folder holds no readable results.")
    p.add_argument("results_dir", metavar="RESULTS_DIR", help="folder written by `bench run --out`")
    p.add_argument("-o", "--output", default=None, metavar="FILE",
                   help="where to write the page (default RESULTS_DIR/report.html)")
    p.add_argument("--embed-videos", action="store_true",
                   help="put the videos inside the page (base64) so that it can be moved on its own; larger file")
    p.add_argument("--no-plots", action="store_true", help="do not draw missing plots.png from trace.npz")
    p.set_defaults(func=run)


def run(args) -> int:
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
