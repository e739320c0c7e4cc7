"""The scenario format page, from the schema definitions in `bench.scenario.schema`."""

from __future__ import annotations

import dataclasses
import types
from pathlib import Path
from typing import Any, Literal, Union, get_args, get_origin

from bench.docgen.md import code, docstring, num, table, value
from bench.docgen import Page

PAGE = Page(
    file="scenario-format.md",
    title="Scenario format",
    sources="bench/scenario/schema.py (and the fault kinds of bench/faults/)",
    for_whom="**For** anyone writing or reviewing a scenario file; **at the end** you know every key a "
             "scenario may have, its unit, range and default. The tutorial "
             "[your first stress scenario](../tutorial/first-scenario.md) shows them in use.",
)


def _unwrap_optional(tp: Any) -> Any:
    if get_origin(tp) in (Union, types.UnionType):
        args = [a for a in get_args(tp) if a is not type(None)]
        if len(args) == 1:
            return args[0]
    return tp


def _type_text(tp: Any) -> str:
    from bench.scenario.schema import UNIONS

    tp = _unwrap_optional(tp)
    if tp in UNIONS:
        return "one-key mapping: " + ", ".join(sorted(_builtin_kinds(UNIONS[tp])))
    origin = get_origin(tp)
    if origin is Literal:
        return "one of " + ", ".join(str(a) for a in get_args(tp))
    if origin in (tuple, list):
        args = get_args(tp)
        if len(args) == 2 and args[1] is Ellipsis:
            return "list of " + _type_text(args[0])
        return "[" + ", ".join(_type_text(a) for a in args) + "]"
    if origin in (Union, types.UnionType):
        return " or ".join(_type_text(a) for a in get_args(tp))
    if origin is dict or tp is dict:
        return "mapping"
    if dataclasses.is_dataclass(tp):
        return "mapping"
    if tp is Any:
        return "see meaning"
    return {float: "number", int: "integer", str: "text", bool: "true/false", Path: "path"}.get(tp, str(tp))


def _range_text(meta: dict) -> str:
    lo = "[" + num(meta["ge"]) if meta.get("ge") is not None else (
        "(" + num(meta["gt"]) if meta.get("gt") is not None else None)
    hi = num(meta["le"]) + "]" if meta.get("le") is not None else (
        num(meta["lt"]) + ")" if meta.get("lt") is not None else None)
    if lo is None and hi is None:
        text = ""
    else:
        text = f"{lo or '(-inf'}, {hi or 'inf)'}"
    if meta.get("min_items"):
        text += (", " if text else "") + f"at least {meta['min_items']} items"
    return text


def _default_text(f: dataclasses.Field) -> str:
    meta = f.metadata
    if meta.get("default_doc"):
        return meta["default_doc"]
    if f.default is not dataclasses.MISSING:
        return value(f.default)
    if f.default_factory is not dataclasses.MISSING:  # type: ignore[misc]
        return value(f.default_factory())  # type: ignore[misc]
    if meta.get("required_unless"):
        return f"required (or set `{meta['required_unless']}`)"
    return "required"


def _builtin_kinds(kinds: Any) -> dict[str, type]:
    """Kind name -> schema class, only the bench's own (a plugin's kinds are its own to document)."""
    out = {}
    for name in kinds:
        cls = kinds[name]
        if cls.__module__.startswith("bench."):
            out[name] = cls
    return out


def _fields_table(cls: type) -> str:
    from bench.scenario.validate import field_hint, yaml_fields

    rows = []
    for f in yaml_fields(cls):
        meta = f.metadata
        rows.append([code(f.name), _type_text(field_hint(cls, f.name)), _default_text(f),
                     meta.get("unit") or "", _range_text(meta), meta.get("doc") or ""])
    return table(["key", "type", "default", "unit", "range", "meaning"], rows)


def _nested(cls: type, path: str) -> list[tuple[str, type]]:
    """(path, class) of every mapping below ``cls``, depth first in field order."""
    from bench.scenario.schema import UNIONS
    from bench.scenario.validate import field_hint, yaml_fields

    out: list[tuple[str, type]] = []
    for f in yaml_fields(cls):
        if f.metadata.get("json") is not None:
            continue  # a custom shape (robot, criteria, randomize): described in its row
        tp = _unwrap_optional(field_hint(cls, f.name))
        sub = f"{path}.{f.name}" if path else f.name
        if get_origin(tp) in (tuple, list) and len(get_args(tp)) == 2 and get_args(tp)[1] is Ellipsis:
            tp = _unwrap_optional(get_args(tp)[0])
            sub += "[]"
        if tp in UNIONS:
            for kind, kcls in sorted(_builtin_kinds(UNIONS[tp]).items(), key=lambda kv: kv[0]):
                out.append((f"{sub}.{kind}", kcls))
                out += _nested(kcls, f"{sub}.{kind}")
        elif dataclasses.is_dataclass(tp):
            out.append((sub, tp))
            out += _nested(tp, sub)
    return out


def _anchor(path: str) -> str:
    return "".join(ch for ch in path.lower() if ch.isalnum() or ch in "-_ ").replace(" ", "-")


def body() -> str:
    from bench.scenario.schema import Scenario

    parts = [
        "Units are SI (m, s, kg, N, rad) except where a key ends in `_deg`. Ranges: `[a, b]` includes "
        "the end, `(a, b)` excludes it. Rules across fields (an event after the end, overlapping terrain, "
        "a drop before an attach) are checked by `bench check`; `bench schema` writes the same "
        "definitions as a JSON Schema for editors. A path such as `terrain[].slope` is an item of the "
        "`terrain` list written as `- slope: {...}`.",
        "",
        "Sections: " + ", ".join(f"[`{p}`](#{_anchor(p)})" for p, _ in _nested(Scenario, "")) + ".",
        "",
        "## Top level",
        "",
        docstring(Scenario).split("\n\n")[0],
        "",
        _fields_table(Scenario),
        "`criteria` names are listed in [metrics and criteria](metrics-and-criteria.md).",
        "",
    ]
    for path, cls in _nested(Scenario, ""):
        parts += [f"## {path}", "", docstring(cls).split("\n\n")[0], "", _fields_table(cls)]
    return "\n".join(parts)
