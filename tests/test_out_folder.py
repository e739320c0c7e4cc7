"""Reusing a results folder: earlier results this run does not replace are named, or removed with --clean."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
STILL = str(REPO / "scenarios/basics/stand-still.yaml")
PUSH = str(REPO / "scenarios/basics/stand-push.yaml")


def _run(*args, cwd):
    env = {**os.environ, "PYTHONPATH": str(REPO)}
    return subprocess.run([sys.executable, "-m", "bench", "run", *args, "--out", "out", "--no-plots", "--workers",
                           "1"], capture_output=True, text=True, cwd=cwd, env=env)


def test_stale_results_are_named_then_removed_with_clean(tmp_path):
    assert _run(STILL, PUSH, cwd=tmp_path).returncode == 0
    (tmp_path / "out" / "notes.txt").write_text("mine")          # not a result folder: never touched
    again = _run(STILL, cwd=tmp_path)
    assert again.returncode == 0
    assert "also holds 1 result folder" in again.stderr and "stand-push" in again.stderr
    assert (tmp_path / "out/stand-push/result.json").is_file()   # kept without --clean
    clean = _run(STILL, "--clean", cwd=tmp_path)
    assert clean.returncode == 0 and "removed 1 earlier result folder" in clean.stderr
    assert not (tmp_path / "out/stand-push").exists()
    assert (tmp_path / "out/stand-still/result.json").is_file() and (tmp_path / "out/notes.txt").is_file()
    assert (tmp_path / "out/history.sqlite").is_file()           # history is kept: it is the point of history
