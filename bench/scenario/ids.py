"""Scenario ids (readable) and slugs (result folder names).

The id is the name plus, for a variant, a bracketed label list:
`rear-load-trot[mass=6,speed=0.4]`. The slug is the id restricted to
`[A-Za-z0-9._-]` for use as a directory name: `rear-load-trot.mass-6.speed-0.4`.
A slug is never empty, never `.`/`..` or hidden (no leading dot), and at most
`MAX_SLUG_CHARS` long (longer ids are cut and end in a short hash so that
distinct ids keep distinct slugs).
"""

from __future__ import annotations

import hashlib
import json
import re
from typing import Any

MAX_SLUG_CHARS = 120
MAX_LABEL_VALUE_CHARS = 24

_UNSAFE = re.compile(r"[^A-Za-z0-9._-]+")
_UNSAFE_VALUE = re.compile(r"[^A-Za-z0-9._+-]+")


def sanitize_name(name: str) -> str:
    """A scenario name restricted to `[A-Za-z0-9._-]` (runs of anything else become '-')."""
    s = _UNSAFE.sub("-", name).strip("-.")
    s = re.sub(r"\.{2,}", ".", s)
    return s or "scenario"


def format_label_value(value: Any) -> str:
    """How a variant value is written in an id: 6, 0.4, true, ice, or compact JSON for lists/mappings."""
    if isinstance(value, bool):
        text = "true" if value else "false"
    elif value is None:
        text = "null"
    elif isinstance(value, float):
        text = str(int(value)) if value.is_integer() and abs(value) < 1e16 else repr(value)
    elif isinstance(value, (int, str)):
        text = str(value)
    else:
        text = json.dumps(value, separators=(",", ":"), sort_keys=True)
    text = _UNSAFE_VALUE.sub("-", text).strip("-") or "-"
    if len(text) > MAX_LABEL_VALUE_CHARS:
        text = text[: MAX_LABEL_VALUE_CHARS - 7] + "~" + hashlib.sha256(text.encode()).hexdigest()[:6]
    return text


def scenario_id(name: str, variant: dict[str, Any] | None = None) -> str:
    """`name[label=value,...]` (just the sanitised name without a variant)."""
    base = sanitize_name(name)
    if not variant:
        return base
    labels = ",".join(f"{sanitize_name(str(k))}={format_label_value(v)}" for k, v in variant.items())
    return f"{base}[{labels}]"


def scenario_slug(sid: str) -> str:
    """A directory name for `sid`, restricted to `[A-Za-z0-9._-]`."""
    s = sid.replace("[", ".").replace(",", ".").replace("=", "-").replace("]", "")
    s = _UNSAFE.sub("-", s)
    s = re.sub(r"\.{2,}", ".", s).strip(".-")
    if not s:
        s = "scenario"
    if len(s) > MAX_SLUG_CHARS:
        digest = hashlib.sha256(sid.encode("utf-8")).hexdigest()[:10]
        s = s[: MAX_SLUG_CHARS - 11].rstrip(".-") + "-" + digest
    return s
