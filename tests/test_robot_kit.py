"""``bench robot init`` and ``bench robot check``: drafting a manifest from a model, measuring its claims."""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
from pathlib import Path

import mujoco
import numpy as np
import pytest
import yaml

from bench.robot import NominalRobot, load_manifest
from bench.robot.check import kinematic_height, measure, stand_torque_ratio
from bench.robot.draft import DraftError, draft_manifest, manifest_text

REPO = Path(__file__).resolve().parents[1]
FIXTURES = Path(__file__).resolve().parent / "fixtures"
#: (folder, model, fall geoms the committed manifest leaves out on purpose)
MODELS = [(REPO / "models/quad12", "quad12.xml", {"trunk_deck", "trunk_nose"}),
          # the test fixture also leaves out the hip housings (they sit inside the trunk's width)
          (FIXTURES / "quad12_long", "quad12_long.xml",
           {"trunk_deck", "trunk_nose", "FL_hip_geom", "FR_hip_geom", "RL_hip_geom", "RR_hip_geom"})]


def _bench(*args, cwd=None) -> subprocess.CompletedProcess:
    env = {**os.environ, "PYTHONPATH": str(REPO)}
    return subprocess.run([sys.executable, "-m", "bench", *args], capture_output=True, text=True, cwd=cwd, env=env)


@pytest.mark.parametrize("folder, xml, left_out", MODELS, ids=["quad12", "quad12_long"])
def test_draft_matches_the_committed_manifest_but_for_documented_decisions(folder, xml, left_out):
    committed = yaml.safe_load((folder / "manifest.yaml").read_text())
    draft = draft_manifest(folder / xml)
    drafted = yaml.safe_load(manifest_text(draft, xml))
    for key in ("mjcf", "trunk", "imu_site", "sensors", "joints", "actuators", "torque_limits", "feet"):
        assert drafted[key] == committed[key], key
    # fall geoms: the committed manifests keep only the trunk's main box (a person's decision: the deck and
    # nose plates sit on top and in front); every committed one is drafted
    assert set(committed["fall_geoms"]) <= set(drafted["fall_geoms"])
    assert set(drafted["fall_geoms"]) - set(committed["fall_geoms"]) <= left_out
    # nominal pose: the committed one is the drafted one rounded by hand (0.795 -> 0.8, -1.591 -> -1.6)
    np.testing.assert_allclose(drafted["nominal_pose"], committed["nominal_pose"], atol=0.01)
    # nominal height: the committed one is a settled stand, the drafted one kinematic (a few mm of sag apart)
    assert abs(drafted["nominal_height"] - committed["nominal_height"]) < 0.01


def test_drafted_pose_puts_feet_under_the_first_joint_at_the_stance_extension():
    """Forward kinematics with MuJoCo's mj_kinematics: each foot is straight under its abduction axis."""
    draft = draft_manifest(REPO / "models/quad12/quad12.xml")
    m = draft.spec.compile()
    d = mujoco.MjData(m)
    for leg in draft.legs:
        for j, q in zip(leg.joints, leg.pose):
            d.qpos[m.jnt_qposadr[mujoco.mj_name2id(m, mujoco.mjtObj.mjOBJ_JOINT, j)]] = q
    mujoco.mj_kinematics(m, d)
    for leg in draft.legs:
        foot = d.site_xpos[mujoco.mj_name2id(m, mujoco.mjtObj.mjOBJ_SITE, leg.foot_site)]
        hip = d.xanchor[mujoco.mj_name2id(m, mujoco.mjtObj.mjOBJ_JOINT, leg.joints[1])]
        assert abs(foot[0] - hip[0]) < 2e-3                           # straight under the hip (rounding)
        assert abs((hip[2] - foot[2]) / 0.40 - 0.70) < 5e-3          # 70 % of the 0.40 m leg


def test_urdf_is_drafted_into_a_model_copy_that_loads_and_checks(tmp_path):
    shutil.copy(FIXTURES / "urdfdog.urdf", tmp_path / "dog.urdf")
    proc = _bench("robot", "init", str(tmp_path / "dog.urdf"))
    assert proc.returncode == 0, proc.stderr
    assert (tmp_path / "dog.bench.xml").is_file()
    man = load_manifest(tmp_path / "manifest.yaml")
    assert man.trunk == "base" and len(man.joints) == 12 and [f.name for f in man.feet] == ["FL", "FR", "RL", "RR"]
    # torque limits from the URDF's effort limits (30, 40, 60 N m)
    assert list(man.torque_limits[:3]) == [30.0, 40.0, 60.0]
    robot = NominalRobot(man)
    assert robot.mass_kg == pytest.approx(17.6)
    proc = _bench("robot", "check", str(tmp_path / "manifest.yaml"))
    assert proc.returncode == 0, proc.stdout + proc.stderr
    assert "checks agree" in proc.stdout
    # a second init without --force refuses to overwrite
    again = _bench("robot", "init", str(tmp_path / "dog.urdf"))
    assert again.returncode == 2 and "--force" in again.stderr


def test_no_floating_base_and_closed_chains_are_refused(tmp_path):
    fixed = tmp_path / "fixed.xml"
    fixed.write_text("<mujoco><worldbody><body name='a'><joint name='j' type='hinge'/>"
                     "<geom size='0.1'/></body></worldbody></mujoco>")
    with pytest.raises(DraftError, match="no floating base"):
        draft_manifest(fixed)
    src = (REPO / "models/quad12/quad12.xml").read_text()
    closed = tmp_path / "closed.xml"
    closed.write_text(src.replace("</mujoco>", "<equality><connect body1='FL_shank' body2='FR_shank' "
                                               "anchor='0 0 0'/></equality></mujoco>"))
    with pytest.raises(DraftError, match="closed chains"):
        draft_manifest(closed)
    proc = _bench("robot", "init", str(fixed), "-o", str(tmp_path / "m.yaml"))
    assert proc.returncode == 2 and "no floating base" in proc.stderr and "Traceback" not in proc.stderr
    assert not (tmp_path / "m.yaml").exists()


@pytest.mark.parametrize("robot", ["quad12", "quad30"])
def test_bundled_robots_check_clean(robot):
    ok = _bench("robot", "check", robot)
    assert ok.returncode == 0, ok.stdout + ok.stderr
    assert "checks agree" in ok.stdout and "DISAGREES" not in ok.stdout


def test_check_exit_codes(tmp_path):
    ok = _bench("robot", "check", "quad12")
    assert ok.returncode == 0, ok.stdout + ok.stderr
    for row in ("total mass", "standing height (kinematic)", "standing height (settled)", "torque to stand"):
        assert row in ok.stdout
    # a manifest claiming a height the robot does not stand at: measured disagreement, exit 1
    shutil.copy(REPO / "models/quad12/quad12.xml", tmp_path / "quad12.xml")
    text = (REPO / "models/quad12/manifest.yaml").read_text()
    (tmp_path / "manifest.yaml").write_text(text.replace("nominal_height: 0.294", "nominal_height: 0.33"))
    high = _bench("robot", "check", str(tmp_path / "manifest.yaml"))
    assert high.returncode == 1 and "DISAGREES" in high.stdout
    # a manifest error: every problem at its line, exit 2
    (tmp_path / "manifest.yaml").write_text(text.replace("trunk: trunk", "trunk: trunkk").replace("imu_site: imu",
                                                                                                 "imu_site: imuu"))
    bad = _bench("robot", "check", str(tmp_path / "manifest.yaml"))
    assert bad.returncode == 2 and "Traceback" not in bad.stderr
    assert "manifest.yaml:7:" in bad.stderr and "manifest.yaml:8:" in bad.stderr


def test_stand_torque_agrees_with_a_simulated_stand():
    """J^T f with equal foot shares against the torques a joint PD settles to on flat ground in MuJoCo."""
    from bench.cli.robot import SETTLE_KD, SETTLE_KP
    from bench.controllers.simple import JointPDController
    from bench.scenario import load_scenarios
    from bench.sim.episode import run_episode
    from bench.world.build import build_world

    man = load_manifest(REPO / "models/quad12/manifest.yaml")
    robot = NominalRobot(man)
    sc = load_scenarios([str(REPO / "scenarios/basics/stand-still.yaml")])[0]
    ep = run_episode(build_world(sc, man), sc, JointPDController(kp=SETTLE_KP, kd=SETTLE_KD), robot, seed=0)
    settled = ep.trace["joint_torque"][-100:].mean(axis=0)
    # the static estimate at the nominal pose (the settled pose differs by the PD's sag)
    d = mujoco.MjData(robot.model)
    d.qpos[:] = robot.nominal_qpos
    mujoco.mj_kinematics(robot.model, d)
    mujoco.mj_comPos(robot.model, d)
    ratio, j = stand_torque_ratio(robot, d)
    knee = [i for i, n in enumerate(man.joints) if n.endswith("knee")]
    est = ratio * robot.torque_limits[j]
    assert np.abs(settled[knee]).mean() == pytest.approx(est, rel=0.15)


def test_kinematic_height_is_forward_kinematics_of_the_nominal_pose():
    robot = NominalRobot(load_manifest(REPO / "models/quad12/manifest.yaml"))
    # quad12: thigh 0.20 m, shank 0.20 m to the foot centre, foot radius 0.02 m; hip 0.8, knee -1.6 rad
    expected = 0.20 * np.cos(0.8) + 0.20 * np.cos(0.8 - 1.6) + 0.02
    assert kinematic_height(robot) == pytest.approx(expected, abs=1e-9)
    rows = {r.name: r for r in measure(robot)}
    assert rows["total mass"].value == pytest.approx(12.0)


def test_quad30_manifest_is_the_draft_unchanged():
    """The second bundled robot's manifest is exactly what `bench robot init` drafts (comments aside)."""
    folder = REPO / "models/quad30"
    committed = yaml.safe_load((folder / "manifest.yaml").read_text())
    drafted = yaml.safe_load(manifest_text(draft_manifest(folder / "quad30.xml"), "quad30.xml"))
    assert drafted == committed
    robot = NominalRobot(load_manifest(folder / "manifest.yaml"))
    assert robot.mass_kg == pytest.approx(30.0)
    assert robot.mass_kg > 2.4 * NominalRobot(load_manifest(REPO / "models/quad12/manifest.yaml")).mass_kg


def test_adaptive_stack_holds_quad30_with_half_its_mass_on_its_back(tmp_path):
    """No retuning: the reference stack takes its model from the manifest; 15 kg crate, 3 s stand."""
    from bench.controllers import registry
    from bench.scenario import load_scenarios
    from bench.scoring.verdict import score
    from bench.sim.episode import run_episode
    from bench.world.build import build_world

    p = tmp_path / "s.yaml"
    p.write_text("name: q30-stand-half\nrobot: quad30\nduration: 3.0\nseed: 2\n"
                 "payloads:\n  - {name: crate, mass: 15.0, size: [0.30, 0.22, 0.12], offset: [-0.10, 0.0, 0.13]}\n"
                 "criteria: {no_fall: true, height_error_max: 0.05, pitch_error_max_deg: 5}\n")
    sc = load_scenarios([str(p)])[0]
    man = load_manifest(REPO / "models/quad30/manifest.yaml")
    _, ctrl = registry.make("force-qp-l1")
    ep = run_episode(build_world(sc, man), sc, ctrl, NominalRobot(man), seed=2)
    v = score(ep.trace, dict(sc.criteria), episode_status=ep.status, episode_reason=ep.reason)
    assert v.status == "passed", v.reason
    assert ep.trace["total_mass"][-1] == pytest.approx(45.0)
