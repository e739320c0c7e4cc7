"""The generated reference (docs/reference/) matches the code, and every documented format key has a doc.

The pages are written by ``python -m bench.docgen``; a page edited by hand, or code changed without
re-running the generator, fails here with the command to run.
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import numpy as np

REPO = Path(__file__).resolve().parents[1]
REFERENCE = REPO / "docs" / "reference"


def _generate_in_child(cwd: Path, columns: str, out: Path | None = None, check: bool = False):
    # A child process: nothing registered in this test process (a test's criterion or fault kind) leaks in.
    env = {**os.environ, "COLUMNS": columns, "PYTHONHASHSEED": "random"}
    cmd = [sys.executable, "-m", "bench.docgen"] + (["--check"] if check else []) + (
        ["--out", str(out)] if out else [])
    return subprocess.run(cmd, cwd=cwd, env=env, capture_output=True, text=True, timeout=120)


def test_committed_reference_pages_are_up_to_date(tmp_path):
    proc = _generate_in_child(tmp_path, "37", out=REFERENCE, check=True)
    assert proc.returncode == 0, (
        "docs/reference/ is out of date with the code; run `python -m bench.docgen` and commit the pages:\n"
        + proc.stderr)


def test_generation_is_deterministic_and_has_no_local_paths(tmp_path):
    a, b = tmp_path / "a", tmp_path / "b"
    assert _generate_in_child(tmp_path, "40", out=a).returncode == 0
    assert _generate_in_child(REPO, "250", out=b).returncode == 0
    names = sorted(p.name for p in a.iterdir())
    assert names == sorted(p.name for p in b.iterdir())
    assert {"scenario-format.md", "cli.md", "pytest-options.md", "metrics-and-criteria.md",
            "controller-api.md", "result-files.md", "external-protocol.md", "README.md"} <= set(names)
    for name in names:
        text = (a / name).read_text(encoding="utf-8")
        assert text == (b / name).read_text(encoding="utf-8"), f"{name} differs between two generations"
        assert str(REPO) not in text and str(Path.home()) + "/" not in text, f"{name} holds a local path"
        if name != "README.md":
            assert "Generated" in text.splitlines()[0] and "python -m bench.docgen" in text.splitlines()[0]


def test_check_names_a_stale_page(tmp_path):
    from bench.docgen import differing, write

    write(tmp_path)
    assert differing(tmp_path) == []
    page = tmp_path / "cli.md"
    page.write_text(page.read_text(encoding="utf-8") + "hand edit\n", encoding="utf-8")
    (tmp_path / "result-files.md").unlink()
    assert differing(tmp_path) == ["cli.md", "result-files.md"]
    proc = _generate_in_child(tmp_path, "80", out=tmp_path, check=True)
    assert proc.returncode == 1 and "cli.md: out of date" in proc.stderr and "python -m bench.docgen" in proc.stderr


def test_scenario_page_lists_every_schema_field():
    from bench.docgen import scenario_format
    from bench.scenario.schema import Scenario, TERRAIN_KINDS
    from bench.scenario.validate import yaml_fields

    text = scenario_format.body()
    for f in yaml_fields(Scenario):
        assert f"| `{f.name}` |" in text
    for kind in TERRAIN_KINDS:
        assert f"## terrain[].{kind}" in text
    assert "## faults[].lock" in text and "## payloads[].drain" in text


def test_cli_page_lists_every_command_and_option():
    import argparse

    from bench.cli import build_parser
    from bench.docgen import cli

    text = cli.body()
    parser = build_parser()
    sub = next(a for a in parser._actions if isinstance(a, argparse._SubParsersAction))
    for name, p in sub.choices.items():
        assert f"## `bench {name}`" in text
        for action in p._actions:
            for opt in action.option_strings:
                if opt not in ("-h", "--help"):
                    assert f"`{opt}" in text or f", {opt}" in text, f"bench {name} {opt} missing"


def test_every_result_key_has_a_documented_meaning():
    import dataclasses

    from bench.execute.trials import TRIAL_ENTRY_DOCS, group_summaries, TrialGroup
    from bench.report.record import KEY_DOCS, RunRecord
    from bench.report.results import SUMMARY_DOCS, write_summary
    from bench.sim.trace import CONTRACT_KEYS, EXTRA_KEYS, OPTIONAL_KEYS
    from bench.sim.trace import KEY_DOCS as TRACE_DOCS

    assert {f.name for f in dataclasses.fields(RunRecord)} - {"extra"} <= set(KEY_DOCS)
    assert set(CONTRACT_KEYS + EXTRA_KEYS + OPTIONAL_KEYS) <= set(TRACE_DOCS)
    result = {"scenario": "s[trial=0]", "status": "passed", "reason": None}
    entries = group_summaries([TrialGroup("s", "s.yaml", 1, None, [0])], [_record("s[trial=0]")])
    assert set(entries[0]) <= set(TRIAL_ENTRY_DOCS), set(entries[0]) - set(TRIAL_ENTRY_DOCS)
    import tempfile

    with tempfile.TemporaryDirectory() as d:
        summary = write_summary(Path(d), [("s.trial-0", result)], entries)
    assert set(summary) <= set(SUMMARY_DOCS)


def _record(scenario: str) -> dict:
    from bench.report.record import ControllerTiming, RunRecord

    return RunRecord(scenario=scenario, source="s.yaml", controller="zero", seed=0, status="passed", passed=True,
                     reason=None, sim_time_s=1.0, wall_time_s=1.0, realtime_factor=1.0,
                     controller_ms=ControllerTiming(), criteria=(), metrics={}, bench_version="0",
                     mujoco_version="0").to_json()


def test_every_metric_computed_has_a_documented_meaning():
    from bench.scoring.metrics import METRIC_DOCS, compute_metrics
    from bench.sim.trace import Trace

    tr = Trace.allocate(50, n_joints=12, n_feet=4, nq=19, n_payloads=0)
    tr.arrays["t"][:] = np.arange(50) * 0.002
    tr.arrays["base_quat"][:, 0] = 1.0
    tr.arrays["torque_limit"][:] = 10.0
    tr.meta.update({"nominal_height": 0.3, "control_dt": 0.002})
    met, _ = compute_metrics(tr, score_from=0.0, controller_stats={"qp_ms_mean": 1.0})
    names = {m for m in met if not m.startswith("controller.")}
    assert names == set(METRIC_DOCS), (names ^ set(METRIC_DOCS))


def test_every_robot_attribute_a_controller_gets_is_documented():
    from bench.robot.locate import resolve_robot
    from bench.robot.model import ATTRIBUTE_DOCS, NominalRobot

    robot = NominalRobot(resolve_robot("quad12"))
    public = {n for n in vars(robot) if not n.startswith("_")}
    public |= {n for n, o in vars(NominalRobot).items() if isinstance(o, property) and not n.startswith("_")}
    assert public <= set(ATTRIBUTE_DOCS), f"add to bench.robot.model.ATTRIBUTE_DOCS: {sorted(public - set(ATTRIBUTE_DOCS))}"
