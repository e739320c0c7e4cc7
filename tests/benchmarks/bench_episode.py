"""Benchmark: cost of the bench's episode loop over a bare MuJoCo loop, and joint-pd's real-time factor.

Same world and duration for both loops; the ``zero`` controller applies no torque,
so the bare loop (``mj_step`` with ctrl = 0) simulates the same motion and the
ratio is the bench's own overhead (observation, trace recording, events, checks).
The episode is not stopped early here (no fall check would differ): the world is
the robot hanging 1 m above the ground without gravity, so nothing falls.

    python tests/benchmarks/bench_episode.py [--repeats 7] [--duration 5]
"""

from __future__ import annotations

import argparse
import statistics
import textwrap
import time
from pathlib import Path
from tempfile import TemporaryDirectory

import mujoco

from bench.controllers.simple import JointPDController, ZeroController
from bench.robot.model import NominalRobot
from bench.scenario import load_scenarios
from bench.sim.episode import run_episode
from bench.world.build import build_world


def scenario(tmp: Path, duration: float, floating: bool):
    text = f"""
    name: bench-loop
    duration: {duration}
    criteria: {{no_fall: false}}
    """ + ("initial: {height_offset: 1.0}\n" if floating else "")
    path = tmp / "s.yaml"
    path.write_text(textwrap.dedent(text))
    return load_scenarios([str(path)])[0]


def bare_loop(sc) -> float:
    world = build_world(sc)
    world.model.opt.gravity[:] = 0.0
    d = mujoco.MjData(world.model)
    d.qpos[:] = world.initial_qpos
    mujoco.mj_forward(world.model, d)
    n = int(round(sc.duration / sc.timestep))
    t0 = time.perf_counter()
    for _ in range(n):
        mujoco.mj_step(world.model, d)
    return time.perf_counter() - t0


def episode_loop(sc, controller, gravity: bool) -> tuple[float, float]:
    world = build_world(sc)
    if not gravity:
        world.model.opt.gravity[:] = 0.0
    ep = run_episode(world, sc, controller, NominalRobot(world.robot))
    return ep.wall_time_s, ep.sim_time_s


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeats", type=int, default=7)
    ap.add_argument("--duration", type=float, default=5.0)
    args = ap.parse_args()
    with TemporaryDirectory() as tmp:
        floating = scenario(Path(tmp), args.duration, floating=True)
        standing = scenario(Path(tmp), args.duration, floating=False)
        bare = [bare_loop(floating) for _ in range(args.repeats)]
        zero = [episode_loop(floating, ZeroController(), gravity=False)[0] for _ in range(args.repeats)]
        pd = [episode_loop(standing, JointPDController(), gravity=True) for _ in range(args.repeats)]
    b, z = statistics.median(bare), statistics.median(zero)
    print(f"world: quad12, {args.duration:g} s at 1 kHz physics / 500 Hz control, {args.repeats} repeats (medians)")
    print(f"bare mj_step loop:           {b * 1e3:8.1f} ms  ({args.duration / b:6.1f}x real time)")
    print(f"episode loop, zero:          {z * 1e3:8.1f} ms  ({args.duration / z:6.1f}x real time)")
    print(f"ratio episode/bare:          {z / b:8.2f}")
    rtf = statistics.median(s / w for w, s in pd)
    print(f"joint-pd standing, real-time factor: {rtf:6.1f}x")


if __name__ == "__main__":
    main()
