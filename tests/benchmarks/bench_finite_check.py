"""Benchmark: cost of the per-tick "are the controller's torques finite?" check.

The old check summed the torques (``math.isfinite(tau.sum())``), which overflows
to infinity for large finite torques (1e308) and so called them non-finite (and
raises FloatingPointError under a controller's ``np.seterr(over="raise")``). The
element-by-element test does no arithmetic. Both are timed on a 12-vector, as the
bundled robot returns; medians of repeats, nanoseconds per call. A dot product
with zeros is faster but warns ("invalid value") on infinity, so it is not used.

    python tests/benchmarks/bench_finite_check.py [--repeats 7] [--number 200000]
"""

from __future__ import annotations

import argparse
import math
import statistics
import timeit

import numpy as np


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeats", type=int, default=7)
    ap.add_argument("--number", type=int, default=200_000)
    args = ap.parse_args()
    tau = np.random.default_rng(0).standard_normal(12)
    ns = {"math": math, "np": np, "tau": tau}
    candidates = {
        "sum (old, wrong for 1e308)": "math.isfinite(float(tau.sum()))",
        "np.isfinite(tau).all() (used)": "np.isfinite(tau).all()",
    }
    base = None
    for name, stmt in candidates.items():
        times = timeit.repeat(stmt, globals=ns, number=args.number, repeat=args.repeats)
        med = statistics.median(times) / args.number * 1e9
        base = base or med
        print(f"{name:30s} {med:7.0f} ns/call   {med / base:5.2f}x the old check")


if __name__ == "__main__":
    main()
