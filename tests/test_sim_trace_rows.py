"""Trace columns the episode fills after the loop from its per-tick copies agree with MuJoCo.

The loop copies ``qpos``, ``qvel`` and the body centres of mass once per tick and
derives the rest after the episode. Reference: for sampled rows, a fresh ``MjData``
posed from the recorded ``qpos`` with the recorded payload masses, through
MuJoCo's own ``mj_kinematics``; the centre of mass is the mass-weighted mean of
the carried bodies' ``xipos`` (the definition), the total mass their sum. A load
is put on and dropped during the episode, so the masses change under the rows.
"""

from __future__ import annotations

import mujoco
import numpy as np

from bench.controllers.simple import JointPDController
from bench.robot.model import NominalRobot
from bench.scenario import load_scenarios
from bench.sim.episode import run_episode
from bench.world.build import build_world

SCENARIO = """name: rows
duration: 1.2
payloads:
  - {name: crate, mass: 5.0, size: [0.16, 0.14, 0.08], offset: [-0.04, 0.0, 0.09], attach_at: 0.3, drop_at: 0.8}
disturbances:
  - push: {at: 0.5, duration: 0.1, force: [0, 30, 0]}
"""


def test_derived_columns_match_mujoco_kinematics(tmp_path):
    path = tmp_path / "rows.yaml"
    path.write_text(SCENARIO)
    sc = load_scenarios([str(path)])[0]
    world = build_world(sc)
    ep = run_episode(world, sc, JointPDController(), NominalRobot(world.robot))
    assert ep.status == "completed"
    tr = ep.trace
    n = len(tr)
    assert n == 600 and ep.cpu_time_s > 0.0
    np.testing.assert_array_equal(tr["t"], np.arange(n) * 0.002)
    qa, va = world.root_qpos_adr, world.root_dof_adr
    np.testing.assert_array_equal(tr["base_pos"], tr["qpos"][:, qa:qa + 3])
    np.testing.assert_array_equal(tr["joint_pos"], tr["qpos"][:, world.joint_qpos_adr])
    pm = tr["payload_mass"][:, 0]
    assert pm[0] == 0.0 and pm[300] == 5.0 and pm[-1] == 0.0           # attached at 0.3 s, dropped at 0.8 s
    assert np.any(tr["ext_force"][:, 1] == 30.0) and tr["ext_force"][0, 1] == 0.0

    m = world.model
    d = mujoco.MjData(m)
    carried = world.carried_body_ids
    payload_body = world.payloads[0].body_id
    for k in range(0, n, 37):
        m.body_mass[payload_body] = pm[k]
        d.qpos[:] = tr["qpos"][k]
        mujoco.mj_kinematics(m, d)
        mass = m.body_mass[carried]
        assert tr["total_mass"][k] == mass.sum()
        np.testing.assert_allclose(tr["com_pos"][k], mass @ d.xipos[carried] / mass.sum(), rtol=0, atol=1e-12)
        np.testing.assert_allclose(tr["base_quat"][k], d.xquat[world.trunk_body_id], rtol=0, atol=1e-15)
        np.testing.assert_allclose(tr["foot_pos"][k], d.site_xpos[world.foot_site_ids], rtol=0, atol=1e-12)
