"""summary.md: the Markdown page for a CI job summary."""

from __future__ import annotations

import json
import os
import re
import subprocess
import sys
from pathlib import Path

import pytest

from bench.report.baseline import compare, make_baseline
from bench.report.markdown import summary_markdown, write_summary_markdown

REPO = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="module")
def run_dir(tmp_path_factory):
    out = tmp_path_factory.mktemp("md") / "out"
    env = {**os.environ, "PYTHONPATH": str(REPO)}
    proc = subprocess.run([sys.executable, "-m", "bench", "run", str(REPO / "scenarios/basics/stand-still.yaml"),
                           str(REPO / "scenarios/faults/frozen-encoders.yaml"), "--controller", "force-qp-l1",
                           "--out", str(out), "--workers", "1", "--no-history"], capture_output=True, text=True,
                          env=env)
    assert proc.returncode == 1, proc.stdout + proc.stderr     # frozen-encoders fails with this stack
    summary = json.loads((out / "summary.json").read_text())
    results = [json.loads((out / e["result"]).read_text()) for e in summary["results"]]
    return out, summary, results


def _table_rows_consistent(text: str) -> None:
    """Every row of a Markdown table has as many cells as its header (escaped pipes do not count)."""
    header_cells = None
    for line in text.splitlines():
        if not line.startswith("|"):
            header_cells = None
            continue
        cells = len(re.findall(r"(?<!\\)\|", line))
        if header_cells is None:
            header_cells = cells
        assert cells == header_cells, line


def test_failing_scenario_listed_with_its_deciding_criterion_and_links(run_dir):
    out, summary, results = run_dir
    text = summary_markdown(out, summary, results)
    failed = next(r for r in results if r["status"] != "passed")
    passed = next(r for r in results if r["status"] == "passed")
    assert f"{summary['passed']} of {summary['total']} passed" in text
    assert f"`{failed['scenario']}`" in text and f"`{passed['scenario']}`" not in text
    row = next(line for line in text.splitlines() if f"`{failed['scenario']}`" in line)
    crit = min((c for c in failed["criteria"] if not c["passed"]),
               key=lambda c: (c["first_violation_s"] is None, c["first_violation_s"] or 0))
    assert crit["name"] in row
    if crit["first_violation_s"] is not None and crit["name"] != "no_fall":
        assert f"first at {crit['first_violation_s']:.2f} s" in row
    assert "[plots](" in row
    link = re.search(r"\[plots\]\(([^)]+)\)", row).group(1)
    assert (out / link).is_file()
    _table_rows_consistent(text)
    assert "not make a controller safe on hardware" in text


def test_regressions_against_a_baseline_are_listed(run_dir):
    out, summary, results = run_dir
    baseline = make_baseline(results)
    failed = next(r for r in results if r["status"] != "passed")
    baseline["scenarios"][failed["scenario"]]["status"] = "passed"      # it passed in the baseline
    text = summary_markdown(out, summary, results, comparison=compare(baseline, results))
    assert "1 regressed" in text and "(regressed)" in text
    assert "### Regressions against the baseline" in text
    _table_rows_consistent(text)


def test_pipes_in_reasons_do_not_break_tables(run_dir, tmp_path):
    out, summary, results = run_dir
    broken = [dict(r, status="error", reason="controller raised ValueError: a | b | c") for r in results]
    text = summary_markdown(out, summary, broken)
    assert "a \\| b \\| c" in text
    _table_rows_consistent(text)
    path = write_summary_markdown(tmp_path, summary, broken)
    assert path.name == "summary.md" and path.read_text() == summary_markdown(tmp_path, summary, broken)
