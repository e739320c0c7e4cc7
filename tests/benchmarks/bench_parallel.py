"""Benchmark: parallel efficiency of the process pool, Dask local overhead, wall time of the bundled suite.

On the bundled suite (``scenarios/``, trials expanded), with one controller:

- serial (in this process) vs ``ProcessExecutor(2)``: parallel efficiency
  ``T_serial / (2 * T_process)`` (goal >= 0.9), with the pool's start-up counted
  (cold: what ``bench run --workers 2`` pays) and without it (warm);
- ``DaskExecutor('local', workers=2)`` vs the process pool on the same jobs:
  overhead ``T_dask / T_process - 1`` (goal < 10 %), cold (cluster start
  counted) and warm;
- the whole bundled suite through the command line: ``bench run scenarios/
  --workers 2`` (with its default plots, and with ``--no-plots``), wall time.

It also checks that the three executors gave identical results. Everything
runs on a snapshot of ``bench/``, ``models/`` and ``scenarios/`` copied at the
start (put first on ``PYTHONPATH`` for this process and every worker), so that
edits made to the working tree during a long benchmark cannot make one
executor run other code than another. The machine
may be shared: the load average is printed beside the figures, and each figure
is the median of ``--repeats`` runs (best in brackets); the command-line runs
are timed once. On the bundled suite (51 episodes, 526 s simulated) one repeat
takes about 15 minutes on 2 cores.

    python tests/benchmarks/bench_parallel.py [--repeats 1] [--controller force-qp-l1] [--workers 2]
                                              [--suite basics] [--no-cli]
"""

from __future__ import annotations

import argparse
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from bench.execute.dask_cluster import DaskExecutor
from bench.execute.executors import SerialExecutor
from bench.execute.fingerprint import outcome_fingerprint
from bench.execute.job import Job, run_job
from bench.execute.outcomes import error_outcome
from bench.execute.process import ProcessExecutor
from bench.execute.schedule import longest_first
from bench.execute.trials import plan
from bench.scenario import load_scenarios

REPO = Path(__file__).resolve().parents[2]


def load_jobs(suite: Path, controller: str) -> list[Job]:
    episodes, seeds, _ = plan(load_scenarios([str(suite)]))
    return [Job(sc, controller, seed) for sc, seed in zip(episodes, seeds)]


def run_all(ex, jobs) -> dict:
    """As ``bench run`` does: longest first to parallel executors, results back by job index."""
    order = longest_first(jobs) if ex.workers > 1 else list(range(len(jobs)))
    return {order[k]: o for k, o in ex.map(run_job, [jobs[i] for i in order], on_error=error_outcome)}


def timed_map(ex, jobs) -> tuple[float, dict]:
    t0 = time.perf_counter()
    out = run_all(ex, jobs)
    return time.perf_counter() - t0, out


def cold(make, jobs) -> tuple[float, dict]:
    """Start the executor, run the jobs, close it: all timed."""
    t0 = time.perf_counter()
    ex = make()
    try:
        out = run_all(ex, jobs)
    finally:
        ex.close()
    return time.perf_counter() - t0, out


def warm(make, jobs, warmup: Job) -> tuple[float, dict, float]:
    """Start the executor and run a tiny job on every worker first; time only the jobs."""
    t0 = time.perf_counter()
    ex = make()
    try:
        dict(ex.map(run_job, [warmup] * max(1, ex.workers)))
        start = time.perf_counter() - t0
        t, out = timed_map(ex, jobs)
    finally:
        ex.close()
    return t, out, start


def med(xs: list[float]) -> str:
    return f"{statistics.median(xs):6.2f} s (best {min(xs):.2f})"


def snapshot_and_rerun() -> int:
    """Copy the code and data, then run this script again on the copy; returns its exit code."""
    import shutil

    with tempfile.TemporaryDirectory(prefix="bench-snapshot-") as snap:
        ignore = shutil.ignore_patterns("__pycache__", "*.pyc")
        for name in ("bench", "models", "scenarios"):
            shutil.copytree(REPO / name, Path(snap) / name, ignore=ignore)
        env = dict(os.environ, BENCH_SNAPSHOT=snap,
                   PYTHONPATH=os.pathsep.join([snap, *filter(None, [os.environ.get("PYTHONPATH")])]))
        return subprocess.run([sys.executable, str(Path(__file__).resolve()), *sys.argv[1:]], env=env).returncode


def compare(name: str, got: dict, ref: dict) -> list[str]:
    """Ids of the episodes whose fingerprint differs from the serial run's."""
    bad = [ref[i]["scenario"] for i in ref if outcome_fingerprint(got[i]) != ref[i]]
    if bad:
        print(f"  {name} DIFFERS from serial on {len(bad)} episodes: {', '.join(bad[:6])}", flush=True)
    return bad


def main() -> None:
    if not os.environ.get("BENCH_SNAPSHOT") and "--no-snapshot" not in sys.argv:
        sys.exit(snapshot_and_rerun())
    import bench

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeats", type=int, default=1)
    ap.add_argument("--controller", default="force-qp-l1")
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--suite", default=None,
                    help="folder of scenarios (default: the bundled scenarios/ of the snapshot; a relative path is "
                         "taken inside it, e.g. basics)")
    ap.add_argument("--no-cli", action="store_true", help="skip the command-line wall time")
    ap.add_argument("--no-snapshot", action="store_true", help="run on the working tree as it is")
    args = ap.parse_args()
    code_root = Path(bench.__file__).resolve().parents[1]
    suite = Path(args.suite) if args.suite else Path("")
    args.suite = str(suite if suite.is_absolute() else code_root / "scenarios" / suite)
    print(f"code from {code_root}" + (" (snapshot)" if os.environ.get("BENCH_SNAPSHOT") else ""))
    w = args.workers

    jobs = load_jobs(Path(args.suite), args.controller)
    with tempfile.TemporaryDirectory() as tmp:
        (Path(tmp) / "w.yaml").write_text("name: warmup\nrobot: quad12\nduration: 0.05\n")
        warmup = Job(load_scenarios([str(Path(tmp) / "w.yaml")])[0], args.controller)
    print(f"suite {args.suite}: {len(jobs)} episodes, controller {args.controller}, {w} workers, "
          f"{os.cpu_count()} cores; load average before: {os.getloadavg()[0]:.2f}")

    ser, pc, pw, dc, dw, cpu, starts = [], [], [], [], [], [], {"process": [], "dask": []}
    ref = None
    differ: list[str] = []
    for r in range(args.repeats):
        dict(SerialExecutor().map(run_job, [warmup]))  # imports and caches, outside the timing
        t_cpu0 = time.process_time()
        t, out = timed_map(SerialExecutor(), jobs)
        cpu.append(time.process_time() - t_cpu0)
        ser.append(t)
        serial_out = out
        if ref is None:
            ref = {i: outcome_fingerprint(o) for i, o in out.items()}
        else:
            differ += compare("serial (repeat)", out, ref)

        t, out = cold(lambda: ProcessExecutor(w), jobs)
        pc.append(t)
        differ += compare("process pool (cold)", out, ref)
        t, out, st = warm(lambda: ProcessExecutor(w), jobs, warmup)
        pw.append(t)
        starts["process"].append(st)
        differ += compare("process pool (warm)", out, ref)

        t, out = cold(lambda: DaskExecutor("local", workers=w), jobs)
        dc.append(t)
        differ += compare("dask local (cold)", out, ref)
        t, out, st = warm(lambda: DaskExecutor("local", workers=w), jobs, warmup)
        dw.append(t)
        starts["dask"].append(st)
        differ += compare("dask local (warm)", out, ref)
        print(f"  repeat {r + 1}: serial {ser[-1]:.2f} s, process cold {pc[-1]:.2f} / warm {pw[-1]:.2f} s, "
              f"dask cold {dc[-1]:.2f} / warm {dw[-1]:.2f} s; load {os.getloadavg()[0]:.2f}", flush=True)

    m = statistics.median
    print()
    print(f"serial (in process)            {med(ser)}   cpu {m(cpu):.2f} s")
    print(f"process pool, {w} workers, cold  {med(pc)}   efficiency {m(ser) / (w * m(pc)):.3f} "
          f"(best {max(s / (w * p) for s, p in zip(ser, pc)):.3f})")
    print(f"process pool, {w} workers, warm  {med(pw)}   efficiency {m(ser) / (w * m(pw)):.3f} "
          f"(best {max(s / (w * p) for s, p in zip(ser, pw)):.3f}); pool start {m(starts['process']):.2f} s")
    print(f"dask local, {w} workers, cold    {med(dc)}   overhead vs process pool {m(dc) / m(pc) - 1:+.1%}")
    print(f"dask local, {w} workers, warm    {med(dw)}   overhead vs process pool {m(dw) / m(pw) - 1:+.1%}; "
          f"cluster start {m(starts['dask']):.2f} s")
    # the best split of these episodes over the workers bounds the efficiency from above
    walls = sorted((o.result["wall_time_s"] for o in serial_out.values()), reverse=True)
    bins = [0.0] * w
    for x in walls:  # longest first, each to the least loaded worker
        bins[bins.index(min(bins))] += x
    print(f"episode wall times {', '.join(f'{x:.2f}' for x in walls)} s: best {w}-way split bounds the "
          f"efficiency at {sum(walls) / (w * max(bins)):.3f}")
    print("results identical (metrics, criteria and trace digests) across serial, process pool and Dask: "
          + ("yes" if not differ else f"NO ({len(differ)} episode runs differ)"))

    if not args.no_cli:
        bench = str(Path(sys.executable).with_name("bench"))
        for extra in ([], ["--no-plots"]):
            with tempfile.TemporaryDirectory() as out:
                t0 = time.perf_counter()
                proc = subprocess.run([bench, "run", args.suite, "--workers", str(w), "--controller", args.controller,
                                       "--out", out, "--no-history", *extra], check=False, capture_output=True,
                                      text=True)
                t = time.perf_counter() - t0
            label = " ".join(["bench run", args.suite, "--workers", str(w), *extra])
            last = (proc.stdout.strip().splitlines() or ["?"])[-1]
            print(f"{label}: {t:.1f} s wall ({last}); load {os.getloadavg()[0]:.2f}", flush=True)
    print(f"load average after: {os.getloadavg()[0]:.2f}")


if __name__ == "__main__":
    main()
