"""Fault kind ``lock``: a joint frozen at its position from ``at`` on.

World step: each lock is a joint equality constraint, off until the fault switches it on. It is
made as stiff as MuJoCo allows (time constant two timesteps, impedance 0.99): with MuJoCo's
defaults (0.02 s, 0.95) a knee would yield by degrees under its own motor's full torque.
"""

from __future__ import annotations

from typing import ClassVar

from bench.faults.registry import Effect, FaultContext, FaultKind, WorldContext
from bench.fieldspec import AT, frozen, spec

#: A locked joint's equality constraint: time constant in timesteps (MuJoCo's safe minimum is 2) and impedance.
LOCK_TIMECONST_STEPS = 2.0
LOCK_SOLIMP = (0.99, 0.99, 0.001, 0.5, 2.0)


@frozen
class Lock:
    """A joint frozen at its position from `at` on."""

    kind: ClassVar[str] = "lock"
    at: float = spec(**AT)
    joint: str = spec(doc="joint name from the robot manifest")

    def label(self) -> str:
        return f"joint {self.joint} locked"

    def joint_refs(self):
        return [(("joint",), self.joint)]


def equality_name(index: int) -> str:
    """Name of the equality constraint of ``faults[index]``."""
    return f"fault_lock_{index}"


def build_world(items, ctx: WorldContext) -> None:
    import mujoco

    for i, f in items:
        ctx.spec.add_equality(name=equality_name(i), type=mujoco.mjtEq.mjEQ_JOINT, name1=f.joint, active=False,
                              solref=[LOCK_TIMECONST_STEPS * float(ctx.scenario.timestep), 1.0],
                              solimp=list(LOCK_SOLIMP))


class LockEffect(Effect):
    """At the switch-on tick, holds the joint where it is now: the equality's target is set, then it is turned on."""

    def __init__(self, items, ctx: FaultContext):
        import mujoco

        self.model, self.data = ctx.model, ctx.data
        jq = ctx.world.joint_qpos_adr
        self.steps = [(ctx.first_tick(f.at), int(jq[ctx.joint_index[f.joint]]),
                       mujoco.mj_name2id(ctx.model, mujoco.mjtObj.mjOBJ_EQUALITY, equality_name(i)))
                      for i, f in items]

    def switch_ticks(self):
        return [k for k, _, _ in self.steps]

    def switch(self, k: int) -> None:
        d = self.data
        for k_on, qadr, eq in self.steps:
            if k >= k_on and not d.eq_active[eq]:
                self.model.eq_data[eq, 0] = d.qpos[qadr]
                d.eq_active[eq] = 1


KIND = FaultKind(schema=Lock, compile=LockEffect, build_world=build_world)
