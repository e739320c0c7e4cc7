"""Checks of a scenario against its robot: names only the manifest can confirm.

The scenario layer knows nothing of robots, so a joint named in a fault or a
robot that does not exist is caught here, before anything runs, and reported
at the line of the scenario file that names it.
"""

from __future__ import annotations

from bench.errors import ScenarioError
from bench.robot.locate import resolve_robot
from bench.robot.manifest import RobotError, RobotErrors
from bench.suggest import did_you_mean


def check_against_robot(scenario) -> list[ScenarioError]:
    errors: list[ScenarioError] = []
    ref = scenario.robot
    try:
        manifest = resolve_robot(str(ref.manifest) if getattr(ref, "manifest", None) else (ref.name or "quad12"))
    except RobotErrors as exc:
        located = [e for e in exc.errors if e.line]
        if not located:
            return [scenario.error("robot", f"robot cannot be loaded: {exc}")]
        # Each manifest problem at its own line; the scenario line that names the robot says why it matters.
        return [scenario.error("robot", f"robot cannot be loaded: {len(exc.errors)} problem"
                               f"{'s' if len(exc.errors) > 1 else ''} in {exc.path}")] + [
            ScenarioError(e.path, e.line, e.col, e.field, e.message, e.hint or None) for e in exc.errors]
    except (RobotError, FileNotFoundError, OSError, ValueError, LookupError) as exc:
        return [scenario.error("robot", f"robot cannot be loaded: {exc}")]
    joints = list(manifest.joints)

    def check_joint(field: str, name: str) -> None:
        if name not in joints:
            hint = did_you_mean(name, joints) or f"joints of {manifest.name}: {', '.join(joints)}"
            errors.append(scenario.error(field, f"robot {manifest.name!r} has no joint {name!r}", hint))

    for i, f in enumerate(scenario.faults):
        # Each fault kind says which of its fields name joints (bench.faults).
        for rel, name in (f.joint_refs() if hasattr(f, "joint_refs") else ()):
            check_joint(".".join(map(str, ("faults", i, f.kind, *rel))), name)
    return errors
