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


def test_observation_is_fresh_when_ids_are_not_contiguous(tmp_path):
    # A manifest that lists the legs in another order than the MJCF (FR, FL, RR, RL): the joint
    # addresses and foot sites are then not one increasing range, so the loop takes the indexed
    # path instead of views. The observation must still be this tick's state, row for row.
    import shutil
    from pathlib import Path

    import yaml

    src = Path(__file__).resolve().parents[1] / "models" / "quad12"
    shutil.copytree(src, tmp_path / "quad12x")
    man = yaml.safe_load((src / "manifest.yaml").read_text())
    legs = [1, 0, 3, 2]
    reorder = lambda xs: [xs[3 * leg + j] for leg in legs for j in range(3)]   # noqa: E731
    for key in ("joints", "actuators", "torque_limits", "nominal_pose"):
        man[key] = reorder(man[key])
    man["feet"] = [man["feet"][leg] for leg in legs]
    man["name"] = "quad12x"
    (tmp_path / "quad12x" / "manifest.yaml").write_text(yaml.safe_dump(man))
    path = tmp_path / "s.yaml"
    path.write_text("name: reordered\nduration: 0.4\nrobot: {manifest: quad12x/manifest.yaml}\n")
    sc = load_scenarios([str(path)])[0]
    world = build_world(sc)
    assert not np.all(np.diff(world.joint_qpos_adr) == 1) and not np.all(np.diff(world.foot_site_ids) == 1)

    seen = []

    class Recording(JointPDController):
        def step(self, obs, command):
            seen.append((obs.joint_pos.copy(), obs.joint_vel.copy(), obs.foot_contact.copy()))
            return super().step(obs, command)

    ep = run_episode(world, sc, Recording(), NominalRobot(world.robot))
    assert ep.status == "completed" and len(seen) == len(ep.trace) == 200
    tr = ep.trace
    np.testing.assert_array_equal(np.array([s[0] for s in seen]), tr["qpos"][:, world.joint_qpos_adr])
    np.testing.assert_array_equal(np.array([s[0] for s in seen]), tr["joint_pos"])
    np.testing.assert_array_equal(np.array([s[1] for s in seen]), tr["joint_vel"])
    np.testing.assert_array_equal(np.array([s[2] for s in seen]), tr["foot_contact"])
    assert tr["foot_contact"][-1].all()          # standing on four feet, in the manifest's order
    m = world.model
    d = mujoco.MjData(m)
    d.qpos[:] = tr["qpos"][-1]
    mujoco.mj_kinematics(m, d)
    np.testing.assert_array_equal(tr["foot_pos"][-1], d.site_xpos[world.foot_site_ids])
