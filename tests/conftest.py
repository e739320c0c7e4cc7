"""Shared fixtures: write scenario YAML into a temporary folder and load it."""

from __future__ import annotations

import os
import textwrap
from pathlib import Path

import pytest

os.environ.setdefault("MUJOCO_GL", "egl")

REPO = Path(__file__).resolve().parents[1]


@pytest.fixture
def write_scenario(tmp_path):
    """Write ``text`` (YAML, dedented) as ``name`` under tmp_path; return the path."""

    def write(text: str, name: str = "scenario.yaml") -> Path:
        path = tmp_path / name
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_text(textwrap.dedent(text))
        return path

    return write


@pytest.fixture
def load_one():
    from bench.scenario import load_scenarios

    def load(path) -> object:
        scenarios = load_scenarios([str(path)])
        assert len(scenarios) == 1
        return scenarios[0]

    return load
