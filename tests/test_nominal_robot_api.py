"""The NominalRobot a controller gets: every attribute its docstring documents exists with the stated type,
and no public attribute goes undocumented (the documented set is the stable API)."""

from __future__ import annotations

import re

import mujoco
import numpy as np
import pytest

from bench.robot.locate import resolve_robot
from bench.robot.manifest import RobotManifest
from bench.robot.model import ATTRIBUTE_TYPES, NominalRobot

_TYPE = re.compile(r"^(?P<type>dict\[str, int\]|[^\s(,]+)(?: \((?P<shape>[^)]*)\))?(?P<opt>, optional)?$")
_TYPES = {"RobotManifest": RobotManifest, "MjModel": mujoco.MjModel, "float": float, "int": int,
          "dict[str, int]": dict, "object": object}


def documented() -> dict[str, tuple[str, str | None, bool]]:
    """``name -> (type, shape, optional)`` as the docstring states them (read by bench.robot.model)."""
    out = {}
    for name, text in ATTRIBUTE_TYPES.items():
        m = _TYPE.match(text)
        assert m, f"{name}: cannot read the type {text!r}"
        out[name] = (m["type"], m["shape"], bool(m["opt"]))
    return out


@pytest.fixture(scope="module", params=["quad12", "quad30"])
def robot(request):
    return NominalRobot(resolve_robot(request.param))


def test_the_docstring_documents_the_attributes_a_controller_reads():
    doc = documented()
    assert {"model", "joint_dof_adr", "trunk_body_id", "nominal_height", "torque_limits", "manifest"} <= set(doc)
    assert len(doc) >= 25


def test_every_documented_attribute_exists_with_its_type(robot):
    sizes = {"J": robot.num_joints, "F": robot.num_feet, "G": len(robot.manifest.fall_geoms), "nq": robot.model.nq}
    for name, (typ, shape, optional) in documented().items():
        if optional and not hasattr(robot, name):
            continue
        value = getattr(robot, name)
        if typ.startswith("ndarray"):
            dtype = typ[len("ndarray["):-1]
            assert isinstance(value, np.ndarray) and value.dtype == np.dtype(dtype), name
            want = tuple(sizes[p.strip()] if p.strip() in sizes else int(p) for p in shape.split(",") if p.strip())
            assert value.shape == want, (name, value.shape, want)
            assert not value.flags.writeable, f"{name} must be read-only"
        else:
            assert isinstance(value, _TYPES[typ]) and not isinstance(value, bool), (name, type(value))
            if typ.startswith("dict"):
                assert all(isinstance(k, str) and isinstance(v, int) for k, v in value.items()), name


def test_no_public_attribute_is_undocumented(robot):
    doc = documented()
    public = {k for k in vars(robot) if not k.startswith("_")}
    public |= {k for k, v in vars(NominalRobot).items() if isinstance(v, property) and not k.startswith("_")}
    assert public - set(doc) == set(), "document these in NominalRobot's docstring (they become public API)"
