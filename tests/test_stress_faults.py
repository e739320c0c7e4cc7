"""Actuator and sensor faults do what their names say.

Most checks float the robot one metre up with gravity off, so that nothing but the
controller's torques (and the fault) moves it. A tiny recording controller logs
every observation it is given and returns a torque pattern chosen per test.
"""

from __future__ import annotations

import mujoco
import numpy as np
import pytest
from scipy import stats

from bench.robot.model import NominalRobot
from bench.sim.episode import run_episode
from bench.world.build import build_world

JOINTS = ["FL_abd", "FL_hip", "FL_knee", "FR_abd", "FR_hip", "FR_knee",
          "RL_abd", "RL_hip", "RL_knee", "RR_abd", "RR_hip", "RR_knee"]
J = {name: i for i, name in enumerate(JOINTS)}


class Recorder:
    """Returns ``torque(t, k)`` and keeps a copy of every observation."""

    name = "recorder"

    def __init__(self, torque):
        self.torque = torque
        self.log: dict[str, list] = {k: [] for k in ("t", "joint_pos", "joint_vel", "imu_quat", "imu_gyro",
                                                      "imu_accel", "tau")}
        self.k = 0

    def reset(self, robot, control_dt):
        self.k = 0

    def step(self, obs, command):
        for key in ("joint_pos", "joint_vel", "imu_quat", "imu_gyro", "imu_accel"):
            self.log[key].append(getattr(obs, key).copy())
        self.log["t"].append(obs.t)
        tau = np.asarray(self.torque(obs.t, self.k), dtype=float) * np.ones(12)
        self.log["tau"].append(tau.copy())
        self.k += 1
        return tau

    def arrays(self):
        return {k: np.array(v) for k, v in self.log.items()}


def _floating(write_scenario, load_one, faults: str, torque, duration=0.6):
    sc = load_one(write_scenario(f"""
        name: faults
        duration: {duration}
        initial: {{height_offset: 1.0}}
        faults:
{faults}
    """))
    world = build_world(sc)
    world.model.opt.gravity[:] = 0.0
    rec = Recorder(torque)
    ep = run_episode(world, sc, rec, NominalRobot(world.robot))
    assert ep.status == "completed", ep.reason
    return world, ep.trace, rec.arrays()


def test_actuators_are_plain_torque_motors():
    # What the trace calls joint_torque is what acts: gear 1, gain 1, no bias (MuJoCo's motor actuator).
    from bench.robot.locate import resolve_robot

    m = NominalRobot(resolve_robot("quad12")).model
    np.testing.assert_array_equal(m.actuator_gear[:, 0], 1.0)
    np.testing.assert_array_equal(m.actuator_gainprm[:, 0], 1.0)
    np.testing.assert_array_equal(m.actuator_biasprm[:, :3], 0.0)


def test_lock_holds_the_joint_against_its_motor(write_scenario, load_one):
    # A locked joint keeps its angle while its motor pushes; its unlocked twin on the other side swings away.
    # The knee motor pushes with its full 28 N m (the torque tau is clipped to each joint's limit).
    world, tr, rec = _floating(write_scenario, load_one, "          - lock: {at: 0.2, joint: RL_knee}",
                               lambda t, k: 100.0 if t >= 0.25 else 0.0)
    t, q = tr["t"], tr["joint_pos"]
    after = t >= 0.2
    held = q[after, J["RL_knee"]]
    assert np.abs(held - held[0]).max() < 1e-3      # MuJoCo's equality constraint is soft, but not by 0.06 deg
    assert np.abs(q[after, J["RR_knee"]] - q[after, J["RR_knee"]][0]).max() > 0.3
    assert np.all(tr["joint_torque"][t >= 0.25, J["RL_knee"]] == 28.0)   # the motor really pushed


def test_limp_joint_gets_zero_torque(write_scenario, load_one):
    world, tr, rec = _floating(write_scenario, load_one, "          - limp: {at: 0.2, joint: FR_hip}",
                               lambda t, k: 5.0)
    t, tau = tr["t"], tr["joint_torque"]
    j = J["FR_hip"]
    assert np.all(tau[t < 0.2, j] == 5.0) and np.all(tau[t >= 0.2, j] == 0.0)
    others = [i for i in range(12) if i != j]
    assert np.all(tau[:, others] == 5.0)
    # The controller kept asking; the joint got nothing.
    assert np.all(rec["tau"][:, j] == 5.0)


def test_derate_caps_the_torque_of_the_chosen_joints(write_scenario, load_one):
    world, tr, rec = _floating(write_scenario, load_one,
                               "          - derate: {at: 0.2, joints: [FL_knee, RR_knee], factor: 0.3}",
                               lambda t, k: 100.0 if k % 2 else -100.0)
    t, tau, lim = tr["t"], np.abs(tr["joint_torque"]), np.asarray(world.robot.torque_limits)
    before, after = t < 0.2, t >= 0.2
    np.testing.assert_array_equal(tau[before], np.broadcast_to(lim, tau[before].shape))
    for name in JOINTS:
        expected = lim[J[name]] * (0.3 if name in ("FL_knee", "RR_knee") else 1.0)
        np.testing.assert_allclose(tau[after, J[name]], expected, rtol=1e-12)
    np.testing.assert_allclose(tr["torque_limit"][after, J["FL_knee"]], 0.3 * 28.0)


def test_latency_delays_the_commands_by_the_asked_time(write_scenario, load_one):
    delay_s = 0.02
    world, tr, rec = _floating(write_scenario, load_one, f"          - latency: {{at: 0.3, delay: {delay_s}}}",
                               lambda t, k: np.sin(0.37 * k) + 0.5 * np.sin(0.11 * k))
    t, applied, asked = tr["t"], tr["joint_torque"][:, 0], rec["tau"][:, 0]
    dt = t[1] - t[0]
    lag = int(round(delay_s / dt))
    before, after = t < 0.3, t >= 0.3 + delay_s
    np.testing.assert_array_equal(applied[before], asked[before])
    idx = np.flatnonzero(after)
    np.testing.assert_array_equal(applied[idx], asked[idx - lag])
    # Measured as the shift that best aligns what was asked with what was applied.
    shifts = np.arange(0, 30)
    err = [np.abs(applied[idx] - asked[idx - s]).sum() for s in shifts]
    assert shifts[int(np.argmin(err))] * dt == pytest.approx(delay_s)


SENSOR_CASES = [
    # sensor, std, bias
    ("joint_pos", 0.01, 0.005),
    ("joint_vel", 0.2, -0.05),
    ("imu_gyro", 0.02, -0.01),
    ("imu_accel", 0.3, 0.1),
    ("imu_orientation", 0.01, 0.004),
]


@pytest.mark.parametrize("sensor,std,bias", SENSOR_CASES)
def test_sensor_noise_has_the_asked_std_and_bias(write_scenario, load_one, sensor, std, bias):
    # Still robot (no gravity, no torque): the reading minus the true value is the noise alone.
    # References: the sample mean of n draws has standard error std / sqrt(n); (n - 1) s^2 / std^2 follows a
    # chi-square law with n - 1 degrees of freedom (scipy.stats.chi2). Bounds at a 1e-6 two-sided risk.
    world, tr, rec = _floating(write_scenario, load_one,
                               f"          - sensor_noise: {{at: 0.1, sensor: {sensor}, std: {std}, bias: {bias}}}",
                               lambda t, k: 0.0, duration=1.0)
    t = rec["t"]
    on = t >= 0.1
    if sensor == "imu_orientation":
        errs = []
        for q_obs, q_true in zip(rec["imu_quat"][on], tr["base_quat"][on]):
            rv = np.zeros(3)
            mujoco.mju_subQuat(rv, q_obs, q_true)   # rotation vector of q_true^-1 q_obs (MuJoCo's own function)
            errs.append(rv)
        noise = np.array(errs)
    else:
        true = {"joint_pos": tr["joint_pos"], "joint_vel": tr["joint_vel"], "imu_gyro": tr["base_angvel"],
                "imu_accel": np.zeros((len(t), 3))}[sensor]
        noise = rec[sensor][on] - true[on]
        # Before `at` the reading is the true value.
        np.testing.assert_allclose(rec[sensor][~on], true[~on], atol=1e-9)
    x = noise.ravel()
    n = x.size
    z = stats.norm.ppf(1 - 5e-7)
    assert abs(x.mean() - bias) < z * std / np.sqrt(n)
    lo, hi = stats.chi2.ppf([5e-7, 1 - 5e-7], n - 1)
    s2 = x.var(ddof=1)
    assert lo * std ** 2 / (n - 1) < s2 < hi * std ** 2 / (n - 1)
    # Each component is Gaussian (a normality test at a 1e-4 risk, scipy.stats.normaltest).
    assert stats.normaltest(x).pvalue > 1e-4


def test_noise_is_reproducible_from_the_seed(write_scenario, load_one):
    def readings():
        _, _, rec = _floating(write_scenario, load_one,
                              "          - sensor_noise: {sensor: imu_gyro, std: 0.05}", lambda t, k: 0.0, duration=0.2)
        return rec["imu_gyro"]

    np.testing.assert_array_equal(readings(), readings())


@pytest.mark.parametrize("sensor,field", [("joint_pos", "joint_pos"), ("imu_gyro", "imu_gyro")])
def test_frozen_sensor_holds_its_value_while_the_truth_moves(write_scenario, load_one, sensor, field):
    world, tr, rec = _floating(write_scenario, load_one, f"          - sensor_freeze: {{at: 0.3, sensor: {sensor}}}",
                               lambda t, k: 0.6 * np.sin(8 * t))
    t = rec["t"]
    frozen = t >= 0.3
    first = np.flatnonzero(frozen)[0]
    truth = {"joint_pos": tr["joint_pos"], "imu_gyro": tr["base_angvel"]}[sensor]
    # Held at the true value of the instant it froze ...
    np.testing.assert_allclose(rec[field][first], truth[first], atol=1e-9)
    np.testing.assert_array_equal(rec[field][frozen], np.broadcast_to(rec[field][first], rec[field][frozen].shape))
    # ... while the truth went on moving; the other sensors still update.
    assert np.abs(truth[frozen] - truth[first]).max() > 0.05
    other = "joint_vel"
    assert np.abs(np.diff(rec[other][frozen], axis=0)).max() > 0
