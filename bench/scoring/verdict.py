"""Verdict: how an episode ended plus its criteria -> status, reason, criteria and metrics.

Reads only a Trace (and the episode's status and reason); never the world.
A fall fails the episode even when the scenario sets no ``no_fall`` criterion,
unless it says ``no_fall: false``.
"""

from __future__ import annotations

from dataclasses import dataclass, field

from bench.scoring import criteria as crit_mod
from bench.scoring.criteria import CriterionResult
from bench.scoring.metrics import compute_metrics
from bench.sim.trace import Trace


@dataclass
class Verdict:
    status: str                     # passed, failed, error, timeout
    reason: str | None
    criteria: list[CriterionResult] = field(default_factory=list)
    metrics: dict[str, float] = field(default_factory=dict)

    @property
    def passed(self) -> bool:
        return self.status == "passed"

    @property
    def deciding(self) -> CriterionResult | None:
        """The first failed criterion, or the first criterion when all passed."""
        for c in self.criteria:
            if not c.passed:
                return c
        return self.criteria[0] if self.criteria else None


def score(trace: Trace, criteria: dict, *, episode_status: str, episode_reason: str | None,
          score_from: float = 0.0, controller_stats: dict | None = None) -> Verdict:
    """Turn an episode into a Verdict."""
    metrics, series = compute_metrics(trace, score_from=score_from, controller_stats=controller_stats)
    wanted = dict(criteria)
    wanted.setdefault("no_fall", True)
    known = crit_mod.available()
    results: list[CriterionResult] = []
    for name, limit in wanted.items():
        if name == "pass_rate_min":
            continue  # decided over trials, not over one episode
        c = known.get(name)
        if c is None:
            results.append(CriterionResult(name, None, None, False, None))
            continue
        if name == "no_fall" and limit is False:
            continue
        results.append(c.evaluate(metrics, series, trace, limit, score_from))
    # no_fall first: when the robot fell, that is the reason.
    results.sort(key=lambda r: r.name != "no_fall")

    if episode_status in ("error", "timeout"):
        return Verdict(episode_status, episode_reason, results, metrics)
    failed = [r for r in results if not r.passed]
    if not failed:
        return Verdict("passed", None, results, metrics)
    first = failed[0]
    if first.name == "no_fall" and episode_reason:
        reason = episode_reason
    elif first.value is None and first.name not in known:
        reason = f"unknown criterion {first.name!r}"
    else:
        reason = first.sentence()
    return Verdict("failed", reason, results, metrics)
