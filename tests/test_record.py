"""The run record: one definition of result.json, read back key for key, tolerant of older files."""

from __future__ import annotations

import json
from dataclasses import fields

import pytest

from bench.report.record import REQUIRED_KEYS, RecordError, RunRecord
from bench.scoring.criteria import CriterionResult
from bench.scoring.verdict import criterion_margin, deciding_criterion

#: result.json as the bench wrote it before the record existed (no fingerprint, uid, deciding, margins)
OLD = {
    "scenario": "stand", "source": "s/stand.yaml", "controller": "joint-pd", "seed": 3, "status": "failed",
    "passed": False, "reason": "height_error_max: 0.02 m > limit 0.01 m (first at 0.40 s)", "sim_time_s": 1.0,
    "wall_time_s": 0.5, "realtime_factor": 2.0, "controller_ms": {"p50": 0.1, "p99": 0.2, "max": 0.3},
    "criteria": [{"name": "no_fall", "value": 0.0, "limit": None, "passed": True, "first_violation_s": None},
                 {"name": "height_error_max", "value": 0.02, "limit": 0.01, "passed": False,
                  "first_violation_s": 0.4}],
    "metrics": {"height_error_max": 0.02, "fell": 0.0, "distance": None},
    "bench_version": "0.1.0", "mujoco_version": "3.3.0", "content_hash": "abc", "tags": ["t"],
    "events": [{"t_start": 0.1, "kind": "push"}], "episode_status": "completed", "score_from_s": 0.5,
    "trace_sha256": "f" * 64, "mujoco_warnings": [],
}


def _full() -> dict:
    new = dict(OLD, traceback="Traceback ...", trial_of="stand-trials", watchdog_restored=["SIGALRM handler"],
               fingerprint="9" * 64,
               fingerprint_parts={"scenario": "abc", "robot_mjcf": "def"}, result_uid="0" * 32,
               deciding={"name": "height_error_max", "value": 0.02, "limit": 0.01, "margin": -1.0,
                         "first_violation_s": 0.4, "passed": False},
               controller_params={"kp_pos": [40, 40, 90], "solver": "daqp"}, controller_name="force-qp",
               controller_signals=["l1_load_kg", "qp_ok"],
               a_newer_key={"kept": [1, 2]})
    new["criteria"] = [dict(c, margin=-1.0) if c["limit"] else dict(c) for c in OLD["criteria"]]
    return new


def test_round_trip_keeps_every_key_and_value():
    data = _full()
    rec = RunRecord.from_json(data)
    assert rec.to_json() == data                       # every key, every value, nothing added or dropped
    assert RunRecord.from_json(json.loads(json.dumps(rec.to_json()))) == rec
    # every field of the record is a key of the file (extra holds the unknown ones)
    assert {f.name for f in fields(RunRecord)} - {"extra"} <= set(rec.to_json())
    assert rec.deciding.name == "height_error_max" and rec.criterion("height_error_max").margin == -1.0
    assert rec.extra == {"a_newer_key": {"kept": [1, 2]}}


def test_an_old_result_without_the_new_keys_loads():
    rec = RunRecord.from_json(OLD)
    assert rec.fingerprint == "" and rec.result_uid == "" and rec.deciding is None and rec.fingerprint_parts == {}
    assert rec.trial_of is None and rec.traceback is None
    out = rec.to_json()
    assert {k: out[k] for k in OLD} == OLD             # the old keys come back as they were
    assert "trial_of" not in out and "traceback" not in out   # optional keys stay absent


def test_an_error_result_keeps_its_shape():
    err = {k: OLD[k] for k in REQUIRED_KEYS} | {"status": "error", "reason": "world could not be built",
                                                "criteria": [], "metrics": {}}
    rec = RunRecord.from_json(err)
    assert rec.is_error and "trace_sha256" not in rec.to_json() and "episode_status" not in rec.to_json()


@pytest.mark.parametrize("key", REQUIRED_KEYS)
def test_a_missing_required_key_is_named(key):
    data = dict(OLD)
    del data[key]
    with pytest.raises(RecordError, match=repr(key)):
        RunRecord.from_json(data)


@pytest.mark.parametrize("key,value", [("seed", "3"), ("status", "maybe"), ("passed", "yes"), ("sim_time_s", None),
                                       ("criteria", {}), ("metrics", {"x": "1"}), ("reason", 4)])
def test_a_mistyped_key_is_named(key, value):
    with pytest.raises(RecordError, match=key):
        RunRecord.from_json(dict(OLD, **{key: value}))


def test_replace_keeps_passed_in_step_with_status():
    rec = RunRecord.from_json(OLD).replace(status="passed", reason=None)
    assert rec.passed and rec.to_json()["passed"] is True


# --------------------------------------------------------------------------- the deciding criterion


def _c(name, value, limit, passed, first=None):
    return CriterionResult(name, value, limit, passed, first)


def test_margin_is_normalised_by_the_limit_and_signed():
    assert criterion_margin(0.02, 0.05, "max") == pytest.approx(0.6)     # (0.05 - 0.02) / 0.05
    assert criterion_margin(3.0, 2.0, "min") == pytest.approx(0.5)       # (3 - 2) / 2
    assert criterion_margin(0.06, 0.05, "max") == pytest.approx(-0.2)    # violated: negative
    assert criterion_margin(-0.1, 0.0, "max") == pytest.approx(0.1)      # zero limit: raw difference
    assert criterion_margin(0.0, None, "max") is None and criterion_margin(1.0, 2.0, None) is None


def test_failure_is_decided_by_the_earliest_violation_not_the_file_order():
    crits = [_c("no_fall", 1.0, None, False, 2.5),
             _c("height_error_max", 0.2, 0.05, False, 1.8),
             _c("roll_error_max_deg", 40.0, 10.0, False, 0.9),       # listed last, violated first
             _c("velocity_rmse_max", 0.5, 0.1, False, None)]         # over the episode: counts as at the end
    margins = {"no_fall": None, "height_error_max": -3.0, "roll_error_max_deg": -3.0, "velocity_rmse_max": -4.0}
    d = deciding_criterion(crits, margins)
    assert d.name == "roll_error_max_deg" and d.first_violation_s == 0.9 and d.margin == -3.0 and not d.passed


def test_failure_ties_go_to_the_file_order():
    crits = [_c("a_max", 2.0, 1.0, True), _c("b_max", 2.0, 1.0, False, 0.5), _c("c_max", 3.0, 1.0, False, 0.5)]
    assert deciding_criterion(crits, {}).name == "b_max"


def test_a_pass_is_decided_by_the_least_margin():
    crits = [_c("no_fall", 0.0, None, True), _c("height_error_max", 0.01, 0.05, True),
             _c("roll_error_max_deg", 9.0, 10.0, True), _c("distance_min", 3.0, 2.0, True)]
    margins = {"no_fall": None, "height_error_max": 0.8, "roll_error_max_deg": 0.1, "distance_min": 0.5}
    d = deciding_criterion(crits, margins)
    assert d.name == "roll_error_max_deg" and d.margin == 0.1 and d.passed
    # only no_fall: it decides, without a margin
    assert deciding_criterion([_c("no_fall", 0.0, None, True)], {"no_fall": None}).name == "no_fall"
