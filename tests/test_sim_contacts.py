"""Contact scan of the episode loop (bench/sim/contacts.py) against a plain reference.

The reference is the direct formulation: classify every contact with array lookups
(ground on either side, the other geom a foot or a fall geom), and for each
foot-ground contact take MuJoCo's ``mj_contactForce`` (contact frame, acting on
geom2) to world axes as ``frame.T @ f``, summed per foot. The scan must agree with
it to the last bit (the bench's trace digests rest on that), on real MuJoCo states:
standing on four feet, mid-trot with feet in the air, and lying on the trunk.
"""

from __future__ import annotations

import copy
import textwrap
from pathlib import Path

import mujoco
import numpy as np
import pytest

from bench.controllers.registry import make
from bench.robot.model import NominalRobot
from bench.scenario import load_scenarios
from bench.sim import contacts as contacts_module
from bench.sim.contacts import CONTACT_DIST_M, ContactTable
from bench.world.build import build_world


def _reference(world, m, d_after_step1, d_after_step2):
    """(foot_contact, fell, foot_force) by the direct formulation."""
    F = len(world.foot_geom_ids)
    is_terrain = np.zeros(m.ngeom, dtype=bool)
    is_terrain[world.terrain_geom_ids] = True
    is_fall = np.zeros(m.ngeom, dtype=bool)
    is_fall[world.fall_geom_ids] = True
    foot_of = np.full(m.ngeom, -1)
    foot_of[world.foot_geom_ids] = np.arange(F)
    contact = np.zeros(F, dtype=bool)
    force = np.zeros((F, 3))
    fell = False
    d = d_after_step1
    if d.ncon:
        g1, g2 = d.contact.geom[:, 0], d.contact.geom[:, 1]
        t1 = is_terrain[g1]
        other = np.where(t1, g2, g1)
        ground = t1 | is_terrain[g2]
        foot = foot_of[other]
        foot_con = np.flatnonzero(ground & (foot >= 0))
        contact[foot[foot_con[d.contact.dist[foot_con] < CONTACT_DIST_M]]] = True
        fell = bool(np.any(ground & is_fall[other] & (d.contact.dist < 0)))
        cf = np.zeros(6)
        for c in foot_con:
            a, b = d.contact.geom[c]
            sign, f = (1.0, foot_of[b]) if foot_of[b] >= 0 else (-1.0, foot_of[a])
            mujoco.mj_contactForce(m, d_after_step2, int(c), cf)
            force[f] += sign * (d_after_step2.contact.frame[c].reshape(3, 3).T @ cf[:3])
    return contact, fell, force


def _scan(table, m, d):
    """Step ``d`` once through the scan (classify after mj_step1, forces after mj_step2); also the reference."""
    F = len(table._zeros) // 3
    mujoco.mj_step1(m, d)
    if hasattr(mujoco, "mj_copyData"):
        snap = mujoco.MjData(m)
        mujoco.mj_copyData(snap, m, d)
    else:   # MuJoCo before 3.4 has no mj_copyData binding; copy.copy makes the same copy
        snap = copy.copy(d)
    contact = np.zeros(F, dtype=bool)
    fell = table.classify(d, contact)
    mujoco.mj_step2(m, d)
    force = np.zeros((F, 3))
    table.forces(m, d, force)
    return (contact, fell, force), (snap, d)


def _world(tmp_path, text):
    path = tmp_path / "s.yaml"
    path.write_text(textwrap.dedent(text))
    sc = load_scenarios([str(path)])[0]
    return sc, build_world(sc)


ROUGH = "terrain:\n  - rough: {start: -1.0, length: 3.0, height: 0.05, wavelength: 0.3}\n"


@pytest.mark.parametrize("controller,steps,terrain,max_plans", [
    ("joint-pd", 600, "", None), ("force-qp", 1100, "", None), ("zero", 1500, "", None),
    ("force-qp", 600, ROUGH, None), ("force-qp", 600, ROUGH, 2)],
    ids=["stand", "trot", "lying", "rough", "rough-cache-of-2"])
def test_scan_matches_the_direct_formulation_bit_for_bit(tmp_path, monkeypatch, controller, steps, terrain,
                                                         max_plans):
    # On rough ground the contact frames tilt about both axes, so all nine products of the rotation count.
    # With a cache of two classified geom-pair sequences it is cleared over and over on the way.
    if max_plans:
        monkeypatch.setattr(contacts_module, "MAX_PLANS", max_plans)
    sc, world = _world(tmp_path, "name: scan\nduration: 3\ncommands: [{at: 0.0}, {at: 0.5, vx: 0.4}]\n" + terrain)
    m = world.model
    d = mujoco.MjData(m)
    d.qpos[:] = world.initial_qpos
    mujoco.mj_forward(m, d)
    table = ContactTable(m.ngeom, world.terrain_geom_ids, world.foot_geom_ids, world.fall_geom_ids)
    _, ctrl = make(controller)
    from bench.controllers.base import Observation

    robot = NominalRobot(world.robot)
    ctrl.reset(robot, 0.002)
    obs = Observation.zeros(len(world.joint_qpos_adr), len(world.foot_site_ids))
    seen = {"air": False, "four": False, "fell": False}
    for k in range(steps):
        (contact, fell, force), (snap, d2) = _scan(table, m, d)
        ref_contact, ref_fell, ref_force = _reference(world, m, snap, d2)
        np.testing.assert_array_equal(contact, ref_contact)
        assert fell == ref_fell
        assert force.tobytes() == ref_force.tobytes()          # same bits, signed zeros included
        seen["air"] |= not contact.all()
        seen["four"] |= bool(contact.all())
        seen["fell"] |= fell
        if k % 2 == 0:                                        # 500 Hz control on 1 kHz physics
            obs.t = k * 0.001
            obs.imu_quat[:] = d.sensordata[world.imu_quat_adr:world.imu_quat_adr + 4]
            obs.imu_gyro[:] = d.sensordata[world.imu_gyro_adr:world.imu_gyro_adr + 3]
            obs.joint_pos[:] = d.qpos[world.joint_qpos_adr]
            obs.joint_vel[:] = d.qvel[world.joint_dof_adr]
            obs.foot_contact[:] = contact
            obs.privileged.base_pos[:] = d.qpos[world.root_qpos_adr:world.root_qpos_adr + 3]
            obs.privileged.base_linvel[:] = d.qvel[world.root_dof_adr:world.root_dof_adr + 3]
            cmd = np.array([0.4 if k * 0.001 >= 0.5 else 0.0, 0.0, 0.0])
            d.ctrl[world.actuator_ids] = np.clip(ctrl.step(obs, cmd), -robot.torque_limits, robot.torque_limits)
    # the classification of a recurring contact set is kept, and the cache stays within its bound
    assert len(table._plans) <= (max_plans or contacts_module.MAX_PLANS)
    if controller == "joint-pd":
        assert len(table._plans) <= 3, "standing still keeps its contacts: their classification is reused"
    # each case reached the situation it is here for
    if controller == "joint-pd":
        assert seen["four"]
    elif controller == "force-qp":
        assert seen["air"] and seen["four"]
    else:
        assert seen["fell"]


def test_force_sign_follows_which_side_the_foot_is_on():
    # geoms: 0 ground, 1 foot 0, 2 trunk (fall), 3 something else
    table = ContactTable(4, [0], [1], [2])
    cls = table.geom_class
    assert table.table[cls[0]][cls[1]] == (0, False, 1.0, 0)     # foot is geom2: force as reported
    assert table.table[cls[1]][cls[0]] == (0, False, -1.0, 0)    # foot is geom1: the reaction
    assert table.table[cls[0]][cls[2]] == (-1, True, -1.0, -1)   # trunk on the ground: a fall
    assert table.table[cls[2]][cls[0]][1] is True
    assert table.table[cls[0]][cls[3]] is None                   # ground and an unrelated geom
    assert table.table[cls[1]][cls[3]] is None                   # foot touching a non-ground geom


def test_fall_reason_names_the_part_and_what_it_touched():
    """The adaptive stack falls with frozen encoders; the reason says which fall geom touched which ground geom."""
    import re

    from bench.controllers import registry
    from bench.robot.model import NominalRobot
    from bench.scenario import load_scenarios
    from bench.sim.episode import run_episode
    from bench.world.build import build_world, manifest_for

    sc = load_scenarios([str(Path(__file__).resolve().parents[1] / "scenarios/faults/frozen-encoders.yaml")])[0]
    man = manifest_for(sc)
    _, ctrl = registry.make("force-qp-l1")
    ep = run_episode(build_world(sc, man), sc, ctrl, NominalRobot(man), seed=sc.seed)
    assert ep.status == "fell"
    m = re.search(r"the (\w+) \(geom (\w+)\) touched the ground \(geom (\w+)\)", ep.reason)
    assert m, ep.reason
    assert m.group(2) in man.fall_geoms
