"""The fault-kind registry: a user's kind is validated, checked against the robot, compiled and takes effect.

The built-in kinds are found through the ``bench.faults`` entry points; a kind
defined here, in a test module, is registered in-process and goes through the
same path (schema -> validation and JSON Schema -> world step -> compiled
effect in the episode). A second test registers a kind through an entry point
of a package installed on ``sys.path`` only, in a fresh interpreter.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import textwrap
from typing import ClassVar

import numpy as np
import pytest

from bench.errors import ScenarioErrors
from bench.faults import Effect, FaultContext, FaultKind, fault_kinds, register_fault_kind, unregister_fault_kind
from bench.scenario import FAULT_KINDS, load_file, scenario_json_schema
from bench.fieldspec import AT, frozen, spec
from bench.sim.episode import run_episode
from bench.world.build import build_world, manifest_for
from bench.world.validate import check_against_robot


@frozen
class TorqueBias:
    """A constant torque added to one joint's motor after the limits (a stuck current offset)."""

    kind: ClassVar[str] = "torque_bias"
    at: float = spec(**AT)
    joint: str = spec(doc="joint name from the robot manifest")
    bias: float = spec(doc="added torque", unit="N m", ge=-50.0, le=50.0)

    def label(self) -> str:
        return f"{self.joint} torque bias {self.bias:g} N m"

    def joint_refs(self):
        return [(("joint",), self.joint)]


class TorqueBiasEffect(Effect):
    def __init__(self, items, ctx: FaultContext):
        self.steps = [(ctx.first_tick(f.at), ctx.joint_index[f.joint], f.bias) for _, f in items]
        self.on: list = []

    def switch_ticks(self):
        return [k for k, _, _ in self.steps]

    def switch(self, k: int) -> None:
        self.on = [(j, b) for k_on, j, b in self.steps if k >= k_on]
        self.applying = True

    def apply(self, applied) -> None:
        for j, b in self.on:
            applied[j] += b


TORQUE_BIAS = FaultKind(schema=TorqueBias, compile=TorqueBiasEffect)


@pytest.fixture
def torque_bias():
    register_fault_kind(TORQUE_BIAS)
    try:
        yield TORQUE_BIAS
    finally:
        unregister_fault_kind("torque_bias")


class Zero:
    def reset(self, robot, dt):
        self.n = len(robot.manifest.joints)

    def step(self, obs, command):
        return np.zeros(self.n)


def _write(tmp_path, text: str):
    p = tmp_path / "s.yaml"
    p.write_text(textwrap.dedent(text))
    return p


SCENARIO = """
    name: biased
    duration: 0.2
    faults:
      - torque_bias: {at: 0.1, joint: FL_knee, bias: 3.5}
    criteria: {no_fall: false}
"""


def test_builtin_kinds_come_from_the_entry_points():
    assert {"derate", "lock", "limp", "latency", "sensor_noise", "sensor_freeze"} <= set(fault_kinds())
    assert set(FAULT_KINDS) == set(fault_kinds())


def test_an_unregistered_kind_is_refused_with_the_line(tmp_path):
    p = _write(tmp_path, SCENARIO)
    with pytest.raises(ScenarioErrors) as info:
        load_file(p)
    [err] = info.value.errors
    assert err.line == 5 and "unknown fault kind 'torque_bias'" in str(err)


def test_a_user_kind_validates_with_the_fields_it_declares(tmp_path, torque_bias):
    [sc] = load_file(_write(tmp_path, SCENARIO))
    assert sc.faults == (TorqueBias(at=0.1, joint="FL_knee", bias=3.5),)
    bad = _write(tmp_path, SCENARIO.replace("bias: 3.5", "bias: 80"))
    with pytest.raises(ScenarioErrors) as info:
        load_file(bad)
    assert "faults.0.torque_bias.bias" in str(info.value) and "at most 50 N m" in str(info.value)
    props = scenario_json_schema()["$defs"]["TorqueBias"]["properties"]
    assert props["bias"]["maximum"] == 50.0 and "N m" in props["bias"]["description"]


def test_a_user_kind_joint_is_checked_against_the_robot(tmp_path, torque_bias):
    [sc] = load_file(_write(tmp_path, SCENARIO.replace("FL_knee", "FL_kneee")))
    [err] = check_against_robot(sc)
    assert err.field == "faults.0.torque_bias.joint" and err.line == 5
    assert "did you mean 'FL_knee'" in str(err)


def test_a_user_kind_takes_effect_from_its_tick(tmp_path, torque_bias):
    [sc] = load_file(_write(tmp_path, SCENARIO))
    manifest = manifest_for(sc)
    world = build_world(sc, manifest)
    from bench.robot.model import NominalRobot

    ep = run_episode(world, sc, Zero(), NominalRobot(manifest))
    tau = ep.trace.arrays["joint_torque"]
    t = ep.trace.arrays["t"]
    j = list(manifest.joints).index("FL_knee")
    on = t >= 0.1 - 1e-12
    assert on.any() and (~on).any()
    assert np.all(tau[~on] == 0.0)
    assert np.all(tau[on, j] == 3.5)
    others = np.delete(tau[on], j, axis=1)
    assert np.all(others == 0.0)
    assert [e.label for e in ep.events] == ["FL_knee torque bias 3.5 N m"]


def test_a_kind_needs_an_at_field():
    @frozen
    class NoTime:
        kind: ClassVar[str] = "no_time"
        joint: str = spec(doc="a joint")

    with pytest.raises(TypeError, match="no field 'at'"):
        register_fault_kind(FaultKind(schema=NoTime, compile=lambda items, ctx: None))
    assert "no_time" not in fault_kinds()


PLUGIN = '''
from typing import ClassVar
from bench.faults import Effect, FaultKind
from bench.fieldspec import AT, frozen, spec

@frozen
class Blind:
    """The gyro reads zero from `at` on."""
    kind: ClassVar[str] = "blind_gyro"
    at: float = spec(**AT)

class BlindEffect(Effect):
    def __init__(self, items, ctx):
        self.k = min(ctx.first_tick(f.at) for _, f in items)
    def switch_ticks(self):
        return [self.k]
    def switch(self, k):
        self.observing = True
    def observe(self, obs):
        obs.imu_gyro[:] = 0.0

KIND = FaultKind(schema=Blind, compile=BlindEffect)
'''

CHILD = '''
import json, sys
import numpy as np
from bench.faults import fault_kinds
from bench.scenario import load_file
from bench.robot.model import NominalRobot
from bench.sim.episode import run_episode
from bench.world.build import build_world, manifest_for

seen = []
class Spy:
    def reset(self, robot, dt):
        self.n = len(robot.manifest.joints)
    def step(self, obs, command):
        seen.append((obs.t, float(np.abs(obs.imu_gyro).sum())))
        return np.zeros(self.n)

[sc] = load_file(sys.argv[1])
m = manifest_for(sc)
run_episode(build_world(sc, m), sc, Spy(), NominalRobot(m))
try:
    load_file(sys.argv[2])
    broken = ""
except Exception as exc:
    broken = str(exc)
print(json.dumps({"kinds": sorted(fault_kinds()), "seen": seen, "broken": broken}))
'''


def test_a_kind_from_an_entry_point_of_another_package(tmp_path):
    site = tmp_path / "site"
    (site / "userfaults-0.1.dist-info").mkdir(parents=True)
    (site / "userfaults.py").write_text(PLUGIN)
    (site / "userfaults-0.1.dist-info" / "METADATA").write_text("Metadata-Version: 2.1\nName: userfaults\nVersion: 0.1\n")
    (site / "userfaults-0.1.dist-info" / "entry_points.txt").write_text(
        "[bench.faults]\nblind_gyro = userfaults:KIND\nbroken_kind = userfaults_missing:KIND\n")
    scenario = _write(tmp_path, """
        name: blind
        duration: 0.1
        faults:
          - blind_gyro: {at: 0.05}
        criteria: {no_fall: false}
    """)
    broken = tmp_path / "broken.yaml"
    broken.write_text(scenario.read_text().replace("blind_gyro", "broken_kind"))
    env = {**os.environ, "PYTHONPATH": os.pathsep.join([str(site), os.environ.get("PYTHONPATH", "")])}
    out = subprocess.run([sys.executable, "-c", CHILD, str(scenario), str(broken)], capture_output=True, text=True,
                         env=env, timeout=120)
    assert out.returncode == 0, out.stderr
    got = json.loads(out.stdout)
    assert "blind_gyro" in got["kinds"] and "derate" in got["kinds"] and "broken_kind" not in got["kinds"]
    # A kind whose package is broken is named, with why, at the line that uses it; the others still load.
    assert "faults.0.broken_kind" in got["broken"] and "cannot be loaded" in got["broken"]
    assert "ModuleNotFoundError" in got["broken"] and ":5:" in got["broken"]
    before = [g for t, g in got["seen"] if t < 0.05 - 1e-12]
    after = [g for t, g in got["seen"] if t >= 0.05 - 1e-12]
    assert before and after
    assert all(g > 0.0 for g in before[1:])   # a standing robot's gyro is never exactly zero after the first tick
    assert all(g == 0.0 for g in after)


def test_the_scenario_stage_imports_no_mujoco(tmp_path):
    """Every kind's schema half (the built-ins here) loads with MuJoCo made unimportable."""
    p = _write(tmp_path, """
        name: all-kinds
        duration: 1
        faults:
          - derate: {at: 0.1, joints: [FL_knee], factor: 0.5}
          - lock: {at: 0.1, joint: FL_knee}
          - limp: {at: 0.1, joint: FR_knee}
          - latency: {at: 0.1, delay: 0.01}
          - sensor_noise: {sensor: imu_gyro, std: 0.1}
          - sensor_freeze: {at: 0.2, sensor: joint_pos}
    """)
    code = ("import sys; sys.modules['mujoco'] = None\n"
            "from bench.scenario import load_file, scenario_json_schema\n"
            f"[s] = load_file({str(p)!r}); scenario_json_schema()\n"
            "print(sorted(f.kind for f in s.faults))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert out.returncode == 0, out.stderr
    assert out.stdout.strip() == str(sorted(["derate", "lock", "limp", "latency", "sensor_noise", "sensor_freeze"]))


def test_no_fault_means_no_per_tick_work(tmp_path):
    from bench.sim.faults import compile_faults

    ctx = FaultContext(model=None, data=None, world=None, ctrl_dt=0.002, n_ticks=100, joint_index={},
                       nominal_limits=np.ones(12), limit_now=np.ones(12), rng=None)
    plan = compile_faults((), ctx)
    assert plan.next_tick == -1 and not plan.observers and not plan.commanders and not plan.appliers


def test_first_tick_matches_the_episode_clock():
    ctx = FaultContext(model=None, data=None, world=None, ctrl_dt=1.0 / 500.0, n_ticks=10_000, joint_index={},
                       nominal_limits=None, limit_now=None, rng=None)
    for at in (0.0, 0.002, 0.1, 0.3, 0.30000000000000004, 1.2345, 7.0):
        k = ctx.first_tick(at)
        assert k * ctx.ctrl_dt >= at and (k == 0 or (k - 1) * ctx.ctrl_dt < at), at


def test_derates_overwrite_in_written_order(tmp_path):
    """A later-written derate wins where both are on, whichever switched on first (as before the registry)."""
    [sc] = load_file(_write(tmp_path, """
        name: two-derates
        duration: 0.2
        faults:
          - derate: {at: 0.05, joints: [FL_knee], factor: 0.2}
          - derate: {at: 0.1, factor: 0.5}
        criteria: {no_fall: false}
    """))
    manifest = manifest_for(sc)
    from bench.robot.model import NominalRobot

    ep = run_episode(build_world(sc, manifest), sc, Zero(), NominalRobot(manifest))
    t, lim = ep.trace.arrays["t"], ep.trace.arrays["torque_limit"]
    nominal = np.asarray(manifest.torque_limits, dtype=float)
    j = list(manifest.joints).index("FL_knee")
    first, second = (t >= 0.05 - 1e-12) & (t < 0.1 - 1e-12), t >= 0.1 - 1e-12
    assert np.all(lim[t < 0.05 - 1e-12] == nominal)
    assert np.all(lim[first, j] == nominal[j] * 0.2) and np.all(np.delete(lim[first], j, axis=1) == np.delete(nominal, j))
    assert np.all(lim[second] == nominal * 0.5)


def test_bench_list_faults_prints_the_registry(capsys, torque_bias):
    from bench.cli import main

    assert main(["list", "faults"]) == 0
    lines = capsys.readouterr().out.splitlines()
    assert [ln.split()[0] for ln in lines] == sorted(fault_kinds())
    assert any(ln.startswith("torque_bias ") and "constant torque added" in ln for ln in lines)
