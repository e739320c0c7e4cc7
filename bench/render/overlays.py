"""Text and marks drawn onto video frames with Pillow.

One :class:`OverlayPainter` per video: fonts are loaded once and sized from the
frame height. A frame gets a title box (scenario, controller), a status box
(sim time, slow-motion factor, command, carried load, one live metric) and a
caption bar for every timed event acting at that instant; the last frames get
a pass/fail banner, placed where it does not cover the robot.

The live metric is red past its limit, green within it, and neutral (white)
when it has no limit: a colour then would claim a judgement nobody made. The
title box is as wide as its longest line; a label too long to fit beside the
status box is wrapped. Each painted frame leaves its boxes in ``last_layout``
(pixel rectangles ``(x0, y0, x1, y1)``), which the tests read.
"""

from __future__ import annotations

import textwrap
from dataclasses import dataclass, field

import numpy as np
from PIL import Image, ImageDraw, ImageFont

WHITE = (245, 245, 245, 255)
GREY = (200, 200, 200, 255)
BOX = (0, 0, 0, 150)
RED = (235, 60, 50, 255)
GREEN = (40, 185, 80, 255)
#: A value shown without a judgement (no limit applies to it).
NEUTRAL = WHITE
AMBER = (250, 180, 40, 255)
#: Caption colour by event kind (pushes red, loads amber, faults violet).
EVENT_COLOURS = {"push": (200, 40, 40, 215), "steady_force": (200, 40, 40, 215), "attach": (205, 120, 10, 215),
                 "drop": (205, 120, 10, 215), "drain": (205, 120, 10, 215), "mass_step": (205, 120, 10, 215)}
FAULT_COLOUR = (120, 60, 170, 215)
STATUS_COLOURS = {"passed": GREEN, "failed": RED, "error": AMBER, "timeout": AMBER}


def _font(size: int):
    try:
        return ImageFont.load_default(size=size)     # Pillow >= 10.1 with FreeType: a scalable font
    except TypeError:  # pragma: no cover - older Pillow
        return ImageFont.load_default()


@dataclass
class FrameInfo:
    """What the overlay shows at one frame."""

    t: float
    command: np.ndarray
    metric: str = ""
    metric_over: bool | None = False      # None: the metric has no limit (shown neutral, neither red nor green)
    load_kg: float | None = None
    captions: list[tuple[str, str]] = field(default_factory=list)   # (kind, label)
    note: str = ""          # e.g. "episode ended at 2.44 s (fell)"


class OverlayPainter:
    def __init__(self, width: int, height: int, title: str, subtitle: str = "", slowmo: float = 1.0,
                 legend: str = ""):
        self.w, self.h = int(width), int(height)
        s = max(9, round(self.h / 26))
        self.f_small = _font(max(8, round(s * 0.8)))
        self.f = _font(s)
        self.f_big = _font(max(14, round(self.h / 9)))
        self.pad = max(3, s // 3)
        self.line = s + self.pad
        self.title, self.subtitle, self.legend = title, subtitle, legend
        self.slowmo = float(slowmo)
        self.speed = "real time" if abs(self.slowmo - 1.0) < 1e-9 else f"slow motion {self.slowmo:g}x"

    def _box(self, dr: ImageDraw.ImageDraw, xy, lines, fonts, colours, fill=BOX) -> tuple[int, int, int, int]:
        x, y = xy
        widths = [_text_width(dr, t, f) for t, f in zip(lines, fonts)]
        bw = int(np.ceil(max(widths, default=0))) + 2 * self.pad
        bh = len(lines) * self.line + self.pad
        dr.rectangle([x, y, x + bw, y + bh], fill=fill)
        for i, (t, f, c) in enumerate(zip(lines, fonts, colours)):
            dr.text((x + self.pad, y + self.pad // 2 + i * self.line), t, font=f, fill=c)
        return (int(x), int(y), int(x + bw), int(y + bh))

    def title_lines(self, dr: ImageDraw.ImageDraw, max_width: float) -> list[tuple[str, object]]:
        """The title and subtitle as (text, font) lines, each at most ``max_width`` pixels wide where a line
        can be broken (at spaces, then at ``: . ( , =`` and finally anywhere)."""
        key = int(max_width)
        cache = self.__dict__.setdefault("_title_cache", {})
        if key not in cache:             # the status box's width changes little: wrap once per width
            out = []
            for text, font in ((self.title, self.f), (self.subtitle, self.f_small)):
                if text:
                    out += [(ln, font) for ln in _wrap(dr, text, font, key)]
            cache[key] = out
        return cache[key]

    def paint(self, frame: np.ndarray, info: FrameInfo) -> Image.Image:
        img = Image.fromarray(frame)
        dr = ImageDraw.Draw(img, "RGBA")
        m = self.pad
        vx, vy, wz = (float(c) for c in info.command)
        lines = [f"t = {info.t:5.2f} s   {self.speed}", f"cmd vx {vx:+.2f}  vy {vy:+.2f} m/s  yaw {wz:+.2f} rad/s"]
        colours = [WHITE, WHITE]
        if info.load_kg is not None:
            lines.append(f"carried load {info.load_kg:.1f} kg")
            colours.append(WHITE)
        if info.metric:
            lines.append(info.metric)
            colours.append(metric_colour(info.metric_over))
        if info.note:
            lines.append(info.note)
            colours.append(AMBER)
        fonts = [self.f] * len(lines)
        width = max(_text_width(dr, t, self.f) for t in lines) + 2 * self.pad
        status = self._box(dr, (self.w - width - m, m), lines, fonts, colours)
        # The title box takes what the status box leaves (at least a third of the frame), wrapping long labels.
        avail = max(self.w / 3, status[0] - 3 * m) - 2 * self.pad
        tl = self.title_lines(dr, avail)
        title = self._box(dr, (m, m), [t for t, _ in tl], [f for _, f in tl],
                          [WHITE] + [GREY] * (len(tl) - 1))
        y = self.h - m
        if self.legend:
            y -= self.line
            dr.text((m, y), self.legend, font=self.f_small, fill=GREY)
        for kind, label in reversed(info.captions):
            y -= self.line + self.pad
            fill = EVENT_COLOURS.get(kind, FAULT_COLOUR if kind.startswith("fault") else (60, 60, 60, 215))
            tw = _text_width(dr, label, self.f)
            dr.rectangle([m, y, m + tw + 2 * self.pad, y + self.line], fill=fill)
            dr.text((m + self.pad, y + self.pad // 2), label, font=self.f, fill=WHITE)
        self.last_layout = {"title": title, "status": status, "title_lines": [t for t, _ in tl],
                            "bottom": int(y)}
        return img

    def banner_rect(self, status: str, reason: str | None, avoid=None) -> tuple[tuple[int, int, int, int], bool]:
        """Where the verdict banner goes: a full-width band at the middle, just below the top boxes, just above
        the bottom captions, or (covering them, which matter less than the robot on the last frame) at the very
        top or bottom; the first of these that misses ``avoid`` (the robot's pixel box). When every full band
        would cover the robot, a compact one (smaller text, one line of reason) where it covers least. Returns
        the band and whether it is compact."""
        layout = getattr(self, "last_layout", None) or {}
        top_y = max((layout[k][3] for k in ("title", "status") if k in layout), default=0) + self.pad
        bottom_y = layout.get("bottom", self.h) - self.pad
        for compact in (False, True):
            bh = self._banner_height(reason, compact)
            places = [(self.h - bh) // 2, top_y, bottom_y - bh, 0, self.h - bh]
            rects = [(0, y, self.w, y + bh) for y in (int(min(max(y, 0), self.h - bh)) for y in places)]
            if avoid is None:
                return rects[0], False
            best = min(range(len(rects)), key=lambda i: (_overlap(rects[i], avoid), i))
            if _overlap(rects[best], avoid) == 0 or compact:
                return rects[best], compact
        raise AssertionError("unreachable")

    def _banner_height(self, reason: str | None, compact: bool) -> int:
        big = getattr(self.f if compact else self.f_big, "size", 30)
        return big + 3 * self.pad + len(self._reason_lines(reason, compact)) * self.line

    def _reason_lines(self, reason: str | None, compact: bool) -> list[str]:
        small = getattr(self.f, "size", 11)
        return textwrap.wrap(reason or "", max(20, int(self.w / (small * 0.55)) - 4))[:1 if compact else 3]

    def banner(self, img: Image.Image, status: str, reason: str | None, avoid=None) -> Image.Image:
        """The verdict, large, across the frame, away from ``avoid`` (the robot's pixel box ``(x0, y0, x1, y1)``)."""
        img = img.copy()
        dr = ImageDraw.Draw(img, "RGBA")
        colour = STATUS_COLOURS.get(status, AMBER)
        text = {"passed": "PASSED", "failed": "FAILED"}.get(status, status.upper())
        (x0, y0, x1, y1), compact = self.banner_rect(status, reason, avoid)
        font = self.f if compact else self.f_big
        big = getattr(font, "size", 30)
        rlines = self._reason_lines(reason, compact)
        dr.rectangle([x0, y0, x1, y1], fill=(0, 0, 0, 170))
        tw = _text_width(dr, text, font)
        x = (self.w - tw - big * 1.2) / 2
        _mark(dr, x, y0 + self.pad + big * 0.1, big * 0.8, status, colour)
        dr.text((x + big * 1.2, y0 + self.pad), text, font=font, fill=colour)
        y = y0 + 2 * self.pad + big
        for ln in rlines:
            lw = _text_width(dr, ln, self.f)
            dr.text(((self.w - lw) / 2, y), ln, font=self.f, fill=WHITE)
            y += self.line
        self.last_layout = {**(getattr(self, "last_layout", None) or {}), "banner": (x0, y0, x1, y1),
                            "banner_compact": compact}
        return img


def metric_colour(over: bool | None):
    """Red past the limit, green within it, neutral when there is no limit to be within."""
    if over is None:
        return NEUTRAL
    return RED if over else GREEN


def _text_width(dr: ImageDraw.ImageDraw, text: str, font) -> float:
    """Pixels from the pen position to the right edge of the inked text (a bounding box, not just the advance:
    a glyph can reach past its advance)."""
    if not text:
        return 0.0
    return max(float(dr.textlength(text, font=font)), float(dr.textbbox((0, 0), text, font=font)[2]))


def _wrap(dr: ImageDraw.ImageDraw, text: str, font, max_width: float) -> list[str]:
    """``text`` broken into lines no wider than ``max_width`` px, at the latest break point that fits
    (a single character wider than that still gets a line of its own)."""
    lines, rest = [], str(text)
    while rest and _text_width(dr, rest, font) > max_width:
        fit, cut = 1, 0
        for i in range(1, len(rest) + 1):
            if _text_width(dr, rest[:i], font) > max_width:
                break
            fit = i
            if rest[i - 1] in " :.(,=/_-":
                cut = i
        cut = cut or fit
        lines.append(rest[:cut].rstrip())
        rest = rest[cut:].lstrip()
    if rest:
        lines.append(rest)
    return lines


def _overlap(a, b) -> float:
    """Area shared by two rectangles ``(x0, y0, x1, y1)``."""
    w = min(a[2], b[2]) - max(a[0], b[0])
    h = min(a[3], b[3]) - max(a[1], b[1])
    return max(0.0, w) * max(0.0, h)


def _mark(dr: ImageDraw.ImageDraw, x: float, y: float, size: float, status: str, colour) -> None:
    """A tick for a pass, a cross otherwise, drawn as lines (no font has to carry the glyph)."""
    w = max(2, int(size / 6))
    if status == "passed":
        dr.line([(x, y + size * 0.55), (x + size * 0.38, y + size * 0.9), (x + size, y + size * 0.1)],
                fill=colour, width=w, joint="curve")
    else:
        dr.line([(x, y), (x + size, y + size)], fill=colour, width=w)
        dr.line([(x, y + size), (x + size, y)], fill=colour, width=w)


def label_bar(width: int, height: int, text: str, status: str) -> Image.Image:
    """A header strip naming a panel of a side-by-side video, coloured by its verdict."""
    img = Image.new("RGB", (int(width), int(height)), (25, 25, 25))
    dr = ImageDraw.Draw(img)
    f = _font(max(9, round(height * 0.55)))
    colour = STATUS_COLOURS.get(status, AMBER)
    dr.rectangle([0, 0, max(4, height // 4), height], fill=colour)
    room = width - (height // 4 + 6) - 4
    if _text_width(dr, text, f) > room:          # too long for the strip: cut at a word and say so
        while text and _text_width(dr, text + "...", f) > room:
            text = text[:-1]
        text = text.rstrip(" ,;:-") + "..."
    dr.text((height // 4 + 6, (height - getattr(f, "size", 10)) // 2 - 1), text, font=f, fill=colour[:3])
    return img
