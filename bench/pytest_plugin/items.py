"""Items: one scenario (or one trial scenario with all its trials) run and judged as ``bench run`` judges it."""

from __future__ import annotations

import io

import pytest

from bench.pytest_plugin.collection import register_tag
from bench.pytest_plugin.options import MARKER, display_path, settings_of
from bench.pytest_plugin.runs import execute, execute_plan


class BenchFailure(AssertionError):
    """A scenario that failed its criteria or regressed; the message is the whole report."""


class ScenarioItem(pytest.Item):
    """One scenario run with the configured controller."""

    def __init__(self, *, scenario, **kwargs) -> None:
        super().__init__(**kwargs)
        self.scenario = scenario
        self.add_marker(MARKER)
        for tag in scenario.tags:
            if register_tag(self.config, tag):
                self.add_marker(tag)

    clash: str | None = None   # set at collection when another item has the same results folder

    def runtest(self) -> None:
        if self.clash:
            raise BenchFailure(self.clash)
        settings = settings_of(self.config)
        run = execute(self.config, self, self.scenario, settings.controller, seed=settings.seed,
                      controller_params=settings.controller_params)
        problems = []
        if not run.passed:
            problems.append(run.report())
        if run.regressions:
            problems.append(run.regression_report(display_path(self.config, settings.baseline_path)))
        if problems:
            raise BenchFailure("\n\n".join(problems))

    def repr_failure(self, excinfo, style=None):
        if isinstance(excinfo.value, BenchFailure):
            return str(excinfo.value)
        return super().repr_failure(excinfo, style=style)

    def reportinfo(self):
        line = 0
        try:
            line = max(self.scenario.error("name", "").line - 1, 0)
        except Exception:  # noqa: BLE001 - only a location for the report
            pass
        return self.path, line, f"scenario {self.scenario.id}"


#: How long the verdict item of a trials scenario waits for the next trial result from another xdist
#: worker before it gives up on the missing ones (reset whenever one arrives), s.
TRIAL_WAIT_S = 900.0
#: How often it looks, s.
TRIAL_POLL_S = 0.2


def trial_plan(config, scenario):
    """The plan of a trials scenario (every trial, as ``bench run`` plans it), made once per process."""
    from bench.run.plan import make_plan

    settings = settings_of(config)
    plan = settings.trial_plans.get(scenario.id)
    if plan is None:
        plan = make_plan([scenario], controller=settings.controller, seed=settings.seed,
                         controller_params=settings.controller_params)
        settings.trial_plans[scenario.id] = plan
    return plan


def _sub_plan(plan, episodes):
    """A plan of some episodes of ``plan`` (ids, seeds, fingerprints and ``trial_of`` as they are there)."""
    from dataclasses import replace

    from bench.run.plan import Plan

    return Plan([replace(e, index=i) for i, e in enumerate(episodes)], [], plan.controller, plan.limits,
                dict(plan.controller_params))


class TrialItem(ScenarioItem):
    """One trial of a trials scenario (``tri.yaml::tri[trial=3]``): runs that episode only.

    The trials of a scenario are items of their own so that pytest-xdist spreads them over its
    workers. A trial item fails only when its trial regressed against the baseline; whether the
    trial met its criteria is its scenario's pass rate to judge (the verdict item, :class:`TrialsItem`),
    so the terminal shows it as ``trial passed`` / ``trial failed`` and the item itself passes.
    """

    def __init__(self, *, trial_of, **kwargs) -> None:
        super().__init__(**kwargs)
        self.trial_of = trial_of   # the trials scenario (a Scenario)

    def runtest(self) -> None:
        if self.clash:
            raise BenchFailure(self.clash)
        settings = settings_of(self.config)
        plan = trial_plan(self.config, self.trial_of)
        episode = next(e for e in plan.episodes if e.id == self.scenario.id)
        (run,) = execute_plan(self.config, self, _sub_plan(plan, [episode]))
        settings.trial_results[episode.id] = run
        self.user_properties.append(("bench.trial_status", run.status))
        if run.regressions:
            raise BenchFailure(run.regression_report(display_path(self.config, settings.baseline_path)))


class TrialsItem(ScenarioItem):
    """The verdict of a scenario with ``trials:`` / ``randomize:``: one verdict on the pass rate.

    The trials are exactly those of ``bench run`` (the same plan: ids, seeds and draws). Each selected
    trial is a :class:`TrialItem` of its own (under pytest-xdist they spread over the workers); this
    item is put after every other item, gathers their results (from this process, or from the results
    folder when another worker ran them), runs itself any trial that was deselected, and fails when
    the pass rate's 95 % Wilson lower bound is under ``pass_rate_min`` (every trial must pass without it).
    """

    def runtest(self) -> None:
        from bench.execute import trials as trials_mod

        if self.clash:
            raise BenchFailure(self.clash)
        settings = settings_of(self.config)
        plan = trial_plan(self.config, self.scenario)
        by_id: dict[str, object] = {}
        elsewhere, here = [], []
        for e in plan.episodes:
            run = settings.trial_results.get(e.id)
            if run is not None:
                by_id[e.id] = run
            elif e.id in settings.selected_trials:
                elsewhere.append(e)
            else:
                here.append(e)
        if here:   # deselected trial items (-k, -m, --lf): the verdict needs every trial
            for e, run in zip(here, execute_plan(self.config, self, _sub_plan(plan, here))):
                by_id[e.id] = run
        if elsewhere:
            by_id.update(_wait_for_results(settings, elsewhere))
        lost = [e.id for e in plan.episodes if e.id not in by_id]
        if lost:
            raise BenchFailure(f"{self.scenario.id}: no result from the trial items {', '.join(lost)} "
                               f"(no new result for {TRIAL_WAIT_S:g} s: did a worker crash?)")
        runs = [by_id[e.id] for e in plan.episodes]
        (summary,) = trials_mod.group_summaries(plan.groups, [r.result for r in runs])
        _attach_trials(self, summary)
        if summary["verdict"] != "passed":
            raise BenchFailure(_trials_report(summary, runs))


def _wait_for_results(settings, episodes) -> dict:
    """The results other workers write for ``episodes`` in this session (same fingerprint, written after the
    session started), as :class:`BenchRun` objects; returns what arrived before the wait ran out."""
    import json
    import time

    from bench.pytest_plugin.runs import BenchRun

    got: dict = {}
    waiting = {e.id: e for e in episodes}
    last_news = time.monotonic()
    since_ns = settings.session_start_ns - 2_000_000_000   # file systems with coarse time stamps
    while waiting and time.monotonic() - last_news < TRIAL_WAIT_S:
        for eid, e in list(waiting.items()):
            path = settings.out / e.slug / "result.json"
            try:
                if path.stat().st_mtime_ns < since_ns:
                    continue
                result = json.loads(path.read_text(encoding="utf-8"))
            except (OSError, ValueError):
                continue   # not there yet, or being replaced
            if result.get("fingerprint") != e.fingerprint.digest or result.get("scenario") != eid:
                continue
            trace = path.parent / "trace.npz"
            got[eid] = BenchRun(result, path, trace if trace.is_file() else None)
            del waiting[eid]
            last_news = time.monotonic()
        if waiting:
            time.sleep(TRIAL_POLL_S)
    return got


def _attach_trials(node, summary: dict) -> None:
    """The trial verdict as JUnit properties; ``bench.trials`` (JSON) also feeds summary.json."""
    import json

    lo, hi = summary["interval"]
    props = node.user_properties
    props.append(("bench.trials", json.dumps(summary, sort_keys=True)))
    props.append(("bench.trials.verdict", summary["verdict"]))
    props.append(("bench.trials.passed", f"{summary['passed']}/{summary['trials']}"))
    props.append(("bench.trials.rate", summary["rate"]))
    props.append(("bench.trials.interval_low", lo))
    props.append(("bench.trials.interval_high", hi))
    props.append(("bench.trials.required", "all" if summary["required"] is None else summary["required"]))
    if summary["failing"]:
        props.append(("bench.trials.failing", ", ".join(summary["failing"])))


#: Failing trials whose whole report a failed trials item shows (the rest are listed by id).
TRIAL_REPORTS_SHOWN = 3


def _trials_report(summary: dict, runs: list) -> str:
    from bench.report.tables import print_trials

    buf = io.StringIO()
    print_trials([summary], file=buf)
    head = f"{summary['scenario']}: {summary['passed']} of {summary['trials']} trials passed; "
    if summary["required"] is None or summary["required"] >= 1.0:
        head += "every trial must pass"
    else:
        head += (f"the lower bound of the 95 % Wilson interval of the pass rate, {summary['interval'][0]:.2f}, "
                 f"is under the required {summary['required']:g}")
    lines = [head, buf.getvalue().rstrip()]
    failing = [r for r in runs if not r.passed]
    for run in failing[:TRIAL_REPORTS_SHOWN]:
        lines.append("")
        lines.append(run.report())
    if len(failing) > TRIAL_REPORTS_SHOWN:
        lines.append("")
        lines.append(f"... and {len(failing) - TRIAL_REPORTS_SHOWN} more failing trials: "
                     + ", ".join(r.record.scenario for r in failing[TRIAL_REPORTS_SHOWN:]))
    first = failing[0].record.scenario if failing else f"{summary['scenario']}[trial=0]"
    lines.append("")
    lines.append(f"re-run one trial alone: bench run {summary['source']} --only '{first}'")
    return "\n".join(lines)
