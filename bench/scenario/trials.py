"""Trials: `trials: N` plus `randomize:` turn one scenario into N derived ones.

Trial `i` (0-based) gets seed `seed + i` and, for each randomized dotted path,
a value drawn with a generator seeded from the scenario id, seed and `i`, so a
run is reproducible. Its id is `name[...,trial=i]`.
"""

from __future__ import annotations

import random
from typing import Any

from bench.errors import ScenarioError, ScenarioErrors
from bench.scenario.compose import derive
from bench.scenario.paths import get_path
from bench.scenario.schema import Choice, Scenario


def _integer_range(scenario: Scenario, path: str) -> bool:
    raw = (scenario.document.get("randomize") or {}).get(path)
    return isinstance(raw, list) and all(isinstance(x, int) and not isinstance(x, bool) for x in raw)


def draw(scenario: Scenario, rng: random.Random) -> dict[str, Any]:
    """One draw of every randomized path."""
    out: dict[str, Any] = {}
    for path, dist in scenario.randomize.items():
        if isinstance(dist, Choice):
            out[path] = rng.choice(dist.values)
        elif _integer_range(scenario, path):
            out[path] = rng.randint(int(dist.lo), int(dist.hi))
        else:
            out[path] = rng.uniform(dist.lo, dist.hi)
    return out


def check_randomize(scenario: Scenario) -> list[ScenarioError]:
    """Every randomized path exists, and its extreme values (or every choice) give a valid scenario."""
    errors: list[ScenarioError] = []
    for path, dist in scenario.randomize.items():
        where = scenario.locations.key(("randomize", path)) if scenario.locations else None
        try:
            get_path(scenario.document, path, where=where)
        except ScenarioError as e:
            errors.append(e)
            continue
        if isinstance(dist, Choice):
            candidates = list(dist.values)
        elif _integer_range(scenario, path):
            candidates = [int(dist.lo), int(dist.hi)]
        else:
            candidates = [dist.lo, dist.hi]
        for value in candidates:
            try:
                derive(scenario, {path: value}, "")
            except ScenarioErrors as e:
                first = e.errors[0]
                loc = where or scenario.locations.value(()) if scenario.locations else None
                errors.append(ScenarioError(
                    loc.file if loc else scenario.source, loc.line if loc else 1, loc.col if loc else 1,
                    f"randomize.{path}", f"the value {value!r} makes the scenario invalid: "
                    f"{first.field}: {first.message}", "narrow the range"))
                break
    return errors


def expand_trials(scenario: Scenario) -> list[Scenario]:
    """The trials of `scenario` (itself when `trials: 1` and nothing is randomized)."""
    if scenario.trials <= 1 and not scenario.randomize:
        return [scenario]
    out = []
    for i in range(scenario.trials):
        rng = random.Random(f"{scenario.id}|{scenario.seed}|{i}")
        overrides: dict[str, Any] = draw(scenario, rng)
        overrides["seed"] = (scenario.seed + i) % 2**32
        overrides["trials"] = 1
        overrides["randomize"] = {}
        out.append(derive(scenario, overrides, f"trial={i}", variant={"trial": i}))
    return out
