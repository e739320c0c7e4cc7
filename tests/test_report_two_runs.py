"""``bench report CANDIDATE --against BASELINE``: verdict changes first, regressed metrics marked with the judging of
``bench compare``, both runs' traces overlaid, side-by-side videos; loads in a real headless browser."""

from __future__ import annotations

import json
import re
import subprocess
from pathlib import Path

import pytest

from bench.cli import main
from bench.report.baseline import compare, make_baseline, read_results

CHROMIUM = Path("/usr/bin/chromium")

# The same three scenario ids in both runs (joint-pd stands in all of them):
#   flip-to-pass: impossible height limit in the baseline, loose in the candidate   -> verdict gained
#   flip-to-fail: loose in the baseline, impossible in the candidate                -> verdict lost
#   pushed:       no push in the baseline, a sideways push in the candidate (passes) -> metrics regressed
BASELINE = {
    "flip-to-pass": "name: flip-to-pass\nduration: 0.5\ncriteria: {no_fall: true, height_error_max: 0.00001}\n",
    "flip-to-fail": "name: flip-to-fail\nduration: 0.5\ncriteria: {no_fall: true, height_error_max: 0.05}\n",
    "pushed": "name: pushed\nduration: 0.6\ncriteria: {no_fall: true, roll_error_max_deg: 30}\n",
}
CANDIDATE = {
    "flip-to-pass": "name: flip-to-pass\nduration: 0.5\ncriteria: {no_fall: true, height_error_max: 0.05}\n",
    "flip-to-fail": "name: flip-to-fail\nduration: 0.5\ncriteria: {no_fall: true, height_error_max: 0.00001}\n",
    "pushed": ("name: pushed\nduration: 0.6\ndisturbances:\n  - push: {at: 0.2, duration: 0.1, force: [0, 45, 0]}\n"
               "criteria: {no_fall: true, roll_error_max_deg: 30}\n"),
}


def _gl_works() -> bool:
    from bench.render import gl

    try:
        _, ctx = gl.make_context(16, 16)
        ctx.free()
    except gl.RenderUnavailable:
        return False
    return True


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("two")
    out = {}
    for name, suite in (("base", BASELINE), ("cand", CANDIDATE)):
        d = tmp / f"suite-{name}"
        d.mkdir()
        for sid, text in suite.items():
            (d / f"{sid}.yaml").write_text(text)
        out[name] = tmp / f"results-{name}"
        assert main(["run", str(d), "--controller", "joint-pd", "--out", str(out[name]), "--no-plots"]) == 1
    return tmp, out["base"], out["cand"]


def test_verdict_changes_come_first_worst_first_and_regressed_metrics_are_marked(runs, capsys):
    tmp, base, cand = runs
    page_path = tmp / "page.html"
    assert main(["report", str(cand), "--against", str(base), "-o", str(page_path)]) == 0
    page = page_path.read_text()
    # Verdict changes before the metric table, the lost verdict before the gained one.
    i_verdicts, i_metrics = page.index('id="verdict-changes"'), page.index('id="metric-deltas"')
    assert i_verdicts < i_metrics
    verdict_table = page[i_verdicts:i_metrics]
    rows = re.findall(r'<tr class="(\w+)" data-scenario="([^"]+)"', verdict_table)
    assert rows == [("regressed", "flip-to-fail"), ("improved", "flip-to-pass")]
    # The regressed metrics on the page are exactly those `bench compare` finds (the same judging, reused).
    cmp = compare(make_baseline(read_results(base)), read_results(cand))
    expected = {(r.scenario, r.metric) for r in cmp.regressions() if r.metric not in ("status", "scenario")}
    metric_table = page[i_metrics:page.index("</table>", i_metrics)]
    marked = set(re.findall(r'<tr class="regressed" data-scenario="([^"]+)" data-metric="([^"]+)"', metric_table))
    assert ("pushed", "roll_error_deg_max") in marked
    assert marked == expected
    assert metric_table.count("REGRESSED") == len(expected)
    # Regressed rows come before any other row of the metric table.
    verdicts = re.findall(r'data-verdict="(\w+)"', metric_table)
    assert verdicts[: len(expected)] == ["regressed"] * len(expected)
    # Both runs' traces overlaid in one embedded picture per changed scenario.
    for sid in ("flip-to-fail", "flip-to-pass", "pushed"):
        section = re.search(rf'<section class="scenario" id="[^"]*" data-scenario="{sid}".*?</section>', page, re.S)
        assert section and re.search(r'<img class="plots overlay" [^>]*src="data:image/png;base64,', section.group(0))
        # the scenario files differ between the runs, and the page says so
        assert "scenario file changed since the baseline" in section.group(0)
    assert not re.search(r'(src|href)="(https?:)?//', page)


def test_two_controllers_are_named_and_default_location(runs, tmp_path):
    tmp, base, cand = runs
    zero = tmp_path / "zero"
    main(["run", str(tmp / "suite-base"), "--controller", "zero", "--out", str(zero), "--no-plots"])
    assert main(["report", str(zero), "--against", str(base)]) == 0
    page = (zero / "compare-report.html").read_text()
    assert "<h1>joint-pd vs zero</h1>" in page                 # two controllers: the page names them
    rows = re.findall(r'<tr class="(\w+)" data-scenario="([^"]+)"', page[page.index('id="verdict-changes"'):])
    assert ("regressed", "flip-to-fail") in rows and ("regressed", "pushed") in rows   # zero falls everywhere


def test_against_bad_input_names_the_file(runs, tmp_path, capsys):
    _, base, cand = runs
    assert main(["report", str(cand), "--against", str(tmp_path / "nowhere")]) == 2
    err = capsys.readouterr().err
    assert "nowhere: no such results folder" in err and "Traceback" not in err
    bad = tmp_path / "bad.json"
    bad.write_text('{"format": "quadruped-bench-baseline", "format_version": 1, "scenarios": {}, '
                   '"tolerances": {"roll*": {"abs": -1}}}')
    assert main(["report", str(cand), "--against", str(base), "--tolerances", str(bad)]) == 2
    assert "tolerances.roll*.abs: expected a number >= 0" in capsys.readouterr().err


def test_against_a_baseline_file_uses_its_tolerances(runs, tmp_path):
    _, base, cand = runs
    bfile = tmp_path / "baseline.json"
    assert main(["baseline", "save", str(base), "-o", str(bfile)]) == 0
    doc = json.loads(bfile.read_text())
    doc["tolerances"] = {"roll_error_deg_*": {"ignore": True}}
    bfile.write_text(json.dumps(doc))
    out = tmp_path / "p.html"
    assert main(["report", str(cand), "--against", str(bfile), "-o", str(out)]) == 0
    page = out.read_text()
    assert 'data-metric="roll_error_deg_max"' not in page          # ignored by the file's tolerances
    assert 'data-scenario="flip-to-fail"' in page


def _chromium(url: str, profile: Path, budget_ms: int = 5000) -> subprocess.CompletedProcess:
    args = [str(CHROMIUM), "--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
            "--disable-component-update", "--disable-sync", "--no-first-run", f"--user-data-dir={profile}",
            "--enable-logging=stderr", "--v=0", f"--virtual-time-budget={budget_ms}", "--dump-dom", url]
    return subprocess.run(args, capture_output=True, text=True, timeout=90, stdin=subprocess.DEVNULL)


@pytest.mark.skipif(not CHROMIUM.exists(), reason="no /usr/bin/chromium (Debian package 'chromium'); "
                                                  "`apt-get install -y chromium` to run the browser check")
def test_two_run_report_with_videos_loads_in_headless_chromium(runs, tmp_path):
    _, base, cand = runs
    page_path = tmp_path / "cmp" / "report.html"
    assert main(["report", str(cand), "--against", str(base), "-o", str(page_path), "--videos",
                 "--size", "96x64", "--fps", "10", "--preview", "none"]) == 0
    page = page_path.read_text()
    # Videos for the two verdict changes and the regressed scenario, next to the page, linked relatively.
    n_video = 3 if _gl_works() else 0
    links = re.findall(r'<video [^>]*src="([^"]+)"', page)
    assert len(links) == n_video
    for link in links:
        assert (page_path.parent / link).is_file() and link.startswith("videos/")
    proc = _chromium(page_path.resolve().as_uri(), tmp_path / "profile")
    assert proc.returncode == 0, proc.stderr[-2000:]
    assert [ln for ln in proc.stderr.splitlines() if ":CONSOLE" in ln] == []
    body = re.search(r"<body([^>]*)>", proc.stdout).group(1)
    assert 'data-ready="3"' in body and 'data-images="3"' in body        # the script ran; three overlays
    assert f'data-videos="{n_video}"' in body and "data-videos-bad" not in body
    if n_video and f'data-videos-ok="{n_video}"' not in body:          # a slow machine: more time for the media
        proc = _chromium(page_path.resolve().as_uri(), tmp_path / "profile2", budget_ms=20000)
        body = re.search(r"<body([^>]*)>", proc.stdout).group(1)
    if n_video:
        assert f'data-videos-ok="{n_video}"' in body
