"""Load and check: the one step that turns paths into runnable scenarios, for every front end.

The same checks run whoever asks (``bench check``, ``bench run``, ``bench limit``
and the pytest plugin's collection): the scenario layer's own validation
(schema, files it names, randomization) and then the checks against the robot
(a joint named in a fault that the robot lacks, a robot that cannot be
loaded), each problem a ``ScenarioError`` at the line of the file that caused it.
"""

from __future__ import annotations

from pathlib import Path
from typing import Iterable

from bench.errors import ScenarioError, ScenarioErrors


def robot_problems(scenarios: Iterable) -> list[ScenarioError]:
    """Every problem found by checking ``scenarios`` against their robots (one check per distinct file)."""
    from bench.world.validate import check_against_robot

    errors: list[ScenarioError] = []
    for sc in scenarios:
        errors.extend(check_against_robot(sc))
    # matrix variants of one file share their faults: report each problem once
    return list(dict.fromkeys(errors))


def load_checked(paths: Iterable[str | Path], roots: Iterable[str | Path] = ()) -> list:
    """Every scenario under ``paths``, fully checked; raises ``ScenarioErrors`` listing every problem."""
    from bench.scenario.loader import load_scenarios

    scenarios = load_scenarios(list(paths), roots=[Path(r) for r in roots])
    errors = robot_problems(scenarios)
    if errors:
        raise ScenarioErrors(errors)
    return scenarios


def load_file_checked(path: str | Path, roots: Iterable[str | Path] = ()) -> list:
    """Every scenario one file defines, fully checked; raises ``ScenarioErrors``/``ScenarioError``."""
    from bench.scenario.loader import load_file

    scenarios = load_file(path, list(roots))
    errors = robot_problems(scenarios)
    if errors:
        raise ScenarioErrors(errors)
    return scenarios


def problems_of(exc: ScenarioError | ScenarioErrors) -> list[ScenarioError]:
    return list(exc.errors) if isinstance(exc, ScenarioErrors) else [exc]
