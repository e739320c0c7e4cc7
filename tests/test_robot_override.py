"""--robot / --bench-robot: the bundled scenarios on another robot, for a whole run."""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import numpy as np

REPO = Path(__file__).resolve().parents[1]
STAND = REPO / "scenarios/basics/stand-still.yaml"


def _run(*args, cwd) -> subprocess.CompletedProcess:
    env = {**os.environ, "PYTHONPATH": str(REPO)}
    return subprocess.run([sys.executable, "-m", *args], capture_output=True, text=True, cwd=cwd, env=env)


def test_bench_run_on_quad30_replaces_the_robot_and_its_fingerprint(tmp_path):
    a = _run("bench", "run", str(STAND), "--controller", "force-qp-l1", "--out", "q12", "--workers", "1",
             "--no-plots", "--no-history", cwd=tmp_path)
    b = _run("bench", "run", str(STAND), "--controller", "force-qp-l1", "--robot", "quad30", "--out", "q30",
             "--workers", "1", "--no-plots", "--no-history", cwd=tmp_path)
    assert a.returncode == 0 and b.returncode == 0, b.stdout + b.stderr
    ra = json.loads((tmp_path / "q12/stand-still/result.json").read_text())
    rb = json.loads((tmp_path / "q30/stand-still/result.json").read_text())
    assert ra["scenario"] == rb["scenario"] == "stand-still"          # same id, another robot
    assert rb["fingerprint_parts"]["robot"] != ra["fingerprint_parts"]["robot"]
    with np.load(tmp_path / "q30/stand-still/trace.npz") as z:
        assert abs(z["total_mass"][0] - 30.0) < 1e-9 and z["joint_pos"].shape[1] == 12
        # quad30 stands at its own nominal height, not quad12's (0.52 m vs 0.294 m)
        assert abs(z["base_pos"][-1, 2] - 0.52) < 0.05


def test_faults_naming_joints_the_other_robot_lacks_are_reported_at_their_lines(tmp_path):
    p = _run("bench", "check", str(REPO / "scenarios/faults/locked-knee-trot.yaml"), "--robot",
             str(REPO / "tests/fixtures/hex18/manifest.yaml"), cwd=tmp_path)
    assert p.returncode == 2 and "Traceback" not in p.stderr
    assert "locked-knee-trot.yaml:" in p.stderr and "robot 'hex18' has no joint 'RL_knee'" in p.stderr


def test_unknown_robot_is_invalid_input_with_a_suggestion(tmp_path):
    p = _run("bench", "run", str(STAND), "--robot", "quad3", "--out", "out", cwd=tmp_path)
    assert p.returncode == 2 and "did you mean 'quad30'?" in p.stderr and "Traceback" not in p.stderr
    assert not (tmp_path / "out").exists()


def test_pytest_plugin_takes_the_robot_option(tmp_path):
    p = _run("pytest", str(STAND), "--bench-robot=quad30", "--bench-controller=force-qp-l1",
             "--bench-out=out", "--bench-no-history", "-q", "-p", "no:cacheprovider", cwd=tmp_path)
    assert p.returncode == 0, p.stdout + p.stderr
    with np.load(tmp_path / "out/stand-still/trace.npz") as z:
        assert abs(z["total_mass"][0] - 30.0) < 1e-9
    bad = _run("pytest", str(STAND), "--bench-robot=quad3", "-q", "-p", "no:cacheprovider", cwd=tmp_path)
    assert bad.returncode == 4 and "quad30" in (bad.stdout + bad.stderr)
