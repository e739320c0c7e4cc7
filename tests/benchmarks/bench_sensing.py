"""Benchmark: per-tick cost of the extra sensors (scenario key ``sensing:``).

quad12 stands (joint PD) in front of low steps, so feet touch the ground and the
scan sees edges; each row is one ``sensing:`` setting, the first none at all.
Printed per row: the median over ``--repeats`` episodes of the process CPU time
per control tick over the tick loop (``EpisodeResult.cpu_time_s``: less moved by
other processes on a shared machine than wall time), and its ratio to the first
row; the rows take turns within each repeat, so a change of machine load falls on
all of them. Then the cost of one scan alone (``HeightScanner.take``, median of
many) by grid size.

    python tests/benchmarks/bench_sensing.py [--repeats 7] [--duration 2]
    PYTHONPATH=/path/to/other/checkout python tests/benchmarks/bench_sensing.py --plain-only

``--plain-only`` runs only the row without a ``sensing:`` key (it runs on a
checkout that predates the key too), to compare the tick loop of two versions.
"""

from __future__ import annotations

import argparse
import statistics
import textwrap
import time
from pathlib import Path
from tempfile import TemporaryDirectory

import numpy as np

from bench.controllers.simple import JointPDController
from bench.robot.model import NominalRobot
from bench.scenario import load_scenarios
from bench.sim.episode import run_episode
from bench.world.build import build_world, manifest_for

ROWS = [
    ("no sensing key", ""),
    ("privileged: false only", "sensing: {privileged: false}"),
    ("foot_force 3d + joint_torque", "sensing: {foot_force: {mode: 3d}, joint_torque: {}}"),
    ("foot_force normal + noise", "sensing: {foot_force: {mode: normal, noise: 2.0}, joint_torque: {noise: 0.1}}"),
    ("scan 1.6x1.0 m @ 0.1 m (17x11), every tick",
     "sensing: {height_scan: {size: [1.6, 1.0], resolution: 0.1}}"),
    ("scan 1.6x1.0 m @ 0.1 m, 50 Hz",
     "sensing: {height_scan: {size: [1.6, 1.0], resolution: 0.1, rate: 50}}"),
    ("scan 1.6x1.0 m @ 0.1 m, noise+dropout+latency",
     "sensing: {height_scan: {size: [1.6, 1.0], resolution: 0.1, noise: 0.01, dropout: 0.05, latency: 0.02}}"),
    ("scan 2.0x1.2 m @ 0.05 m (41x25), every tick",
     "sensing: {height_scan: {size: [2.0, 1.2], resolution: 0.05}}"),
    ("scan 2.0x1.2 m @ 0.05 m, 50 Hz",
     "sensing: {height_scan: {size: [2.0, 1.2], resolution: 0.05, rate: 50}}"),
    ("everything, scan 50 Hz, privileged false",
     "sensing: {privileged: false, height_scan: {size: [1.6, 1.0], resolution: 0.1, rate: 50, noise: 0.01}, "
     "foot_force: {mode: 3d, noise: 1.0}, joint_torque: {noise: 0.1}}"),
]

GRIDS = [(1.0, 0.6, 0.1), (1.6, 1.0, 0.1), (1.6, 1.0, 0.05), (2.0, 1.2, 0.05), (3.0, 2.0, 0.02)]


def scenario(tmp: Path, duration: float, sensing: str, name: str = "bench-sensing"):
    text = textwrap.dedent(f"""
    name: {name}
    duration: {duration}
    terrain:
      - stairs: {{start: 0.5, steps: 4, rise: 0.06, run: 0.35}}
    """) + (sensing + "\n" if sensing else "")
    p = tmp / f"{name}.yaml"
    p.write_text(text)
    return load_scenarios([str(p)])[0]


def tick_cpu_us(sc) -> float:
    """CPU time per control tick of one episode's tick loop, us."""
    man = manifest_for(sc)
    world = build_world(sc, man)
    ep = run_episode(world, sc, JointPDController(), NominalRobot(man))
    return ep.cpu_time_s / max(len(ep.trace), 1) * 1e6


def per_tick_us(sc, repeats: int) -> float:
    return statistics.median(tick_cpu_us(sc) for _ in range(repeats))


def scan_us(tmp: Path, length: float, width: float, res: float, n: int = 300) -> tuple[int, float]:
    import mujoco

    from bench.sim.sensing import HeightScanner

    sc = scenario(tmp, 1.0, f"sensing: {{height_scan: {{size: [{length}, {width}], resolution: {res}}}}}", "grid")
    world = build_world(sc)
    d = mujoco.MjData(world.model)
    d.qpos[:] = world.initial_qpos
    mujoco.mj_kinematics(world.model, d)
    s = HeightScanner(sc.sensing.height_scan, world, d, 500.0, np.random.default_rng(0))
    times = []
    for _ in range(n):
        t0 = time.perf_counter()
        s.take(0)
        times.append(time.perf_counter() - t0)
    return s.nx * s.ny, statistics.median(times) * 1e6


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeats", type=int, default=7)
    ap.add_argument("--duration", type=float, default=2.0)
    ap.add_argument("--plain-only", action="store_true", help="only the row without a sensing: key")
    args = ap.parse_args()
    rows = ROWS[:1] if args.plain_only else ROWS
    with TemporaryDirectory() as tmp:
        scenarios = [scenario(Path(tmp), args.duration, text, f"row{i}") for i, (_, text) in enumerate(rows)]
        samples: list[list[float]] = [[] for _ in rows]
        for _ in range(args.repeats):
            for i, sc in enumerate(scenarios):
                samples[i].append(tick_cpu_us(sc))
        base = statistics.median(samples[0])
        print(f"{'sensing':48s} {'CPU us/tick':>11s} {'ratio':>6s}")
        for (label, _), xs in zip(rows, samples):
            us = statistics.median(xs)
            print(f"{label:48s} {us:11.1f} {us / base:6.2f}")
        if args.plain_only:
            return
        print()
        print(f"{'one scan (HeightScanner.take)':32s} {'points':>7s} {'us':>8s} {'us/point':>9s}")
        for length, width, res in GRIDS:
            n, us = scan_us(Path(tmp), length, width, res)
            print(f"{f'{length}x{width} m @ {res} m':32s} {n:7d} {us:8.1f} {us / n:9.3f}")


if __name__ == "__main__":
    main()
