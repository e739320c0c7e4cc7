"""The shared file helpers: bounded reads that never block, atomic targets that never leave half a file."""

from __future__ import annotations

import hashlib
import os

import pytest

from bench.fileio import (
    FileReadError,
    atomic_target,
    is_inside,
    read_limited,
    remove_temp_files,
    sha256_file,
    sha256_files,
    write_atomic,
)


@pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="no FIFOs on this platform")
def test_read_limited_refuses_a_fifo_without_blocking(tmp_path):
    fifo = tmp_path / "robot.xml"
    os.mkfifo(fifo)
    with pytest.raises(FileReadError, match="not a regular file"):
        read_limited(fifo, 1000)   # with no writer, a plain open() or read() would wait forever


def test_read_limited_refuses_a_folder_and_a_large_file(tmp_path):
    with pytest.raises(FileReadError, match="folder"):
        read_limited(tmp_path, 1000)
    big = tmp_path / "big.yaml"
    big.write_bytes(b"x" * 1001)
    with pytest.raises(FileReadError, match="1001 bytes, over the limit of 1000"):
        read_limited(big, 1000)
    assert read_limited(big, 1001) == b"x" * 1001
    with pytest.raises(FileNotFoundError):
        read_limited(tmp_path / "missing", 10)


def test_atomic_target_replaces_on_success_and_leaves_nothing_on_failure(tmp_path):
    target = tmp_path / "plots.png"
    target.write_bytes(b"old")
    with pytest.raises(RuntimeError):
        with atomic_target(target) as tmp:
            assert tmp.parent == tmp_path and tmp.suffix == ".png"   # a library can pick the format by suffix
            tmp.write_bytes(b"half")
            raise RuntimeError("renderer crashed")
    assert target.read_bytes() == b"old" and sorted(p.name for p in tmp_path.iterdir()) == ["plots.png"]
    with atomic_target(target) as tmp:
        tmp.write_bytes(b"new")
    assert target.read_bytes() == b"new" and sorted(p.name for p in tmp_path.iterdir()) == ["plots.png"]


def test_remove_temp_files_knows_both_temp_names(tmp_path):
    (tmp_path / ".result.json.ab12_x.tmp").write_text("{")
    (tmp_path / ".plots.png.k9f3.tmp.png").write_bytes(b"")
    (tmp_path / "result.json").write_text("{}")
    (tmp_path / ".hidden").write_text("")
    removed = remove_temp_files(tmp_path)
    assert sorted(p.name for p in removed) == [".plots.png.k9f3.tmp.png", ".result.json.ab12_x.tmp"]
    assert sorted(p.name for p in tmp_path.iterdir()) == [".hidden", "result.json"]


def test_hashes_match_hashlib(tmp_path):
    a, b = tmp_path / "a.py", tmp_path / "sub" / "b.py"
    b.parent.mkdir()
    write_atomic(a, b"alpha")
    write_atomic(b, b"beta" * 300_000)
    assert sha256_file(b) == hashlib.sha256(b"beta" * 300_000).hexdigest()
    want = hashlib.sha256(b"a.pyalpha" + b"sub/b.py" + b"beta" * 300_000).hexdigest()
    assert sha256_files(tmp_path, [b, a]) == want


def test_is_inside(tmp_path):
    root = tmp_path.resolve()
    assert is_inside(root, [root]) and is_inside(root / "x" / "y", [root])
    assert not is_inside(root.parent, [root]) and not is_inside(tmp_path.parent / (tmp_path.name + "x"), [root])


@pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="no FIFOs on this platform")
def test_bench_check_refuses_an_mjcf_that_is_a_fifo(tmp_path, capsys):
    """Before: the MJCF scan read the FIFO and `bench check` hung forever. Now it answers at once (the
    manifest check names it first; the scan's bounded read would refuse it as well)."""
    from pathlib import Path

    from bench.cli import main

    manifest = (Path(__file__).resolve().parents[1] / "models" / "quad12" / "manifest.yaml").read_text()
    lines = [("mjcf: robot.xml" if ln.startswith("mjcf:") else ln) for ln in manifest.splitlines()]
    (tmp_path / "manifest.yaml").write_text("\n".join(lines) + "\n")
    os.mkfifo(tmp_path / "robot.xml")
    scenario = tmp_path / "s.yaml"
    scenario.write_text("name: f\nduration: 1\nrobot: {manifest: manifest.yaml}\n")
    assert main(["check", str(scenario)]) == 2
    err = capsys.readouterr().err
    assert "robot.xml" in err and "not a regular file" in err
