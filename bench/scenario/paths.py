"""Dotted paths into a raw scenario document.

`payloads.crate.mass` walks mapping keys; at a list, a component is either an
index (`terrain.0.slope.angle_deg`) or the `name` of a mapping item
(`payloads.crate`). Used by `matrix:`, `randomize:` and `derive()`. A path that
does not resolve is a `ScenarioError` located where the path was written.
"""

from __future__ import annotations

from typing import Any

from bench.errors import ScenarioError
from bench.scenario.validate import did_you_mean
from bench.scenario.yamlload import Loc

_NOWHERE = Loc("<dotted path>", 1, 1)


def split_path(dotted: str, *, where: Loc | None = None) -> list[str]:
    parts = dotted.split(".") if isinstance(dotted, str) else None
    if not parts or any(not p.strip() for p in parts):
        raise _err(where, str(dotted), f"{dotted!r} is not a dotted path", "e.g. payloads.crate.mass")
    return parts


def _err(where: Loc | None, dotted: str, message: str, hint: str | None = None) -> ScenarioError:
    w = where or _NOWHERE
    return ScenarioError(w.file, w.line, w.col, dotted, message, hint)


def _kind(x: Any) -> str:
    if isinstance(x, dict):
        return "a mapping"
    if isinstance(x, list):
        return "a list"
    return f"the value {x!r}"


def _step(container: Any, part: str, dotted: str, here: str, where: Loc | None) -> Any:
    """The concrete key/index for `part` in `container` (which must exist)."""
    if isinstance(container, list):
        if part.isdigit():
            i = int(part)
            if i >= len(container):
                raise _err(where, dotted, f"{here} has {len(container)} items, no index {i}")
            return i
        for i, item in enumerate(container):
            if isinstance(item, dict) and item.get("name") == part:
                return i
        names = [str(it["name"]) for it in container if isinstance(it, dict) and "name" in it]
        hint = did_you_mean(part, names) or (f"names: {', '.join(names)}; or an index" if names else "use an index")
        raise _err(where, dotted, f"no item named {part!r} in {here}", hint)
    if isinstance(container, dict):
        return part
    raise _err(where, dotted, f"{here} is {_kind(container)}, not a mapping or a list")


def resolve_path(doc: dict, dotted: str, *, where: Loc | None = None) -> tuple:
    """The concrete path tuple (keys and indices) of an existing value."""
    node: Any = doc
    concrete: list = []
    for part in split_path(dotted, where=where):
        here = ".".join(map(str, concrete)) or "the document"
        key = _step(node, part, dotted, here, where)
        if isinstance(node, dict) and key not in node:
            raise _err(where, dotted, f"{here} has no key {part!r}", did_you_mean(part, [str(k) for k in node]))
        node = node[key]
        concrete.append(key)
    return tuple(concrete)


def get_path(doc: dict, dotted: str, *, where: Loc | None = None) -> Any:
    node: Any = doc
    for key in resolve_path(doc, dotted, where=where):
        node = node[key]
    return node


def set_path(doc: dict, dotted: str, value: Any, *, where: Loc | None = None) -> tuple[tuple, list[tuple]]:
    """Set `value` at `dotted` in place. Missing mapping keys are created.

    Returns the concrete path and the list of paths that were created (so a
    caller can give them a location).
    """
    parts = split_path(dotted, where=where)
    node: Any = doc
    concrete: list = []
    created: list[tuple] = []
    for n, part in enumerate(parts):
        here = ".".join(map(str, concrete)) or "the document"
        key = _step(node, part, dotted, here, where)
        last = n == len(parts) - 1
        if last:
            node[key] = value
            concrete.append(key)
            break
        if isinstance(node, dict) and (key not in node or node[key] is None):
            node[key] = {}
            created.append(tuple(concrete + [key]))
        node = node[key]
        concrete.append(key)
    return tuple(concrete), created
