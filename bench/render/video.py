"""Review videos of recorded episodes: replay, render, overlay, encode.

``render_result`` turns one scenario's result folder into
``<video dir>/<scenario>.<controller>.mp4`` and, when the scenario did not
pass, ``...violation.mp4``: a slowed-down clip around the first violation.
Every frame is the recorded state replayed exactly (see ``replay.py``); the
verdict is read from ``result.json`` and never recomputed here. What was made
is listed in ``media.json`` beside ``result.json`` for the report.
"""

from __future__ import annotations

import json
import math
import os
import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from bench.fileio import atomic_target
from bench.render.camera import follow_path
from bench.render.defaults import CAMERAS, DEFAULT_FPS, DEFAULT_SIZE, PREVIEW_FORMATS
from bench.render.encode import Mp4Writer
from bench.render.overlays import FrameInfo, OverlayPainter
from bench.render.preview import PreviewCollector, preview_path
from bench.render.replay import Recording, build_replay, load_recording, score_from_of
from bench.render.scene import FOOT_ARROW_RGBA, FORCE_SCALE_M_PER_N, FrameRenderer

#: An event caption stays up at least this long in the video, s of video time (readable).
CAPTION_MIN_VIDEO_S = 1.0
MEDIA_FILE = "media.json"
_UNSAFE = re.compile(r"[^A-Za-z0-9._-]+")


@dataclass
class VideoOptions:
    camera: str = "follow"
    width: int = DEFAULT_SIZE[0]
    height: int = DEFAULT_SIZE[1]
    fps: float = DEFAULT_FPS
    slowmo: float = 1.0          # the video runs this many times slower than simulated time
    samples: int = 0             # multisample anti-aliasing (0 = off, fastest on a software renderer)
    hold_end_s: float = 1.5      # verdict banner at the end, s of video
    violation_clip: bool = True
    clip_before_s: float = 1.5   # simulated time before the first violation
    clip_after_s: float = 1.0
    clip_slowmo: float = 4.0     # the clip runs at least this slow
    arrows: bool = True
    preview: str = "gif"         # animated preview beside the main video: gif, webp or none
    shadows: bool = False        # shadows and reflections: several times slower on a CPU renderer

    def problems(self) -> list[str]:
        out = []
        if self.camera not in CAMERAS:
            out.append(f"--camera: {self.camera!r} is not one of {', '.join(CAMERAS)}")
        for name in ("width", "height"):
            v = getattr(self, name)
            if not (16 <= v <= 4096) or v % 2:
                out.append(f"--{name}: {v} must be an even number of pixels from 16 to 4096")
        if not (1 <= self.fps <= 240):
            out.append(f"--fps: {self.fps:g} must be from 1 to 240")
        if self.preview not in PREVIEW_FORMATS:
            out.append(f"--preview: {self.preview!r} is not one of {', '.join(PREVIEW_FORMATS)}")
        if not (0.01 <= self.slowmo <= 100):
            out.append(f"--slowmo: {self.slowmo:g} must be from 0.01 to 100 (2 = half speed)")
        return out


def safe_name(text: str) -> str:
    return _UNSAFE.sub("-", str(text)).strip(".-") or "x"


def scenario_stem(scenario_id: str) -> str:
    """The scenario's result-folder name (``full-course[trial=3]`` -> ``full-course.trial-3``)."""
    try:
        from bench.scenario.ids import scenario_slug

        return scenario_slug(str(scenario_id))
    except Exception:  # noqa: BLE001
        return safe_name(scenario_id)


def video_stem(rec: Recording) -> str:
    return f"{scenario_stem(rec.scenario_id)}.{safe_name(rec.controller)}"


def frame_rows(t: np.ndarray, t0: float, t1: float, fps: float, slowmo: float) -> tuple[np.ndarray, np.ndarray]:
    """Trace rows (nearest) and their sim times for frames from ``t0`` to ``t1`` at ``fps`` and ``slowmo``."""
    step = 1.0 / (float(fps) * float(slowmo))
    times = t0 + step * np.arange(int(math.floor(max(t1 - t0, 0.0) / step + 1e-9)) + 1)
    idx = np.clip(np.searchsorted(t, times), 0, len(t) - 1)
    prev = np.clip(idx - 1, 0, len(t) - 1)
    idx = np.where(np.abs(t[prev] - times) <= np.abs(t[idx] - times), prev, idx)
    return idx, times


# ---------------------------------------------------------------- the live metric

#: criterion -> (series, label, display scale, unit, format) for the one metric shown live.
_LIVE = {
    "height_error_max": ("height_error", "height error", 1000.0, "mm", "{:+.0f}"),
    "height_error_rms": ("height_error", "height error", 1000.0, "mm", "{:+.0f}"),
    "roll_error_max_deg": ("roll_error_deg", "roll", 1.0, "deg", "{:+.1f}"),
    "roll_error_mean_deg": ("roll_error_deg", "roll", 1.0, "deg", "{:+.1f}"),
    "pitch_error_max_deg": ("pitch_error_deg", "pitch", 1.0, "deg", "{:+.1f}"),
    "pitch_error_mean_deg": ("pitch_error_deg", "pitch", 1.0, "deg", "{:+.1f}"),
    "drift_max": ("drift", "drift", 100.0, "cm", "{:.1f}"),
    "velocity_rmse_max": ("velocity_error", "velocity error", 1.0, "m/s", "{:.2f}"),
    "yaw_rate_rmse_max": ("yaw_rate_error", "yaw-rate error", 1.0, "rad/s", "{:.2f}"),
}


@dataclass
class KeyMetric:
    label: str
    series: np.ndarray
    scale: float
    unit: str
    fmt: str
    limit: float | None
    averaged: bool          # the criterion is over an average: the live value is not itself the criterion
    score_from: float

    def text(self, k: int, t: float) -> tuple[str, bool | None]:
        """The live text and whether it is past its limit (None: no limit, so no judgement to colour)."""
        v = float(self.series[k])
        s = f"{self.label} {self.fmt.format(v * self.scale)} {self.unit}"
        if self.limit is not None:
            s += f"  ({'average ' if self.averaged else ''}limit {self.limit * self.scale:g})"
        else:
            s += "  (no limit)"
        # Before scoring starts nothing is judged either: neutral, like a metric without a limit.
        over = None if self.limit is None or t < self.score_from else bool(abs(v) > self.limit)
        if t < self.score_from:
            s += "  not scored yet"
        return s, over


def key_metric(result: dict, trace, score_from: float) -> KeyMetric:
    """The deciding criterion's own series when it has one, else the trunk height error."""
    from bench.scoring.metrics import compute_metrics

    _, series = compute_metrics(trace, score_from=score_from)
    A = trace.arrays
    series["velocity_error"] = np.linalg.norm(series["v_heading"] - A["command"][:, :2], axis=1)
    series["yaw_rate_error"] = series["yaw_rate"] - A["command"][:, 2]
    rec = _record(result)
    live = [c for c in rec.criteria if c.name in _LIVE] if rec is not None else []
    # the criterion scoring chose as deciding, when it has a series of its own
    chosen = next((c for c in live if rec.deciding is not None and c.name == rec.deciding.name), None)
    c = chosen or next((c for c in live if not c.passed), None) or (live[0] if live else None)
    name = c.name if c else "height_error_max"
    sname, label, scale, unit, fmt = _LIVE[name]
    limit = c.limit if c else None
    return KeyMetric(label, np.asarray(series[sname]), scale, unit, fmt, limit,
                     averaged=name.endswith(("_rms", "_rmse_max", "_mean_deg")), score_from=score_from)


def first_violation(result: dict, t_end: float) -> tuple[float, str] | None:
    """When, and by what, the scenario first went wrong; None when it passed."""
    rec = _record(result)
    if rec is not None and rec.deciding is not None:
        d = rec.deciding
        if rec.passed:
            return None
        if not d.passed and d.first_violation_s is not None:
            return float(d.first_violation_s), f"first violation: {d.name} at {d.first_violation_s:.2f} s"
    # a result written before the deciding criterion was recorded: the same rule over its criteria
    if result.get("status") == "passed":
        return None
    found = [(c["first_violation_s"], c["name"]) for c in result.get("criteria") or []
             if not c.get("passed") and c.get("first_violation_s") is not None]
    if found:
        tv, name = min(found)
        return float(tv), f"first violation: {name} at {tv:.2f} s"
    return float(t_end), f"{result.get('status')}: {result.get('reason') or ''}".strip()


def _record(result: dict):
    """The run record of ``result``, or None for a file this bench cannot read as one (still drawn)."""
    from bench.report.record import RecordError, RunRecord

    try:
        return RunRecord.from_json(result)
    except RecordError:
        return None


# ---------------------------------------------------------------- one episode's frames

class EpisodeView:
    """Frames of one recorded episode: replayed state, arrows, overlays."""

    def __init__(self, rec: Recording, opts: VideoOptions, scenario=None, roots=(), title: str | None = None,
                 width: int | None = None, height: int | None = None):
        self.rec, self.opts = rec, opts
        self.replay = build_replay(rec, scenario, roots)
        self.scenario = self.replay.scenario
        self.w, self.h = int(width or opts.width), int(height or opts.height)
        A = rec.trace.arrays
        self.A, self.t = A, A["t"]
        self.has_load = len(self.replay.world.payloads) > 0
        self.t_last = float(self.t[-1])
        score_from = score_from_of(self.scenario)
        self.metric = key_metric(rec.result, rec.trace, score_from)
        self.events = [(float(e["t_start"]), float(e["t_end"]), str(e["kind"]), str(e["label"]))
                       for e in rec.result.get("events") or []]
        legend = (f"arrows: ground force on each foot (cyan), push (red); 100 N = {100 * FORCE_SCALE_M_PER_N:.1f} m"
                  if opts.arrows else "")
        if self.has_load:
            legend += ("; " if legend else "") + "orange: payload"
        self.painter = OverlayPainter(self.w, self.h, title or f"{rec.scenario_id}",
                                      f"controller {rec.controller}", opts.slowmo, legend)
        self.extra_caption: tuple[float, str] | None = None
        self.camera_path = None
        if opts.camera == "follow":
            self.camera_path = follow_path(A, self.replay.model, self.replay.data,
                                           float(rec.trace.meta.get("nominal_height", 0.3) or 0.3))
            self.replay.set_row(0)
        self.row = 0
        self.renderer = FrameRenderer(self.replay.model, self.w, self.h, samples=opts.samples,
                                      shadows=opts.shadows)   # last: owns GL
        try:
            self.renderer.set_camera(opts.camera)
        except Exception:
            self.renderer.close()
            raise

    def captions(self, t: float, slowmo: float) -> list[tuple[str, str]]:
        min_span = CAPTION_MIN_VIDEO_S / slowmo
        out = [(kind, label) for t0, t1, kind, label in self.events if t0 <= t < max(t1, t0 + min_span)]
        if self.extra_caption and t >= self.extra_caption[0]:
            out.append(("violation", self.extra_caption[1]))
        return out

    def frame(self, k: int, t: float, slowmo: float, note: str = ""):
        """The overlaid frame (a PIL image) for trace row ``k`` shown at sim time ``t``."""
        rep, r, A = self.replay, self.renderer, self.A
        d = rep.set_row(int(k))
        rep.check()
        if self.camera_path is not None:
            self.camera_path.apply(r.cam, int(k))
        r.update(d)
        self.row = int(k)
        if self.opts.arrows:
            r.add_forces(A["foot_pos"][k], A["foot_force"][k], FOOT_ARROW_RGBA)
            if "ext_force" in A:
                r.add_push(A["base_pos"][k], A["ext_force"][k])
        img = r.render()
        text, over = self.metric.text(int(k), float(A["t"][k]))
        load = float(A["payload_mass"][k].sum()) if self.has_load else None
        self.painter.slowmo = slowmo
        self.painter.speed = "real time" if abs(slowmo - 1.0) < 1e-9 else f"slow motion {slowmo:g}x"
        info = FrameInfo(t=min(t, self.t_last), command=A["command"][k], metric=text, metric_over=over, load_kg=load,
                         captions=self.captions(min(t, self.t_last), slowmo), note=note)
        return self.painter.paint(img, info)

    def robot_box(self, k: int | None = None, margin_m: float = 0.12) -> tuple[float, float, float, float] | None:
        """The robot's pixel box at row ``k`` (default: the last frame drawn): the box around the trunk and feet,
        grown by ``margin_m``, projected with the view of the last frame. None when it is behind the camera."""
        k = self.row if k is None else int(k)
        pts = np.vstack([self.A["base_pos"][k][None, :], self.A["foot_pos"][k]])
        lo, hi = pts.min(axis=0) - margin_m, pts.max(axis=0) + margin_m
        corners = np.array([[x, y, z] for x in (lo[0], hi[0]) for y in (lo[1], hi[1]) for z in (lo[2], hi[2])])
        px = self.renderer.project(corners)
        if not np.all(np.isfinite(px)):
            return None
        x0, y0 = np.clip(px.min(axis=0), 0, [self.w, self.h])
        x1, y1 = np.clip(px.max(axis=0), 0, [self.w, self.h])
        return float(x0), float(y0), float(x1), float(y1)

    def banner(self, img):
        return self.painter.banner(img, self.rec.status, self.rec.result.get("reason"), avoid=self.robot_box())

    def close(self) -> None:
        self.renderer.close()


def poster_path(video: Path) -> Path:
    """The still shown before a video plays (a JPEG beside it)."""
    return video.with_suffix(".jpg")


def save_poster(img, video: Path) -> Path:
    p = poster_path(video)
    with atomic_target(p) as tmp:
        img.convert("RGB").save(tmp, "JPEG", quality=82)
    return p


def poster_time(result: dict, t0: float, t1: float) -> float:
    """A telling instant: just after the first violation when there is one, else the middle."""
    fv = first_violation(result, t1)
    if fv is not None:
        return min(max(fv[0] + 0.2, t0), t1)
    return 0.5 * (t0 + t1)


def _write_clip(view: EpisodeView, path: Path, t0: float, t1: float, slowmo: float, fps: float,
                hold_s: float, preview: PreviewCollector | None = None) -> Path:
    rows, times = frame_rows(view.t, t0, t1, fps, slowmo)
    t_poster = poster_time(view.rec.result, t0, t1)
    poster = None
    with Mp4Writer(path, view.w, view.h, fps) as wr:
        img = None
        for k, t in zip(rows, times):
            img = view.frame(k, float(t), slowmo)
            if poster is None and t >= t_poster - 1e-9:
                poster = img
            if preview is not None:
                preview.offer(float(t), img)
            wr.write(img)
        end = view.banner(img)
        if preview is not None:
            preview.end(end)
        for _ in range(int(round(hold_s * fps))):
            wr.write(end)
    save_poster(poster or img, path)
    return path


def record_media(result_dir: Path, kind: str, path: Path, **info) -> None:
    """Add (or replace) one entry of ``media.json`` beside ``result.json``."""
    from bench.report.results import write_json

    mpath = Path(result_dir) / MEDIA_FILE
    try:
        media = json.loads(mpath.read_text()) if mpath.is_file() else {}
    except (OSError, ValueError):
        media = {}
    items = [m for m in media.get("videos", []) if m.get("kind") != kind or m.get("name") != Path(path).name]
    try:
        rel = os.path.relpath(Path(path).resolve(), Path(result_dir).resolve())
    except ValueError:   # another drive
        rel = str(Path(path).resolve())
    items.append({"kind": kind, "name": Path(path).name, "path": rel, **info})
    media["videos"] = items
    write_json(mpath, media)


def render_result(result_dir: str | Path, out_dir: str | Path = "videos", opts: VideoOptions | None = None,
                  scenario=None, roots=()) -> list[Path]:
    """Render one result folder; returns the files written (main video, then the violation clip if any)."""
    opts = opts or VideoOptions()
    rec = load_recording(result_dir)
    out_dir = Path(out_dir)
    stem = video_stem(rec)
    view = EpisodeView(rec, opts, scenario, roots)
    made: list[Path] = []
    try:
        collector = (PreviewCollector.for_result(rec.result, float(view.t[0]), view.t_last, opts.slowmo)
                     if opts.preview != "none" else None)
        main = _write_clip(view, out_dir / f"{stem}.mp4", float(view.t[0]), view.t_last, opts.slowmo, opts.fps,
                           opts.hold_end_s, collector)
        made.append(main)
        extra = {}
        if collector is not None:
            prev = collector.write(preview_path(main, opts.preview), opts.preview)
            extra["preview"] = os.path.relpath(prev.resolve(), Path(rec.dir).resolve())
        record_media(rec.dir, "main", main, camera=opts.camera, fps=opts.fps, slowmo=opts.slowmo,
                     width=opts.width, height=opts.height, **extra)
        fv = first_violation(rec.result, view.t_last)
        if fv is not None and opts.violation_clip:
            tv, text = fv
            view.extra_caption = (tv, text)
            slow = max(opts.slowmo, opts.clip_slowmo)
            t0 = max(float(view.t[0]), tv - opts.clip_before_s)
            t1 = min(view.t_last, tv + opts.clip_after_s)
            clip = _write_clip(view, out_dir / f"{stem}.violation.mp4", t0, t1, slow, opts.fps, opts.hold_end_s)
            made.append(clip)
            record_media(rec.dir, "violation", clip, camera=opts.camera, fps=opts.fps, slowmo=slow,
                         t_start=t0, t_end=t1, first_violation_s=tv, width=opts.width, height=opts.height)
    finally:
        view.close()
    return made
