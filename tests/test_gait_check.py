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
