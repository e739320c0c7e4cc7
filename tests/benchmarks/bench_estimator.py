"""Benchmark: accuracy of the reference state estimator against the simulator's truth, and its cost per tick.

Runs bundled scenarios in full with a reference stack driving (by default ``force-qp-l1-privileged``,
which reads the true state; ``--controller force-qp-l1`` drives on its own estimate instead); the
estimator runs alongside on the same observations, after the bench's sensor faults) and prints, per
scenario: trunk velocity RMS error (3-D, world), worst trunk height error, horizontal position error at
the end as a share of the horizontal distance travelled, the median consistency figure (NIS) over the
second half, and the median time of one estimator update.

    python tests/benchmarks/bench_estimator.py [--controller force-qp-l1-privileged] [--ground-height-noise M]
                                               [--stack-settings | --rolling-ramp] [scenario.yaml ...]

``--ground-height-noise`` turns on the stance-foot height pseudo-measurement (the ground taken as flat
at the height the robot starts on) with that standard deviation in metres. ``--stack-settings`` runs the
estimator as the reference stacks do (``STACK_ESTIMATOR``: a landing foot's rolling term and velocity
weighed by a settle ramp); ``--rolling-ramp`` the rolling term's ramp alone; the default is no ramp.
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))   # the evaluation probe lives with the tests

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


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("scenarios", nargs="*", default=list(DEFAULT))
    ap.add_argument("--controller", default="force-qp-l1-privileged")
    ap.add_argument("--ground-height-noise", type=float, default=None, metavar="M")
    ap.add_argument("--stack-settings", action="store_true")
    ap.add_argument("--rolling-ramp", action="store_true")
    args = ap.parse_args()
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
