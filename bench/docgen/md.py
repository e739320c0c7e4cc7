"""Small Markdown helpers for the generated pages: tables, inline code, value formatting."""

from __future__ import annotations

import dataclasses
import inspect
from pathlib import PurePath
from typing import Any


_ROLE = __import__("re").compile(r":[a-z]+:`~?([^`]+)`")


def strip_roles(text: str) -> str:
    """Sphinx roles (``:class:`X```) to plain code (`X`)."""
    return _ROLE.sub(r"`\1`", text)


def cell(text: Any) -> str:
    """Text safe inside a table cell (pipes escaped, one line)."""
    return strip_roles(" ".join(str(text).split())).replace("``", "`").replace("|", "\\|")


def table(header: list[str], rows: list[list[Any]]) -> str:
    out = ["| " + " | ".join(header) + " |", "|" + "---|" * len(header)]
    out += ["| " + " | ".join(cell(c) for c in r) + " |" for r in rows]
    return "\n".join(out) + "\n"


def code(text: Any) -> str:
    return f"`{text}`"


def value(v: Any) -> str:
    """A Python value as it would be written in YAML."""
    if v is None:
        return "null"
    if v is True:
        return "true"
    if v is False:
        return "false"
    if isinstance(v, (tuple, list)):
        return "[" + ", ".join(value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{" + ", ".join(f"{k}: {value(x)}" for k, x in v.items()) + "}"
    if isinstance(v, PurePath):
        return v.as_posix()
    if isinstance(v, str) and not v:
        return '""'
    if isinstance(v, (int, float)):
        return num(v)
    if dataclasses.is_dataclass(v):
        return value({f.name: getattr(v, f.name) for f in dataclasses.fields(v)
                      if f.metadata.get("yaml", True) and getattr(v, f.name) is not None})
    return str(v)


def num(x: float) -> str:
    """A number written short but exact enough to read: integers in full, others with %g."""
    if float(x).is_integer() and abs(x) < 1e16:
        return str(int(x))
    return f"{x:g}"


def docstring(obj: Any) -> str:
    """The object's docstring, dedented (empty when it has none)."""
    return inspect.cleandoc(obj.__doc__ or "") if obj.__doc__ else ""


def rst_to_md(text: str) -> str:
    """Docstring conventions to Markdown: ``x`` -> `x`, a ``::`` block -> a fenced block."""
    lines = text.splitlines()
    out: list[str] = []
    i = 0
    while i < len(lines):
        line = lines[i]
        if line.rstrip().endswith("::"):
            head = line.rstrip()[:-2].rstrip()
            out.append(head.replace("``", "`") + (":" if head and not head.endswith(":") else ""))
            i += 1
            block: list[str] = []
            while i < len(lines) and (not lines[i].strip() or lines[i].startswith("    ")):
                block.append(lines[i][4:] if lines[i].startswith("    ") else "")
                i += 1
            while block and not block[0].strip():
                block.pop(0)
            while block and not block[-1].strip():
                block.pop()
            out += ["", "```text", *block, "```", ""]
            continue
        out.append(line.replace("``", "`"))
        i += 1
    return strip_roles("\n".join(out))


def source_comments(cls: Any) -> dict[str, str]:
    """Public attributes named in a class's source, with what the code says about each: class-body fields
    (``name: T = ...``) and ``self.name = ...`` assignments, with their trailing ``# comment`` or a ``#:``
    comment on the line above ("" when there is none)."""
    import re

    try:
        src = inspect.getsource(cls)
    except (OSError, TypeError):
        return {}
    lines = src.splitlines()
    while lines and not lines[0].lstrip().startswith("class "):   # decorators (``@dataclass``) come first
        lines.pop(0)
    body_indent = None
    for line in lines[1:]:
        if line.strip():
            body_indent = len(line) - len(line.lstrip())
            break
    out: dict[str, str] = {}
    above = ""
    field_re = re.compile(r"^([A-Za-z][A-Za-z0-9_]*)\s*:[^=]*(=[^=].*)?$")
    self_re = re.compile(r"^\s*self\.([A-Za-z][A-Za-z0-9_]*)\s*(?::[^=]*)?=[^=]")
    for line in lines[1:]:
        stripped = line.strip()
        if stripped.startswith("#:"):
            above = (above + " " + stripped[2:].strip()).strip()
            continue
        code_part, _, comment = line.partition("  #")
        indent = len(line) - len(line.lstrip())
        m = field_re.match(code_part.strip()) if indent == body_indent else None
        name = m.group(1) if m else None
        if name is None:
            m2 = self_re.match(code_part)
            name = m2.group(1) if m2 else None
        if name and not name.startswith("_"):
            text = comment.strip() or above
            if text or name not in out:
                out[name] = out.get(name) or text
        above = ""
    return out


def _sig(fn: Any) -> str:
    return str(inspect.signature(fn)).replace("(self, ", "(").replace("(self)", "()").replace("(cls, ", "(").replace("(cls)", "()")


def members_table(cls: Any, skip: tuple[str, ...] = ()) -> str:
    """Public fields, attributes, properties and methods of ``cls`` with what the code says about them."""
    comments = source_comments(cls)
    rows = []
    seen = set()
    if dataclasses.is_dataclass(cls):
        for f in dataclasses.fields(cls):
            if f.name.startswith("_") or f.name in skip:
                continue
            seen.add(f.name)
            tp = f.type if isinstance(f.type, str) else getattr(f.type, "__name__", str(f.type))
            rows.append([code(f.name), code(tp), comments.get(f.name, "")])
    for name, obj in sorted(vars(cls).items()):
        if name.startswith("_") or name in seen or name in skip:
            continue
        if isinstance(obj, property):
            rows.append([code(name), "property", (docstring(obj.fget).split("\n\n")[0] if obj.fget else "")])
        elif isinstance(obj, (classmethod, staticmethod)):
            fn = obj.__func__
            rows.append([code(f"{name}{_sig(fn)}"), "method", docstring(fn).split("\n\n")[0]])
        elif inspect.isfunction(obj):
            rows.append([code(f"{name}{_sig(obj)}"), "method", docstring(obj).split("\n\n")[0]])
    for name, text in sorted(comments.items()):
        if name not in seen and not any(r[0].startswith(f"`{name}") for r in rows) and name not in skip:
            rows.append([code(name), "attribute", text])
    return table(["name", "kind", "meaning"], rows)
