"""How a schema field is declared: `spec(...)` metadata, the frozen-dataclass decorator, shared bounds.

The scenario schema (`bench.scenario.schema`) and every fault kind
(`bench.faults`, a user's among them) declare their fields with it, and the
scenario validator and JSON Schema generator read what it records. It sits
below both so that a kind's module never imports the scenario package (which
reads the kinds from the registry): no import cycle between the two. Imports
nothing but the standard library.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass
from typing import Any

Problem = tuple  # (relative path tuple, message, hint or None)

_MISSING = dataclasses.MISSING

#: Upper bounds that keep a scenario physically meaningful and affordable to build.
MAX_DURATION_S = 600.0
MAX_STAIR_RISE_M = 0.5
MAX_HFIELD_CELLS = 4_000_000  # rough terrain heightfield size (cells), about 16 MB of float32
MAX_LIST_ITEMS = 1000


def spec(
    default: Any = _MISSING,
    *,
    doc: str,
    unit: str | None = None,
    ge: float | None = None,
    gt: float | None = None,
    le: float | None = None,
    lt: float | None = None,
    min_items: int | None = None,
    max_items: int | None = MAX_LIST_ITEMS,
    time: str | None = None,
    parse: Any = None,
    json: dict | None = None,
    default_factory: Any = _MISSING,
    yaml: bool = True,
    default_doc: str | None = None,
    check: Any = None,
    required_unless: str | None = None,
) -> Any:
    """Declare one field.

    `ge/gt/le/lt` bound a number (for a list of numbers, every item).
    `time="event"` marks an episode time that must come before `duration`;
    `time="end"` one that may equal it. `parse` is a custom converter
    `(validator, raw, path) -> value` for the few fields whose YAML shape is not
    a plain type; `json` is then its JSON Schema. `check(items)` (list fields)
    yields problems across the items. `required_unless="preset"` marks a
    required field that another field (here a preset) can fill instead. `yaml=False` marks a
    computed attribute that is not a YAML key. `default_doc` describes a
    default that depends on other fields (the dataclass default is then None).
    """
    meta = {
        "doc": doc, "unit": unit, "ge": ge, "gt": gt, "le": le, "lt": lt,
        "min_items": min_items, "max_items": max_items, "time": time, "parse": parse, "json": json,
        "yaml": yaml, "default_doc": default_doc, "check": check,
        "required_unless": required_unless,
    }
    if default_factory is not _MISSING:
        return dataclasses.field(default_factory=default_factory, metadata=meta)
    return dataclasses.field(default=default, metadata=meta)


#: The decorator of every schema class: frozen, keyword-only.
frozen = dataclass(frozen=True, kw_only=True)


#: An episode time at which something happens (it must come before the end of the scenario).
AT = dict(doc="time", unit="s", ge=0.0, le=MAX_DURATION_S, time="event")
