"""Result files are whole or absent: SIGKILL mid-run leaves no half file; ``--resume`` finishes the run."""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import numpy as np
import pytest

from bench.cli import main
from bench.report.results import RESULT_KEYS, complete_result, remove_temp_files, trace_digest, write_atomic
from bench.sim.trace import CONTRACT_KEYS

COMMON = ["--controller", "joint-pd", "--no-plots", "--no-history"]


def _suite(folder: Path, n: int, duration: float) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    for i in range(n):   # lengths differ, so no two traces are alike
        (folder / f"s{i}.yaml").write_text(f"name: s{i}\nduration: {duration + 0.02 * i:g}\nseed: {i}\n"
                                           "criteria: {no_fall: true}\n")
    return folder


def _is_temp(name: str) -> bool:
    return name.startswith(".") and name.endswith(".tmp")


def _check_whole(out: Path) -> set[str]:
    """Every file under ``out`` is whole (or an atomic write's temporary); returns the complete scenario ids."""
    complete = set()
    for entry in out.iterdir():
        if entry.is_file():
            assert entry.name in ("summary.json", "summary.md") or _is_temp(entry.name), entry
            if entry.name == "summary.json":
                json.loads(entry.read_text())
            continue
        for f in entry.iterdir():
            assert f.name in ("result.json", "trace.npz") or _is_temp(f.name), f
        if (entry / "result.json").exists():
            result = json.loads((entry / "result.json").read_text())
            assert set(RESULT_KEYS) <= set(result)
            with np.load(entry / "trace.npz", allow_pickle=False) as z:
                assert set(CONTRACT_KEYS) <= set(z.files)
                assert trace_digest({k: z[k] for k in z.files if not k.startswith("meta_")}) == result["trace_sha256"]
            complete.add(result["scenario"])
        elif (entry / "trace.npz").exists():
            np.load(entry / "trace.npz", allow_pickle=False).close()   # a whole file too, just not marked done
    return complete


def test_sigkill_mid_run_leaves_whole_files_and_resume_finishes(tmp_path, capsys):
    suite = _suite(tmp_path / "suite", 6, 1.0)
    out = tmp_path / "out"
    proc = subprocess.Popen([sys.executable, "-m", "bench", "run", str(suite), "--workers", "2", "--out", str(out),
                             *COMMON], stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, start_new_session=True)
    try:
        give_up = time.monotonic() + 120
        while len(list(out.glob("*/result.json"))) < 2 and proc.poll() is None and time.monotonic() < give_up:
            time.sleep(0.01)
        assert proc.poll() is None, "the run ended before it could be killed"
        os.killpg(proc.pid, signal.SIGKILL)   # the run and its worker processes, all at once
    finally:
        proc.wait(timeout=30)
    assert proc.returncode == -signal.SIGKILL
    done = _check_whole(out)
    assert 2 <= len(done) < 6
    assert not (out / "summary.json").exists()
    before = {sid: (out / sid / "result.json").read_bytes() for sid in done}

    rc = main(["run", str(suite), "--resume", "--workers", "1", "--out", str(out), *COMMON])
    captured = capsys.readouterr()
    assert rc == 0
    assert f"resume: {len(done)} of 6 results complete in {out}/, running {6 - len(done)}" in captured.err
    assert _check_whole(out) == {f"s{i}" for i in range(6)}
    assert not [p for p in out.rglob("*") if _is_temp(p.name)]
    summary = json.loads((out / "summary.json").read_text())
    assert summary["total"] == 6 and summary["passed"] == 6
    assert [e["scenario"] for e in summary["results"]] == [f"s{i}" for i in range(6)]
    for sid, data in before.items():   # resumed results were left as they were
        assert (out / sid / "result.json").read_bytes() == data


def test_a_write_killed_before_its_rename_leaves_the_old_file_whole(tmp_path):
    target = tmp_path / "result.json"
    target.write_text('{"old": true}\n')
    code = textwrap.dedent(f"""
        import os, signal
        from bench.report import results
        os.fsync = lambda fd: os.kill(os.getpid(), signal.SIGKILL)   # die after writing, before the rename
        results.write_atomic({str(target)!r}, b'{{"new": true}}' * 10000)
    """)
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, timeout=60)
    assert proc.returncode == -signal.SIGKILL
    assert json.loads(target.read_text()) == {"old": True}
    leftovers = [p for p in tmp_path.iterdir() if p != target]
    assert len(leftovers) == 1 and _is_temp(leftovers[0].name) and leftovers[0].name.startswith(".result.json.")
    assert remove_temp_files(tmp_path) == leftovers
    assert list(tmp_path.iterdir()) == [target]


def test_result_files_are_readable_like_ordinary_files(tmp_path):
    write_atomic(tmp_path / "x.json", b"{}")
    umask = os.umask(0)
    os.umask(umask)
    assert (tmp_path / "x.json").stat().st_mode & 0o777 == 0o666 & ~umask


@pytest.fixture
def finished(tmp_path):
    suite = _suite(tmp_path / "suite", 3, 0.2)
    out = tmp_path / "out"
    assert main(["run", str(suite), "--workers", "1", "--out", str(out), *COMMON]) == 0
    return suite, out


def _resume(suite, out, capsys, *extra) -> str:
    rc = main(["run", str(suite), "--resume", "--workers", "1", "--out", str(out), *COMMON, *extra])
    assert rc == 0
    line = [x for x in capsys.readouterr().err.splitlines() if x.startswith("resume:")]
    assert len(line) == 1
    return line[0]


def test_resume_skips_complete_results(finished, capsys):
    suite, out = finished
    capsys.readouterr()
    mtimes = {p: p.stat().st_mtime_ns for p in out.glob("*/*")}
    assert _resume(suite, out, capsys).startswith("resume: 3 of 3 results complete")
    assert {p: p.stat().st_mtime_ns for p in out.glob("*/*")} == mtimes
    assert json.loads((out / "summary.json").read_text())["total"] == 3


@pytest.mark.parametrize("damage", ["half-result", "not-a-mapping", "missing-key", "no-trace", "torn-trace",
                                    "foreign-trace", "temp-files"])
def test_resume_reruns_what_is_incomplete_or_invalid(finished, capsys, damage):
    suite, out = finished
    capsys.readouterr()
    s1 = out / "s1"
    result = s1 / "result.json"
    if damage == "half-result":
        result.write_bytes(result.read_bytes()[: result.stat().st_size // 2])
    elif damage == "not-a-mapping":
        result.write_text("[1, 2]\n")
    elif damage == "missing-key":
        data = json.loads(result.read_text())
        del data["metrics"]
        result.write_text(json.dumps(data))
    elif damage == "no-trace":
        (s1 / "trace.npz").unlink()
    elif damage == "torn-trace":
        trace = s1 / "trace.npz"
        trace.write_bytes(trace.read_bytes()[:1000])
    elif damage == "foreign-trace":
        (s1 / "trace.npz").write_bytes((out / "s2" / "trace.npz").read_bytes())
    elif damage == "temp-files":
        (s1 / ".trace.npz.k2j4h1.tmp").write_bytes(b"half")
        (out / ".summary.json.x8a9_b.tmp").write_bytes(b"{")
    line = _resume(suite, out, capsys)
    want = 3 if damage == "temp-files" else 2
    assert line.startswith(f"resume: {want} of 3 results complete")
    assert _check_whole(out) == {"s0", "s1", "s2"}
    assert not [p for p in out.rglob("*") if _is_temp(p.name)]
    assert complete_result(out, "s1", scenario_id="s1")[0] is not None


def test_resume_reruns_results_of_other_settings(finished, capsys):
    suite, out = finished
    capsys.readouterr()
    assert _resume(suite, out, capsys, "--seed", "11").startswith("resume: 0 of 3 results complete")
    assert {json.loads((out / f"s{i}" / "result.json").read_text())["seed"] for i in range(3)} == {11}
    assert _resume(suite, out, capsys).startswith("resume: 0 of 3 results complete")   # back to own seeds
    (suite / "s0.yaml").write_text("name: s0\nduration: 0.3\ncriteria: {no_fall: true}\n")   # scenario changed
    assert _resume(suite, out, capsys).startswith("resume: 2 of 3 results complete")
    main(["run", str(suite), "--resume", "--workers", "1", "--out", str(out), "--controller", "zero",
          "--no-plots", "--no-history"])
    assert "resume: 0 of 3 results complete" in capsys.readouterr().err


def test_complete_result_reasons(finished):
    _, out = finished
    assert complete_result(out, "s0", scenario_id="s0", seed=0, controller="joint-pd")[1] == ""
    assert complete_result(out, "s0", seed=5)[1].startswith("result.json is for another seed")
    assert complete_result(out, "nothing-here")[1] == "no result.json"
