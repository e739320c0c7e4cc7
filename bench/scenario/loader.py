"""Finding and loading scenario files: paths -> validated `Scenario` objects.

A path is a file or a folder searched recursively for `*.yaml`/`*.yml` in
sorted order. Files and folders whose name starts with `_` or `.` are skipped
when searching a folder: `_base.yaml` is a partial meant to be extended (it is
still loaded when named explicitly). Every problem in every file is collected
and raised together as one `ScenarioErrors`.
"""

from __future__ import annotations

from collections.abc import Iterable
from pathlib import Path

from bench.errors import ScenarioError, ScenarioErrors
from bench.scenario.compose import expand_matrix, load_merged
from bench.scenario.schema import Scenario
from bench.scenario.trials import check_randomize
from bench.scenario.validate import validate_document

SUFFIXES = (".yaml", ".yml")


def _skipped(part: str) -> bool:
    return part.startswith(("_", "."))


def find_scenario_files(path: str | Path) -> list[Path]:
    """The scenario files under a folder (sorted), or the file itself."""
    p = Path(path)
    if not p.is_dir():
        return [p]
    found = []
    for f in p.rglob("*"):
        rel = f.relative_to(p).parts
        if f.suffix in SUFFIXES and f.is_file() and not any(_skipped(x) for x in rel):
            found.append(f)
    return sorted(found, key=lambda f: f.as_posix())


def load_file(path: str | Path, roots: Iterable[str | Path] = ()) -> list[Scenario]:
    """Every scenario one file defines (several when it has a matrix). Raises `ScenarioErrors`."""
    source = str(path)
    doc = load_merged(path, roots)
    out: list[Scenario] = []
    errors: list[ScenarioError] = []
    for vdoc, variant in expand_matrix(doc):
        try:
            scenario = validate_document(vdoc, source=source, variant=variant)
        except ScenarioErrors as e:
            errors.extend(e)
            continue
        problems = check_randomize(scenario) if scenario.randomize else []
        if problems:
            errors.extend(problems)
            continue
        out.append(scenario)
    if errors:
        # in reading order: this file first, then any base file it extends
        errors.sort(key=lambda e: (e.path != source, e.path, e.line, e.col))
        raise ScenarioErrors(errors)
    return out


def load_scenarios(paths: Iterable[str | Path], roots: Iterable[str | Path] = ()) -> list[Scenario]:
    """Load every scenario under `paths`; folders given here are also allowed `extends` roots.

    Raises `ScenarioErrors` listing every problem in every file, including two
    scenarios with the same id (or the same result folder name).
    """
    paths = [paths] if isinstance(paths, (str, Path)) else list(paths)
    roots = list(roots) + [p for p in paths if Path(p).is_dir()]
    errors: list[ScenarioError] = []
    scenarios: list[Scenario] = []
    for given in paths:
        if not Path(given).exists():
            errors.append(ScenarioError(str(given), 1, 1, "", "no such file or folder"))
            continue
        files = find_scenario_files(given)
        if not files:
            errors.append(ScenarioError(str(given), 1, 1, "", "no *.yaml scenario files in this folder"))
        for f in files:
            shown = str(f) if Path(given).is_dir() else str(given)
            try:
                scenarios.extend(load_file(shown, roots))
            except ScenarioErrors as e:
                errors.extend(e)
    seen: dict[str, Scenario] = {}
    seen_slug: dict[str, Scenario] = {}
    for s in scenarios:
        other = seen.get(s.id)
        if other is not None:
            first = other.error("name", "")
            errors.append(s.error("name", f"duplicate scenario id {s.id!r}, also defined at "
                                  f"{first.path}:{first.line}", "scenario names must be unique across a run"))
            continue
        other = seen_slug.get(s.slug)
        if other is not None:
            errors.append(s.error("name", f"scenario id {s.id!r} has the same result folder name "
                                  f"{s.slug!r} as {other.id!r} ({other.source})", "rename one of them"))
            continue
        seen[s.id] = s
        seen_slug[s.slug] = s
    if errors:
        raise ScenarioErrors(errors)
    return scenarios
