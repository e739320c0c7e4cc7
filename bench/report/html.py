"""One self-contained HTML page for a results folder: what a person opens to see what happened.

The page holds summary counts, a table of scenarios (status, deciding
criterion, key metrics) and, for each scenario, its plots (PNG embedded as
base64), its videos (linked relative to the page, or embedded on request), its
criteria and its events. It loads nothing from the network; its one small
script filters the table by status. It reads only files that ``bench run`` and
``bench render`` wrote (``summary.json``, ``result.json``, ``media.json``,
``plots.png``), drawing a missing ``plots.png`` from ``trace.npz`` when asked.
"""

from __future__ import annotations

import base64
import datetime as _dt
import json
import math
import os
from dataclasses import dataclass, field
from html import escape
from pathlib import Path
from urllib.parse import quote

SAFETY_CAUTION = ("Passing these scenarios in simulation does not make a controller safe on hardware. Trials on a "
                  "real robot follow the lab's safety procedures, local regulations and the robot maker's "
                  "instructions.")
STATUSES = ("passed", "failed", "error", "timeout")
#: (metric key, column header, display scale, format) for the table's key metrics.
KEY_METRICS = (
    ("height_error_max", "height err. max [mm]", 1000.0, "{:.1f}"),
    ("roll_error_deg_max", "roll max [deg]", 1.0, "{:.2f}"),
    ("pitch_error_deg_max", "pitch max [deg]", 1.0, "{:.2f}"),
    ("velocity_rmse", "velocity RMSE [m/s]", 1.0, "{:.3f}"),
    ("drift_max", "drift max [m]", 1.0, "{:.3f}"),
    ("torque_saturation", "torque sat. [%]", 100.0, "{:.1f}"),
    ("controller_ms_p99", "ctrl p99 [ms]", 1.0, "{:.3f}"),
)


class ReportError(Exception):
    """A results folder the report cannot be made from; ``str()`` names the file."""


@dataclass
class Entry:
    dir: Path
    result: dict
    media: dict = field(default_factory=dict)
    plots: Path | None = None

    @property
    def sid(self) -> str:
        return str(self.result.get("scenario", self.dir.name))

    @property
    def status(self) -> str:
        return str(self.result.get("status", "error"))


def _read_json(path: Path):
    try:
        return json.loads(path.read_text())
    except OSError as exc:
        raise ReportError(f"{path}: not readable: {exc}") from None
    except ValueError as exc:
        raise ReportError(f"{path}: not valid JSON: {exc}") from None


def collect(results_dir: str | Path, make_plots: bool = True, plotter=None) -> tuple[list[Entry], dict | None]:
    """The scenario results under ``results_dir`` in run order (summary.json's order when there is one).

    ``plotter(result_dir)`` draws a missing ``plots.png`` (the caller passes the render stage's; this
    module draws nothing itself, so reporting does not depend on rendering).
    """
    root = Path(results_dir)
    if (root / "result.json").is_file() and not (root / "summary.json").is_file():
        dirs, summary = [root], None           # one scenario's folder
    else:
        if not root.is_dir():
            raise ReportError(f"{root}: no such folder")
        summary = _read_json(root / "summary.json") if (root / "summary.json").is_file() else None
        if summary is not None:
            if not isinstance(summary, dict) or not isinstance(summary.get("results"), list):
                raise ReportError(f"{root / 'summary.json'}: field 'results' missing (not a bench summary)")
            dirs = [root / Path(r["result"]).parent for r in summary["results"] if isinstance(r, dict)
                    and r.get("result")]
        else:
            dirs = sorted(p.parent for p in root.glob("*/result.json"))
        if not dirs:
            raise ReportError(f"{root}: no scenario results in it (run `bench run` first)")
    entries = []
    for d in dirs:
        rpath = d / "result.json"
        if not rpath.is_file():
            raise ReportError(f"{rpath}: listed in summary.json but missing")
        result = _read_json(rpath)
        if not isinstance(result, dict) or "scenario" not in result:
            raise ReportError(f"{rpath}: field 'scenario' missing (not a bench result file)")
        media = {}
        if (d / "media.json").is_file():
            try:
                media = _read_json(d / "media.json")
            except ReportError:
                media = {}
        plots = d / "plots.png"
        if not plots.is_file() and make_plots and plotter is not None and (d / "trace.npz").is_file():
            try:
                plotter(d)
            except Exception:  # noqa: BLE001 - the page says the plots are missing
                pass
        entries.append(Entry(d, result, media, plots if plots.is_file() else None))
    return entries, summary


# ---------------------------------------------------------------- formatting

def _num(x, fmt: str = "{:.3g}", scale: float = 1.0) -> str:
    if x is None or isinstance(x, bool) or not isinstance(x, (int, float)) or not math.isfinite(x):
        return "&ndash;"
    return escape(fmt.format(x * scale))


def _units() -> dict[str, str]:
    try:
        from bench.scoring.criteria import available

        return {name: str(getattr(c, "unit", "")).strip() for name, c in available().items()}
    except Exception:  # noqa: BLE001
        return {}


def deciding(result: dict) -> str:
    """The criterion that decided the verdict, as ``bench run``'s table shows it (the record's own choice)."""
    from bench.report.record import RecordError
    from bench.report.tables import deciding_text

    try:
        return deciding_text(result, width=200)
    except RecordError as exc:   # a result.json this bench cannot read as a record: say so on the page
        return str(result.get("reason") or f"unreadable result: {exc}")


def _badge(status: str) -> str:
    cls = status if status in STATUSES else "error"
    return f'<span class="badge {cls}">{escape(status.upper())}</span>'


def _anchor(e: Entry, i: int) -> str:
    return f"s{i}-" + "".join(ch if ch.isalnum() or ch in "-_" else "-" for ch in e.dir.name)


def _video_src(path: Path, page_dir: Path, embed: bool) -> str:
    if embed:
        return "data:video/mp4;base64," + base64.b64encode(path.read_bytes()).decode("ascii")
    try:
        rel = os.path.relpath(path.resolve(), page_dir.resolve())
    except ValueError:             # another drive: an absolute link
        return escape(path.resolve().as_uri(), quote=True)
    return "/".join(quote(part) for part in Path(rel).parts)


CSS = """
body{font-family:system-ui,-apple-system,"Segoe UI",Roboto,sans-serif;margin:0 auto;max-width:1180px;padding:0 18px 40px;
color:#1d232a;background:#fbfbfa}
h1{margin:22px 0 4px;font-size:26px}h2{margin:0;font-size:20px}h3{font-size:15px;margin:18px 0 6px;color:#39424c}
.meta{color:#5b6570;font-size:13px;margin:0 0 10px}
.caution{border-left:5px solid #e69a00;background:#fff6e0;padding:10px 14px;margin:14px 0;font-size:14px}
.counts{display:flex;gap:12px;margin:16px 0;flex-wrap:wrap}
.count{border-radius:8px;padding:10px 18px;background:#eceff1;min-width:90px;text-align:center}
.count b{display:block;font-size:26px}.count.passed{background:#dff3e4}.count.failed{background:#fbe0dd}
.count.errors{background:#fff0cc}
table{border-collapse:collapse;width:100%;font-size:13px;background:#fff}
th,td{border-bottom:1px solid #e3e6e8;padding:5px 7px;text-align:left;vertical-align:top}
th{background:#f1f3f4;font-weight:600}td.num{text-align:right;font-variant-numeric:tabular-nums}
tr.fail td{background:#fff7f6}
.badge{display:inline-block;border-radius:4px;padding:1px 7px;font-size:12px;font-weight:700;color:#fff}
.badge.passed{background:#1f9d48}.badge.failed{background:#d62d20}.badge.error,.badge.timeout{background:#d08700}
.filters{margin:10px 0}.filters button{margin-right:6px;padding:4px 10px;border:1px solid #b8c0c7;border-radius:4px;
background:#fff;cursor:pointer}.filters button.on{background:#1d232a;color:#fff}
section.scenario{background:#fff;border:1px solid #e3e6e8;border-radius:8px;padding:14px 16px;margin:18px 0}
.reason{margin:6px 0 0;color:#8a1c12}.scenario.passed .reason{color:#555}
dl.facts{display:grid;grid-template-columns:max-content 1fr;gap:2px 14px;font-size:13px;margin:10px 0}
dl.facts dt{color:#5b6570}dl.facts dd{margin:0}
img.plots{max-width:100%;border:1px solid #e3e6e8}
video{max-width:100%;background:#000;display:block;margin:4px 0}
.videos{display:flex;flex-direction:column;gap:10px}
.missing{color:#8a5a00;font-size:13px}
details{margin-top:8px}summary{cursor:pointer;color:#39424c}
.pass-yes{color:#1f9d48;font-weight:600}.pass-no{color:#d62d20;font-weight:600}
"""

SCRIPT = """
(function () {
  var buttons = document.querySelectorAll('.filters button');
  function show(which) {
    document.querySelectorAll('[data-status]').forEach(function (el) {
      var st = el.getAttribute('data-status');
      var on = which === 'all' || st === which || (which === 'error' && st === 'timeout');
      el.style.display = on ? '' : 'none';
    });
    buttons.forEach(function (b) { b.classList.toggle('on', b.getAttribute('data-filter') === which); });
  }
  buttons.forEach(function (b) { b.addEventListener('click', function () { show(b.getAttribute('data-filter')); }); });
  show('all');
  var body = document.body, ok = 0, bad = 0;
  document.querySelectorAll('video').forEach(function (v) {
    v.addEventListener('loadedmetadata', function () { ok += 1; body.setAttribute('data-videos-ok', String(ok)); });
    v.addEventListener('error', function () { bad += 1; body.setAttribute('data-videos-bad', String(bad)); });
  });
  body.setAttribute('data-videos', String(document.querySelectorAll('video').length));
  body.setAttribute('data-ready', String(document.querySelectorAll('section.scenario').length));
})();
"""


PLOT_KEY = ("<p class=meta>Grey: before <code>score_from</code>, not scored. Shaded: timed events (red pushes, "
            "orange load changes, violet faults). Dashed red: criterion limits. Solid red line: first violation. "
            "Dashed black in the force panel: the weight carried (m g).</p>")
VIDEO_KEY = ("Cyan arrows: ground force on each foot; red arrow: a push; orange box: the payload. "
             "Captions name each event while it acts; the verdict is shown at the end.")


def _criteria_table(result: dict, units: dict[str, str]) -> str:
    rows = []
    for c in result.get("criteria") or []:
        ok = bool(c.get("passed"))
        unit = escape(units.get(c.get("name"), ""))
        limit = "required" if c.get("name") == "no_fall" else _num(c.get("limit"))
        value = ("fell" if c.get("value") else "did not fall") if c.get("name") == "no_fall" else _num(c.get("value"))
        rows.append(f"<tr class=\"{'' if ok else 'fail'}\"><td>{escape(str(c.get('name')))}</td>"
                    f"<td class=num>{value}</td><td class=num>{limit}</td><td>{unit}</td>"
                    f"<td class=\"{'pass-yes' if ok else 'pass-no'}\">{'pass' if ok else 'FAIL'}</td>"
                    f"<td class=num>{_num(c.get('first_violation_s'), '{:.2f} s')}</td></tr>")
    if not rows:
        return "<p class=missing>no criteria</p>"
    return ("<table><thead><tr><th>criterion</th><th>value</th><th>limit</th><th>unit</th><th>result</th>"
            "<th>first violation</th></tr></thead><tbody>" + "".join(rows) + "</tbody></table>")


def _events(result: dict) -> str:
    ev = result.get("events") or []
    if not ev:
        return "<p class=meta>none</p>"
    items = "".join(f"<li>{_num(e.get('t_start'), '{:.2f}')}&ndash;{_num(e.get('t_end'), '{:.2f}')} s: "
                    f"{escape(str(e.get('label', e.get('kind'))))}</li>" for e in ev[:60])
    more = f"<li>&hellip; and {len(ev) - 60} more</li>" if len(ev) > 60 else ""
    return f"<ul>{items}{more}</ul>"


def _videos(e: Entry, page_dir: Path, embed: bool) -> str:
    out = []
    titles = {"main": "whole episode", "violation": "around the first violation (slowed down)",
              "compare": "side by side"}
    for v in sorted(e.media.get("videos") or [], key=lambda v: ("main", "violation", "compare").index(v.get("kind"))
                    if v.get("kind") in ("main", "violation", "compare") else 9):
        p = Path(v.get("path", ""))
        p = p if p.is_absolute() else e.dir / p
        label = titles.get(v.get("kind"), str(v.get("kind")))
        if v.get("slowmo") and float(v["slowmo"]) != 1.0:
            label += f", {float(v['slowmo']):g}x slower"
        if not p.is_file():
            out.append(f"<p class=missing>video ({escape(label)}) listed in media.json but not found: "
                       f"{escape(str(p))}</p>")
            continue
        src = _video_src(p, page_dir, embed)
        link = escape(p.name) if embed else f'<a href="{src}">{escape(p.name)}</a>'
        still = p.with_suffix(".jpg")
        poster = (' poster="data:image/jpeg;base64,' + base64.b64encode(still.read_bytes()).decode("ascii") + '"'
                  if still.is_file() else "")
        out.append(f"<div><div class=meta>{escape(label)} &middot; {link}</div>"
                   f'<video controls muted preload="metadata"{poster} src="{src}"></video></div>')
    return f"<p class=meta>{escape(VIDEO_KEY)}</p><div class=videos>" + "".join(out) + "</div>" if out else ""


def _metrics_details(result: dict) -> str:
    met = result.get("metrics") or {}
    if not met:
        return ""
    rows = "".join(f"<tr><td>{escape(str(k))}</td><td class=num>{_num(v, '{:.4g}')}</td></tr>"
                   for k, v in sorted(met.items()))
    return (f"<details><summary>all {len(met)} metrics</summary><table><thead><tr><th>metric</th><th>value</th>"
            f"</tr></thead><tbody>{rows}</tbody></table></details>")


def _signals(e: Entry) -> str:
    """The controller's own per-tick signals (``signal_*`` in trace.npz): shape and min, mean, max, last value."""
    names = e.result.get("controller_signals") or []
    if not names:
        return ""
    rows = []
    try:
        import numpy as np

        with np.load(e.dir / "trace.npz", allow_pickle=False) as z:
            for name in names:
                key = f"signal_{name}"
                if key not in z.files:
                    continue
                v = np.asarray(z[key], dtype=float)
                flat = v.reshape(len(v), -1) if len(v) else v.reshape(0, 1)
                for j in range(flat.shape[1]):
                    col = flat[:, j]
                    ok = col[np.isfinite(col)]
                    label = name if flat.shape[1] == 1 else f"{name}[{j}]"
                    stats = (ok.min(), ok.mean(), ok.max(), col[-1]) if ok.size else (None,) * 4
                    rows.append(f"<tr><td><code>{escape(label)}</code></td>"
                                + "".join(f"<td class=num>{_num(x, '{:.4g}')}</td>" for x in stats) + "</tr>")
    except (OSError, ValueError, KeyError) as exc:   # a report is made from whatever is there
        return f"<h3>Controller signals</h3><p class=missing>trace.npz could not be read: {escape(str(exc))}</p>"
    if not rows:
        return ""
    return ("<h3>Controller signals (logged by the controller each tick; <code>signal_&lt;name&gt;</code> in "
            "trace.npz, drawn in the plots)</h3><table><thead><tr><th>signal</th><th>min</th><th>mean</th>"
            "<th>max</th><th>last</th></tr></thead><tbody>" + "".join(rows) + "</tbody></table>")


def _trials(summary: dict | None) -> str:
    trials = (summary or {}).get("trials") or []
    if not trials:
        return ""
    rows = []
    for t in trials:
        lo, hi = (t.get("interval") or [None, None])[:2]
        req = "all" if t.get("required") is None else _num(t.get("required"), "{:g}")
        rows.append(f"<tr data-status=\"{escape(str(t.get('verdict')))}\"><td>{escape(str(t.get('scenario')))}</td>"
                    f"<td class=num>{t.get('passed')}/{t.get('trials')}</td><td class=num>{_num(t.get('rate'), '{:.2f}')}"
                    f"</td><td class=num>[{_num(lo, '{:.2f}')}, {_num(hi, '{:.2f}')}]</td><td class=num>{req}</td>"
                    f"<td>{_badge(str(t.get('verdict')))}</td></tr>")
    return ("<h3>Trials (pass rate with its 95 % Wilson interval; <code>pass_rate_min</code> is checked against the "
            "lower bound)</h3><table><thead><tr><th>scenario</th><th>passed</th><th>rate</th><th>95 % interval</th>"
            "<th>required</th><th>verdict</th></tr></thead><tbody>" + "".join(rows) + "</tbody></table>")


def render_html(entries: list[Entry], summary: dict | None, page_dir: Path, title_dir: str = "",
                embed_videos: bool = False) -> str:
    units = _units()
    n = len(entries)
    counts = {s: sum(e.status == s for e in entries) for s in STATUSES}
    errors = counts["error"] + counts["timeout"]
    controllers = sorted({str(e.result.get("controller", "?")) for e in entries})
    versions = sorted({f"bench {e.result.get('bench_version', '?')}, MuJoCo {e.result.get('mujoco_version', '?')}"
                       for e in entries})
    now = _dt.datetime.now().strftime("%Y-%m-%d %H:%M")
    head = [
        "<!doctype html>", '<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        '<link rel="icon" href="data:,">',
        f"<title>Scenario report: {counts['passed']} of {n} passed</title>",
        f"<style>{CSS}</style></head><body>",
        "<h1>Scenario report</h1>",
        f"<p class=meta>results {escape(title_dir)} &middot; controller{'s' if len(controllers) != 1 else ''} "
        f"{escape(', '.join(controllers))} &middot; {escape('; '.join(versions))} &middot; made {now}</p>",
        f'<div class="caution" id="caution"><b>Caution.</b> {escape(SAFETY_CAUTION)}</div>',
        '<div class="counts" id="summary">',
        f'<div class="count"><b>{n}</b>scenarios</div>',
        f'<div class="count passed"><b>{counts["passed"]}</b>passed</div>',
        f'<div class="count failed"><b>{counts["failed"]}</b>failed</div>',
        f'<div class="count errors"><b>{errors}</b>errors / timeouts</div>',
        "</div>",
        '<div class="filters">show: <button data-filter="all">all</button><button data-filter="passed">passed</button>'
        '<button data-filter="failed">failed</button><button data-filter="error">errors</button></div>',
    ]
    metric_heads = "".join(f"<th>{escape(h)}</th>" for _, h, _, _ in KEY_METRICS)
    table = [f'<table id="results"><thead><tr><th>scenario</th><th>controller</th><th>status</th>'
             f"<th>deciding criterion (value / limit)</th>{metric_heads}<th>realtime</th></tr></thead><tbody>"]
    sections = []
    for i, e in enumerate(entries):
        r, a = e.result, _anchor(e, i)
        met = r.get("metrics") or {}
        cells = "".join(f"<td class=num>{_num(met.get(k), fmt, sc)}</td>" for k, _, sc, fmt in KEY_METRICS)
        table.append(f"<tr data-status=\"{escape(e.status)}\" class=\"{'' if e.status == 'passed' else 'fail'}\">"
                     f"<td><a href=\"#{a}\">{escape(e.sid)}</a></td><td>{escape(str(r.get('controller', '?')))}</td>"
                     f"<td>{_badge(e.status)}</td><td>{escape(deciding(r))}</td>{cells}"
                     f"<td class=num>{_num(r.get('realtime_factor'), '{:.1f}x')}</td></tr>")
        ms = r.get("controller_ms") or {}
        facts = [("controller", escape(str(r.get("controller", "?")))), ("seed", escape(str(r.get("seed", "?")))),
                 ("scenario file", escape(str(r.get("source", "?")))),
                 ("simulated", f"{_num(r.get('sim_time_s'), '{:.2f} s')} in {_num(r.get('wall_time_s'), '{:.2f} s')}"
                               f" ({_num(r.get('realtime_factor'), '{:.1f}x')} real time)"),
                 ("controller time per tick", f"p50 {_num(ms.get('p50'), '{:.3f}')} ms, p99 "
                                              f"{_num(ms.get('p99'), '{:.3f}')} ms, max {_num(ms.get('max'), '{:.2f}')} ms")]
        if r.get("controller_name") and r.get("controller_name") != r.get("controller"):
            facts.append(("controller's own name", escape(str(r["controller_name"]))))
        if r.get("controller_params"):
            facts.append(("controller parameters", escape(", ".join(
                f"{k}={json.dumps(v)}" for k, v in sorted(dict(r["controller_params"]).items())))))
        if r.get("trial_of"):
            facts.append(("trial of", escape(str(r["trial_of"]))))
        if r.get("tags"):
            facts.append(("tags", escape(", ".join(map(str, r["tags"])))))
        facts_html = "".join(f"<dt>{k}</dt><dd>{v}</dd>" for k, v in facts)
        plots = (f'<img class="plots" alt="time series of {escape(e.sid)}" src="data:image/png;base64,'
                 f'{base64.b64encode(e.plots.read_bytes()).decode("ascii")}">' if e.plots else
                 "<p class=missing>no plots (no trace was recorded, or run with --plots)</p>")
        videos = _videos(e, page_dir, embed_videos)
        reason = f'<p class="reason">{escape(str(r.get("reason")))}</p>' if r.get("reason") else ""
        sections.append(
            f'<section class="scenario {escape(e.status)}" id="{a}" data-status="{escape(e.status)}" '
            f'data-scenario="{escape(e.sid, quote=True)}">'
            f"<h2>{escape(e.sid)} {_badge(e.status)}</h2>{reason}<dl class=facts>{facts_html}</dl>"
            f"<h3>Criteria</h3>{_criteria_table(r, units)}"
            + (f"<h3>Video</h3>{videos}" if videos else "")
            + f"<h3>Plots</h3>{PLOT_KEY}{plots}"
            f"<h3>Events (not told to the controller)</h3>{_events(r)}"
            + _signals(e) + _metrics_details(r) + "</section>")
    table.append("</tbody></table>")
    tail = [_trials(summary), "".join(sections),
            f'<div class="caution"><b>Caution.</b> {escape(SAFETY_CAUTION)}</div>',
            f"<script>{SCRIPT}</script></body></html>"]
    return "\n".join(head + table + tail) + "\n"


def write_report(results_dir: str | Path, out: str | Path | None = None, embed_videos: bool = False,
                 make_plots: bool = True, plotter=None) -> Path:
    """Write the page for ``results_dir`` (default ``<results_dir>/report.html``); return its path."""
    from bench.report.results import write_atomic

    results_dir = Path(results_dir)
    out = Path(out) if out else results_dir / "report.html"
    entries, summary = collect(results_dir, make_plots=make_plots, plotter=plotter)
    page = render_html(entries, summary, out.parent, str(results_dir), embed_videos)
    write_atomic(out, page.encode("utf-8"))
    try:
        os.chmod(out, 0o644)      # a page to be opened and shared, not a private file
    except OSError:
        pass
    return out
