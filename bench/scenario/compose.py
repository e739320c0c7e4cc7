"""Composition: `extends:` (inherit another file), `matrix:` (variants) and `derive()`.

`extends: other.yaml` is resolved relative to the file that says it. The
documents are deep-merged (mappings merge key by key, lists and scalars are
replaced whole); the base may itself extend another file, up to
`MAX_EXTENDS_DEPTH`. A loop is an error naming both files. A base file must
live inside an allowed root: the folder tree of the scenario being loaded,
the bundled `models/` and `scenarios/` folders, or a root the caller passes.
Locations survive the merge, so an error in an inherited value points into
the base file.

`matrix: {dotted.path: [values...]}` expands into the cartesian product of
the values, each a variant labelled by the last path component
(`name[mass=6,speed=0.4]`); the location of a substituted value is the line
of that value in the matrix.
"""

from __future__ import annotations

import copy
import itertools
import os
from collections.abc import Iterable, Sequence
from pathlib import Path
from typing import Any

import bench
from bench.errors import ScenarioError, ScenarioErrors
from bench.fileio import is_inside
from bench.scenario.paths import set_path, split_path
from bench.scenario.schema import Scenario
from bench.scenario.validate import validate_document
from bench.scenario.yamlload import Document, Loc, Locations, load_yaml

MAX_EXTENDS_DEPTH = 16
MAX_VARIANTS = 1000
MAX_EXPANDED_VALUES = 2_000_000  # variants x values per variant: bounds the memory a matrix may take

REPO_ROOT = Path(bench.__file__).resolve().parents[1]
_PACKAGE_DATA = Path(bench.__file__).resolve().parent / "_data"  # where a wheel install keeps them
BUNDLED_ROOTS = (REPO_ROOT / "models", REPO_ROOT / "scenarios", _PACKAGE_DATA / "models", _PACKAGE_DATA / "scenarios")


def allowed_roots(scenario_file: str | Path, roots: Iterable[str | Path] = ()) -> list[Path]:
    """Folders an `extends:` may reach from `scenario_file`."""
    out = [Path(scenario_file).resolve().parent, *BUNDLED_ROOTS]
    out.extend(Path(r).resolve() for r in roots)
    return out


# --------------------------------------------------------------------------- merging


def _copy_locs(value: Any, src: Locations, src_path: tuple, dst: Locations, dst_path: tuple) -> None:
    """Copy the locations of `value` (and everything in it) from `src_path` to `dst_path`."""
    loc = src.values.get(src_path)
    if loc is not None:
        dst.values[dst_path] = loc
    kloc = src.keys.get(src_path)
    if kloc is not None:
        dst.keys[dst_path] = kloc
    if isinstance(value, dict):
        for k, v in value.items():
            _copy_locs(v, src, src_path + (k,), dst, dst_path + (k,))
    elif isinstance(value, list):
        for i, v in enumerate(value):
            _copy_locs(v, src, src_path + (i,), dst, dst_path + (i,))


def _merge(base: dict, over: dict, path: tuple, bl: Locations, ol: Locations, out: Locations) -> dict:
    result: dict[str, Any] = {}
    loc = ol.values.get(path) or bl.values.get(path)
    if loc is not None:
        out.values[path] = loc
    kloc = ol.keys.get(path) or bl.keys.get(path)
    if kloc is not None:
        out.keys[path] = kloc
    for k, v in base.items():
        if k not in over:
            result[k] = copy.deepcopy(v)
            _copy_locs(v, bl, path + (k,), out, path + (k,))
    for k, v in over.items():
        b = base.get(k)
        if isinstance(b, dict) and isinstance(v, dict):
            result[k] = _merge(b, v, path + (k,), bl, ol, out)
        else:
            result[k] = copy.deepcopy(v)
            _copy_locs(v, ol, path + (k,), out, path + (k,))
    return result


def merge_documents(base: Document, over: Document) -> Document:
    """Deep-merge `over` onto `base` (mappings merge, everything else is replaced)."""
    locs = Locations(over.locs.default)
    data = _merge(base.data, over.data, (), base.locs, over.locs, locs)
    return Document(data, locs, over.file)


# --------------------------------------------------------------------------- extends


def _extends(doc: Document, chain: list[tuple[Path, str]], roots: Sequence[Path]) -> Document:
    if "extends" not in doc.data:
        return doc
    target = doc.data.pop("extends")
    if target is None:
        return doc
    if not isinstance(target, str) or not target.strip():
        raise ScenarioErrors([doc.error(("extends",), "expected the path of another scenario file",
                                        "e.g. extends: ../base.yaml")])
    shown = os.path.normpath(os.path.join(os.path.dirname(doc.file), target))
    resolved = Path(shown).resolve()
    for p, name in chain:
        if p == resolved:
            loop = " -> ".join([n for _, n in chain] + [shown])
            raise ScenarioErrors([doc.error(("extends",), f"extends loop: {loop}",
                                            f"{doc.file} and {name} extend each other")])
    if not is_inside(resolved, roots):
        raise ScenarioErrors([doc.error(("extends",), f"{target!r} is outside the allowed folders",
                                        "extends may reach the scenario's own folder tree, the bundled models/ "
                                        "and scenarios/, or a folder passed as a root")])
    if len(chain) >= MAX_EXTENDS_DEPTH:
        raise ScenarioErrors([doc.error(("extends",), f"more than {MAX_EXTENDS_DEPTH} levels of extends")])
    if not resolved.is_file():
        raise ScenarioErrors([doc.error(("extends",), f"{shown!r} not found",
                                        _missing_file_hint(target, resolved))])
    base = load_yaml(shown)
    base = _extends(base, chain + [(resolved, shown)], roots)
    return merge_documents(base, doc)


def _missing_file_hint(target: str, resolved: Path) -> str:
    """Suggest the scenario file next to the one asked for whose name is closest."""
    from bench.suggest import closest

    base = "the path is relative to the file that says extends"
    try:
        names = [p.name for p in resolved.parent.iterdir() if p.suffix in (".yaml", ".yml") and p.is_file()]
    except OSError:
        return base
    near = closest(resolved.name, names)
    if not near:
        return base
    shown = os.path.join(os.path.dirname(target), near[0]) if os.path.dirname(target) else near[0]
    return f"did you mean {shown!r}? {base}"


def load_merged(path: str | Path, roots: Iterable[str | Path] = ()) -> Document:
    """Load a scenario file with its `extends` chain merged in (`extends` removed)."""
    doc = load_yaml(path)
    return _extends(doc, [(Path(path).resolve(), str(path))], allowed_roots(path, roots))


# --------------------------------------------------------------------------- matrix


def _labels(paths: list[str]) -> list[str]:
    """Shortest distinct tails of the paths: `mass`, or `crate.mass`/`box.mass` when two end alike."""
    parts = [p.split(".") for p in paths]
    depth = [1] * len(paths)
    for _ in range(max((len(p) for p in parts), default=1)):
        labels = [".".join(p[-d:]) for p, d in zip(parts, depth)]
        dup = {lab for lab in labels if labels.count(lab) > 1}
        if not dup:
            return labels
        depth = [d + 1 if lab in dup else d for lab, d in zip(labels, depth)]
    return [".".join(p) for p in parts]


def _matrix_entries(doc: Document) -> list[tuple[str, list]]:
    m = doc.data.get("matrix")
    if not isinstance(m, dict) or not m:
        raise ScenarioErrors([doc.error(("matrix",), "expected a mapping of dotted.path -> [values...]",
                                        "e.g. matrix: {payloads.crate.mass: [2, 4, 6]}")])
    errors = []
    entries = []
    for key, values in m.items():
        where = doc.locs.key(("matrix", key))
        try:
            split_path(key, where=where)
        except ScenarioError as e:
            errors.append(e)
            continue
        if key in ("name", "matrix", "extends") or key.startswith(("matrix.", "extends.")):
            errors.append(doc.error(("matrix", key), f"the matrix cannot vary {key!r}", at_key=True))
            continue
        if not isinstance(values, list) or not values:
            errors.append(doc.error(("matrix", key), "expected a non-empty list of values", "e.g. [2, 4, 6]"))
            continue
        entries.append((key, values))
    if errors:
        raise ScenarioErrors(errors)
    count = 1
    for _, values in entries:
        count *= len(values)
    size = len(doc.locs.values)
    if count > MAX_VARIANTS or count * size > MAX_EXPANDED_VALUES:
        raise ScenarioErrors([doc.error(("matrix",), f"the matrix expands to {count} variants of a {size}-value "
                                        f"document, more than the limit ({MAX_VARIANTS} variants, "
                                        f"{MAX_EXPANDED_VALUES} values in all)")])
    return entries


def _apply(data: dict, locs: Locations, dotted: str, value: Any, value_src: tuple, src_locs: Locations,
           where: Loc) -> tuple:
    concrete, created = set_path(data, dotted, value, where=where)
    for p in created:
        locs.values[p] = where
        locs.keys[p] = where
    locs.drop_under(concrete)
    _copy_locs(value, src_locs, value_src, locs, concrete)
    locs.keys.setdefault(concrete, where)
    return concrete


def expand_matrix(doc: Document) -> list[tuple[Document, dict[str, Any]]]:
    """The variants of a merged document: `[(document, {label: value})]` (one, unlabelled, without a matrix)."""
    if "matrix" not in doc.data or doc.data.get("matrix") is None:
        doc.data.pop("matrix", None)
        return [(doc, {})]
    entries = _matrix_entries(doc)
    base = {k: v for k, v in doc.data.items() if k != "matrix"}
    labels = _labels([k for k, _ in entries])
    errors: list[ScenarioError] = []
    # resolve each path once against the base so a bad path is one error, not one per variant
    for key, values in entries:
        try:
            set_path(copy.deepcopy(base), key, values[0], where=doc.locs.key(("matrix", key)))
        except ScenarioError as e:
            errors.append(e)
    if errors:
        raise ScenarioErrors(errors)
    out = []
    for combo in itertools.product(*(range(len(v)) for _, v in entries)):
        data = copy.deepcopy(base)
        locs = doc.locs.copy()
        variant: dict[str, Any] = {}
        for (key, values), label, i in zip(entries, labels, combo):
            value = copy.deepcopy(values[i])
            _apply(data, locs, key, value, ("matrix", key, i), doc.locs, doc.locs.key(("matrix", key)))
            variant[label] = value
        locs.drop_under(("matrix",))
        locs.values.pop(("matrix",), None)
        out.append((Document(data, locs, doc.file), variant))
    return out


# --------------------------------------------------------------------------- derive


def _add_label(sid: str, suffix: str) -> str:
    if not suffix:
        return sid
    if sid.endswith("]") and "[" in sid:
        return sid[:-1] + "," + suffix + "]"
    return f"{sid}[{suffix}]"


def _parse_suffix(suffix: str) -> dict[str, Any]:
    out: dict[str, Any] = {}
    for part in filter(None, suffix.split(",")):
        key, sep, value = part.partition("=")
        if not sep:
            out[key] = True
            continue
        parsed: Any = value
        for conv in (int, float):
            try:
                parsed = conv(value)
                break
            except ValueError:
                pass
        out[key] = parsed
    return out


def derive(scenario: Scenario, overrides: dict[str, Any], suffix: str = "", *,
           variant: dict[str, Any] | None = None) -> Scenario:
    """A re-validated copy of `scenario` with dotted-path `overrides` applied.

    `suffix` is a variant label added to the id: `derive(s, {"payloads.crate.mass": 8}, "mass=8")`
    turns `rear-load[speed=0.4]` into `rear-load[speed=0.4,mass=8]`. The label's `key=value` pairs go
    into `.variant` (numbers parsed) unless `variant` gives them explicitly. Raises `ScenarioErrors`
    when the result is invalid (a bad path, a value out of range).
    """
    data = copy.deepcopy(scenario.document)
    locs = scenario.locations.copy() if scenario.locations is not None else Locations(Loc(scenario.source, 1, 1))
    where = locs.value(())
    errors: list[ScenarioError] = []
    for dotted, value in overrides.items():
        try:
            concrete, created = set_path(data, dotted, copy.deepcopy(value), where=where)
        except ScenarioError as e:
            errors.append(e)
            continue
        for p in created:
            locs.values.setdefault(p, where)
        locs.drop_under(concrete)
    if errors:
        raise ScenarioErrors(errors)
    labels = dict(scenario.variant)
    labels.update(variant if variant is not None else _parse_suffix(suffix))
    sid = _add_label(scenario.id, suffix)
    return validate_document(Document(data, locs, scenario.source), source=scenario.source,
                             variant=labels, scenario_id_=sid)
