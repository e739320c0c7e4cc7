"""Payloads: loads carried on the trunk, which the controller is never told about.

Every payload is a body attached to the trunk at its offset (trunk frame):
``rigid`` is welded; ``shifting`` slides along one trunk axis on a
spring-damper (joint stiffness and damping) with end stops (a limited joint
range of +-travel); ``tray`` is a loose mass that slides in x and y inside a
tray of half-size ``travel``, with damping and end stops. Mass that changes
(attach, drop, drain, steps) is applied by the episode runner through
``model.body_mass`` and ``model.body_inertia``; the inertia of the box scales
with its mass (same shape, the density changes).
"""

from __future__ import annotations

from dataclasses import dataclass

import mujoco
import numpy as np

PAYLOAD_RGBA = (0.95, 0.55, 0.10, 1.0)
#: Payload geoms collide with the ground only: contype 2 meets the terrain's conaffinity 3, not the robot's 1.
PAYLOAD_CONTYPE = 2
TRAY_RGBA = (0.35, 0.35, 0.40, 0.6)
#: Armature on payload slide joints, kg: keeps the joint well posed at zero mass.
PAYLOAD_ARMATURE = 1e-3

_AXES = {"x": (1.0, 0.0, 0.0), "y": (0.0, 1.0, 0.0), "z": (0.0, 0.0, 1.0)}


def box_unit_inertia(size) -> np.ndarray:
    """Principal inertia of a solid box of full side lengths ``size`` per kg of mass."""
    x, y, z = size
    return np.array([y * y + z * z, x * x + z * z, x * x + y * y]) / 12.0


@dataclass
class PayloadSpec:
    """What the builder added for one payload (names; ids are resolved after compile)."""

    name: str
    body: str
    geom: str
    joints: tuple[str, ...]
    unit_inertia: np.ndarray


def add_payload(spec: mujoco.MjSpec, trunk: mujoco.MjsBody, p) -> PayloadSpec:
    """Add payload ``p`` (a scenario payload dataclass) to ``trunk`` in ``spec``."""
    body_name = f"payload_{p.name}"
    unit = box_unit_inertia(p.size)
    # Compiled with its full mass (MuJoCo refuses a massless body on a joint); a load
    # attached later starts at zero mass, which the episode runner sets at t = 0.
    initial_mass = float(p.mass)
    body = trunk.add_body(name=body_name, pos=list(p.offset))
    body.explicitinertial = True
    # An explicit inertial frame; without it MJCF export leaves the inertial element out.
    body.ipos = [0.0, 0.0, 0.0]
    body.iquat = [1.0, 0.0, 0.0, 0.0]
    body.mass = initial_mass
    body.inertia = list(unit * initial_mass)
    joints: list[str] = []
    kind = getattr(p, "type", "rigid")
    if kind == "shifting":
        jn = f"{body_name}_slide"
        body.add_joint(
            name=jn, type=mujoco.mjtJoint.mjJNT_SLIDE, axis=list(_AXES[p.axis]),
            stiffness=float(p.stiffness), damping=float(p.damping),
            range=[-float(p.travel), float(p.travel)], limited=mujoco.mjtLimited.mjLIMITED_TRUE,
            armature=PAYLOAD_ARMATURE,
        )
        joints.append(jn)
    elif kind == "tray":
        for ax in ("x", "y"):
            jn = f"{body_name}_slide_{ax}"
            body.add_joint(
                name=jn, type=mujoco.mjtJoint.mjJNT_SLIDE, axis=list(_AXES[ax]),
                damping=float(p.damping), range=[-float(p.travel), float(p.travel)],
                limited=mujoco.mjtLimited.mjLIMITED_TRUE, armature=PAYLOAD_ARMATURE,
            )
            joints.append(jn)
        # The tray itself: a thin visual plate on the trunk, no collisions.
        trunk.add_geom(
            name=f"{body_name}_tray", type=mujoco.mjtGeom.mjGEOM_BOX,
            size=[p.size[0] / 2 + p.travel, p.size[1] / 2 + p.travel, 0.004],
            pos=[p.offset[0], p.offset[1], p.offset[2] - p.size[2] / 2 - 0.004],
            rgba=list(TRAY_RGBA), contype=0, conaffinity=0, group=1, mass=0.0,
        )
    geom_name = f"{body_name}_geom"
    # Payloads collide with the ground only (contype 2 meets the terrain's conaffinity).
    body.add_geom(
        name=geom_name, type=mujoco.mjtGeom.mjGEOM_BOX, size=[s / 2.0 for s in p.size],
        rgba=list(PAYLOAD_RGBA), contype=PAYLOAD_CONTYPE, conaffinity=0, mass=0.0, group=1,
    )
    return PayloadSpec(p.name, body_name, geom_name, tuple(joints), unit)
