"""Plugin options and ini keys, and the settings of one session made from them.

Options (command line, or ``[tool.pytest.ini_options]`` key in brackets):
``--bench-scenarios PATH`` (``bench_scenarios``, repeatable), ``--bench-controller NAME``
(``bench_controller``), ``--bench-out DIR`` (``bench_out``), ``--bench-baseline FILE``
(``bench_baseline``), ``--bench-history FILE`` / ``--bench-no-history`` (``bench_history``),
``--bench-video none|failed|all`` (``bench_video``), ``--bench-video-dir DIR`` (``bench_video_dir``),
``--bench-no-privileged`` (``bench_no_privileged = true``: every scenario runs with ``sensing.privileged``
false), ``--bench-seed N`` (``bench_seed``), ``--bench-controller-param KEY=VALUE`` (``bench_controller_params``,
one per line), glob (``bench_glob``, default ``*.yaml *.yml``). Paths in the ini file are relative
to it (the robot manifest, the results folder, the baseline, the history, and the program and file
arguments of an ``exec:`` controller); on the command line, to the current folder.
"""

from __future__ import annotations

import fnmatch
from dataclasses import dataclass, field
from pathlib import Path

import pytest

MARKER = "bench"
DEFAULT_GLOBS = ["*.yaml", "*.yml"]
VIDEO_MODES = ("none", "failed", "all")


def pytest_addoption(parser) -> None:
    g = parser.getgroup("bench", "quadruped-bench scenarios")
    g.addoption("--bench-scenarios", action="append", default=None, metavar="PATH",
                help="scenario file or folder to collect as test items (repeatable; ini: bench_scenarios)")
    g.addoption("--bench-robot", default=None, metavar="NAME|MANIFEST",
                help="run every scenario on this robot instead of its own: a bundled robot's name or a "
                     "manifest.yaml (ini: bench_robot, relative to the ini file)")
    g.addoption("--bench-controller", default=None, metavar="NAME",
                help="controller to run the scenarios with: registered name, package.module:attribute or "
                     "'exec:program args' (ini: bench_controller)")
    g.addoption("--bench-controller-param", action="append", default=None, metavar="KEY=VALUE",
                help="keyword argument for the controller's constructor, the value read as YAML (repeatable; "
                     "ini: bench_controller_params, one KEY=VALUE per line; the command line replaces the ini)")
    g.addoption("--bench-seed", default=None, type=int, metavar="N",
                help="replace every scenario's seed, as bench run --seed (ini: bench_seed)")
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
    g.addoption("--bench-no-privileged", action="store_true", default=False,
                help="run every scenario with sensing.privileged false (obs.privileged is None), to show a "
                     "controller never needs the true trunk state (ini: bench_no_privileged = true)")
    parser.addini("bench_scenarios", "scenario files or folders to collect (relative to this file)",
                  type="paths", default=[])
    parser.addini("bench_controller", "controller to run scenario items with (an exec: program and its file "
                  "arguments relative to this file)", default="")
    parser.addini("bench_controller_params", "KEY=VALUE keyword arguments for the controller, one per line",
                  type="linelist", default=[])
    parser.addini("bench_seed", "replace every scenario's seed (as bench run --seed)", default="")
    parser.addini("bench_robot", "robot to run every scenario on (a bundled name, or a manifest relative to "
                  "this file)", default="")
    parser.addini("bench_out", "results folder (relative to this file)", default="")
    parser.addini("bench_baseline", "baseline.json that scenario items must not regress against", default="")
    parser.addini("bench_history", "history database, or 'none' (relative to this file)", default="")
    parser.addini("bench_video", "review videos: none, failed or all", default="none")
    parser.addini("bench_video_dir", "where review videos go (default videos/ in the rootdir)", default="")
    parser.addini("bench_no_privileged", "true: every scenario runs with sensing.privileged false", type="bool",
                  default=False)
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
    history: object = None     # bench.run.sinks.HistorySink, opened on first use
    executor: object = None    # the session's executor, opened on first use
    tags: set[str] = field(default_factory=set)
    order: dict[str, int] = field(default_factory=dict)
    warnings: list[str] = field(default_factory=list)
    video_off: bool = False
    robot: str | None = None   # --bench-robot: every scenario runs on it
    no_privileged: bool = False   # --bench-no-privileged: every scenario runs without the true state
    seed: int | None = None    # --bench-seed: replaces every scenario's seed
    trial_plans: dict = field(default_factory=dict)      # trials scenario id -> its Plan (this process)
    trial_results: dict = field(default_factory=dict)    # trial id -> BenchRun run by this process
    selected_trials: set = field(default_factory=set)    # trial ids that are items of this session
    session_start_ns: int = 0                            # the controller's start (xdist workers share it)
    controller_params: dict = field(default_factory=dict)   # --bench-controller-param keywords

    @property
    def active(self) -> bool:
        return bool(self.scenario_paths or self.explicit_files)


SETTINGS = pytest.StashKey[Settings]()


def settings_of(config) -> Settings:
    return config.stash[SETTINGS]


def display_path(config, path: Path) -> str:
    """A path relative to the folder pytest was started in when it is inside it, else absolute."""
    path = Path(path)
    base = Path(config.invocation_params.dir)
    try:
        return str(path.resolve().relative_to(base.resolve()))
    except ValueError:
        return str(path)


def _ini_base(config) -> Path:
    return Path(config.inipath).parent if config.inipath else Path(config.rootpath)


def _ini_path(config, name: str) -> Path | None:
    value = (config.getini(name) or "").strip()
    return (_ini_base(config) / value) if value else None


def exec_relative_to(base: Path, spec: str) -> str:
    """An ``exec:`` spec from the ini file with its paths made absolute against the ini file's folder.

    The program, when given as a path (it has a ``/``), and every argument that names an existing file or
    folder next to the ini file; a bare program name is looked up on ``PATH`` as ever, options and other
    words are kept. Other specs are returned as they are.
    """
    import os
    import shlex

    if not spec.startswith("exec:"):
        return spec
    try:
        argv = shlex.split(spec[len("exec:"):])
    except ValueError:
        return spec   # the registry reports the malformed command line
    if not argv:
        return spec
    out = []
    for i, word in enumerate(argv):
        if os.path.isabs(word) or word.startswith("-"):
            out.append(word)
        elif i == 0 and "/" in word:
            out.append(str(base / word))
        elif i > 0 and (base / word).exists():
            out.append(str(base / word))
        else:
            out.append(word)
    return "exec:" + shlex.join(out)


def _seed(config) -> int | None:
    seed = config.getoption("bench_seed")
    if seed is not None:
        return int(seed)
    text = (config.getini("bench_seed") or "").strip()
    if not text:
        return None
    try:
        return int(text)
    except ValueError:
        raise pytest.UsageError(f"bench_seed in {config.inipath}: {text!r} is not a whole number") from None


def _controller_params(config) -> dict:
    from bench.controllers.params import ControllerParamError, parse_params

    cli = config.getoption("bench_controller_param")
    items, option = (cli, "--bench-controller-param") if cli else (
        [x for x in config.getini("bench_controller_params") if x.strip()], f"bench_controller_params in {config.inipath}")
    try:
        return parse_params(items, option=option)
    except ControllerParamError as exc:
        raise pytest.UsageError(str(exc)) from None


def matches(settings: Settings, path: Path) -> bool:
    return any(fnmatch.fnmatch(path.name, g) for g in settings.globs)


def make_settings(config) -> Settings:
    from bench.run.plan import DEFAULT_CONTROLLER

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
    controller = config.getoption("bench_controller")
    if not controller:
        controller = exec_relative_to(_ini_base(config), (config.getini("bench_controller") or "").strip())
    settings = Settings(
        scenario_paths=scenario_paths,
        globs=globs,
        controller=controller or DEFAULT_CONTROLLER,
        out=out,
        baseline_path=opt("bench_baseline", "bench_baseline"),
        history_path=history,
        video=video,
        video_dir=opt("bench_video_dir", "bench_video_dir") or Path(config.rootpath) / "videos",
    )
    settings.no_privileged = bool(config.getoption("bench_no_privileged") or config.getini("bench_no_privileged"))
    settings.seed = _seed(config)
    settings.controller_params = _controller_params(config)
    robot = config.getoption("bench_robot")
    if not robot:
        ini_robot = (config.getini("bench_robot") or "").strip()
        if ini_robot:
            base = Path(config.inipath).parent if config.inipath else Path(config.rootpath)
            robot = str(base / ini_robot) if ("/" in ini_robot or ini_robot.endswith((".yaml", ".yml"))) \
                else ini_robot
    if robot:
        from bench.run.errors import InvalidInput
        from bench.run.load import robot_override

        try:
            robot_override(robot)
        except InvalidInput as exc:
            raise pytest.UsageError(f"--bench-robot: {exc}") from None
        settings.robot = robot
    # Scenario files named on the command line are collected even outside the configured folders.
    if config.args_source == pytest.Config.ArgsSource.ARGS:
        for a in config.args:
            p = (cwd / a.split("::")[0]).resolve()
            if p.is_file() and matches(settings, p):
                settings.explicit_files.add(p)
    return settings


def pytest_configure(config) -> None:
    from bench.pytest_plugin.reporting import SessionReporter

    config.addinivalue_line("markers", f"{MARKER}: a quadruped-bench scenario item")
    settings = make_settings(config)
    config.stash[SETTINGS] = settings
    config.pluginmanager.register(SessionReporter(config), "bench-session-reporter")
    workerinput = getattr(config, "workerinput", None)
    from bench.report.history import new_run_uid

    settings.run_uid = (workerinput or {}).get("bench_run_uid") or new_run_uid()
    import time

    settings.session_start_ns = int((workerinput or {}).get("bench_session_start_ns") or time.time_ns())
    if settings.active:
        # as bench run: a controller name that resolves to nothing is invalid input, before anything runs
        from bench.run.errors import InvalidInput
        from bench.run.plan import check_controller, check_controller_params

        try:
            check_controller(settings.controller)
        except InvalidInput as exc:
            raise pytest.UsageError(f"--bench-controller: {exc}") from None
        try:
            check_controller_params(settings.controller, settings.controller_params)
        except InvalidInput as exc:
            raise pytest.UsageError(str(exc).replace("--controller-param", "--bench-controller-param")) from None
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
    node.workerinput["bench_run_uid"] = settings_of(node.config).run_uid
    node.workerinput["bench_session_start_ns"] = settings_of(node.config).session_start_ns
