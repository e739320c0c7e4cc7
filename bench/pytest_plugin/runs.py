"""Running scenarios for the plugin through the shared run path, and what a run gives back (:class:`BenchRun`).

Items and the ``bench_run`` fixture plan their episodes with :func:`bench.run.plan.make_plan`
and execute them with :func:`bench.run.execute.execute` on the session's executor, with
the same sinks as ``bench run`` (result files, history, baseline comparison); this module
adds only what pytest needs: JUnit properties and review videos.
"""

from __future__ import annotations

import io
from dataclasses import dataclass, field
from pathlib import Path

from bench.pytest_plugin.options import display_path, settings_of
from bench.report.record import RunRecord


@dataclass
class BenchRun:
    """What a scenario run gave: the result (result.json as a dict), its files and the baseline comparison."""

    result: dict
    result_path: Path
    trace_path: Path | None
    video_paths: list = field(default_factory=list)
    baseline_rows: list = field(default_factory=list)
    trace: object = None    # bench.sim.trace.Trace, or None when the episode never started
    shown_path: object = str

    @property
    def record(self) -> RunRecord:
        return RunRecord.from_json(self.result)

    @property
    def status(self) -> str:
        return self.record.status

    @property
    def passed(self) -> bool:
        return self.record.passed

    @property
    def reason(self) -> str | None:
        return self.record.reason

    @property
    def metrics(self) -> dict:
        return dict(self.record.metrics)

    @property
    def criteria(self) -> dict[str, dict]:
        return {c.name: c.to_json() for c in self.record.criteria}

    @property
    def regressions(self) -> list:
        return [r for r in self.baseline_rows if r.verdict == "regressed"]

    def report(self) -> str:
        """The compact failure report: verdict, criteria table (value, limit, first violation), file paths."""
        from bench.report.tables import CRITERIA_HEADER, criteria_rows, print_table

        r = self.record
        lines = [f"{r.scenario}: {r.status}" + (f": {r.reason}" if r.reason else "")]
        lines.append(f"controller {r.controller}, seed {r.seed}, scenario file {r.source}")
        if r.criteria:
            buf = io.StringIO()
            print_table(criteria_rows(r), CRITERIA_HEADER, file=buf)
            lines.append(buf.getvalue().rstrip())
        if self.trace_path is not None:
            lines.append(f"trace:  {self.shown_path(self.trace_path)}")
        lines.append(f"result: {self.shown_path(self.result_path)}")
        for v in self.video_paths:
            lines.append(f"video:  {self.shown_path(v)}")
        return "\n".join(lines)

    def regression_report(self, baseline_path) -> str:
        from bench.report.baseline import TABLE_HEADER, table_rows
        from bench.report.tables import print_table

        buf = io.StringIO()
        print_table(table_rows(self.regressions), TABLE_HEADER, file=buf)
        own = "passed its criteria, but " if self.passed else ""
        text = f"{self.record.scenario}: {own}regressed against the baseline {baseline_path}\n" + buf.getvalue()
        if self.passed:   # the failure report with the paths is not shown otherwise
            if self.trace_path is not None:
                text += f"trace:  {self.shown_path(self.trace_path)}\n"
            text += f"result: {self.shown_path(self.result_path)}\n"
        return text.rstrip()

    def assert_passed(self) -> None:
        """Raise AssertionError with :meth:`report` unless the scenario passed."""
        if not self.passed:
            raise AssertionError(self.report())

    def __repr__(self) -> str:
        return f"BenchRun({self.result['scenario']!r}, status={self.status!r})"


def _history(config):
    """The session's history sink (one row per episode, as it finishes), or None."""
    settings = settings_of(config)
    if settings.history_path is None:
        return None
    if settings.history is None:
        from bench.run.sinks import HistorySink

        settings.history = HistorySink(settings.history_path, source="pytest", cwd=config.invocation_params.dir,
                                       run_uid=settings.run_uid, warn=settings.warnings.append)
    return settings.history


def _executor(config, controller):
    from bench.run.execute import open_executor

    if not isinstance(controller, str):
        return open_executor(1, None, controller)
    settings = settings_of(config)
    if settings.executor is None:
        settings.executor = open_executor(1, None, controller)
    return settings.executor


def _render_video(settings, result_dir: Path, passed: bool, scenario) -> list[Path]:
    """Render the review video with ``bench.render.video.render_result`` when asked; never a verdict."""
    if settings.video == "none" or (settings.video == "failed" and passed) or settings.video_off:
        return []
    try:
        from bench.render.gl import RenderUnavailable
        from bench.render.video import render_result
    except Exception as exc:  # noqa: BLE001 - rendering is optional
        settings.video_off = True
        settings.warnings.append(f"videos: none made: {type(exc).__name__}: {exc}")
        return []
    try:
        made = render_result(result_dir, settings.video_dir, scenario=scenario)
    except RenderUnavailable as exc:
        settings.video_off = True
        settings.warnings.append(f"videos: none made: {exc}")
        return []
    except Exception as exc:  # noqa: BLE001 - a video is a convenience, never a verdict
        settings.warnings.append(f"video for {result_dir.name} not made: {type(exc).__name__}: {exc}")
        return []
    return [Path(m) for m in made]


class _Collect:
    """Keeps every outcome of the plan (the trace object goes to the ``BenchRun``)."""

    def __init__(self) -> None:
        self.outcomes: dict[int, object] = {}

    def on_result(self, episode, outcome) -> None:
        self.outcomes[episode.index] = outcome


def execute_plan(config, node, plan) -> list[BenchRun]:
    """Run every episode of ``plan``; write files, history and JUnit properties; compare with the baseline."""
    from bench.run import execute as run_exec
    from bench.run import sinks as run_sinks

    settings = settings_of(config)
    files = run_sinks.ResultFiles(settings.out)
    collect = _Collect()
    sinks: list = [files]
    baseline = run_sinks.BaselineSink(settings.baseline) if settings.baseline is not None else None
    if baseline is not None:
        sinks.append(baseline)
    history = _history(config)
    if history is not None:
        sinks.append(history)
    sinks.append(collect)
    executor = _executor(config, plan.controller)
    try:
        run_exec.execute(plan, [e.index for e in plan.episodes], executor, sinks)
    finally:
        if executor is not settings.executor:
            executor.close()
    runs = []
    for e in plan.episodes:
        outcome = collect.outcomes[e.index]
        result = outcome.result
        result_path = files.paths.get(e.index, settings.out / e.slug / "result.json")
        trace_path = result_path.parent / "trace.npz" if outcome.trace is not None else None
        video = _render_video(settings, result_path.parent, RunRecord.from_json(result).passed, e.scenario)
        run = BenchRun(result, result_path, trace_path, video, trace=outcome.trace,
                       shown_path=lambda p: display_path(config, p))
        if baseline is not None:
            run.baseline_rows = baseline.rows.get(e.index, [])
        attach(node, settings, run)
        runs.append(run)
    return runs


def execute(config, node, scenario, controller, *, seed: int | None = None,
            controller_params: dict | None = None) -> BenchRun:
    """Run one scenario (no trial expansion) with ``controller``; see :func:`execute_plan`."""
    from bench.run.plan import make_plan

    plan = make_plan([scenario], controller=controller, seed=seed, expand=False, controller_params=controller_params)
    (run,) = execute_plan(config, node, plan)
    return run


def _baseline_word(run: BenchRun) -> str:
    verdicts = {r.verdict for r in run.baseline_rows}
    for word in ("regressed", "new", "improved", "changed"):
        if word in verdicts:
            return word
    return "same"


def attach(node, settings, run: BenchRun) -> None:
    """JUnit XML properties (``record_property``), in a fixed order; ``bench.scenario`` opens each run."""
    r = run.record
    props = node.user_properties
    shown = run.shown_path
    props.append(("bench.scenario", r.scenario))
    props.append(("bench.status", r.status))
    props.append(("bench.controller", str(r.controller)))
    props.append(("bench.seed", r.seed))
    props.append(("bench.content_hash", r.content_hash))
    if r.reason:
        props.append(("bench.reason", r.reason))
    props.append(("bench.result", shown(run.result_path)))
    if run.trace_path is not None:
        props.append(("bench.trace", shown(run.trace_path)))
    for v in run.video_paths:
        props.append(("bench.video", shown(v)))
    if settings.baseline is not None:
        props.append(("bench.baseline", _baseline_word(run)))
    for c in r.criteria:
        props.append((f"bench.criterion.{c.name}", "passed" if c.passed else "failed"))
    for name, value in r.metrics.items():
        props.append((f"bench.metric.{name}", value))
