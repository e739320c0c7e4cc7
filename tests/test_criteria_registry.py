"""One criteria registry: what validation accepts, what scoring evaluates and what `bench list criteria` prints."""

from __future__ import annotations

import textwrap
from dataclasses import dataclass

import numpy as np
import pytest

from bench.cli import main
from bench.errors import ScenarioErrors
from bench.scenario import criterion_names, load_file, register_criterion, unregister_criterion
from bench.scenario.criteria import all_criteria, get_criterion
from bench.scoring.criteria import CriterionResult
from bench.scoring.verdict import score
from bench.sim.trace import Trace


@dataclass(frozen=True)
class JointVelMax:
    """A user's criterion: the largest |joint velocity| over the scoring window, at most the limit."""

    name: str = "joint_vel_max"
    description: str = "largest |joint velocity|, rad/s"
    unit: str = " rad/s"
    ge: float = 0.0
    le: float = 100.0
    direction = "max"

    def evaluate(self, metrics, series, trace, limit, score_from):
        t = trace["t"]
        v = float(np.abs(trace["joint_vel"][t >= score_from]).max())
        return CriterionResult(self.name, v, float(limit), v <= limit, None, self.unit)


@pytest.fixture
def user_criterion():
    register_criterion(JointVelMax())
    try:
        yield
    finally:
        unregister_criterion("joint_vel_max")


def _scenario(tmp_path, criteria: str):
    p = tmp_path / "s.yaml"
    p.write_text(textwrap.dedent(f"""
        name: c
        duration: 1
        criteria: {criteria}
    """))
    return p


def test_builtins_are_in_the_registry_with_bounds_and_direction():
    names = criterion_names()
    assert {"no_fall", "drift_max", "distance_min", "pass_rate_min", "torque_saturation_max"} <= set(names)
    for name in names:
        crit = get_criterion(name)
        assert crit is not None and crit.name == name
        assert getattr(crit, "direction", None) in ("max", "min"), name
    assert get_criterion("distance_min").direction == "min"
    assert get_criterion("drift_max").direction == "max"
    assert get_criterion("torque_saturation_max").le == 1.0


def test_bench_list_criteria_prints_the_registry(capsys, user_criterion):
    assert main(["list", "criteria"]) == 0
    lines = capsys.readouterr().out.splitlines()
    assert [ln.split()[0] for ln in lines] == criterion_names()
    assert any(ln.startswith("joint_vel_max ") and "largest |joint velocity|" in ln for ln in lines)


def test_a_user_criterion_is_validated_with_its_bounds(tmp_path, user_criterion):
    [sc] = load_file(_scenario(tmp_path, "{joint_vel_max: 4}"))
    assert sc.criteria == {"joint_vel_max": 4.0}
    with pytest.raises(ScenarioErrors) as info:
        load_file(_scenario(tmp_path, "{joint_vel_max: 400}"))
    assert "at most 100 rad/s" in str(info.value)
    with pytest.raises(ScenarioErrors) as info:
        load_file(_scenario(tmp_path, "{joint_vel_maxx: 4}"))
    assert "did you mean 'joint_vel_max'" in str(info.value)


def test_an_unregistered_name_is_refused(tmp_path):
    with pytest.raises(ScenarioErrors) as info:
        load_file(_scenario(tmp_path, "{joint_vel_max: 4}"))
    assert "unknown key 'joint_vel_max'" in str(info.value)


def test_a_user_criterion_is_scored(user_criterion):
    n = 50
    t = np.arange(n) * 0.01
    arrays = {
        "t": t, "base_pos": np.tile([0.0, 0.0, 0.3], (n, 1)), "base_quat": np.tile([1.0, 0, 0, 0], (n, 1)),
        "base_linvel": np.zeros((n, 3)), "base_angvel": np.zeros((n, 3)),
        "joint_pos": np.zeros((n, 12)), "joint_vel": np.zeros((n, 12)), "joint_torque": np.zeros((n, 12)),
        "torque_limit": np.ones((n, 12)), "command": np.zeros((n, 3)), "terrain_height": np.zeros(n),
        "foot_pos": np.zeros((n, 4, 3)), "foot_force": np.zeros((n, 4, 3)), "foot_contact": np.ones((n, 4), bool),
        "controller_ms": np.zeros(n), "total_mass": np.ones(n), "com_pos": np.zeros((n, 3)),
        "ext_force": np.zeros((n, 3)), "qpos": np.zeros((n, 19)), "payload_mass": np.zeros((n, 0)),
    }
    arrays["joint_vel"][30, 2] = -5.0
    trace = Trace(arrays)
    trace.meta.update({"nominal_height": 0.3, "control_dt": 0.01, "timestep": 0.001, "duration": 0.5,
                       "status": "completed", "fall_time": -1.0})
    ok = score(trace, {"joint_vel_max": 6.0}, episode_status="completed", episode_reason=None)
    bad = score(trace, {"joint_vel_max": 4.0}, episode_status="completed", episode_reason=None)
    assert ok.status == "passed" and bad.status == "failed"
    [c] = [c for c in bad.criteria if c.name == "joint_vel_max"]
    assert c.value == 5.0 and not c.passed
    assert "joint_vel_max" in bad.reason


def test_all_criteria_loads_each_once():
    assert all_criteria() is not all_criteria()       # a fresh dict
    assert all_criteria()["no_fall"] is get_criterion("no_fall")
