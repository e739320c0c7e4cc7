"""Physics faults end the episode as ``error`` with the time and MuJoCo's own message, never a silent verdict.

MuJoCo's warning text is compared with MuJoCo's own ``mju_warningText`` (the
function MuJoCo uses to build the message it prints). A scenario cannot set
MuJoCo's arena size, so the full-buffer cases shrink the arena of a built world
(``MjSpec.memory``) the way a huge contact count would fill it.
"""

from __future__ import annotations

import dataclasses
import re
import textwrap

import mujoco
import pytest

import faulty_controllers as fc
from bench.execute.job import Job, run_job
from bench.robot.model import NominalRobot
from bench.scenario import load_scenarios
from bench.sim.episode import EpisodeLimits, run_episode
from bench.world.build import build_world

# A 1 mg bead on a spring of 1e6 N/m: omega = sqrt(k/m) = 1e6 rad/s. MuJoCo's default semi-implicit Euler
# integrator is stable for an undamped oscillator only while dt < 2/omega (textbook bound for symplectic Euler);
# a 10 ms step is 5000 times that, so the bead's motion grows without bound within a few steps.
ABSURD = """
name: absurd-bead
duration: 1.0
timestep: 0.01
control_rate: 100
payloads:
  - {name: bead, type: shifting, mass: 1.0e-6, size: [0.05, 0.05, 0.05], offset: [0, 0, 0.1], axis: x,
     stiffness: 1.0e6, damping: 0.0, travel: 1.0}
criteria: {no_fall: true}
"""

ROUGH = """
name: rough-small-arena
duration: 0.5
terrain:
  - rough: {start: -3, length: 6, height: 0.05, cell_size: 0.01}
criteria: {no_fall: true}
"""


def _scenario(tmp_path, text):
    path = tmp_path / "s.yaml"
    path.write_text(textwrap.dedent(text))
    return load_scenarios([str(path)])[0]


def test_unstable_simulation_is_an_error_with_mujocos_message_and_time(tmp_path, monkeypatch, capfd):
    monkeypatch.chdir(tmp_path)
    sc = _scenario(tmp_path, ABSURD)
    out = run_job(Job(sc, fc._PD(at=10**9), None, EpisodeLimits()))
    r = out.result
    assert r["status"] == "error" and r["passed"] is False
    m = re.match(r"MuJoCo warning at tick (\d+) \(t=([0-9.]+)-([0-9.]+) s\): (.*) \[", r["reason"])
    assert m, r["reason"]
    tick, t0, t1, text = int(m.group(1)), float(m.group(2)), float(m.group(3)), m.group(4)
    assert t0 == pytest.approx(tick * 0.01) and t1 == pytest.approx((tick + 1) * 0.01)
    dof = int(re.search(r"at DOF (\d+)", text).group(1))
    assert text.startswith(mujoco.mju_warningText(int(mujoco.mjtWarning.mjWARN_BADQACC), dof))
    assert "Time = " in text and "mjWARN_BADQACC" in r["reason"]
    assert r["sim_time_s"] == pytest.approx(t1)
    assert r["mujoco_warnings"] and r["mujoco_warnings"][0] == text
    # MuJoCo's default would print the warning and write MUJOCO_LOG.TXT into the working folder.
    assert not (tmp_path / "MUJOCO_LOG.TXT").exists()
    assert "WARNING" not in capfd.readouterr().out
    assert mujoco.get_mju_user_warning() is None  # the capture was undone


def _small_arena(world, memory_bytes):
    world.spec.memory = memory_bytes
    return dataclasses.replace(world, model=world.spec.compile())


def test_constraint_buffer_full_is_an_error_with_mujocos_message(tmp_path):
    sc = _scenario(tmp_path, ROUGH)
    world = _small_arena(build_world(sc), 40_000)
    ep = run_episode(world, sc, fc._PD(at=10**9), NominalRobot(world.robot))
    assert ep.status == "error"
    assert ep.reason.startswith("MuJoCo warning at tick 0 (t=0.000-0.002 s): ")
    # MuJoCo 3.5 on fill the constraint buffer first; 3.3 and 3.4 run out at the contacts
    if "mjWARN_CONTACTFULL" in ep.reason:
        assert "Too many contacts" in ep.reason
    else:
        assert "Insufficient arena memory" in ep.reason and "mjWARN_CNSTRFULL" in ep.reason


def test_mujoco_fatal_error_mid_episode_is_an_error_with_tick_and_time(tmp_path):
    sc = _scenario(tmp_path, ROUGH)
    world = _small_arena(build_world(sc), 100_000)
    ep = run_episode(world, sc, fc._PD(at=10**9), NominalRobot(world.robot))
    assert ep.status == "error"
    m = re.match(r"MuJoCo error at tick (\d+) \(t=([0-9.]+) s\): mj_stackAlloc: out of memory", ep.reason)
    assert m, ep.reason
    assert "\n" not in ep.reason
    assert len(ep.trace) == int(m.group(1))


def test_a_fault_is_never_scored_as_a_pass(tmp_path):
    # no criteria at all would pass an episode that ran to its end; a physics fault still is an error
    sc = _scenario(tmp_path, ABSURD.replace("criteria: {no_fall: true}", "criteria: {no_fall: false}"))
    r = run_job(Job(sc, fc._PD(at=10**9), None, EpisodeLimits())).result
    assert r["status"] == "error" and not r["passed"]
