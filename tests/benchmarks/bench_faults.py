"""Benchmark: per-tick cost of the episode loop without faults and with one fault of every built-in kind.

The robot hangs 1 m up (nothing falls, no contact) with the ``zero`` controller,
so the difference between the two rows is what the faults cost per tick. Run it
from two checkouts (``PYTHONPATH=<checkout>``) to compare code versions; the
median of ``--repeats`` runs is printed, with the ratio to the no-fault row.

    python tests/benchmarks/bench_faults.py [--repeats 7] [--duration 2]
"""

from __future__ import annotations

import argparse
import statistics
import textwrap
import time
from pathlib import Path
from tempfile import TemporaryDirectory

from bench.controllers.simple import ZeroController
from bench.robot.model import NominalRobot
from bench.scenario import load_scenarios
from bench.sim.episode import run_episode
from bench.world.build import build_world, manifest_for

FAULTS = """
faults:
  - derate: {at: 0.1, joints: [FL_knee], factor: 0.5}
  - lock: {at: 0.2, joint: RR_knee}
  - limp: {at: 0.3, joint: FR_knee}
  - latency: {at: 0.1, delay: 0.01}
  - sensor_noise: {at: 0.0, sensor: joint_pos, std: 0.002}
  - sensor_freeze: {at: 0.4, sensor: imu_gyro}
"""


def scenario(tmp: Path, duration: float, faults: bool):
    text = textwrap.dedent(f"""
    name: bench-faults
    duration: {duration}
    initial: {{height_offset: 1.0}}
    criteria: {{no_fall: false}}
    """) + (FAULTS if faults else "")
    path = tmp / f"s{int(faults)}.yaml"
    path.write_text(text)
    return load_scenarios([str(path)])[0]


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeats", type=int, default=7)
    ap.add_argument("--duration", type=float, default=2.0)
    args = ap.parse_args()
    with TemporaryDirectory() as tmp:
        rows = {}
        scs = {name: scenario(Path(tmp), args.duration, name == "six faults") for name in ("no faults", "six faults")}
        robot = NominalRobot(manifest_for(scs["no faults"]))
        times = {name: [] for name in scs}
        for _ in range(args.repeats):   # interleaved, so that a busy moment of the machine hits both rows
            for name, sc in scs.items():
                world = build_world(sc)
                t0 = time.process_time()   # CPU time: less noise from other processes on a busy machine
                ep = run_episode(world, sc, ZeroController(), robot)
                times[name].append((time.process_time() - t0) / len(ep.trace))
        for name, ts in times.items():
            rows[name] = statistics.median(ts)
        base = rows["no faults"]
        for name, per_tick in rows.items():
            print(f"{name:<12} {per_tick * 1e6:8.1f} us/tick  x{per_tick / base:.3f}")


if __name__ == "__main__":
    main()
