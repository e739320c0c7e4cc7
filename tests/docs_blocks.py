"""Reading the Markdown code blocks of docs/ and README.md, for the doc tests.

A block runs when the line just before its opening fence is an HTML comment (invisible on a code host):

- ``<!-- run -->``: run the block in the page's work folder; it must exit 0.
- ``<!-- run exit=1 expect="1 passed" expect="..." -->``: the exit code it must end with, and text
  that must appear in its output (stdout and stderr together).
- ``<!-- file: NAME -->`` before any block: write the block's text to NAME in the work folder (a
  scenario or controller file the next commands use).
- ``<!-- norun: why -->``: shown but not run, and why (slow, needs a network, makes a video...).
- ``<!-- same-as: PATH -->``: the block shows the repository file PATH, and must equal it.

A ``bash``/``sh`` block runs as one ``bash -e`` script; a ``console`` block runs the lines that start
with ``$ `` (the others are example output). Blocks of a page run in order in one temporary folder
holding a copy of the bundled ``scenarios/`` and the test fixtures' ``stand-1s.yaml``.
"""

from __future__ import annotations

import re
import shlex
from dataclasses import dataclass, field
from pathlib import Path

FENCE = re.compile(r"^(\s*)(`{3,}|~{3,})\s*([\w+-]*)(.*)$")
MARK = re.compile(r"^\s*<!--\s*(run|file|norun|same-as)\b:?(.*?)-->\s*$")
SHELL_LANGS = {"bash", "sh", "console", "shell"}


@dataclass
class Block:
    path: Path
    line: int            # 1-based line of the opening fence
    lang: str
    text: str
    mark: str | None = None        # run, file, norun or None
    arg: str = ""                  # file name, or why it is not run
    exit_code: int = 0
    expect: list[str] = field(default_factory=list)

    def where(self) -> str:
        return f"{self.path}:{self.line}"

    def script(self) -> str:
        if self.lang == "console":
            cmds, cont = [], False
            for ln in self.text.splitlines():
                if ln.startswith("$ ") or cont:
                    body = ln[2:] if ln.startswith("$ ") and not cont else ln
                    cmds.append(body)
                    cont = body.rstrip().endswith("\\")
            return "\n".join(cmds) + "\n"
        return self.text


def blocks(path: Path) -> list[Block]:
    lines = path.read_text(encoding="utf-8").splitlines()
    out: list[Block] = []
    i = 0
    while i < len(lines):
        m = FENCE.match(lines[i])
        if not m:
            i += 1
            continue
        indent, fence, lang = m.group(1), m.group(2), m.group(3).lower()
        start = i
        body: list[str] = []
        i += 1
        while i < len(lines) and not lines[i].strip().startswith(fence):
            body.append(lines[i][len(indent):] if lines[i].startswith(indent) else lines[i])
            i += 1
        i += 1
        b = Block(path, start + 1, lang, "\n".join(body) + "\n")
        j = start - 1
        while j >= 0 and not lines[j].strip():
            j -= 1
        mm = MARK.match(lines[j]) if j >= 0 else None
        if mm:
            b.mark, rest = mm.group(1), mm.group(2).strip()
            if b.mark == "run":
                for tok in shlex.split(rest):
                    key, _, val = tok.partition("=")
                    if key == "exit":
                        b.exit_code = int(val)
                    elif key == "expect":
                        b.expect.append(val)
                    else:
                        raise ValueError(f"{b.where()}: unknown run option {tok!r}")
            else:
                b.arg = rest
        out.append(b)
    return out


def shell_blocks(path: Path) -> list[Block]:
    return [b for b in blocks(path) if b.lang in SHELL_LANGS]
