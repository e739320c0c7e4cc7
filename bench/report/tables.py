"""Plain-text tables every front end prints: results, criteria, trials.

Neutral ground for ``bench run``, ``bench limit``, ``bench compare`` and the
pytest plugin: each formats rows here and none imports another front end.
Rows are built from run records (:mod:`bench.report.record`), so the
deciding criterion shown is the one scoring chose and recorded.
"""

from __future__ import annotations

import sys

from bench.report.record import CriterionRecord, RunRecord, as_record

#: Two-sided 95 % quantile of the standard normal distribution (scipy.stats.norm.ppf(0.975)).
_Z95 = 1.959963984540054


def print_table(rows: list[list[str]], header: list[str], file=None) -> None:
    file = file or sys.stdout
    widths = [max(len(str(r[i])) for r in rows + [header]) for i in range(len(header))]
    line = "  ".join(h.ljust(w) for h, w in zip(header, widths))
    print(line.rstrip(), file=file)
    print("  ".join("-" * w for w in widths), file=file)
    for r in rows:
        print("  ".join(str(c).ljust(w) for c, w in zip(r, widths)).rstrip(), file=file)


def fmt(x) -> str:
    """A criterion value or limit, short: 4 significant digits, '-' for none."""
    if x is None:
        return "-"
    if isinstance(x, float):
        return f"{x:.4g}"
    return str(x)


def _value_limit(name: str, value, limit) -> str:
    val = "n/a" if value is None else f"{value:.3g}"
    lim = "" if limit is None or isinstance(limit, bool) else f" / {limit:.3g}"
    return f"{name} {val}{lim}"


def _failing(c: CriterionRecord) -> str:
    at = "" if c.first_violation_s is None else f" @{c.first_violation_s:.2f}s"
    if c.name == "no_fall":
        return f"no_fall{at}"
    return _value_limit(c.name, c.value, c.limit) + at


def deciding_text(result: RunRecord | dict, width: int = 70) -> str:
    """The run table's criterion cell.

    A pass shows the criterion with the least margin (value / limit and the margin); a failure shows
    every failing criterion, earliest violation first, with when it was first violated; an error or
    a timeout shows its reason.
    """
    r = as_record(result)
    if r.is_error:
        return (r.reason or "")[:width]
    if r.status == "failed":
        failing = sorted(r.failed_criteria, key=lambda c: (c.first_violation_s is None, c.first_violation_s or 0.0))
        if r.deciding is not None:   # the recorded deciding criterion leads
            failing.sort(key=lambda c: c.name != r.deciding.name)
        text = "; ".join(_failing(c) for c in failing)
        return text if len(text) <= width else text[:width - 3] + "..."
    d = r.deciding
    if d is None:
        return ""
    if d.name == "no_fall" and d.margin is None:
        return "no_fall"
    text = _value_limit(d.name, d.value, d.limit)
    if d.margin is not None:
        text += f" (margin {d.margin * 100:.0f} %)" if d.limit not in (None, 0.0) else f" (margin {d.margin:.3g})"
    return text


def result_rows(results) -> list[list[str]]:
    """One row per result: scenario, status, deciding criterion, realtime factor."""
    rows = []
    for res in results:
        r = as_record(res)
        rows.append([r.scenario, r.status, deciding_text(r), f"{r.realtime_factor:.1f}x"])
    return rows


RESULT_HEADER = ["scenario", "status", "deciding criterion (value / limit)", "realtime"]


def criteria_rows(result: RunRecord | dict) -> list[list[str]]:
    """The criteria of one result: name, value, limit, first violation, ok/FAIL."""
    r = as_record(result)
    return [[c.name, fmt(c.value), fmt(c.limit),
             "-" if c.first_violation_s is None else f"{c.first_violation_s:.3f} s",
             "ok" if c.passed else "FAIL"] for c in r.criteria]


CRITERIA_HEADER = ["criterion", "value", "limit", "first violation", ""]


def print_trials(trial_summaries: list[dict], file=None) -> None:
    """The trials table: rate, 95 % Wilson interval, required rate, verdict and failing trial ids."""
    rows = []
    for t in trial_summaries:
        lo, hi = t["interval"]
        req = "all" if t["required"] is None else f"{t['required']:g}"
        failing = ", ".join(t["failing"][:4]) + (f", +{len(t['failing']) - 4} more" if len(t["failing"]) > 4 else "")
        count = f"{t['passed']}/{t['trials']}"
        if t["trials"] < t.get("declared_trials", t["trials"]):
            count += f" ({t['trials']} of {t['declared_trials']} selected)"
        rows.append([t["scenario"], count, f"{t['rate']:.2f}", f"[{lo:.2f}, {hi:.2f}]",
                     req, t["verdict"], failing or "-"])
    print("trials (95 % Wilson interval of the pass rate; pass_rate_min is checked against its lower bound)",
          file=file)
    print_table(rows, ["scenario", "passed", "rate", "95 % interval", "required", "verdict", "failing trials"],
                file=file)
    for t in trial_summaries:
        if t["trials"] < t.get("trials_needed", 0) and t["trials"] >= t.get("declared_trials", 0):
            print(f"note: {t['scenario']}: {t['trials']} trials cannot show a pass rate of {t['required']:g} even "
                  f"if all pass (the lower bound is at most {t['trials'] / (t['trials'] + _Z95 ** 2):.2f});"
                  f" it needs at least {t['trials_needed']} trials", file=file)
