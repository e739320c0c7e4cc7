"""Plots beside result.json: written by `bench run` (unless --no-plots), never changing the verdict."""

from __future__ import annotations

import json

from bench.cli import main

SCENARIO = """
name: {name}
duration: 0.6
score_from: 0.2
payloads:
  - {{name: crate, mass: 2.0, size: [0.16, 0.12, 0.08], offset: [-0.05, 0, 0.09], drop_at: 0.4}}
disturbances:
  - push: {{at: 0.3, duration: 0.1, force: [0, 30, 0]}}
criteria: {{no_fall: true, height_error_max: {limit}, roll_error_max_deg: 10}}
"""

PNG_MAGIC = b"\x89PNG\r\n\x1a\n"


def test_run_writes_plots_beside_every_result(tmp_path, write_scenario, capsys):
    write_scenario(SCENARIO.format(name="loose", limit=0.05), "suite/loose.yaml")
    write_scenario(SCENARIO.format(name="tight", limit=0.0001), "suite/tight.yaml")
    out = tmp_path / "res"
    rc = main(["run", str(tmp_path / "suite"), "--controller", "joint-pd", "--out", str(out)])
    printed = capsys.readouterr().out
    assert rc == 1
    assert "plots: 2 x plots.png beside result.json" in printed
    for name in ("loose", "tight"):
        png = (out / name / "plots.png").read_bytes()
        assert png[:8] == PNG_MAGIC and len(png) > 20_000
        # The PNG header's width and height (big-endian at bytes 16..24): 10 x 11 inches at 80 dpi.
        assert int.from_bytes(png[16:20], "big") == 800 and int.from_bytes(png[20:24], "big") == 880


def test_no_plots_option_and_plots_do_not_touch_results(tmp_path, write_scenario, capsys):
    path = write_scenario(SCENARIO.format(name="loose", limit=0.05))
    out = tmp_path / "res"
    assert main(["run", str(path), "--controller", "joint-pd", "--out", str(out), "--no-plots"]) == 0
    assert not (out / "loose" / "plots.png").exists()
    before = (out / "loose" / "result.json").read_bytes()
    from bench.render.plots import plot_result

    assert plot_result(out / "loose", score_from=0.2).is_file()
    assert (out / "loose" / "result.json").read_bytes() == before


def test_plot_of_a_result_without_trace_is_skipped(tmp_path):
    from bench.render.plots import plot_result

    d = tmp_path / "broken"
    d.mkdir()
    (d / "result.json").write_text(json.dumps({"scenario": "broken", "status": "error", "reason": "world could not "
                                               "be built", "criteria": [], "events": []}))
    assert plot_result(d) is None
