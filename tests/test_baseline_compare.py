"""Baselines: tolerances, the comparison, `bench baseline save` and `bench compare`."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from bench.cli import main
from bench.report.baseline import (
    BaselineError,
    compare,
    compare_result,
    judge,
    load_baseline,
    make_baseline,
    read_results,
    tolerance_for,
)
from bench.report.results import write_json, write_summary


def result(sid="stand", status="passed", **metrics) -> dict:
    base = {"height_error_max": 0.010, "drift_max": 0.01, "distance": 0.02, "controller_ms_p99": 0.05,
            "fell": 0.0, "survival_time_s": 1.0}
    base.update(metrics)
    return {"scenario": sid, "status": status, "reason": None if status == "passed" else "it fell",
            "controller": "joint-pd", "seed": 0, "content_hash": "abc", "source": f"{sid}.yaml",
            "criteria": [{"name": "height_error_max", "value": base["height_error_max"], "limit": 0.08,
                          "passed": True, "first_violation_s": None}],
            "metrics": base,
            # the rest of a result.json (readers take results as whole run records)
            "passed": status == "passed", "sim_time_s": 1.0, "wall_time_s": 1.0, "realtime_factor": 1.0,
            "controller_ms": {"p50": 0.0, "p99": 0.0, "max": 0.0}, "bench_version": "0", "mujoco_version": "0"}


def write_results(folder: Path, results: list[dict]) -> Path:
    entries = []
    for r in results:
        slug = r["scenario"].replace("[", ".").replace("]", "").replace("=", "-")
        write_json(folder / slug / "result.json", r)
        entries.append((slug, r))
    write_summary(folder, entries)
    return folder


def test_defaults_per_metric_kind():
    h = tolerance_for("height_error_max")
    assert (h.kind, h.direction, h.abs, h.rel) == ("height", "lower", 0.005, 0.10)
    assert tolerance_for("pitch_error_deg_mean").kind == "angle"
    assert tolerance_for("survival_time_s").direction == "higher"
    assert tolerance_for("controller.qp_fallbacks").direction == "none"   # unknown: reported, never a regression
    assert tolerance_for("fell").allowed(0.0) == 0.0


def test_overrides_exact_beats_pattern_and_scenario_beats_file():
    file_level = {"height_*": {"abs": 0.1}, "height_error_max": {"abs": 0.002}}
    scenario_level = {"height_error_max": {"rel": 0.0}}
    assert tolerance_for("height_error_rms", file_level).abs == 0.1
    t = tolerance_for("height_error_max", file_level, scenario_level)
    assert (t.abs, t.rel) == (0.002, 0.0)
    assert tolerance_for("controller_ms_p99", {"controller_ms_*": {"ignore": True}}).ignore


def test_judge_uses_abs_plus_rel_of_the_baseline():
    t = tolerance_for("height_error_max")            # 0.005 + 10 %
    assert judge(0.010, 0.0159, t) == "same"         # allowed 0.006
    assert judge(0.010, 0.0161, t) == "regressed"
    assert judge(0.010, 0.0039, t) == "improved"
    assert judge(0.010, None, t) == "missing" and judge(None, 0.01, t) == "new"
    assert judge(1.0, 0.5, tolerance_for("path_length")) == "changed"


def test_a_distance_min_criterion_makes_more_distance_better():
    r = result(distance=1.0)
    base = make_baseline([r])
    r2 = result(distance=0.5)
    assert next(x for x in compare_result(base, r2) if x.metric == "distance").verdict == "changed"
    r2["criteria"].append({"name": "distance_min", "value": 0.5, "limit": 0.4, "passed": True,
                           "first_violation_s": None})
    assert next(x for x in compare_result(base, r2) if x.metric == "distance").verdict == "regressed"


def test_status_regression_even_when_metrics_stay():
    base = make_baseline([result()])
    rows = compare_result(base, result(status="failed"))
    assert rows[0].metric == "status" and rows[0].verdict == "regressed" and rows[0].note == "it fell"


def test_compare_lists_new_and_missing():
    base = make_baseline([result("a"), result("b")])
    cmp = compare(base, [result("a"), result("c")])
    assert cmp.new == ["c"] and cmp.missing == ["b"] and not cmp.regressed


def test_save_and_compare_commands(tmp_path, capsys):
    first = write_results(tmp_path / "r1", [result("stand[mass=1]"), result("tight", status="failed")])
    assert main(["baseline", "save", str(first), "-o", str(tmp_path / "baseline.json")]) == 0
    assert "baseline of 2 scenario(s) (1 failed, 1 passed; controller joint-pd)" in capsys.readouterr().out
    doc = json.loads((tmp_path / "baseline.json").read_text())
    assert doc["format"] == "quadruped-bench-baseline" and doc["format_version"] == 1
    assert doc["scenarios"]["stand[mass=1]"]["metrics"]["height_error_max"] == 0.010

    # The same results: nothing to show, exit 0.
    assert main(["compare", str(first), str(tmp_path / "baseline.json")]) == 0
    assert "0 regressed (0 row(s)), 0 improved, 0 new, 0 missing" in capsys.readouterr().out

    worse = write_results(tmp_path / "r2", [result("stand[mass=1]", height_error_max=0.03),
                                            result("tight"), result("new-one")])
    assert main(["compare", str(worse), str(tmp_path / "baseline.json")]) == 1
    out = capsys.readouterr().out
    line = next(x for x in out.splitlines() if x.startswith("regressed"))
    assert "stand[mass=1]" in line and "height_error_max" in line and "0.005 + 10% (lower is better)" in line
    assert any(x.startswith("improved") and "tight" in x and "status" in x for x in out.splitlines())
    assert any(x.startswith("new") and "new-one" in x for x in out.splitlines())
    assert "1 regressed (1 row(s)), 1 improved, 1 new, 0 missing" in out


def test_tolerance_overrides_in_the_baseline_file_are_kept_on_resave(tmp_path, capsys):
    r1 = write_results(tmp_path / "r1", [result("stand")])
    path = tmp_path / "baseline.json"
    main(["baseline", "save", str(r1), "-o", str(path)])
    doc = json.loads(path.read_text())
    doc["tolerances"] = {"height_error_max": {"abs": 0.05}}
    path.write_text(json.dumps(doc))
    worse = write_results(tmp_path / "r2", [result("stand", height_error_max=0.03)])
    assert main(["compare", str(worse), str(path)]) == 0       # within the widened tolerance
    main(["baseline", "save", str(worse), "-o", str(path)])
    assert "kept 1 tolerance override(s)" in capsys.readouterr().out
    assert load_baseline(path)["tolerances"] == {"height_error_max": {"abs": 0.05}}


def test_missing_fails_only_with_strict(tmp_path):
    base = tmp_path / "b.json"
    main(["baseline", "save", str(write_results(tmp_path / "r1", [result("a"), result("b")])), "-o", str(base)])
    part = write_results(tmp_path / "r2", [result("a")])
    assert main(["compare", str(part), str(base)]) == 0
    assert main(["compare", str(part), str(base), "--strict"]) == 1


@pytest.mark.parametrize("doc, words", [
    ({"format": "something-else"}, ["format", "not a baseline file"]),
    ({"format": "quadruped-bench-baseline", "format_version": 9, "scenarios": {}}, ["format_version", "9"]),
    ({"format": "quadruped-bench-baseline", "format_version": 1, "scenarios": {},
      "tolerances": {"height_error_max": {"absolute": 1}}}, ["tolerances.height_error_max.absolute", "unknown key"]),
    ({"format": "quadruped-bench-baseline", "format_version": 1, "scenarios": {},
      "tolerances": {"drift_max": {"rel": -1}}}, ["tolerances.drift_max.rel", ">= 0"]),
    ({"format": "quadruped-bench-baseline", "format_version": 1,
      "scenarios": {"x": {"status": "passed", "tolerances": {"fell": {"direction": "up"}}}}},
     ["scenarios.x.tolerances.fell.direction", "lower, higher, none"]),
])
def test_bad_baseline_files_name_the_field(tmp_path, doc, words):
    p = tmp_path / "b.json"
    p.write_text(json.dumps(doc))
    with pytest.raises(BaselineError) as e:
        load_baseline(p)
    assert str(p) in str(e.value)
    for w in words:
        assert w in str(e.value)


def test_invalid_input_exits_2_without_traceback(tmp_path, capsys):
    (tmp_path / "b.json").write_text("{not json")
    r = write_results(tmp_path / "r", [result("a")])
    assert main(["compare", str(r), str(tmp_path / "b.json")]) == 2
    assert "b.json:1:2: not valid JSON" in capsys.readouterr().err
    main(["baseline", "save", str(r), "-o", str(tmp_path / "good.json")])
    assert main(["compare", str(tmp_path / "nowhere"), str(tmp_path / "good.json")]) == 2
    assert "no such results folder" in capsys.readouterr().err
    assert main(["baseline", "save", str(tmp_path / "nowhere")]) == 2


def test_results_without_summary_are_found_by_folder(tmp_path):
    write_json(tmp_path / "a" / "result.json", result("a"))
    write_json(tmp_path / "b" / "result.json", result("b"))
    assert [r["scenario"] for r in read_results(tmp_path)] == ["a", "b"]


def test_wall_clock_metrics_are_left_out_unless_asked():
    """A busy CI host multiplies compute time; that is not a regression of the controller."""
    base = make_baseline([result(**{"controller.qp_ms_mean": 0.02})])
    slow = result(controller_ms_p99=2.11, **{"controller.qp_ms_mean": 1.5})
    rows = compare_result(base, slow)
    assert not [r for r in rows if r.verdict == "regressed"]
    assert not [r for r in rows if "ms" in r.metric]
    timed = compare_result(base, slow, include_timing=True)
    assert {r.metric for r in timed if r.verdict == "regressed"} == {"controller_ms_p99"}
    assert not compare(base, [slow]).regressed and compare(base, [slow], include_timing=True).regressed
