"""Benchmark: how robustly a stack gets up and down the 10 cm x 30 cm stair flight.

One deterministic episode says little about a margin, so each case (the bundled
``terrain/stairs-10cm-scan`` and ``terrain/stairs-10cm-scan-load-6kg``: up four
10 cm x 30 cm stairs, across the landing, down four, with the height scan) is run
in 12 variants: three speeds (0.2, 0.25, 0.3 m/s) times four starts

- ``nominal``: the scenario's own start;
- ``x-0.08`` / ``x+0.08``: the robot starts 8 cm behind / ahead of its usual
  place, so its feet meet the risers at other points of the gait;
- ``noise-s<seed>``: the usual start with mild sensor noise (gyro 0.01 rad/s,
  accelerometer 0.1 m/s^2, joint velocities 0.05 rad/s std, no bias) drawn from
  a seed of its own (without noise the scenarios have no random draw, and the
  seed alone changes nothing).

With ``--all`` three more cases run, in the same four starts: a shallower flight
(``flight-8cm-35cm``: four 8 cm x 35 cm stairs up, a landing, four down, bar on pitch
atan(0.08 / 0.35) = 12.9 degrees, the slope; the flight a new user tried), the same with an
unknown 6 kg load, and the stepping stones of ``terrain/stepping-stones-scan`` at 0.35 m/s
where the three "speeds" are the gaps 0.10, 0.12 and 0.15 m (criteria: no fall, 2.8 m).

Every criterion is the scenario's own (no fall, 4 m travelled, pitch within the
18.4 degree stair slope); only the duration grows for the slower speeds so that
the same 4 m are reachable: ``1 + 15 * 0.3 / v`` s (16 s at 0.3 m/s, as bundled).
Printed: one row per variant with the verdict and, for a failure, the deciding
criterion (value against limit, or when it fell), then the pass count per case.

    python tests/benchmarks/stair_margin.py [--controller force-qp-l1] [--param K=V ...] [--workers 2]
    python tests/benchmarks/stair_margin.py --param scan_descent_height_m=0      # as before the descent height
    python tests/benchmarks/stair_margin.py --case stairs-10cm-scan --speeds 0.3
    python tests/benchmarks/stair_margin.py --all                                # 60 variants, 3 min

``--param`` values are read as YAML, like ``bench run --controller-param``.
"""

from __future__ import annotations

import argparse
import sys
import textwrap
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path
from tempfile import TemporaryDirectory

ROOT = Path(__file__).resolve().parents[2]
CASES = ("stairs-10cm-scan", "stairs-10cm-scan-load-6kg")
# further cases, run with --case NAME or --all: a shallower flight and the stepping stones
FLIGHT8 = """name: flight-8cm-35cm
robot: quad12
duration: 16.0
seed: 3
terrain:
  - stairs: {start: 0.8, steps: 4, rise: 0.08, run: 0.35, direction: up}
  - stairs: {start: 2.8, steps: 4, rise: 0.08, run: 0.35, direction: down}
sensing:
  height_scan: {size: [1.1, 0.5], resolution: 0.02, offset: [0.1, 0.0]}
commands:
  - {at: 0.0}
  - {at: 1.0, vx: 0.3}
criteria:
  no_fall: true
  distance_min: 4.0
  pitch_error_max_deg: 12.9
"""
LOAD6 = """payloads:
  - {name: load, mass: 6.0, size: [0.24, 0.16, 0.08], offset: [0.0, 0.0, 0.09]}
"""
EXTRA = ("flight-8cm-35cm", "flight-8cm-35cm-load-6kg", "stepping-stones-scan")
GAPS = (0.10, 0.12, 0.15)
SPEEDS = (0.2, 0.25, 0.3)
NOISE = """faults:
  - sensor_noise: {sensor: imu_gyro, std: 0.01}
  - sensor_noise: {sensor: imu_accel, std: 0.1}
  - sensor_noise: {sensor: joint_vel, std: 0.05}
"""
# name, initial x offset (m), seed of the sensor noise (None: no noise)
STARTS = (("nominal", 0.0, None), ("x-0.08", -0.08, None), ("x+0.08", 0.08, None), ("noise-s7", 0.0, 7))


def variant_yaml(case: str, v: float, start: str, dx: float, seed: int | None, tmp: Path) -> str:
    """One variant; for the stepping stones ``v`` is the gap (m) and the speed stays 0.35 m/s."""
    if case == "stepping-stones-scan":
        base = ROOT / "scenarios" / "terrain" / "stepping-stones.yaml"
        text = textwrap.dedent(f"""\
        extends: {base}
        name: {case}-gap{v:g}-{start}
        terrain:
          - blocks: {{start: 0.6, heights: [0.03, 0.06, 0.04, 0.08, 0.05, 0.03, 0.07, 0.04], block_length: 0.25, gap: {v}}}
        sensing:
          height_scan: {{size: [1.1, 0.5], resolution: 0.02, offset: [0.1, 0.0]}}
        """)
    else:
        if case.startswith("flight-8cm"):
            base = tmp / "flight-8cm-35cm.yaml"
            base.write_text(FLIGHT8)
            if case.endswith("load-6kg"):
                base = tmp / "flight-8cm-35cm-load-6kg.yaml"
                base.write_text(f"extends: {tmp / 'flight-8cm-35cm.yaml'}\nname: flight-8cm-35cm-load-6kg\n" + LOAD6)
        else:
            base = ROOT / "scenarios" / "terrain" / f"{case}.yaml"
        duration = round(1.0 + 15.0 * 0.3 / v, 2)
        text = textwrap.dedent(f"""\
        extends: {base}
        name: {case}-v{v:g}-{start}
        duration: {duration}
        commands:
          - {{at: 0.0}}
          - {{at: 1.0, vx: {v}}}
        """)
    if dx:
        text += f"initial: {{x: {dx}}}\n"
    if seed is not None:
        text += f"seed: {seed}\n" + NOISE
    return text


def run_variant(args: tuple) -> dict:
    path, controller, params = args
    from bench.execute.job import Job, run_job
    from bench.report.record import RunRecord
    from bench.scenario import load_scenarios

    sc = load_scenarios([path])[0]
    rec = RunRecord.from_json(run_job(Job(sc, controller, controller_params=params)).result)
    crit = {c.name: c for c in rec.criteria}
    why = ""
    if not rec.passed:
        fall = crit.get("no_fall")
        if fall is not None and not fall.passed:
            why = f"fell at {fall.first_violation_s:.2f} s, {rec.metrics.get('distance', float('nan')):.2f} m"
        else:
            why = "; ".join(f"{c.name} {c.value:.3g} (limit {c.limit:g}) at {c.first_violation_s:.2f} s"
                            if c.first_violation_s is not None else f"{c.name} {c.value:.3g}"
                            for c in rec.criteria if not c.passed) or (rec.reason or rec.status)
    pitch = crit["pitch_error_max_deg"].value if "pitch_error_max_deg" in crit else float("nan")
    return {"name": sc.name, "passed": rec.passed, "why": why, "pitch": pitch}


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--controller", default="force-qp-l1")
    ap.add_argument("--param", action="append", default=[], metavar="K=V",
                    help="controller keyword argument, value read as YAML (repeatable)")
    ap.add_argument("--case", action="append", choices=CASES + EXTRA, help="only this case (repeatable)")
    ap.add_argument("--all", action="store_true", help="every case: also the 8 cm x 35 cm flight with and "
                    "without 6 kg, and the stepping stones at gaps 0.10, 0.12, 0.15 m (0.35 m/s)")
    ap.add_argument("--speeds", type=float, nargs="+", default=list(SPEEDS))
    ap.add_argument("--workers", type=int, default=2)
    a = ap.parse_args()
    from bench.controllers.params import parse_params

    params = parse_params(a.param)
    cases = list(CASES + EXTRA) if a.all else (a.case or list(CASES))
    with TemporaryDirectory() as tmp:
        jobs = []
        for case in cases:
            for v in (GAPS if case == "stepping-stones-scan" else a.speeds):
                for start, dx, seed in STARTS:
                    p = Path(tmp) / f"{case}-v{v:g}-{start}.yaml"
                    p.write_text(variant_yaml(case, v, start, dx, seed, Path(tmp)))
                    jobs.append((case, str(p)))
        with ProcessPoolExecutor(max_workers=a.workers) as ex:
            results = list(ex.map(run_variant, [(p, a.controller, params) for _, p in jobs]))
    print(f"controller {a.controller}, params {params or '{}'}")
    counts: dict[str, list[int]] = {c: [0, 0, 0] for c in cases}
    for (case, _), r in zip(jobs, results):
        counts[case][0] += r["passed"]
        counts[case][1] += 1
        counts[case][2] += r["why"].startswith("fell")
        print(f"  {r['name']:<44} {'pass' if r['passed'] else 'FAIL'}  pitch {r['pitch']:5.1f} deg  "
              f"{r['why']}")
    for case, (n, m, falls) in counts.items():
        print(f"{case}: {n}/{m} passed, {falls} fell")
    return 0


if __name__ == "__main__":
    sys.exit(main())
