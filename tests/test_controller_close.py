"""A controller's optional close() is called once at the end of every episode, however it ended."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from bench.controllers.simple import JointPDController
from bench.robot.model import NominalRobot
from bench.scenario import load_scenarios
from bench.sim.episode import run_episode
from bench.world.build import build_world, manifest_for

STAND_1S = Path(__file__).resolve().parent / "fixtures" / "bench_plugin" / "stand-1s.yaml"


class Closing(JointPDController):
    def __init__(self, fail_in: str = "", close_raises: bool = False):
        super().__init__()
        self.fail_in, self.close_raises, self.closed, self.ticks = fail_in, close_raises, 0, 0

    def reset(self, robot, control_dt):
        if self.fail_in == "reset":
            raise RuntimeError("no solver")
        super().reset(robot, control_dt)

    def step(self, obs, command):
        self.ticks += 1
        if self.fail_in == "step" and self.ticks == 5:
            raise RuntimeError("diverged")
        return super().step(obs, command)

    def close(self):
        self.closed += 1
        if self.close_raises:
            raise ValueError("port already closed")


@pytest.fixture(scope="module")
def stand():
    sc = load_scenarios([str(STAND_1S)])[0]
    man = manifest_for(sc)
    return build_world(sc, man), sc, NominalRobot(man)


@pytest.mark.parametrize("fail_in, status", [("", "completed"), ("reset", "error"), ("step", "error")])
def test_close_is_called_once_however_the_episode_ended(stand, fail_in, status):
    world, sc, robot = stand
    c = Closing(fail_in)
    ep = run_episode(world, sc, c, robot, seed=0)
    assert ep.status == status and c.closed == 1


def test_a_fault_in_close_is_the_episodes_error_only_when_nothing_else_went_wrong(stand):
    world, sc, robot = stand
    ok = run_episode(world, sc, Closing(close_raises=True), robot, seed=0)
    assert ok.status == "error" and "ValueError in close(): port already closed" in ok.reason
    assert ok.trace["t"][-1] > 0.99 and np.isfinite(ok.trace["base_pos"]).all()   # the whole 1 s episode ran
    failed = run_episode(world, sc, Closing("step", close_raises=True), robot, seed=0)
    assert failed.status == "error" and "diverged" in failed.reason          # the first fault is the reason
