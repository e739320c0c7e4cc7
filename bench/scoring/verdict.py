"""Verdict: how an episode ended plus its criteria -> status, reason, criteria, margins and metrics.

Reads only a Trace (and the episode's status and reason); never the world.
A fall fails the episode even when the scenario sets no ``no_fall`` criterion,
unless it says ``no_fall: false``.

The deciding criterion is chosen here and only here (every front end shows
what this module chose):

- on a failure, the criterion violated earliest: smallest ``first_violation_s``
  (a criterion over the whole episode, such as an RMS, has no instant and
  counts as violated at the end), ties broken by the order of the criteria;
- on a pass, the criterion with the least margin.

The margin of a criterion with a numeric limit is its distance from the limit
on the passing side, as a share of the limit, so that criteria in different
units compare: ``(limit - value) / |limit|`` for an upper limit (``_max``
criteria), ``(value - limit) / |limit|`` for a lower limit (``_min``). It is
negative when the criterion is violated. A zero limit cannot be scaled: the
margin is then the raw difference in the criterion's unit. A criterion without
a numeric limit (``no_fall``) or without a direction has no margin and is
chosen on a pass only when no criterion has one.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

from bench.scoring import criteria as crit_mod
from bench.scoring.criteria import CriterionResult
from bench.scoring.metrics import compute_metrics
from bench.sim.trace import Trace


@dataclass(frozen=True)
class Deciding:
    """The criterion that decided the verdict, with its margin (None when it has none)."""

    name: str
    value: float | None
    limit: float | None
    margin: float | None
    first_violation_s: float | None
    passed: bool

    def to_dict(self) -> dict:
        return {"name": self.name, "value": self.value, "limit": self.limit, "margin": self.margin,
                "first_violation_s": self.first_violation_s, "passed": self.passed}


@dataclass
class Verdict:
    status: str                     # passed, failed, error, timeout
    reason: str | None
    criteria: list[CriterionResult] = field(default_factory=list)
    metrics: dict[str, float] = field(default_factory=dict)
    margins: dict[str, float | None] = field(default_factory=dict)
    deciding: Deciding | None = None

    @property
    def passed(self) -> bool:
        return self.status == "passed"


def _sense(criterion) -> str | None:
    """``max`` (value must stay at or under the limit) or ``min``; None when the criterion does not say."""
    sense = getattr(criterion, "sense", None) or getattr(criterion, "direction", None)
    return sense if sense in ("max", "min") else None


def criterion_margin(value: float | None, limit, sense: str | None) -> float | None:
    """Normalised margin of ``value`` against ``limit`` (see the module docstring); None when undefined."""
    if value is None or sense is None or limit is None or isinstance(limit, bool):
        return None
    value, limit = float(value), float(limit)
    if not (math.isfinite(value) and math.isfinite(limit)):
        return None
    diff = (limit - value) if sense == "max" else (value - limit)
    scale = abs(limit)
    return diff / scale if scale > 0 else diff


def deciding_criterion(criteria: list[CriterionResult], margins: dict[str, float | None]) -> Deciding | None:
    """The earliest violated criterion when any failed, else the one with the least margin."""
    if not criteria:
        return None
    failed = [(i, c) for i, c in enumerate(criteria) if not c.passed]
    if failed:
        def when(item):
            i, c = item
            t = c.first_violation_s
            return (math.inf if t is None or not math.isfinite(t) else t, i)
        _, chosen = min(failed, key=when)
    else:
        with_margin = [(margins[c.name], i, c) for i, c in enumerate(criteria) if margins.get(c.name) is not None]
        chosen = min(with_margin, key=lambda m: (m[0], m[1]))[2] if with_margin else criteria[0]
    return Deciding(chosen.name, chosen.value, chosen.limit, margins.get(chosen.name), chosen.first_violation_s,
                    bool(chosen.passed))


def score(trace: Trace, criteria: dict, *, episode_status: str, episode_reason: str | None,
          score_from: float = 0.0, controller_stats: dict | None = None) -> Verdict:
    """Turn an episode into a Verdict."""
    metrics, series = compute_metrics(trace, score_from=score_from, controller_stats=controller_stats)
    wanted = dict(criteria)
    wanted.setdefault("no_fall", True)
    known = crit_mod.available()
    results: list[CriterionResult] = []
    margins: dict[str, float | None] = {}
    for name, limit in wanted.items():
        if name == "pass_rate_min":
            continue  # decided over trials, not over one episode
        c = known.get(name)
        if c is None:
            results.append(CriterionResult(name, None, None, False, None))
            margins[name] = None
            continue
        if name == "no_fall" and limit is False:
            continue
        r = c.evaluate(metrics, series, trace, limit, score_from)
        results.append(r)
        margins[name] = criterion_margin(r.value, r.limit, _sense(c))
    # no_fall first in the list (the file order follows), as result.json has always listed them
    results.sort(key=lambda r: r.name != "no_fall")
    deciding = deciding_criterion(results, margins)

    if episode_status in ("error", "timeout"):
        return Verdict(episode_status, episode_reason, results, metrics, margins, None)
    if deciding is None or deciding.passed:
        return Verdict("passed", None, results, metrics, margins, deciding)
    first = next(r for r in results if r.name == deciding.name)
    if first.name == "no_fall" and episode_reason:
        reason = episode_reason
    elif first.value is None and first.name not in known:
        reason = f"unknown criterion {first.name!r}"
    else:
        reason = first.sentence()
    return Verdict("failed", reason, results, metrics, margins, deciding)
