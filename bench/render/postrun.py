"""What ``bench run`` leaves besides the results: plots for every scenario, videos when asked.

Called after ``summary.json`` is written. Nothing here can change a verdict or
the exit code: every problem is printed as one line and the run's own files
stay as they are. When no OpenGL back end can be made, one line says what to
install and the remaining videos are skipped.
"""

from __future__ import annotations

import sys
from pathlib import Path


def _foot_names(scenario) -> list[str] | None:
    try:
        from bench.world.build import manifest_for

        return [f.name for f in manifest_for(scenario).feet]
    except Exception:  # noqa: BLE001 - labels only
        return None


def _up_to_date(d: Path) -> bool:
    png = d / "plots.png"
    if not png.is_file():
        return False
    newest = max((d / n).stat().st_mtime for n in ("trace.npz", "result.json") if (d / n).is_file())
    return png.stat().st_mtime >= newest


def after_run(out_dir: str | Path, entries, video: str = "none", video_dir: str | Path = "videos",
              plots: bool = True, opts=None, file=None) -> dict:
    """``entries``: (scenario, slug, result) triples. Returns counts of what was made."""
    file = file or sys.stdout
    out_dir = Path(out_dir)
    made = {"plots": 0, "videos": 0, "problems": 0}
    if plots:
        try:
            from bench.render.plots import plot_result
            from bench.render.replay import score_from_of
        except Exception as exc:  # noqa: BLE001
            print(f"plots: not drawn: {type(exc).__name__}: {exc}", file=file)
            plots = False
    if plots:
        for sc, slug, result in entries:
            d = out_dir / slug
            if not (d / "trace.npz").is_file():
                continue
            try:
                if _up_to_date(d):
                    made["plots"] += 1      # a resumed result whose plots were drawn before
                    continue
                if plot_result(d, score_from_of(sc), _foot_names(sc)) is not None:
                    made["plots"] += 1
            except Exception as exc:  # noqa: BLE001 - one scenario's plot, never the run
                made["problems"] += 1
                print(f"plots: {result.get('scenario', slug)}: not drawn: {type(exc).__name__}: {exc}", file=file)
        if made["plots"]:
            print(f"plots: {made['plots']} x plots.png beside result.json", file=file)
    if video == "none":
        return made
    try:
        from bench.render.gl import RenderUnavailable
        from bench.render.video import VideoOptions, render_result
    except Exception as exc:  # noqa: BLE001
        print(f"video: none made: {type(exc).__name__}: {exc}", file=file)
        return made
    opts = opts or VideoOptions()
    for sc, slug, result in entries:
        if video == "failed" and _status(result) == "passed":
            continue
        d = out_dir / slug
        if not (d / "trace.npz").is_file():
            print(f"video: {result.get('scenario', slug)}: no trace recorded ({result.get('reason')})", file=file)
            continue
        try:
            made["videos"] += len(render_result(d, video_dir, opts, scenario=sc))
        except RenderUnavailable as exc:
            made["problems"] += 1
            print(f"video: none made: {exc}; the simulation results are written", file=file)
            break
        except Exception as exc:  # noqa: BLE001 - one scenario's video, never the run
            made["problems"] += 1
            print(f"video: {result.get('scenario', slug)}: not made: {type(exc).__name__}: {exc}", file=file)
    if made["videos"]:
        print(f"videos: {made['videos']} in {video_dir}/", file=file)
    return made


def _status(result) -> str | None:
    """The status of a result (a run record or a result.json mapping)."""
    from bench.report.record import RunRecord

    return result.status if isinstance(result, RunRecord) else result.get("status")
