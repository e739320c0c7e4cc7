"""``bench run --cluster tcp://...`` against a real Dask cluster started from its command line.

A scheduler and two single-threaded workers are started with the ``dask``
command of the installed ``distributed`` package, bound to 127.0.0.1 on ports
the system picks. The bundled ``basics`` scenarios run serially and on the
cluster, and every result must be identical bit for bit (status, reason,
criteria, non-timing metrics and the trace digest). Then one worker is killed
with SIGKILL (its whole process group: nanny and worker) while it runs an
episode, after the first result has arrived: the scheduler hands the lost
episode to the other worker, so the run still completes with every episode, each
identical to the serial one. When every worker is lost, the episodes not
finished become errors naming the cause instead of a run that waits forever.
Every process started here is killed at teardown.
"""

from __future__ import annotations

import json
import os
import shutil
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

import pytest

pytest.importorskip("distributed")

from bench.cli import main  # noqa: E402
from bench.execute.fingerprint import is_timing_metric, result_metrics  # noqa: E402

REPO = Path(__file__).resolve().parents[1]
DASK = shutil.which("dask", path=os.path.dirname(sys.executable)) or shutil.which("dask")
SCENARIOS = sorted(str(p) for p in (REPO / "scenarios" / "basics").glob("*.yaml"))
CONTROLLER = "joint-pd"      # the cheapest registered controller: the test is about the path, not the walking
START_TIMEOUT_S = 90
RUN_TIMEOUT_S = 300
HANG_GUARD_S = 120

pytestmark = pytest.mark.skipif(DASK is None, reason="the dask command line (package distributed) is not installed")


def _kill_group(proc: subprocess.Popen) -> None:
    """SIGKILL the process group this test started (the dask command and any child it made)."""
    try:
        os.killpg(proc.pid, signal.SIGKILL)
    except (ProcessLookupError, PermissionError):
        pass
    try:
        proc.wait(timeout=10)
    except subprocess.TimeoutExpired:
        pass


class Cluster:
    def __init__(self, folder: Path):
        self.folder = folder
        self.procs: list[subprocess.Popen] = []
        self.workers: list[subprocess.Popen] = []
        self.address = ""

    def spawn(self, *args: str, log: str) -> subprocess.Popen:
        with open(self.folder / log, "wb") as fh:
            proc = subprocess.Popen([DASK, *args], stdout=fh, stderr=subprocess.STDOUT, stdin=subprocess.DEVNULL,
                                    cwd=self.folder, start_new_session=True)
        self.procs.append(proc)
        return proc

    def start(self, n_workers: int = 2) -> None:
        info = self.folder / "scheduler.json"
        self.spawn("scheduler", "--host", "127.0.0.1", "--port", "0", "--no-dashboard",
                   "--scheduler-file", str(info), log="scheduler.log")
        deadline = time.monotonic() + START_TIMEOUT_S
        while not (info.exists() and info.stat().st_size):
            assert time.monotonic() < deadline, (self.folder / "scheduler.log").read_text()
            assert self.procs[0].poll() is None, (self.folder / "scheduler.log").read_text()
            time.sleep(0.1)
        time.sleep(0.2)   # the file is written in one go, but let the writer finish
        self.address = json.loads(info.read_text())["address"]
        assert self.address.startswith("tcp://127.0.0.1:")
        for i in range(n_workers):
            self.workers.append(self.spawn(
                "worker", "--scheduler-file", str(info), "--host", "127.0.0.1", "--nworkers", "1",
                "--nthreads", "1", "--no-dashboard", "--name", f"w{i}", log=f"worker{i}.log"))
        from distributed import Client

        with Client(self.address, timeout=START_TIMEOUT_S) as client:
            client.wait_for_workers(n_workers, timeout=START_TIMEOUT_S)

    def stop(self) -> None:
        for proc in reversed(self.procs):
            _kill_group(proc)


@pytest.fixture
def cluster(tmp_path):
    c = Cluster(tmp_path)
    try:
        c.start()
        yield c
    finally:
        c.stop()


def _fingerprints(out: Path) -> dict[str, dict]:
    summary = json.loads((out / "summary.json").read_text())
    prints = {}
    for entry in summary["results"]:
        r = json.loads((out / entry["result"]).read_text())
        prints[r["scenario"]] = {
            "status": r["status"], "reason": r["reason"], "sim_time_s": r["sim_time_s"],
            "criteria": [c for c in r["criteria"] if not is_timing_metric(c["name"])],
            "metrics": result_metrics(r), "trace_sha256": r["trace_sha256"],
        }
    assert summary["total"] == len(prints)
    return prints


def _bench_run(out: Path, *extra: str) -> list[str]:
    return [sys.executable, "-m", "bench", "run", *SCENARIOS, "--out", str(out), "--controller", CONTROLLER,
            "--no-plots", "--no-history", *extra]


def test_cluster_from_the_command_line_matches_serial_and_survives_a_killed_worker(cluster, tmp_path):
    assert len(SCENARIOS) >= 4
    serial_code = main(_bench_run(tmp_path / "serial", "--workers", "1")[3:])
    serial = _fingerprints(tmp_path / "serial")
    assert len(serial) == len(SCENARIOS)

    # 1. The same episodes on the cluster: identical bit for bit.
    done = subprocess.run(_bench_run(tmp_path / "dask", "--cluster", cluster.address),
                          capture_output=True, text=True, timeout=RUN_TIMEOUT_S)
    assert done.returncode == serial_code, done.stdout + done.stderr
    assert "Traceback" not in done.stdout + done.stderr
    assert _fingerprints(tmp_path / "dask") == serial

    # 2. Again, killing the worker that is running an episode once the first result is in.
    from distributed import Client

    out = tmp_path / "dask-kill"
    log = open(tmp_path / "dask-kill.log", "wb")
    run = subprocess.Popen(_bench_run(out, "--cluster", cluster.address), stdout=log, stderr=subprocess.STDOUT,
                           start_new_session=True)
    killed = None
    try:
        with Client(cluster.address, timeout=START_TIMEOUT_S) as client:
            deadline = time.monotonic() + RUN_TIMEOUT_S
            pid_of = client.run(os.getpid)                       # worker address -> worker process id
            # the first moment a worker holds an episode (polled: on a fast machine a whole episode takes
            # a fraction of a second, so waiting for a result first can find both workers idle)
            busy: list = []
            while not busy:
                assert run.poll() is None and time.monotonic() < deadline, "the run ended before a worker was seen busy"
                busy = [w for w, keys in client.processing().items() if keys and w in pid_of]
                if not busy:
                    time.sleep(0.005)
            victim = os.getpgid(pid_of[busy[0]])
            killed = next(p for p in cluster.workers if p.pid == victim)
            _kill_group(killed)
        code = run.wait(timeout=RUN_TIMEOUT_S)
    finally:
        if run.poll() is None:
            _kill_group(run)
        log.close()
    text = (tmp_path / "dask-kill.log").read_text()
    assert killed is not None and killed.poll() is not None
    assert code == serial_code, text
    assert "Traceback" not in text
    # Every episode is there, and the one that lost its worker was run again elsewhere: all as serial.
    assert _fingerprints(out) == serial


def test_losing_every_worker_makes_the_unfinished_episodes_errors_instead_of_a_hang(cluster, tmp_path, monkeypatch):
    import bench.execute.dask_cluster as dc
    from distributed import Client

    from bench.execute.job import Job, run_job
    from bench.execute.outcomes import error_outcome
    from bench.scenario import load_scenarios

    monkeypatch.setattr(dc, "NO_WORKER_TIMEOUT_S", 2.0)
    monkeypatch.setattr(dc, "WORKER_POLL_S", 0.2)
    scenarios = load_scenarios(SCENARIOS)
    jobs = [Job(sc, CONTROLLER) for sc in scenarios]
    killed = threading.Event()

    def kill_all_once_busy() -> None:
        with Client(cluster.address, timeout=START_TIMEOUT_S) as client:
            deadline = time.monotonic() + RUN_TIMEOUT_S
            while not any(client.processing().values()) and time.monotonic() < deadline:
                time.sleep(0.02)
        for proc in cluster.workers:
            _kill_group(proc)
        killed.set()

    got: dict = {}

    def run() -> None:   # in a thread, so that a regression (waiting forever) fails instead of hanging
        with dc.DaskExecutor(cluster.address) as ex:
            killer.start()
            got.update(ex.map(run_job, jobs, on_error=error_outcome))

    killer = threading.Thread(target=kill_all_once_busy, daemon=True)
    runner = threading.Thread(target=run, daemon=True)
    runner.start()
    runner.join(timeout=HANG_GUARD_S)
    assert not runner.is_alive(), f"the run still waited for workers {HANG_GUARD_S} s after losing them all"
    killer.join(timeout=30)
    assert killed.is_set()
    assert sorted(got) == list(range(len(jobs)))        # every episode accounted for, once
    lost = [o.result for o in got.values() if o.result["status"] == "error"]
    assert lost, "every episode finished before the workers were killed"
    for r in lost:
        assert r["reason"].startswith(f"no Dask worker was left on {cluster.address} for 2 s"), r["reason"]
