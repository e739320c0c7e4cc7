"""One self-contained HTML page comparing two runs: a baseline and a candidate (or two controllers).

The page says first which verdicts changed (passed -> failed at the top), then
which metrics moved beyond their tolerance, with the regressed ones marked; the
judging is :mod:`bench.report.baseline`'s (the baseline run is frozen with
``make_baseline`` and the candidate compared with ``compare``, so this page and
``bench compare`` never disagree). Each scenario that changed gets a plot of
both runs on the same axes and, when the caller made them, the side-by-side
video. Images are embedded (base64); videos are linked or embedded. Drawing and
rendering are done by the caller (the render stage), passed in as functions and
paths, so reporting does not depend on rendering.
"""

from __future__ import annotations

import base64
import datetime as _dt
import os
from dataclasses import dataclass, field
from html import escape
from pathlib import Path

from bench.report.baseline import (ORDER, BaselineError, Row, compare, load_baseline, make_baseline,
                                   read_results)
from bench.report.html import (CSS, SAFETY_CAUTION, Entry, ReportError, _badge, _num, _video_src, collect,
                               deciding)

COMPARE_FILE = "compare-report.html"
#: Verdict changes, worst first: a pass lost, an error appeared, any other change, a pass gained.
_STATUS_ORDER = {"regressed": 0, "changed": 1, "new": 2, "missing": 3, "improved": 4}

EXTRA_CSS = """
tr.regressed td{background:#fde7e4}tr.improved td{background:#e6f5ea}
.delta{display:inline-block;border-radius:4px;padding:1px 6px;font-size:12px;font-weight:700;color:#fff}
.delta.regressed{background:#d62d20}.delta.improved{background:#1f9d48}.delta.changed,.delta.new,.delta.missing
{background:#6b7580}
.arrow{color:#5b6570;padding:0 4px}
.runs{display:grid;grid-template-columns:max-content 1fr;gap:2px 14px;font-size:13px;margin:10px 0}
.runs dt{color:#5b6570}.runs dd{margin:0}
.swatch{display:inline-block;width:22px;height:0;border-top:3px solid;vertical-align:middle;margin-right:6px}
.swatch.a{border-color:#1f77b4;border-top-style:dashed}.swatch.b{border-color:#d95f02}
"""

SCRIPT = """
(function () {
  var body = document.body, ok = 0, bad = 0;
  document.querySelectorAll('video').forEach(function (v) {
    v.addEventListener('loadedmetadata', function () { ok += 1; body.setAttribute('data-videos-ok', String(ok)); });
    v.addEventListener('error', function () { bad += 1; body.setAttribute('data-videos-bad', String(bad)); });
  });
  body.setAttribute('data-videos', String(document.querySelectorAll('video').length));
  body.setAttribute('data-images', String(document.querySelectorAll('img.overlay').length));
  body.setAttribute('data-ready', String(document.querySelectorAll('section.scenario').length));
})();
"""


@dataclass
class RunSide:
    """One of the two runs: its folder (or baseline file), label and scenario entries by id."""

    path: Path
    label: str
    entries: dict[str, Entry] = field(default_factory=dict)
    from_file: bool = False        # a baseline.json: statuses and metrics only, no traces or videos

    @property
    def controllers(self) -> str:
        names = sorted({str(e.result.get("controller", "?")) for e in self.entries.values()})
        return ", ".join(names) or "?"


@dataclass
class TwoRuns:
    """What the page shows: both runs, the comparison rows, and the scenarios that changed."""

    baseline: RunSide
    candidate: RunSide
    rows: list[Row]
    new: list[str]
    missing: list[str]
    changed: list[str]                                  # scenarios with any row other than "same", worst first
    status_rows: list[Row]
    metric_rows: list[Row]
    overlays: dict[str, bytes] = field(default_factory=dict)
    videos: dict[str, Path] = field(default_factory=dict)

    def verdict_of(self, sid: str) -> str:
        """A scenario's overall change: regressed if anything regressed, else its worst other row."""
        found = [r.verdict for r in self.rows if r.scenario == sid and r.verdict != "same"]
        return min(found, key=ORDER.__getitem__) if found else "same"


def _entries(path: Path) -> dict[str, Entry]:
    entries, _ = collect(path, make_plots=False)
    out: dict[str, Entry] = {}
    for e in entries:
        out.setdefault(e.sid, e)
    return out


def compare_runs(baseline_path: str | Path, candidate_dir: str | Path, *, tolerances: str | Path | None = None,
                 include_timing: bool = False, labels: tuple[str, str] | None = None) -> TwoRuns:
    """Compare the candidate results folder with a baseline results folder (or a ``baseline.json``).

    ``tolerances``: a baseline file whose ``tolerances`` override the defaults. Raises
    :class:`ReportError` naming the file and field for input that cannot be used.
    """
    bpath, cpath = Path(baseline_path), Path(candidate_dir)
    try:
        cand_results = read_results(cpath)
        if bpath.is_file():
            base_doc = load_baseline(bpath)
            base_side = RunSide(bpath, "baseline", {}, from_file=True)
        else:
            base_doc = make_baseline(read_results(bpath))
            base_side = RunSide(bpath, "baseline", _entries(bpath))
        if tolerances is not None:
            base_doc["tolerances"] = load_baseline(tolerances)["tolerances"]
    except BaselineError as exc:
        raise ReportError(str(exc)) from None
    cand_side = RunSide(cpath, "candidate", _entries(cpath))
    if labels:
        base_side.label, cand_side.label = labels
    elif not base_side.from_file and base_side.controllers != cand_side.controllers:
        base_side.label, cand_side.label = base_side.controllers, cand_side.controllers   # two controllers
    cmp = compare(base_doc, cand_results, include_timing=include_timing)
    rows = cmp.rows
    status_rows = [r for r in rows if (r.metric == "status" and r.verdict != "same")
                   or (r.metric == "scenario" and r.verdict in ("new", "missing"))]
    status_rows.sort(key=lambda r: (_STATUS_ORDER.get(r.verdict, 9), r.scenario))
    metric_rows = [r for r in rows if r.metric not in ("status", "scenario") and r.verdict != "same"]
    metric_rows.sort(key=lambda r: (ORDER[r.verdict], r.scenario, r.metric))
    touched = {r.scenario for r in rows if r.verdict != "same"}
    two = TwoRuns(base_side, cand_side, rows, cmp.new, cmp.missing, [], status_rows, metric_rows)
    two.changed = sorted(touched, key=lambda s: (ORDER[two.verdict_of(s)], s))
    return two


# ---------------------------------------------------------------- the page

def _status_cell(status) -> str:
    return _badge(str(status)) if status else "<span class=meta>absent</span>"


def _delta(verdict: str) -> str:
    text = {"regressed": "REGRESSED", "improved": "improved"}.get(verdict, verdict)
    return f'<span class="delta {escape(verdict)}">{escape(text)}</span>'


def _anchor(sid: str) -> str:
    return "c-" + "".join(ch if ch.isalnum() or ch in "-_" else "-" for ch in sid)


def _value(x) -> str:
    if isinstance(x, (int, float)) and not isinstance(x, bool):
        return _num(x, "{:.4g}")
    return escape(str(x)) if x is not None else "&ndash;"


def _verdict_table(two: TwoRuns) -> str:
    if not two.status_rows:
        return "<p id=no-verdict-changes>No verdict changed.</p>"
    out = ['<table id="verdict-changes"><thead><tr><th>change</th><th>scenario</th>'
           f"<th>{escape(two.baseline.label)}</th><th></th><th>{escape(two.candidate.label)}</th>"
           f"<th>deciding criterion ({escape(two.candidate.label)})</th>"
           f"<th>deciding criterion ({escape(two.baseline.label)})</th></tr></thead><tbody>"]
    for r in two.status_rows:
        b = two.baseline.entries.get(r.scenario)
        c = two.candidate.entries.get(r.scenario)
        b_status = r.baseline if r.metric == "status" else (r.baseline if r.verdict == "missing" else None)
        c_status = r.current if r.metric == "status" else (r.current if r.verdict == "new" else None)
        sid = escape(r.scenario)
        link = f'<a href="#{_anchor(r.scenario)}">{sid}</a>' if r.scenario in two.changed else sid
        out.append(f'<tr class="{escape(r.verdict)}" data-scenario="{escape(r.scenario, quote=True)}">'
                   f"<td>{_delta(r.verdict)}</td><td>{link}</td><td>{_status_cell(b_status)}</td>"
                   f"<td class=arrow>&rarr;</td><td>{_status_cell(c_status)}</td>"
                   f"<td>{escape(deciding(c.result)) if c else escape(r.note)}</td>"
                   f"<td>{escape(deciding(b.result)) if b else ''}</td></tr>")
    out.append("</tbody></table>")
    return "".join(out)


def _metric_table(rows: list[Row], two: TwoRuns, table_id: str = "metric-deltas") -> str:
    if not rows:
        return f"<p id=no-{table_id}>No metric moved beyond its tolerance.</p>"
    out = [f'<table id="{table_id}"><thead><tr><th>change</th><th>scenario</th><th>metric</th>'
           f"<th>{escape(two.baseline.label)}</th><th>{escape(two.candidate.label)}</th><th>difference</th>"
           "<th>tolerance</th><th>better</th></tr></thead><tbody>"]
    for r in rows:
        tol = r.tolerance
        out.append(f'<tr class="{escape(r.verdict)}" data-scenario="{escape(r.scenario, quote=True)}" '
                   f'data-metric="{escape(r.metric, quote=True)}" data-verdict="{escape(r.verdict)}">'
                   f"<td>{_delta(r.verdict)}</td><td>{escape(r.scenario)}</td><td>{escape(r.metric)}</td>"
                   f"<td class=num>{_value(r.baseline)}</td><td class=num>{_value(r.current)}</td>"
                   f"<td class=num>{escape(r.change)}</td>"
                   f"<td class=num>{escape(tol.describe()) if tol else ''}</td>"
                   f"<td>{escape(tol.direction) if tol and tol.direction != 'none' else 'either'}</td></tr>")
    out.append("</tbody></table>")
    return "".join(out)


def _section(two: TwoRuns, sid: str, page_dir: Path, embed_videos: bool) -> str:
    verdict = two.verdict_of(sid)
    b, c = two.baseline.entries.get(sid), two.candidate.entries.get(sid)
    head = (f'<section class="scenario" id="{_anchor(sid)}" data-scenario="{escape(sid, quote=True)}" '
            f'data-change="{escape(verdict)}"><h2>{escape(sid)} {_delta(verdict)}</h2>')
    facts = []
    for side, e in ((two.baseline, b), (two.candidate, c)):
        if e is None:
            facts.append(f"<dt>{escape(side.label)}</dt><dd>not in this run</dd>")
            continue
        reason = e.result.get("reason")
        facts.append(f"<dt>{escape(side.label)}</dt><dd>{_badge(e.status)} controller "
                     f"{escape(str(e.result.get('controller', '?')))} &middot; {escape(deciding(e.result))}"
                     + (f" &middot; {escape(str(reason))}" if reason and e.status != "passed" else "") + "</dd>")
    notes = [r.note for r in two.rows if r.scenario == sid and r.metric == "scenario" and r.note]
    if notes:      # the scenario itself changed (its file, its seed): the runs are not like for like
        facts.append(f"<dt>note</dt><dd class=scenario-note>{escape('; '.join(notes))}</dd>")
    rows = [r for r in two.metric_rows if r.scenario == sid]
    body = [head, f"<dl class=runs>{''.join(facts)}</dl>"]
    if rows:
        body.append("<h3>Metrics beyond tolerance</h3>" + _metric_table(rows, two, f"m-{_anchor(sid)}"))
    video = two.videos.get(sid)
    if video is not None and Path(video).is_file():
        src = _video_src(Path(video), page_dir, embed_videos)
        link = escape(Path(video).name) if embed_videos else f'<a href="{src}">{escape(Path(video).name)}</a>'
        still = Path(video).with_suffix(".jpg")
        poster = (' poster="data:image/jpeg;base64,' + base64.b64encode(still.read_bytes()).decode("ascii") + '"'
                  if still.is_file() else "")
        body.append(f"<h3>Side by side</h3><div class=meta>{escape(two.baseline.label)} left, "
                    f"{escape(two.candidate.label)} right, same simulated instant &middot; {link}</div>"
                    f'<video controls muted preload="metadata"{poster} src="{src}"></video>')
    png = two.overlays.get(sid)
    if png:
        body.append(f'<h3>Both runs on the same axes</h3><p class=meta><span class="swatch a"></span>'
                    f'{escape(two.baseline.label)} (dashed) <span class="swatch b"></span>'
                    f'{escape(two.candidate.label)} (solid); vertical lines: first violations; dashed red: '
                    f'the candidate\'s limits; a cross: where an episode stopped early.</p>'
                    f'<img class="plots overlay" alt="{escape(sid, quote=True)}: both runs" '
                    f'src="data:image/png;base64,{base64.b64encode(png).decode("ascii")}">')
    elif not two.baseline.from_file:
        body.append("<p class=missing>no overlay plot (a run recorded no trace)</p>")
    body.append("</section>")
    return "".join(body)


def render_compare_html(two: TwoRuns, page_dir: Path, embed_videos: bool = False) -> str:
    b, c = two.baseline, two.candidate
    n_cand = len(c.entries)
    reg = [r for r in two.status_rows if r.verdict == "regressed"]
    imp = [r for r in two.status_rows if r.verdict == "improved"]
    n_metric_reg = sum(r.verdict == "regressed" for r in two.metric_rows)
    now = _dt.datetime.now().strftime("%Y-%m-%d %H:%M")
    unchanged = sorted(set(c.entries) - set(two.changed))
    parts = [
        "<!doctype html>", '<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">', '<link rel="icon" href="data:,">',
        f"<title>Two runs: {len(reg)} verdict(s) lost, {len(imp)} gained, {n_metric_reg} metric(s) regressed</title>",
        f"<style>{CSS}{EXTRA_CSS}</style></head><body>",
        f"<h1>{escape(b.label)} vs {escape(c.label)}</h1>",
        f"<dl class=runs><dt><span class=\"swatch a\"></span>{escape(b.label)}</dt><dd>{escape(str(b.path))}"
        + ("" if b.from_file else f" &middot; controller {escape(b.controllers)}") + "</dd>"
        f"<dt><span class=\"swatch b\"></span>{escape(c.label)}</dt><dd>{escape(str(c.path))} &middot; controller "
        f"{escape(c.controllers)}</dd></dl>",
        f"<p class=meta>made {now}. A metric counts as moved when it differs by more than abs + rel &times; "
        f"|{escape(b.label)}|; it regressed when it moved the worse way.</p>",
        '<div class="counts" id="summary">',
        f'<div class="count"><b>{n_cand}</b>scenarios</div>',
        f'<div class="count failed"><b>{len(reg)}</b>verdicts lost</div>',
        f'<div class="count passed"><b>{len(imp)}</b>verdicts gained</div>',
        f'<div class="count errors"><b>{n_metric_reg}</b>metrics regressed</div>',
        f'<div class="count"><b>{len(unchanged)}</b>unchanged</div>',
        "</div>",
        "<h2 id=verdicts>Verdict changes</h2>", _verdict_table(two),
        "<h2 id=metrics style=\"margin-top:18px\">Metric changes beyond tolerance</h2>", _metric_table(two.metric_rows, two),
    ]
    parts += [_section(two, sid, page_dir, embed_videos) for sid in two.changed if sid in c.entries]
    if unchanged:
        parts.append(f"<details><summary>{len(unchanged)} scenario(s) with no change beyond tolerance</summary>"
                     f"<p class=meta>{escape(', '.join(unchanged))}</p></details>")
    parts += [f'<div class="caution"><b>Caution.</b> {escape(SAFETY_CAUTION)}</div>',
              f"<script>{SCRIPT}</script></body></html>"]
    return "\n".join(parts) + "\n"


def write_compare_report(two: TwoRuns, out: str | Path, embed_videos: bool = False) -> Path:
    """Write the page to ``out``; return its path."""
    from bench.report.results import write_atomic

    out = Path(out)
    page = render_compare_html(two, out.parent, embed_videos)
    write_atomic(out, page.encode("utf-8"))
    try:
        os.chmod(out, 0o644)
    except OSError:
        pass
    return out
