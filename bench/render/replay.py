"""Replay of a recorded episode: the world rebuilt from its scenario, the state set from the trace.

Nothing is re-simulated. Each trace row holds the full ``qpos`` of the world and
the mass of every payload at that control tick; setting both and running
``mj_forward`` gives exactly the recorded instant. :meth:`Replay.check` compares
the rebuilt kinematics with what the episode recorded (trunk position and foot
positions), so a scenario or robot file edited after the run is caught instead
of silently drawn wrong.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path

import mujoco
import numpy as np

from bench.sim.trace import Trace

#: Largest allowed gap between replayed and recorded positions, m (float round-off only).
REPLAY_TOL_M = 1e-6


class RenderInputError(Exception):
    """A result folder that cannot be replayed; ``str()`` names the file and what is wrong."""


class ReplayMismatch(RenderInputError):
    """The rebuilt world does not reproduce the recorded state."""


@dataclass
class Recording:
    """What one scenario's result folder holds."""

    dir: Path
    result: dict
    trace: Trace | None

    @property
    def record(self):
        """The result as a run record, or None when the file is not a whole one (it can still be drawn)."""
        from bench.report.record import RecordError, RunRecord

        try:
            return RunRecord.from_json(self.result)
        except RecordError:
            return None

    @property
    def scenario_id(self) -> str:
        rec = self.record
        return rec.scenario if rec is not None else str(self.result.get("scenario", self.dir.name))

    @property
    def controller(self) -> str:
        rec = self.record
        return rec.controller if rec is not None else str(self.result.get("controller", "?"))

    @property
    def status(self) -> str:
        rec = self.record
        return rec.status if rec is not None else str(self.result.get("status", "?"))


def load_recording(result_dir: str | Path, need_trace: bool = True) -> Recording:
    d = Path(result_dir)
    rpath = d / "result.json"
    if not rpath.is_file():
        raise RenderInputError(f"{rpath}: no such file (expected a scenario's result folder)")
    try:
        result = json.loads(rpath.read_text())
    except (OSError, ValueError) as exc:
        raise RenderInputError(f"{rpath}: not readable as JSON: {exc}") from None
    if not isinstance(result, dict) or "scenario" not in result:
        raise RenderInputError(f"{rpath}: field 'scenario' missing (not a bench result file)")
    tpath = d / "trace.npz"
    trace = None
    if tpath.is_file():
        try:
            trace = Trace.load(tpath)
        except Exception as exc:  # noqa: BLE001 - a damaged file is an input problem
            raise RenderInputError(f"{tpath}: not readable: {exc}") from None
    if need_trace:
        if trace is None:
            why = result.get("reason") or "the episode did not record one"
            raise RenderInputError(f"{tpath}: no trace to replay ({result.get('status')}: {why})")
        if "qpos" not in trace.arrays or len(trace) == 0:
            raise RenderInputError(f"{tpath}: field 'qpos' missing or empty; re-run the scenario with this bench "
                                   "version to record it")
    return Recording(d, result, trace)


def _source_candidates(source: str, result_dir: Path) -> list[Path]:
    p = Path(source)
    if p.is_absolute():
        return [p]
    out = [Path.cwd() / p]
    # Runs are usually started from the project folder, with results one or two levels below it.
    for up in list(result_dir.resolve().parents)[:4]:
        out.append(up / p)
    return out


def scenario_for(rec: Recording, roots=(), source: str | Path | None = None):
    """The Scenario a result was made from: its ``source`` file (or ``source`` given here) loaded again, by id."""
    from bench.errors import ScenarioError, ScenarioErrors
    from bench.scenario.loader import load_scenarios

    if source is not None:
        path = Path(source)
        if not path.is_file():
            raise RenderInputError(f"{path}: no such scenario file")
    else:
        source = rec.result.get("source")
        if not source:
            raise RenderInputError(f"{rec.dir / 'result.json'}: field 'source' missing")
        path = next((c for c in _source_candidates(str(source), rec.dir) if c.is_file()), None)
        if path is None:
            raise RenderInputError(f"{rec.dir / 'result.json'}: source: scenario file {source!r} not found "
                                   f"(run from the folder the run was started in, or give --scenario FILE)")
    try:
        scenarios = load_scenarios([str(path)], roots=[Path(r) for r in roots])
    except ScenarioErrors as exc:
        raise RenderInputError(f"{path}: no longer valid: {exc.errors[0]}") from None
    except ScenarioError as exc:
        raise RenderInputError(f"{path}: no longer valid: {exc}") from None
    want = rec.scenario_id
    found = next((s for s in scenarios if s.id == want), None)
    if found is None:
        try:                       # a trial variant is made from its scenario by the trials expander
            from bench.scenario.trials import expand_trials
            for s in scenarios:
                found = next((t for t in expand_trials(s) if t.id == want), None)
                if found is not None:
                    break
        except Exception:  # noqa: BLE001
            found = None
    if found is None:
        raise RenderInputError(f"{path}: defines no scenario with id {want!r} "
                               f"(it defines {', '.join(s.id for s in scenarios)})")
    return found


def score_from_of(scenario) -> float:
    """Start of the scoring window of a scenario (the loader's ``score_from_s`` when it has one)."""
    v = getattr(scenario, "score_from_s", None)
    if v is None:
        v = getattr(scenario, "score_from", None)
    return float(v) if v is not None else min(0.5, float(getattr(scenario, "duration", 1.0)) / 2)


class Replay:
    """Sets a compiled world to recorded trace rows."""

    def __init__(self, world, trace: Trace):
        self.world = world
        self.trace = trace
        self.model = world.model
        self.data = mujoco.MjData(self.model)
        self.A = trace.arrays
        m = self.model
        n_pay = len(world.payloads)
        pm = self.A.get("payload_mass")
        if pm is None or pm.ndim != 2 or pm.shape[1] != n_pay:
            raise ReplayMismatch(f"trace has payload masses for {0 if pm is None else pm.shape[-1]} payloads, "
                                 f"the rebuilt world has {n_pay}")
        if self.A["qpos"].shape[1] != m.nq:
            raise ReplayMismatch(f"trace qpos has {self.A['qpos'].shape[1]} entries, the rebuilt world has nq={m.nq}"
                                 " (scenario or robot changed since the run?)")
        self._alpha = np.array([m.geom_rgba[p.geom_id, 3] for p in world.payloads])
        self._mass = np.full(n_pay, np.nan)
        self.row = -1
        self.scenario = None

    def set_row(self, k: int) -> mujoco.MjData:
        m, d, A = self.model, self.data, self.A
        for i, p in enumerate(self.world.payloads):
            mass = float(A["payload_mass"][k, i])
            if mass != self._mass[i]:
                m.body_mass[p.body_id] = mass
                m.body_inertia[p.body_id] = p.unit_inertia * mass
                m.geom_rgba[p.geom_id, 3] = self._alpha[i] if mass > 0 else 0.0
                self._mass[i] = mass
        d.qpos[:] = A["qpos"][k]
        d.qvel[:] = 0.0
        d.time = float(A["t"][k])
        mujoco.mj_forward(m, d)
        self.row = k
        return d

    def check(self, k: int | None = None, tol: float = REPLAY_TOL_M) -> float:
        """Largest gap between the replayed and the recorded trunk and foot positions at row ``k``, m."""
        if k is not None and k != self.row:
            self.set_row(k)
        k = self.row
        d, w, A = self.data, self.world, self.A
        gap = float(np.max(np.abs(d.xpos[w.trunk_body_id] - A["base_pos"][k])))
        if "foot_pos" in A:
            gap = max(gap, float(np.max(np.abs(d.site_xpos[w.foot_site_ids] - A["foot_pos"][k]))))
        if gap > tol:
            raise ReplayMismatch(f"replay does not reproduce the recorded state at t={A['t'][k]:.3f} s "
                                 f"(positions differ by {gap:.2e} m); the scenario or robot files changed since "
                                 "the run: re-run it")
        return gap


def build_replay(rec: Recording, scenario=None, roots=()) -> Replay:
    """Rebuild the world of ``rec`` and check it at the first row.

    ``scenario``: the Scenario itself, a path to its file, or None (its ``source`` in result.json).
    """
    from bench.world.build import build_world

    if scenario is None or isinstance(scenario, (str, Path)):
        sc = scenario_for(rec, roots, scenario)
    else:
        sc = scenario
    world = build_world(sc)
    rep = Replay(world, rec.trace)
    rep.scenario = sc
    rep.set_row(0)
    rep.check()
    return rep
