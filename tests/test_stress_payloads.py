"""Payloads do physically what their names say, checked against outside references.

Shifting loads oscillate as a mass on a spring, stop at their end stops, tray loads
slide freely inside their tray, and the recorded ``total_mass`` / ``com_pos`` follow
attach, drop, drain and mass steps exactly.
"""

from __future__ import annotations

import math

import mujoco
import numpy as np
import pytest

from bench.controllers.simple import JointPDController
from bench.robot.model import NominalRobot
from bench.sim.episode import run_episode
from bench.world.build import build_world
from bench.world.payloads import PAYLOAD_ARMATURE
from mjspec_compat import spec_remove

G = 9.81


def _held_trunk_model(world, gravity=(0.0, 0.0, 0.0)):
    """The world with the trunk welded to the world (its free joint removed): the trunk is held still."""
    spec = world.spec.copy()
    spec_remove(spec, spec.body(world.robot.trunk).first_joint())
    m = spec.compile()
    m.opt.gravity[:] = gravity
    return m, mujoco.MjData(m)


def _joint(m, name):
    j = mujoco.mj_name2id(m, mujoco.mjtObj.mjOBJ_JOINT, name)
    assert j >= 0, name
    return int(m.jnt_qposadr[j]), int(m.jnt_dofadr[j])


def _upward_crossings(t, x):
    i = np.flatnonzero((x[:-1] < 0) & (x[1:] >= 0))
    return t[i] + (0 - x[i]) / (x[i + 1] - x[i]) * (t[i + 1] - t[i])


@pytest.mark.parametrize("mass,stiffness,damping", [(3.0, 400.0, 0.0), (1.5, 900.0, 0.0), (3.0, 400.0, 4.0)])
def test_shifting_load_oscillates_with_the_spring_mass_period(write_scenario, load_one, mass, stiffness, damping):
    # Reference: a mass on a spring, T = 2 pi sqrt(m / k); with viscous damping c the damped period is
    # T / sqrt(1 - zeta^2) and each cycle shrinks the amplitude by exp(-2 pi zeta / sqrt(1 - zeta^2)),
    # zeta = c / (2 sqrt(k m)) (any vibrations textbook). The effective mass includes the slide joint's armature.
    sc = load_one(write_scenario(f"""
        name: slosh
        duration: 1.0
        payloads:
          - {{name: tank, type: shifting, mass: {mass}, size: [0.1, 0.1, 0.1], axis: x,
              stiffness: {stiffness}, damping: {damping}, travel: 0.2}}
    """))
    m, d = _held_trunk_model(build_world(sc))
    qa, _ = _joint(m, "payload_tank_slide")
    d.qpos[qa] = 0.02
    n = 3000
    t, x = np.empty(n), np.empty(n)
    for i in range(n):
        mujoco.mj_step(m, d)
        t[i], x[i] = d.time, d.qpos[qa]
    m_eff = mass + PAYLOAD_ARMATURE
    zeta = damping / (2.0 * math.sqrt(stiffness * m_eff))
    period = 2 * math.pi * math.sqrt(m_eff / stiffness) / math.sqrt(1 - zeta ** 2)
    crossings = _upward_crossings(t, x)
    assert len(crossings) >= 4
    assert np.diff(crossings).mean() == pytest.approx(period, rel=2e-3)
    if damping:
        peaks = [x[(t >= c) & (t < c + period)].max() for c in crossings[:-1]]
        decay = np.array(peaks[1:]) / np.array(peaks[:-1])
        np.testing.assert_allclose(decay, math.exp(-2 * math.pi * zeta / math.sqrt(1 - zeta ** 2)), rtol=0.02)


@pytest.mark.parametrize("travel", [0.10, 0.04])
def test_shifting_load_rests_on_its_spring_or_on_its_end_stop(write_scenario, load_one, travel):
    # Reference: Hooke's law, static deflection m g / k along the axis; the end stop (joint range) caps it at travel.
    mass, k = 3.0, 400.0
    sc = load_one(write_scenario(f"""
        name: slosh
        duration: 1.0
        payloads:
          - {{name: tank, type: shifting, mass: {mass}, size: [0.1, 0.1, 0.1], axis: y,
              stiffness: {k}, damping: 20, travel: {travel}}}
    """))
    m, d = _held_trunk_model(build_world(sc), gravity=(0.0, -G, 0.0))   # "gravity" along -y
    qa, _ = _joint(m, "payload_tank_slide")
    for _ in range(4000):
        mujoco.mj_step(m, d)
    deflection = mass * G / k
    expected = -min(deflection, travel)
    # MuJoCo's joint limit is a soft constraint: it holds within a millimetre here.
    assert d.qpos[qa] == pytest.approx(expected, abs=1e-3 if travel < deflection else 1e-6)


def test_tray_load_slides_freely_within_its_tray(write_scenario, load_one):
    # Reference: Newton's second law; a loose mass with no spring starts to slide at a = g along the
    # tilt (frictionless slide joints) and stops at the tray's edge (+-travel in x and y).
    sc = load_one(write_scenario("""
        name: tray
        duration: 1.0
        payloads:
          - {name: ball, type: tray, mass: 1.0, size: [0.05, 0.05, 0.05], damping: 0.0, travel: 0.08}
    """))
    m, d = _held_trunk_model(build_world(sc), gravity=(2.0, -3.0, 0.0))
    qx, _ = _joint(m, "payload_ball_slide_x")
    qy, _ = _joint(m, "payload_ball_slide_y")
    for _ in range(100):
        mujoco.mj_step(m, d)
    # After 0.1 s: x = a t^2 / 2 (the armature adds 0.1 % to the mass).
    assert d.qpos[qx] == pytest.approx(0.5 * 2.0 * d.time ** 2 / (1 + PAYLOAD_ARMATURE), rel=1e-2)
    assert d.qpos[qy] == pytest.approx(-0.5 * 3.0 * d.time ** 2 / (1 + PAYLOAD_ARMATURE), rel=1e-2)
    for _ in range(2000):
        mujoco.mj_step(m, d)
    assert d.qpos[qx] == pytest.approx(0.08, abs=1e-3) and d.qpos[qy] == pytest.approx(-0.08, abs=1e-3)


SCHEDULES = """
    name: schedules
    duration: 1.0
    payloads:
      - {name: crate, mass: 2.5, size: [0.12, 0.1, 0.06], offset: [-0.12, 0.0, 0.08], attach_at: 0.2, drop_at: 0.8}
      - name: tank
        type: shifting
        mass: 3.0
        size: [0.14, 0.12, 0.08]
        offset: [0.05, 0.0, 0.09]
        drain: {at: 0.3, duration: 0.5, final_mass: 0.6}
      - name: bricks
        mass: 1.0
        size: [0.08, 0.08, 0.04]
        offset: [0.12, 0.03, 0.07]
        steps: [{at: 0.4, mass: 2.0}, {at: 0.7, mass: 0.5}]
      - {name: ball, type: tray, mass: 0.8, size: [0.05, 0.05, 0.05], offset: [0.0, -0.04, 0.08]}
"""


def _expected_masses(t: float) -> dict[str, float]:
    """The schedules above, written out by hand."""
    crate = 2.5 if 0.2 <= t < 0.8 else 0.0
    tank = 3.0 if t < 0.3 else (3.0 + (0.6 - 3.0) * (t - 0.3) / 0.5 if t < 0.8 else 0.6)
    bricks = 1.0 if t < 0.4 else (2.0 if t < 0.7 else 0.5)
    return {"crate": crate, "tank": tank, "bricks": bricks, "ball": 0.8}


def test_total_mass_and_com_follow_attach_drop_drain_and_steps(write_scenario, load_one):
    sc = load_one(write_scenario(SCHEDULES))
    world = build_world(sc)
    ep = run_episode(world, sc, JointPDController(), NominalRobot(world.robot))
    assert ep.status == "completed", ep.reason
    tr = ep.trace
    m = world.model
    robot_mass = 12.0   # quad12's MJCF inertials (tests/test_robot.py checks them)
    # The runner keeps MuJoCo's compiled subtree masses in step with the masses it changes.
    final = _expected_masses(float(tr["t"][-1]))
    assert m.body_subtreemass[world.trunk_body_id] == pytest.approx(robot_mass + sum(final.values()), abs=1e-9)
    assert m.body_subtreemass[0] == pytest.approx(robot_mass + sum(final.values()), abs=1e-9)
    body_of = {p.name: p.body_id for p in world.payloads}
    d = mujoco.MjData(m)
    masses = m.body_mass.copy()
    for k in range(len(tr)):
        expected = _expected_masses(float(tr["t"][k]))
        assert tr["total_mass"][k] == pytest.approx(robot_mass + sum(expected.values()), abs=1e-9)
        np.testing.assert_allclose(tr["payload_mass"][k], [expected[p.name] for p in world.payloads], atol=1e-12)
        if k % 10:
            continue
        # The centre of mass by hand from MuJoCo's body positions at that instant: sum(m_i x_i) / sum(m_i) ...
        for name, mass in expected.items():
            masses[body_of[name]] = mass
        m.body_mass[:] = masses
        mujoco.mj_setConst(m, d)          # MuJoCo recomputes its subtree masses from body_mass
        d.qpos[:] = tr["qpos"][k]
        mujoco.mj_kinematics(m, d)
        mujoco.mj_comPos(m, d)
        bodies = np.arange(1, m.nbody)
        com = (masses[bodies, None] * d.xipos[bodies]).sum(axis=0) / masses[bodies].sum()
        np.testing.assert_allclose(tr["com_pos"][k], com, atol=1e-9)
        # ... and MuJoCo's own subtree centre of mass of the trunk (everything carried hangs below it).
        np.testing.assert_allclose(tr["com_pos"][k], d.subtree_com[world.trunk_body_id], atol=1e-9)
    # The schedule moved the centre of mass: the crate behind pulls it back while attached.
    t = tr["t"]
    attached = (t >= 0.25) & (t < 0.3)
    before = t < 0.2
    assert tr["com_pos"][attached, 0].mean() < tr["com_pos"][before, 0].mean() - 0.01


def test_loads_not_yet_attached_or_dropped_are_massless_and_touch_nothing(write_scenario, load_one):
    sc = load_one(write_scenario("""
        name: later
        duration: 0.3
        payloads:
          - {name: sack, mass: 4.0, size: [0.1, 0.1, 0.1], offset: [0, 0, 0.1], attach_at: 0.2}
          - {name: crate, mass: 2.0, size: [0.1, 0.1, 0.1], offset: [0, 0, 0.1], drop_at: 0.1}
    """))
    world = build_world(sc)
    m = world.model
    geoms = [p.geom_id for p in world.payloads]

    class Spy(JointPDController):
        """Holds the stance and, for this test only, peeks at the world's payload geoms each tick."""

        def step(self, obs, command):
            self.seen.append((obs.t, m.geom_contype[geoms].copy(), m.geom_rgba[geoms, 3].copy()))
            return super().step(obs, command)

    for _ in range(2):       # a second episode on the same world starts from the same state
        spy = Spy()
        spy.seen = []
        ep = run_episode(world, sc, spy, NominalRobot(world.robot))
        t, pm = ep.trace["t"], ep.trace["payload_mass"]
        np.testing.assert_array_equal(pm[t < 0.2, 0], 0.0)
        np.testing.assert_array_equal(pm[t >= 0.2, 0], 4.0)
        np.testing.assert_array_equal(pm[t < 0.1, 1], 2.0)
        np.testing.assert_array_equal(pm[t >= 0.1, 1], 0.0)
        for tick_t, contype, alpha in spy.seen:
            on = np.array([tick_t >= 0.2, tick_t < 0.1])
            np.testing.assert_array_equal(contype != 0, on)     # collides with the ground only while carried
            np.testing.assert_array_equal(alpha > 0, on)        # and is drawn only then
