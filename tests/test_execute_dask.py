"""The Dask executor on a local cluster: same results as serial, and a dead worker is one episode's error.

One test, because starting a local cluster takes seconds.
"""

from __future__ import annotations

import os
import signal
import textwrap

import pytest

pytest.importorskip("distributed")

from bench.execute.executors import SerialExecutor  # noqa: E402
from bench.execute.fingerprint import outcome_fingerprint  # noqa: E402
from bench.execute.job import Job, run_job  # noqa: E402
from bench.execute.outcomes import error_outcome  # noqa: E402


def test_dask_local_matches_serial_and_survives_a_dead_worker(tmp_path):
    from bench.execute.dask_cluster import DaskExecutor
    from bench.scenario import load_scenarios

    for i, extra in enumerate(["", "disturbances:\n  - push: {at: 0.2, duration: 0.05, force: [0, 30, 0]}\n",
                               "faults:\n  - sensor_noise: {sensor: imu_gyro, std: 0.02}\n"]):
        (tmp_path / f"d{i}.yaml").write_text(textwrap.dedent(f"""\
            name: dask-{i}
            robot: quad12
            duration: 0.5
            seed: {i + 3}
            """) + extra)
    scenarios = load_scenarios([str(tmp_path)])
    jobs = [Job(sc, "joint-pd") for sc in scenarios]
    serial = {i: outcome_fingerprint(o) for i, o in SerialExecutor().map(run_job, jobs)}
    crash = Job(scenarios[0], "test_execute_crash:SegfaultController")

    with DaskExecutor("local", workers=2) as ex:
        assert ex.workers == 2
        got = dict(ex.map(run_job, jobs + [crash], on_error=error_outcome))
        assert ex.worker_deaths >= 1
    for i in range(len(jobs)):
        assert outcome_fingerprint(got[i]) == serial[i], f"{scenarios[i].id} differs between serial and Dask"
    dead = got[len(jobs)].result
    assert dead["status"] == "error" and "worker process" in dead["reason"] and "died" in dead["reason"]


def test_unreachable_scheduler_is_a_message():
    from bench.execute.dask_cluster import DaskExecutor
    from bench.execute.executors import ExecutorError

    with pytest.raises(ExecutorError, match="expected 'local' or a scheduler address"):
        DaskExecutor("localhost:1")


def test_workers_with_other_versions_are_refused():
    from bench.execute.dask_cluster import DaskExecutor
    from bench.execute.executors import ExecutorError, code_fingerprint

    class StubClient:
        def __init__(self, answer):
            self.answer = answer

        def run(self, fn):
            return self.answer

    ex = DaskExecutor.__new__(DaskExecutor)
    ex.address = "tcp://10.0.0.5:8786"
    same = code_fingerprint()
    ex.client = StubClient({"tcp://10.0.0.6:1": same})
    ex.check_workers()  # same versions: accepted
    other = "3.3.0" if same["mujoco"] != "3.3.0" else "3.4.0"
    ex.client = StubClient({"tcp://10.0.0.6:1": dict(same, mujoco=other)})
    with pytest.raises(ExecutorError, match=rf"tcp://10.0.0.6:1 .*mujoco {other} there"):
        ex.check_workers()
    ex.client = StubClient({})
    with pytest.raises(ExecutorError, match="no workers"):
        ex.check_workers()


def test_dask_restarts_a_worker_stuck_in_native_code(tmp_path):
    """Past its limit (+ grace) the episode is a timeout, its worker is restarted, the next episode runs."""
    import faulty_controllers as fc
    from bench.execute.dask_cluster import DaskExecutor
    from bench.scenario import load_scenarios
    from bench.sim.episode import EpisodeLimits

    (tmp_path / "s.yaml").write_text("name: dask-stuck\nrobot: quad12\nduration: 0.3\n")
    (sc,) = load_scenarios([str(tmp_path / "s.yaml")])
    pidfile = tmp_path / "sleep.pid"
    jobs = [Job(sc, fc.StuckInC(pidfile=str(pidfile)), None, EpisodeLimits(tick_timeout_s=0.3, episode_timeout_s=1.0)),
            Job(sc, "joint-pd", None, EpisodeLimits(tick_timeout_s=30.0, episode_timeout_s=120.0))]
    with DaskExecutor("local", workers=1, kill_grace_s=0.5) as ex:
        got = dict(ex.map(run_job, jobs, on_error=error_outcome))
        assert ex.deadline_kills == 1
    assert got[0].result["status"] == "timeout"
    assert "ran past its wall-clock limit of 1 s" in got[0].result["reason"]
    assert got[1].result["status"] == "passed", got[1].result["reason"]
    try:   # the native call's child outlives a restarted Dask worker (only the process executor kills the tree)
        os.kill(int(pidfile.read_text()), signal.SIGKILL)
    except (OSError, ValueError):
        pass
