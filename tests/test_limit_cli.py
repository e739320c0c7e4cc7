"""`bench limit` on a real scenario with a controller: the largest unknown load joint-pd stands with."""

from __future__ import annotations

import json
import textwrap

import pytest

LOAD_YAML = """
    name: limit-load
    robot: quad12
    duration: 0.8
    seed: 2
    ground: {friction: 0.8}
    payloads:
      - {name: crate, mass: 4.0, size: [0.16, 0.12, 0.08], offset: [-0.10, 0.0, 0.09]}
    criteria: {no_fall: true, height_error_max: 0.05}
"""


@pytest.fixture
def load_file(tmp_path):
    p = tmp_path / "load.yaml"
    p.write_text(textwrap.dedent(LOAD_YAML))
    return p


def test_largest_standing_load_of_joint_pd(load_file, tmp_path, capsys):
    from bench.cli import main
    from bench.execute.job import Job, run_job
    from bench.scenario import derive, load_scenarios

    out = tmp_path / "lim"
    rc = main(["limit", str(load_file), "--vary", "payloads.crate.mass", "--range", "0.5", "40", "--tol", "1",
               "--controller", "joint-pd", "--workers", "2", "--out", str(out)])
    printed = capsys.readouterr().out
    assert rc == 0, printed
    doc = json.loads((out / "limit.json").read_text())
    assert doc["status"] == "found" and doc["vary"] == "payloads.crate.mass" and doc["direction"] == "max"
    lo_pass, hi_fail = doc["bracket"]
    assert doc["limit"] == lo_pass and 0 < hi_fail - lo_pass <= 1.0
    assert 0.5 < lo_pass < 40
    values = [c["value"] for c in doc["curve"]]
    assert values == sorted(values) and {0.5, 40.0} <= set(values)
    assert all(c["passed"] == (c["value"] <= lo_pass) for c in doc["curve"])  # one change, at the bracket
    assert all(c["pass_rate"] in (0.0, 1.0) and c["trials"] == 1 for c in doc["curve"])
    assert (out / "limit.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert len(list((out / "episodes").glob("*/result.json"))) == doc["episodes"] == len(values)
    assert f"largest passing payloads.crate.mass: {lo_pass:.6g}" in printed

    # independent check, in this process: the reported limit stands, the next value found does not
    sc = load_scenarios([str(load_file)])[0]
    at = run_job(Job(derive(sc, {"payloads.crate.mass": lo_pass}, ""), "joint-pd")).result
    over = run_job(Job(derive(sc, {"payloads.crate.mass": hi_fail}, ""), "joint-pd")).result
    assert at["status"] == "passed" and over["status"] == "failed"


def test_limit_with_trials_judges_each_value_on_the_same_draws(load_file, tmp_path, capsys):
    from bench.cli import main

    load_file.write_text(textwrap.dedent(LOAD_YAML).replace("duration: 0.8", "duration: 0.5") + textwrap.dedent("""\
        initial: {yaw_deg: 0}
        randomize:
          initial.yaw_deg: [-90, 90]
        """))
    out = tmp_path / "lim"
    rc = main(["limit", str(load_file), "--vary", "payloads.crate.mass", "--range", "1", "80", "--tol", "8",
               "--trials", "3", "--pass-rate", "0.4", "--controller", "joint-pd", "--workers", "2",
               "--out", str(out)])
    capsys.readouterr()
    assert rc == 0
    doc = json.loads((out / "limit.json").read_text())
    assert doc["trials"] == 3 and doc["required"] == 0.4 and doc["status"] == "found"
    for c in doc["curve"]:
        assert c["trials"] == 3 and len(c["interval"]) == 2
        assert [i.split("[")[1].split(",")[0] for i in c["ids"]] == ["trial=0", "trial=1", "trial=2"]
    # the same three draws at every value: the trials' yaw comes from the trial, not from the value
    first = json.loads(next((out / "episodes").glob("limit-load.trial-0.mass-*/result.json")).read_text())
    assert first["seed"] == 2  # trial 0 keeps the scenario seed


@pytest.mark.parametrize("argv,expect", [
    (["--vary", "payloads.crate.mass", "--range", "-1", "5"], "load.yaml:"),           # mass must be > 0
    (["--vary", "payloads.box.mass", "--range", "1", "5"], "no item named 'box'"),      # no such payload
    (["--vary", "ground.friction", "--range", "1", "0.5"], "LO < HI"),
    (["--vary", "ground.friction", "--range", "0.1", "1", "--trials", "3", "--pass-rate", "0.6"], "--trials 6"),
])
def test_invalid_input_is_exit_2_with_a_message(load_file, tmp_path, capsys, argv, expect):
    from bench.cli import main

    rc = main(["limit", str(load_file), *argv, "--workers", "1", "--out", str(tmp_path / "o")])
    assert rc == 2
    assert expect in capsys.readouterr().err
    assert not (tmp_path / "o" / "limit.json").exists()
