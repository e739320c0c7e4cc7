"""The ``bench_run`` fixture: run a scenario from a Python test and assert on what it gave."""

from __future__ import annotations

import os
from pathlib import Path

import pytest

from bench.pytest_plugin.options import display_path, settings_of
from bench.pytest_plugin.runs import BenchRun, execute


class BenchRunner:
    """What the ``bench_run`` fixture gives: call it with a scenario (path or Scenario) and a controller."""

    def __init__(self, request) -> None:
        self._request = request
        self.config = request.config

    @property
    def controller(self) -> str:
        """The configured controller (``--bench-controller`` / ``bench_controller``)."""
        return settings_of(self.config).controller

    def load(self, path) -> list:
        """Every scenario (matrix variant) in a file, checked as ``bench check`` checks it.

        Relative paths: from the current folder, else the test's."""
        from bench.errors import ScenarioError, ScenarioErrors
        from bench.run.load import load_file_checked

        p = Path(path)
        if not p.is_absolute() and not p.exists():
            here = Path(self._request.path).parent / p
            if here.exists():
                p = here
        roots = [q for q in settings_of(self.config).scenario_paths if q.is_dir()]
        try:
            return load_file_checked(display_path(self.config, p.resolve()) if p.exists() else str(p), roots,
                                     robot=settings_of(self.config).robot,
                                     no_privileged=settings_of(self.config).no_privileged)
        except (ScenarioError, ScenarioErrors) as exc:
            pytest.fail(f"bench_run: invalid scenario:\n{exc}", pytrace=False)

    def __call__(self, scenario, controller=None, *, variant: str | None = None, seed: int | None = None,
                 controller_params: dict | None = None) -> BenchRun:
        """Run one scenario and return its :class:`BenchRun` (``variant`` picks a matrix variant by id).

        ``seed`` defaults to ``--bench-seed`` (else the scenario's own); ``controller_params`` (keywords for
        a named controller's constructor) default to ``--bench-controller-param`` when ``controller`` is the
        configured one."""
        from bench.run.errors import InvalidInput

        if isinstance(scenario, (str, os.PathLike)):
            found = self.load(scenario)
            if variant is not None:
                found = [s for s in found if variant in (s.id, s.id.partition("[")[2].rstrip("]"))]
            if len(found) != 1:
                ids = ", ".join(s.id for s in self.load(scenario))
                pytest.fail(f"bench_run: {scenario} defines {ids}; pick one with variant=", pytrace=False)
            scenario = found[0]
        elif settings_of(self.config).no_privileged:   # a Scenario object: forced off as a loaded file is
            from bench.run.load import without_privileged

            scenario = without_privileged([scenario])[0]
        settings = settings_of(self.config)
        if seed is None:
            seed = settings.seed
        if controller_params is None and controller is None:
            controller_params = settings.controller_params
        try:
            return execute(self.config, self._request.node, scenario,
                           controller if controller is not None else self.controller, seed=seed,
                           controller_params=controller_params)
        except InvalidInput as exc:
            pytest.fail(f"bench_run: {exc}", pytrace=False)


@pytest.fixture
def bench_run(request) -> BenchRunner:
    """Run a scenario from a Python test: ``run = bench_run("stand.yaml", MyController())``; assert on ``run``."""
    return BenchRunner(request)
