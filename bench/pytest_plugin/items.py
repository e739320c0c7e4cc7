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


class TrialsItem(ScenarioItem):
    """A scenario with ``trials:`` / ``randomize:``: runs every trial, one verdict on the pass rate.

    The trials are exactly those of ``bench run`` (the same plan: ids, seeds and draws), run one
    after another in this item, so under pytest-xdist a scenario's trials stay on one worker. Each
    trial writes its own results folder and history row; the item fails when the pass rate's 95 %
    Wilson lower bound is under ``pass_rate_min`` (every trial must pass without it), or when any
    trial regressed against the baseline.
    """

    def runtest(self) -> None:
        from bench.execute import trials as trials_mod
        from bench.run.plan import make_plan

        if self.clash:
            raise BenchFailure(self.clash)
        settings = settings_of(self.config)
        plan = make_plan([self.scenario], controller=settings.controller, seed=settings.seed,
                         controller_params=settings.controller_params)
        runs = execute_plan(self.config, self, plan)
        (summary,) = trials_mod.group_summaries(plan.groups, [r.result for r in runs])
        _attach_trials(self, summary)
        problems = []
        if summary["verdict"] != "passed":
            problems.append(_trials_report(summary, runs))
        for run in runs:
            if run.regressions:
                problems.append(run.regression_report(display_path(self.config, settings.baseline_path)))
        if problems:
            raise BenchFailure("\n\n".join(problems))


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
