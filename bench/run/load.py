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


def robot_override(robot: str) -> object:
    """The value a scenario's ``robot:`` takes for ``--robot ROBOT``: a bundled name, or a manifest file
    (a path, or a folder holding manifest.yaml) as given on the command line, made absolute."""
    from bench.robot.locate import bundled_robot_names
    from bench.run.errors import InvalidInput
    from bench.suggest import did_you_mean

    text = str(robot).strip()
    names = bundled_robot_names()
    looks_like_path = "/" in text or "\\" in text or text.endswith((".yaml", ".yml")) or Path(text).exists()
    if not looks_like_path:
        if text not in names:
            hint = did_you_mean(text, names)
            raise InvalidInput(f"--robot: no bundled robot {text!r}" + (f"; {hint}" if hint else "")
                               + f" (bundled: {', '.join(names)}; or give a manifest.yaml path)")
        return text
    path = Path(text).expanduser().resolve()
    if path.is_dir():
        path = path / "manifest.yaml"
    if not path.is_file():
        raise InvalidInput(f"--robot: no robot manifest at {path} (bench robot init MODEL drafts one)")
    return {"manifest": str(path)}


def with_robot(scenarios: list, robot: str | None) -> list:
    """``scenarios`` with their robot replaced for the whole run (``--robot``); ids are unchanged."""
    if not robot:
        return scenarios
    from bench.scenario.compose import derive

    value = robot_override(robot)
    return [derive(sc, {"robot": value}, "") for sc in scenarios]


def without_privileged(scenarios: list, off: bool = True) -> list:
    """``scenarios`` with ``sensing.privileged`` forced false for the whole run (``--no-privileged``).

    The document changes, so the content hash does too: the verdict fingerprint and the result record
    (``content_hash``) tell such a run from one with the true state, and a stale pass is not reused.
    Scenarios already without it are returned as they are; ids are unchanged.
    """
    if not off:
        return scenarios
    from bench.scenario.compose import derive

    return [derive(sc, {"sensing.privileged": False}, "") if sc.sensing.privileged else sc for sc in scenarios]


def load_checked(paths: Iterable[str | Path], roots: Iterable[str | Path] = (), robot: str | None = None,
                 no_privileged: bool = False) -> list:
    """Every scenario under ``paths``, fully checked; raises ``ScenarioErrors`` listing every problem.

    ``robot`` replaces every scenario's robot (``--robot``) before the robot checks; ``no_privileged``
    turns the true state off in every scenario (``--no-privileged``).
    """
    from bench.scenario.loader import load_scenarios

    scenarios = with_robot(load_scenarios(list(paths), roots=[Path(r) for r in roots]), robot)
    scenarios = without_privileged(scenarios, no_privileged)
    errors = robot_problems(scenarios)
    if errors:
        raise ScenarioErrors(errors)
    return scenarios


def load_file_checked(path: str | Path, roots: Iterable[str | Path] = (), robot: str | None = None,
                      no_privileged: bool = False) -> list:
    """Every scenario one file defines, fully checked; raises ``ScenarioErrors``/``ScenarioError``."""
    from bench.scenario.loader import load_file

    scenarios = without_privileged(with_robot(load_file(path, list(roots)), robot), no_privileged)
    errors = robot_problems(scenarios)
    if errors:
        raise ScenarioErrors(errors)
    return scenarios


def problems_of(exc: ScenarioError | ScenarioErrors) -> list[ScenarioError]:
    return list(exc.errors) if isinstance(exc, ScenarioErrors) else [exc]
