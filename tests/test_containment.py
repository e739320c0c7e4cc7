"""A controller cannot end the run, hang it, or switch its watchdog off.

Whatever a controller raises (``SystemExit`` from ``sys.exit`` or ``argparse``,
``KeyboardInterrupt``, ``GeneratorExit``, any ``BaseException``), wherever it runs
(made, ``reset``, ``step``, ``stats``, the conversion of what it returns), is
that episode's ``error``; a worker process that exits or is stuck in native code
is that episode's ``error``/``timeout``; the rest of the run goes on. The user's
own Ctrl-C still stops the run. The misbehaving controllers are in
``tests/faulty_controllers.py``.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import pytest

import faulty_controllers as fc
from bench.cli import main
from bench.execute.job import Job, run_job
from bench.execute.outcomes import error_outcome
from bench.execute.process import ProcessExecutor
from bench.scenario import load_scenarios
from bench.sim.episode import EpisodeLimits

TESTS = Path(__file__).resolve().parent
AT_TICK = "at tick 5 (t=0.010 s)"
FAST = EpisodeLimits(tick_timeout_s=0.2, episode_timeout_s=30.0)


@pytest.fixture(scope="module")
def stand(tmp_path_factory):
    path = tmp_path_factory.mktemp("contain") / "stand.yaml"
    path.write_text("name: stand\nduration: 0.4\ncriteria: {no_fall: true}\n")
    return load_scenarios([str(path)])[0]


def run(scenario, controller, limits=FAST):
    return run_job(Job(scenario, controller, None, limits))


def assert_alarm_untouched():
    assert signal.getsignal(signal.SIGALRM) in (signal.SIG_DFL, None)
    assert signal.getitimer(signal.ITIMER_REAL) == (0.0, 0.0)
    assert signal.SIGALRM not in signal.pthread_sigmask(signal.SIG_BLOCK, [])


# --- every BaseException is the episode's error ------------------------------------------------------

@pytest.mark.parametrize("controller, words", [
    (fc.ExitsInStep(), "controller raised SystemExit " + AT_TICK + ": exit code 0 (a controller cannot end the run)"),
    (fc.ExitsInReset(), "controller raised SystemExit in reset(): exit code 2"),
    (fc.RaisesKeyboardInterrupt(), "controller raised KeyboardInterrupt " + AT_TICK),
    (fc.RaisesGeneratorExit(), "controller raised GeneratorExit " + AT_TICK + ": deliberate"),
    (fc.RaisesOwnBaseException(), "controller raised Escape " + AT_TICK + ": out of here"),
    (fc.ExitsInStats(), "controller raised SystemExit in stats(): exit code 5"),
    (fc.ReturnsExitingArray(), "controller raised SystemExit converting its torques " + AT_TICK),
], ids=lambda x: type(x).__name__ if not isinstance(x, str) else "")
def test_base_exceptions_from_a_controller_are_its_episode_error(stand, controller, words):
    r = run(stand, controller).result
    assert r["status"] == "error" and r["passed"] is False
    assert r["reason"].startswith(words), r["reason"]
    assert_alarm_untouched()


def test_a_controller_that_exits_while_being_made_is_an_error(stand):
    r = run(stand, "faulty_controllers:ExitsInInit").result
    assert r["status"] == "error"
    assert "could not be made" in r["reason"] and "SystemExit" in r["reason"] and "exit code 3" in r["reason"]


def test_the_users_ctrl_c_still_stops_an_in_process_run(stand):
    """A real SIGINT arriving during a controller call is not turned into that episode's error."""
    assert signal.getsignal(signal.SIGINT) is signal.default_int_handler
    with pytest.raises(KeyboardInterrupt):
        run(stand, fc.SendsSigint())
    assert signal.getsignal(signal.SIGINT) is signal.default_int_handler   # put back as it was
    assert_alarm_untouched()


# --- through `bench run`: exit code 1, every file written, the rest run --------------------------------

SUITE = {"a.yaml": "name: a\nduration: 0.2\ncriteria: {no_fall: true}\n",
         "b.yaml": "name: b\nduration: 0.2\ncriteria: {no_fall: true}\n"}


def _suite(tmp_path) -> Path:
    folder = tmp_path / "suite"
    folder.mkdir()
    for name, text in SUITE.items():
        (folder / name).write_text(text)
    return folder


def _statuses(out: Path) -> dict[str, tuple[str, str]]:
    summary = json.loads((out / "summary.json").read_text())
    for e in summary["results"]:
        assert (out / e["result"]).is_file()
    return {e["scenario"]: (e["status"], e["reason"]) for e in summary["results"]}


@pytest.mark.parametrize("controller, execution, words", [
    ("ExitsInStep", ["--workers", "1"], "controller raised SystemExit at tick 5"),
    ("ExitsInStep", ["--workers", "2"], "controller raised SystemExit at tick 5"),
    ("ExitsInStep", ["--in-process"], "controller raised SystemExit at tick 5"),
    ("ExitsInReset", ["--workers", "1"], "controller raised SystemExit in reset()"),
    ("RaisesKeyboardInterrupt", ["--in-process"], "controller raised KeyboardInterrupt at tick 5"),
    # os._exit cannot be caught: with one worker the episode runs in a child process, not in the bench's own
    ("OsExits", ["--workers", "1"], "the worker process running this episode exited with code 0"),
])
def test_bench_run_reports_every_episode_of_a_controller_that_exits(tmp_path, capsys, controller, execution, words):
    out = tmp_path / "res"
    rc = main(["run", str(_suite(tmp_path)), "--controller", f"faulty_controllers:{controller}", *execution,
               "--out", str(out), "--no-plots", "--no-history"])
    assert rc == 1
    got = _statuses(out)
    assert set(got) == {"a", "b"}
    for status, reason in got.values():
        assert status == "error" and words in reason, reason
    assert "Traceback" not in capsys.readouterr().err


def test_in_process_cannot_be_combined_with_workers_or_a_cluster(tmp_path, capsys):
    suite = _suite(tmp_path)
    for extra in (["--workers", "2"], ["--cluster", "local"]):
        rc = main(["run", str(suite), "--in-process", *extra, "--out", str(tmp_path / "x"), "--no-history"])
        assert rc == 2
        assert "--in-process" in capsys.readouterr().err
    assert not (tmp_path / "x").exists()   # nothing was run


def test_ctrl_c_stops_a_worker_run_promptly_and_keeps_what_was_written(tmp_path):
    """The user's SIGINT (to the whole process group, as a terminal sends it) ends `bench run` with 130."""
    folder = tmp_path / "suite"
    folder.mkdir()
    (folder / "first.yaml").write_text("name: first\nduration: 0.1\n")
    for i in range(4):
        (folder / f"long{i}.yaml").write_text(f"name: long{i}\nduration: 30\n")
    out = tmp_path / "res"
    env = dict(os.environ, PYTHONPATH=os.pathsep.join([str(TESTS), os.environ.get("PYTHONPATH", "")]))
    proc = subprocess.Popen([sys.executable, "-m", "bench", "run", str(folder), "--controller", "joint-pd",
                             "--workers", "1", "--out", str(out), "--no-plots", "--no-history"],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env,
                            start_new_session=True)
    try:
        for _ in range(600):   # wait (up to a minute) for the short episode's result
            if (out / "first" / "result.json").exists():
                break
            time.sleep(0.1)
        assert (out / "first" / "result.json").exists()
        time.sleep(0.5)   # the worker is now in a long episode
        os.killpg(proc.pid, signal.SIGINT)
        _, err = proc.communicate(timeout=30)
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGKILL)
            proc.wait()
    assert proc.returncode == 130, err
    assert "interrupted" in err and "Traceback" not in err
    assert json.loads((out / "first" / "result.json").read_text())["status"] == "passed"
    assert not (out / "long3" / "result.json").exists()   # the run stopped, it did not go on


# --- the parent kills a worker past its episode deadline ----------------------------------------------

def _gone(pid: int) -> bool:
    """True when process ``pid`` no longer runs (gone, or a zombie waiting for a reaper)."""
    try:
        state = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()[0]
    except (OSError, IndexError):
        return True
    return state in ("Z", "X")


@pytest.mark.skipif(not Path("/proc/self/stat").exists(), reason="reads /proc")
def test_a_worker_stuck_in_native_code_or_without_watchdog_is_killed_and_replaced(stand, tmp_path):
    pidfile = tmp_path / "sleep.pid"
    limits = EpisodeLimits(tick_timeout_s=0.3, episode_timeout_s=1.0)
    roomy = EpisodeLimits(tick_timeout_s=30.0, episode_timeout_s=60.0)   # however loaded the machine
    jobs = [Job(stand, fc.StuckInC(pidfile=str(pidfile)), None, limits),
            Job(stand, fc.IgnoresAlarmAndSpins(), None, limits),
            Job(stand, fc._PD(at=10**9), None, roomy),
            Job(stand, fc._PD(at=10**9), None, roomy)]
    with ProcessExecutor(2, kill_grace_s=0.5) as ex:
        got = dict(ex.map(run_job, jobs, on_error=error_outcome))
        assert ex.deadline_kills == 2
        again = ex.run_one(run_job, jobs[2], on_error=error_outcome)   # fresh workers took their places
    for i in (0, 1):
        r = got[i].result
        assert r["status"] == "timeout", r["reason"]
        assert "ran past its wall-clock limit of 1 s" in r["reason"] and "worker process was killed" in r["reason"]
    assert got[2].result["status"] == got[3].result["status"] == again.result["status"] == "passed"
    sleep_pid = int(pidfile.read_text())
    for _ in range(50):
        if _gone(sleep_pid):
            break
        time.sleep(0.1)
    assert _gone(sleep_pid), "the native call's child process outlived its killed worker"


# --- the watchdog cannot be switched off ----------------------------------------------------------------

@pytest.mark.parametrize("controller, changed", [
    (fc.StealsAlarm(), "SIGALRM handler replaced"),
    (fc.StopsAlarmTimer(), "timer stopped or changed"),
    (fc.BlocksAlarm(), "SIGALRM blocked"),
], ids=["handler", "timer", "mask"])
def test_the_watchdog_is_put_back_after_a_controller_changes_it(stand, controller, changed):
    r = run(stand, controller).result
    # the spin from tick 10 on is still interrupted by the per-tick limit
    assert r["status"] == "timeout", r["reason"]
    assert r["reason"].startswith("controller did not return within the per-tick limit of 0.2 s at tick 10"), \
        r["reason"]
    assert len(r["watchdog_restored"]) == 1 and changed in r["watchdog_restored"][0]
    assert r["watchdog_restored"][0].startswith("tick 5 (t=0.010 s)")
    assert_alarm_untouched()


def test_a_well_behaved_controller_leaves_no_watchdog_record(stand):
    r = run(stand, fc._PD(at=10**9)).result
    assert r["status"] == "passed" and r["watchdog_restored"] == []


# --- external programs: their whole process group goes, stderr is a bounded tail -------------------------

def _program(tmp_path, name: str, text: str) -> Path:
    path = tmp_path / name
    path.write_text(textwrap.dedent(text))
    path.chmod(0o755)
    return path


@pytest.mark.skipif(not Path("/proc/self/stat").exists(), reason="reads /proc")
def test_an_exec_wrappers_children_are_killed_with_it(stand, tmp_path):
    """A shell wrapper starts a helper process and the controller program; on a timeout the whole group goes."""
    from bench.controllers.external import ExternalController

    pids = tmp_path / "pids"
    prog = _program(tmp_path, "wrapper.sh", f"""\
        #!/bin/sh
        sleep 60 &
        echo $! > {pids}
        # the controller: answers the handshake, then never a tick
        read line; while [ "$line" != end ]; do read line; done
        echo "READY 1"
        exec sleep 60
        """)
    ctrl = ExternalController([str(prog)], tick_timeout_s=0.3)
    r = run(stand, ctrl, EpisodeLimits(tick_timeout_s=2.0, episode_timeout_s=30.0)).result
    assert r["status"] == "timeout" and "sent no TAU line within 0.3 s" in r["reason"], r["reason"]
    helper = int(pids.read_text())
    for _ in range(50):
        if _gone(helper):
            break
        time.sleep(0.1)
    assert _gone(helper), "the wrapper's background process survived the episode"


def test_an_exec_program_flooding_stderr_reports_its_exit_code_with_a_bounded_tail(stand, tmp_path):
    """200 MB on stderr, then exit code 3: the reason names the code and the last line; memory stays small."""
    import tracemalloc

    from bench.controllers.external import ExternalController

    prog = _program(tmp_path, "flood.py", f"""\
        #!{sys.executable}
        import sys
        block = b"x" * 1023 + b"\\n"
        for _ in range(200 * 1024):          # 200 MB
            sys.stderr.buffer.write(block)
        sys.stderr.buffer.write(b"last words\\n")
        sys.stderr.flush()
        sys.exit(3)
        """)
    ctrl = ExternalController([str(prog)], start_timeout_s=60)
    tracemalloc.start()
    try:
        r = run(stand, ctrl, EpisodeLimits(tick_timeout_s=2.0, episode_timeout_s=120.0)).result
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert r["status"] == "error", r["reason"]
    assert "controller program exited with code 3 during the handshake" in r["reason"]
    assert r["reason"].endswith("| last words")
    assert peak < 32 * 1024 * 1024, f"{peak / 2**20:.0f} MB allocated at the peak: stderr was held whole"


def test_the_stderr_tail_reads_everything_and_keeps_the_end():
    from bench.controllers.external import StderrTail

    r, w = os.pipe()
    tail = StderrTail(r, limit=1000)
    data = bytes(range(256)) * 40_000   # 10 MB
    with os.fdopen(w, "wb") as f:
        f.write(data)
    tail.join(10.0)
    assert tail.total == len(data)
    assert tail.tail() == data[-1000:]
    assert len(tail.buf) <= 2000


def test_an_exec_program_that_exits_is_reported_by_its_exit_code_even_if_stdout_stays_open(stand, tmp_path):
    """A child it left behind holds its stdout open: the wait runs out, but the program's exit is the reason."""
    from bench.controllers.external import ExternalController

    prog = _program(tmp_path, "leaves-a-child.sh", """\
        #!/bin/sh
        sleep 30 &
        echo "giving up" >&2
        exit 3
        """)
    ctrl = ExternalController([str(prog)], start_timeout_s=0.5)
    r = run(stand, ctrl).result
    assert r["status"] == "error", r["reason"]
    assert r["reason"] == "controller raised ExternalControllerError in reset(): controller program exited with " \
                          "code 3 during the handshake; its stderr ends: giving up"
