"""Collection: scenario files under the configured folders become items, checked as ``bench check`` checks.

A file is loaded through the run path's load step (:func:`bench.run.load.load_file_checked`),
robot checks included, so a scenario that ``bench check`` refuses is a collection error here
with the same ``path:line:col: message`` lines, and never reaches the simulator.
"""

from __future__ import annotations

import re
from pathlib import Path

import pytest

from bench.pytest_plugin.options import SETTINGS, display_path, matches, settings_of

_TAG_OK = re.compile(r"^[A-Za-z][A-Za-z0-9_.-]*$")


def _under_scenario_folder(settings, path: Path) -> bool:
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
    if settings is None or not settings.active or not matches(settings, file_path):
        return None
    p = file_path.resolve()
    if p in settings.explicit_files or _under_scenario_folder(settings, p):
        return ScenarioFile.from_parent(parent, path=file_path)
    return None


class ScenarioFile(pytest.File):
    """A scenario YAML file: one item per scenario (matrix variant) it defines."""

    def collect(self):
        from bench.errors import ScenarioError, ScenarioErrors
        from bench.execute.trials import is_trial_scenario
        from bench.execute import trials as trials_mod
        from bench.pytest_plugin.items import ScenarioItem, TrialItem, TrialsItem
        from bench.run.load import load_file_checked

        settings = settings_of(self.config)
        roots = [p for p in settings.scenario_paths if p.is_dir()]
        try:
            scenarios = load_file_checked(display_path(self.config, self.path), roots, robot=settings.robot,
                                          no_privileged=settings.no_privileged)
        except ScenarioErrors as exc:
            raise self.CollectError("\n".join(str(e) for e in exc.errors)) from None
        except ScenarioError as exc:
            raise self.CollectError(str(exc)) from None
        for sc in scenarios:
            if not is_trial_scenario(sc):
                yield ScenarioItem.from_parent(self, name=sc.id, scenario=sc)
                continue
            # one item per trial (xdist spreads them), then the scenario's verdict (moved after all items)
            episodes, _, _ = trials_mod.plan([sc], settings.seed)
            for t in episodes:
                yield TrialItem.from_parent(self, name=t.id, scenario=t, trial_of=sc)
            yield TrialsItem.from_parent(self, name=sc.id, scenario=sc)


def register_tag(config, tag: str) -> bool:
    if not _TAG_OK.match(tag):
        return False
    settings = settings_of(config)
    if tag not in settings.tags:
        settings.tags.add(tag)
        known = {line.split(":")[0].split("(")[0].strip() for line in config.getini("markers")}
        if tag not in known:
            config.addinivalue_line("markers", f"{tag}: quadruped-bench scenario tag")
    return True


def pytest_collection_modifyitems(session, config, items) -> None:
    from bench.pytest_plugin.items import ScenarioItem, TrialsItem

    settings = settings_of(config)
    # A trials scenario's verdict item waits for its trials: after every other item, so that no worker
    # holds it ahead of a trial still to run (xdist hands items out in this order).
    items[:] = [i for i in items if not isinstance(i, TrialsItem)] + [i for i in items if isinstance(i, TrialsItem)]
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


@pytest.hookimpl(trylast=True)
def pytest_collection_finish(session) -> None:
    """The trial items left after deselection (-k, -m): the verdict items run the others themselves."""
    from bench.pytest_plugin.items import TrialItem

    settings = session.config.stash.get(SETTINGS, None)
    if settings is not None:
        settings.selected_trials = {i.scenario.id for i in session.items if isinstance(i, TrialItem)}


def pytest_report_teststatus(report, config):
    """A trial item passes when its trial ran; the terminal says whether the trial met its criteria."""
    if report.when != "call" or not report.passed:
        return None
    status = dict(report.user_properties).get("bench.trial_status")
    if status is None:
        return None
    return f"trial {status}", "t" if status == "passed" else "T", f"TRIAL {status.upper()}"


@pytest.hookimpl(optionalhook=True)
def pytest_xdist_node_collection_finished(node, ids) -> None:
    """pytest-xdist: the collection order, so summary.json lists results as a serial run would."""
    order = settings_of(node.config).order
    if not order:
        order.update({nid: i for i, nid in enumerate(ids)})
