"""Fault kind ``limp``: a joint producing no torque from ``at`` on."""

from __future__ import annotations

from typing import ClassVar

import numpy as np

from bench.faults.registry import Effect, FaultContext, FaultKind
from bench.fieldspec import AT, frozen, spec


@frozen
class Limp:
    """A joint producing no torque from `at` on."""

    kind: ClassVar[str] = "limp"
    at: float = spec(**AT)
    joint: str = spec(doc="joint name from the robot manifest")

    def label(self) -> str:
        return f"joint {self.joint} limp"

    def joint_refs(self):
        return [(("joint",), self.joint)]


class LimpEffect(Effect):
    """Zeroes the limited torque of the limp joints, from the first switch-on."""

    def __init__(self, items, ctx: FaultContext):
        self.steps = [(ctx.first_tick(f.at), ctx.joint_index[f.joint]) for _, f in items]
        self.joints = np.zeros(0, dtype=int)

    def switch_ticks(self):
        return [k for k, _ in self.steps]

    def switch(self, k: int) -> None:
        self.joints = np.array([j for k_on, j in self.steps if k >= k_on], dtype=int)
        self.applying = True

    def apply(self, applied) -> None:
        applied[self.joints] = 0.0


KIND = FaultKind(schema=Limp, compile=LimpEffect)
