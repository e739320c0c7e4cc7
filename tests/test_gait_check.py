"""Gait read from foot contacts, checked against the trade's definitions."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from bench.scoring.gait_check import IN_PHASE_MIN, read_gait

# trunk at the origin, level; feet FL, FR, RL, RR in their quadrants
FOOT_POS = np.array([[0.17, 0.13, -0.3], [0.17, -0.13, -0.3], [-0.17, 0.13, -0.3], [-0.17, -0.13, -0.3]])


def synthetic(phases, duty: float, n: int = 4000, period: int = 160) -> dict:
    """A trace whose foot i stands while ((k / period + phase_i) mod 1) < duty."""
    k = np.arange(n)[:, None]
    contact = ((k / period + np.asarray(phases)[None, :]) % 1.0) < duty
    return {"t": np.arange(n) * 0.002, "foot_contact": contact, "foot_pos": np.repeat(FOOT_POS[None], n, 0),
            "base_pos": np.zeros((n, 3)), "base_quat": np.tile([1.0, 0, 0, 0], (n, 1))}


@pytest.mark.parametrize("gait, phases, duty", [
    ("trot", [0.0, 0.5, 0.5, 0.0], 0.6),
    ("pace", [0.0, 0.5, 0.0, 0.5], 0.6),
    ("bound", [0.0, 0.0, 0.5, 0.5], 0.6),
    ("walk", [0.0, 0.5, 0.75, 0.25], 0.8),     # lateral-sequence walk: one foot up at a time
    ("stand", [0.0, 0.0, 0.0, 0.0], 1.0),
])
def test_each_definition_recognises_its_own_pattern_and_no_other(gait, phases, duty):
    r = read_gait(synthetic(phases, duty), ["FL", "FR", "RL", "RR"])
    assert r.gait == gait
    assert [g for g in ("stand", "walk", "trot", "pace", "bound") if r.matches(g)] == [gait]
    assert all(v == pytest.approx(duty, abs=0.01) for v in r.duty.values())


@pytest.mark.parametrize("duty", [0.55, 0.6, 0.75, 0.85])
def test_antiphase_agreement_is_two_d_minus_one(duty):
    """Two legs half a cycle apart agree only while both stand: 2 d - 1 of the time (d > 1/2)."""
    r = read_gait(synthetic([0.0, 0.5, 0.5, 0.0], duty))
    assert r.agreement["front_hind"] == pytest.approx(2 * duty - 1, abs=0.01)
    assert r.agreement["diagonal"] == pytest.approx(1.0)
    assert 2 * duty - 1 < IN_PHASE_MIN            # the threshold separates them at every duty here


def test_rotated_trunk_still_finds_the_quadrants():
    tr = synthetic([0.0, 0.5, 0.5, 0.0], 0.6)
    yaw = np.pi / 2        # trunk turned to face +y: feet rotate with it
    Rz = np.array([[0, -1, 0], [1, 0, 0], [0, 0, 1.0]])
    tr["foot_pos"] = np.repeat((FOOT_POS @ Rz.T)[None], len(tr["t"]), 0)
    tr["base_quat"] = np.tile([np.cos(yaw / 2), 0, 0, np.sin(yaw / 2)], (len(tr["t"]), 1))
    assert read_gait(tr).gait == "trot"


def test_reference_stack_trots_by_the_definition(tmp_path):
    """The bundled forward trot, run with the adaptive stack: diagonal pairs, the stack's duty factor."""
    from bench.controllers import registry
    from bench.robot.model import NominalRobot
    from bench.scenario import load_scenarios
    from bench.sim.episode import run_episode
    from bench.world.build import build_world, manifest_for

    sc = load_scenarios([str(Path(__file__).resolve().parents[1] / "scenarios/locomotion/forward.yaml")])[0]
    man = manifest_for(sc)
    _, ctrl = registry.make("force-qp-l1")
    ep = run_episode(build_world(sc, man), sc, ctrl, NominalRobot(man), seed=sc.seed)
    assert ep.status == "completed"
    r = read_gait(ep.trace, list(man.foot_names), t_from=2.0)
    assert r.gait == "trot", r
    duty = ctrl.params["duty"]
    assert all(abs(d - duty) < 0.1 for d in r.duty.values()), (r.duty, duty)
    standing = read_gait(ep.trace, list(man.foot_names), t_to=0.9)
    assert standing.gait == "stand"


# ------------------------------------------------------------------ definitions with chatter, and the criteria

import textwrap  # noqa: E402

from bench.errors import ScenarioErrors  # noqa: E402
from bench.scenario import load_file  # noqa: E402
from bench.scenario.criteria import get_criterion  # noqa: E402
from bench.scoring.gait_check import CHATTER_MAX, GaitWindow, pattern_score  # noqa: E402
from bench.scoring.verdict import score  # noqa: E402
from bench.sim.trace import Trace  # noqa: E402

WALK = ([0.75, 0.25, 0.0, 0.5], 0.85)     # order RL, FL, RR, FR; one foot up at a time


def _as_trace(d: dict) -> Trace:
    return Trace(dict(d), {"duration": float(d["t"][-1])})


def _chatter(tr: dict, share: float, foot: int = 0) -> dict:
    """Drop ``foot``'s contact for single ticks while another foot swings, on ``share`` of the samples."""
    c = tr["foot_contact"].copy()
    others_off = np.flatnonzero((~c[:, [i for i in range(4) if i != foot]]).any(axis=1) & c[:, foot])
    pick = others_off[:: max(1, int(len(others_off) / (share * len(c))))][: int(share * len(c))]
    c[pick, foot] = False
    return {**tr, "foot_contact": c}


def test_walk_tolerates_chatter_up_to_its_share_and_not_beyond():
    clean = read_gait(synthetic(*WALK))
    assert clean.gait == "walk" and clean.share_multi_off == 0.0
    assert min(clean.duty.values()) >= 0.75              # one foot at a time: every duty factor at least 3/4
    assert read_gait(synthetic(*WALK) | _chatter(synthetic(*WALK), 0.01)).gait == "walk"
    noisy = read_gait(_chatter(synthetic(*WALK), 0.05))
    assert noisy.share_multi_off > CHATTER_MAX and noisy.gait == "irregular"


@pytest.mark.parametrize("duty", [0.6, 0.75, 0.9, 0.98])
def test_a_high_duty_trot_is_never_read_as_a_walk(duty):
    r = read_gait(synthetic([0.0, 0.5, 0.5, 0.0], duty))
    assert not r.matches("walk")
    assert r.share_multi_off == pytest.approx(2 * (1 - duty), abs=0.01)


def test_standing_is_not_a_trot_nor_a_walk():
    r = read_gait(synthetic([0.0, 0.0, 0.0, 0.0], 1.0))
    assert r.matches("stand") and not r.matches("walk") and not r.matches("trot")
    assert pattern_score(r, "trot")[0] == 0.0


def test_every_score_reaches_its_threshold_exactly_when_the_definition_holds():
    for phases, duty in ([[0, .5, .5, 0], .6], [[0, .5, 0, .5], .6], [[0, 0, .5, .5], .6], WALK,
                         [[0, 0, 0, 0], 1.0], [[0, .1, .3, .7], .6]):
        r = read_gait(synthetic(phases, duty))
        for g in ("stand", "walk", "trot", "pace", "bound"):
            value, threshold = r.score(g)
            assert (value >= threshold) == r.matches(g)
            assert 0.0 <= value <= 1.0


def _criteria_scenario(tmp_path, gait_yaml: str):
    p = tmp_path / "c.yaml"
    p.write_text(textwrap.dedent("""
        name: c
        duration: 4
        criteria:
        """) + textwrap.indent(textwrap.dedent(gait_yaml), "  "))
    return load_file(p)


def test_the_gait_criterion_accepts_a_name_a_window_or_a_list(tmp_path):
    [sc] = _criteria_scenario(tmp_path, "gait: bound\n")
    assert sc.criteria["gait"] == (GaitWindow("bound"),)
    [sc] = _criteria_scenario(tmp_path, "gait: {expect: trot, from: 1.5, to: 3}\n")
    assert sc.criteria["gait"] == (GaitWindow("trot", 1.5, 3.0),)
    [sc] = _criteria_scenario(tmp_path, "gait: [{expect: stand, to: 1}, walk]\n")
    assert sc.criteria["gait"] == (GaitWindow("stand", None, 1.0), GaitWindow("walk"))


@pytest.mark.parametrize("text, expect", [
    ("gait: bownd\n", "did you mean 'bound'"),
    ("gait: {expect: trott, from: 1}\n", "criteria.gait.expect: expected one of stand, walk, trot, pace, bound"),
    ("gait: {expect: trot, form: 1}\n", "unknown key 'form' (did you mean 'from'?)"),
    ("gait: {from: 1}\n", "missing required field 'expect'"),
    ("gait: {expect: trot, from: 3, to: 2}\n", "to 2 s is not after from 3 s"),
    ("gait: {expect: trot, from: -1}\n", "must be at least 0 s"),
    ("gait: []\n", "expected at least one gait window"),
    ("duty_factor_min: 1.5\n", "at most 1"),
])
def test_the_gait_criterion_refuses_bad_windows_with_file_and_line(tmp_path, text, expect):
    with pytest.raises(ScenarioErrors) as info:
        _criteria_scenario(tmp_path, text)
    msg = str(info.value)
    assert expect in msg and "c.yaml:5" in msg


def _judge(tr: dict, name: str, limit, score_from=0.5):
    """One criterion from the registry on a synthetic contact trace (no other trace columns needed)."""
    return get_criterion(name).evaluate({}, {}, _as_trace(tr), limit, score_from)


def test_gait_criterion_on_synthetic_contacts_and_the_worst_window_is_reported():
    trot = synthetic([0.0, 0.5, 0.5, 0.0], 0.6)            # 8 s of trot
    assert _judge(trot, "gait", (GaitWindow("trot"),)).passed
    c = _judge(trot, "gait", (GaitWindow("trot", 0.5, 3.0), GaitWindow("bound", 3.0)))
    assert not c.passed
    assert c.limit == 0.8 and c.value < 0.8 and c.first_violation_s == 3.0
    assert c.sentence().startswith("gait: expected bound from 3.00 s, read trot")
    # a window past the end of a shorter episode fails, saying so
    c = _judge({k: v[:1000] for k, v in trot.items()}, "gait", (GaitWindow("trot", 3.0),))
    assert not c.passed and c.value is None and "ended at 2.00 s" in c.sentence()
    # a window to the very end of a complete episode is judged (the last row is one tick before the end)
    full = _as_trace(trot)
    full.meta["duration"] = float(trot["t"][-1] + 0.002)
    assert get_criterion("gait").evaluate({}, {}, full, (GaitWindow("trot", 2.0, full.meta["duration"]),), 0.5).passed
    # an episode that stopped early leaves an open window unjudged: failed
    full.meta["duration"] = 10.0
    assert not get_criterion("gait").evaluate({}, {}, full, (GaitWindow("trot", 2.0),), 0.5).passed


def test_a_trace_that_is_not_four_legged_fails_the_gait_criterion_with_a_reason():
    six = synthetic([0.0, 0.5, 0.5, 0.0], 0.6)
    six = {**six, "foot_contact": np.concatenate([six["foot_contact"]] * 2, axis=1)[:, :6]}
    c = _judge(six, "gait", (GaitWindow("trot"),))
    assert not c.passed and c.value is None and "for four legs; the trace has 6 feet" in c.sentence()


def test_duty_factor_criteria():
    walk = synthetic(*WALK)
    assert _judge(walk, "duty_factor_min", 0.8).passed and _judge(walk, "duty_factor_max", 0.9).passed
    c = _judge(walk, "duty_factor_min", 0.9)
    assert not c.passed and c.value == pytest.approx(0.85, abs=0.01)
    assert get_criterion("duty_factor_min").direction == "min" and get_criterion("duty_factor_max").direction == "max"


def _episode(gait_hint: str, vx: float, duration_s: float = 4.0):
    from bench.controllers import registry
    from bench.robot.model import NominalRobot
    from bench.scenario import load_scenarios
    from bench.sim.episode import run_episode
    from bench.world.build import build_world, manifest_for

    root = Path(__file__).resolve().parents[1]
    [sc] = load_scenarios([str(root / "scenarios/gaits/bound-forward.yaml")])
    import dataclasses
    cmds = (dataclasses.replace(sc.commands[0], gait=gait_hint), dataclasses.replace(sc.commands[1], vx=vx))
    sc = dataclasses.replace(sc, commands=cmds, duration=duration_s)
    man = manifest_for(sc)
    _, ctrl = registry.make("force-qp-l1")
    ep = run_episode(build_world(sc, man), sc, ctrl, NominalRobot(man), seed=sc.seed)
    assert ep.status == "completed"
    return ep, sc


def test_gait_criterion_passes_a_real_bound_and_fails_a_trot_labelled_bound():
    bound = (GaitWindow("bound", 2.0),)
    ep, sc = _episode("bound", 0.8)
    v = score(ep.trace, {"gait": bound}, episode_status=ep.status, episode_reason=None, score_from=sc.score_from_s)
    assert v.passed, v.reason
    ep, sc = _episode("trot", 0.8)
    v = score(ep.trace, {"gait": bound}, episode_status=ep.status, episode_reason=None, score_from=sc.score_from_s)
    assert not v.passed and "read trot" in v.reason
