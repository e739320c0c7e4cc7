"""`bench check` lists what a trials scenario expands into: one line per trial, with its seed and draws."""

from __future__ import annotations

from pathlib import Path

from bench.cli import main as bench_main
from bench.execute.trials import plan
from bench.scenario import load_scenarios

SUITE = Path(__file__).resolve().parents[1] / "scenarios"


def test_check_shows_one_line_per_trial_as_bench_run_would_run_them(capsys):
    path = SUITE / "payload" / "harvest-crate-trials.yaml"
    assert bench_main(["check", str(path)]) == 0
    lines = capsys.readouterr().out.splitlines()
    episodes, seeds, _ = plan(load_scenarios([str(path)]))
    trial_lines = [ln.split() for ln in lines if ln.startswith("      ")]
    assert [t[0] for t in trial_lines] == [e.id for e in episodes] and len(episodes) == 16
    assert [int(t[2]) for t in trial_lines] == [e.seed for e in episodes]
    first = trial_lines[0]
    mass = episodes[0].payloads[0].mass
    assert f"payloads.crate.mass={mass:.4g}," in first
    assert lines[-1] == "1 scenario valid (16 episodes once trials are expanded)"


def test_check_of_plain_scenarios_is_unchanged(capsys):
    assert bench_main(["check", str(SUITE / "basics")]) == 0
    out = capsys.readouterr().out.splitlines()
    assert all(ln.startswith("ok  ") for ln in out[:-1]) and out[-1] == f"{len(out) - 1} scenarios valid"
