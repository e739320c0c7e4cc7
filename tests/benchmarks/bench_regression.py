"""Benchmark: the cost of an external (QBX 1) controller per tick, and of history writes.

1. The same PD law in-process (``JointPDController``) and as a separate Python program speaking the
   line protocol (tests/fixtures/external/pd_controller.py): median episode wall time and the median
   controller time per tick; the difference is the protocol round trip (format, pipe, parse, both sides).
2. History: median time of one ``History.record`` (one transaction) with 1 and with 4 concurrent
   writer processes.

    python tests/benchmarks/bench_regression.py [--repeats 5]
"""

from __future__ import annotations

import argparse
import multiprocessing as mp
import statistics
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parents[1]
SCRIPT = HERE / "fixtures" / "external" / "pd_controller.py"
SCENARIO = HERE / "fixtures" / "bench_plugin" / "stand-1s.yaml"


def episodes(repeats: int) -> None:
    from bench.controllers.external import ExternalController
    from bench.controllers.simple import JointPDController
    from bench.execute.job import Job, run_job
    from bench.scenario import load_scenarios

    sc = load_scenarios([str(SCENARIO)])[0]
    rows = {}
    for label, make in (("in-process joint PD", lambda: JointPDController(kp=60.0, kd=2.0)),
                        ("external program (QBX 1)", lambda: ExternalController(
                            [sys.executable, str(SCRIPT), "--kp", "60", "--kd", "2"]))):
        walls, p50s = [], []
        for _ in range(repeats):
            t0 = time.perf_counter()
            r = run_job(Job(sc, make())).result
            walls.append(time.perf_counter() - t0)
            p50s.append(r["controller_ms"]["p50"])
            assert r["status"] == "passed", r["reason"]
        rows[label] = (statistics.median(walls), statistics.median(p50s))
    ticks = int(sc.duration * sc.control_rate)
    print(f"episode: {sc.id}, {sc.duration:g} s at {sc.control_rate:g} Hz = {ticks} ticks, {repeats} repeats")
    for label, (wall, p50) in rows.items():
        print(f"  {label:<26} median episode {wall * 1e3:7.1f} ms   median controller tick {p50 * 1e3:7.1f} us")
    (w0, c0), (w1, c1) = rows.values()
    print(f"  ratio external / in-process: episode {w1 / w0:.2f}x, tick {c1 / c0:.0f}x; "
          f"round trip ~{(c1 - c0) * 1e3:.0f} us per tick")


def _writer(db: str, n: int, start, out) -> None:
    from bench.report.history import History

    start.wait()
    times = []
    with History(db) as h:
        h.begin_run("b" * 32, source="bench", git=None)
        for i in range(n):
            t0 = time.perf_counter()
            h.record("b" * 32, {"scenario": "s", "status": "passed", "metrics": {f"m{k}": k * i for k in range(20)}})
            times.append(time.perf_counter() - t0)
    out.put(statistics.median(times))


def history(n: int = 100) -> None:
    ctx = mp.get_context("spawn")
    for writers in (1, 4):
        with tempfile.TemporaryDirectory() as tmp:
            start, out = ctx.Event(), ctx.Queue()
            procs = [ctx.Process(target=_writer, args=(str(Path(tmp) / "h.sqlite"), n, start, out))
                     for _ in range(writers)]
            for p in procs:
                p.start()
            start.set()
            meds = [out.get(timeout=120) for _ in procs]
            for p in procs:
                p.join()
        print(f"history: {writers} writer(s) x {n} results of 20 metrics: median record "
              f"{statistics.median(meds) * 1e3:.2f} ms")


if __name__ == "__main__":
    ap = argparse.ArgumentParser()
    ap.add_argument("--repeats", type=int, default=5)
    a = ap.parse_args()
    episodes(a.repeats)
    history()
