"""A short looping animation (GIF or WebP) beside a review video, small enough for a pull-request comment.

Frames are taken from the main video as it is written (no second render): a
few seconds around the moment that matters (the first violation of a failing
scenario, else the first timed event, else the middle), at a lower frame rate
and a smaller size, ending on the verdict banner. Written as
``<video stem>.preview.gif`` (or ``.webp``) beside the MP4.
"""

from __future__ import annotations

from pathlib import Path

from bench.fileio import atomic_target

#: Length of the preview, s of video, before the verdict frame.
PREVIEW_S = 4.0
#: Frames per second of the preview, and its width in pixels (height keeps the video's aspect ratio).
PREVIEW_FPS = 10.0
PREVIEW_WIDTH = 480
#: How long the closing verdict frame stays up, s.
PREVIEW_HOLD_S = 1.5


def preview_path(video: Path, fmt: str) -> Path:
    video = Path(video)
    return video.with_name(f"{video.stem}.preview.{fmt}")


def preview_window(result: dict, t0: float, t1: float, length_s: float) -> tuple[float, float]:
    """Sim-time window of ``length_s``: around the first violation (mostly before it), else from just before the
    first timed event, else the middle; shifted to lie inside ``[t0, t1]``."""
    from bench.render.video import first_violation

    length_s = min(length_s, t1 - t0)
    fv = first_violation(result, t1)
    events = sorted(float(e.get("t_start", 0.0)) for e in result.get("events") or [] if isinstance(e, dict))
    if fv is not None:
        a = fv[0] - 0.7 * length_s
    elif events:
        a = events[0] - 0.2 * length_s
    else:
        a = 0.5 * (t0 + t1) - 0.5 * length_s
    a = min(max(a, t0), t1 - length_s)
    return a, a + length_s


class PreviewCollector:
    """Takes frames offered in time order when they fall in the window, at :data:`PREVIEW_FPS` of video time."""

    def __init__(self, t_start: float, t_end: float, slowmo: float = 1.0, fps: float = PREVIEW_FPS,
                 width: int = PREVIEW_WIDTH):
        self.t_start, self.t_end = float(t_start), float(t_end)
        self.step = 1.0 / (float(fps) * float(slowmo))       # sim seconds between preview frames
        self.fps, self.width = float(fps), int(width)
        self.frames: list = []
        self._next = self.t_start
        self._end = None

    @classmethod
    def for_result(cls, result: dict, t0: float, t1: float, slowmo: float = 1.0,
                   width: int = PREVIEW_WIDTH) -> "PreviewCollector":
        a, b = preview_window(result, t0, t1, PREVIEW_S / float(slowmo))
        return cls(a, b, slowmo, width=width)

    def _small(self, img):
        from PIL import Image

        w, h = img.size
        if w <= self.width:
            return img.convert("RGB").copy()
        return img.convert("RGB").resize((self.width, max(2, round(h * self.width / w))), Image.Resampling.BILINEAR)

    def offer(self, t: float, img) -> None:
        if self.t_start - 1e-9 <= t <= self.t_end + 1e-9 and t >= self._next - 1e-9:
            self.frames.append(self._small(img))
            self._next = t + self.step

    def end(self, img) -> None:
        """The closing frame (the verdict banner)."""
        self._end = self._small(img)

    def write(self, path: Path, fmt: str = "gif") -> Path:
        """Write the animation (looping forever); returns its path."""
        frames = list(self.frames) + ([self._end] if self._end is not None else [])
        if not frames:
            raise ValueError("no frames for a preview")
        ms = int(round(1000.0 / self.fps))
        durations = [ms] * len(self.frames) + ([int(PREVIEW_HOLD_S * 1000)] if self._end is not None else [])
        path = Path(path)
        path.parent.mkdir(parents=True, exist_ok=True)
        with atomic_target(path) as tmp:
            if fmt == "gif":
                from PIL import Image

                # One adaptive palette per frame (Pillow's fast octree): the overlays' colours stay true.
                pal = [f.quantize(colors=255, method=Image.Quantize.FASTOCTREE) for f in frames]
                pal[0].save(tmp, format="GIF", save_all=True, append_images=pal[1:], duration=durations, loop=0,
                            disposal=1)
            elif fmt == "webp":
                frames[0].save(tmp, format="WEBP", save_all=True, append_images=frames[1:], duration=durations,
                               loop=0, quality=70, method=4)
            else:
                raise ValueError(f"preview format {fmt!r} is not gif or webp")
        return path
