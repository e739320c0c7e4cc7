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
from bench.fileio import is_inside, not_regular
from bench.scenario.compose import allowed_roots, expand_matrix, load_merged
from bench.scenario.schema import Scenario
from bench.scenario.trials import check_randomize
from bench.scenario.validate import validate_document
from bench.scenario.yamlload import load_yaml, printable

SUFFIXES = (".yaml", ".yml")
#: At most this many problems are reported for one run (a hostile file can have thousands).
MAX_REPORTED_ERRORS = 200


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


_OUTSIDE_HINT = ("a file a scenario names may be in the scenario's own folder tree, the bundled models/ and "
                 "scenarios/, or a folder passed with --root")


def named_file_problems(scenario: Scenario, roots: list[Path]) -> list[ScenarioError]:
    """Files the scenario names (a robot manifest, and the MJCF that manifest names) must stay inside `roots`.

    The manifest is YAML the scenario points at, so it is read here with the same safe loader and
    limits as a scenario (size, nesting, aliases) before anything else parses it.
    """
    manifest = scenario.robot.manifest
    if manifest is None:
        return []
    resolved = Path(manifest).resolve()
    if not is_inside(resolved, roots):
        return [scenario.error("robot.manifest", f"robot manifest {str(manifest)!r} is outside the allowed "
                               "folders", _OUTSIDE_HINT)]
    try:
        doc = load_yaml(manifest)
    except ScenarioErrors as e:
        return list(e)
    mjcf = doc.data.get("mjcf")
    if not (isinstance(mjcf, str) and mjcf):
        return []
    if not is_inside((resolved.parent / mjcf).resolve(), roots):
        loc = doc.locs.value(("mjcf",))
        return [ScenarioError(loc.file, loc.line, loc.col, "mjcf", f"MJCF {mjcf!r} is outside the allowed folders",
                              _OUTSIDE_HINT)]
    special = not_regular(resolved.parent / mjcf)
    if special is not None:
        loc = doc.locs.value(("mjcf",))
        return [ScenarioError(loc.file, loc.line, loc.col, "mjcf", f"MJCF {mjcf!r} is {special}, not a regular file",
                              "give the path of the robot's MJCF file")]
    return mjcf_file_problems(Path(manifest).parent / mjcf, roots)


def mjcf_file_problems(mjcf: Path, roots: list[Path]) -> list[ScenarioError]:
    """The files an MJCF names (includes, meshes, textures, heightfields, attached models) stay inside `roots`."""
    from bench.scenario.mjcf_files import places_to_check, scan_mjcf

    refs, problems = scan_mjcf(mjcf)
    out = [ScenarioError(p.file, p.line, p.col, p.field, p.message) for p in problems]
    for ref in refs:
        if not all(is_inside(place, roots) for place in places_to_check(ref)):
            out.append(ScenarioError(ref.file, ref.line, ref.col, ref.field,
                                     f"file {ref.value!r} named by the MJCF is outside the allowed folders",
                                     _OUTSIDE_HINT))
    return out


def _randomized_robot_problems(scenario: Scenario, roots: list[Path]) -> list[ScenarioError]:
    """`randomize: {robot...: {choice: [...]}}`: every choice's files must stay inside `roots` too."""
    from bench.scenario.compose import derive
    from bench.scenario.schema import Choice

    problems: list[ScenarioError] = []
    for dotted, dist in scenario.randomize.items():
        if (dotted == "robot" or dotted.startswith("robot.")) and isinstance(dist, Choice):
            for value in dist.values:
                try:
                    problems.extend(named_file_problems(derive(scenario, {dotted: value}, ""), roots))
                except ScenarioErrors:
                    continue  # an invalid choice is reported by check_randomize
    return problems


def load_file(path: str | Path, roots: Iterable[str | Path] = ()) -> list[Scenario]:
    """Every scenario one file defines (several when it has a matrix). Raises `ScenarioErrors`."""
    source = str(path)
    roots = list(roots)
    doc = load_merged(path, roots)
    allowed = allowed_roots(path, roots)
    out: list[Scenario] = []
    errors: list[ScenarioError] = []
    checked: dict[Path, list[ScenarioError]] = {}
    for vdoc, variant in expand_matrix(doc):
        try:
            scenario = validate_document(vdoc, source=source, variant=variant)
        except ScenarioErrors as e:
            errors.extend(e)
            continue
        key = scenario.robot.manifest
        if key is not None:
            if key not in checked:
                checked[key] = named_file_problems(scenario, allowed)
            if checked[key]:
                errors.extend(checked[key])
                continue
        problems = check_randomize(scenario) if scenario.randomize else []
        if not problems and scenario.randomize:
            problems = _randomized_robot_problems(scenario, allowed)
        if problems:
            errors.extend(problems)
            continue
        out.append(scenario)
    if errors:
        # in reading order: this file first, then any base file it extends
        errors.sort(key=lambda e: (e.path != source, e.path, e.line, e.col))
        raise ScenarioErrors(errors)
    return out


def _one_line(e: ScenarioError) -> ScenarioError:
    """The error with any control character or line break in its texts escaped: one problem, one line."""
    texts = (e.path, e.field, e.message, e.hint or "")
    if all(t.isprintable() for t in texts):
        return e
    return ScenarioError(printable(e.path), e.line, e.col, printable(e.field), printable(e.message),
                         printable(e.hint) if e.hint else None)


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
    errors = [_one_line(e) for e in ScenarioErrors(errors).errors]   # without repeats, each on one line
    if len(errors) > MAX_REPORTED_ERRORS:
        last = errors[MAX_REPORTED_ERRORS - 1]
        errors = errors[:MAX_REPORTED_ERRORS] + [ScenarioError(
            last.path, last.line, last.col, "", f"... and {len(errors) - MAX_REPORTED_ERRORS} more problems "
            f"(the first {MAX_REPORTED_ERRORS} are shown)")]
    if errors:
        raise ScenarioErrors(errors)
    return scenarios
