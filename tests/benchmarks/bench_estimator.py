"""Benchmark: accuracy of the reference state estimator against the simulator's truth, and its cost per tick.

Runs bundled scenarios in full with a reference stack driving (by default ``force-qp-l1-privileged``,
which reads the true state; ``--controller force-qp-l1`` drives on its own estimate instead); the
estimator runs alongside on the same observations, after the bench's sensor faults) and prints, per
scenario: trunk velocity RMS error (3-D, world), worst trunk height error, horizontal position error at
the end as a share of the horizontal distance travelled, the median consistency figure (NIS) over the
second half, and the median time of one estimator update.

    python tests/benchmarks/bench_estimator.py [--controller force-qp-l1-privileged] [--ground-height-noise M]
                                               [--stack-settings | --rolling-ramp] [scenario.yaml ...]
    python tests/benchmarks/bench_estimator.py --speed [--repeats 7]

``--speed`` measures the cost of one update alone, as the default stacks call it: one ``force-qp-l1``
episode of ``trot-rear-load`` (the scenario of ``bench_lean.py stack``) records every call of its
estimator (observation, contact flags, trust), then a fresh estimator with the stacks' settings replays
the record ``--repeats`` times; printed: the median over repeats of the median update time (wall) and of
the CPU time per update (``time.process_time`` over the whole replay / updates, steadier on a busy
machine). The replay's estimates are checked against the episode's (they must be identical).

``--ground-height-noise`` turns on the stance-foot height pseudo-measurement (the ground taken as flat
at the height the robot starts on) with that standard deviation in metres. ``--stack-settings`` runs the
estimator as the reference stacks do (``STACK_ESTIMATOR``: a landing foot's rolling term and velocity
weighed by a settle ramp); ``--rolling-ramp`` the rolling term's ramp alone; the default is no ramp.
"""

from __future__ import annotations

import argparse
import copy
import statistics
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))   # the evaluation probe lives with the tests

import numpy as np  # noqa: E402
from estimator_eval import EstimatorProbe, estimator_errors, run_with_estimator, scenario_from  # noqa: E402

DEFAULT = (
    "scenarios/locomotion/forward.yaml",
    "scenarios/terrain/slope-12deg-up.yaml",
    "scenarios/faults/noisy-sensors.yaml",
    "scenarios/faults/frozen-encoders.yaml",
    "scenarios/gaits/bound-forward.yaml",
    "scenarios/gaits/pace-sideways.yaml",
)


class _TimedProbe(EstimatorProbe):
    def reset(self, robot, control_dt):
        super().reset(robot, control_dt)
        self.update_s = []
        update = self.est.update

        def timed(obs, contact=None):
            t0 = time.perf_counter()
            s = update(obs, contact)
            self.update_s.append(time.perf_counter() - t0)
            return s

        self.est.update = timed


SPEED_SCENARIO = "scenarios/payload/trot-rear-load.yaml"


def bench_speed(repeats: int) -> None:
    """Replay the estimator calls of one ``force-qp-l1`` episode through a fresh estimator."""
    from bench.controllers.estimator import LegImuEstimator
    from bench.controllers.registry import make
    from bench.controllers import stacks
    from bench.controllers.stacks import STACK_ESTIMATOR
    from bench.robot.model import NominalRobot
    from bench.sim.episode import run_episode
    from bench.world.build import build_world

    sc = scenario_from(SPEED_SCENARIO)
    world = build_world(sc)
    calls, outs = [], []

    class Recorded(LegImuEstimator):
        def update(self, obs, contact=None, trust=None):
            s = super().update(obs, contact=contact, trust=trust)
            calls.append((copy.deepcopy(obs), None if contact is None else contact.copy(),
                          None if trust is None else trust.copy()))
            outs.append(np.concatenate([s.base_pos, s.base_linvel]))
            return s

    stacks.LegImuEstimator = Recorded
    try:
        _, ctrl = make("force-qp-l1")
        robot = NominalRobot(world.robot)
        ep = run_episode(world, sc, ctrl, robot)
    finally:
        stacks.LegImuEstimator = LegImuEstimator
    dt = 1.0 / float(sc.control_rate)
    walls, cpus, worst = [], [], 0.0
    for _ in range(repeats):
        est = LegImuEstimator(NominalRobot(world.robot), dt, **STACK_ESTIMATOR)
        est.reset()
        upd, clock = est.update, time.perf_counter
        times = []
        c0 = time.process_time()
        for k, (obs, c, tr) in enumerate(calls):
            t0 = clock()
            s = upd(obs, contact=c, trust=tr)
            times.append(clock() - t0)
            if k % 97 == 0:
                worst = max(worst, float(np.max(np.abs(np.concatenate([s.base_pos, s.base_linvel]) - outs[k]))))
        cpus.append((time.process_time() - c0) / len(calls))
        walls.append(statistics.median(times))
    print(f"estimator update: force-qp-l1 on {sc.name} ({ep.status}), {len(calls)} updates replayed, "
          f"{repeats} repeats, medians")
    print(f"  update, wall (median)        {1e6 * statistics.median(walls):6.1f} us")
    print(f"  update, CPU (per update)     {1e6 * statistics.median(cpus):6.1f} us")
    print(f"  replay vs episode estimate   max |diff| {worst:.1e}")
    if worst != 0.0:
        raise SystemExit("the replay did not reproduce the episode's estimates")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--speed", action="store_true", help="time one update alone (see above)")
    ap.add_argument("--repeats", type=int, default=7, help="replays for --speed")
    ap.add_argument("scenarios", nargs="*", default=list(DEFAULT))
    ap.add_argument("--controller", default="force-qp-l1-privileged")
    ap.add_argument("--ground-height-noise", type=float, default=None, metavar="M")
    ap.add_argument("--stack-settings", action="store_true")
    ap.add_argument("--rolling-ramp", action="store_true")
    args = ap.parse_args()
    if args.speed:
        bench_speed(args.repeats)
        return
    params = {} if args.ground_height_noise is None else {"ground_height_noise_m": args.ground_height_noise}
    if args.stack_settings:
        from bench.controllers.stacks import STACK_ESTIMATOR
        params.update(STACK_ESTIMATOR)
    elif args.rolling_ramp:
        params["touchdown_settle_s"] = 0.05
    import estimator_eval
    estimator_eval.EstimatorProbe = _TimedProbe          # run_with_estimator builds this one
    print(f"controller {args.controller}; estimator {params or 'defaults'}; errors against the simulator's truth")
    print(f"{'scenario':<18} {'status':<10} {'dist m':>7} {'vel RMSE m/s':>13} {'height err m':>13} "
          f"{'drift %':>8} {'NIS':>6} {'update us':>10}")
    for path in args.scenarios:
        sc = scenario_from(path)
        ep, probe = run_with_estimator(sc, args.controller, **params)
        e = estimator_errors(ep.trace, probe, ep.status)
        us = 1e6 * statistics.median(probe.update_s)
        print(f"{sc.name:<18} {e.status:<10} {e.distance_m:7.2f} {e.vel_rmse_mps:13.3f} {e.height_err_max_m:13.3f} "
              f"{e.drift_pct:8.1f} {e.nis_median:6.2f} {us:10.0f}")


if __name__ == "__main__":
    main()
