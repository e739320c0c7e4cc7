"""Robot manifests, bundled-model lookup and the nominal robot (bench.robot)."""

from __future__ import annotations

import shutil
from pathlib import Path

import mujoco
import numpy as np
import pytest
import yaml

from bench.robot import (
    NominalRobot, RobotError, bundled_models_dir, bundled_robot_names, load_manifest,
    load_robot_spec, resolve_robot,
)

FIXTURES = Path(__file__).parent / "fixtures"
LONG_MANIFEST = FIXTURES / "quad12_long" / "manifest.yaml"

# The PD hold the manifests' nominal_height was measured with.
HOLD_KP, HOLD_KD, SETTLE_S = 200.0, 3.0, 1.5


@pytest.fixture(scope="module")
def quad12():
    return NominalRobot(resolve_robot("quad12"))


@pytest.fixture(scope="module")
def quad12_long():
    return NominalRobot(resolve_robot(LONG_MANIFEST))


def settle_on_plane(robot: NominalRobot) -> float:
    """Stand the robot on a flat plane, hold nominal_pose with joint PD; return trunk height."""
    spec = load_robot_spec(robot.manifest)
    spec.worldbody.add_geom(type=mujoco.mjtGeom.mjGEOM_PLANE, size=[5, 5, 0.1])
    m = spec.compile()
    d = mujoco.MjData(m)
    d.qpos[:] = robot.nominal_qpos
    d.qpos[robot.trunk_qpos_adr + 2] += 0.02           # drop from slightly above
    qa, va, act = robot.joint_qpos_adr, robot.joint_dof_adr, robot.actuator_ids
    pose, lim = robot.nominal_pose, robot.torque_limits
    for _ in range(int(SETTLE_S / m.opt.timestep)):
        d.ctrl[act] = np.clip(HOLD_KP * (pose - d.qpos[qa]) - HOLD_KD * d.qvel[va], -lim, lim)
        mujoco.mj_step(m, d)
    return float(d.qpos[robot.trunk_qpos_adr + 2])


# --- bundled model ------------------------------------------------------------------

def test_bundled_quad12_is_listed():
    assert "quad12" in bundled_robot_names()
    assert (bundled_models_dir() / "quad12" / "manifest.yaml").is_file()


def test_total_mass_is_12kg(quad12):
    # Source of truth: MuJoCo's own mj_getTotalmass on the compiled robot model.
    assert mujoco.mj_getTotalmass(quad12.model) == pytest.approx(12.0, rel=0.01)
    assert quad12.mass_kg == pytest.approx(12.0, rel=0.01)


def test_manifest_lengths_and_order(quad12):
    man = quad12.manifest
    assert man.name == "quad12"
    assert man.mjcf_path.is_absolute() and man.mjcf_path.is_file()
    assert len(man.joints) == len(man.actuators) == 12
    assert man.torque_limits.shape == man.nominal_pose.shape == (12,)
    assert [f.name for f in man.feet] == ["FL", "FR", "RL", "RR"]
    assert man.joints[:3] == ("FL_abd", "FL_hip", "FL_knee")
    assert all(a == f"{j}_motor" for j, a in zip(man.joints, man.actuators))
    assert "trunk_geom" in man.fall_geoms
    assert set(man.sensors) >= {"orientation", "gyro", "accelerometer"}


def test_model_matches_manifest(quad12):
    m = quad12.model
    assert m.opt.jacobian == mujoco.mjtJacobian.mjJAC_DENSE
    assert m.opt.gravity[2] < 0
    assert m.ngeom > 0 and all(m.geom_type[g] != mujoco.mjtGeom.mjGEOM_PLANE for g in range(m.ngeom))
    assert m.nq == 7 + 12 and m.nu == 12
    assert m.jnt_type[m.body_jntadr[quad12.trunk_body_id]] == mujoco.mjtJoint.mjJNT_FREE
    for i, (j, a) in enumerate(zip(quad12.manifest.joints, quad12.manifest.actuators)):
        jid = mujoco.mj_name2id(m, mujoco.mjtObj.mjOBJ_JOINT, j)
        assert quad12.joint_qpos_adr[i] == m.jnt_qposadr[jid]
        assert quad12.joint_dof_adr[i] == m.jnt_dofadr[jid]
        assert m.actuator_trnid[quad12.actuator_ids[i], 0] == jid
        # actuator clamps agree with the manifest's torque limits
        assert m.actuator_forcerange[quad12.actuator_ids[i], 1] == pytest.approx(quad12.torque_limits[i])
        assert m.actuator_ctrlrange[quad12.actuator_ids[i], 1] == pytest.approx(quad12.torque_limits[i])
    assert quad12.foot_site_ids.shape == quad12.foot_geom_ids.shape == (4,)


def test_no_self_contacts_in_nominal_pose(quad12):
    d = mujoco.MjData(quad12.model)
    d.qpos[:] = quad12.nominal_qpos
    mujoco.mj_forward(quad12.model, d)
    assert d.ncon == 0


def test_nominal_inertia_matches_explicit_sum(quad12):
    m = quad12.model
    d = mujoco.MjData(m)
    d.qpos[:] = quad12.nominal_qpos
    mujoco.mj_kinematics(m, d)
    com = (m.body_mass[:, None] * d.xipos).sum(0) / m.body_mass.sum()
    inertia = np.zeros((3, 3))
    for b in range(1, m.nbody):
        r = d.ximat[b].reshape(3, 3)
        off = d.xipos[b] - com
        inertia += r @ np.diag(m.body_inertia[b]) @ r.T
        inertia += m.body_mass[b] * (off @ off * np.eye(3) - np.outer(off, off))
    trunk_rot = d.xmat[quad12.trunk_body_id].reshape(3, 3)
    np.testing.assert_allclose(quad12.trunk_inertia_body, trunk_rot.T @ inertia @ trunk_rot, atol=1e-9)
    np.testing.assert_allclose(quad12.com_offset_trunk,
                               trunk_rot.T @ (com - d.xpos[quad12.trunk_body_id]), atol=1e-12)
    assert np.all(np.linalg.eigvalsh(quad12.trunk_inertia_body) > 0)


def test_standing_height_settles_at_nominal_height(quad12):
    assert quad12.nominal_height == pytest.approx(0.30, abs=0.015)
    assert abs(settle_on_plane(quad12) - quad12.nominal_height) < 0.01


# --- bad manifests ------------------------------------------------------------------

def _write_variant(tmp_path: Path, edit) -> Path:
    src = bundled_models_dir() / "quad12"
    shutil.copy(src / "quad12.xml", tmp_path / "quad12.xml")
    doc = yaml.safe_load((src / "manifest.yaml").read_text())
    edit(doc)
    path = tmp_path / "manifest.yaml"
    path.write_text(yaml.safe_dump(doc))
    return path


def test_missing_field_names_file_and_field(tmp_path):
    path = _write_variant(tmp_path, lambda doc: doc.pop("nominal_height"))
    with pytest.raises(RobotError) as err:
        load_manifest(path)
    assert str(path) in str(err.value) and "nominal_height" in str(err.value)
    assert err.value.field == "nominal_height"
    assert isinstance(err.value, ValueError)


def test_unknown_joint_names_file_and_field(tmp_path):
    def edit(doc):
        doc["joints"][4] = "FR_elbow"
    path = _write_variant(tmp_path, edit)
    with pytest.raises(RobotError) as err:
        load_manifest(path)
    assert str(path) in str(err.value)
    assert err.value.field == "joints[4]" and "FR_elbow" in str(err.value)


@pytest.mark.parametrize("field, value, expect", [
    ("torque_limits", [18.0] * 11, "torque_limits"),
    ("nominal_pose", [0.0] * 13, "nominal_pose"),
    ("actuators", ["FL_abd_motor"], "actuators"),
    ("fall_geoms", ["trunk_geom", "tail_geom"], "fall_geoms[1]"),
    ("trunk", "FL_hip", "trunk"),                      # a body without a freejoint
    ("mjcf", "nowhere.xml", "mjcf"),
])
def test_bad_field_values(tmp_path, field, value, expect):
    def edit(doc):
        doc[field] = value
    path = _write_variant(tmp_path, edit)
    with pytest.raises(RobotError) as err:
        load_manifest(path)
    assert err.value.field == expect and str(path) in str(err.value)


def test_unknown_bundled_name_lists_available():
    with pytest.raises(RobotError, match="quad12"):
        resolve_robot("quad99")


def test_resolve_relative_path_and_ref(tmp_path):
    man = resolve_robot("quad12_long/manifest.yaml", base_dir=FIXTURES)
    assert man.name == "quad12_long"

    class Ref:  # shape of the scenario layer's RobotRef
        name = None
        manifest = LONG_MANIFEST
    assert resolve_robot(Ref()).manifest_path == LONG_MANIFEST.resolve()


# --- a second robot through the same code ---------------------------------------------

def test_second_robot_variant_loads_and_differs(quad12, quad12_long):
    man = quad12_long.manifest
    assert man.name == "quad12_long" and man.trunk == "base"
    assert quad12_long.mass_kg == pytest.approx(mujoco.mj_getTotalmass(quad12_long.model))
    assert quad12_long.mass_kg == pytest.approx(14.0, rel=0.01)
    assert abs(quad12_long.mass_kg - quad12.mass_kg) > 1.0
    assert quad12_long.nominal_height > quad12.nominal_height + 0.05
    assert quad12_long.torque_limits[2] == pytest.approx(35.0)
    assert quad12_long.sensor_adr.keys() == quad12.sensor_adr.keys()
    assert quad12_long.trunk_inertia_body[1, 1] > quad12.trunk_inertia_body[1, 1]
    assert abs(settle_on_plane(quad12_long) - quad12_long.nominal_height) < 0.01
