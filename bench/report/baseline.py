"""Baselines: a results folder frozen as ``baseline.json``, and the comparison of a later run against it.

A metric counts as changed when it moved by more than ``abs + rel * |baseline|``
(the form of ``numpy.isclose``). Whether a change is a regression depends on the
metric's direction: ``lower`` (an error, a time), ``higher`` (a distance, a
survival time) or ``none`` (informational: it is reported as changed, never as
a regression). Defaults come per metric kind (:data:`KINDS`, chosen by the
metric's name in :func:`metric_kind`); a baseline file overrides them with a
``tolerances`` mapping, globally and per scenario, by metric name or by
``fnmatch`` pattern. A scenario whose status went from ``passed`` to anything
else has regressed whatever its metrics say.

The baseline file (``format_version`` 1)::

    {"format": "quadruped-bench-baseline", "format_version": 1,
     "created": "...", "git": {"commit": "...", "dirty": false} | null, "bench_version": "...",
     "tolerances": {"height_error_max": {"abs": 0.002}, "controller_ms_*": {"ignore": true}},
     "scenarios": {"<scenario id>": {"status", "controller", "seed", "content_hash", "source",
                                     "metrics": {...}, "tolerances": {...}}}}
"""

from __future__ import annotations

import datetime as _dt
import fnmatch
import json
import math
from dataclasses import dataclass, replace
from pathlib import Path

from bench.report.record import RecordError, RunRecord, as_record
from bench.scoring.metrics import is_timing_metric

FORMAT = "quadruped-bench-baseline"
FORMAT_VERSION = 1
DIRECTIONS = ("lower", "higher", "none")
TOLERANCE_KEYS = ("abs", "rel", "direction", "ignore")


class BaselineError(ValueError):
    """A baseline or results file that cannot be used; the message names the file and the field."""


@dataclass(frozen=True)
class Tolerance:
    abs: float
    rel: float
    direction: str = "lower"
    ignore: bool = False
    kind: str = "other"

    def allowed(self, base: float) -> float:
        """How far a value may move from ``base`` and still count as the same."""
        return self.abs + self.rel * abs(base)

    def describe(self) -> str:
        if self.ignore:
            return "ignored"
        parts = []
        if self.abs:
            parts.append(f"{self.abs:g}")
        if self.rel:
            parts.append(f"{self.rel * 100:g}%")
        return " + ".join(parts) or "exact"


#: Default tolerance per metric kind. The simulation is deterministic, so any change with the same
#: code is real; the tolerances absorb floating-point differences between machines and MuJoCo
#: builds and changes too small to matter for a robot of this size (common practice, no source).
KINDS: dict[str, Tolerance] = {
    "height": Tolerance(abs=0.005, rel=0.10, direction="lower", kind="height"),            # m
    "height_signed": Tolerance(abs=0.005, rel=0.10, direction="none", kind="height_signed"),
    "angle": Tolerance(abs=0.5, rel=0.10, direction="lower", kind="angle"),               # deg
    "drift": Tolerance(abs=0.02, rel=0.10, direction="lower", kind="drift"),              # m
    # Net distance is wanted when walking and drift when standing: its direction comes from a
    # distance_min criterion when the scenario sets one (see criterion_directions).
    "distance": Tolerance(abs=0.05, rel=0.10, direction="none", kind="distance"),         # m
    "velocity": Tolerance(abs=0.02, rel=0.10, direction="lower", kind="velocity"),        # m/s, rad/s
    "share": Tolerance(abs=0.01, rel=0.10, direction="lower", kind="share"),              # 0..1
    # Compute time depends on the machine and its load: only a doubling (plus 0.5 ms) counts.
    "timing": Tolerance(abs=0.5, rel=1.0, direction="lower", kind="timing"),              # ms
    "timing_max": Tolerance(abs=0.5, rel=1.0, direction="none", kind="timing_max"),      # ms
    "fall": Tolerance(abs=0.0, rel=0.0, direction="lower", kind="fall"),                  # 0/1
    "survival": Tolerance(abs=0.01, rel=0.0, direction="higher", kind="survival"),        # s
    # Properties of the scenario rather than of the controller; a change means the scenario changed.
    "scenario": Tolerance(abs=1e-6, rel=1e-6, direction="none", kind="scenario"),
    "info": Tolerance(abs=1e-9, rel=0.05, direction="none", kind="info"),
    "other": Tolerance(abs=1e-9, rel=0.05, direction="none", kind="other"),
}

_EXACT_KIND = {
    "height_error_signed_mean": "height_signed",
    "drift_max": "drift",
    "distance": "distance",
    "path_length": "info",
    "velocity_rmse": "velocity",
    "yaw_rate_rmse": "velocity",
    "torque_saturation": "share",
    "controller_ms_p50": "timing",
    "controller_ms_p99": "timing",
    "controller_ms_max": "timing_max",   # one slow tick (a page fault, a busy CI host) says little
    "fell": "fall",
    "survival_time_s": "survival",
    "total_mass_max": "scenario",
    "ext_impulse_ns": "scenario",
}


def metric_kind(name: str) -> str:
    """The kind whose default tolerance applies to metric ``name``."""
    if name in _EXACT_KIND:
        return _EXACT_KIND[name]
    if name.startswith("height_error_"):
        return "height"
    if "_deg_" in name or name.endswith("_deg"):
        return "angle"
    return "other"   # e.g. a controller's own statistics (controller.*): direction unknown unless overridden


def _check_override(spec, where: str) -> dict:
    if not isinstance(spec, dict):
        raise BaselineError(f"{where}: expected a mapping with keys {', '.join(TOLERANCE_KEYS)}, got {spec!r}")
    for key, value in spec.items():
        if key not in TOLERANCE_KEYS:
            raise BaselineError(f"{where}.{key}: unknown key (accepted: {', '.join(TOLERANCE_KEYS)})")
        if key in ("abs", "rel") and (isinstance(value, bool) or not isinstance(value, (int, float))
                                      or not math.isfinite(value) or value < 0):
            raise BaselineError(f"{where}.{key}: expected a number >= 0, got {value!r}")
        if key == "direction" and value not in DIRECTIONS:
            raise BaselineError(f"{where}.direction: expected one of {', '.join(DIRECTIONS)}, got {value!r}")
        if key == "ignore" and not isinstance(value, bool):
            raise BaselineError(f"{where}.ignore: expected true or false, got {value!r}")
    return spec


def _lookup(overrides: dict | None, name: str) -> dict | None:
    if not overrides:
        return None
    if name in overrides:
        return overrides[name]
    for pattern in sorted(overrides):   # sorted: the same pattern wins on every run
        if fnmatch.fnmatchcase(name, pattern):
            return overrides[pattern]
    return None


def tolerance_for(name: str, *overrides: dict | None) -> Tolerance:
    """The tolerance of metric ``name``: its kind's default, then each override mapping in turn
    (later ones win; an exact name beats a pattern within one mapping)."""
    tol = KINDS[metric_kind(name)]
    for mapping in overrides:
        spec = _lookup(mapping, name)
        if spec:
            tol = replace(tol, **{k: (float(v) if k in ("abs", "rel") else v) for k, v in spec.items()})
    return tol


def criterion_directions(criteria: list[dict] | None) -> dict[str, dict]:
    """``{metric: {"direction": ...}}`` for the metrics that a result's criteria limit: a ``*_max``
    criterion makes lower better, a ``*_min`` one higher (an override layer for :func:`tolerance_for`)."""
    if not criteria:
        return {}
    from bench.scoring.criteria import available

    known = available()
    out = {}
    for c in criteria:
        crit = known.get(c.get("name"))
        metric, sense = getattr(crit, "metric", None), getattr(crit, "sense", None)
        if metric and sense in ("max", "min"):
            out[metric] = {"direction": "lower" if sense == "max" else "higher"}
    return out


def judge(base: float | None, cur: float | None, tol: Tolerance) -> str:
    """``same``, ``regressed``, ``improved``, ``changed`` (direction none), ``new`` or ``missing``."""
    if base is None and cur is None:
        return "same"
    if base is None:
        return "new"
    if cur is None:
        return "missing"
    if tol.ignore or abs(cur - base) <= tol.allowed(base):
        return "same"
    if tol.direction == "none":
        return "changed"
    worse = cur > base if tol.direction == "lower" else cur < base
    return "regressed" if worse else "improved"


# --------------------------------------------------------------------------- results folders


def read_results(results_dir: str | Path) -> list[dict]:
    """Every ``result.json`` that the folder's ``summary.json`` lists (all ``*/result.json`` without one).

    Folders of scenarios that the last run did not include are left out."""
    root = Path(results_dir)
    if not root.is_dir():
        raise BaselineError(f"{root}: no such results folder (give the --out folder of a `bench run`)")
    paths: list[Path] = []
    summary = root / "summary.json"
    if summary.is_file():
        data = _read_json(summary)
        for i, entry in enumerate(data.get("results", []) if isinstance(data, dict) else []):
            rel = entry.get("result") if isinstance(entry, dict) else None
            if not isinstance(rel, str):
                raise BaselineError(f"{summary}: results.{i}.result: expected the path of a result.json")
            paths.append(root / rel)
    else:
        # No summary (a run killed before writing it): every scenario folder.
        paths = sorted(root.glob("*/result.json"))
    results = []
    seen: set[str] = set()
    for p in paths:
        if not p.is_file():
            raise BaselineError(f"{p}: listed in {summary} but missing")
        r = _read_json(p)
        try:
            rec = RunRecord.from_json(r)
        except RecordError as exc:
            raise BaselineError(f"{p}: not a result.json: {exc}") from None
        if rec.scenario in seen:
            continue
        seen.add(rec.scenario)
        results.append(r)
    if not results:
        raise BaselineError(f"{root}: no result.json files in this folder")
    return results


def _read_json(path: Path):
    try:
        return json.loads(Path(path).read_text(encoding="utf-8"))
    except OSError as exc:
        raise BaselineError(f"{path}: cannot be read: {exc.strerror or exc}") from None
    except json.JSONDecodeError as exc:
        raise BaselineError(f"{path}:{exc.lineno}:{exc.colno}: not valid JSON: {exc.msg}") from None


def _finite_metrics(metrics) -> dict[str, float]:
    out = {}
    for k, v in (metrics or {}).items():
        if isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v):
            out[str(k)] = float(v)
    return out


# --------------------------------------------------------------------------- baseline files


def make_baseline(results: list[dict], *, git: dict | None = None, tolerances: dict | None = None,
                  keep: dict | None = None) -> dict:
    """A baseline document from results; ``keep`` is an older baseline whose tolerances are carried over."""
    import bench

    scenarios = {}
    old = (keep or {}).get("scenarios", {})
    for res in results:
        r = as_record(res)
        entry = {
            "status": r.status,
            "controller": r.controller,
            "seed": r.seed,
            "content_hash": r.content_hash,
            "source": r.source,
            "metrics": _finite_metrics(r.metrics),
        }
        kept = old.get(r.scenario, {}).get("tolerances")
        if kept:
            entry["tolerances"] = kept
        scenarios[r.scenario] = entry
    return {
        "format": FORMAT,
        "format_version": FORMAT_VERSION,
        "created": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
        "git": git,
        "bench_version": bench.__version__,
        "tolerances": dict(tolerances if tolerances is not None else (keep or {}).get("tolerances", {})),
        "scenarios": scenarios,
    }


def save_baseline(path: str | Path, baseline: dict) -> None:
    from bench.report.results import write_json

    write_json(Path(path), baseline)


def load_baseline(path: str | Path) -> dict:
    """Read and check a baseline file; raise :class:`BaselineError` naming the file and the field."""
    path = Path(path)
    if not path.is_file():
        raise BaselineError(f"{path}: no such baseline file (make one with `bench baseline save RESULTS_DIR -o {path}`)")
    doc = _read_json(path)
    if not isinstance(doc, dict) or doc.get("format") != FORMAT:
        raise BaselineError(f"{path}: format: not a baseline file (expected \"format\": \"{FORMAT}\")")
    version = doc.get("format_version")
    if not isinstance(version, int) or version > FORMAT_VERSION or version < 1:
        raise BaselineError(f"{path}: format_version: {version!r} is not supported (this bench reads 1)")
    tols = doc.get("tolerances") or {}
    if not isinstance(tols, dict):
        raise BaselineError(f"{path}: tolerances: expected a mapping of metric name or pattern -> tolerance")
    for name, spec in tols.items():
        _check_override(spec, f"{path}: tolerances.{name}")
    scenarios = doc.get("scenarios")
    if not isinstance(scenarios, dict):
        raise BaselineError(f"{path}: scenarios: expected a mapping of scenario id -> entry")
    for sid, entry in scenarios.items():
        where = f"{path}: scenarios.{sid}"
        if not isinstance(entry, dict) or not isinstance(entry.get("status"), str):
            raise BaselineError(f"{where}: expected a mapping with at least 'status' and 'metrics'")
        if not isinstance(entry.get("metrics", {}), dict):
            raise BaselineError(f"{where}.metrics: expected a mapping of metric name -> number")
        for name, spec in (entry.get("tolerances") or {}).items():
            _check_override(spec, f"{where}.tolerances.{name}")
    doc["tolerances"] = tols
    return doc


# --------------------------------------------------------------------------- comparison


@dataclass(frozen=True)
class Row:
    scenario: str
    metric: str            # a metric name, or "status" / "scenario" for the whole scenario
    baseline: float | str | None
    current: float | str | None
    verdict: str           # regressed, improved, changed, new, missing, same
    tolerance: Tolerance | None = None
    note: str = ""

    @property
    def change(self) -> str:
        b, c = self.baseline, self.current
        if isinstance(b, (int, float)) and isinstance(c, (int, float)):
            d = c - b
            text = f"{d:+.3g}"
            if b:
                text += f" ({d / abs(b) * 100:+.0f}%)"
            return text
        return ""


ORDER = {"regressed": 0, "improved": 1, "changed": 2, "new": 3, "missing": 4, "same": 5}


def compare_result(baseline: dict, result: dict, *, include_timing: bool = False) -> list[Row]:
    """Rows for one scenario's result against ``baseline`` (rows with verdict ``same`` included).

    Wall-clock metrics (controller compute time) depend on the machine and its load, so they are left
    out unless ``include_timing``.
    """
    rec = as_record(result)
    sid = rec.scenario
    entry = baseline.get("scenarios", {}).get(sid)
    if entry is None:
        return [Row(sid, "scenario", None, rec.status, "new", note="not in the baseline")]
    rows = []
    b_status, c_status = entry.get("status"), rec.status
    if b_status == "passed" and c_status != "passed":
        reason = rec.reason or ""
        rows.append(Row(sid, "status", b_status, c_status, "regressed", note=reason))
    elif b_status != "passed" and c_status == "passed":
        rows.append(Row(sid, "status", b_status, c_status, "improved"))
    elif b_status != c_status:
        rows.append(Row(sid, "status", b_status, c_status, "changed"))
    else:
        rows.append(Row(sid, "status", b_status, c_status, "same"))
    notes = []
    if entry.get("content_hash") and rec.content_hash and entry["content_hash"] != rec.content_hash:
        notes.append("scenario file changed since the baseline")
    if entry.get("seed") is not None and entry["seed"] != rec.seed:
        notes.append(f"seed {entry['seed']} -> {rec.seed}")
    if notes:
        rows.append(Row(sid, "scenario", None, None, "changed", note="; ".join(notes)))
    b_metrics = entry.get("metrics") or {}
    c_metrics = _finite_metrics(rec.metrics)
    senses = criterion_directions([c.to_json() for c in rec.criteria])
    for name in list(b_metrics) + [m for m in c_metrics if m not in b_metrics]:
        tol = tolerance_for(name, senses, baseline.get("tolerances"), entry.get("tolerances"))
        if tol.ignore or (not include_timing and is_timing_metric(name)):
            continue
        b = b_metrics.get(name)
        b = float(b) if isinstance(b, (int, float)) and not isinstance(b, bool) else None
        c = c_metrics.get(name)
        if c is None and c_status in ("error", "timeout"):
            continue   # the status row says it all
        rows.append(Row(sid, name, b, c, judge(b, c, tol), tol))
    return rows


@dataclass
class Comparison:
    rows: list[Row]
    compared: int
    new: list[str]
    missing: list[str]

    def regressions(self) -> list[Row]:
        return [r for r in self.rows if r.verdict == "regressed"]

    @property
    def regressed(self) -> bool:
        return bool(self.regressions())

    def scenarios_with(self, verdict: str) -> list[str]:
        return sorted({r.scenario for r in self.rows if r.verdict == verdict})


def compare(baseline: dict, results: list[dict], *, include_timing: bool = False) -> Comparison:
    """Every row of every result against ``baseline``, plus baseline scenarios that are not in the results."""
    rows: list[Row] = []
    got = set()
    new = []
    for res in results:
        r = as_record(res)
        got.add(r.scenario)
        rs = compare_result(baseline, r, include_timing=include_timing)
        if rs and rs[0].metric == "scenario" and rs[0].verdict == "new":
            new.append(r.scenario)
        rows += rs
    missing = [sid for sid in baseline.get("scenarios", {}) if sid not in got]
    for sid in missing:
        rows.append(Row(sid, "scenario", baseline["scenarios"][sid].get("status"), None, "missing",
                        note="in the baseline, not in these results"))
    return Comparison(rows, compared=len(results) - len(new), new=new, missing=missing)


def _cell(x) -> str:
    if x is None:
        return "-"
    if isinstance(x, float):
        return f"{x:.4g}"
    return str(x)


def table_rows(rows: list[Row], include_same: bool = False) -> list[list[str]]:
    """Rows for :func:`bench.cli.common.print_table`, worst first."""
    shown = [r for r in rows if include_same or r.verdict != "same"]
    shown.sort(key=lambda r: (ORDER[r.verdict], r.scenario, r.metric))
    out = []
    for r in shown:
        tol = r.tolerance.describe() if r.tolerance is not None else ""
        if r.tolerance is not None and r.tolerance.direction != "none" and r.verdict != "same":
            tol += f" ({r.tolerance.direction} is better)"
        out.append([r.verdict, r.scenario, r.metric, _cell(r.baseline), _cell(r.current), r.change,
                    tol, r.note])
    return out


TABLE_HEADER = ["verdict", "scenario", "metric", "baseline", "current", "change", "tolerance", "note"]
