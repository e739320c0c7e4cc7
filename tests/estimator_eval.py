"""Evaluation of the reference state estimator against the simulator's truth (tests and benchmark only).

:class:`EstimatorProbe` is a controller that runs another controller unchanged
and, each tick, feeds the same observation (after the runner's sensor faults)
to a :class:`~bench.controllers.estimator.LegImuEstimator` and records its
estimate. The episode's Trace records the true trunk state at the same
instant as each observation, so row ``k`` of the probe and of the Trace
compare like with like. :func:`estimator_errors` reduces the pair to the
figures the tests and the benchmark report.
"""

from __future__ import annotations

import textwrap
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from bench.controllers.estimator import LegImuEstimator
from bench.controllers.registry import make
from bench.robot.model import NominalRobot
from bench.scenario import load_scenarios
from bench.sim.episode import run_episode
from bench.world.build import build_world

ROOT = Path(__file__).resolve().parents[1]


class EstimatorProbe:
    """Runs ``inner`` as usual; records the estimator's output each tick."""

    name = "estimator-probe"

    def __init__(self, inner, max_ticks: int, **estimator_params) -> None:
        self.inner = inner
        self.max_ticks = int(max_ticks)
        self.estimator_params = estimator_params

    def reset(self, robot, control_dt: float) -> None:
        self.inner.reset(robot, control_dt)
        self.est = LegImuEstimator(robot, control_dt, **self.estimator_params)
        self.est.reset()
        n = self.max_ticks
        self.pos = np.full((n, 3), np.nan)
        self.vel = np.full((n, 3), np.nan)
        self.vel_std = np.full((n, 3), np.nan)
        self.nis = np.full(n, np.nan)
        self.k = 0

    def step(self, obs, command):
        s = self.est.update(obs)
        k = self.k
        if k < self.max_ticks:
            self.pos[k] = s.base_pos
            self.vel[k] = s.base_linvel
            self.vel_std[k] = s.vel_std_mps
            self.nis[k] = s.nis
        self.k = k + 1
        return self.inner.step(obs, command)


@dataclass
class EstimatorErrors:
    """Errors of an estimate against the truth over one episode (SI)."""

    vel_rmse_mps: float          # RMS of |v_est - v_true| (3-D, world)
    height_err_max_m: float      # max |z_est - z_true|
    height_err_end_m: float      # |z_est - z_true| at the end
    drift_pct: float             # horizontal position error at the end / horizontal path length, %
    distance_m: float            # horizontal path length of the true trunk
    nis_median: float            # median consistency figure over the second half
    status: str


def estimator_errors(trace, probe: EstimatorProbe, status: str, skip_s: float = 0.0) -> EstimatorErrors:
    """Compare the probe's record with the trace; ``skip_s`` leaves out the start of the velocity RMS."""
    n = min(len(trace), probe.k)
    t = trace["t"][:n]
    pos_true, vel_true = trace["base_pos"][:n], trace["base_linvel"][:n]
    pos, vel = probe.pos[:n], probe.vel[:n]
    keep = t >= skip_s
    verr = np.linalg.norm(vel[keep] - vel_true[keep], axis=1)
    herr = np.abs(pos[:, 2] - pos_true[:, 2])
    path = float(np.sum(np.linalg.norm(np.diff(pos_true[:, :2], axis=0), axis=1)))
    xy_err_end = float(np.linalg.norm(pos[-1, :2] - pos_true[-1, :2]))
    return EstimatorErrors(
        vel_rmse_mps=float(np.sqrt(np.mean(verr ** 2))),
        height_err_max_m=float(np.max(herr)),
        height_err_end_m=float(herr[-1]),
        drift_pct=100.0 * xy_err_end / max(path, 1e-9),
        distance_m=path,
        nis_median=float(np.median(probe.nis[n // 2:n])),
        status=status,
    )


def scenario_from(path: str | Path, duration_s: float | None = None, extra_yaml: str = "", tmp_dir=None):
    """Load a bundled scenario, optionally cut to ``duration_s`` and with extra top-level YAML appended."""
    path = Path(path)
    if not path.is_absolute():
        path = ROOT / path
    if duration_s is None and not extra_yaml:
        return load_scenarios([str(path)])[0]
    assert tmp_dir is not None, "a temporary folder is needed to write the shortened scenario"
    text = f"extends: {path}\n"
    if duration_s is not None:
        text += f"duration: {duration_s}\n"
    text += textwrap.dedent(extra_yaml)
    out = Path(tmp_dir) / f"est-{path.stem}.yaml"
    out.write_text(text)
    return load_scenarios([str(out)], roots=[ROOT, Path(tmp_dir)])[0]


def run_with_estimator(scenario, controller: str = "force-qp-l1-privileged", **estimator_params):
    """One episode of ``scenario`` driven by ``controller``, with the estimator probed alongside.

    The default driver reads the true trunk state, so the trajectory does not depend on the estimate
    under test (the default ``force-qp-l1`` runs an estimator of its own).
    """
    world = build_world(scenario)
    _, inner = make(controller)
    n = int(round(float(scenario.duration) * float(scenario.control_rate)))
    probe = EstimatorProbe(inner, n, **estimator_params)
    ep = run_episode(world, scenario, probe, NominalRobot(world.robot))
    return ep, probe
