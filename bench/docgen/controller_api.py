"""The controller API page: what a controller is given (`bench.controllers.base`, `bench.robot.model`)."""

from __future__ import annotations

from bench.docgen import Page
from bench.docgen.md import docstring, members_table, rst_to_md, table

PAGE = Page(
    file="controller-api.md",
    title="What a controller receives",
    sources="bench/controllers/base.py and bench/robot/model.py",
    for_whom="**For** anyone writing a controller; **at the end** you know the call shape, every field of "
             "the observation and every attribute of the robot object, with units and frames. The tutorial "
             "[your first controller](../tutorial/first-controller.md) uses them.",
)


def _section(title: str, cls, skip: tuple[str, ...] = ()) -> list[str]:
    doc = docstring(cls)
    if doc.startswith(f"{cls.__name__}("):
        doc = ""  # the dataclass's generated signature, not a description
    return [f"## {title}", "", rst_to_md(doc), "", members_table(cls, skip)]


def _example(robot) -> str:
    """Each public attribute of the bundled quad12's robot object: its type and shape there, and what the
    code says about it."""
    import numpy as np

    from bench.docgen.md import source_comments

    notes = source_comments(type(robot))
    props = {n: docstring(o.fget) for n, o in vars(type(robot)).items()
             if isinstance(o, property) and not n.startswith("_")}
    rows = []
    for name in sorted({n for n in vars(robot) if not n.startswith("_")} | set(props)):
        v = getattr(robot, name)
        if isinstance(v, np.ndarray):
            text = f"ndarray {tuple(v.shape)} {v.dtype}"
        elif isinstance(v, dict):
            text = "dict: " + ", ".join(f"{k}" for k in sorted(v))
        elif isinstance(v, (int, float)):
            text = f"{type(v).__name__}"
        else:
            text = type(v).__name__
        from bench.robot.model import ATTRIBUTE_DOCS

        rows.append([f"`robot.{name}`", text, ATTRIBUTE_DOCS.get(name) or notes.get(name) or props.get(name, "")])
    return table(["attribute", "on quad12 (12 joints, 4 feet)", "meaning"], rows)


def body() -> str:
    from bench.controllers import base
    from bench.robot import model
    from bench.robot.manifest import RobotManifest

    lines = [rst_to_md(docstring(base)), ""]
    lines += _section("`Controller` (the call shape)", base.Controller)
    lines += ["Optional methods the runner calls when a controller has them: `stats() -> dict` (extra "
              "metrics, written as `controller.<name>`) and `close()` (called once at the end of every "
              "episode, however it ended; see [your first controller](../tutorial/first-controller.md)).", ""]
    for name in sorted(n for n, obj in vars(base).items()
                       if isinstance(obj, type) and obj.__module__ == base.__name__
                       and n not in ("Controller",) and not n.startswith("_")):
        lines += _section(f"`{name}`", getattr(base, name))
    lines += [rst_to_md(docstring(model)), ""]
    # the docstring's summary; its Attributes section is the table below (ATTRIBUTE_DOCS is read from it)
    summary = docstring(model.NominalRobot).split("Attributes\n", 1)[0].rstrip()
    lines += ["## `NominalRobot` (the `robot` given to `reset`)", "", rst_to_md(summary), ""]
    from bench.robot.locate import resolve_robot

    lines += ["Every attribute of the robot object, as the bundled quad12 has it (arrays are read-only; "
              "ids index the robot-only `robot.model`):", "", _example(model.NominalRobot(resolve_robot("quad12")))]
    from bench.sensing_info import SensingInfo

    lines += _section("`SensingInfo` (`robot.sensing`)", SensingInfo)
    lines += _section("`RobotManifest` (`robot.manifest`)", RobotManifest)
    return "\n".join(lines)
