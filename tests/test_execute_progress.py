"""The progress bar: drawn on a terminal, silent otherwise."""

from __future__ import annotations

import io

from bench.execute.progress import Progress


class FakeTTY(io.StringIO):
    def isatty(self) -> bool:
        return True


def test_silent_when_not_a_terminal():
    s = io.StringIO()
    with Progress(5, stream=s) as p:
        for _ in range(5):
            p.update()
    assert s.getvalue() == ""


def test_draws_count_time_and_failures_on_a_terminal():
    s = FakeTTY()
    p = Progress(4, stream=s, min_interval_s=0.0)
    p.update()
    p.update(passed=False)
    text = s.getvalue()
    assert "2/4 episodes" in text and "1 not passed" in text and "left" in text and "[" in text
    p.update()
    p.update()
    p.close()
    assert "4/4 episodes" in s.getvalue()
    assert s.getvalue().endswith("\r")  # erased: the table that follows starts on a clean line


def test_line_fits_a_narrow_terminal():
    p = Progress(1000, stream=io.StringIO())
    p.done = 10
    for width in (20, 40, 80, 200):
        assert len(p.line(width)) < width
