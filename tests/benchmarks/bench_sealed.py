"""Benchmark: what sealed mode (``sealed:NAME``, the controller in a child process) costs per tick.

For each controller, runs the same scenario in-process and sealed, ``--repeats``
times each (alternating), and reports medians: the controller call time per tick
as the runner measures it (for sealed runs it includes packing the frame, the
two pipe transfers and the child's unpacking), the per-tick overhead (sealed
minus in-process), the ratio of the episode loop's wall time per tick
sealed/in-process, the same for the child speaking the text form of the
protocol (``exec:``, one line per tick each way) for comparison, and the child's start-up (``reset``: start Python, import the
bench, rebuild the robot and the controller, handshake). Every sealed run is
checked to give the in-process trace digest.

    python tests/benchmarks/bench_sealed.py [--scenario scenarios/basics/stand-still.yaml] [--repeats 5]
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time
from pathlib import Path

import numpy as np

from bench.controllers.external import ExternalController
from bench.controllers.registry import make
from bench.report.results import trace_digest
from bench.robot.model import NominalRobot
from bench.scenario import load_scenarios
from bench.sim.episode import run_episode
from bench.world.build import build_world

REPO = Path(__file__).resolve().parents[2]


def _controller(mode: str, name: str):
    if mode == "in":
        return make(name)[1]
    if mode == "sealed":
        return make("sealed:" + name)[1]
    # The same child speaking the text form of the protocol, as an exec: program.
    return ExternalController([sys.executable, "-m", "bench.controllers.sealed_child", name], start_timeout_s=60)


def _episode(sc, mode: str, name: str):
    world = build_world(sc)
    ctrl = _controller(mode, name)
    ep = run_episode(world, sc, ctrl, NominalRobot(world.robot))
    return ep, len(ep.trace)


def _startup_s(name: str, control_dt: float) -> float:
    from bench.robot import resolve_robot

    robot = NominalRobot(resolve_robot("quad12"))
    _, ctrl = make("sealed:" + name)
    t0 = time.perf_counter()
    ctrl.reset(robot, control_dt)
    dt = time.perf_counter() - t0
    ctrl.stats()
    return dt


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--scenario", default=str(REPO / "scenarios" / "basics" / "stand-still.yaml"))
    ap.add_argument("--repeats", type=int, default=5)
    ap.add_argument("--controllers", nargs="+", default=["joint-pd", "force-qp-l1"])
    args = ap.parse_args()
    sc = load_scenarios([args.scenario])[0]
    med = statistics.median
    print(f"{sc.id}: {float(sc.duration):g} s at {float(sc.control_rate):g} Hz control, medians of {args.repeats}")
    print(f"{'controller':<12} {'in-proc us':>10} {'sealed us':>10} {'overhead us':>12} {'loop ratio':>10} "
          f"{'text us':>8} {'text ratio':>10} {'start-up s':>10}")
    modes = ("in", "sealed", "text")
    for name in args.controllers:
        call = {m: [] for m in modes}
        loop = {m: [] for m in modes}
        digests = {m: set() for m in modes}
        for _ in range(args.repeats):
            for mode in modes:
                ep, n = _episode(sc, mode, name)
                call[mode].append(float(np.median(ep.trace["controller_ms"])) * 1e3)
                loop[mode].append(ep.wall_time_s / max(n, 1))
                digests[mode].add(trace_digest(ep.trace.arrays))
        if len(digests["in"]) != 1 or digests["sealed"] != digests["in"] or digests["text"] != digests["in"]:
            raise SystemExit(f"{name}: the traces differ: {digests}")
        start = med(_startup_s(name, 1.0 / float(sc.control_rate)) for _ in range(args.repeats))
        overhead = med(s - i for s, i in zip(call["sealed"], call["in"]))
        ratio = med(s / i for s, i in zip(loop["sealed"], loop["in"]))
        text_ratio = med(s / i for s, i in zip(loop["text"], loop["in"]))
        print(f"{name:<12} {med(call['in']):10.1f} {med(call['sealed']):10.1f} {overhead:12.1f} {ratio:9.2f}x "
              f"{med(call['text']):8.1f} {text_ratio:9.2f}x {start:10.2f}")


if __name__ == "__main__":
    main()
