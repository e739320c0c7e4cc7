"""The external-controller protocol (QBX 1): a Python script in tests/fixtures/external acts as the program."""

from __future__ import annotations

import shlex
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from bench.controllers import registry
from bench.controllers.external import ExternalController, ExternalControllerError
from bench.controllers.simple import JointPDController
from bench.execute.job import Job, run_job
from bench.scenario import load_scenarios

HERE = Path(__file__).parent
SCRIPT = HERE / "fixtures" / "external" / "pd_controller.py"
SCENARIO = HERE / "fixtures" / "bench_plugin" / "stand-1s.yaml"
KP, KD = 60.0, 2.0
#: Metrics that measure the machine, not the simulation.
TIMING = {"controller_ms_p50", "controller_ms_p99", "controller_ms_max"}


@pytest.fixture(scope="module")
def scenario():
    return load_scenarios([str(SCENARIO)])[0]


def external(*args: str, **kw) -> ExternalController:
    return ExternalController([sys.executable, str(SCRIPT), "--kp", str(KP), "--kd", str(KD), *args], **kw)


def test_same_result_as_the_in_process_controller(scenario):
    # The protocol carries every double exactly (shortest round-trip text), so a program computing the
    # same PD law gives bit-identical physics.
    inproc = run_job(Job(scenario, JointPDController(kp=KP, kd=KD))).result
    ext = run_job(Job(scenario, external())).result
    assert ext["status"] == inproc["status"] == "passed"
    assert ext["sim_time_s"] == inproc["sim_time_s"]
    same = {k: v for k, v in inproc["metrics"].items() if k not in TIMING}
    assert {k: ext["metrics"][k] for k in same} == same


def test_exec_name_resolves_through_the_registry(scenario):
    name = "exec:" + shlex.join([sys.executable, str(SCRIPT), "--stats", "--comments"])
    cname, ctrl = registry.make(name)
    assert cname == name and isinstance(ctrl, ExternalController)
    r = run_job(Job(scenario, name)).result
    assert r["status"] == "passed" and r["controller"] == name
    # '#' lines are skipped; the STATS answer to BYE becomes controller.* metrics.
    assert r["metrics"]["controller.ticks"] == 250.0
    assert r["metrics"]["controller.answered"] == 1.0


@pytest.mark.parametrize("args, status, words", [
    (["--die-at", "5"], "error", ["exited with code 3", "at tick 5", "giving up (asked to die)"]),
    (["--garbage-at", "2"], "error", ["'hello from the controller'", "at tick 2", "expected 'TAU 2'"]),
    (["--short-at", "1"], "error", ["at tick 1", "followed by 12 torques"]),
    (["--wrong-tick-at", "4"], "error", ["for tick '11'", "at tick 4"]),
    (["--version", "3"], "error", ["in reset()", "protocol version '3'", "QBX 1 and 2"]),
    (["--hang-at", "3"], "timeout", ["ExternalControllerTimeout", "within 0.3 s", "at tick 3"]),
])
def test_faults_become_the_episode_status_with_a_reason(scenario, args, status, words):
    r = run_job(Job(scenario, external(*args, tick_timeout_s=0.3))).result
    assert r["status"] == status
    for w in words:
        assert w in r["reason"], r["reason"]


def test_missing_program_is_an_error_not_a_traceback(scenario, tmp_path):
    r = run_job(Job(scenario, f"exec:{tmp_path / 'no-such-controller'} --fast")).result
    assert r["status"] == "error"
    assert "cannot start" in r["reason"] and "no-such-controller" in r["reason"]


def test_program_is_ended_after_the_episode(scenario):
    ctrl = external()
    run_job(Job(scenario, ctrl))
    assert ctrl._proc is None   # BYE sent, stdin closed, process reaped


def test_empty_exec_name_is_refused():
    with pytest.raises(ExternalControllerError, match="needs a program"):
        registry.resolve("exec:  ")


@pytest.mark.skipif(not shutil.which("c++"), reason="no C++ compiler")
def test_the_readme_cpp_controller(scenario, tmp_path):
    exe = tmp_path / "pd"
    subprocess.run(["c++", "-O1", "-o", str(exe), str(HERE / "fixtures" / "external" / "pd_controller.cpp")],
                   check=True, capture_output=True, timeout=120)
    inproc = run_job(Job(scenario, JointPDController(kp=KP, kd=KD))).result
    ext = run_job(Job(scenario, f"exec:{exe}")).result
    assert ext["status"] == "passed"
    # %.17g text round-trips doubles too: the same physics bit for bit.
    assert {k: v for k, v in ext["metrics"].items() if k not in TIMING} == \
        {k: v for k, v in inproc["metrics"].items() if k not in TIMING}
