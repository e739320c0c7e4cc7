"""Text and marks drawn onto video frames with Pillow.

One :class:`OverlayPainter` per video: fonts are loaded once and sized from the
frame height. A frame gets a title box (scenario, controller), a status box
(sim time, slow-motion factor, command, carried load, one live metric) and a
caption bar for every timed event acting at that instant; the last frames get
a pass/fail banner.
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
    metric_over: bool = False
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

    def _box(self, dr: ImageDraw.ImageDraw, xy, lines, fonts, colours, fill=BOX) -> None:
        x, y = xy
        widths = [dr.textlength(t, font=f) for t, f in zip(lines, fonts)]
        bw = int(max(widths, default=0)) + 2 * self.pad
        bh = len(lines) * self.line + self.pad
        dr.rectangle([x, y, x + bw, y + bh], fill=fill)
        for i, (t, f, c) in enumerate(zip(lines, fonts, colours)):
            dr.text((x + self.pad, y + self.pad // 2 + i * self.line), t, font=f, fill=c)

    def paint(self, frame: np.ndarray, info: FrameInfo) -> Image.Image:
        img = Image.fromarray(frame)
        dr = ImageDraw.Draw(img, "RGBA")
        m = self.pad
        self._box(dr, (m, m), [self.title] + ([self.subtitle] if self.subtitle else []),
                  [self.f] + [self.f_small] * bool(self.subtitle), [WHITE, GREY])
        vx, vy, wz = (float(c) for c in info.command)
        lines = [f"t = {info.t:5.2f} s   {self.speed}", f"cmd vx {vx:+.2f}  vy {vy:+.2f} m/s  yaw {wz:+.2f} rad/s"]
        colours = [WHITE, WHITE]
        if info.load_kg is not None:
            lines.append(f"carried load {info.load_kg:.1f} kg")
            colours.append(WHITE)
        if info.metric:
            lines.append(info.metric)
            colours.append(RED if info.metric_over else GREEN)
        if info.note:
            lines.append(info.note)
            colours.append(AMBER)
        fonts = [self.f] * len(lines)
        width = max(dr.textlength(t, font=self.f) for t in lines) + 2 * self.pad
        self._box(dr, (self.w - width - m, m), lines, fonts, colours)
        y = self.h - m
        if self.legend:
            y -= self.line
            dr.text((m, y), self.legend, font=self.f_small, fill=GREY)
        for kind, label in reversed(info.captions):
            y -= self.line + self.pad
            fill = EVENT_COLOURS.get(kind, FAULT_COLOUR if kind.startswith("fault") else (60, 60, 60, 215))
            tw = dr.textlength(label, font=self.f)
            dr.rectangle([m, y, m + tw + 2 * self.pad, y + self.line], fill=fill)
            dr.text((m + self.pad, y + self.pad // 2), label, font=self.f, fill=WHITE)
        return img

    def banner(self, img: Image.Image, status: str, reason: str | None) -> Image.Image:
        """The verdict, large, across the middle of the frame."""
        img = img.copy()
        dr = ImageDraw.Draw(img, "RGBA")
        colour = STATUS_COLOURS.get(status, AMBER)
        text = {"passed": "PASSED", "failed": "FAILED"}.get(status, status.upper())
        small, big = getattr(self.f, "size", 11), getattr(self.f_big, "size", 30)
        rlines = textwrap.wrap(reason or "", max(20, int(self.w / (small * 0.55)) - 4))[:3]
        bh = big + 3 * self.pad + len(rlines) * self.line
        y0 = (self.h - bh) // 2
        dr.rectangle([0, y0, self.w, y0 + bh], fill=(0, 0, 0, 170))
        tw = dr.textlength(text, font=self.f_big)
        x = (self.w - tw - big * 1.2) / 2
        _mark(dr, x, y0 + self.pad + big * 0.1, big * 0.8, status, colour)
        dr.text((x + big * 1.2, y0 + self.pad), text, font=self.f_big, fill=colour)
        y = y0 + 2 * self.pad + big
        for ln in rlines:
            lw = dr.textlength(ln, font=self.f)
            dr.text(((self.w - lw) / 2, y), ln, font=self.f, fill=WHITE)
            y += self.line
        return img


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
    dr.text((height // 4 + 6, (height - getattr(f, "size", 10)) // 2 - 1), text, font=f, fill=colour[:3])
    return img
