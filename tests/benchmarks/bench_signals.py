"""What recording controller signals costs per control tick.

    python tests/benchmarks/bench_signals.py

Times ``SignalRecorder.record`` with the reference L1 stack's three signals (a scalar, a 6-vector, a
scalar) over many ticks, and the same stack's whole episode with and without its ``signals``
(stand-still, 4 s, 2000 ticks), and prints medians of repeated runs. A controller without ``signals``
costs nothing per tick (the runner looks once, after reset).
"""

from __future__ import annotations

import statistics
import time
from pathlib import Path

import numpy as np

from bench.controllers import registry
from bench.robot.model import NominalRobot
from bench.scenario import load_scenarios
from bench.sim.episode import run_episode
from bench.sim.signals import SignalRecorder
from bench.world.build import build_world, manifest_for

REPO = Path(__file__).resolve().parents[2]


class _Holder:
    def __init__(self):
        self.signals = {"qp_ok": 1.0, "l1_u": np.zeros(6), "l1_load_kg": 0.0}


def record_us(n: int = 20000) -> float:
    rec = SignalRecorder(_Holder(), n)
    t0 = time.perf_counter()
    for k in range(n):
        rec.record(k)
    return (time.perf_counter() - t0) / n * 1e6


def episode_s(with_signals: bool) -> float:
    sc = load_scenarios([str(REPO / "scenarios" / "basics" / "stand-still.yaml")])[0]
    man = manifest_for(sc)
    world, robot = build_world(sc, man), NominalRobot(man)
    _, ctrl = registry.make("force-qp-l1")
    attach = SignalRecorder.attach
    if not with_signals:   # the runner as if the stack had no signals (it still fills its dict)
        SignalRecorder.attach = classmethod(lambda cls, controller, n: None)
    try:
        ep = run_episode(world, sc, ctrl, robot, seed=0)
    finally:
        SignalRecorder.attach = attach
    assert ep.status == "completed", ep.reason
    return ep.wall_time_s


def main() -> int:
    rec = statistics.median(record_us() for _ in range(5))
    on = [episode_s(True) for _ in range(3)]
    off = [episode_s(False) for _ in range(3)]
    print(f"SignalRecorder.record, 3 signals: median {rec:.2f} us per tick")
    print(f"force-qp-l1 stand-still (2000 ticks): with signals median {statistics.median(on):.3f} s, "
          f"without {statistics.median(off):.3f} s, ratio {statistics.median(on) / statistics.median(off):.3f}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
