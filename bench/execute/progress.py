"""A one-line progress bar on stderr, drawn only when stderr is a terminal.

``bench run`` on a pipe, in CI or under pytest prints nothing extra: the bar
exists for the person watching a long run. No dependency; it redraws at most
ten times a second and erases itself when closed so that the table that
follows starts on a clean line.
"""

from __future__ import annotations

import shutil
import sys
import time


def _clock(s: float) -> str:
    s = int(round(s))
    h, rem = divmod(s, 3600)
    m, sec = divmod(rem, 60)
    return f"{h}:{m:02d}:{sec:02d}" if h else f"{m}:{sec:02d}"


class Progress:
    """``update()`` once per finished item; ``close()`` at the end (or use it as a context manager)."""

    def __init__(self, total: int, *, label: str = "episodes", stream=None, enabled: bool | None = None,
                 min_interval_s: float = 0.1):
        self.total = max(0, int(total))
        self.label = label
        self.stream = stream if stream is not None else sys.stderr
        if enabled is None:
            isatty = getattr(self.stream, "isatty", None)
            enabled = bool(isatty and isatty())
        self.enabled = enabled
        self.done = 0
        self.not_passed = 0
        self.t0 = time.monotonic()
        self._last_draw = 0.0
        self._drawn = False
        self.min_interval_s = min_interval_s
        if self.enabled and self.total:
            self._draw(force=True)

    def line(self, width: int) -> str:
        """The text of the bar for a terminal ``width`` columns wide."""
        elapsed = time.monotonic() - self.t0
        frac = self.done / self.total if self.total else 1.0
        left = ""
        if 0 < self.done < self.total:
            left = f", ~{_clock(elapsed / self.done * (self.total - self.done))} left"
        tail = f" {self.done}/{self.total} {self.label}  {_clock(elapsed)}{left}"
        if self.not_passed:
            tail += f"  ({self.not_passed} not passed)"
        bar_w = max(0, min(30, width - len(tail) - 3))
        filled = int(round(frac * bar_w))
        bar = f"[{'#' * filled}{'.' * (bar_w - filled)}]" if bar_w >= 5 else ""
        return (bar + tail)[: max(1, width - 1)]

    def _draw(self, force: bool = False) -> None:
        now = time.monotonic()
        if not force and now - self._last_draw < self.min_interval_s:
            return
        self._last_draw = now
        width = shutil.get_terminal_size((80, 20)).columns
        self.stream.write("\r" + self.line(width).ljust(width - 1))
        self.stream.flush()
        self._drawn = True

    def update(self, n: int = 1, *, passed: bool = True) -> None:
        self.done += n
        if not passed:
            self.not_passed += n
        if self.enabled:
            self._draw(force=self.done >= self.total)

    def close(self) -> None:
        if self.enabled and self._drawn:
            width = shutil.get_terminal_size((80, 20)).columns
            self.stream.write("\r" + " " * (width - 1) + "\r")
            self.stream.flush()
            self._drawn = False

    def __enter__(self):
        return self

    def __exit__(self, *exc) -> None:
        self.close()
