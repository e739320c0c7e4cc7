"""Controller faults end that episode as ``error``/``timeout`` with the tick and time; the run goes on.

The misbehaving controllers are in ``tests/faulty_controllers.py``: each holds
the nominal pose until tick 5 (t = 0.010 s at 500 Hz) and then raises, returns
NaN or the wrong shape, or hangs. A hang is interrupted by the episode's
watchdog (SIGALRM on the main thread of a process), checked here both in this
process and in worker processes; on another thread the call is measured when
it returns.
"""

from __future__ import annotations

import json
import os
import re
import signal
import subprocess
import sys
import threading
from pathlib import Path

import numpy as np
import pytest

import faulty_controllers as fc
from bench.cli import main
from bench.execute.job import Job, run_job
from bench.report.results import write_outcome
from bench.scenario import load_scenarios
from bench.sim.episode import EpisodeLimits

TESTS = Path(__file__).resolve().parent
AT_TICK = "at tick 5 (t=0.010 s)"   # fault tick of the controllers (AT = 5) at the default 500 Hz
FAST = EpisodeLimits(tick_timeout_s=0.2, episode_timeout_s=30.0)


@pytest.fixture(scope="module")
def stand(tmp_path_factory):
    path = tmp_path_factory.mktemp("ctrl") / "stand.yaml"
    path.write_text("name: stand\nduration: 0.4\ncriteria: {no_fall: true}\n")
    return load_scenarios([str(path)])[0]


def run(scenario, controller, limits=FAST):
    return run_job(Job(scenario, controller, None, limits))


def assert_alarm_untouched():
    assert signal.getsignal(signal.SIGALRM) in (signal.SIG_DFL, None)
    assert signal.getitimer(signal.ITIMER_REAL) == (0.0, 0.0)


@pytest.mark.parametrize("controller, words", [
    (fc.Raises(), "controller raised RuntimeError " + AT_TICK + ": deliberate failure in tick 5"),
    (fc.ReturnsNaN(), "controller returned non-finite torques " + AT_TICK),
    (fc.ReturnsInf(), "controller returned non-finite torques " + AT_TICK),
    (fc.WrongShape(), "controller returned torques of shape (13,) " + AT_TICK + "; expected 12 torques"),
    (fc.WrongShape2D(), "controller returned torques of shape (12, 1) " + AT_TICK),
    (fc.NotNumbers(), "controller returned a non-numeric value " + AT_TICK),
    (fc.ReturnsNone(), "controller returned None " + AT_TICK),
], ids=lambda x: type(x).__name__ if not isinstance(x, str) else "")
def test_controller_fault_is_an_error_naming_tick_and_time(stand, tmp_path, controller, words):
    out = run(stand, controller)
    r = out.result
    assert r["status"] == "error" and r["passed"] is False
    assert words in r["reason"]
    # The ticks before the fault are kept and written as whole files.
    assert len(out.trace) == 5
    written = write_outcome(tmp_path, stand.slug, out)
    assert json.loads(written.read_text())["reason"] == r["reason"]


def test_reset_that_raises_is_an_error(stand):
    r = run(stand, fc.RaisesInReset()).result
    assert r["status"] == "error"
    assert r["reason"] == "controller raised ValueError in reset(): deliberate failure in reset"


@pytest.mark.parametrize("controller", [fc.SpinsForever(), fc.SleepsForever()], ids=["spins", "sleeps"])
def test_hung_controller_is_interrupted_by_the_per_tick_limit(stand, controller):
    out = run(stand, controller)
    r = out.result
    assert r["status"] == "timeout"
    assert r["reason"].startswith("controller did not return within the per-tick limit of 0.2 s " + AT_TICK)
    elapsed = float(re.search(r"interrupted after ([0-9.]+) s", r["reason"]).group(1))
    assert elapsed >= 0.2
    assert len(out.trace) == 5 and out.trace["controller_ms"][-1] > 0
    assert_alarm_untouched()


def test_hung_controller_is_interrupted_by_the_episode_limit(stand):
    r = run(stand, fc.SpinsForever(), EpisodeLimits(tick_timeout_s=60.0, episode_timeout_s=0.3)).result
    assert r["status"] == "timeout"
    assert r["reason"].startswith("episode exceeded the wall-clock limit of 0.3 s " + AT_TICK)
    assert_alarm_untouched()


def test_zero_turns_a_limit_off(stand):
    """``--tick-timeout 0`` / ``--episode-timeout 0``: no limit, not an instant timeout."""
    once = fc.SlowOnce()
    once.at = 5
    once.SLEEP_S = 0.05
    r = run(stand, once, EpisodeLimits(tick_timeout_s=0.0, episode_timeout_s=0.0)).result
    assert r["status"] == "passed", r["reason"]
    # the same call is over a per-tick limit smaller than it
    once = fc.SlowOnce()
    once.at = 5
    once.SLEEP_S = 0.05
    r = run(stand, once, EpisodeLimits(tick_timeout_s=0.01, episode_timeout_s=0.0)).result
    assert r["status"] == "timeout" and "per-tick limit of 0.01 s" in r["reason"], r["reason"]


def test_slow_controller_hits_the_episode_limit(stand):
    # every call 20 ms, under the per-tick limit; 0.3 s are used up after about 15 ticks
    r = run(stand, fc.Slow(), EpisodeLimits(tick_timeout_s=1.0, episode_timeout_s=0.3)).result
    assert r["status"] == "timeout"
    m = re.match(r"episode exceeded the wall-clock limit of 0\.3 s at tick (\d+) \(t=([0-9.]+) s\)", r["reason"])
    assert m, r["reason"]
    assert 5 <= int(m.group(1)) <= 16
    assert float(m.group(2)) == pytest.approx(int(m.group(1)) * 0.002)


def test_controller_that_swallows_the_interruption_still_times_out(stand):
    r = run(stand, fc.SwallowsOnce()).result
    assert r["status"] == "timeout"
    assert re.match(r"controller took [0-9.]+ s " + re.escape(AT_TICK) + r", over the per-tick limit of 0\.2 s",
                    r["reason"])


def test_off_the_main_thread_a_slow_call_is_measured(stand):
    box = {}
    worker = threading.Thread(target=lambda: box.setdefault("out", run(stand, fc.SlowOnce())))
    worker.start()
    worker.join()
    r = box["out"].result
    assert r["status"] == "timeout"
    assert re.match(r"controller took 0\.[3-9]\d s " + re.escape(AT_TICK), r["reason"]), r["reason"]


def test_an_alarm_handler_already_installed_is_left_alone(stand):
    calls = []

    def mine(*a):
        calls.append(a)

    previous = signal.signal(signal.SIGALRM, mine)
    try:
        r = run(stand, fc.SlowOnce()).result
        assert signal.getsignal(signal.SIGALRM) is mine  # still this handler, never the episode's
        assert signal.getitimer(signal.ITIMER_REAL) == (0.0, 0.0)
    finally:
        signal.signal(signal.SIGALRM, previous)
    assert r["status"] == "timeout" and r["reason"].startswith("controller took")  # measured, not interrupted
    assert calls == []


def test_a_well_behaved_episode_leaves_no_timer_behind(stand):
    r = run(stand, fc._PD(at=10**9)).result
    assert r["status"] == "passed"
    assert_alarm_untouched()


def test_wild_but_finite_torques_are_clipped_to_the_limits(stand):
    out = run(stand, fc.WildTorques())
    assert out.result["status"] in ("passed", "failed")  # a verdict, not a fault
    tau, limit = out.trace["joint_torque"], out.trace["torque_limit"]
    assert np.all(np.abs(tau) <= limit + 1e-12)
    assert np.isfinite(out.trace["qpos"]).all()


def test_default_limits_and_options():
    assert EpisodeLimits() == EpisodeLimits(tick_timeout_s=2.0, episode_timeout_s=600.0)
    from bench.cli import build_parser

    args = build_parser().parse_args(["run", "x.yaml"])
    assert (args.tick_timeout, args.episode_timeout) == (2.0, 600.0)


SUITE = {"long.yaml": "name: long\nduration: 1.0\ncriteria: {no_fall: true}\n",
         "short.yaml": "name: short\nduration: 0.2\ncriteria: {no_fall: true}\n"}


def _suite(tmp_path) -> Path:
    folder = tmp_path / "suite"
    folder.mkdir()
    for name, text in SUITE.items():
        (folder / name).write_text(text)
    return folder


def _check_run(out: Path) -> None:
    summary = json.loads((out / "summary.json").read_text())
    by_id = {e["scenario"]: e for e in summary["results"]}
    assert by_id["long"]["status"] == "timeout"
    assert by_id["long"]["reason"].startswith("controller did not return within the per-tick limit of 0.2 s "
                                              "at tick 200 (t=0.400 s)")
    assert by_id["short"]["status"] == "passed"   # the run went on after the hung episode


def test_run_goes_on_after_a_hung_controller_in_process(tmp_path, capsys):
    out = tmp_path / "res"
    rc = main(["run", str(_suite(tmp_path)), "--controller", "faulty_controllers:SpinsLate", "--in-process",
               "--tick-timeout", "0.2", "--out", str(out), "--no-plots", "--no-history"])
    assert rc == 1
    _check_run(out)
    assert "Traceback" not in capsys.readouterr().err


def test_run_goes_on_after_a_hung_controller_in_worker_processes(tmp_path):
    out = tmp_path / "res"
    env = dict(os.environ, PYTHONPATH=os.pathsep.join([str(TESTS), os.environ.get("PYTHONPATH", "")]))
    proc = subprocess.run([sys.executable, "-m", "bench", "run", str(_suite(tmp_path)), "--controller",
                           "faulty_controllers:SpinsLate", "--workers", "2", "--tick-timeout", "0.2",
                           "--out", str(out), "--no-plots", "--no-history"],
                          capture_output=True, text=True, env=env, timeout=120)
    assert proc.returncode == 1, proc.stderr
    assert "Traceback" not in proc.stderr + proc.stdout
    _check_run(out)   # it ended at all: the hung worker was interrupted, not waited for
