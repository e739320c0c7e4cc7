"""Side-by-side video of two recorded episodes of the same scenario, time-synchronised.

Each panel is the replay of one result folder (usually two controllers on the
same scenario), with a header naming its controller and verdict. Both panels
show the same simulated instant; an episode that ended early (a fall, an
error) holds its last frame, marked as ended, until the other one finishes.
"""

from __future__ import annotations

import os
from pathlib import Path

from PIL import Image

from bench.render.encode import Mp4Writer
from bench.render.overlays import label_bar
from bench.render.preview import PREVIEW_WIDTH, PreviewCollector, preview_path
from bench.render.replay import RenderInputError, load_recording
from bench.render.video import (EpisodeView, VideoOptions, first_violation, frame_rows, poster_time, record_media,
                                safe_name, save_poster, scenario_stem)

#: Pixels between the two panels.
GAP_PX = 4


def compare_stem(a, b) -> str:
    return f"{scenario_stem(a.scenario_id)}.{safe_name(a.controller)}-vs-{safe_name(b.controller)}"


def render_compare(a_dir: str | Path, b_dir: str | Path, out_dir: str | Path = "videos",
                   opts: VideoOptions | None = None, scenario=None, roots=(), allow_changed_scenario: bool = False) -> Path:
    """Write ``<out>/<scenario>.<A>-vs-<B>.mp4``; each panel is ``opts.width`` x ``opts.height``.

    ``allow_changed_scenario``: the two runs may have used different versions of the scenario file (a
    baseline and a candidate that edited it); each panel is then rebuilt from its own run's file, and the
    replay check still refuses a file edited after its run. Not allowed together with ``scenario``."""
    opts = opts or VideoOptions()
    a, b = load_recording(a_dir), load_recording(b_dir)
    if a.scenario_id != b.scenario_id:
        raise RenderInputError(f"--compare needs two results of the same scenario: {a.dir} is "
                               f"{a.scenario_id!r}, {b.dir} is {b.scenario_id!r}")
    ha, hb = (r.record.content_hash if r.record is not None else r.result.get("content_hash") for r in (a, b))
    if ha and hb and ha != hb and (scenario is not None or not allow_changed_scenario):
        raise RenderInputError(f"--compare: {a.dir} and {b.dir} ran different versions of scenario "
                               f"{a.scenario_id!r} (content_hash differs); re-run both from the same file")
    w, h = opts.width, opts.height
    bar_h = max(16, (h // 14) // 2 * 2)
    views = []
    try:
        for rec in (a, b):
            views.append(EpisodeView(rec, opts, scenario, roots, title=rec.scenario_id))
        bars = [label_bar(w, bar_h, f"{v.rec.controller}: {v.rec.status.upper()}"
                          + (f" - {_reason(v.rec)}" if _reason(v.rec) else ""), v.rec.status) for v in views]
        t0 = min(float(v.t[0]) for v in views)
        t1 = max(v.t_last for v in views)
        step_rows = []
        for v in views:
            rows, times = frame_rows(v.t, t0, t1, opts.fps, opts.slowmo)
            step_rows.append(rows)
        out = Path(out_dir) / f"{compare_stem(a, b)}.mp4"
        canvas = Image.new("RGB", (2 * w + GAP_PX, h + bar_h), (25, 25, 25))
        for i, bar in enumerate(bars):
            canvas.paste(bar, (i * (w + GAP_PX), 0))
        # The preview shows the earliest first violation of the two (or, when both passed, the first's events).
        telling = min((v.rec.result for v in views), key=lambda r: (first_violation(r, t1) or (float("inf"),))[0])
        collector = (PreviewCollector.for_result(telling, t0, t1, opts.slowmo, width=2 * PREVIEW_WIDTH) if opts.preview != "none" else None)
        with Mp4Writer(out, canvas.width, canvas.height, opts.fps) as wr:
            t_poster = min(poster_time(v.rec.result, t0, t1) for v in views)
            poster = None
            panels = [None, None]
            held = [False, False]          # an ended episode's last frame is already on the canvas
            for j, t in enumerate(times):
                for i, v in enumerate(views):
                    ended = float(t) > v.t_last + 1e-9
                    if ended and held[i]:
                        continue
                    how = (v.rec.record.episode_status if v.rec.record is not None else None) or v.rec.status
                    note = f"episode ended at {v.t_last:.2f} s ({how})" if ended else ""
                    panels[i] = v.frame(int(step_rows[i][j]), float(t), opts.slowmo, note=note)
                    held[i] = ended
                    canvas.paste(panels[i], (i * (w + GAP_PX), bar_h))
                if poster is None and t >= t_poster - 1e-9:
                    poster = canvas.copy()
                if collector is not None:
                    collector.offer(float(t), canvas)
                wr.write(canvas)
            for i, v in enumerate(views):
                canvas.paste(v.banner(panels[i]), (i * (w + GAP_PX), bar_h))
            if collector is not None:
                collector.end(canvas)
            for _ in range(int(round(opts.hold_end_s * opts.fps))):
                wr.write(canvas)
        save_poster(poster or canvas, out)
        prev = collector.write(preview_path(out, opts.preview), opts.preview) if collector is not None else None
        for v in views:
            extra = {"preview": os.path.relpath(prev.resolve(), Path(v.rec.dir).resolve())} if prev else {}
            record_media(v.rec.dir, "compare", out, other=str(Path(b_dir if v.rec is a else a_dir)),
                         camera=opts.camera, fps=opts.fps, slowmo=opts.slowmo, width=w, height=h, **extra)
        return out
    finally:
        for v in views:
            v.close()


def _reason(rec) -> str | None:
    record = rec.record
    return record.reason if record is not None else rec.result.get("reason")
