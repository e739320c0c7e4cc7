"""Running and judging trials: `trials: N` scenarios become N episodes and one verdict.

The trials themselves (seeds, randomized draws, ids ``name[trial=k]``) come
from :func:`bench.scenario.trials.expand_trials`; trial ``k`` of a scenario is
the same episode whichever run, executor or selection it is part of, so one
trial can be re-run alone by its id (``bench run FILE --only 'name[trial=3]'``).

The scenario's verdict is a required pass rate (``pass_rate_min``) decided on
the lower bound of the 95 % Wilson score interval of the observed rate: with
17 of 20 trials passing the observed rate is 0.85 but the bound is 0.64, so
``pass_rate_min: 0.8`` fails until more trials make the evidence strong enough.
Without ``pass_rate_min`` every trial must pass; ``pass_rate_min: 1`` means the
same (no finite number of trials puts the lower bound at 1).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

#: Two-sided 95 % quantile of the standard normal distribution, Phi^-1(0.975)
#: (scipy.stats.norm.ppf(0.975) = 1.959963984540054).
Z95 = 1.959963984540054
CONFIDENCE = 0.95


def wilson_interval(k: int, n: int, z: float = Z95) -> tuple[float, float]:
    """The Wilson score interval for ``k`` successes in ``n`` trials.

    p = k/n; centre = (p + z^2/2n) / (1 + z^2/n);
    half-width = z / (1 + z^2/n) * sqrt(p(1-p)/n + z^2/4n^2)
    (the score interval for a binomial proportion; checked against
    scipy.stats.binomtest(k, n).proportion_ci(method="wilson") in the tests).
    """
    if n <= 0:
        return 0.0, 1.0
    p = k / n
    z2 = z * z
    denom = 1.0 + z2 / n
    centre = (p + z2 / (2 * n)) / denom
    half = z / denom * math.sqrt(p * (1 - p) / n + z2 / (4 * n * n))
    lo, hi = max(0.0, centre - half), min(1.0, centre + half)
    # exact ends: the interval contains 0 when k == 0 and 1 when k == n
    return (0.0 if k == 0 else lo), (1.0 if k == n else hi)


@dataclass
class TrialGroup:
    """The trials of one scenario inside a flat list of episodes."""

    scenario: str                 # the scenario's id (before the trial label)
    source: str
    declared: int                 # trials: N in the file
    required: float | None        # pass_rate_min, if any
    indices: list[int] = field(default_factory=list)


#: Keys of one `trials` entry of summary.json (documented by `python -m bench.docgen`).
TRIAL_ENTRY_DOCS = {
    "scenario": "the trial scenario's id (without the trial label)",
    "source": "its scenario file",
    "declared_trials": "`trials:` in the file",
    "trials": "trials run (fewer with `--only`)",
    "passed": "trials passed",
    "rate": "observed pass rate",
    "interval": "Wilson score interval of the pass rate, `[lo, hi]`",
    "confidence": "confidence of the interval (0.95)",
    "required": "`pass_rate_min` (null: every trial must pass)",
    "decided_on": "the rule applied, in words",
    "verdict": "`passed` or `failed`",
    "failing": "ids of the trials that did not pass",
    "errors": "ids of the trials that ended in `error` or `timeout`",
    "trials_needed": "fewest trials that could pass `required` at all",
}


def judge(results: list[dict], required: float | None) -> dict:
    """Rate, Wilson interval and verdict of a list of trial results (any status not `passed` fails)."""
    from bench.report.record import as_record

    records = [as_record(r) for r in results]
    n = len(records)
    k = sum(1 for r in records if r.passed)
    lo, hi = wilson_interval(k, n)
    if required is None or required >= 1.0:
        ok = n > 0 and k == n
        decided_on = "all trials must pass"
    else:
        ok = n > 0 and lo >= required
        decided_on = "lower bound of the 95 % Wilson interval >= required"
    return {
        "trials": n,
        "passed": k,
        "rate": k / n if n else 0.0,
        "interval": [lo, hi],
        "confidence": CONFIDENCE,
        "required": required,
        "decided_on": decided_on,
        "verdict": "passed" if ok else "failed",
        "failing": [r.scenario for r in records if not r.passed],
        "errors": [r.scenario for r in records if r.is_error],
    }


def min_trials(required: float | None) -> int:
    """The fewest trials whose Wilson lower bound can reach ``required`` (all of them passing).

    With every trial passing the bound is n / (n + z^2), so n >= z^2 r / (1 - r).
    """
    if required is None or required >= 1.0:
        return 1
    if required <= 0.0:
        return 1
    n = max(1, math.ceil(Z95 * Z95 * required / (1.0 - required) - 1e-9))
    while wilson_interval(n, n)[0] < required:
        n += 1
    return n


def is_trial_scenario(scenario) -> bool:
    return int(getattr(scenario, "trials", 1) or 1) > 1 or bool(getattr(scenario, "randomize", None))


def plan(scenarios: list, seed: int | None = None) -> tuple[list, list[int | None], list[TrialGroup]]:
    """Expand trial scenarios: ``(episode scenarios, job seeds, trial groups)``.

    ``seed`` (``--seed N``) replaces the seed of every scenario; for a trial
    scenario it replaces the seed the trials' seeds and draws are derived from.
    """
    from bench.scenario.compose import derive
    from bench.scenario.trials import expand_trials

    episodes: list = []
    seeds: list[int | None] = []
    groups: list[TrialGroup] = []
    for sc in scenarios:
        if not is_trial_scenario(sc):
            episodes.append(sc)
            seeds.append(seed)
            continue
        base = derive(sc, {"seed": int(seed)}, "") if seed is not None else sc
        g = TrialGroup(sc.id, str(sc.source), int(sc.trials), sc.criteria.get("pass_rate_min"))
        for t in expand_trials(base):
            g.indices.append(len(episodes))
            episodes.append(t)
            seeds.append(None)
        groups.append(g)
    return episodes, seeds, groups


def select(episodes: list, seeds: list, groups: list[TrialGroup], wanted: list[str]):
    """Keep only the episodes whose id or slug is in ``wanted``; returns the same triple plus unknown names."""
    want = set(wanted)
    keep = [i for i, sc in enumerate(episodes) if sc.id in want or sc.slug in want]
    found = {episodes[i].id for i in keep} | {episodes[i].slug for i in keep}
    unknown = [w for w in wanted if w not in found]
    new_index = {old: new for new, old in enumerate(keep)}
    new_groups = []
    for g in groups:
        idx = [new_index[i] for i in g.indices if i in new_index]
        if idx:
            new_groups.append(TrialGroup(g.scenario, g.source, g.declared, g.required, idx))
    return [episodes[i] for i in keep], [seeds[i] for i in keep], new_groups, unknown


def group_summaries(groups: list[TrialGroup], results: list[dict]) -> list[dict]:
    """One ``summary.json`` ``trials`` entry per group."""
    out = []
    for g in groups:
        entry = {"scenario": g.scenario, "source": g.source, "declared_trials": g.declared}
        entry.update(judge([results[i] for i in g.indices], g.required))
        entry["trials_needed"] = min_trials(g.required)  # fewest trials that can pass at all
        out.append(entry)
    return out
