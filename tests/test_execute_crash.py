"""A worker process that dies takes only its own episode with it.

The controllers below kill their own process mid-episode, as a native
controller with a memory bug would. They are resolved by module path
(``test_execute_crash:SegfaultController``) inside the worker processes, which
import this file from the tests folder on ``sys.path``. Never run them
serially: they would kill the test process.
"""

from __future__ import annotations

import os
import signal
import textwrap

import pytest

from bench.controllers.simple import JointPDController
from bench.execute.job import Job, run_job
from bench.execute.outcomes import error_outcome
from bench.execute.process import ProcessExecutor, death_reason

CRASH_AT_S = 0.1


class SegfaultController(JointPDController):
    """Dies of SIGSEGV at t = 0.1 s."""

    name = "segfault"

    def step(self, obs, command):
        if obs.t >= CRASH_AT_S:
            os.kill(os.getpid(), signal.SIGSEGV)
        return super().step(obs, command)


class ExitController(JointPDController):
    """Leaves with os._exit(3) at t = 0.1 s (no cleanup, no exception)."""

    name = "exit3"

    def step(self, obs, command):
        if obs.t >= CRASH_AT_S:
            os._exit(3)
        return super().step(obs, command)


@pytest.fixture(scope="module")
def stand(tmp_path_factory):
    from bench.scenario import load_scenarios

    d = tmp_path_factory.mktemp("crash")
    text = """
        name: crash-stand-{i}
        robot: quad12
        duration: 0.4
        seed: {i}
        criteria: {{no_fall: true}}
    """
    for i in range(5):
        (d / f"s{i}.yaml").write_text(textwrap.dedent(text.format(i=i)))
    return load_scenarios([str(d)])


def test_death_reasons_name_the_signal_or_code():
    assert "SIGSEGV" in death_reason(-11) and "-11" in death_reason(-11)
    assert "code 3" in death_reason(3)


def test_segfault_and_exit_become_errors_and_the_rest_completes(stand):
    ctrls = ["joint-pd", "test_execute_crash:SegfaultController", "joint-pd", "test_execute_crash:ExitController",
             "joint-pd"]
    jobs = [Job(sc, c) for sc, c in zip(stand, ctrls)]
    with ProcessExecutor(2) as ex:
        got = dict(ex.map(run_job, jobs, on_error=error_outcome))
        # Each death breaks the pool, but both deaths can fall in one break: when jobs 1 and 3 are
        # running side by side, the pool breaks once with both of them started. Either way each
        # one is then run alone, so the break count is 1 or 2 and nothing else is lost.
        assert 1 <= ex.pool_breaks <= 2
        # the pool is usable again afterwards
        again = dict(ex.map(run_job, jobs[:1], on_error=error_outcome))
    assert sorted(got) == list(range(5))
    status = {i: got[i].result["status"] for i in got}
    assert status == {0: "passed", 1: "error", 2: "passed", 3: "error", 4: "passed"}
    assert "SIGSEGV" in got[1].result["reason"] and "worker process" in got[1].result["reason"]
    assert "exited with code 3" in got[3].result["reason"]
    assert got[1].result["scenario"] == stand[1].id and got[1].trace is None
    assert again[0].result["status"] == "passed"


def test_cli_reports_the_dead_episode_and_goes_on(tmp_path, capsys):
    """Through `bench run`: the dead episode is an `error` in result.json and summary.json, exit code 1."""
    import json

    from bench.cli import main

    (tmp_path / "a.yaml").write_text("name: dies\nrobot: quad12\nduration: 0.3\n")
    rc = main(["run", str(tmp_path / "a.yaml"), "--controller", "test_execute_crash:SegfaultController",
               "--workers", "2", "--out", str(tmp_path / "out"), "--no-plots", "--no-history"])
    assert rc == 1
    summary = json.loads((tmp_path / "out/summary.json").read_text())
    assert summary["errors"] == 1 and summary["results"][0]["status"] == "error"
    assert "SIGSEGV" in summary["results"][0]["reason"]
    assert "SIGSEGV" in capsys.readouterr().out


def test_workers_follow_the_parent_folder_and_import_path(tmp_path, monkeypatch):
    """Workers run in the parent's current folder with its current sys.path, not those the fork server started with."""
    import shutil
    from pathlib import Path

    from bench.scenario import load_scenarios

    with ProcessExecutor(2) as ex:  # the fork server is running before the folder changes
        assert dict(ex.map(abs, [-3])) == {0: 3}
    d = tmp_path / "later"
    shutil.copytree(Path(__file__).resolve().parents[1] / "models" / "quad12", d / "robot")
    (d / "mods").mkdir()
    (d / "mods" / "late_ctrl.py").write_text("from bench.controllers.simple import JointPDController as Late\n")
    (d / "s.yaml").write_text("name: rel\nrobot: {manifest: robot/manifest.yaml}\nduration: 0.2\n")
    monkeypatch.chdir(d)
    monkeypatch.syspath_prepend(str(d / "mods"))
    (sc,) = load_scenarios(["s.yaml"])
    assert not Path(sc.robot.manifest).is_absolute()  # only found from the right folder
    with ProcessExecutor(2) as ex:
        out = dict(ex.map(run_job, [Job(sc, "late_ctrl:Late")], on_error=error_outcome))
    assert out[0].result["status"] == "passed", out[0].result["reason"]
