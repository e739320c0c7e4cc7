"""Any leg count in the bench core: a six-legged test robot through every stage.

``tests/fixtures/hex18`` (drafted by ``bench robot init``, unchanged) goes through
scenario checks, world building, the episode runner, the trace, metrics and
criteria, result files, plots, the review video (where rendering works) and the
HTML report. The reference stacks are quadruped-only and say so.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import yaml

REPO = Path(__file__).resolve().parents[1]
HEX = Path(__file__).resolve().parent / "fixtures" / "hex18"
SCENARIO = """\
name: hex-stand
robot: {manifest: hex18/manifest.yaml}
duration: 2.0
disturbances:
  - {push: {at: 1.0, force: [30, 0, 0], duration: 0.1}}
criteria: {no_fall: true, height_error_max: 0.05}
"""


def _bench(*args, cwd) -> subprocess.CompletedProcess:
    env = {**os.environ, "PYTHONPATH": str(REPO), "MUJOCO_GL": os.environ.get("MUJOCO_GL", "egl")}
    return subprocess.run([sys.executable, "-m", "bench", *args], capture_output=True, text=True, cwd=cwd, env=env)


@pytest.fixture
def hex_folder(tmp_path):
    shutil.copytree(HEX, tmp_path / "hex18")
    (tmp_path / "hex.yaml").write_text(SCENARIO)
    return tmp_path


def test_hexapod_manifest_is_the_draft():
    from bench.robot.draft import draft_manifest, manifest_text

    committed = yaml.safe_load((HEX / "manifest.yaml").read_text())
    assert yaml.safe_load(manifest_text(draft_manifest(HEX / "hex18.xml"), "hex18.xml")) == committed
    assert len(committed["feet"]) == 6 and len(committed["joints"]) == 18


def test_six_legs_run_through_every_stage(hex_folder):
    run = _bench("run", "hex.yaml", "--controller", "joint-pd", "--out", "out", "--workers", "1",
                 "--video", "all", "--video-dir", "vid", "--no-history", cwd=hex_folder)
    assert run.returncode == 0, run.stdout + run.stderr
    res = json.loads((hex_folder / "out/hex-stand/result.json").read_text())
    assert res["status"] == "passed"
    assert {c["name"] for c in res["criteria"]} >= {"no_fall", "height_error_max"}
    with np.load(hex_folder / "out/hex-stand/trace.npz") as z:
        assert z["foot_pos"].shape[1:] == (6, 3) and z["foot_force"].shape[1:] == (6, 3)
        assert z["joint_torque"].shape[1] == 18
        # standing still on six feet: they carry the weight (Newton's second law, vertical, at rest)
        n = len(z["t"])
        weight = z["total_mass"][0] * 9.81
        carried = z["foot_force"][n // 4:n // 2, :, 2].sum(axis=1).mean()
        assert carried == pytest.approx(weight, rel=0.05)
        assert (z["foot_force"][n // 4:n // 2, :, 2].mean(axis=0) > 0.05 * weight).all()   # every foot carries
    assert (hex_folder / "out/hex-stand/plots.png").stat().st_size > 10_000
    videos = list((hex_folder / "vid").glob("*.mp4"))
    if not videos:
        assert "video" in run.stdout     # rendering unavailable here: said, not silent
    report = _bench("report", "out", "-o", "report.html", cwd=hex_folder)
    assert report.returncode == 0, report.stderr
    assert "hex-stand" in (hex_folder / "report.html").read_text()


@pytest.mark.parametrize("controller", ["force-qp", "force-qp-l1"])
def test_reference_stacks_refuse_six_legs_with_a_reason(hex_folder, controller):
    run = _bench("run", "hex.yaml", "--controller", controller, "--out", "out", "--workers", "1", "--no-plots",
                 "--no-history", cwd=hex_folder)
    assert run.returncode == 1
    res = json.loads((hex_folder / "out/hex-stand/result.json").read_text())
    assert res["status"] == "error" and "four-legged robots only" in res["reason"] and "6 feet" in res["reason"]
