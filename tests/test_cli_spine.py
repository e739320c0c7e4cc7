"""The bench command's documented contract: files written, keys, exit codes, messages."""

from __future__ import annotations

import json
import subprocess
import sys

import numpy as np
import pytest

from bench.cli import main
from bench.sim.trace import CONTRACT_KEYS

RESULT_KEYS = {"scenario", "source", "controller", "seed", "status", "passed", "reason", "sim_time_s", "wall_time_s",
               "realtime_factor", "controller_ms", "criteria", "metrics", "bench_version", "mujoco_version"}

GOOD = """
name: {name}
duration: 0.6
criteria:
  no_fall: true
  height_error_max: {limit}
"""


def test_run_writes_the_contract_files(tmp_path, write_scenario, capsys):
    write_scenario(GOOD.format(name="easy", limit=0.05), "suite/easy.yaml")
    write_scenario(GOOD.format(name="strict", limit=0.0001), "suite/sub/strict.yaml")
    out = tmp_path / "res"
    rc = main(["run", str(tmp_path / "suite"), "--controller", "joint-pd", "--out", str(out)])
    printed = capsys.readouterr().out
    assert rc == 1  # one failed
    assert printed.strip().splitlines()[-1] == "1 passed, 1 failed"
    summary = json.loads((out / "summary.json").read_text())
    assert summary["total"] == 2 and summary["passed"] == 1 and summary["failed"] == 1 and summary["errors"] == 0
    for entry in summary["results"]:
        result = json.loads((out / entry["result"]).read_text())
        assert RESULT_KEYS <= set(result)
        assert result["passed"] == (result["status"] == "passed")
        assert set(result["controller_ms"]) == {"p50", "p99", "max"}
        for c in result["criteria"]:
            assert set(c) >= {"name", "value", "limit", "passed", "first_violation_s"}
        with np.load(out / result["scenario"] / "trace.npz") as z:
            assert set(CONTRACT_KEYS) <= set(z.files)
    strict = json.loads((out / "strict" / "result.json").read_text())
    assert strict["status"] == "failed"
    assert strict["reason"].startswith("height_error_max")
    crit = {c["name"]: c for c in strict["criteria"]}["height_error_max"]
    assert crit["first_violation_s"] is not None and crit["value"] > crit["limit"]


def test_run_exit_zero_when_all_pass(tmp_path, write_scenario, capsys):
    path = write_scenario(GOOD.format(name="easy", limit=0.05))
    assert main(["run", str(path), "--controller", "joint-pd", "--out", str(tmp_path / "r")]) == 0
    assert capsys.readouterr().out.strip().endswith("1 passed, 0 failed")


def test_malformed_scenario_is_line_precise_exit_2_and_runs_nothing(tmp_path, write_scenario):
    path = write_scenario("""
name: broken
duration: 2.0
payloads:
  - {name: crate, mass: -4.0, size: [0.1, 0.1, 0.1], offset: [0, 0, 0.1]}
""")
    out = tmp_path / "never"
    proc = subprocess.run([sys.executable, "-m", "bench", "run", str(path), "--out", str(out)],
                          capture_output=True, text=True)
    assert proc.returncode == 2
    assert "Traceback" not in proc.stderr + proc.stdout
    assert f"{path}:5:" in proc.stderr and "mass" in proc.stderr
    assert not out.exists()


def test_check_reports_unknown_key_with_did_you_mean(write_scenario, capsys):
    path = write_scenario("name: typo\nduraton: 2.0\n")
    assert main(["check", str(path)]) == 2
    err = capsys.readouterr().err
    assert f"{path}:2:1:" in err and "duration" in err


def test_unknown_controller_is_invalid_input_not_a_crash(tmp_path, write_scenario, capsys):
    # invalid input: exit 2 before anything runs, with the names that exist
    path = write_scenario(GOOD.format(name="x", limit=0.05))
    rc = main(["run", str(path), "--controller", "no-such-controller", "--out", str(tmp_path / "r")])
    assert rc == 2
    assert not (tmp_path / "r").exists()
    err = capsys.readouterr().err
    assert "unknown controller 'no-such-controller'" in err and "force-qp-l1" in err


def test_list_and_export(tmp_path, write_scenario, capsys):
    import mujoco

    assert main(["list", "controllers"]) == 0
    names = [line.split()[0] for line in capsys.readouterr().out.splitlines()]
    assert {"zero", "joint-pd"} <= set(names)
    assert main(["list", "criteria"]) == 0
    assert "height_error_max" in capsys.readouterr().out
    path = write_scenario("""
name: exported
duration: 1.0
terrain:
  - stairs: {start: 1.0, steps: 3, rise: 0.1, run: 0.3}
payloads:
  - {name: crate, mass: 2.0, size: [0.1, 0.1, 0.1], offset: [0, 0, 0.1]}
""")
    xml = tmp_path / "world.xml"
    assert main(["export", str(path), "-o", str(xml)]) == 0
    model = mujoco.MjModel.from_xml_path(str(xml))  # loads in MuJoCo on its own
    assert mujoco.mj_name2id(model, mujoco.mjtObj.mjOBJ_BODY, "payload_crate") >= 0
    assert sum(1 for i in range(model.ngeom) if "step" in (mujoco.mj_id2name(model, mujoco.mjtObj.mjOBJ_GEOM, i) or "")) == 3
    assert mujoco.mj_getTotalmass(model) == pytest.approx(14.0, rel=1e-6)


def test_list_descriptions_are_cut_at_a_word_with_an_ellipsis():
    from bench.cli.listing import shorten

    assert shorten("a short one", 40) == "a short one"
    assert shorten("the quick brown fox jumps over", 16) == "the quick brown\u2026"
    assert shorten("the quick brown fox jumps over", 13) == "the quick\u2026"
    long_word = shorten("abcdefghijklmnopqrstuvwxyz", 10)
    assert long_word == "abcdefghi\u2026" and len(long_word) == 10
