"""Benchmark: the cost of a verdict fingerprint, first in a process and then per episode.

Usage: python tests/benchmarks/bench_fingerprint.py [SCENARIO.yaml] [CONTROLLER]
The first call hashes the bench source and the robot files; later calls re-check file
states (stat) and reuse the cached hashes.
"""

from __future__ import annotations

import statistics
import sys
import time
from pathlib import Path

REPO = Path(__file__).resolve().parents[2]


def main() -> None:
    from bench.run.fingerprint import verdict_fingerprint
    from bench.scenario.loader import load_file
    from bench.sim.episode import EpisodeLimits

    path = sys.argv[1] if len(sys.argv) > 1 else str(REPO / "tests" / "fixtures" / "bench_plugin" / "stand-1s.yaml")
    controller = sys.argv[2] if len(sys.argv) > 2 else "force-qp-l1"
    (sc, *_) = load_file(path)
    limits = EpisodeLimits()
    t0 = time.perf_counter()
    verdict_fingerprint(sc, controller, limits)
    first = time.perf_counter() - t0
    times = []
    for _ in range(200):
        t0 = time.perf_counter()
        verdict_fingerprint(sc, controller, limits)
        times.append(time.perf_counter() - t0)
    print(f"fingerprint of {sc.id} with {controller}: first call {first * 1e3:.1f} ms, "
          f"then median {statistics.median(times) * 1e3:.3f} ms per episode (200 calls)")


if __name__ == "__main__":
    main()
