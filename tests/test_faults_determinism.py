"""Same scenario, seed and controller -> the same trace, bit for bit, in this process and in others.

The scenario draws from every random source the bench has (a push train, rough
terrain, sensor noise), so an unseeded or order-dependent draw would show.
The digest covers every trace array except ``controller_ms`` (wall-clock time).
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import textwrap

import numpy as np
import pytest

from bench.execute.job import Job, run_job
from bench.report.results import trace_digest
from bench.scenario import load_scenarios
from bench.sim.episode import EpisodeLimits

RANDOM = """
name: noisy-rough-pushed
duration: 0.6
seed: 4
terrain:
  - rough: {start: -1.0, length: 3.0, height: 0.02}
disturbances:
  - push_train: {start: 0.1, end: 0.5, count: 3, magnitude: [10, 30], duration: [0.02, 0.05]}
faults:
  - sensor_noise: {at: 0, sensor: joint_pos, std: 0.002}
  - sensor_noise: {at: 0, sensor: imu_gyro, std: 0.01}
criteria: {no_fall: false}
"""

CHILD = textwrap.dedent("""
    import json, sys
    from bench.execute.job import Job, run_job
    from bench.scenario import load_scenarios
    sc = load_scenarios([sys.argv[1]])[0]
    seed = None if sys.argv[2] == "-" else int(sys.argv[2])
    print(json.dumps(run_job(Job(sc, "joint-pd", seed)).result["trace_sha256"]))
""")


@pytest.fixture(scope="module")
def scenario_file(tmp_path_factory):
    path = tmp_path_factory.mktemp("det") / "random.yaml"
    path.write_text(textwrap.dedent(RANDOM))
    return path


def _digest(path, seed=None):
    sc = load_scenarios([str(path)])[0]
    out = run_job(Job(sc, "joint-pd", seed, EpisodeLimits()))
    assert out.result["status"] in ("passed", "failed"), out.result["reason"]
    assert out.result["trace_sha256"] == trace_digest(out.trace.arrays)
    return out


def test_same_inputs_same_trace_in_one_process(scenario_file):
    a, b = _digest(scenario_file), _digest(scenario_file)
    assert a.result["trace_sha256"] == b.result["trace_sha256"]
    for key, arr in a.trace.arrays.items():
        if key != "controller_ms":
            assert np.array_equal(arr, b.trace[key]), key
    assert np.any(a.trace["ext_force"] != 0.0)   # the pushes happened


def test_same_inputs_same_trace_across_processes(scenario_file):
    here = _digest(scenario_file).result["trace_sha256"]
    digests = []
    for hash_seed in ("0", "12345"):   # a different str hash order in each child
        env = dict(os.environ, PYTHONHASHSEED=hash_seed)
        proc = subprocess.run([sys.executable, "-c", CHILD, str(scenario_file), "-"], capture_output=True,
                              text=True, env=env, timeout=120)
        assert proc.returncode == 0, proc.stderr
        digests.append(json.loads(proc.stdout.strip().splitlines()[-1]))
    assert digests == [here, here]


def test_another_seed_gives_another_trace(scenario_file):
    assert _digest(scenario_file, seed=5).result["trace_sha256"] != _digest(scenario_file, seed=4).result["trace_sha256"]
