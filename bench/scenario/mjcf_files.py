"""The files an MJCF file names, found before MuJoCo reads it.

A robot's MJCF can pull in other files: ``<include file=...>`` (other MJCF),
``<mesh>``, ``<hfield>``, ``<skin>`` and ``<texture>`` files (under
``<compiler meshdir/texturedir/assetdir>``), and whole models attached with
``<asset><model file=...>``. A scenario may only reach files inside the allowed
roots, so these are listed here and checked with the rest
(``bench.scenario.loader.named_file_problems``). Part of the scenario stage: it
reads XML only and needs neither MuJoCo nor the robot loader.

The XML is read with ``xml.parsers.expat`` directly, so that every reference
keeps its line and column. A document type declaration is refused outright:
MJCF has no use for one, and entity declarations are the way to expand a small
file into a huge one or to read another file. Limits: each file at most
``MAX_BYTES``, includes at most ``MAX_DEPTH`` deep and ``MAX_FILES`` files in all.
Only regular files are read: a FIFO (named pipe), socket, device or folder where
a file is named is a problem at that name (reading a FIFO would wait for a
writer forever, in this scanner or in MuJoCo).

Where a relative path is looked for, as MuJoCo 4.0.0 does (checked by hand: an
include is found next to the including file and also next to the main file;
asset files under the compiler's folder, which is relative to the main file):
each place where the file exists must be inside the roots, and so must the
first place when it exists nowhere (MuJoCo then reports the missing file).
"""

from __future__ import annotations

import xml.parsers.expat
from dataclasses import dataclass
from pathlib import Path

from bench.fileio import FileReadError, not_regular, read_limited

MAX_BYTES = 64 << 20   # 64 MiB: the bundled MJCF is 10 KiB; mesh-heavy robots stay far below
MAX_DEPTH = 16
MAX_FILES = 256

#: Element -> the attributes that name a file.
FILE_ATTRS: dict[str, tuple[str, ...]] = {
    "include": ("file",),
    "mesh": ("file",),
    "hfield": ("file",),
    "skin": ("file",),
    "texture": ("file", "fileright", "fileleft", "fileup", "filedown", "filefront", "fileback"),
    "model": ("file",),
}
#: Element -> the compiler attribute of its folder (``assetdir`` applies when that one is not set).
DIR_ATTR = {"mesh": "meshdir", "hfield": "meshdir", "skin": "meshdir", "texture": "texturedir"}


@dataclass(frozen=True)
class FileRef:
    """One file an MJCF names: where it is written, and where MuJoCo would look for it."""

    file: str            # the MJCF file it is written in
    line: int
    col: int
    field: str           # "include.file", "mesh.file", ...
    value: str
    candidates: tuple[Path, ...]


@dataclass(frozen=True)
class MjcfProblem:
    """The MJCF cannot be scanned (not XML, a DOCTYPE, over a limit); located like a scenario error."""

    file: str
    line: int
    col: int
    field: str
    message: str


class _Scan:
    def __init__(self, main: Path) -> None:
        self.main_dir = main.resolve().parent
        self.refs: list[FileRef] = []
        self.problems: list[MjcfProblem] = []
        self.files = 0
        self.compiler: dict[str, str] = {}
        self.assets: list[tuple[str, int, int, str, str, str]] = []   # (file, line, col, tag, attr, value)

    def scan(self, path: Path, shown: str, depth: int) -> None:
        self.files += 1
        if self.files > MAX_FILES:
            self.problems.append(MjcfProblem(shown, 1, 1, "include", f"more than {MAX_FILES} MJCF files included"))
            return
        special = not_regular(path)
        if special is not None:
            self.problems.append(MjcfProblem(shown, 1, 1, "mjcf", f"the MJCF file is {special}, not a regular file"))
            return
        try:
            size = path.stat().st_size
            if size > MAX_BYTES:
                self.problems.append(MjcfProblem(shown, 1, 1, "mjcf", f"MJCF file of {size} bytes is over the "
                                                 f"limit of {MAX_BYTES} bytes"))
                return
            data = read_limited(path, MAX_BYTES)
        except FileReadError as exc:   # swapped for a FIFO or device since the check, or grew meanwhile
            self.problems.append(MjcfProblem(shown, 1, 1, "mjcf", f"cannot read the MJCF file: {exc}"))
            return
        except OSError:
            return      # missing or unreadable: the robot loader reports it with MuJoCo's message
        parser = xml.parsers.expat.ParserCreate()
        includes: list[FileRef] = []
        here = path.resolve().parent

        def doctype(*_args) -> None:
            raise _Refused("a DOCTYPE declaration (MJCF does not use one; entities are not allowed)")

        def start(tag: str, attrs: dict) -> None:
            line, col = parser.CurrentLineNumber, parser.CurrentColumnNumber + 1
            if tag == "compiler":
                for key in ("meshdir", "texturedir", "assetdir"):
                    if key in attrs:
                        self.compiler[key] = attrs[key]
            for attr in FILE_ATTRS.get(tag, ()):
                value = attrs.get(attr)
                if value is None or not value.strip():
                    continue
                if tag == "include":
                    # next to this file, then next to the main file (one place when absolute)
                    cands = tuple(dict.fromkeys((here / value, self.main_dir / value)))
                    ref = FileRef(shown, line, col, f"{tag}.{attr}", value, cands)
                    includes.append(ref)
                    self.refs.append(ref)
                else:   # its folder depends on <compiler>, wherever that is: resolved in finish()
                    self.assets.append((shown, line, col, tag, attr, value))

        parser.StartDoctypeDeclHandler = doctype
        parser.EntityDeclHandler = doctype
        parser.StartElementHandler = start
        try:
            parser.Parse(data, True)
        except _Refused as exc:
            self.problems.append(MjcfProblem(shown, parser.CurrentLineNumber, parser.CurrentColumnNumber + 1,
                                             "mjcf", f"MJCF has {exc}"))
            return
        except xml.parsers.expat.ExpatError as exc:
            self.problems.append(MjcfProblem(shown, exc.lineno, exc.offset + 1, "mjcf",
                                             f"MJCF is not well-formed XML: {xml.parsers.expat.ErrorString(exc.code)}"))
            return
        for ref in includes:
            if depth + 1 > MAX_DEPTH:
                self.problems.append(MjcfProblem(ref.file, ref.line, ref.col, ref.field,
                                                 f"includes nested more than {MAX_DEPTH} deep"))
                continue
            target = next((c for c in ref.candidates if c.is_file()), None)
            if target is not None:
                self.scan(target, _shown(target, shown, path), depth + 1)

    def finish(self) -> None:
        for file, line, col, tag, attr, value in self.assets:
            folder = self.compiler.get(DIR_ATTR[tag], self.compiler.get("assetdir", "")) if tag in DIR_ATTR else ""
            # pathlib: joining an absolute path replaces what is before it, as MuJoCo does
            place = self.main_dir / folder / value
            self.refs.append(FileRef(file, line, col, f"{tag}.{attr}", value, (place,)))
        self.assets = []
        for ref in self.refs:
            for place in ref.candidates:
                special = not_regular(place)
                if special is not None:
                    self.problems.append(MjcfProblem(ref.file, ref.line, ref.col, ref.field,
                                                     f"file {ref.value!r} is {special}, not a regular file "
                                                     f"(MuJoCo reads regular files only)"))
                    break


class _Refused(Exception):
    pass


def _shown(target: Path, parent_shown: str, parent: Path) -> str:
    """How an included file is named in messages: next to its parent's shown name when possible."""
    try:
        rel = target.resolve().relative_to(parent.resolve().parent)
    except ValueError:
        return str(target)
    return str(Path(parent_shown).parent / rel)


def scan_mjcf(path: str | Path, shown: str | None = None) -> tuple[list[FileRef], list[MjcfProblem]]:
    """Every file reference in the MJCF at ``path`` and the files it includes, and any problem found."""
    p = Path(path)
    s = _Scan(p)
    s.scan(p, shown or str(path), 0)
    s.finish()
    return s.refs, s.problems


def places_to_check(ref: FileRef) -> list[Path]:
    """The resolved places that must be inside the roots: every one that exists, else the first."""
    existing = [c for c in ref.candidates if c.exists()]
    chosen = existing or list(ref.candidates[:1])
    return [c.resolve() for c in chosen]
