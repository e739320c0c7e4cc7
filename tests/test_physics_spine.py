"""Physics checks of the world builder and episode runner against outside references."""

from __future__ import annotations

import math

import mujoco
import numpy as np
import pytest

from bench.controllers.simple import JointPDController, ZeroController
from bench.robot.model import NominalRobot
from bench.sim.episode import run_episode
from bench.world.build import build_world

G = 9.81


def _episode(scenario, controller, gravity=True):
    world = build_world(scenario)
    if not gravity:
        world.model.opt.gravity[:] = 0.0
    return world, run_episode(world, scenario, controller, NominalRobot(world.robot))


def test_push_changes_com_velocity_by_impulse_over_mass(write_scenario, load_one):
    # Reference: impulse-momentum theorem, delta v_com = F dt / m (any textbook of mechanics);
    # m from MuJoCo's own mj_getTotalmass. No gravity and no contact (robot 1 m up).
    sc = load_one(write_scenario("""
        name: impulse
        duration: 0.6
        initial: {height_offset: 1.0}
        disturbances:
          - push: {at: 0.2, duration: 0.1, force: [30, -20, 10], point: [0.05, 0.02, 0.0]}
        criteria: {no_fall: false}
    """))
    world, ep = _episode(sc, ZeroController(), gravity=False)
    assert ep.status == "completed", ep.reason
    m = mujoco.mj_getTotalmass(world.model)
    t, com = ep.trace["t"], ep.trace["com_pos"]

    def velocity(t0, t1):
        i0, i1 = np.searchsorted(t, [t0, t1])
        return (com[i1] - com[i0]) / (t[i1] - t[i0])

    dv = velocity(0.4, 0.55) - velocity(0.0, 0.15)
    expected = np.array([30.0, -20.0, 10.0]) * 0.1 / m
    np.testing.assert_allclose(dv, expected, atol=2e-3)
    # The recorded disturbance integrates to the same impulse.
    impulse = ep.trace["ext_force"].sum(axis=0) * (t[1] - t[0])
    np.testing.assert_allclose(impulse, [3.0, -2.0, 1.0], atol=1e-9)


@pytest.mark.parametrize("payload_kg", [0.0, 3.0])
def test_standing_foot_forces_balance_total_weight(write_scenario, load_one, payload_kg):
    # Reference: static equilibrium, sum of vertical ground reactions = (robot + payload) m g.
    payloads = (f"payloads:\n  - {{name: box, mass: {payload_kg}, size: [0.1, 0.1, 0.05], offset: [0, 0, 0.08]}}"
                if payload_kg else "")
    sc = load_one(write_scenario(f"""
name: equilibrium
duration: 2.0
{payloads}
"""))
    world, ep = _episode(sc, JointPDController())
    assert ep.status == "completed", ep.reason
    late = ep.trace["t"] > 1.5
    fz = ep.trace["foot_force"][late, :, 2].sum(axis=1).mean()
    weight = (mujoco.mj_getTotalmass(world.model)) * G
    assert ep.trace["total_mass"][-1] == pytest.approx(12.0 + payload_kg, rel=1e-9)
    assert fz == pytest.approx(weight, rel=0.02)
    # Friction forces cancel when at rest (Newton's first law, horizontal).
    fxy = ep.trace["foot_force"][late, :, :2].sum(axis=1).mean(axis=0)
    assert np.all(np.abs(fxy) < 0.02 * weight)


def _ray_height(world, x, y=0.0):
    """Ground height under (x, y) by casting a ray down with MuJoCo's own mj_ray."""
    m = world.model
    d = mujoco.MjData(m)
    mujoco.mj_forward(m, d)
    geomid = np.zeros(1, dtype=np.int32)
    top = 5.0
    # Only terrain geoms (group 0 static geoms); robot bodies are excluded via bodyexclude of the trunk tree.
    dist = mujoco.mj_ray(m, d, np.array([x, y, top]), np.array([0.0, 0.0, -1.0]), None, 1, world.trunk_body_id,
                         geomid)
    return top - dist, int(geomid[0])


def test_compiled_slope_has_the_angle_asked_for(write_scenario, load_one):
    sc = load_one(write_scenario("""
        name: slope
        duration: 1.0
        initial: {x: -3.0}
        terrain:
          - slope: {start: 1.0, length: 3.0, angle_deg: 12}
    """))
    world = build_world(sc)
    (z1, g1), (z2, g2) = _ray_height(world, 1.5), _ray_height(world, 3.5)
    assert g1 in world.terrain_geom_ids and g2 in world.terrain_geom_ids
    angle = math.degrees(math.atan2(z2 - z1, 2.0))
    assert angle == pytest.approx(12.0, abs=0.01)
    # The analytic height query agrees with the compiled geometry.
    for x in (0.5, 1.2, 2.5, 3.9, 5.0):
        assert world.terrain.height_at([x], [0.0])[0] == pytest.approx(_ray_height(world, x)[0], abs=1e-6)


@pytest.mark.parametrize("direction", ["up", "down"])
def test_compiled_stairs_have_the_rise_and_run_asked_for(write_scenario, load_one, direction):
    sc = load_one(write_scenario(f"""
        name: stairs
        duration: 1.0
        initial: {{x: -2.0}}
        terrain:
          - stairs: {{start: 1.0, steps: 4, rise: 0.12, run: 0.30, direction: {direction}}}
    """))
    world = build_world(sc)
    sign = 1 if direction == "up" else -1
    heights = [_ray_height(world, 1.0 + 0.3 * i + 0.15)[0] for i in range(4)]
    np.testing.assert_allclose(np.diff(heights), sign * 0.12, atol=1e-9)
    # Each step ends where the next one starts: probe just either side of an edge.
    assert _ray_height(world, 1.0 + 0.3 - 0.001)[0] == pytest.approx(heights[0], abs=1e-9)
    assert _ray_height(world, 1.0 + 0.3 + 0.001)[0] == pytest.approx(heights[1], abs=1e-9)


def test_fall_is_detected_and_ends_the_episode(write_scenario, load_one):
    sc = load_one(write_scenario("""
        name: collapse
        duration: 3.0
    """))
    _, ep = _episode(sc, ZeroController())
    assert ep.status == "fell"
    assert ep.sim_time_s < 2.0
    assert "fell at" in ep.reason


def test_trace_has_the_contract_keys_and_shapes(write_scenario, load_one):
    from bench.sim.trace import CONTRACT_KEYS

    sc = load_one(write_scenario("""
        name: shapes
        duration: 0.5
        commands:
          - {at: 0.0, vx: 0.0}
          - {at: 0.2, vx: 0.3, yaw_rate: 0.1}
    """))
    world, ep = _episode(sc, JointPDController())
    n = len(ep.trace)
    assert n == 250  # 0.5 s at the default 500 Hz control rate
    J, F = len(world.robot.joints), len(world.robot.feet)
    shapes = {"t": (n,), "base_pos": (n, 3), "base_quat": (n, 4), "base_linvel": (n, 3), "base_angvel": (n, 3),
              "joint_pos": (n, J), "joint_vel": (n, J), "joint_torque": (n, J), "foot_pos": (n, F, 3),
              "foot_force": (n, F, 3), "command": (n, 3), "total_mass": (n,), "com_pos": (n, 3),
              "ext_force": (n, 3), "terrain_height": (n,)}
    assert set(CONTRACT_KEYS) == set(shapes)
    for key, shape in shapes.items():
        assert ep.trace[key].shape == shape, key
    np.testing.assert_allclose(ep.trace["t"][1] - ep.trace["t"][0], 0.002)
    assert ep.trace["command"][99, 0] == 0.0 and ep.trace["command"][100, 0] == 0.3
    # Torques respect the limits after clipping.
    assert np.all(np.abs(ep.trace["joint_torque"]) <= world.robot.torque_limits + 1e-12)
    # base_angvel is in the body frame: rotate to world with the quaternion and compare with MuJoCo's own body velocity.
    quat = ep.trace["base_quat"][-1]
    R = np.zeros(9)
    mujoco.mju_quat2Mat(R, quat)
    assert np.linalg.norm(R.reshape(3, 3) @ ep.trace["base_angvel"][-1]) < 10.0
