"""Benchmark: the episode loop's own cost, a reference stack's speed, and where a tick's time goes.

Three measurements, each printed as a short copyable summary:

``loop``
    The bench's episode loop with ``joint-pd`` against a hand-written MuJoCo loop on the same compiled
    world (read ``qpos``/``qvel``, the same PD law, clip to the torque limits, ``mj_step`` per
    physics step, one ``qpos`` row kept per tick). Repeats are interleaved (hand, bench, hand,
    bench...) so load on a shared machine hits both alike; the ratio is the median of the per-pair
    ratios, of wall time and of this process's CPU time (``time.process_time``: on a busy machine it
    leaves out the time the process waited for a core, so it is the steadier of the two; both cover
    the tick loop only, the bench's from ``EpisodeResult.cpu_time_s`` where it has it, else the whole
    ``run_episode`` call). The whole call's CPU time per tick is printed too: it adds the set-up and
    what is done after the loop (the trace's derived columns, the foot forces rebuilt from the logged
    contact records). Honesty check: both loops must produce the same trajectory (maximum absolute difference
    of every ``qpos`` row, printed; the run fails if it exceeds 1e-9).
``stack``
    ``force-qp-l1`` on the bundled ``trot-rear-load`` scenario (10 s trot at 0.4 m/s with an
    unknown 6 kg load): real-time factor (simulated time / episode wall time; and simulated time /
    the episode's CPU time, which a busy machine disturbs less), the controller's per-tick p50 and
    p99 (wall), and the whole tick's mean (episode wall time / ticks). Median of repeats.
``profile``
    One ``force-qp-l1`` episode of the same scenario under ``cProfile``, its time split into physics
    (MuJoCo's step functions called by the runner), QP solve (the solver call inside the force
    QP), controller (the rest of ``controller.step``) and runner (everything else in the episode).
    A profiler inflates Python-heavy parts, so the same split is also given without a profiler:
    controller and QP from the episode's own timers, physics from replaying the recorded torques
    through a bare ``mj_step`` loop (same world, same start, so the same physics), runner the rest.

``suite``
    ``bench run scenarios --no-plots --no-history --workers 2`` (the default controller) into a
    temporary folder: wall time, the summed simulated time and episode loop wall times (from each
    result.json) and the statuses. Not part of ``all`` (it takes minutes on a busy machine).

    python tests/benchmarks/bench_lean.py [loop|stack|profile|suite|all] [--repeats 5] [--workers 2]
"""

from __future__ import annotations

import argparse
import cProfile
import json
import pstats
import statistics
import subprocess
import sys
import textwrap
import time
from pathlib import Path
from tempfile import TemporaryDirectory

import mujoco
import numpy as np

from bench.controllers.registry import make
from bench.controllers.simple import JointPDController
from bench.robot.model import NominalRobot
from bench.scenario import load_scenarios
from bench.sim.episode import run_episode
from bench.world.build import build_world

ROOT = Path(__file__).resolve().parents[2]
STACK_SCENARIO = ROOT / "scenarios" / "payload" / "trot-rear-load.yaml"
HONESTY_TOL = 1e-9


def _standing(tmp: Path, duration: float):
    path = tmp / "stand.yaml"
    path.write_text(textwrap.dedent(f"""
        name: bench-stand
        duration: {duration}
        criteria: {{no_fall: false}}
    """))
    return load_scenarios([str(path)])[0]


def hand_loop(world, sc, kp: float, kd: float) -> tuple[float, float, np.ndarray]:
    """The same joint PD written directly against MuJoCo; returns (wall s, CPU s, qpos per tick)."""
    m = world.model
    d = mujoco.MjData(m)
    d.qpos[:] = world.initial_qpos
    mujoco.mj_forward(m, d)
    q0 = np.asarray(NominalRobot(world.robot).nominal_pose, dtype=float)
    lim = np.asarray(world.robot.torque_limits, dtype=float)
    neg_lim = -lim   # the limits do not change: both bounds made once, as a user would
    jq, jv, act = world.joint_qpos_adr, world.joint_dof_adr, world.actuator_ids
    substeps = max(int(round(1.0 / sc.control_rate / m.opt.timestep)), 1)
    n_ticks = int(round(sc.duration * sc.control_rate))
    rows = np.empty((n_ticks, m.nq))
    tau = np.empty(len(jq))
    c0 = time.process_time()
    t0 = time.perf_counter()
    for k in range(n_ticks):
        rows[k] = d.qpos
        np.subtract(q0, d.qpos[jq], out=tau)
        tau *= kp
        tau -= kd * d.qvel[jv]
        np.clip(tau, neg_lim, lim, out=tau)
        d.ctrl[act] = tau
        for _ in range(substeps):
            mujoco.mj_step(m, d)
    return time.perf_counter() - t0, time.process_time() - c0, rows


def bench_loop(repeats: int, duration: float) -> dict:
    kp, kd = 150.0, 3.0
    hand, ours, ratios, hand_cpu, ours_cpu, cpu_ratios, diffs = [], [], [], [], [], [], []
    whole_cpu = []
    with TemporaryDirectory() as tmp:
        sc = _standing(Path(tmp), duration)
        for _ in range(repeats):
            world = build_world(sc)
            wall_h, cpu_h, rows = hand_loop(world, sc, kp, kd)
            world = build_world(sc)
            ctrl, robot = JointPDController(kp=kp, kd=kd), NominalRobot(world.robot)
            c0 = time.process_time()
            ep = run_episode(world, sc, ctrl, robot)
            whole_cpu.append(time.process_time() - c0)
            cpu_b = getattr(ep, "cpu_time_s", 0.0) or whole_cpu[-1]
            assert ep.status == "completed", (ep.status, ep.reason)
            hand.append(wall_h)
            ours.append(ep.wall_time_s)
            ratios.append(ep.wall_time_s / wall_h)
            hand_cpu.append(cpu_h)
            ours_cpu.append(cpu_b)
            cpu_ratios.append(cpu_b / cpu_h)
            diffs.append(float(np.max(np.abs(ep.trace["qpos"] - rows))))
    n = int(round(duration * sc.control_rate))
    med = statistics.median
    out = {"ticks": n, "hand_us": med(hand) / n * 1e6, "bench_us": med(ours) / n * 1e6, "ratio": med(ratios),
           "hand_cpu_us": med(hand_cpu) / n * 1e6, "bench_cpu_us": med(ours_cpu) / n * 1e6,
           "cpu_ratio": med(cpu_ratios), "max_diff": max(diffs), "whole_cpu_us": med(whole_cpu) / n * 1e6}
    print(f"loop: quad12 standing, joint-pd kp {kp:g} kd {kd:g}, {duration:g} s = {n} ticks "
          f"(1 kHz physics, 500 Hz control), {repeats} interleaved pairs, medians")
    print(f"  per tick                   wall {out['hand_us']:6.1f} us   CPU {out['hand_cpu_us']:6.1f} us   "
          "hand-written MuJoCo loop")
    print(f"                             wall {out['bench_us']:6.1f} us   CPU {out['bench_cpu_us']:6.1f} us   "
          "bench episode loop")
    print(f"                                          CPU {out['whole_cpu_us']:6.1f} us   "
          "whole run_episode call (set-up, reset, loop, what follows it), per tick")
    print(f"  ratio bench/hand, CPU      {out['cpu_ratio']:6.2f}   (per-pair range "
          f"{min(cpu_ratios):.2f}-{max(cpu_ratios):.2f}; goal <= 1.10, acceptable <= 1.30)")
    print(f"  ratio bench/hand, wall     {out['ratio']:6.2f}   (per-pair range {min(ratios):.2f}-{max(ratios):.2f})")
    ok = out["max_diff"] <= HONESTY_TOL
    print(f"  honesty: max |qpos difference| over all ticks {out['max_diff']:.3g} "
          f"({'identical trajectories' if out['max_diff'] == 0 else 'agree' if ok else 'DISAGREE'})")
    if not ok:
        raise SystemExit("the two loops do not simulate the same trajectory; the ratio means nothing")
    return out


def _stack_episode(sc, name: str = "force-qp-l1"):
    world = build_world(sc)
    _, ctrl = make(name)
    robot = NominalRobot(world.robot)
    c0 = time.process_time()
    ep = run_episode(world, sc, ctrl, robot)
    if not getattr(ep, "cpu_time_s", 0.0):   # a bench without the loop's own CPU timer: the whole call
        ep.cpu_time_s = time.process_time() - c0
    return world, ctrl, ep


def bench_stack(repeats: int) -> dict:
    sc = load_scenarios([str(STACK_SCENARIO)])[0]
    rtf, cpu_rtf, p50, p99, tick = [], [], [], [], []
    status = set()
    for _ in range(repeats):
        _, _, ep = _stack_episode(sc)
        ms = ep.trace["controller_ms"]
        status.add(ep.status)
        rtf.append(ep.sim_time_s / ep.wall_time_s)
        cpu_rtf.append(ep.sim_time_s / ep.cpu_time_s)
        p50.append(float(np.percentile(ms, 50)))
        p99.append(float(np.percentile(ms, 99)))
        tick.append(ep.wall_time_s / len(ms) * 1e3)
    med = statistics.median
    out = {"rtf": med(rtf), "cpu_rtf": med(cpu_rtf), "p50_ms": med(p50), "p99_ms": med(p99), "tick_ms": med(tick)}
    print(f"stack: force-qp-l1 on {sc.id} ({sc.duration:g} s trot, unknown 6 kg load), {repeats} repeats, "
          f"medians; status {sorted(status)}")
    print(f"  real-time factor           {out['rtf']:7.1f}x   (range {min(rtf):.1f}-{max(rtf):.1f}; "
          f"goal >= 20x, acceptable >= 12x)")
    print(f"  real-time factor, CPU time {out['cpu_rtf']:7.1f}x   (simulated time / CPU time of the tick loop)")
    print(f"  controller per tick        p50 {out['p50_ms'] * 1e3:6.1f} us   p99 {out['p99_ms'] * 1e3:6.1f} us")
    print(f"  whole tick (wall/ticks)    {out['tick_ms'] * 1e3:7.1f} us   (budget at 20x: 100 us)")
    return out


_PHYSICS = ("mj_step", "mj_step1", "mj_step2")


def _profile_split(stats: pstats.Stats, qp_s: float) -> dict[str, float]:
    """Seconds per part from a cProfile of one episode (see the module docstring).

    Physics: MuJoCo's step functions (built-ins, ``<built-in method mujoco._functions.mj_step>``);
    controller: cumulative time of the stack's ``step``; QP solve: the force QP's own timer around
    the solver call (DAQP is compiled code the profiler does not see as a call of its own).
    """
    physics = ctrl = 0.0
    for (fname, _line, func), (_cc, _nc, tt, ct, _callers) in stats.stats.items():
        if fname == "~" and any(func.endswith(f".{p}>") for p in _PHYSICS):
            physics += tt
        elif func == "step" and fname.endswith("stacks.py"):
            ctrl += ct
    total = stats.total_tt
    return {"physics": physics, "qp": qp_s, "controller": ctrl - qp_s, "runner": total - physics - ctrl,
            "total": total}


def _replay_physics(world, sc, trace) -> float:
    """Wall time of the same physics driven by the recorded torques, nothing else."""
    m = world.model
    d = mujoco.MjData(m)
    d.qpos[:] = world.initial_qpos
    mujoco.mj_forward(m, d)
    act = world.actuator_ids
    substeps = max(int(round(1.0 / sc.control_rate / m.opt.timestep)), 1)
    tau = np.ascontiguousarray(trace["joint_torque"])
    t0 = time.perf_counter()
    for k in range(len(tau)):
        d.ctrl[act] = tau[k]
        for _ in range(substeps):
            mujoco.mj_step(m, d)
    return time.perf_counter() - t0


def bench_profile(repeats: int) -> dict:
    sc = load_scenarios([str(STACK_SCENARIO)])[0]
    world = build_world(sc)
    _, ctrl = make("force-qp-l1")
    robot = NominalRobot(world.robot)
    prof = cProfile.Profile()
    prof.enable()
    ep = run_episode(world, sc, ctrl, robot)
    prof.disable()
    split = _profile_split(pstats.Stats(prof), float(ctrl.qp.solve_time_s))
    n = len(ep.trace["t"])
    print(f"profile: force-qp-l1 on {sc.id}, one episode under cProfile ({n} ticks), per tick")
    tot = split["total"]
    for part in ("physics", "runner", "controller", "qp"):
        label = {"qp": "QP solve", "controller": "controller (without QP)"}.get(part, part)
        print(f"  {label:<26} {split[part] / n * 1e6:7.1f} us  {100 * split[part] / tot:5.1f} %")
    # the same split from the episode's own timers, no profiler (median of repeats)
    rows = []
    for _ in range(repeats):
        world, ctrl, ep = _stack_episode(sc)
        wall = ep.wall_time_s
        c = float(np.sum(ep.trace["controller_ms"])) / 1e3
        q = float(ctrl.qp.solve_time_s)
        p = _replay_physics(build_world(sc), sc, ep.trace)
        rows.append((p, wall - c - p, c - q, q, wall))
    med = [statistics.median(r[i] for r in rows) for i in range(5)]
    print(f"  without a profiler (episode timers + physics replay, median of {repeats}), per tick:")
    for label, v in zip(("physics", "runner", "controller (without QP)", "QP solve"), med[:4]):
        print(f"  {label:<26} {v / n * 1e6:7.1f} us  {100 * v / med[4]:5.1f} %")
    return {"profile": split, "timers": med}


def bench_suite(workers: int, scenarios: Path) -> dict:
    with TemporaryDirectory() as tmp:
        cmd = [sys.executable, "-m", "bench", "run", str(scenarios), "--out", tmp, "--no-plots",
               "--no-history", "--workers", str(workers)]
        t0 = time.perf_counter()
        proc = subprocess.run(cmd, capture_output=True, text=True)
        wall = time.perf_counter() - t0
        if proc.returncode not in (0, 1):
            raise SystemExit(f"bench run exited {proc.returncode}: {proc.stderr[-2000:]}")
        summary = json.loads((Path(tmp) / "summary.json").read_text())
        sim = loops = 0.0
        for entry in summary["results"]:
            res = json.loads((Path(tmp) / entry["result"]).read_text())
            sim += res["sim_time_s"]
            loops += res["wall_time_s"]
    print(f"suite: bench run scenarios --no-plots --no-history --workers {workers}: {summary['total']} episodes, "
          f"{summary['passed']} passed, {summary['failed']} failed, {summary['errors']} errors")
    print(f"  wall time                  {wall:7.1f} s   (goal < 60 s on 2 workers)")
    print(f"  episode loops, summed      {loops:7.1f} s   ({sim:.0f} s simulated: {sim / loops:.1f}x real time "
          f"per worker; the rest of the wall time is start-up, world building, scoring and writing)")
    return {"wall_s": wall, "loops_s": loops, "sim_s": sim}


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("what", nargs="?", default="all", choices=("loop", "stack", "profile", "suite", "all"))
    ap.add_argument("--repeats", type=int, default=5)
    ap.add_argument("--duration", type=float, default=5.0, help="standing episode length for 'loop', s")
    ap.add_argument("--workers", type=int, default=2, help="worker processes for 'suite'")
    ap.add_argument("--scenarios", type=Path, default=ROOT / "scenarios", help="folder for 'suite'")
    args = ap.parse_args(argv)
    import bench

    print(f"bench {getattr(bench, '__version__', '?')} from {Path(bench.__file__).parent}, "
          f"mujoco {mujoco.__version__}, python {sys.version.split()[0]}")
    if args.what in ("loop", "all"):
        bench_loop(args.repeats, args.duration)
    if args.what in ("stack", "all"):
        bench_stack(args.repeats)
    if args.what in ("profile", "all"):
        bench_profile(max(args.repeats // 2, 1))
    if args.what == "suite":
        bench_suite(args.workers, args.scenarios)


if __name__ == "__main__":
    main()
