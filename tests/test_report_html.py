"""The HTML report: self-contained, every scenario on it, the safety caution; loads in a real headless browser."""

from __future__ import annotations

import json
import os
import re
import subprocess
import textwrap
from pathlib import Path

import pytest

os.environ.setdefault("MUJOCO_GL", "egl")

from bench.cli import main  # noqa: E402
from bench.report.html import SAFETY_CAUTION  # noqa: E402

CHROMIUM = Path("/usr/bin/chromium")

SUITE = [
    "name: stand-ok\nduration: 0.6\ncriteria: {no_fall: true, height_error_max: 0.05}\n",
    "name: stand-strict\nduration: 0.6\ncriteria: {no_fall: true, height_error_max: 0.0001}\n",
    textwrap.dedent("""
        name: pushed-loaded
        duration: 0.6
        payloads:
          - {name: crate, mass: 2.0, size: [0.16, 0.12, 0.08], offset: [-0.05, 0, 0.09], attach_at: 0.1}
        disturbances:
          - push: {at: 0.2, duration: 0.1, force: [0, 30, 0]}
        criteria: {no_fall: true, roll_error_max_deg: 20}
        """),
]


@pytest.fixture(scope="module")
def results(tmp_path_factory):
    """A results folder with three scenarios (two pass, one fails), plots, and videos for the failed one."""
    tmp = tmp_path_factory.mktemp("report")
    for i, text in enumerate(SUITE):
        (tmp / "suite").mkdir(exist_ok=True)
        (tmp / "suite" / f"s{i}.yaml").write_text(text)
    out = tmp / "bench-results"
    rc = main(["run", str(tmp / "suite"), "--controller", "joint-pd", "--out", str(out), "--video", "failed",
               "--video-dir", str(tmp / "videos"), "--width", "96", "--height", "64", "--fps", "10"])
    assert rc == 1
    return tmp, out


def _videos_expected() -> int:
    """The failed scenario's two videos, when this machine can render at all (else the run said why)."""
    from bench.render import gl

    try:
        _, ctx = gl.make_context(16, 16)
        ctx.free()
    except gl.RenderUnavailable:
        return 0
    return 2


def test_report_is_self_contained_and_lists_every_scenario(results, capsys):
    tmp, out = results
    page_path = tmp / "page" / "report.html"
    assert main(["report", str(out), "-o", str(page_path)]) == 0
    page = page_path.read_text()
    summary = json.loads((out / "summary.json").read_text())
    for r in summary["results"]:
        assert f'data-scenario="{r["scenario"]}"' in page
    assert page.count(SAFETY_CAUTION.replace("'", "&#x27;")) == 2      # at the top and at the end
    assert re.search(r'<div class="count passed"><b>2</b>passed', page)
    assert re.search(r'<div class="count failed"><b>1</b>failed', page)
    assert page.count('src="data:image/png;base64,') == 3               # every scenario's plots, embedded
    # Nothing is fetched from the network; the only non-embedded references are the relative video links.
    assert not re.search(r'(src|href)="(https?:)?//', page)
    assert "load &#x27;crate&#x27; attached (2 kg)" in page              # event labels, escaped
    links = re.findall(r'<video [^>]*src="([^"]+)"', page)
    assert len(links) == _videos_expected()                              # the failed one: whole episode + clip
    for link in links:
        assert not link.startswith(("/", "file:")) and (page_path.parent / link).is_file()


def test_report_default_location_and_embedded_videos(results):
    tmp, out = results
    assert main(["report", str(out), "--embed-videos"]) == 0
    page = (out / "report.html").read_text()
    assert page.count('src="data:video/mp4;base64,') == _videos_expected()
    assert oct((out / "report.html").stat().st_mode & 0o777) == "0o644"


def test_report_bad_input_names_the_file(tmp_path, capsys):
    assert main(["report", str(tmp_path / "nowhere")]) == 2
    assert "no such folder" in capsys.readouterr().err
    (tmp_path / "r" / "x").mkdir(parents=True)
    (tmp_path / "r" / "x" / "result.json").write_text("{not json")
    assert main(["report", str(tmp_path / "r")]) == 2
    err = capsys.readouterr().err
    assert "result.json: not valid JSON" in err and "Traceback" not in err


def _chromium(url: str, tmp: Path, budget_ms: int = 5000) -> subprocess.CompletedProcess:
    args = [str(CHROMIUM), "--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
            "--disable-component-update", "--disable-sync", "--no-first-run", f"--user-data-dir={tmp}",
            "--enable-logging=stderr", "--v=0", f"--virtual-time-budget={budget_ms}", "--dump-dom", url]
    return subprocess.run(args, capture_output=True, text=True, timeout=90, stdin=subprocess.DEVNULL)


@pytest.mark.skipif(not CHROMIUM.exists(), reason="no /usr/bin/chromium (Debian package 'chromium'); "
                                                  "`apt-get install -y chromium` to run the browser check")
def test_report_loads_in_headless_chromium_without_console_errors(results, tmp_path):
    tmp, out = results
    page_path = out / "report.html"
    assert main(["report", str(out)]) == 0
    proc = _chromium(page_path.resolve().as_uri(), tmp_path / "profile")
    assert proc.returncode == 0, proc.stderr[-2000:]
    # Chromium writes every console message of the page to stderr as "...:CONSOLE:<line>] "<text>", source: ...";
    # the page logs nothing itself, so any such line is an error (an exception, a failed script).
    console = [ln for ln in proc.stderr.splitlines() if ":CONSOLE" in ln]
    assert console == []
    dom = proc.stdout
    body = re.search(r"<body([^>]*)>", dom).group(1)
    n = len(json.loads((out / "summary.json").read_text())["results"])
    assert f'data-ready="{n}"' in body                     # the page's script ran to its end
    for r in json.loads((out / "summary.json").read_text())["results"]:
        assert f'data-scenario="{r["scenario"]}"' in dom
    # Both videos of the failed scenario load in the browser (H.264 in MP4 decodes).
    n_video = _videos_expected()
    assert f'data-videos="{n_video}"' in body and "data-videos-bad" not in body
    if n_video and f'data-videos-ok="{n_video}"' not in body:      # a slow machine: give the media more time
        proc = _chromium(page_path.resolve().as_uri(), tmp_path / "profile2", budget_ms=20000)
        body = re.search(r"<body([^>]*)>", proc.stdout).group(1)
    if n_video:
        assert f'data-videos-ok="{n_video}"' in body and "data-videos-bad" not in body
