"""Serial, process-pool and CLI runs give bit-identical metrics and traces.

Three short episodes that exercise the sources of run-to-run variation a
parallel runner could disturb: a seeded push train and sensor noise (random
draws), a QP-based controller (numerical libraries in a fresh process), and a
plain PD stand. Everything is compared exactly (float equality, raw array
bytes) except wall-clock measurements (see bench.execute.fingerprint).
"""

from __future__ import annotations

import json
import textwrap
from pathlib import Path

import numpy as np
import pytest

from bench.execute.executors import SerialExecutor, make_executor
from bench.execute.fingerprint import is_timing_metric, outcome_fingerprint, result_metrics
from bench.execute.job import Job, run_job
from bench.execute.outcomes import error_outcome
from bench.execute.process import ProcessExecutor

SCENARIOS = {
    "stand.yaml": """
        name: par-stand
        robot: quad12
        duration: 0.6
        seed: 1
        criteria: {no_fall: true, height_error_max: 0.05}
    """,
    "noisy-pushes.yaml": """
        name: par-noisy-pushes
        robot: quad12
        duration: 0.8
        seed: 11
        disturbances:
          - push_train: {start: 0.1, end: 0.7, count: 3, magnitude: [10, 30], duration: [0.02, 0.05]}
        faults:
          - sensor_noise: {sensor: imu_gyro, std: 0.02}
          - sensor_noise: {sensor: joint_pos, std: 0.001}
        criteria: {no_fall: true}
    """,
    "qp-load.yaml": """
        name: par-qp-load
        robot: quad12
        duration: 0.6
        seed: 2
        payloads:
          - {name: crate, mass: 3.0, size: [0.16, 0.12, 0.08], offset: [-0.1, 0.0, 0.09]}
        criteria: {no_fall: true}
    """,
}
CONTROLLERS = {"par-stand": "joint-pd", "par-noisy-pushes": "joint-pd", "par-qp-load": "force-qp"}


@pytest.fixture(scope="module")
def suite_dir(tmp_path_factory) -> Path:
    d = tmp_path_factory.mktemp("parity")
    for name, text in SCENARIOS.items():
        (d / name).write_text(textwrap.dedent(text))
    return d


@pytest.fixture(scope="module")
def jobs(suite_dir):
    from bench.scenario import load_scenarios

    return [Job(sc, CONTROLLERS[sc.id]) for sc in load_scenarios([str(suite_dir)])]


@pytest.fixture(scope="module")
def serial_prints(jobs):
    out = dict(SerialExecutor().map(run_job, jobs))
    return [outcome_fingerprint(out[i]) for i in range(len(jobs))]


def test_timing_metrics_are_the_only_exclusions():
    assert is_timing_metric("controller_ms_p99") and is_timing_metric("controller.qp_ms_mean")
    assert is_timing_metric("controller_p99_ms_max")
    for name in ("height_error_max", "survival_time_s", "torque_saturation", "controller.qp_fallbacks"):
        assert not is_timing_metric(name)


def test_process_pool_matches_serial_bit_for_bit(jobs, serial_prints):
    with ProcessExecutor(2) as ex:
        got = dict(ex.map(run_job, jobs, on_error=error_outcome))
        assert ex.pool_breaks == 0
    assert sorted(got) == list(range(len(jobs)))
    for i, want in enumerate(serial_prints):
        fp = outcome_fingerprint(got[i])
        assert fp == want, f"{want['scenario']} differs between serial and 2 worker processes"
        assert fp["metrics"], "the comparison must cover real metrics"
    # the runs did real work: the QP stand carried its load, the pushes happened
    assert {fp["status"] for fp in serial_prints} == {"passed"}


def test_make_executor_choices():
    assert make_executor(in_process=True).name == "serial"
    for n in (1, 2):   # one worker is one isolated child process, not this process
        ex = make_executor(n)
        try:
            assert ex.name == "process" and ex.workers == n
        finally:
            ex.close()


def test_cli_workers_2_equals_serial(suite_dir, tmp_path, capsys):
    from bench.cli import main

    base = ["run", str(suite_dir), "--controller", "joint-pd", "--no-plots", "--no-history"]
    assert main(base + ["--out", str(tmp_path / "serial"), "--workers", "1"]) == 0
    assert main(base + ["--out", str(tmp_path / "two"), "--workers", "2"]) == 0
    capsys.readouterr()
    a, b = json.loads((tmp_path / "serial/summary.json").read_text()), json.loads((tmp_path / "two/summary.json").read_text())
    assert [r["scenario"] for r in a["results"]] == [r["scenario"] for r in b["results"]]  # job order, not finish order
    for ra in a["results"]:
        ja = json.loads((tmp_path / "serial" / ra["result"]).read_text())
        jb = json.loads((tmp_path / "two" / ra["result"]).read_text())
        assert result_metrics(ja) == result_metrics(jb)
        assert [c for c in ja["criteria"] if not is_timing_metric(c["name"])] == \
            [c for c in jb["criteria"] if not is_timing_metric(c["name"])]
        assert (ja["status"], ja["reason"], ja["sim_time_s"]) == (jb["status"], jb["reason"], jb["sim_time_s"])
        ta = np.load(tmp_path / "serial" / ra["result"].replace("result.json", "trace.npz"))
        tb = np.load(tmp_path / "two" / ra["result"].replace("result.json", "trace.npz"))
        for key in ta.files:
            if key != "controller_ms":
                assert ta[key].tobytes() == tb[key].tobytes(), (ra["scenario"], key)


def test_bad_workers_and_cluster_are_usage_errors(suite_dir, tmp_path, capsys):
    from bench.cli import main

    with pytest.raises(SystemExit) as e:
        main(["run", str(suite_dir), "--workers", "0"])
    assert e.value.code == 2
    rc = main(["run", str(suite_dir), "--cluster", "nonsense", "--out", str(tmp_path / "x"), "--no-history"])
    assert rc == 2
    assert "expected 'local' or a scheduler address" in capsys.readouterr().err
    assert not (tmp_path / "x").exists()  # nothing was run
