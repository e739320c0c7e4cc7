"""The generic validator: raw document + locations -> schema dataclasses, or located errors.

It reads the field declarations in `schema.py` (type annotations plus `spec`
metadata) and never special-cases a field by name; the few fields with an
unusual YAML shape bring their own `parse` function. Every problem found is
collected (not just the first) and turned into one `ScenarioError` at the
offending value's line and column.
"""

from __future__ import annotations

import copy
import dataclasses
import hashlib
import json
import math
import types
import typing
from collections.abc import Iterable
from typing import Any, Literal, Union, get_args, get_origin

from bench.errors import ScenarioError, ScenarioErrors
from bench.scenario import schema
from bench.scenario.ids import scenario_id, scenario_slug
from bench.scenario.yamlload import Document, Locations, dotted


class _Invalid:
    def __repr__(self) -> str:
        return "INVALID"


INVALID: Any = _Invalid()
_NONE = type(None)
_HINTS: dict[type, dict[str, Any]] = {}


def _hints(cls: type) -> dict[str, Any]:
    h = _HINTS.get(cls)
    if h is None:
        h = _HINTS[cls] = typing.get_type_hints(cls)
    return h


def yaml_fields(cls: type) -> list[dataclasses.Field]:
    return [f for f in dataclasses.fields(cls) if f.metadata.get("yaml", True)]


def field_hint(cls: type, name: str) -> Any:
    return _hints(cls)[name]


def is_union(tp: Any) -> bool:
    return get_origin(tp) in (Union, types.UnionType)


def did_you_mean(word: str, choices: Iterable[str]) -> str | None:
    from bench.suggest import did_you_mean as suggest

    return suggest(word, choices)


def describe(raw: Any) -> str:
    if raw is None:
        return "null"
    if isinstance(raw, bool):
        return "true" if raw else "false"
    if isinstance(raw, int):
        return f"the integer {raw}"
    if isinstance(raw, float):
        return f"the number {raw:g}"
    if isinstance(raw, str):
        shown = raw if len(raw) <= 40 else raw[:37] + "..."
        return f"the text {shown!r}"
    if isinstance(raw, list):
        return f"a list of {len(raw)}"
    if isinstance(raw, dict):
        return "a mapping"
    return type(raw).__name__


def _u(unit: str | None) -> str:
    return f" {unit}" if unit else ""


def _num(x: float) -> str:
    return f"{x:g}" if isinstance(x, float) else str(x)


class Validator:
    """One validation pass over one document; `errors` collects every problem."""

    INVALID = INVALID

    def __init__(self, locs: Locations) -> None:
        self.locs = locs
        self.errors: list[ScenarioError] = []
        self.top: dict[str, Any] = {}  # validated top-level values so far (duration, timestep, seed...)

    # ------------------------------------------------------------------ reporting
    def fail(self, path: tuple, message: str, hint: str | None = None, *, at_key: bool = False,
             field: tuple | None = None) -> Any:
        """Record an error at `path` (its value, or its key); `field` names another path (a missing key)."""
        loc = self.locs.key(path) if at_key else self.locs.value(path)
        name = dotted(field if field is not None else path)
        self.errors.append(ScenarioError(loc.file, loc.line, loc.col, name, message, hint))
        return INVALID

    def unknown_key(self, path: tuple, key: str, choices: Iterable[str], what: str = "key") -> Any:
        choices = list(choices)
        hint = did_you_mean(key, choices) or ("accepted: " + ", ".join(choices) if choices else None)
        return self.fail(path, f"unknown {what} {key!r}", hint, at_key=True)

    describe = staticmethod(describe)

    def file_of(self, path: tuple) -> str | None:
        loc = self.locs.value(path)
        return loc.file if loc.line > 0 else None

    # ------------------------------------------------------------------ conversion
    def convert(self, tp: Any, raw: Any, path: tuple, meta: dict) -> Any:
        if tp is Any:
            return copy.deepcopy(raw)
        if tp in schema.UNIONS and not is_union(tp):   # a one-key item whose kinds come from a registry
            return self._one_key(schema.UNIONS[tp], raw, path)
        if is_union(tp):
            return self._union(tp, raw, path, meta)
        origin = get_origin(tp)
        if tp is float or tp is int:
            return self._number(tp, raw, path, meta)
        if tp is bool:
            if not isinstance(raw, bool):
                return self.fail(path, f"expected true or false, got {describe(raw)}")
            return raw
        if tp is str:
            if not isinstance(raw, str):
                hint = "quote it" if isinstance(raw, (int, float, bool)) or raw is None else None
                return self.fail(path, f"expected text, got {describe(raw)}", hint)
            if not raw.strip() and not meta.get("allow_empty"):
                return self.fail(path, "must not be empty")
            return raw
        if origin is Literal:
            choices = get_args(tp)
            if isinstance(raw, str) and raw in choices:
                return raw
            hint = did_you_mean(raw, choices) if isinstance(raw, str) else None
            return self.fail(path, f"expected one of {', '.join(map(str, choices))}; got {describe(raw)}", hint)
        if origin is tuple:
            return self._tuple(tp, raw, path, meta)
        if dataclasses.is_dataclass(tp):
            return self.build(tp, raw, path)
        raise TypeError(f"schema type {tp!r} at {dotted(path)} has no converter")  # a bug in schema.py

    def _union(self, tp: Any, raw: Any, path: tuple, meta: dict) -> Any:
        args = get_args(tp)
        rest = [a for a in args if a is not _NONE]
        if raw is None:
            if len(rest) < len(args):
                return None
        table = schema.UNIONS.get(tp)
        if table is not None:
            return self._one_key(table, raw, path)
        if len(rest) == 1:
            return self.convert(rest[0], raw, path, meta)
        raise TypeError(f"schema union {tp!r} at {dotted(path)} has no converter")

    def _number(self, tp: type, raw: Any, path: tuple, meta: dict) -> Any:
        integer = tp is int
        want = "an integer" if integer else "a number"
        if isinstance(raw, bool) or not isinstance(raw, (int, float)):
            hint = None
            if isinstance(raw, str):
                head = raw.strip().split(" ")[0]
                try:
                    float(head)
                    hint = f"write the number alone ({head}); units are fixed: {meta.get('unit') or 'none'}"
                except ValueError:
                    pass
            return self.fail(path, f"expected {want}, got {describe(raw)}", hint)
        if integer and isinstance(raw, float):
            hint = f"write {int(raw)}" if math.isfinite(raw) and raw.is_integer() else None
            return self.fail(path, f"expected an integer, got {describe(raw)}", hint)
        if not integer:
            try:
                as_float = float(raw)
            except OverflowError:  # an integer with hundreds of digits
                return self.fail(path, f"must be a finite number, got an integer of about "
                                 f"{int(raw.bit_length() * 0.30103) + 1} digits")
            if not math.isfinite(as_float):
                return self.fail(path, f"must be a finite number, got {raw}")
            raw = as_float
        unit = _u(meta.get("unit"))
        for key, ok, words in (("ge", lambda v, b: v >= b, "at least"), ("gt", lambda v, b: v > b, "more than"),
                               ("le", lambda v, b: v <= b, "at most"), ("lt", lambda v, b: v < b, "less than")):
            bound = meta.get(key)
            if bound is not None and not ok(raw, bound):
                return self.fail(path, f"must be {words} {_num(bound)}{unit}, got {_num(raw)}{unit}")
        return raw

    def _tuple(self, tp: Any, raw: Any, path: tuple, meta: dict) -> Any:
        args = get_args(tp)
        variable = len(args) == 2 and args[1] is Ellipsis
        if raw is None and variable:
            return ()
        if not isinstance(raw, list):
            if variable:
                return self.fail(path, f"expected a list, got {describe(raw)}", "write [a, b] or '- a' lines")
            return self.fail(path, f"expected a list of {len(args)} numbers, got {describe(raw)}",
                             "e.g. [0.0, 0.0, 0.0]" if len(args) == 3 else "e.g. [lo, hi]")
        if variable:
            lo, hi = meta.get("min_items"), meta.get("max_items")
            if lo is not None and len(raw) < lo:
                return self.fail(path, f"expected at least {lo} item{'s' if lo > 1 else ''}, got {len(raw)}")
            if hi is not None and len(raw) > hi:
                return self.fail(path, f"expected at most {hi} items, got {len(raw)}")
            item_types = [args[0]] * len(raw)
        else:
            if len(raw) != len(args):
                return self.fail(path, f"expected exactly {len(args)} values, got {len(raw)}",
                                 "[x, y, z]" if len(args) == 3 else "[lo, hi]")
            item_types = list(args)
        item_meta = {k: v for k, v in meta.items() if k not in ("min_items", "max_items", "time")}
        out = [self.convert(t, r, path + (i,), item_meta) for i, (t, r) in enumerate(zip(item_types, raw))]
        if any(v is INVALID for v in out):
            return INVALID
        return tuple(out)

    def _one_key(self, table: dict[str, type], raw: Any, path: tuple) -> Any:
        what = {id(schema.TERRAIN_KINDS): "terrain", id(schema.DISTURBANCE_KINDS): "disturbance",
                id(schema.FAULT_KINDS): "fault"}.get(id(table), "item")
        example = f"- {next(iter(table))}: {{...}}"
        if not isinstance(raw, dict):
            return self.fail(path, f"expected a one-key mapping naming the {what} kind, got {describe(raw)}",
                             f"write '{example}'; kinds: {', '.join(table)}")
        if len(raw) != 1:
            kinds = [k for k in raw if k in table]
            if len(kinds) == 1:
                kind = kinds[0]
                names = {f.name for f in yaml_fields(table[kind])}
                for other in raw:
                    if other != kind:
                        if other in names:
                            self.fail(path + (other,), f"{other!r} is beside {kind!r}, not inside it",
                                      f"indent the fields of {kind!r} under it", at_key=True)
                        else:
                            self.fail(path + (other,), f"a {what} item has one key (the kind); "
                                      f"{other!r} is extra", at_key=True)
                return INVALID
            if not raw:
                return self.fail(path, f"empty mapping: expected one key naming the {what} kind",
                                 f"kinds: {', '.join(table)}")
            return self.fail(path, f"a {what} item has exactly one key (the kind), got {len(raw)}: "
                             f"{', '.join(map(str, raw))}", f"write each as its own '{example}' item")
        kind, body = next(iter(raw.items()))
        if kind not in table:
            broken = getattr(table, "load_errors", {}).get(kind)   # a registered plugin that fails to load
            if broken:
                return self.fail(path + (kind,), f"{what} kind {kind!r} cannot be loaded: {broken}",
                                 "check the package that registers it", at_key=True)
            return self.unknown_key(path + (kind,), kind, table, what=f"{what} kind")
        return self.build(table[kind], body, path + (kind,))

    # ------------------------------------------------------------------ dataclasses
    def build(self, cls: type, raw: Any, path: tuple) -> Any:
        if raw is None:
            raw = {}
        fields = yaml_fields(cls)
        if not isinstance(raw, dict):
            keys = ", ".join(f.name for f in fields)
            return self.fail(path, f"expected a mapping, got {describe(raw)}", f"keys: {keys}")
        names = [f.name for f in fields]
        ok = True
        for key in raw:
            if key not in names:
                self.unknown_key(path + (key,), key, names)
                ok = False
        hints = _hints(cls)
        dynamic = cls._defaults(raw) if hasattr(cls, "_defaults") else {}
        values: dict[str, Any] = {}
        for f in fields:
            p = path + (f.name,)
            meta = dict(f.metadata)
            if f.default == "":
                meta["allow_empty"] = True
            if f.name in raw:
                parse = meta.get("parse")
                v = parse(self, raw[f.name], p) if parse else self.convert(hints[f.name], raw[f.name], p, meta)
                if v is INVALID:
                    ok = False
                    continue
                if meta.get("time") and v is not None and isinstance(self.top.get("duration"), float):
                    duration = self.top["duration"]
                    if v > duration or (meta["time"] == "event" and v == duration):
                        self.fail(p, f"{f.name} {_num(v)} s is not before the end of the scenario "
                                  f"(duration {_num(duration)} s)",
                                  "an event at or after the end never happens" if meta["time"] == "event" else None)
            elif f.name in dynamic:
                v = dynamic[f.name]
            elif f.default is not dataclasses.MISSING:
                v = f.default
            elif f.default_factory is not dataclasses.MISSING:
                v = f.default_factory()
            else:
                alt = meta.get("required_unless")
                self.fail(path, f"missing required field {f.name!r}" + (f" (or set {alt!r})" if alt else ""),
                          meta.get("doc"), field=p)
                ok = False
                continue
            values[f.name] = v
            if not path:
                self.top[f.name] = v
            check = meta.get("check")
            if check is not None and f.name in raw:
                for rel, message, hint in check(list(enumerate(v))):
                    self.fail(p + tuple(rel), message, hint)
        if hasattr(cls, "_value_problems"):
            for rel, message, hint in cls._value_problems(values):
                self.fail(path + tuple(rel), message, hint)
        if not ok:
            return INVALID
        obj = cls(**values)
        # Cross-field problems are recorded but keep the (well-typed) object, so that checks
        # further up (payload names, terrain order) still run and report in the same pass.
        if hasattr(obj, "_problems"):
            for rel, message, hint in obj._problems(self):
                self.fail(path + tuple(rel), message, hint)
        if hasattr(obj, "_finalize"):
            obj = obj._finalize(self)
        return obj


def canonical_json(data: Any) -> str:
    return json.dumps(data, sort_keys=True, separators=(",", ":"), ensure_ascii=False, allow_nan=True)


def content_hash(data: Any) -> str:
    return hashlib.sha256(canonical_json(data).encode("utf-8")).hexdigest()


def validate_document(doc: Document, *, source: str, variant: dict | None = None,
                      scenario_id_: str | None = None) -> schema.Scenario:
    """Validate a merged document (no `extends`/`matrix` left) into a `Scenario`.

    Raises `ScenarioErrors` with every problem found.
    """
    v = Validator(doc.locs)
    result = v.build(schema.Scenario, doc.data, ())
    if v.errors or result is INVALID:
        raise ScenarioErrors(v.errors or [ScenarioError(source, 1, 1, "", "invalid scenario")])
    variant = dict(variant or {})
    sid = scenario_id_ if scenario_id_ is not None else scenario_id(result.name, variant)
    return dataclasses.replace(
        result,
        id=sid,
        slug=scenario_slug(sid),
        source=source,
        content_hash=content_hash(doc.data),
        document=doc.data,
        variant=variant,
        locations=doc.locs,
    )
