"""Trials: Wilson interval, the pass-rate verdict, trial ids that re-run alone, and the summary.json `trials` key."""

from __future__ import annotations

import json
import textwrap

import pytest

from bench.execute.trials import judge, plan, select, wilson_interval


@pytest.mark.parametrize("k,n", [(0, 1), (1, 1), (0, 10), (3, 10), (10, 10), (17, 20), (20, 20), (1, 50), (99, 100)])
def test_wilson_matches_scipy(k, n):
    # reference: scipy.stats.binomtest(k, n).proportion_ci(confidence_level=0.95, method="wilson")
    stats = pytest.importorskip("scipy.stats")
    ref = stats.binomtest(k, n).proportion_ci(confidence_level=0.95, method="wilson")
    lo, hi = wilson_interval(k, n)
    assert lo == pytest.approx(ref.low, abs=1e-12)
    assert hi == pytest.approx(ref.high, abs=1e-12)


def test_wilson_textbook_value():
    # 17 of 20: p = 0.85, Wilson 95 % interval [0.640, 0.948] (score interval formula, computed by hand)
    lo, hi = wilson_interval(17, 20)
    assert (round(lo, 3), round(hi, 3)) == (0.64, 0.948)


def _result(scenario: str, status: str) -> dict:
    """A whole result.json mapping (judge reads results as run records)."""
    return {"scenario": scenario, "source": "s.yaml", "controller": "zero", "seed": 0, "status": status,
            "passed": status == "passed", "reason": None, "sim_time_s": 1.0, "wall_time_s": 1.0,
            "realtime_factor": 1.0, "controller_ms": {"p50": 0.0, "p99": 0.0, "max": 0.0}, "criteria": [],
            "metrics": {}, "bench_version": "0", "mujoco_version": "0"}


def _results(k: int, n: int) -> list[dict]:
    return [_result(f"s[trial={i}]", "passed" if i < k else "failed") for i in range(n)]


def test_verdict_is_decided_on_the_lower_bound():
    j = judge(_results(17, 20), 0.8)  # observed 0.85 >= 0.8, but the lower bound 0.64 is not
    assert j["verdict"] == "failed" and j["rate"] == 0.85
    assert j["failing"] == ["s[trial=17]", "s[trial=18]", "s[trial=19]"]
    assert judge(_results(20, 20), 0.8)["verdict"] == "passed"  # lower bound 20/(20+z^2) = 0.839
    assert judge(_results(10, 10), 0.8)["verdict"] == "failed"  # 10/(10+z^2) = 0.722: too few trials
    assert judge(_results(20, 20), None)["verdict"] == "passed"  # no pass_rate_min: every trial must pass
    assert judge(_results(19, 20), None)["verdict"] == "failed"
    assert judge(_results(19, 20), 1.0)["verdict"] == "failed"
    errs = judge([_result("a", "error"), _result("b", "passed")], 0.1)
    assert errs["errors"] == ["a"] and errs["failing"] == ["a"]


TRIALS_YAML = """
    name: tri
    robot: quad12
    duration: 0.4
    seed: 7
    ground: {friction: 0.8}
    payloads:
      - {name: crate, mass: 2.0, size: [0.16, 0.12, 0.08], offset: [-0.1, 0.0, 0.09]}
    disturbances:
      - push: {at: 0.2, duration: 0.05, force: [0, 10, 0]}
    criteria: {no_fall: true, pass_rate_min: 0.2}
    trials: 4
    randomize:
      payloads.crate.mass: [1.0, 60.0]
      ground.friction: {choice: [0.5, 0.9]}
      disturbances.0.push.at: [0.1, 0.3]
"""


@pytest.fixture
def trial_file(tmp_path):
    p = tmp_path / "tri.yaml"
    p.write_text(textwrap.dedent(TRIALS_YAML))
    return p


def test_plan_expands_trials_with_ids_and_distinct_draws(trial_file):
    from bench.scenario import load_scenarios

    sc = load_scenarios([str(trial_file)])
    episodes, seeds, groups = plan(sc)
    assert [e.id for e in episodes] == [f"tri[trial={k}]" for k in range(4)]
    assert len({e.seed for e in episodes}) == 4 and seeds == [None] * 4
    masses = [e.payloads[0].mass for e in episodes]
    assert len(set(masses)) == 4 and all(1.0 <= m <= 60.0 for m in masses)
    assert all(e.ground.friction in (0.5, 0.9) for e in episodes)
    assert len(groups) == 1 and groups[0].indices == [0, 1, 2, 3] and groups[0].required == 0.2
    # the same plan again: the same draws (nothing depends on the process or the time)
    again, _, _ = plan(sc)
    assert [e.payloads[0].mass for e in again] == masses
    # --seed changes the trials' seeds and draws
    other, _, _ = plan(sc, seed=99)
    assert [e.payloads[0].mass for e in other] != masses
    # one trial selected by id is the very same scenario
    one, _, g1, unknown = select(episodes, seeds, groups, ["tri[trial=2]"])
    assert unknown == [] and [e.id for e in one] == ["tri[trial=2]"] and g1[0].indices == [0]
    assert one[0].content_hash == episodes[2].content_hash


def test_run_reports_rate_interval_and_failing_trials(trial_file, tmp_path, capsys):
    from bench.cli import main
    from bench.execute.fingerprint import result_metrics

    out = tmp_path / "out"
    rc = main(["run", str(trial_file), "--controller", "joint-pd", "--out", str(out), "--workers", "2",
               "--no-plots", "--no-history"])
    printed = capsys.readouterr().out
    summary = json.loads((out / "summary.json").read_text())
    assert set(summary) >= {"total", "passed", "failed", "errors", "results", "trials"}  # contract keys kept
    assert summary["total"] == 4
    (t,) = summary["trials"]
    assert t["scenario"] == "tri" and t["trials"] == 4 and t["required"] == 0.2
    k = sum(r["status"] == "passed" for r in summary["results"])
    assert t["passed"] == k and t["rate"] == k / 4
    assert t["interval"] == list(wilson_interval(k, 4))
    assert t["failing"] == [r["scenario"] for r in summary["results"] if r["status"] != "passed"]
    assert t["verdict"] == ("passed" if wilson_interval(k, 4)[0] >= 0.2 else "failed")
    assert rc == (0 if t["verdict"] == "passed" else 1)
    assert "95 % interval" in printed and f"{k}/4" in printed
    # with masses up to 60 kg on a 12 kg robot some trials fall, some stand
    assert 0 < k < 4, f"expected a mix of passing and failing trials, got {k}/4"
    for r in summary["results"]:
        res = json.loads((out / r["result"]).read_text())
        assert res["trial_of"] == "tri"

    # any one trial re-runs alone from its id, with the same result
    failing = t["failing"][0]
    rc1 = main(["run", str(trial_file), "--controller", "joint-pd", "--out", str(tmp_path / "one"),
                "--only", failing, "--workers", "1", "--no-plots", "--no-history"])
    capsys.readouterr()
    alone = json.loads((tmp_path / "one/summary.json").read_text())
    assert [r["scenario"] for r in alone["results"]] == [failing] and rc1 == 1
    full = json.loads((out / next(r["result"] for r in summary["results"] if r["scenario"] == failing)).read_text())
    single = json.loads((tmp_path / "one" / alone["results"][0]["result"]).read_text())
    assert result_metrics(single) == result_metrics(full) and single["seed"] == full["seed"]


def test_unknown_only_id_is_invalid_input(trial_file, tmp_path, capsys):
    from bench.cli import main

    rc = main(["run", str(trial_file), "--only", "tri[trial=9]", "--out", str(tmp_path / "o"), "--no-history"])
    assert rc == 2
    err = capsys.readouterr().err
    assert "tri[trial=9]" in err and "[trial=K]" in err
