"""A file the robot names that is a FIFO (named pipe) is refused with its place, never read.

Reading a FIFO waits for a writer forever: ``bench check`` on an MJCF that was a
FIFO, or that included one, hung. The command runs in a child process with a
time limit, so that a regression fails the test instead of hanging it.
"""

from __future__ import annotations

import os
import re
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from bench.fileio import not_regular

REPO = Path(__file__).resolve().parents[1]
QUAD12 = REPO / "models" / "quad12"
GUARD_S = 120          # far above the few seconds the command takes; only a hang reaches it

pytestmark = pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="needs os.mkfifo")


def _robot(root: Path, name: str, insert: str = "") -> Path:
    """A copy of the bundled robot under root/name; ``insert`` goes right before <worldbody>."""
    folder = root / name
    folder.mkdir()
    shutil.copy(QUAD12 / "manifest.yaml", folder / "manifest.yaml")
    xml = (QUAD12 / "quad12.xml").read_text()
    assert xml.count("<worldbody>") == 1
    (folder / "quad12.xml").write_text(xml.replace("<worldbody>", insert + "\n<worldbody>"))
    (root / f"{name}.yaml").write_text(f"name: {name}\nrobot: {{manifest: {name}/manifest.yaml}}\nduration: 0.1\n")
    return folder


def _line_of(path: Path, text: str) -> int:
    return next(i for i, line in enumerate(path.read_text().splitlines(), 1) if text in line)


def test_fifo_as_mjcf_include_or_mesh_is_refused_with_file_line_and_field(tmp_path):
    whole = _robot(tmp_path, "whole")
    (whole / "quad12.xml").unlink()
    os.mkfifo(whole / "quad12.xml")
    inc = _robot(tmp_path, "inc", '<include file="extra.xml"/>')
    os.mkfifo(inc / "extra.xml")
    mesh = _robot(tmp_path, "mesh", '<asset><mesh name="m" file="m.stl"/></asset>')
    os.mkfifo(mesh / "m.stl")

    proc = subprocess.run([sys.executable, "-m", "bench", "check", "whole.yaml", "inc.yaml", "mesh.yaml"],
                          cwd=tmp_path, capture_output=True, text=True, timeout=GUARD_S)
    out = proc.stdout + proc.stderr
    assert proc.returncode == 2, out
    assert "Traceback" not in out
    line = _line_of(whole / "manifest.yaml", "mjcf:")
    assert re.search(rf"whole/manifest\.yaml:{line}:\d+: mjcf: MJCF 'quad12\.xml' is a FIFO \(named pipe\), "
                     r"not a regular file", out), out
    line = _line_of(inc / "quad12.xml", 'include file="extra.xml"')
    assert re.search(rf"inc/quad12\.xml:{line}:\d+: include\.file: file 'extra\.xml' is a FIFO", out), out
    line = _line_of(mesh / "quad12.xml", 'file="m.stl"')
    assert re.search(rf"mesh/quad12\.xml:{line}:\d+: mesh\.file: file 'm\.stl' is a FIFO", out), out


_LOAD = """
import sys
from bench.robot import RobotError, load_manifest
try:
    load_manifest(sys.argv[1])
except RobotError as exc:
    print(exc)
"""


def test_robot_loader_refuses_a_fifo_manifest_or_mjcf_without_opening_it(tmp_path):
    folder = _robot(tmp_path, "r")
    (folder / "quad12.xml").unlink()
    os.mkfifo(folder / "quad12.xml")
    os.mkfifo(tmp_path / "manifest.yaml")

    def load(path: Path) -> str:
        proc = subprocess.run([sys.executable, "-c", _LOAD, str(path)], capture_output=True, text=True,
                              timeout=GUARD_S)
        assert proc.returncode == 0 and "Traceback" not in proc.stderr, proc.stderr
        return proc.stdout

    assert re.search(r"manifest\.yaml:\d+:\d+: mjcf: .*quad12\.xml is not a regular file", load(folder / "manifest.yaml"))
    assert re.search(r"manifest\.yaml: manifest: not a regular file", load(tmp_path / "manifest.yaml"))


def test_not_regular_names_what_the_path_is(tmp_path):
    (tmp_path / "f").write_text("x")
    os.mkfifo(tmp_path / "p")
    os.symlink(tmp_path / "p", tmp_path / "link")
    assert not_regular(tmp_path / "f") is None
    assert not_regular(tmp_path / "missing") is None          # missing files are reported where they are read
    assert not_regular(tmp_path / "p") == "a FIFO (named pipe)"
    assert not_regular(tmp_path / "link") == "a FIFO (named pipe)"   # a link is followed
    assert not_regular(tmp_path) == "a folder"
    if os.path.exists("/dev/null"):
        assert not_regular("/dev/null") == "a device"
