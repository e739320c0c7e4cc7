"""Under pytest-xdist the trials of one scenario run on several workers, and the verdict is the serial one."""

from __future__ import annotations

import json
import os
import re
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

pytest.importorskip("xdist")

HERE = Path(__file__).resolve().parent
TRIALS = """
name: tri
robot: quad12
duration: 0.4
timestep: 0.002
control_rate: 250
score_from: 0.2
seed: 1
trials: 6
randomize:
  payloads.crate.mass: [0.5, 6.0]
payloads:
  - {name: crate, mass: 2.0, size: [0.2, 0.15, 0.1], offset: [0, 0, 0.08]}
criteria:
  pass_rate_min: 0.5
  height_error_max: 0.003
"""
PYPROJECT = """
[tool.pytest.ini_options]
bench_scenarios = ["scen"]
bench_controller = "joint-pd"
bench_history = "none"
"""


def _pytest(root: Path, *args: str) -> subprocess.CompletedProcess:
    env = {k: v for k, v in os.environ.items() if not k.startswith(("PYTEST_", "COV_"))}
    return subprocess.run([sys.executable, "-m", "pytest", "-p", "no:cacheprovider", "-v", *args], cwd=root,
                          env=env, capture_output=True, text=True, timeout=240)


def test_trials_spread_over_workers_and_keep_the_serial_verdict(tmp_path):
    """One pytest run with two workers (the slow part: starting them) against `bench run` in this process."""
    from bench.cli import main as bench_main

    (tmp_path / "scen").mkdir()
    (tmp_path / "scen" / "tri.yaml").write_text(TRIALS)
    (tmp_path / "pyproject.toml").write_text(PYPROJECT)
    rc = bench_main(["run", str(tmp_path / "scen" / "tri.yaml"), "--controller", "joint-pd", "--in-process",
                     "--out", str(tmp_path / "serial"), "--no-plots", "--no-history"])
    xdist = _pytest(tmp_path, "-n", "2", "--bench-out", "xdist")
    assert xdist.returncode == rc, xdist.stdout + xdist.stderr
    # xdist -v lines: "[gw1] [ 33%] TRIAL PASSED scen/tri.yaml::tri[trial=2]"
    workers = set(re.findall(r"\[(gw\d)\][^\n]*TRIAL \w+ scen/tri\.yaml::tri\[trial=\d\]", xdist.stdout))
    assert workers == {"gw0", "gw1"}, xdist.stdout
    a = json.loads((tmp_path / "serial" / "summary.json").read_text())
    b = json.loads((tmp_path / "xdist" / "summary.json").read_text())
    for t in (a["trials"][0], b["trials"][0]):
        t["source"] = Path(t["source"]).name   # bench run names the file as given, pytest relative to its rootdir
    assert a["trials"] == b["trials"] and a["results"] == b["results"] and len(a["results"]) == 6
    assert 0 < a["trials"][0]["passed"] < 6   # a real mix of passing and failing trials
    for k in range(6):
        ra = json.loads((tmp_path / "serial" / f"tri.trial-{k}" / "result.json").read_text())
        rb = json.loads((tmp_path / "xdist" / f"tri.trial-{k}" / "result.json").read_text())
        assert ra["trace_sha256"] == rb["trace_sha256"] and ra["status"] == rb["status"]
    shutil.rmtree(tmp_path / "xdist")
