"""Protocol QBX version 2 (the extra sensors and the gait hint) for exec: programs and sealed children;
version 1 programs keep working unchanged on the same scenarios."""

from __future__ import annotations

import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from bench.controllers.base import Observation, Privileged, SensingInfo
from bench.controllers.external import (
    GAIT_CODES, ExternalController, ObservationLayout, handshake_header, sensing_from_header,
)
from bench.controllers.simple import JointPDController
from bench.execute.job import Job, run_job
from bench.robot.model import NominalRobot
from bench.scenario import load_scenarios
from bench.sim.sensing import sensing_info
from bench.world.build import manifest_for

HERE = Path(__file__).parent
SCRIPT = HERE / "fixtures" / "external" / "pd_controller.py"
KP, KD = 60.0, 2.0
SCENARIO = """
name: v2-step
robot: quad12
duration: 0.3
terrain:
  - blocks: {start: 0.45, heights: [0.10], block_length: 2.0}
sensing:
  privileged: false
  height_scan: {size: [1.6, 0.8], resolution: 0.05, offset: [0.4, 0.0], dropout: 0.05, latency: 0.004}
  foot_force: {mode: 3d, noise: 1.0}
  joint_torque: {noise: 0.1}
criteria:
  no_fall: true
"""


@pytest.fixture(scope="module")
def scenario(tmp_path_factory):
    p = tmp_path_factory.mktemp("v2") / "v2-step.yaml"
    p.write_text(SCENARIO)
    return load_scenarios([str(p)])[0]


def external(*args: str) -> ExternalController:
    return ExternalController([sys.executable, str(SCRIPT), "--kp", str(KP), "--kd", str(KD), *args])


def test_a_version_2_program_gets_the_sensors_and_the_same_physics(scenario):
    inproc = run_job(Job(scenario, JointPDController(kp=KP, kd=KD))).result
    ctrl = external("--protocol", "2", "--stats")
    ext = run_job(Job(scenario, ctrl)).result
    assert ctrl.version == 2
    assert ext["status"] == inproc["status"] == "passed"
    assert ext["trace_sha256"] == inproc["trace_sha256"]     # every double crossed exactly
    m = ext["metrics"]
    assert m["controller.privileged_seen"] == 0.0            # privileged: false -> the fields are absent
    assert abs(m["controller.scan_max"] - 0.10) < 1e-6      # the step ahead, through the protocol
    assert m["controller.scan_nan"] > 0                      # dropout and the latency's empty first ticks: nan
    assert m["controller.force_sum"] > 0 and m["controller.torque_abs"] > 0
    assert m["controller.gait"] == 0.0                       # no gait hint in this scenario: code 0


def test_a_version_1_program_still_works_on_a_sensing_scenario(scenario):
    inproc = run_job(Job(scenario, JointPDController(kp=KP, kd=KD))).result
    ctrl = external("--stats")
    ext = run_job(Job(scenario, ctrl)).result
    assert ctrl.version == 1
    assert ext["status"] == "passed" and ext["trace_sha256"] == inproc["trace_sha256"]


def test_sealed_children_see_the_same_sensors_bit_for_bit(scenario, monkeypatch):
    monkeypatch.syspath_prepend(str(HERE))
    import sensing_controllers

    inproc = run_job(Job(scenario, sensing_controllers.SensingReporter())).result
    sealed = run_job(Job(scenario, "sealed:sensing_controllers:SensingReporter")).result
    assert sealed["status"] == inproc["status"] == "passed", sealed["reason"]
    assert sealed["trace_sha256"] == inproc["trace_sha256"]
    stats = {k: v for k, v in inproc["metrics"].items() if k.startswith("controller.")}
    assert stats and {k: sealed["metrics"][k] for k in stats} == stats
    assert stats["controller.privileged"] == 0.0 and stats["controller.no_truth_ticks"] == 150
    assert stats["controller.foot_3d"] == 1.0 and stats["controller.joint_torque"] == 1.0
    assert abs(stats["controller.scan_max"] - 0.10) < 1e-6 and stats["controller.grid_sum"] != 0.0


def test_layout_round_trip_and_the_gait_hint_code(scenario):
    robot = NominalRobot(manifest_for(scenario))
    info = sensing_info(scenario.sensing)
    J, F = robot.num_joints, robot.num_feet
    rng = np.random.default_rng(3)
    obs = Observation.zeros(J, F)
    obs.t = 0.25
    obs.joint_pos[:] = rng.normal(size=J)
    obs.foot_contact[:] = [True, False, True, True]
    obs.privileged = None
    obs.height_scan = rng.normal(size=info.height_scan_shape)
    obs.height_scan[2, 3] = np.nan
    obs.foot_force = rng.normal(size=(F, 3))
    obs.joint_torque = rng.normal(size=J)
    obs.gait_hint = "bound"
    layout = ObservationLayout(J, F, 2, info)
    nx, ny = info.height_scan_shape
    assert layout.size == 1 + 3 + 4 + 3 + 3 + 2 * J + F + 1 + nx * ny + 3 * F + J + 1   # + the tick
    row = np.zeros(layout.size)
    layout.pack(row, 7, obs, np.array([0.1, 0.2, 0.3]))
    assert row[layout.gait] == GAIT_CODES["bound"] == 4
    back, cmd = Observation.zeros(J, F), np.zeros(3)
    assert layout.unpack(row, back, cmd) == 7
    assert back.privileged is None and back.gait_hint == "bound"
    np.testing.assert_array_equal(back.height_scan, obs.height_scan)
    np.testing.assert_array_equal(back.foot_force, obs.foot_force)
    np.testing.assert_array_equal(back.joint_torque, obs.joint_torque)
    np.testing.assert_array_equal(back.foot_contact, obs.foot_contact)
    # Version 1 keeps its layout: the privileged numbers are there, nan when withheld; no sensors.
    v1 = ObservationLayout(J, F, 1, info)
    assert v1.size == 2 + 3 + 4 + 3 + 3 + 2 * J + F + 6 and v1.scan is None and v1.gait is None
    row1 = np.zeros(v1.size)
    v1.pack(row1, 7, obs, np.zeros(3))
    assert np.isnan(row1[v1.privileged]).all()
    obs.privileged = Privileged(base_pos=np.array([1.0, 2.0, 3.0]))
    v1.pack(row1, 7, obs, np.zeros(3))
    assert list(row1[v1.privileged][:3]) == [1.0, 2.0, 3.0]


def test_the_handshake_describes_robot_sensing(scenario):
    robot = NominalRobot(manifest_for(scenario))
    robot.sensing = sensing_info(scenario.sensing)
    text = handshake_header(robot, 0.002)
    lines = text.splitlines()
    assert lines[0] == "QBX 1" and lines[-1] == "end"        # what a version 1 program reads first
    header = {ln.partition(" ")[0]: ln.partition(" ")[2] for ln in lines[1:-1]}
    assert header["versions"] == "1 2" and header["privileged"] == "0"
    assert header["foot_force"] == "3d" and header["joint_torque"] == "1"
    assert header["height_scan"].split()[:2] == ["33", "17"]
    back = sensing_from_header(header)
    assert back.privileged is False and back.foot_force == "3d" and back.joint_torque is True
    np.testing.assert_array_equal(back.height_scan_xy, robot.sensing.height_scan_xy)
    assert back.height_scan_rate_hz == 500.0 and back.height_scan_latency_s == 0.004
    plain = sensing_from_header({})
    assert plain == SensingInfo()
    with pytest.raises(ValueError, match="height_scan_xy"):
        sensing_from_header({"height_scan": "2 2 500 0", "height_scan_xy": "0 1 2"})


@pytest.mark.skipif(not shutil.which("c++"), reason="no C++ compiler")
def test_the_cpp_version_2_example(scenario, tmp_path):
    exe = tmp_path / "scan"
    subprocess.run(["c++", "-O1", "-o", str(exe), str(HERE / "fixtures" / "external" / "scan_controller.cpp")],
                   check=True, capture_output=True, timeout=120)
    inproc = run_job(Job(scenario, JointPDController(kp=KP, kd=KD))).result
    ext = run_job(Job(scenario, f"exec:{exe}")).result
    assert ext["status"] == "passed" and ext["trace_sha256"] == inproc["trace_sha256"]
    m = ext["metrics"]
    assert abs(m["controller.scan_max"] - 0.10) < 1e-6 and m["controller.scan_nan"] > 0
    assert m["controller.privileged"] == 0.0
