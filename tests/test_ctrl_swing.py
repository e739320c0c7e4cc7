"""Swing-leg planner: trajectory shape, Raibert foothold with velocity feedback,
Cartesian PD, and the J^T mapping on the bundled robot."""

import numpy as np
import pytest

from bench.controllers.swing import SwingPlanner, bezier3, swing_point


def test_bezier_endpoints_and_derivative():
    assert bezier3(0.0) == (0.0, 0.0)
    assert bezier3(1.0) == (1.0, 0.0)
    assert bezier3(0.5)[0] == pytest.approx(0.5)
    h = 1e-6
    for s in np.linspace(0.05, 0.95, 10):
        num = (bezier3(s + h)[0] - bezier3(s - h)[0]) / (2 * h)
        assert bezier3(s)[1] == pytest.approx(num, rel=1e-5)


def test_swing_point_lifts_and_places():
    p0, pf = [0.0, 0.1, 0.02], [0.12, 0.08, 0.05]
    height, depth, T = 0.07, 0.01, 0.15
    start = swing_point(p0, pf, 0.0, T, height, depth)
    end = swing_point(p0, pf, 1.0, T, height, depth)
    mid = swing_point(p0, pf, 0.5, T, height, depth)
    np.testing.assert_allclose(start[:3], p0)
    np.testing.assert_allclose(end[:3], [pf[0], pf[1], pf[2] - depth])
    np.testing.assert_allclose(start[3:], 0.0, atol=1e-12)     # lift-off and touch-down at rest
    np.testing.assert_allclose(end[3:], 0.0, atol=1e-12)
    assert mid[2] == pytest.approx(max(p0[2], pf[2]) + height)  # apex clearance
    # the velocity is the time derivative of the position
    h = 1e-6
    for s in np.linspace(0.02, 0.98, 25):
        a = np.array(swing_point(p0, pf, s - h, T, height, depth)[:3])
        b = np.array(swing_point(p0, pf, s + h, T, height, depth)[:3])
        np.testing.assert_allclose(swing_point(p0, pf, s, T, height, depth)[3:], (b - a) / (2 * h) / T,
                                   rtol=1e-4, atol=1e-6)
    # the foot never dips below the lower of its two end points on the way
    zs = [swing_point(p0, pf, s, T, height, depth)[2] for s in np.linspace(0, 1, 101)]
    assert min(zs) >= min(p0[2], pf[2] - depth) - 1e-12


def _plan(planner, v, vcmd, yaw_rate=0.0, t_td=0.1, stance=0.2, off=(0.17, 0.13)):
    return list(planner.plan_foothold(0, 1.0 + off[0], 2.0 + off[1], off[0], off[1], v[0], v[1],
                                      vcmd[0], vcmd[1], yaw_rate, t_td, stance, 0.02))


def test_raibert_foothold_terms():
    sp = SwingPlanner(k_vel=0.1, max_reach_m=0.5)
    # at rest: under the hip, on the ground estimate
    assert _plan(sp, (0, 0), (0, 0)) == pytest.approx([1.17, 2.13, 0.02])
    # moving as commanded: hip travel until touch-down plus half the stance sweep
    f = _plan(sp, (0.4, 0.0), (0.4, 0.0))
    assert f[0] == pytest.approx(1.17 + 0.4 * 0.1 + 0.4 * 0.2 / 2)
    # faster than commanded: the foot lands further ahead (velocity feedback)
    g = _plan(sp, (0.6, 0.0), (0.4, 0.0))
    assert g[0] - f[0] == pytest.approx(0.2 * 0.2 / 2 + 0.1 * 0.2)
    # turning: the hip point moves along yaw_rate x r
    h = _plan(sp, (0, 0), (0, 0), yaw_rate=1.0)
    assert h[0] == pytest.approx(1.17 - 0.13 * 0.1) and h[1] == pytest.approx(2.13 + 0.17 * 0.1)


def test_foothold_offset_is_clipped():
    sp = SwingPlanner(k_vel=0.3, max_reach_m=0.1)
    f = _plan(sp, (3.0, 0.0), (0.0, 0.0), t_td=0.0)
    assert np.hypot(f[0] - 1.17, f[1] - 2.13) == pytest.approx(0.1)


def test_track_is_cartesian_pd_toward_the_path():
    sp = SwingPlanner(kp=(500, 400, 300), kd=(10, 10, 10))
    sp.start_swing(0, [0.0, 0.0, 0.0])
    sp.foothold[0][:] = [0.1, 0.0, 0.0]
    ux, uy, uz = sp.track(0, 0.5, 0.2, [0.0, 0.0, 0.0], [0.0, 0.0, 0.0])
    pd, vd = sp.pos_des[0], sp.vel_des[0]
    assert ux == pytest.approx(500 * pd[0] + 10 * vd[0])
    assert uy == pytest.approx(400 * pd[1] + 10 * vd[1])
    assert uz == pytest.approx(300 * pd[2] + 10 * vd[2])
    assert ux > 0 and uz > 0


def test_jacobian_transpose_maps_foot_force_to_torque():
    """Virtual work: a foot force u does work u . dp = tau . dq for any joint motion."""
    from bench.controllers.base import Observation
    from bench.controllers.kinematics import LegKinematics
    from bench.robot import NominalRobot, resolve_robot

    robot = NominalRobot(resolve_robot("quad12"))
    kin = LegKinematics(robot)
    obs = Observation.zeros(robot.num_joints, robot.num_feet)
    obs.joint_pos[:] = robot.nominal_pose + 0.1
    obs.privileged.base_pos[:] = [0.0, 0.0, 0.3]
    kin.update(obs)
    rng = np.random.default_rng(0)
    u = rng.normal(size=3 * robot.num_feet)
    tau = kin.torques(u, np.zeros(robot.num_joints))
    dq = 1e-6 * rng.normal(size=robot.num_joints)
    p0 = kin.foot_pos.copy()
    obs.joint_pos[:] += dq
    kin.update(obs)
    dp = (kin.foot_pos - p0).reshape(-1)
    assert u @ dp == pytest.approx(tau @ dq, rel=1e-4)
