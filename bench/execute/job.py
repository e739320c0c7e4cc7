"""One job: build the world, run the episode, score it; a plain function any executor can call.

``run_job`` never raises for a fault of the scenario's episode: a controller
that cannot be made, a world that cannot be built or an episode that breaks
all come back as an outcome with status ``error`` and a reason, so that the
rest of the run goes on. The outcome carries the trace as bytes, so that it can
cross a process or network boundary; the caller writes the files.
"""

from __future__ import annotations

import time
import traceback
import uuid
from dataclasses import dataclass, field

import mujoco
import numpy as np

import bench
from bench.controllers import registry
from bench.report.record import ControllerTiming, CriterionRecord, DecidingCriterion, RunRecord
from bench.report.results import trace_digest
from bench.robot.model import NominalRobot
from bench.scoring.verdict import score
from bench.sim.episode import EpisodeLimits, run_episode
from bench.sim.interrupts import UserInterrupts, raised_reason
from bench.sim.signals import signal_names
from bench.sim.trace import Trace
from bench.world.build import build_world, manifest_for


@dataclass
class Job:
    scenario: object
    controller: object = "force-qp-l1"   # a name, a factory or a controller object
    seed: int | None = None
    limits: EpisodeLimits = field(default_factory=EpisodeLimits)
    controller_params: dict = field(default_factory=dict)   # keywords for the controller's factory


@dataclass
class Outcome:
    result: dict
    trace: Trace | None
    events: list = field(default_factory=list)


def base_record(scenario, controller_name: str, seed: int, reason: str | None = None) -> RunRecord:
    """An ``error`` record of ``scenario`` that no episode has filled in yet (a fresh ``result_uid``)."""
    return RunRecord(
        scenario=scenario.id, source=str(scenario.source), controller=controller_name, seed=int(seed),
        status="error", passed=False, reason=reason, sim_time_s=0.0, wall_time_s=0.0, realtime_factor=0.0,
        controller_ms=ControllerTiming(), criteria=(), metrics={}, bench_version=bench.__version__,
        mujoco_version=mujoco.__version__, content_hash=getattr(scenario, "content_hash", "") or "",
        tags=tuple(getattr(scenario, "tags", []) or []), events=(), result_uid=uuid.uuid4().hex)


def _base_result(scenario, controller_name: str, seed: int) -> dict:
    return base_record(scenario, controller_name, seed).to_json()


def _label(controller) -> str | None:
    """The controller object's own ``name`` attribute (what it calls itself), when it has a text one."""
    try:
        name = getattr(controller, "name", None)
    except Exception:  # noqa: BLE001 - a property of the controller's own: informative only
        return None
    return name if isinstance(name, str) and name else None


def run_job(job: Job) -> Outcome:
    # Controller code runs while the controller is made (its module imported, its constructor called) and
    # during the episode: whatever it raises, SystemExit and KeyboardInterrupt included, is this episode's
    # error; only the user's Ctrl-C goes through.
    with UserInterrupts() as user:
        return _run_job(job, user)


def _run_job(job: Job, user: UserInterrupts) -> Outcome:
    sc = job.scenario
    seed = int(sc.seed if job.seed is None else job.seed)
    name = job.controller if isinstance(job.controller, str) else getattr(job.controller, "name", "custom")
    record = base_record(sc, str(name), seed)
    t0 = time.perf_counter()
    try:
        cname, controller = registry.make(job.controller, job.controller_params or None)
        record = record.replace(controller=str(cname), controller_params=dict(job.controller_params) or None,
                                controller_name=_label(controller))
    except BaseException as exc:  # noqa: BLE001 - SystemExit from a controller's module or constructor too
        if user.by_user(exc):
            raise
        why = str(exc) if isinstance(exc, Exception) else raised_reason(exc, "while it was made")
        return Outcome(record.replace(reason=f"controller {name!r} could not be made: {why}").to_json(), None)
    try:
        manifest = manifest_for(sc)
        world = build_world(sc, manifest)
        robot = NominalRobot(manifest)
    except Exception as exc:  # noqa: BLE001
        record = record.replace(reason=f"world could not be built: {type(exc).__name__}: {exc}",
                                wall_time_s=time.perf_counter() - t0)
        return Outcome(record.to_json(), None)
    try:
        ep = run_episode(world, sc, controller, robot, seed=seed, limits=job.limits)
    except BaseException as exc:  # noqa: BLE001 - a bench bug must still not unwind the run
        if user.by_user(exc):
            raise
        record = record.replace(reason=f"episode failed: {type(exc).__name__}: {exc}",
                                traceback=traceback.format_exc(limit=6), wall_time_s=time.perf_counter() - t0)
        return Outcome(record.to_json(), None)
    verdict = score(ep.trace, dict(sc.criteria), episode_status=ep.status, episode_reason=ep.reason,
                    score_from=sc.score_from_s, controller_stats=ep.controller_stats)
    ms = ep.trace["controller_ms"] if len(ep.trace) else np.zeros(1)
    criteria = tuple(CriterionRecord(c.name, c.value, c.limit, c.passed, c.first_violation_s,
                                     verdict.margins.get(c.name)) for c in verdict.criteria)
    deciding = None
    if verdict.deciding is not None:
        deciding = DecidingCriterion(**verdict.deciding.to_dict())
    record = record.replace(
        status=verdict.status,
        reason=verdict.reason,
        sim_time_s=ep.sim_time_s,
        wall_time_s=ep.wall_time_s,
        realtime_factor=ep.sim_time_s / ep.wall_time_s if ep.wall_time_s > 0 else 0.0,
        controller_ms=ControllerTiming(float(np.percentile(ms, 50)), float(np.percentile(ms, 99)), float(ms.max())),
        criteria=criteria,
        metrics=verdict.metrics,
        events=tuple(e.to_dict() for e in ep.events),
        episode_status=ep.status,
        score_from_s=sc.score_from_s,
        # identical for the same scenario, seed and controller, on any run and in any process
        trace_sha256=trace_digest(ep.trace.arrays),
        mujoco_warnings=tuple(getattr(ep, "mujoco_warnings", []) or []),
        watchdog_restored=(None if getattr(ep, "watchdog_restored", None) is None
                           else tuple(ep.watchdog_restored)),
        deciding=deciding,
        controller_signals=tuple(signal_names(ep.trace.arrays)) or None,
    )
    return Outcome(record.to_json(), ep.trace, ep.events)
