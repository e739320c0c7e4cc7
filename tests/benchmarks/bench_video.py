"""Benchmark: end-to-end review-video frames per second (replay + render + overlays + encode).

Runs one recorded episode (a standing robot with a payload and a push, joint-pd
controller), then renders its video several times and prints medians: the
end-to-end figure (frames written / wall time of ``render_result``, world
rebuild and encoder start included) and each stage on its own (replay
``mj_forward``, MuJoCo render + read-back, Pillow overlays, H.264 encoding).
It also renders the same frames with shadows and reflections switched on, and
prints how many times faster the default (both off) is. The video itself is
written at ``--fps`` (30 by default); the rendering speed is what this prints.
Default size: the review default, 1280x720.

    MUJOCO_GL=egl python tests/benchmarks/bench_video.py [--repeats 3] [--duration 6] [--width 1280 --height 720]
"""

from __future__ import annotations

import argparse
import os
import statistics
import textwrap
import time
from pathlib import Path
from tempfile import TemporaryDirectory

os.environ.setdefault("MUJOCO_GL", "egl")

from bench.execute.job import Job, run_job  # noqa: E402
from bench.render.encode import Mp4Writer  # noqa: E402
from bench.render.overlays import FrameInfo  # noqa: E402
from bench.render.replay import load_recording  # noqa: E402
from bench.render.scene import FOOT_ARROW_RGBA  # noqa: E402
from bench.render.video import EpisodeView, VideoOptions, frame_rows, render_result  # noqa: E402
from bench.report.results import write_outcome  # noqa: E402
from bench.scenario import load_scenarios  # noqa: E402

SCENARIO = """
name: bench-video
duration: {duration}
payloads:
  - {{name: crate, mass: 3.0, size: [0.16, 0.12, 0.08], offset: [-0.05, 0, 0.09]}}
disturbances:
  - push: {{at: 2.0, duration: 0.2, force: [0, 40, 0]}}
criteria: {{no_fall: true, height_error_max: 0.05}}
"""


def record(tmp: Path, duration: float):
    path = tmp / "bench-video.yaml"
    path.write_text(textwrap.dedent(SCENARIO.format(duration=duration)))
    sc = load_scenarios([str(path)])[0]
    out = run_job(Job(sc, "joint-pd"))
    write_outcome(tmp / "results", sc.slug, out)
    return sc, tmp / "results" / sc.slug


def render_only(rec, sc, opts: VideoOptions) -> float:
    """Frames per second of replay + MuJoCo render + read-back alone (no overlays, no encoding)."""
    view = EpisodeView(rec, opts, sc)
    rows, _ = frame_rows(view.t, float(view.t[0]), view.t_last, opts.fps, opts.slowmo)
    try:
        r = view.renderer
        t0 = time.perf_counter()
        for k in rows:
            if view.camera_path is not None:
                view.camera_path.apply(r.cam, int(k))
            r.update(view.replay.set_row(int(k)))
            r.render()
        return len(rows) / (time.perf_counter() - t0)
    finally:
        view.close()


def stages(rec, sc, opts: VideoOptions) -> dict[str, float]:
    """Frames per second of each stage alone, over the frames of the whole episode."""
    view = EpisodeView(rec, opts, sc)
    rows, times = frame_rows(view.t, float(view.t[0]), view.t_last, opts.fps, opts.slowmo)
    n = len(rows)
    out = {}
    try:
        t0 = time.perf_counter()
        for k in rows:
            view.replay.set_row(int(k))
            view.replay.check()
        out["replay (set qpos, mj_forward, check)"] = n / (time.perf_counter() - t0)
        r = view.renderer
        t0 = time.perf_counter()
        imgs = []
        for k in rows:
            if view.camera_path is not None:
                view.camera_path.apply(r.cam, int(k))
            r.update(view.replay.set_row(int(k)))
            r.add_forces(view.A["foot_pos"][k], view.A["foot_force"][k], FOOT_ARROW_RGBA)
            imgs.append(r.render().copy())
        out["replay + render + read-back"] = n / (time.perf_counter() - t0)
        t0 = time.perf_counter()
        painted = []
        for img, k, t in zip(imgs, rows, times):
            text, over = view.metric.text(int(k), float(t))
            painted.append(view.painter.paint(img, FrameInfo(float(t), view.A["command"][k], text, over, 3.0,
                                                             view.captions(float(t), 1.0))))
        out["overlays (Pillow)"] = n / (time.perf_counter() - t0)
        with TemporaryDirectory() as tmp:
            t0 = time.perf_counter()
            with Mp4Writer(Path(tmp) / "x.mp4", opts.width, opts.height, opts.fps) as wr:
                for p in painted:
                    wr.write(p)
            out["encode (libx264 veryfast)"] = n / (time.perf_counter() - t0)
    finally:
        view.close()
    return out


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--duration", type=float, default=6.0)
    ap.add_argument("--width", type=int, default=1280)
    ap.add_argument("--height", type=int, default=720)
    ap.add_argument("--fps", type=float, default=30.0)
    args = ap.parse_args()
    with TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        sc, rdir = record(tmp, args.duration)
        rec = load_recording(rdir)
        opts = VideoOptions(width=args.width, height=args.height, fps=args.fps, violation_clip=False, preview="none")
        e2e, e2e_rendered = [], []
        rendered = len(frame_rows(rec.trace["t"], 0.0, float(rec.trace["t"][-1]), opts.fps, 1.0)[0])
        held = int(round(opts.hold_end_s * opts.fps))
        for i in range(args.repeats):
            t0 = time.perf_counter()
            render_result(rdir, tmp / "videos", opts, scenario=sc)
            wall = time.perf_counter() - t0
            e2e.append((rendered + held) / wall)
            e2e_rendered.append(rendered / wall)
        per = [stages(rec, sc, opts) for _ in range(args.repeats)]
        plain, shadowed = [], []
        for _ in range(args.repeats):       # interleaved, so that a change in the machine's load hits both
            plain.append(render_only(rec, sc, opts))
            shadowed.append(render_only(rec, sc, VideoOptions(**{**opts.__dict__, "shadows": True})))
        t0 = time.perf_counter()
        render_result(rdir, tmp / "videos-preview", VideoOptions(**{**opts.__dict__, "preview": "gif"}),
                      scenario=sc)
        with_preview = (rendered + held) / (time.perf_counter() - t0)
        size = (tmp / "videos").glob("*.mp4")
        mb = sum(p.stat().st_size for p in size) / 1e6
    print(f"video {args.width}x{args.height} at {args.fps:g} fps, {args.duration:g} s episode: {rendered} rendered "
          f"frames + {held} held verdict frames, {args.repeats} repeats, MUJOCO_GL={os.environ.get('MUJOCO_GL')}")
    print(f"  end-to-end, rendered frames only / wall (world rebuild, encoder start and the held frames' cost "
          f"included): median {statistics.median(e2e_rendered):.1f} frames/s  (goal >= 30)")
    print(f"  end-to-end, all frames written / wall: median {statistics.median(e2e):.1f} frames/s")
    for name in per[0]:
        print(f"  {name:40s} median {statistics.median(p[name] for p in per):7.1f} frames/s")
    mp, ms = statistics.median(plain), statistics.median(shadowed)
    print(f"  render only, shadows+reflections off     median {mp:7.1f} frames/s")
    print(f"  render only, shadows+reflections on      median {ms:7.1f} frames/s  (off is {mp / ms:.1f}x faster)")
    print(f"  end-to-end with the GIF preview (1 run)         {with_preview:7.1f} frames/s")
    print(f"  video frame rate {args.fps:g} fps; rendering keeps up with real time when end-to-end >= {args.fps:g}")
    print(f"  file size {mb:.2f} MB")


if __name__ == "__main__":
    main()
