"""JSON Schema (draft 2020-12) of scenario files, generated from `schema.py`.

Editors use it to validate and complete scenario YAML. It carries each
field's description (with unit), default, range and choices, and rejects
unknown keys. Rules across fields (an event before the end, terrain order,
substeps) are only checked by the loader.
"""

from __future__ import annotations

import dataclasses
from typing import Any, Literal, get_args, get_origin

from bench.scenario import schema
from bench.scenario.validate import field_hint, is_union, yaml_fields

DIALECT = "https://json-schema.org/draft/2020-12/schema"


def _describe(meta: dict) -> str:
    text = meta.get("doc") or ""
    if meta.get("unit"):
        text += f" [{meta['unit']}]"
    if meta.get("default_doc"):
        text += f" (default: {meta['default_doc']})"
    return text


def _jsonable(value: Any) -> Any:
    if isinstance(value, tuple):
        return [_jsonable(v) for v in value]
    if dataclasses.is_dataclass(value):
        return None
    return value


def _bounds(meta: dict) -> dict:
    out = {}
    for key, name in (("ge", "minimum"), ("gt", "exclusiveMinimum"), ("le", "maximum"), ("lt", "exclusiveMaximum")):
        if meta.get(key) is not None:
            out[name] = meta[key]
    return out


class _Gen:
    def __init__(self) -> None:
        self.defs: dict[str, Any] = {}

    def ref(self, cls: type) -> dict:
        name = cls.__name__
        if name not in self.defs:
            self.defs[name] = {}  # placeholder against recursion
            self.defs[name] = self.object(cls)
        return {"$ref": f"#/$defs/{name}"}

    def object(self, cls: type) -> dict:
        props: dict[str, Any] = {}
        required: list[str] = []
        unless: dict[str, list[str]] = {}
        for f in yaml_fields(cls):
            meta = dict(f.metadata)
            if meta.get("json") is not None:
                s = dict(meta["json"])
            else:
                s = self.type(field_hint(cls, f.name), meta, f.default == "")
            desc = _describe(meta)
            if desc:
                s = {"description": desc, **s} if "$ref" not in s else {"description": desc, "allOf": [s]}
            if f.default is not dataclasses.MISSING:
                d = _jsonable(f.default)
                if d is not None or f.default is None:
                    s["default"] = d
            elif f.default_factory is not dataclasses.MISSING:  # type: ignore[misc]
                pass
            elif meta.get("required_unless"):
                unless.setdefault(meta["required_unless"], []).append(f.name)
            else:
                required.append(f.name)
            props[f.name] = s
        out: dict[str, Any] = {"type": ["object", "null"], "properties": props, "additionalProperties": False}
        doc = (cls.__doc__ or "").strip().splitlines()
        if doc:
            out = {"description": doc[0], **out}
        if required:
            out["required"] = required
        if unless:
            out["allOf"] = [{"anyOf": [{"required": names},
                                       {"required": [alt], "properties": {alt: {"not": {"type": "null"}}}}]}
                            for alt, names in unless.items()]
        return out

    def type(self, tp: Any, meta: dict, allow_empty: bool = False) -> dict:
        table = schema.UNIONS.get(tp)
        if table is not None:   # a one-key item: a Union of kinds, or a marker whose kinds come from a registry
            return {"type": "object", "minProperties": 1, "maxProperties": 1,
                    "properties": {k: self.ref(c) for k, c in table.items()}, "additionalProperties": False}
        if is_union(tp):
            args = get_args(tp)
            rest = [a for a in args if a is not type(None)]
            inner = self.type(rest[0], meta, allow_empty) if len(rest) == 1 else {"anyOf": [
                self.type(a, meta, allow_empty) for a in rest]}
            if len(rest) < len(args):
                return {"anyOf": [inner, {"type": "null"}]}
            return inner
        if tp is bool:
            return {"type": "boolean"}
        if tp is int:
            return {"type": "integer", **_bounds(meta)}
        if tp is float:
            return {"type": "number", **_bounds(meta)}
        if tp is str:
            return {"type": "string"} if allow_empty else {"type": "string", "minLength": 1}
        if get_origin(tp) is Literal:
            return {"enum": list(get_args(tp))}
        if get_origin(tp) is tuple:
            args = get_args(tp)
            item_meta = {k: v for k, v in meta.items() if k not in ("min_items", "max_items")}
            if len(args) == 2 and args[1] is Ellipsis:
                s: dict[str, Any] = {"type": ["array", "null"], "items": self.type(args[0], item_meta)}
                if meta.get("min_items"):
                    s["minItems"] = meta["min_items"]
                if meta.get("max_items"):
                    s["maxItems"] = meta["max_items"]
                return s
            return {"type": "array", "prefixItems": [self.type(a, item_meta) for a in args],
                    "minItems": len(args), "maxItems": len(args), "items": False}
        if dataclasses.is_dataclass(tp):
            return self.ref(tp)
        return {}


def scenario_json_schema() -> dict:
    """The JSON Schema of a scenario file (a fresh dict each call)."""
    gen = _Gen()
    gen.defs["criteria"] = schema._criteria_json()
    top = gen.object(schema.Scenario)
    top["type"] = "object"
    required = top.pop("required", [])
    top["properties"]["extends"] = {"type": "string", "minLength": 1,
                                    "description": "another scenario file to inherit from (relative to this one); "
                                                   "mappings are deep-merged, lists replaced"}
    top["properties"]["matrix"] = {
        "type": "object", "minProperties": 1,
        "description": "dotted.path -> [values]: one variant per combination, id name[label=value,...]",
        "additionalProperties": {"type": "array", "minItems": 1}}
    # a file that extends another may leave required fields to its base
    top["if"] = {"required": ["extends"]}
    top["then"] = {}
    top["else"] = {"required": required}
    return {
        "$schema": DIALECT,
        "$id": "https://quadruped-bench.invalid/scenario.schema.json",
        "title": "quadruped-bench scenario",
        **top,
        "$defs": gen.defs,
    }
