"""The lean episode loop (bench/sim/episode.py, contacts.py, rawmem.py) against plain references.

- Foot forces: the loop logs raw contact records per tick and rebuilds the forces after the
  episode (in chunks); they must equal, bit for bit, a straightforward per-tick computation
  (``mj_contactForce``, ``frame.T @ f``, summed per foot) made inside the same episodes: standing,
  trotting, rough ground, a fault, a randomised trial with a payload on the trunk.
- The raw views of MjData: checked against the bindings, refused when they do not check, and an
  episode without them (the bindings' fallback) records the same trace to the last bit.
- The observation: views into one buffer; a controller that replaces or deletes a field gets a
  fresh observation with this tick's values.
"""

from __future__ import annotations

import dataclasses
import textwrap
from pathlib import Path

import mujoco
import numpy as np
import pytest

from bench.controllers.registry import make
from bench.robot.model import NominalRobot
from bench.scenario import load_scenarios
from bench.scenario.trials import expand_trials
from bench.sim import contacts as contacts_module
from bench.sim import episode as episode_module
from bench.sim.contacts import ContactTable
from bench.sim.episode import run_episode
from bench.sim.rawmem import ContactView, DataView
from bench.world.build import build_world, manifest_for

ROOT = Path(__file__).resolve().parents[1]


def _scenario(tmp_path, text):
    path = tmp_path / "s.yaml"
    path.write_text(textwrap.dedent(text))
    return load_scenarios([str(path)])[0]


def _bundled(rel, trial=None):
    sc = load_scenarios([str(ROOT / "scenarios" / rel)])[0]
    return expand_trials(sc)[trial] if trial is not None else sc


def _run(sc, controller, duration=None):
    if duration is not None:
        sc = dataclasses.replace(sc, duration=duration)
    man = manifest_for(sc)
    _, ctrl = make(controller)
    return run_episode(build_world(sc, man), sc, ctrl, NominalRobot(man), seed=sc.seed)


def _reference_force(table: ContactTable, m, d) -> np.ndarray:
    """Per-foot ground reaction forces after mj_step2 of the instant ``table.classify`` saw: the direct way."""
    force = np.zeros((table.n_feet, 3))
    cf = np.zeros(6)
    for i, sign, foot in table._found:
        mujoco.mj_contactForce(m, d, int(i), cf)
        force[foot] += sign * (d.contact.frame[i].reshape(3, 3).T @ cf[:3])
    return force


ROUGH = "terrain:\n  - rough: {start: -1.0, length: 3.0, height: 0.05, wavelength: 0.3}\n"
CASES = {
    "stand": (lambda tmp: _scenario(tmp, "name: s\nduration: 1.5\n"), "joint-pd", None),
    "trot": (lambda tmp: _scenario(tmp, "name: t\nduration: 2.5\ncommands: [{at: 0.0}, {at: 0.5, vx: 0.4}]\n"),
             "force-qp", None),
    "rough": (lambda tmp: _scenario(tmp, "name: r\nduration: 2.0\ncommands: [{at: 0.0}, {at: 0.3, vx: 0.4}]\n"
                                    + ROUGH), "force-qp", None),
    "fault-lock": (lambda tmp: _bundled("faults/locked-knee-trot.yaml"), "force-qp", 4.0),
    "trial-payload": (lambda tmp: _bundled("payload/harvest-crate-trials.yaml", trial=3), "force-qp", None),
    "lying": (lambda tmp: _scenario(tmp, "name: l\nduration: 1.0\ncriteria: {no_fall: false}\n"), "zero", None),
}


@pytest.mark.parametrize("case", list(CASES))
@pytest.mark.parametrize("chunk", [4096, 7])
def test_rebuilt_foot_forces_equal_the_per_tick_computation(tmp_path, monkeypatch, case, chunk):
    """Inside real episodes: the reference is computed at each tick's log call, from the live MjData."""
    make_sc, controller, duration = CASES[case]
    sc = make_sc(tmp_path)
    monkeypatch.setattr(contacts_module, "LOG_TICKS", chunk)   # 7: many flushes on the way
    if chunk == 7:
        monkeypatch.setattr(contacts_module, "MAX_PLANS", 3)   # and the plan cache cleared under the log
    seen: dict[int, np.ndarray] = {}
    logged = []
    original = ContactTable.log

    def log_and_reference(self, d, k):
        seen[k] = _reference_force(self, self._m, d)
        logged.append(k)
        return original(self, d, k)

    monkeypatch.setattr(ContactTable, "log", log_and_reference)
    ep = _run(sc, controller, duration)
    n = len(ep.trace)
    assert n > 100
    assert logged, "the episode logged its contacts (the raw contact view checked)"
    force = ep.trace["foot_force"]
    ref = np.zeros_like(force)
    for k, f in seen.items():
        if k < n:
            ref[k] = f
    assert force.tobytes() == ref.tobytes()   # same bits, signed zeros included
    assert np.abs(force[:, :, 2]).max() > 10.0, "the feet carried the robot at some point"
    if case in ("trot", "rough", "fault-lock"):
        contact = ep.trace["foot_contact"]
        assert (~contact).any() and contact.all(axis=1).any(), "feet in the air and all four down"


def test_forces_equal_with_and_without_the_log(tmp_path, monkeypatch):
    """The whole trace of an episode with the log equals the one computing forces tick by tick."""
    sc = _bundled("faults/derate-knees-50.yaml")
    with_log = _run(sc, "force-qp", 4.0).trace
    monkeypatch.setattr(ContactTable, "start_log", lambda self, m, out: None)
    per_tick = _run(sc, "force-qp", 4.0).trace
    for key in with_log.arrays:
        if key != "controller_ms":
            assert with_log[key].tobytes() == per_tick[key].tobytes(), key
    # derating made the limits vary: they are recorded per tick
    assert len(np.unique(with_log["torque_limit"], axis=0)) == 2


def test_rebuild_handles_cones_dimensions_and_several_contacts_per_foot():
    """rebuild_forces against the per-tick path on a small world, for each cone and contact dimension; foot 0
    is a box (four contacts with the floor, summed in contact order), foot 1 a sphere, some ticks logged."""
    xml = """<mujoco><option cone="{cone}"/><worldbody><geom name="floor" type="plane" size="5 5 .1"/>
      <body pos="0 0 .1"><freejoint/><geom name="a" type="box" size=".1 .08 .05" condim="{dim}"
        friction="0.7 0.01 0.002" euler="0 3 2"/></body>
      <body pos=".4 0 .1"><freejoint/><geom name="b" type="sphere" size=".1" condim="{dim}"/></body>
      </worldbody></mujoco>"""
    for cone in ("pyramidal", "elliptic"):
        for dim in (1, 3, 4, 6):
            m = mujoco.MjModel.from_xml_string(xml.format(cone=cone, dim=dim))
            d = mujoco.MjData(m)
            d.qvel[0], d.qvel[5], d.qvel[6 + 1] = 0.4, 2.0, -0.3      # sliding and turning: friction at work
            for _ in range(30):
                mujoco.mj_step(m, d)
            table = ContactTable(m.ngeom, [0], [1, 2], [])
            table.bind_raw(m, d)
            assert table.view is not None
            out = np.zeros((40, 6))
            expect = np.zeros((40, 6))
            table.start_log(m, out)
            most = 0
            for k in range(40):
                mujoco.mj_step1(m, d)
                table.classify(d, np.zeros(2, dtype=bool))
                mujoco.mj_step2(m, d)
                table.forces(m, d, expect[k])
                most = max(most, sum(1 for _, _, foot in table._found if foot == 0))
                if k % 3:
                    table.log(d, k)
                else:                       # ticks not logged stay as they were
                    expect[k] = 0.0
            table.flush()
            assert out.tobytes() == expect.tobytes(), (cone, dim)
            assert np.abs(out).max() > 0
            assert most >= 2, "the box foot had several contacts in one tick"


class _Copies:
    """An MjData look-alike whose arrays are fresh copies at every access (not live memory)."""

    def __init__(self, d):
        self._d = d

    def __getattr__(self, name):
        v = getattr(self._d, name)
        if name == "contact":
            return _Copies(v)
        return v.copy() if isinstance(v, np.ndarray) else v


def test_raw_views_check_against_the_bindings(tmp_path):
    sc = _scenario(tmp_path, "name: s\nduration: 0.1\n")
    world = build_world(sc)
    m = world.model
    d = mujoco.MjData(m)
    d.qpos[:] = world.initial_qpos
    mujoco.mj_forward(m, d)
    view = DataView.build(d, ("qpos", "qvel", "sensordata", "xquat", "site_xpos", "xipos"))
    assert view is not None
    for name in view.offsets:
        np.testing.assert_array_equal(view.part(name), getattr(d, name))
    mujoco.mj_step(m, d)                            # live: the view follows MuJoCo's own writes
    np.testing.assert_array_equal(view.flat[view.index("qvel")], d.qvel)
    assert DataView.build(_Copies(d), ("qpos", "qvel")) is None      # copies are not MjData's memory
    assert DataView.build(d, ("qpos", "nq")) is None                 # not an array

    cv = ContactView.build(m, d)
    assert cv is not None and d.ncon >= 4
    for _ in range(50):                              # the records stay where they are, step after step
        mujoco.mj_step(m, d)
        assert cv.check()
        rec = cv.records[:d.ncon]
        np.testing.assert_array_equal(rec["geom"], d.contact.geom)
        np.testing.assert_array_equal(rec["frame"], d.contact.frame)
        np.testing.assert_array_equal(rec["efc_address"], d.contact.efc_address)
    assert ContactView.build(m, _Copies(d)) is None
    d0 = mujoco.MjData(m)                            # no contact: the layout cannot be seen yet
    assert ContactView.build(m, d0) is None


def test_episode_without_raw_views_records_the_same_trace(tmp_path, monkeypatch):
    """The bindings' fallback (views refused) and the raw path give the same trace, to the last bit."""
    sc = _bundled("payload/harvest-crate-trials.yaml", trial=5)
    fast = _run(sc, "force-qp", 2.0)
    monkeypatch.setattr(DataView, "build", classmethod(lambda cls, d, names: None))
    monkeypatch.setattr(ContactView, "build", classmethod(lambda cls, m, d: None))
    calls = []
    original = ContactTable.forces
    monkeypatch.setattr(ContactTable, "forces", lambda self, m, d, out: (calls.append(1), original(self, m, d, out)))
    slow = _run(sc, "force-qp", 2.0)
    assert calls, "without the raw contact view the forces are computed tick by tick"
    assert fast.status == slow.status
    for key in fast.trace.arrays:
        if key != "controller_ms":
            assert fast.trace[key].tobytes() == slow.trace[key].tobytes(), key


def test_contact_view_bound_at_the_first_contact(tmp_path, monkeypatch):
    """A robot dropped from above the ground has no contact at the start: the view is bound at the first one."""
    sc = _scenario(tmp_path, "name: drop\nduration: 1.0\ninitial: {height_offset: 0.3}\ncriteria: {no_fall: false}\n")
    tables = []
    original = ContactTable.bind_raw

    def spy(self, m, d):
        tables.append((self, int(d.ncon)))
        return original(self, m, d)

    monkeypatch.setattr(ContactTable, "bind_raw", spy)
    ep = _run(sc, "joint-pd")
    assert tables[0][1] == 0, "no contact when the episode started"
    assert any(n > 0 for _, n in tables[1:]), "bound again at the first contact"
    assert tables[0][0].logging
    monkeypatch.setattr(ContactTable, "start_log", lambda self, m, out: None)
    ref = _run(sc, "joint-pd")
    assert ep.trace["foot_force"].tobytes() == ref.trace["foot_force"].tobytes()
    assert np.abs(ep.trace["foot_force"][:, :, 2]).max() > 10.0


class _Vandal:
    """Joint PD that replaces, deletes or reassigns observation fields at given ticks, and keeps what it saw."""

    name = "vandal"

    def __init__(self):
        self.seen = []
        self.kept = None

    def reset(self, robot, control_dt):
        self.pd = make("joint-pd")[1]
        self.pd.reset(robot, control_dt)
        self.k = 0

    def step(self, obs, command):
        k = self.k
        self.k += 1
        if k == 0:
            self.kept = obs.joint_pos          # a reference kept across ticks
        self.seen.append((obs.joint_pos.copy(), obs.joint_vel.copy(), obs.imu_quat.copy(),
                          obs.privileged.base_pos.copy(), obs.foot_contact.copy(), self.kept.copy()))
        tau = self.pd.step(obs, command).copy()
        if k == 3:
            obs.joint_pos = np.full_like(obs.joint_pos, 9.0)   # replaced by its own array
        elif k == 5:
            del obs.imu_quat                                   # deleted
        elif k == 7:
            obs.privileged.base_pos = np.zeros(3)              # a nested field replaced
        elif k == 9:
            obs.privileged = None
        elif k == 11:
            obs.foot_contact = obs.foot_contact.astype(float)
        obs.joint_vel[:] = -1.0                                # writing into the arrays changes nothing
        return tau


def test_a_controller_that_replaces_observation_fields_gets_fresh_ones(tmp_path):
    sc = _scenario(tmp_path, "name: s\nduration: 0.1\n")
    man = manifest_for(sc)
    ctrl = _Vandal()
    ep = run_episode(build_world(sc, man), sc, ctrl, NominalRobot(man), seed=sc.seed)
    assert ep.status == "completed", ep.reason
    tr = ep.trace
    assert len(ctrl.seen) == len(tr) == 50
    for k, (jp, jv, quat, bpos, fc, kept) in enumerate(ctrl.seen):
        np.testing.assert_array_equal(jp, tr["joint_pos"][k], err_msg=f"tick {k}")
        np.testing.assert_array_equal(jv, tr["joint_vel"][k], err_msg=f"tick {k}")
        np.testing.assert_array_equal(bpos, tr["base_pos"][k], err_msg=f"tick {k}")
        np.testing.assert_array_equal(quat, tr["base_quat"][k], err_msg=f"tick {k}")   # IMU at the trunk origin
        np.testing.assert_array_equal(fc, tr["foot_contact"][k], err_msg=f"tick {k}")
        if k <= 3:   # the kept reference follows the state until the observation is replaced
            np.testing.assert_array_equal(kept, tr["joint_pos"][k])
    assert tr["foot_contact"].all()


def test_observation_arrays_are_views_of_one_buffer():
    o, buf, parts = episode_module._buffered_observation(12, 4, True)
    for a in (o.imu_quat, o.imu_gyro, o.imu_accel, o.joint_pos, o.joint_vel, o.privileged.base_pos,
              o.privileged.base_linvel):
        assert np.shares_memory(a, buf)
    assert buf.shape == (10 + 24 + 6,)
    o2, buf2, parts2 = episode_module._buffered_observation(12, 4, False)
    assert o2.privileged is None and buf2.shape == (34,) and parts2[6:] == (None, None, None)


@pytest.mark.parametrize("bad", [np.nan, np.inf, -np.inf])
def test_non_finite_state_ends_the_episode_at_that_tick(tmp_path, monkeypatch, bad):
    """The state check after the tick's physics (a dot product with zeros) sees a NaN or an infinity."""
    sc = _scenario(tmp_path, "name: s\nduration: 0.2\n")
    real_step = mujoco.mj_step
    calls = []

    def step(m, d):
        real_step(m, d)
        calls.append(1)
        if len(calls) == 41:           # tick 40's plain mj_step (after its mj_step1/mj_step2)
            d.qvel[7] = bad

    monkeypatch.setattr(mujoco, "mj_step", step)
    ep = _run(sc, "joint-pd")
    assert ep.status == "error"
    assert ep.reason.startswith("non-finite state (NaN or infinity in qpos/qvel) at tick 40 "), ep.reason
    assert len(ep.trace) == 41
