"""pytest plugin: scenario files as test items, a ``bench_run`` fixture, baselines and history.

Registered through the ``pytest11`` entry point, so installing quadruped-bench
is enough. It does nothing until asked: scenario files are collected only from
the folders given by ``--bench-scenarios`` / ini ``bench_scenarios`` (or files
named on the command line), and only those matching ``bench_glob``. Every
matrix variant is an item of its own (``stand.yaml::stand[mass=6]``), and a
scenario with ``trials:`` is one item that runs every trial and is judged on its
pass rate as ``bench run`` judges it; scenario tags are markers (``-m payload``). An item runs its scenario with the
configured controller, writes ``<bench_out>/<scenario>/result.json`` and
``trace.npz``, attaches the metrics with ``record_property`` (so they land in
JUnit XML), appends to the history database, fails with a table of criteria
when the scenario fails, and, with ``--bench-baseline``, also when it regressed
against the baseline. Under pytest-xdist each worker runs whole scenarios, so
results do not depend on ``-n``; the controller process writes ``summary.json``.

Options (command line, or ``[tool.pytest.ini_options]`` key in brackets):
``--bench-scenarios PATH`` (``bench_scenarios``, repeatable), ``--bench-controller NAME``
(``bench_controller``), ``--bench-out DIR`` (``bench_out``), ``--bench-baseline FILE``
(``bench_baseline``), ``--bench-history FILE`` / ``--bench-no-history`` (``bench_history``),
``--bench-video none|failed|all`` (``bench_video``), ``--bench-video-dir DIR`` (``bench_video_dir``), glob (``bench_glob``, default ``*.yaml *.yml``).
Paths in the ini file are relative to it; on the command line, to the current folder.
"""

from __future__ import annotations

import fnmatch
import io
import os
import re
from dataclasses import dataclass, field
from pathlib import Path

import pytest

MARKER = "bench"
DEFAULT_GLOBS = ["*.yaml", "*.yml"]
VIDEO_MODES = ("none", "failed", "all")
_TAG_OK = re.compile(r"^[A-Za-z][A-Za-z0-9_.-]*$")


# --------------------------------------------------------------------------- options and settings


def pytest_addoption(parser) -> None:
    g = parser.getgroup("bench", "quadruped-bench scenarios")
    g.addoption("--bench-scenarios", action="append", default=None, metavar="PATH",
                help="scenario file or folder to collect as test items (repeatable; ini: bench_scenarios)")
    g.addoption("--bench-controller", default=None, metavar="NAME",
                help="controller to run the scenarios with: registered name, package.module:attribute or "
                     "'exec:program args' (ini: bench_controller)")
    g.addoption("--bench-out", default=None, metavar="DIR",
                help="results folder (default bench-results/ in the rootdir; ini: bench_out)")
    g.addoption("--bench-baseline", default=None, metavar="FILE",
                help="fail items that regressed against this baseline.json (ini: bench_baseline)")
    g.addoption("--bench-history", default=None, metavar="FILE",
                help="history database (default <bench-out>/history.sqlite; ini: bench_history)")
    g.addoption("--bench-no-history", action="store_true", default=False, help="do not record history")
    g.addoption("--bench-video", default=None, choices=VIDEO_MODES,
                help="render review videos for no scenario, failed ones or all (ini: bench_video)")
    g.addoption("--bench-video-dir", default=None, metavar="DIR",
                help="where review videos go (default videos/ in the rootdir; ini: bench_video_dir)")
    parser.addini("bench_scenarios", "scenario files or folders to collect (relative to this file)",
                  type="paths", default=[])
    parser.addini("bench_controller", "controller to run scenario items with", default="")
    parser.addini("bench_out", "results folder (relative to this file)", default="")
    parser.addini("bench_baseline", "baseline.json that scenario items must not regress against", default="")
    parser.addini("bench_history", "history database, or 'none' (relative to this file)", default="")
    parser.addini("bench_video", "review videos: none, failed or all", default="none")
    parser.addini("bench_video_dir", "where review videos go (default videos/ in the rootdir)", default="")
    parser.addini("bench_glob", "file name patterns of scenario files", type="args", default=list(DEFAULT_GLOBS))


@dataclass
class Settings:
    scenario_paths: list[Path]
    globs: list[str]
    controller: str
    out: Path
    baseline_path: Path | None
    history_path: Path | None
    video: str
    video_dir: Path
    explicit_files: set[Path] = field(default_factory=set)
    baseline: dict | None = None
    run_uid: str = ""
    git: object = ...          # looked up on first use
    history: object = None     # bench.report.history.History, opened on first use
    tags: set[str] = field(default_factory=set)
    order: dict[str, int] = field(default_factory=dict)
    warnings: list[str] = field(default_factory=list)
    video_off: bool = False

    @property
    def active(self) -> bool:
        return bool(self.scenario_paths or self.explicit_files)


SETTINGS = pytest.StashKey[Settings]()


def _settings(config) -> Settings:
    return config.stash[SETTINGS]


def _ini_base(config) -> Path:
    return Path(config.inipath).parent if config.inipath else Path(config.rootpath)


def _ini_path(config, name: str) -> Path | None:
    value = (config.getini(name) or "").strip()
    return (_ini_base(config) / value) if value else None


def _make_settings(config) -> Settings:
    from bench.cli.run import DEFAULT_CONTROLLER

    cwd = Path(config.invocation_params.dir)
    cli_paths = config.getoption("bench_scenarios")
    if cli_paths:
        scenario_paths = [(cwd / p).resolve() for p in cli_paths]
    else:
        scenario_paths = [Path(p).resolve() for p in config.getini("bench_scenarios")]
    for p in scenario_paths:
        if not p.exists():
            src = "--bench-scenarios" if cli_paths else f"bench_scenarios in {config.inipath}"
            raise pytest.UsageError(f"{src}: {p}: no such file or folder")

    def opt(cli: str, ini: str) -> Path | None:
        v = config.getoption(cli)
        return (cwd / v) if v else _ini_path(config, ini)

    out = opt("bench_out", "bench_out") or Path(config.rootpath) / "bench-results"
    history: Path | None
    ini_hist = (config.getini("bench_history") or "").strip()
    if config.getoption("bench_no_history") or ini_hist.lower() == "none":
        history = None
    else:
        from bench.report.history import default_path

        history = opt("bench_history", "bench_history") or default_path(out)
    video = config.getoption("bench_video") or (config.getini("bench_video") or "none").strip()
    if video not in VIDEO_MODES:
        raise pytest.UsageError(f"bench_video in {config.inipath}: {video!r} is not one of {', '.join(VIDEO_MODES)}")
    globs = list(config.getini("bench_glob")) or list(DEFAULT_GLOBS)
    settings = Settings(
        scenario_paths=scenario_paths,
        globs=globs,
        controller=config.getoption("bench_controller") or (config.getini("bench_controller") or "").strip()
        or DEFAULT_CONTROLLER,
        out=out,
        baseline_path=opt("bench_baseline", "bench_baseline"),
        history_path=history,
        video=video,
        video_dir=opt("bench_video_dir", "bench_video_dir") or Path(config.rootpath) / "videos",
    )
    # Scenario files named on the command line are collected even outside the configured folders.
    if config.args_source == pytest.Config.ArgsSource.ARGS:
        for a in config.args:
            p = (cwd / a.split("::")[0]).resolve()
            if p.is_file() and _matches(settings, p):
                settings.explicit_files.add(p)
    return settings


def _matches(settings: Settings, path: Path) -> bool:
    return any(fnmatch.fnmatch(path.name, g) for g in settings.globs)


def pytest_configure(config) -> None:
    config.addinivalue_line("markers", f"{MARKER}: a quadruped-bench scenario item")
    settings = _make_settings(config)
    config.stash[SETTINGS] = settings
    config.pluginmanager.register(_SessionReporter(config), "bench-session-reporter")
    workerinput = getattr(config, "workerinput", None)
    from bench.report.history import new_run_uid

    settings.run_uid = (workerinput or {}).get("bench_run_uid") or new_run_uid()
    if settings.baseline_path is not None:
        from bench.report.baseline import BaselineError, load_baseline

        try:
            settings.baseline = load_baseline(settings.baseline_path)
        except BaselineError as exc:
            raise pytest.UsageError(f"--bench-baseline: {exc}") from None
    # Configured folders outside what pytest is about to walk are added to its arguments, unless
    # the user named paths on the command line (then only --bench-scenarios adds).
    explicit_args = config.args_source == pytest.Config.ArgsSource.ARGS
    if settings.scenario_paths and (not explicit_args or config.getoption("bench_scenarios")):
        cwd = Path(config.invocation_params.dir)
        walked = [(cwd / a.split("::")[0]).resolve() for a in config.args]
        for p in settings.scenario_paths:
            if not any(p == w or w in p.parents for w in walked):
                config.args.append(str(p))


@pytest.hookimpl(optionalhook=True)
def pytest_configure_node(node) -> None:
    """pytest-xdist: every worker records its results under the session's run uid."""
    node.workerinput["bench_run_uid"] = _settings(node.config).run_uid


@pytest.hookimpl(optionalhook=True)
def pytest_xdist_node_collection_finished(node, ids) -> None:
    """pytest-xdist: the collection order, so summary.json lists results as a serial run would."""
    order = _settings(node.config).order
    if not order:
        order.update({nid: i for i, nid in enumerate(ids)})


# --------------------------------------------------------------------------- collection


def _under_scenario_folder(settings: Settings, path: Path) -> bool:
    for root in settings.scenario_paths:
        if path == root:
            return True
        if root.is_dir() and root in path.parents:
            rel = path.relative_to(root).parts
            # As the loader searches folders: `_base.yaml` partials and hidden files are skipped.
            return not any(part.startswith(("_", ".")) for part in rel)
    return False


def pytest_collect_file(file_path: Path, parent):
    settings = parent.config.stash.get(SETTINGS, None)
    if settings is None or not settings.active or not _matches(settings, file_path):
        return None
    p = file_path.resolve()
    if p in settings.explicit_files or _under_scenario_folder(settings, p):
        return ScenarioFile.from_parent(parent, path=file_path)
    return None


def _display_path(config, path: Path) -> str:
    """A path relative to the folder pytest was started in when it is inside it, else absolute."""
    path = Path(path)
    base = Path(config.invocation_params.dir)
    try:
        return str(path.resolve().relative_to(base.resolve()))
    except ValueError:
        return str(path)


class ScenarioFile(pytest.File):
    """A scenario YAML file: one item per scenario (matrix variant) it defines."""

    def collect(self):
        from bench.errors import ScenarioError, ScenarioErrors
        from bench.scenario import load_file

        settings = _settings(self.config)
        roots = [p for p in settings.scenario_paths if p.is_dir()]
        try:
            scenarios = load_file(_display_path(self.config, self.path), roots)
        except ScenarioErrors as exc:
            raise self.CollectError("\n".join(str(e) for e in exc.errors)) from None
        except ScenarioError as exc:
            raise self.CollectError(str(exc)) from None
        from bench.execute.trials import is_trial_scenario

        for sc in scenarios:
            cls = TrialsItem if is_trial_scenario(sc) else ScenarioItem
            yield cls.from_parent(self, name=sc.id, scenario=sc)


def _register_tag(config, tag: str) -> bool:
    if not _TAG_OK.match(tag):
        return False
    settings = _settings(config)
    if tag not in settings.tags:
        settings.tags.add(tag)
        known = {line.split(":")[0].split("(")[0].strip() for line in config.getini("markers")}
        if tag not in known:
            config.addinivalue_line("markers", f"{tag}: quadruped-bench scenario tag")
    return True


class ScenarioItem(pytest.Item):
    """One scenario run with the configured controller."""

    def __init__(self, *, scenario, **kwargs) -> None:
        super().__init__(**kwargs)
        self.scenario = scenario
        self.add_marker(MARKER)
        for tag in scenario.tags:
            if _register_tag(self.config, tag):
                self.add_marker(tag)

    clash: str | None = None   # set at collection when another item has the same results folder

    def runtest(self) -> None:
        if self.clash:
            raise BenchFailure(self.clash)
        settings = _settings(self.config)
        run = execute(self.config, self, self.scenario, settings.controller)
        problems = []
        if not run.passed:
            problems.append(run.report())
        if run.regressions:
            problems.append(run.regression_report(_display_path(self.config, settings.baseline_path)))
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

    The trials are exactly those of ``bench run`` (same ids, seeds and draws, from
    ``bench.execute.trials.plan``), run one after another in this item, so under pytest-xdist a
    scenario's trials stay on one worker. Each trial writes its own results folder and history
    row; the item fails when the pass rate's 95 % Wilson lower bound is under ``pass_rate_min``
    (every trial must pass without it), or when any trial regressed against the baseline.
    """

    def runtest(self) -> None:
        from bench.execute import trials as trials_mod

        if self.clash:
            raise BenchFailure(self.clash)
        settings = _settings(self.config)
        episodes, _, groups = trials_mod.plan([self.scenario])
        runs = [execute(self.config, self, ep, settings.controller, trial_of=self.scenario.id) for ep in episodes]
        (summary,) = trials_mod.group_summaries(groups, [r.result for r in runs])
        _attach_trials(self, summary)
        problems = []
        if summary["verdict"] != "passed":
            problems.append(_trials_report(self.config, summary, runs))
        for run in runs:
            if run.regressions:
                problems.append(run.regression_report(_display_path(self.config, settings.baseline_path)))
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


def _trials_report(config, summary: dict, runs: list) -> str:
    from bench.cli.run import print_trials

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
                     + ", ".join(r.result["scenario"] for r in failing[TRIAL_REPORTS_SHOWN:]))
    first = failing[0].result["scenario"] if failing else f"{summary['scenario']}[trial=0]"
    lines.append("")
    lines.append(f"re-run one trial alone: bench run {summary['source']} --only '{first}'")
    return "\n".join(lines)


class BenchFailure(AssertionError):
    """A scenario that failed its criteria or regressed; the message is the whole report."""


def pytest_collection_modifyitems(session, config, items) -> None:
    settings = _settings(config)
    settings.order = {item.nodeid: i for i, item in enumerate(items)}
    # Two items writing one results folder would overwrite each other: fail the later ones.
    seen: dict[str, str] = {}
    for item in items:
        if isinstance(item, ScenarioItem):
            slug = item.scenario.slug
            if slug in seen and seen[slug] != item.nodeid:
                item.clash = (f"{item.scenario.id}: its results folder {slug!r} is already used by {seen[slug]}; "
                              f"give the scenarios distinct names")
            seen.setdefault(slug, item.nodeid)


# --------------------------------------------------------------------------- running one scenario


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
    def status(self) -> str:
        return self.result["status"]

    @property
    def passed(self) -> bool:
        return self.result["status"] == "passed"

    @property
    def reason(self) -> str | None:
        return self.result.get("reason")

    @property
    def metrics(self) -> dict:
        return self.result.get("metrics") or {}

    @property
    def criteria(self) -> dict[str, dict]:
        return {c["name"]: c for c in self.result.get("criteria") or []}

    @property
    def regressions(self) -> list:
        return [r for r in self.baseline_rows if r.verdict == "regressed"]

    def report(self) -> str:
        """The compact failure report: verdict, criteria table (value, limit, first violation), file paths."""
        from bench.cli.common import print_table

        r = self.result
        lines = [f"{r['scenario']}: {r['status']}" + (f": {r['reason']}" if r.get("reason") else "")]
        lines.append(f"controller {r.get('controller')}, seed {r.get('seed')}, scenario file {r.get('source')}")
        crits = r.get("criteria") or []
        if crits:
            buf = io.StringIO()
            rows = [[c["name"], _fmt(c.get("value")), _fmt(c.get("limit")),
                     "-" if c.get("first_violation_s") is None else f"{c['first_violation_s']:.3f} s",
                     "ok" if c.get("passed") else "FAIL"] for c in crits]
            print_table(rows, ["criterion", "value", "limit", "first violation", ""], file=buf)
            lines.append(buf.getvalue().rstrip())
        if self.trace_path is not None:
            lines.append(f"trace:  {self.shown_path(self.trace_path)}")
        lines.append(f"result: {self.shown_path(self.result_path)}")
        for v in self.video_paths:
            lines.append(f"video:  {self.shown_path(v)}")
        return "\n".join(lines)

    def regression_report(self, baseline_path) -> str:
        from bench.cli.common import print_table
        from bench.report.baseline import TABLE_HEADER, table_rows

        buf = io.StringIO()
        print_table(table_rows(self.regressions), TABLE_HEADER, file=buf)
        own = "passed its criteria, but " if self.passed else ""
        text = f"{self.result['scenario']}: {own}regressed against the baseline {baseline_path}\n" + buf.getvalue()
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


def _fmt(x) -> str:
    if x is None:
        return "-"
    if isinstance(x, float):
        return f"{x:.4g}"
    return str(x)


def _history(config):
    settings = _settings(config)
    if settings.history_path is None:
        return None
    if settings.history is None:
        from bench.report.history import History, git_state

        if settings.git is ...:
            settings.git = git_state(config.invocation_params.dir)
        h = History(settings.history_path)
        h.begin_run(settings.run_uid, source="pytest", git=settings.git, cwd=config.invocation_params.dir)
        settings.history = h
    return settings.history


def _render_video(settings: Settings, result_dir: Path, passed: bool, scenario) -> list[Path]:
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


def execute(config, node, scenario, controller, *, seed: int | None = None,
            trial_of: str | None = None) -> BenchRun:
    """Run ``scenario`` with ``controller``; write its files, history and JUnit properties; compare it."""
    from bench.execute.job import Job, run_job
    from bench.report.results import write_outcome

    settings = _settings(config)
    outcome = run_job(Job(scenario, controller, seed))
    result = outcome.result
    if trial_of is not None:
        result["trial_of"] = trial_of      # as `bench run` marks a trial's result.json
    result_path = write_outcome(settings.out, scenario.slug, outcome)
    trace_path = result_path.parent / "trace.npz" if outcome.trace is not None else None
    video = _render_video(settings, result_path.parent, result["status"] == "passed", scenario)
    run = BenchRun(result, result_path, trace_path, video, trace=outcome.trace,
                   shown_path=lambda p: _display_path(config, p))
    if settings.baseline is not None:
        from bench.report.baseline import compare_result

        run.baseline_rows = compare_result(settings.baseline, result)
    history = _history(config)
    if history is not None:
        history.record(settings.run_uid, result)
    _attach(node, settings, run)
    return run


def _baseline_word(run: BenchRun) -> str:
    verdicts = {r.verdict for r in run.baseline_rows}
    for word in ("regressed", "new", "improved", "changed"):
        if word in verdicts:
            return word
    return "same"


def _attach(node, settings: Settings, run: BenchRun) -> None:
    """JUnit XML properties (``record_property``), in a fixed order; ``bench.scenario`` opens each run."""
    r = run.result
    props = node.user_properties
    shown = run.shown_path
    props.append(("bench.scenario", r["scenario"]))
    props.append(("bench.status", r["status"]))
    props.append(("bench.controller", str(r.get("controller"))))
    props.append(("bench.seed", r.get("seed")))
    props.append(("bench.content_hash", r.get("content_hash", "")))
    if r.get("reason"):
        props.append(("bench.reason", r["reason"]))
    props.append(("bench.result", shown(run.result_path)))
    if run.trace_path is not None:
        props.append(("bench.trace", shown(run.trace_path)))
    for v in run.video_paths:
        props.append(("bench.video", shown(v)))
    if settings.baseline is not None:
        props.append(("bench.baseline", _baseline_word(run)))
    for c in r.get("criteria") or []:
        props.append((f"bench.criterion.{c['name']}", "passed" if c["passed"] else "failed"))
    for name, value in (r.get("metrics") or {}).items():
        props.append((f"bench.metric.{name}", value))


# --------------------------------------------------------------------------- the fixture


class BenchRunner:
    """What the ``bench_run`` fixture gives: call it with a scenario (path or Scenario) and a controller."""

    def __init__(self, request) -> None:
        self._request = request
        self.config = request.config

    @property
    def controller(self) -> str:
        """The configured controller (``--bench-controller`` / ``bench_controller``)."""
        return _settings(self.config).controller

    def load(self, path) -> list:
        """Every scenario (matrix variant) in a file. Relative paths: from the current folder, else the test's."""
        from bench.errors import ScenarioError, ScenarioErrors
        from bench.scenario import load_file

        p = Path(path)
        if not p.is_absolute() and not p.exists():
            here = Path(self._request.path).parent / p
            if here.exists():
                p = here
        roots = [q for q in _settings(self.config).scenario_paths if q.is_dir()]
        try:
            return load_file(_display_path(self.config, p.resolve()) if p.exists() else str(p), roots)
        except (ScenarioError, ScenarioErrors) as exc:
            pytest.fail(f"bench_run: invalid scenario:\n{exc}", pytrace=False)

    def __call__(self, scenario, controller=None, *, variant: str | None = None, seed: int | None = None) -> BenchRun:
        """Run one scenario and return its :class:`BenchRun` (``variant`` picks a matrix variant by id)."""
        if isinstance(scenario, (str, os.PathLike)):
            found = self.load(scenario)
            if variant is not None:
                found = [s for s in found if variant in (s.id, s.id.partition("[")[2].rstrip("]"))]
            if len(found) != 1:
                ids = ", ".join(s.id for s in self.load(scenario))
                pytest.fail(f"bench_run: {scenario} defines {ids}; pick one with variant=", pytrace=False)
            scenario = found[0]
        return execute(self.config, self._request.node, scenario,
                       controller if controller is not None else self.controller, seed=seed)


@pytest.fixture
def bench_run(request) -> BenchRunner:
    """Run a scenario from a Python test: ``run = bench_run("stand.yaml", MyController())``; assert on ``run``."""
    return BenchRunner(request)


# --------------------------------------------------------------------------- reporting


class _SessionReporter:
    """Per-config hooks: gathers every run's summary entry from the reports (in the xdist controller too,
    since ``user_properties`` travel with the reports), writes summary.json and the terminal summary."""

    def __init__(self, config) -> None:
        self.config = config
        self.runs: list[dict] = []
        self.trials: list[tuple[str, int, dict]] = []   # (nodeid, seq, summary.json trials entry)

    def pytest_runtest_logreport(self, report) -> None:
        if report.when != "call":
            return
        entry = None
        for name, value in report.user_properties:
            if name == "bench.trials":
                import json

                self.trials.append((report.nodeid, len(self.trials), json.loads(value)))
            elif name == "bench.scenario":
                entry = {"scenario": value, "status": None, "reason": None, "result": None, "baseline": None,
                         "nodeid": report.nodeid, "seq": len(self.runs)}
                self.runs.append(entry)
            elif entry is not None and name in ("bench.status", "bench.reason", "bench.result", "bench.baseline"):
                entry[name.split(".", 1)[1]] = value

    def pytest_sessionfinish(self, session, exitstatus) -> None:
        settings = _settings(self.config)
        if settings.history is not None:
            settings.history.close()
            settings.history = None
        if hasattr(self.config, "workerinput") or not self.runs:
            return
        from bench.report.results import write_summary

        order = settings.order
        self.runs.sort(key=lambda r: (order.get(r["nodeid"], len(order)), r["seq"]))
        base, out = Path(self.config.invocation_params.dir), settings.out.resolve()
        entries = []
        for r in self.runs:
            folder = (base / r["result"]).resolve().parent
            if out in folder.parents:
                entries.append((folder.relative_to(out).as_posix(), r))
        self.trials.sort(key=lambda t: (order.get(t[0], len(order)), t[1]))
        write_summary(settings.out, entries, [t for _, _, t in self.trials])

    def pytest_terminal_summary(self, terminalreporter, exitstatus, config) -> None:
        settings = _settings(config)
        if not self.runs:
            return
        tr = terminalreporter
        counts: dict[str, int] = {}
        for r in self.runs:
            counts[r["status"]] = counts.get(r["status"], 0) + 1
        text = ", ".join(f"{n} {s}" for s, n in sorted(counts.items()))
        tr.write_sep("-", "quadruped-bench")
        tr.write_line(f"{len(self.runs)} scenario run(s): {text}; results in {_display_path(config, settings.out)}")
        if settings.history_path is not None:
            tr.write_line(f"history: {_display_path(config, settings.history_path)}")
        if settings.baseline is not None:
            b: dict[str, int] = {}
            for r in self.runs:
                word = r.get("baseline") or "same"
                b[word] = b.get(word, 0) + 1
            tr.write_line(f"baseline {_display_path(config, settings.baseline_path)}: "
                          + ", ".join(f"{n} {w}" for w, n in sorted(b.items())))
        if self.trials:
            from bench.cli.run import print_trials

            buf = io.StringIO()
            print_trials([t for _, _, t in self.trials], file=buf)
            for line in buf.getvalue().rstrip().splitlines():
                tr.write_line(line)
        for w in settings.warnings:
            tr.write_line(f"warning: {w}")
