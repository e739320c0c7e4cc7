"""Safe YAML loading that remembers where every value came from.

`load_yaml(path)` returns a `Document`: plain dicts, lists and scalars (str,
int, float, bool, None) plus a `Locations` side table mapping each value's path
(a tuple of mapping keys and list indices) to the file, line and column it was
written at. Validation uses it to point every error at the exact spot.

Only the YAML 1.2 core schema is understood: `true`/`false` are booleans (not
`yes`/`on`), `1e-3` is a float, `2024-01-01` stays a string. Tags other than
the core ones (`!!python/...`, `!!binary`, custom `!tags`) are rejected, and no
Python object is ever constructed. Merge keys (`<<: *anchor`) are supported.

Limits (hostile or broken input fails fast with a located error, never a
traceback or a memory blow-up):

- `MAX_FILE_BYTES`: size of one file on disk.
- `MAX_DEPTH`: nesting depth of mappings/lists, while parsing and while
  expanding aliases.
- `MAX_ALIASES`: number of alias nodes (`*name`) in one file.
- `MAX_NODES`: total number of values after alias expansion (stops "billion
  laughs" alias bombs, whose expansion is exponential in the file size).
- `MAX_STRING_CHARS`: length of one scalar.
- `MAX_DUPLICATE_KEYS`: duplicate keys reported before giving up on a file.

Values are counted while composing, before anything is built, so a file of a
million tiny values is stopped at `MAX_NODES`. The scanner and parser are
libyaml's (C) when PyYAML has it, else PyYAML's own; either way a file at the
limits is read or rejected in about a second and some tens of MB.
"""

from __future__ import annotations

import re
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any, NamedTuple

import yaml
from yaml.nodes import MappingNode, Node, ScalarNode, SequenceNode

from bench.errors import ScenarioError, ScenarioErrors
from bench.fileio import FileReadError, read_limited

MAX_FILE_BYTES = 1 << 20  # 1 MiB: scenario files are a few KiB
MAX_DEPTH = 32  # the deepest real scenario nests about 6 levels
MAX_ALIASES = 100
MAX_NODES = 20_000  # the fullest scenario here (every section of the format) has about 220 values
MAX_STRING_CHARS = 16_384
MAX_DUPLICATE_KEYS = 20

Path_ = tuple  # a value path: keys (str) and list indices (int)

_NON_PRINTABLE = re.compile("[^\x09\x0a\x0d\x20-\x7e\x85\xa0-\ud7ff\ue000-\ufffd\U00010000-\U0010ffff]")

_TAG = "tag:yaml.org,2002:"
_ALLOWED_TAGS = {_TAG + t for t in ("str", "int", "float", "bool", "null", "map", "seq", "merge")}


class Loc(NamedTuple):
    """Where a value was written: file as given, 1-based line and column."""

    file: str
    line: int
    col: int

    def __str__(self) -> str:
        return f"{self.file}:{self.line}:{self.col}"


class Locations:
    """Side table: value path -> `Loc` of the value, and of its mapping key.

    Look-ups fall back to the nearest ancestor, then to the start of the file,
    so a value made up later (an override, a default) still gets a sensible
    location.
    """

    def __init__(self, default: Loc) -> None:
        self.default = default
        self.values: dict[Path_, Loc] = {}
        self.keys: dict[Path_, Loc] = {}

    def value(self, path: Path_) -> Loc:
        path = tuple(path)
        while True:
            loc = self.values.get(path)
            if loc is not None:
                return loc
            if not path:
                return self.default
            path = path[:-1]

    def key(self, path: Path_) -> Loc:
        path = tuple(path)
        loc = self.keys.get(path)
        return loc if loc is not None else self.value(path)

    def copy(self) -> Locations:
        new = Locations(self.default)
        new.values = dict(self.values)
        new.keys = dict(self.keys)
        return new

    def drop_under(self, path: Path_) -> None:
        """Forget locations strictly below `path` (its subtree was replaced)."""
        path = tuple(path)
        n = len(path)
        for table in (self.values, self.keys):
            for p in [p for p in table if len(p) > n and p[:n] == path]:
                del table[p]

    def copy_subtree(self, src: Locations, src_path: Path_, dst_path: Path_) -> None:
        """Copy every location at or below `src_path` in `src` to `dst_path` here."""
        src_path, dst_path = tuple(src_path), tuple(dst_path)
        n = len(src_path)
        for mine, theirs in ((self.values, src.values), (self.keys, src.keys)):
            for p, loc in theirs.items():
                if p[:n] == src_path:
                    mine[dst_path + p[n:]] = loc

    def set(self, path: Path_, loc: Loc, key_loc: Loc | None = None) -> None:
        self.values[tuple(path)] = loc
        if key_loc is not None:
            self.keys[tuple(path)] = key_loc

    def __iter__(self) -> Iterator[Path_]:
        return iter(self.values)


@dataclass
class Document:
    """A loaded YAML file: plain data plus where each value was written."""

    data: dict[str, Any]
    locs: Locations
    file: str  # as given (used in messages)

    def error(self, path: Path_, message: str, hint: str | None = None, *, at_key: bool = False) -> ScenarioError:
        loc = self.locs.key(path) if at_key else self.locs.value(path)
        return ScenarioError(loc.file, loc.line, loc.col, dotted(path), message, hint)


def printable(text: str) -> str:
    """`text` with control characters, line breaks and other invisible characters escaped (one line)."""
    if text.isprintable():
        return text
    return "".join(c if c.isprintable() else c.encode("unicode_escape").decode("ascii") for c in text)


def dotted(path: Path_) -> str:
    return ".".join(printable(str(p)) for p in path)


class _Limit(Exception):
    def __init__(self, mark: Any, message: str, path: Path_ = ()) -> None:
        super().__init__(message)
        self.mark = mark
        self.message = message
        self.path = path


class _Limits:
    """Depth, alias and node-count limits enforced while composing (before anything is built)."""

    def _start_limits(self) -> None:
        self._depth = 0
        self._aliases = 0
        self._nodes = 0
        self._path: list = []   # where composing is: mapping keys and list indices, for the messages

    def _limit(self, message: str) -> _Limit:
        return _Limit(self.peek_event().start_mark, message, tuple(self._path[1:]))

    def compose_node(self, parent: Any, index: Any) -> Any:  # noqa: D401 - PyYAML hook
        # `index` is the key node of a mapping value, the position in a list, None for a key or the root
        self._path.append(index.value if isinstance(index, ScalarNode) else index if isinstance(index, int)
                          else "?")
        try:
            self._nodes += 1
            if self._nodes > MAX_NODES:
                raise self._limit(f"more than {MAX_NODES} values in one file")
            if self.check_event(yaml.AliasEvent):
                self._aliases += 1
                if self._aliases > MAX_ALIASES:
                    raise self._limit(f"more than {MAX_ALIASES} aliases (*name) in one file")
            self._depth += 1
            if self._depth > MAX_DEPTH:
                raise self._limit(f"nesting deeper than {MAX_DEPTH} levels")
            try:
                return super().compose_node(parent, index)
            finally:
                self._depth -= 1
        finally:
            self._path.pop()


class _Loader(_Limits, yaml.SafeLoader):
    """SafeLoader with YAML 1.2 core resolvers and depth/alias/node limits while composing."""

    yaml_implicit_resolvers: dict = {}  # replaced, not inherited: see module docstring

    def __init__(self, stream: str) -> None:
        super().__init__(stream)
        self._start_limits()


if getattr(yaml, "__with_libyaml__", False):
    from yaml.composer import Composer
    from yaml.constructor import SafeConstructor
    from yaml.cyaml import CParser
    from yaml.resolver import Resolver

    class _CLoader(_Limits, Composer, CParser, SafeConstructor, Resolver):
        """The same loader on libyaml's scanner and parser (in C): tens of times faster on big input.

        Only the events come from C; composing (with the limits above), tags and value resolution
        stay in Python and are the same. libyaml is a little more lenient than PyYAML's own scanner
        in a few syntax corners (a tab after ``key:``, ``?`` inside a plain scalar in a flow list).
        """

        def __init__(self, stream: str) -> None:
            CParser.__init__(self, stream)
            Composer.__init__(self)
            SafeConstructor.__init__(self)
            Resolver.__init__(self)
            self._start_limits()

    _FastLoader: type = _CLoader
else:  # pragma: no cover - PyYAML built without libyaml
    _FastLoader = _Loader


_Loader.add_implicit_resolver(_TAG + "bool", re.compile(r"^(?:true|True|TRUE|false|False|FALSE)$"), list("tTfF"))
_Loader.add_implicit_resolver(_TAG + "null", re.compile(r"^(?:~|null|Null|NULL|)$"), ["~", "n", "N", ""])
_Loader.add_implicit_resolver(
    _TAG + "int", re.compile(r"^(?:[-+]?[0-9]+|0o[0-7]+|0x[0-9a-fA-F]+)$"), list("-+0123456789")
)
_Loader.add_implicit_resolver(
    _TAG + "float",
    re.compile(
        r"^(?:[-+]?(?:\.[0-9]+|[0-9]+(?:\.[0-9]*)?)(?:[eE][-+]?[0-9]+)?"
        r"|[-+]?\.(?:inf|Inf|INF)|\.(?:nan|NaN|NAN))$"
    ),
    list("-+0123456789."),
)
_Loader.add_implicit_resolver(_TAG + "merge", re.compile(r"^<<$"), ["<"])
if _FastLoader is not _Loader:
    _FastLoader.yaml_implicit_resolvers = _Loader.yaml_implicit_resolvers


def _loc(file: str, mark: Any) -> Loc:
    return Loc(file, mark.line + 1, mark.column + 1)


def _text_loc(text: str, index: int) -> tuple[int, int]:
    line = text.count("\n", 0, index) + 1
    col = index - (text.rfind("\n", 0, index) + 1) + 1
    return line, col


class _Builder:
    """Turns a composed node graph into plain data, recording locations."""

    def __init__(self, file: str, locs: Locations) -> None:
        self.file = file
        self.locs = locs
        self.nodes = 0
        self.active: set[int] = set()
        self.errors: list[ScenarioError] = []

    def fail(self, node: Node, path: Path_, message: str, hint: str | None = None) -> ScenarioError:
        loc = _loc(self.file, node.start_mark)
        return ScenarioError(loc.file, loc.line, loc.col, dotted(path), message, hint)

    def build(self, node: Node, path: Path_, depth: int) -> Any:
        self.nodes += 1
        if self.nodes > MAX_NODES:
            raise self.fail(node, path, f"more than {MAX_NODES} values after expanding aliases", "alias bomb?")
        if depth > MAX_DEPTH:
            raise self.fail(node, path, f"nesting deeper than {MAX_DEPTH} levels (after expanding aliases)")
        if node.tag not in _ALLOWED_TAGS:
            raise self.fail(node, path, f"YAML tag {node.tag!r} is not allowed", "only plain mappings, lists, "
                            "strings, numbers, true/false and null")
        self.locs.values[path] = _loc(self.file, node.start_mark)
        if isinstance(node, ScalarNode):
            return self.scalar(node, path)
        if id(node) in self.active:
            raise self.fail(node, path, "recursive alias (a value contains itself)")
        self.active.add(id(node))
        try:
            if isinstance(node, SequenceNode):
                if node.tag != _TAG + "seq":
                    raise self.fail(node, path, f"a list cannot have tag {node.tag!r}")
                return [self.build(child, path + (i,), depth + 1) for i, child in enumerate(node.value)]
            assert isinstance(node, MappingNode)
            if node.tag != _TAG + "map":
                raise self.fail(node, path, f"a mapping cannot have tag {node.tag!r}")
            return self.mapping(node, path, depth)
        finally:
            self.active.discard(id(node))

    def scalar(self, node: ScalarNode, path: Path_) -> Any:
        value = node.value
        if len(value) > MAX_STRING_CHARS:
            raise self.fail(node, path, f"value longer than {MAX_STRING_CHARS} characters")
        tag = node.tag[len(_TAG):]
        try:
            if tag == "str":
                return value
            if tag == "null":
                return None
            if tag == "bool":
                low = value.lower()
                if low not in ("true", "false"):
                    raise ValueError(value)
                return low == "true"
            if tag == "int":
                v = value.replace("_", "")
                sign = -1 if v.startswith("-") else 1
                v = v.lstrip("+-")
                if v.startswith(("0x", "0X")):
                    return sign * int(v[2:], 16)
                if v.startswith(("0o", "0O")):
                    return sign * int(v[2:], 8)
                return sign * int(v, 10)
            if tag == "float":
                low = value.lower()
                if low in (".inf", "+.inf"):
                    return float("inf")
                if low == "-.inf":
                    return float("-inf")
                if low == ".nan":
                    return float("nan")
                return float(value)
        except ValueError:
            raise self.fail(node, path, f"{value!r} is not a valid {tag}") from None
        raise self.fail(node, path, f"a scalar cannot have tag {node.tag!r}")  # merge key used as a value

    def mapping(self, node: MappingNode, path: Path_, depth: int) -> dict[str, Any]:
        out: dict[str, Any] = {}
        first_line: dict[str, int] = {}
        merged: dict[str, Any] = {}
        for key_node, value_node in node.value:
            if key_node.tag == _TAG + "merge":
                self.merge_into(merged, value_node, path, depth)
                continue
            if not isinstance(key_node, ScalarNode) or key_node.tag != _TAG + "str":
                shown = key_node.value if isinstance(key_node, ScalarNode) else "a " + type(key_node).__name__
                # at the top level there is no field above the key: name the key itself
                where = path if path or not isinstance(key_node, ScalarNode) else (str(key_node.value),)
                raise self.fail(key_node, where, f"mapping keys must be plain strings, got {shown!r}",
                                "quote the key")
            key = key_node.value
            if len(key) > MAX_STRING_CHARS:
                raise self.fail(key_node, path, f"key longer than {MAX_STRING_CHARS} characters")
            key_loc = _loc(self.file, key_node.start_mark)
            if key in first_line:
                if len(self.errors) >= MAX_DUPLICATE_KEYS:
                    raise self.fail(key_node, path + (key,), f"more than {MAX_DUPLICATE_KEYS} duplicate keys; "
                                    "stopped reading the file")
                self.errors.append(ScenarioError(
                    key_loc.file, key_loc.line, key_loc.col, dotted(path + (key,)),
                    f"duplicate key {key!r} (first defined at line {first_line[key]})",
                    "each key may appear only once in a mapping"))
                continue
            first_line[key] = key_loc.line
            self.locs.keys[path + (key,)] = key_loc
            out[key] = self.build(value_node, path + (key,), depth + 1)
        for key, (value, sub) in merged.items():
            if key not in out:
                out[key] = value
                self.locs.copy_subtree(sub, (key,), path + (key,))
        return out

    def merge_into(self, merged: dict, value_node: Node, path: Path_, depth: int) -> None:
        sources = value_node.value if isinstance(value_node, SequenceNode) else [value_node]
        for src in sources:
            if not isinstance(src, MappingNode):
                raise self.fail(src, path, "a merge key (<<) takes a mapping or a list of mappings")
            sub_locs = Locations(self.locs.default)
            sub = _Builder(self.file, sub_locs)
            sub.nodes, sub.active = self.nodes, self.active
            data = sub.mapping(src, (), depth)
            self.nodes = sub.nodes
            self.errors.extend(sub.errors)
            for key, value in data.items():
                if key not in merged:  # earlier sources win, as in YAML 1.1
                    merged[key] = (value, _sub_view(sub_locs, key))


def _sub_view(locs: Locations, key: str) -> Locations:
    view = Locations(locs.default)
    view.copy_subtree(locs, (key,), (key,))
    return view


def _tab_near(text: str, line: int, col: int) -> int | None:
    """1-based column of a tab on ``line`` at or before ``col`` (where the scanner gave up), else None.

    Both YAML scanners report a tab only by what they could not read ("found
    character that cannot start any token", "found a tab character that violates
    indentation"); the tab itself is the useful part of the message.
    """
    lines = text.split("\n")
    if not 1 <= line <= len(lines):
        return None
    row = lines[line - 1]
    upto = row[:max(col, 1)]
    i = upto.rfind("\t")
    if i < 0:
        i = row.find("\t") if not row[:row.find("\t")].strip() else -1   # a tab in the indentation
    return i + 1 if i >= 0 else None


def load_yaml_text(text: str, file: str) -> Document:
    """Parse `text` (already decoded) as one scenario-like document: a mapping at the top."""
    file = str(file)
    bad = _NON_PRINTABLE.search(text)
    if bad:
        line, col = _text_loc(text, bad.start())
        raise ScenarioErrors([ScenarioError(file, line, col, "", f"control character {bad.group()!r} in the file",
                                            "is this a binary file? scenario files are UTF-8 YAML text")])
    locs = Locations(Loc(file, 1, 1))
    loader = _FastLoader(text)
    try:
        node = loader.get_single_node()
    except _Limit as e:
        loc = _loc(file, e.mark)
        raise ScenarioErrors([ScenarioError(loc.file, loc.line, loc.col, dotted(e.path), e.message)]) from None
    except yaml.MarkedYAMLError as e:
        mark = e.problem_mark or e.context_mark
        loc = _loc(file, mark) if mark is not None else Loc(file, 1, 1)
        last_line = text.count("\n") + 1
        if loc.line > last_line:  # libyaml puts an error at the end of the stream one line past the last
            loc = Loc(file, last_line, len(text) - (text.rfind("\n") + 1) + 1)
        message = " ".join(p for p in (e.context, e.problem) if p) or "invalid YAML"
        if "maximum nesting depth" in message:  # libyaml's own guard (1000 levels) fired before ours
            raise ScenarioErrors([ScenarioError(loc.file, loc.line, loc.col, "",
                                                f"nesting deeper than {MAX_DEPTH} levels")]) from None
        tab = _tab_near(text, loc.line, loc.col)
        if tab is not None:
            raise ScenarioErrors([ScenarioError(loc.file, loc.line, tab, "", "a tab character where YAML expects "
                                                f"spaces ({message})", "indent and separate with spaces; "
                                                "YAML does not allow tabs there")]) from None
        raise ScenarioErrors([ScenarioError(loc.file, loc.line, loc.col, "", f"YAML syntax error: {message}")]) from None
    except yaml.YAMLError as e:  # reader errors carry an offset, not a mark
        pos = getattr(e, "position", 0) or 0
        line, col = _text_loc(text, min(pos, len(text)))
        raise ScenarioErrors([ScenarioError(file, line, col, "", f"unreadable YAML: {e}")]) from None
    except RecursionError:  # not reachable with MAX_DEPTH, kept so no traceback can escape
        raise ScenarioErrors([ScenarioError(file, 1, 1, "", "nesting too deep")]) from None
    finally:
        loader.dispose()
    if node is None or (isinstance(node, ScalarNode) and node.tag == _TAG + "null" and not node.value):
        raise ScenarioErrors([ScenarioError(file, 1, 1, "", "the file is empty",
                                            "a scenario is a mapping with at least 'name' and 'duration'")])
    if not isinstance(node, MappingNode):
        loc = _loc(file, node.start_mark)
        kind = "a list" if isinstance(node, SequenceNode) else f"the value {node.value!r}"
        raise ScenarioErrors([ScenarioError(loc.file, loc.line, loc.col, "", f"the top level must be a mapping, "
                                            f"got {kind}", "write 'key: value' lines such as 'name: my-scenario'")])
    builder = _Builder(file, locs)
    try:
        data = builder.build(node, (), 1)
    except ScenarioError as e:
        raise ScenarioErrors(builder.errors + [e]) from None
    if builder.errors:
        raise ScenarioErrors(builder.errors)
    return Document(data, locs, file)


def load_yaml(path: str | Path) -> Document:
    """Read and parse one file. Raises `ScenarioErrors` (never anything else for bad input)."""
    file = str(path)
    p = Path(path)
    try:
        if not p.is_file():
            what = "is a folder, not a file" if p.is_dir() else "no such file"
            raise ScenarioErrors([ScenarioError(file, 1, 1, "", what)])
        size = p.stat().st_size
        if size > MAX_FILE_BYTES:
            raise ScenarioErrors([ScenarioError(file, 1, 1, "", f"file is {size} bytes, more than the "
                                                f"{MAX_FILE_BYTES} byte limit for a scenario")])
        raw = read_limited(p, MAX_FILE_BYTES)   # refuses a FIFO or device, and a file that grew meanwhile
    except FileReadError as e:
        raise ScenarioErrors([ScenarioError(file, 1, 1, "", f"cannot read file: {e}")]) from None
    except OSError as e:
        raise ScenarioErrors([ScenarioError(file, 1, 1, "", f"cannot read file: {e.strerror or e}")]) from None
    if raw.startswith(b"\xef\xbb\xbf"):
        raw = raw[3:]
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as e:
        line = raw.count(b"\n", 0, e.start) + 1
        col = e.start - (raw.rfind(b"\n", 0, e.start) + 1) + 1
        raise ScenarioErrors([ScenarioError(file, line, col, "", "the file is not UTF-8 text",
                                            "is this a binary file?")]) from None
    return load_yaml_text(text, file)
