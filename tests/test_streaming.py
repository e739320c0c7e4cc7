"""bench run in a CI log (stdout not a terminal): one flushed line per finished episode, then the table."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]


def test_each_finished_episode_is_a_line_before_the_table(tmp_path):
    env = {**os.environ, "PYTHONPATH": str(REPO)}
    proc = subprocess.Popen([sys.executable, "-u", "-m", "bench", "run", str(REPO / "scenarios/basics"),
                             "--workers", "1", "--out", str(tmp_path / "out"), "--no-plots", "--no-history"],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env)
    first = proc.stdout.readline()          # arrives while the run goes on, not at its end
    still_running = proc.poll() is None
    rest, err = proc.communicate(timeout=300)
    lines = [first] + rest.splitlines()
    assert proc.returncode == 0, err
    assert first.startswith("[1/4] ") and still_running
    streamed = [ln for ln in lines if ln.startswith("[")]
    assert [ln.split("]")[0] for ln in streamed] == ["[1/4", "[2/4", "[3/4", "[4/4"]
    assert all(" passed " in ln for ln in streamed)
    table = next(i for i, ln in enumerate(lines) if ln.startswith("scenario "))
    assert table > lines.index(streamed[-1])
    assert lines[-1].startswith("4 passed, 0 failed")
