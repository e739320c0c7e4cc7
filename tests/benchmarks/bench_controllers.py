"""Benchmark: per-tick compute time of the reference stacks, the QP's share, and real-time factor.

One core, 1 kHz physics, 500 Hz control, trotting at 0.4 m/s on flat ground for
the given duration. Reports medians over repeats.

    python tests/benchmarks/bench_controllers.py [--repeats 3] [--duration 6]
"""

from __future__ import annotations

import argparse
import statistics
import textwrap
from pathlib import Path
from tempfile import TemporaryDirectory

import numpy as np

from bench.controllers.registry import make
from bench.robot.model import NominalRobot
from bench.scenario import load_scenarios
from bench.sim.episode import run_episode
from bench.world.build import build_world


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--duration", type=float, default=6.0)
    args = ap.parse_args()
    with TemporaryDirectory() as tmp:
        path = Path(tmp) / "trot.yaml"
        path.write_text(textwrap.dedent(f"""
            name: bench-trot
            duration: {args.duration}
            commands:
              - {{at: 0.0}}
              - {{at: 0.5, vx: 0.4}}
        """))
        sc = load_scenarios([str(path)])[0]
        print(f"trot 0.4 m/s, {args.duration:g} s, 1 kHz physics / 500 Hz control, medians of {args.repeats}")
        print(f"{'controller':<12} {'p50 ms':>8} {'p99 ms':>8} {'QP share':>9} {'realtime':>9}")
        for name in ("force-qp", "force-qp-l1"):
            p50, p99, share, rtf = [], [], [], []
            for _ in range(args.repeats):
                world = build_world(sc)
                _, ctrl = make(name)
                ep = run_episode(world, sc, ctrl, NominalRobot(world.robot))
                ms = ep.trace["controller_ms"]
                st = ep.controller_stats
                p50.append(np.percentile(ms, 50))
                p99.append(np.percentile(ms, 99))
                share.append(st.get("qp_ms_mean", 0.0) / max(float(np.mean(ms)), 1e-9))
                rtf.append(ep.sim_time_s / ep.wall_time_s)
            med = statistics.median
            print(f"{name:<12} {med(p50):8.3f} {med(p99):8.3f} {med(share) * 100:8.0f}% {med(rtf):8.1f}x")


if __name__ == "__main__":
    main()
