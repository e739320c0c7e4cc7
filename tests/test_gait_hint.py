"""The gait hint: scenario field (with did-you-mean) -> obs.gait_hint each tick -> the trace's gait_hint column."""

from __future__ import annotations

import textwrap

import numpy as np
import pytest

from bench.controllers.base import Observation
from bench.errors import ScenarioErrors
from bench.gaits import GAIT_HINT_NAMES, GAIT_HINTS, gait_code, gait_name
from bench.robot.model import NominalRobot
from bench.scenario import load_file
from bench.scenario.jsonschema import scenario_json_schema
from bench.sim.episode import run_episode
from bench.sim.trace import Trace
from bench.world.build import build_world, manifest_for


class HintRecorder:
    """Holds the nominal pose with a joint PD and records the hint it is shown every tick."""

    def reset(self, robot, control_dt):
        self.q0 = np.asarray(robot.nominal_qpos[7:], dtype=float)
        self.seen: list[tuple[float, str | None]] = []

    def step(self, obs: Observation, command):
        self.seen.append((obs.t, obs.gait_hint))
        return 60.0 * (self.q0 - obs.joint_pos) - 1.0 * obs.joint_vel


def _load(tmp_path, commands: str, name="hint"):
    p = tmp_path / "s.yaml"
    p.write_text(textwrap.dedent(f"""
        name: {name}
        duration: 1.0
        commands:
        """) + textwrap.indent(textwrap.dedent(commands), "  "))
    return p, load_file(p)


def _run(sc):
    man = manifest_for(sc)
    ctrl = HintRecorder()
    ep = run_episode(build_world(sc, man), sc, ctrl, NominalRobot(man), seed=sc.seed)
    return ep, ctrl


def test_the_codes_are_the_documented_ones():
    assert [gait_code(g) for g in (None, "stand", "trot", "pace", "bound", "walk")] == [0, 1, 2, 3, 4, 5]
    assert [gait_name(c) for c in range(6)] == [None, "stand", "trot", "pace", "bound", "walk"]
    assert GAIT_HINT_NAMES == ("none",) + GAIT_HINTS
    with pytest.raises(ValueError):
        gait_name(6)


def test_hint_is_held_until_a_later_command_sets_another_and_recorded(tmp_path):
    _, [sc] = _load(tmp_path, """
        - {at: 0.0}
        - {at: 0.2, vx: 0.1, gait: bound}
        - {at: 0.4, vx: 0.2}
        - {at: 0.6, gait: walk}
        """)
    assert [c.gait for c in sc.commands] == [None, "bound", None, "walk"]
    ep, ctrl = _run(sc)
    t = np.array([s[0] for s in ctrl.seen])
    seen = [s[1] for s in ctrl.seen]
    want = [None if x < 0.2 - 1e-9 else "bound" if x < 0.6 - 1e-9 else "walk" for x in t]
    assert seen == want
    # the trace: one integer per row with the names in the metadata, agreeing with what the controller saw
    codes = ep.trace["gait_hint"]
    assert codes.dtype == np.int8 and len(codes) == len(ep.trace)
    names = ep.trace.meta["gait_hint_names"].split(",")
    assert [None if names[c] == "none" else names[c] for c in codes] == seen
    # and it survives the npz round trip
    path = tmp_path / "trace.npz"
    ep.trace.save(path)
    back = Trace.load(path)
    np.testing.assert_array_equal(back["gait_hint"], codes)
    assert back.meta["gait_hint_names"] == "none,stand,trot,pace,bound,walk"


def test_a_scenario_without_hints_records_no_column(tmp_path):
    """Scenarios that never give a hint keep today's trace (and so today's trace digests)."""
    _, [sc] = _load(tmp_path, """
        - {at: 0.0}
        - {at: 0.2, vx: 0.1}
        """)
    ep, ctrl = _run(sc)
    assert "gait_hint" not in ep.trace.arrays and "gait_hint_names" not in ep.trace.meta
    assert {s[1] for s in ctrl.seen} == {None}


def test_a_wrong_gait_name_is_refused_with_a_suggestion(tmp_path):
    with pytest.raises(ScenarioErrors) as info:
        _load(tmp_path, """
            - {at: 0.0, gait: bownd}
            - {at: 0.5, gait: gallop}
            """)
    text = str(info.value)
    assert "s.yaml:6" in text and "commands.0.gait" in text and "did you mean 'bound'" in text
    assert "commands.1.gait" in text and "expected one of stand, trot, pace, bound, walk" in text


def test_json_schema_lists_the_gait_names():
    cmd = scenario_json_schema()["$defs"]["Command"]["properties"]["gait"]
    assert {"enum": list(GAIT_HINTS)} in cmd["anyOf"] and {"type": "null"} in cmd["anyOf"]


def test_json_schema_accepts_the_gait_scenarios_and_refuses_wrong_names():
    import glob

    import jsonschema
    import yaml

    v = jsonschema.Draft202012Validator(scenario_json_schema())
    root = __import__("pathlib").Path(__file__).resolve().parents[1]
    files = glob.glob(str(root / "scenarios/gaits/*.yaml"))
    assert len(files) >= 5
    for f in files:
        assert not list(v.iter_errors(yaml.safe_load(open(f)))), f
    for bad in ({"commands": [{"at": 0, "gait": "bownd"}]}, {"criteria": {"gait": {"expect": "trott"}}},
                {"criteria": {"gait": [{"expect": "trot", "form": 1}]}}, {"criteria": {"duty_factor_min": 2}}):
        assert list(v.iter_errors({"name": "x", "duration": 1, **bad})), bad


def test_the_stacks_follow_stand_and_ignore_a_hint_they_do_not_know(tmp_path):
    from bench.controllers.stacks import ForceQPController
    from bench.scoring.gait_check import read_gait

    class Gallop(ForceQPController):
        def step(self, obs, command):
            obs.gait_hint = "gallop"       # a gait the stack does not know: it must trot as without a hint
            return super().step(obs, command)

    _, [sc] = _load(tmp_path, """
        - {at: 0.0, vx: 0.3, gait: stand}
        """)
    sc = __import__("dataclasses").replace(sc, duration=2.0)
    man = manifest_for(sc)
    ep = run_episode(build_world(sc, man), sc, ForceQPController(), NominalRobot(man), seed=sc.seed)
    assert ep.status == "completed" and read_gait(ep.trace).gait == "stand"
    ep = run_episode(build_world(sc, man), sc, Gallop(), NominalRobot(man), seed=sc.seed)
    assert ep.status == "completed" and read_gait(ep.trace, t_from=1.0).gait == "trot"
