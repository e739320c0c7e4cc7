"""Every runnable command in docs/ runs and gives what the page says; tutorial commands are all runnable.

The marker syntax is in tests/docs_blocks.py. Each page with runnable blocks is one test: its blocks run
in order, in a temporary folder, with the installed ``bench`` first on PATH.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

sys.path.insert(0, str(Path(__file__).resolve().parent))
from docs_blocks import SHELL_LANGS, blocks, shell_blocks  # noqa: E402

REPO = Path(__file__).resolve().parents[1]
PAGES = sorted((REPO / "docs").rglob("*.md")) + [REPO / "README.md"]
RUNNABLE = [p for p in PAGES if any(b.mark in ("run", "file") for b in blocks(p))]


def _workdir(tmp: Path) -> Path:
    work = tmp / "work"
    shutil.copytree(REPO / "scenarios", work / "scenarios")
    shutil.copy(REPO / "tests" / "fixtures" / "bench_plugin" / "stand-1s.yaml", work / "stand-1s.yaml")
    return work


@pytest.mark.parametrize("page", RUNNABLE, ids=[str(p.relative_to(REPO)) for p in RUNNABLE])
def test_runnable_blocks_of_page(page, tmp_path):
    work = _workdir(tmp_path)
    env = {**os.environ, "PATH": f"{Path(sys.executable).parent}{os.pathsep}{os.environ.get('PATH', '')}",
           "COLUMNS": "120", "MPLBACKEND": "Agg", "HOME": str(tmp_path)}
    env.pop("PYTEST_ADDOPTS", None)
    ran = 0
    for b in blocks(page):
        if b.mark == "file":
            target = work / b.arg
            target.parent.mkdir(parents=True, exist_ok=True)
            target.write_text(b.text, encoding="utf-8")
            continue
        if b.mark != "run":
            continue
        proc = subprocess.run(["bash", "-e", "-c", b.script()], cwd=work, env=env, capture_output=True,
                              text=True, timeout=300)
        out = proc.stdout + proc.stderr
        assert proc.returncode == b.exit_code, (
            f"{b.where()}: exit code {proc.returncode}, the page says {b.exit_code}\n{b.script()}\n{out[-3000:]}")
        for text in b.expect:
            assert text in out, f"{b.where()}: output lacks {text!r}\n{out[-3000:]}"
        ran += 1
    assert ran or any(b.mark == "file" for b in blocks(page))


def test_every_tutorial_command_is_runnable_or_says_why_not():
    unmarked = []
    for page in sorted((REPO / "docs" / "tutorial").glob("*.md")):
        for b in shell_blocks(page):
            if b.mark not in ("run", "file") and not (b.mark == "norun" and b.arg):
                unmarked.append(b.where())
    assert not unmarked, ("shell blocks in the tutorial that are neither <!-- run --> nor "
                          "<!-- norun: why -->: " + ", ".join(unmarked))


def test_marker_parser_reads_options(tmp_path):
    page = tmp_path / "p.md"
    page.write_text('text\n\n<!-- run exit=1 expect="1 failed" expect="x y" -->\n```console\n$ bench a \\\n'
                    '  --b\nout\n$ bench c\n```\n\n<!-- norun: makes a video -->\n```bash\nbench render\n```\n'
                    '```yaml\nname: x\n```\n', encoding="utf-8")
    bs = blocks(page)
    assert [b.mark for b in bs] == ["run", "norun", None]
    assert bs[0].exit_code == 1 and bs[0].expect == ["1 failed", "x y"]
    assert bs[0].script() == "bench a \\\n  --b\nbench c\n"
    assert bs[1].arg == "makes a video" and bs[2].lang == "yaml" and bs[2].lang not in SHELL_LANGS


def test_blocks_that_show_a_repository_file_equal_it():
    shown = [(p, b) for p in PAGES for b in blocks(p) if b.mark == "same-as"]
    assert shown, "the README shows a bundled scenario file"
    for page, b in shown:
        assert b.text == (REPO / b.arg).read_text(encoding="utf-8"), f"{b.where()} differs from {b.arg}"


def test_readme_test_command_is_the_one_ci_runs():
    readme = (REPO / "README.md").read_text(encoding="utf-8").splitlines()
    command = readme[readme.index("# install and run the tests") + 1]
    assert command.startswith("python3 -m venv .venv") and "pytest" in command
    assert command in (REPO / ".ci" / "run").read_text(encoding="utf-8").splitlines()
