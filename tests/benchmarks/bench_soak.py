"""Soak: the bundled suite many times over in one long-lived process pool; nothing lost, nothing torn, no leak.

Every scenario of the suite (trials expanded) is run ``--rounds`` times through
one ``ProcessExecutor`` (the pool is reused, as ``bench limit`` reuses it), all
rounds submitted at once so that the workers never idle. Each outcome is
written with the bench's own writer into ``<out>/round-<k>/<scenario>/``. At the
end it checks and prints:

- lost: result.json files missing (expected rounds x episodes);
- corrupted: result folders that are not complete and valid
  (``bench.report.results.complete_result``: JSON parses with the contract keys,
  trace.npz loads and matches the digest recorded in result.json);
- not reproducible: scenarios whose trace digest differs between rounds (the
  bench is deterministic, so a difference is corruption or shared state);
- memory: resident set size of the parent and of each worker, sampled as every
  round completes; growth from the first to the last round, and its slope.

It also measures the per-tick cost of the hung-controller watchdog (a SIGALRM
timer set once per episode) against the same episode without it, and the cost
of the alternative it avoids (arming a one-shot timer every tick).

    python tests/benchmarks/bench_soak.py [--rounds 5] [--workers 2] [--controller joint-pd]
                                          [--suite scenarios] [--max-duration 2] [--out DIR] [--no-watchdog]

``--max-duration S`` cuts longer scenarios to S seconds where that leaves them
valid (the others run in full); without it one round of the bundled suite is
about 570 s of simulated time.
"""

from __future__ import annotations

import argparse
import json
import os
import signal
import statistics
import sys
import tempfile
import time
from pathlib import Path

REPO = Path(__file__).resolve().parents[2]


def rss_mb(pid: int) -> float:
    """Resident set size from /proc (Linux), MB."""
    try:
        with open(f"/proc/{pid}/statm") as fh:
            return int(fh.read().split()[1]) * os.sysconf("SC_PAGE_SIZE") / 1e6
    except (OSError, ValueError, IndexError):
        return float("nan")


def children(pid: int) -> list[int]:
    out = []
    try:
        for task in os.listdir(f"/proc/{pid}/task"):
            with open(f"/proc/{pid}/task/{task}/children") as fh:
                out += [int(x) for x in fh.read().split()]
    except OSError:
        pass
    return out


def descendants(pid: int) -> list[int]:
    """Every process below ``pid`` (pool workers are children of the fork server, not of this process)."""
    out, todo = [], children(pid)
    while todo:
        p = todo.pop()
        out.append(p)
        todo += children(p)
    return out


def episodes(suite: str, max_duration: float | None):
    from bench.errors import ScenarioErrors
    from bench.execute import trials
    from bench.scenario import derive, load_scenarios

    eps, seeds, _ = trials.plan(load_scenarios([suite]))
    out, cut = [], 0
    for sc, seed in zip(eps, seeds):
        if max_duration is not None and sc.duration > max_duration:
            try:
                sc = derive(sc, {"duration": max_duration}, "")
                cut += 1
            except ScenarioErrors:
                pass   # an event after the cut: keep it whole
        out.append((sc, seed))
    if max_duration is not None:
        print(f"--max-duration {max_duration:g}: {cut} of {len(out)} episodes cut (the others have events later)")
    return out


def soak(args) -> int:
    from bench.execute.job import Job, run_job
    from bench.execute.outcomes import error_outcome
    from bench.execute.process import ProcessExecutor
    from bench.report.results import complete_result, write_outcome

    eps = episodes(args.suite, args.max_duration)
    n = len(eps)
    jobs = [Job(sc, args.controller, seed) for _ in range(args.rounds) for sc, seed in eps]
    out = Path(args.out or tempfile.mkdtemp(prefix="bench-soak-"))
    sim_s = sum(sc.duration for sc, _ in eps)
    print(f"suite {args.suite}: {n} episodes, {sim_s:.0f} s simulated per round; {args.rounds} rounds, "
          f"{args.workers} workers, controller {args.controller}; load average {os.getloadavg()[0]:.1f}")
    print(f"results in {out}/")
    done_per_round = [0] * args.rounds
    samples: list[tuple[int, float, list[float]]] = []
    statuses: dict[str, int] = {}
    t0 = time.perf_counter()
    with ProcessExecutor(args.workers) as ex:
        for i, outcome in ex.map(run_job, jobs, on_error=error_outcome):
            k, j = divmod(i, n)
            write_outcome(out / f"round-{k}", eps[j][0].slug, outcome)
            statuses[outcome.result["status"]] = statuses.get(outcome.result["status"], 0) + 1
            done_per_round[k] += 1
            if done_per_round[k] == n:
                me = os.getpid()
                samples.append((k, rss_mb(me), sorted(rss_mb(c) for c in descendants(me))))
                print(f"  round {k} complete at {time.perf_counter() - t0:6.1f} s: parent {samples[-1][1]:6.1f} MB, "
                      f"fork server and workers {', '.join(f'{x:.1f}' for x in samples[-1][2])} MB", flush=True)
        breaks = ex.pool_breaks
    wall = time.perf_counter() - t0

    lost, corrupt, digests = 0, 0, {}
    for k in range(args.rounds):
        for sc, seed in eps:
            if not (out / f"round-{k}" / sc.slug / "result.json").exists():
                lost += 1
                continue
            result, why = complete_result(out / f"round-{k}", sc.slug, scenario_id=sc.id)
            if result is None:
                corrupt += 1
                print(f"  corrupt: round-{k}/{sc.slug}: {why}")
                continue
            digests.setdefault(sc.id, set()).add(result.get("trace_sha256"))
    differ = [sid for sid, d in digests.items() if len(d) > 1]
    print(f"episodes: {len(jobs)} in {wall:.1f} s ({len(jobs) / wall:.2f}/s, {args.rounds * sim_s / wall:.1f}x real time "
          f"overall); statuses {json.dumps(statuses, sort_keys=True)}; worker deaths {breaks}")
    print(f"lost: {lost}   corrupted: {corrupt}   not reproducible across rounds: {len(differ)}"
          + (f" ({', '.join(differ[:5])})" if differ else ""))
    if len(samples) >= 2:
        first, last = samples[0], samples[-1]
        rounds = [s[0] for s in samples]
        par = [s[1] for s in samples]
        wsum = [sum(s[2]) for s in samples]
        slope = _slope(rounds, wsum)
        print(f"memory, first -> last round: parent {first[1]:.1f} -> {last[1]:.1f} MB ({last[1] - first[1]:+.1f}); "
              f"workers (sum) {sum(first[2]):.1f} -> {sum(last[2]):.1f} MB ({sum(last[2]) - sum(first[2]):+.1f}); "
              f"slope {slope:+.2f} MB/round over {len(samples)} samples (parent {_slope(rounds, par):+.2f})")
    return 0 if lost == 0 and corrupt == 0 and not differ else 1


def _slope(x: list[float], y: list[float]) -> float:
    mx, my = statistics.fmean(x), statistics.fmean(y)
    den = sum((a - mx) ** 2 for a in x)
    return sum((a - mx) * (b - my) for a, b in zip(x, y)) / den if den else 0.0


def watchdog_cost(repeats: int) -> None:
    """Episode wall time with the watchdog off (twice: the A/A spread is the noise), on, and on at its
    fastest period; and the price of the alternative, a one-shot timer armed and disarmed every tick."""
    import random

    from bench.controllers.simple import ZeroController
    from bench.robot.model import NominalRobot
    from bench.scenario import load_scenarios
    from bench.sim import episode
    from bench.world.build import build_world

    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "float.yaml"
        # hanging 1 m up without gravity: nothing falls, every tick runs (as bench_episode.py does)
        path.write_text("name: float\nduration: 5\ninitial: {height_offset: 1.0}\ncriteria: {no_fall: false}\n")
        sc = load_scenarios([str(path)])[0]
    ticks = int(sc.duration * sc.control_rate)
    world = build_world(sc)
    world.model.opt.gravity[:] = 0.0
    robot = NominalRobot(world.robot)
    modes = {"off": (False, 2.0), "off again": (False, 2.0), "on (2 s limit, 0.2 s period)": (True, 2.0),
             "on (0.05 s limit, 5 ms period)": (True, 0.05)}

    def once(watchdog: bool, tick_s: float) -> float:
        start = episode._Watchdog.start
        if not watchdog:
            episode._Watchdog.start = lambda self: False
        try:
            ep = episode.run_episode(world, sc, ZeroController(), robot,
                                     limits=episode.EpisodeLimits(tick_timeout_s=tick_s))
        finally:
            episode._Watchdog.start = start
        assert ep.interruptible == watchdog
        return ep.wall_time_s

    times: dict[str, list[float]] = {m: [] for m in modes}
    rng = random.Random(0)
    for _ in range(repeats):   # all modes every repeat, in a shuffled order: load changes hit all alike
        order = list(modes)
        rng.shuffle(order)
        for m in order:
            times[m].append(once(*modes[m]))
    base = statistics.median(times["off"])
    print(f"watchdog: {ticks} ticks per episode, {repeats} repeats, medians (per-tick difference from 'off'):")
    for m, v in times.items():
        med = statistics.median(v)
        print(f"  {m:32s} {med * 1e3:7.1f} ms  {(med - base) / ticks * 1e6:+6.2f} us/tick  ({(med / base - 1) * 100:+.1f} %)")
    signal.signal(signal.SIGALRM, lambda *a: None)
    n = 200_000
    t = time.perf_counter()
    for _ in range(n):
        signal.setitimer(signal.ITIMER_REAL, 2.0)
        signal.setitimer(signal.ITIMER_REAL, 0.0)
    arm = (time.perf_counter() - t) / n
    signal.signal(signal.SIGALRM, signal.SIG_DFL)
    print(f"  a timer armed and disarmed every tick instead: {arm * 1e6:.2f} us/tick ({arm * ticks / base * 100:.1f} % "
          f"of this episode)")


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rounds", type=int, default=5, help="0: only the watchdog measurement")
    ap.add_argument("--workers", type=int, default=max(1, len(os.sched_getaffinity(0))))
    ap.add_argument("--controller", default="joint-pd")
    ap.add_argument("--suite", default=str(REPO / "scenarios"))
    ap.add_argument("--max-duration", type=float, default=None, metavar="S")
    ap.add_argument("--out", default=None)
    ap.add_argument("--watchdog-repeats", type=int, default=15)
    ap.add_argument("--no-watchdog", action="store_true", help="skip the watchdog cost measurement")
    args = ap.parse_args()
    if not args.no_watchdog:
        watchdog_cost(args.watchdog_repeats)
    return soak(args) if args.rounds > 0 else 0


if __name__ == "__main__":
    sys.exit(main())
