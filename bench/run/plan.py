"""Plan: which episodes a run holds, with which controller, seeds and verdict fingerprints.

A plan is made from checked scenarios: trial scenarios are expanded into their
trials (the same ids, seeds and draws whichever front end asks), ``--only``
keeps a selection, and the controller spec is resolved once, before anything
runs: a name that resolves to nothing is invalid input, reported with the names
that exist. Each planned episode carries its verdict fingerprint, which
``--resume`` compares with the fingerprint recorded in a result.
"""

from __future__ import annotations

import difflib
from dataclasses import dataclass, field
from pathlib import Path

from bench.run.errors import InvalidInput

#: The controller a run uses when none is named (``bench run``, ``bench limit``, the pytest plugin).
DEFAULT_CONTROLLER = "force-qp-l1"


@dataclass
class PlannedEpisode:
    index: int
    scenario: object
    seed: int | None              # the job's seed override (--seed), None: the scenario's own
    trial_of: str | None = None   # the id of the trial scenario this episode is a trial of
    fingerprint: object = None    # bench.run.fingerprint.Fingerprint

    @property
    def id(self) -> str:
        return self.scenario.id

    @property
    def slug(self) -> str:
        return self.scenario.slug

    @property
    def effective_seed(self) -> int:
        return int(self.scenario.seed if self.seed is None else self.seed)


@dataclass
class Plan:
    episodes: list[PlannedEpisode]
    groups: list = field(default_factory=list)   # bench.execute.trials.TrialGroup
    controller: object = "force-qp-l1"             # a spec string, a factory or a controller object
    limits: object = None                          # bench.sim.episode.EpisodeLimits
    controller_params: dict = field(default_factory=dict)   # --controller-param keywords for the factory

    def __len__(self) -> int:
        return len(self.episodes)

    def jobs(self) -> list:
        from bench.execute.job import Job
        from bench.sim.episode import EpisodeLimits

        limits = self.limits if self.limits is not None else EpisodeLimits()
        return [Job(e.scenario, self.controller, e.seed, limits, dict(self.controller_params))
                for e in self.episodes]

    @property
    def controller_name(self) -> str | None:
        return self.controller if isinstance(self.controller, str) else None


def controller_spec(controller) -> str:
    """The controller as a string for the fingerprint: the spec itself, or what an object is."""
    if isinstance(controller, str):
        return controller
    is_object = hasattr(controller, "step") and hasattr(controller, "reset") and not isinstance(controller, type)
    target = type(controller) if is_object else controller
    return f"object:{getattr(target, '__module__', '?')}.{getattr(target, '__qualname__', repr(target))}"


def check_controller(spec) -> None:
    """Raise :class:`InvalidInput` unless ``spec`` resolves (objects and factories always do).

    The message lists every name that exists and, for a near miss, the closest ones.
    """
    if not isinstance(spec, str):
        return
    from bench.controllers import registry

    try:
        registry.resolve(spec)
    except registry.ControllerNotFound as exc:
        raise InvalidInput(_unknown_controller_message(spec, str(exc))) from None
    except Exception as exc:  # noqa: BLE001 - a spec that cannot even be looked at is invalid input too
        raise InvalidInput(f"controller {spec!r} cannot be resolved: {type(exc).__name__}: {exc}") from None


def check_controller_params(spec, params: dict | None) -> None:
    """Raise :class:`InvalidInput` when ``params`` has a key the controller's factory does not take."""
    if not params:
        return
    from bench.controllers import registry
    from bench.controllers.params import ControllerParamError, check_params

    try:
        if isinstance(spec, str):
            registry.check_params(spec, params)
        elif not (hasattr(spec, "step") and hasattr(spec, "reset")):
            check_params(spec, params, getattr(spec, "__name__", "custom"))
        else:
            raise ControllerParamError("controller parameters need a controller name or a factory, "
                                       "not an already made controller")
    except ControllerParamError as exc:
        raise InvalidInput(str(exc)) from None


def _unknown_controller_message(spec: str, registry_text: str) -> str:
    from bench.controllers import registry

    try:
        names = [c.name for c in registry.available()]
    except Exception:  # noqa: BLE001 - the registry's own message then stands alone
        return registry_text
    if not registry_text.startswith("unknown controller"):
        return registry_text      # a module or entry point that cannot be loaded: its own reason
    prefix, bare = ("sealed:", spec[len("sealed:"):]) if spec.startswith("sealed:") else ("", spec)
    close = difflib.get_close_matches(bare.replace("_", "-"), names, n=3, cutoff=0.6)
    text = f"unknown controller {spec!r}"
    if close:
        text += f"; did you mean {', '.join(repr(prefix + c) for c in close)}?"
    text += (f"\ncontrollers that exist: {', '.join(names) or 'none'}"
             "\nor give package.module:attribute, exec:PROGRAM ARGS for an external program, or sealed:NAME"
             " for a Python controller in a child process (bench list controllers describes each)")
    return text


def make_plan(scenarios: list, *, controller, limits=None, seed: int | None = None, only=(),
              where: str = "", expand: bool = True, controller_params: dict | None = None) -> Plan:
    """Plan ``scenarios``: resolve the controller, expand trials, select ``only``, fingerprint each episode.

    ``expand=False`` takes the scenarios as the episodes (a caller that made its own trials).
    Raises :class:`InvalidInput` (nothing has run).
    """
    from bench.execute import trials as trials_mod

    check_controller(controller)
    check_controller_params(controller, controller_params)
    if expand:
        scs, seeds, groups = trials_mod.plan(list(scenarios), seed)
    else:
        scs, seeds, groups = list(scenarios), [seed] * len(scenarios), []
    if only:
        all_ids = [s.id for s in scs]
        scs, seeds, groups, unknown = trials_mod.select(scs, seeds, groups, list(only))
        if unknown:
            raise InvalidInput(f"--only: no scenario or trial with id {', '.join(map(repr, unknown))}"
                               + (f" in {where}" if where else "") + _close_ids(unknown, all_ids))
    trial_of = {i: g.scenario for g in groups for i in g.indices}
    plan = Plan([PlannedEpisode(i, sc, sd, trial_of.get(i)) for i, (sc, sd) in enumerate(zip(scs, seeds))],
                groups, controller, limits, dict(controller_params or {}))
    fingerprint_plan(plan)
    return plan


def fingerprint_plan(plan: Plan) -> None:
    from bench.run.fingerprint import verdict_fingerprint

    spec = controller_spec(plan.controller)
    for e in plan.episodes:
        e.fingerprint = verdict_fingerprint(e.scenario, spec, plan.limits, plan.controller_params)


def _close_ids(unknown: list[str], ids: list[str]) -> str:
    close = difflib.get_close_matches(unknown[0], ids, n=3, cutoff=0.5)
    note = " (a trial's id is the scenario id plus [trial=K], K from 0)" if any("[trial=" in i for i in ids) else ""
    if close:
        return f"; did you mean {', '.join(close)}?{note}"
    return f"; ids here: {', '.join(ids[:5])}{', ...' if len(ids) > 5 else ''}{note}"


def check_out_folders(plan: Plan, out: Path) -> None:
    """Every episode's results folder must be a plain folder inside ``out`` (or not exist yet).

    A results folder that is a symbolic link would send this run's files somewhere else (and a
    later ``--resume`` would trust whatever is there): it is refused before anything runs.
    """
    from bench.report.results import ResultFolderError, scenario_dir

    bad = []
    for e in plan.episodes:
        try:
            scenario_dir(Path(out), e.slug)
        except ResultFolderError as exc:
            bad.append(str(exc))
    if bad:
        shown = "; ".join(bad[:3]) + (f"; and {len(bad) - 3} more" if len(bad) > 3 else "")
        raise InvalidInput(f"results folder cannot be written: {shown}")


# --------------------------------------------------------------------------- resume


@dataclass
class Resumed:
    results: dict[int, dict]           # episode index -> reused result.json mapping
    todo: list[int]                    # episode indices still to run
    why: dict[int, str]                # episode index -> why it is run again (absent: no result yet)


def resume(plan: Plan, out: Path) -> Resumed:
    """Reuse the complete results in ``out`` whose verdict fingerprint matches the plan's; the rest run."""
    from bench.report.results import complete_result, remove_temp_files
    from bench.run.fingerprint import stale_reason

    out = Path(out)
    remove_temp_files(out)
    results: dict[int, dict] = {}
    todo: list[int] = []
    why: dict[int, str] = {}
    for e in plan.episodes:
        remove_temp_files(out / e.slug)
        result, reason = complete_result(out, e.slug, scenario_id=e.id, seed=e.effective_seed,
                                         controller=plan.controller_name,
                                         content_hash=getattr(e.scenario, "content_hash", None) or None)
        if result is not None and e.fingerprint is not None:
            reason = stale_reason(result, e.fingerprint)
            if reason:
                result = None
        if result is None:
            todo.append(e.index)
            if reason != "no result.json":
                why[e.index] = reason
        else:
            results[e.index] = result
    return Resumed(results, todo, why)


def resume_lines(plan: Plan, resumed: Resumed, out: Path, shown: int = 8) -> list[str]:
    """What ``--resume`` says: how many results are reused, and why each other one is run again."""
    n, todo, why = len(plan), resumed.todo, resumed.why
    head = f"resume: {n - len(todo)} of {n} results complete in {out}/, running {len(todo)}"
    if why:
        head += f" ({len(why)} of them incomplete or for other settings)"
    lines = [head]
    items = sorted(why.items())
    for i, reason in items[:shown]:
        lines.append(f"  {plan.episodes[i].id}: run again: {reason}")
    if len(items) > shown:
        lines.append(f"  ... and {len(items) - shown} more run again")
    return lines
