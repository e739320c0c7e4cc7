"""Robot-only kinematics posed from an observation, checked against MuJoCo's own
full forward pass on the same state."""

import mujoco
import numpy as np
import pytest

from bench.controllers.base import Observation
from bench.controllers.kinematics import LegKinematics
from bench.robot import NominalRobot, resolve_robot


@pytest.fixture(scope="module")
def robot():
    return NominalRobot(resolve_robot("quad12"))


def _random_obs(robot, rng):
    obs = Observation.zeros(robot.num_joints, robot.num_feet)
    q = rng.normal(size=4)
    obs.imu_quat[:] = q / np.linalg.norm(q)
    obs.imu_gyro[:] = rng.normal(size=3)
    obs.joint_pos[:] = robot.nominal_pose + rng.normal(scale=0.2, size=robot.num_joints)
    obs.joint_vel[:] = rng.normal(size=robot.num_joints)
    obs.privileged.base_pos[:] = rng.normal(size=3)
    obs.privileged.base_linvel[:] = rng.normal(size=3)
    return obs


def _reference(robot, obs):
    m = robot.model
    d = mujoco.MjData(m)
    d.qpos[robot.trunk_qpos_adr:robot.trunk_qpos_adr + 3] = obs.privileged.base_pos
    d.qpos[robot.trunk_qpos_adr + 3:robot.trunk_qpos_adr + 7] = obs.imu_quat
    d.qpos[robot.joint_qpos_adr] = obs.joint_pos
    d.qvel[robot.trunk_dof_adr:robot.trunk_dof_adr + 3] = obs.privileged.base_linvel
    d.qvel[robot.trunk_dof_adr + 3:robot.trunk_dof_adr + 6] = obs.imu_gyro
    d.qvel[robot.joint_dof_adr] = obs.joint_vel
    mujoco.mj_forward(m, d)
    return d


@pytest.mark.parametrize("seed", range(5))
def test_matches_full_forward_pass(robot, seed):
    rng = np.random.default_rng(seed)
    obs = _random_obs(robot, rng)
    kin = LegKinematics(robot)
    kin.update(obs)
    d = _reference(robot, obs)
    np.testing.assert_allclose(kin.foot_pos, d.site_xpos[robot.foot_site_ids], atol=1e-12)
    np.testing.assert_allclose(kin.com, d.subtree_com[robot.trunk_body_id], atol=1e-12)
    np.testing.assert_allclose(kin.rot, d.xmat[robot.trunk_body_id].reshape(3, 3), atol=1e-12)
    np.testing.assert_allclose(kin.bias, d.qfrc_bias[robot.joint_dof_adr], atol=1e-9)
    # foot velocities: MuJoCo's site velocity (world frame, translational part)
    for i, s in enumerate(robot.foot_site_ids):
        v6 = np.zeros(6)
        mujoco.mj_objectVelocity(robot.model, d, mujoco.mjtObj.mjOBJ_SITE, int(s), v6, 0)
        np.testing.assert_allclose(kin.foot_vel[i], v6[3:], atol=1e-9)


def test_nominal_constants(robot):
    kin = LegKinematics(robot)
    # the feet stand below the hips at the nominal pose, left feet at +y, front at +x
    fb = kin.foot_nominal_body
    assert np.all(fb[:, 2] < -0.2)
    assert fb[0, 0] > 0 and fb[2, 0] < 0 and fb[0, 1] > 0 and fb[1, 1] < 0
    assert kin.foot_height_nominal == pytest.approx(0.02)  # quad12's sphere feet


def test_update_allocates_no_arrays(robot):
    kin = LegKinematics(robot)
    obs = _random_obs(robot, np.random.default_rng(0))
    kin.update(obs)
    ids = [id(a) for a in (kin.foot_pos, kin.foot_vel, kin.jac, kin.jac_joints, kin.bias)]
    kin.update(obs)
    assert ids == [id(a) for a in (kin.foot_pos, kin.foot_vel, kin.jac, kin.jac_joints, kin.bias)]
