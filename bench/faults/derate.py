"""Fault kind ``derate``: the torque limits of some joints scaled by ``factor`` from ``at`` on."""

from __future__ import annotations

from typing import Any, ClassVar

import numpy as np

from bench.faults.registry import Effect, FaultContext, FaultKind
from bench.fieldspec import AT, MAX_LIST_ITEMS, frozen, spec


def _parse_joints(v: Any, raw: Any, path: tuple) -> Any:
    if raw == "all":
        return "all"
    if isinstance(raw, str):
        return v.fail(path, f"expected 'all' or a list of joint names, got {raw!r}", "write [FL_knee] for one joint")
    return v.convert(tuple[str, ...], raw, path, {"min_items": 1, "max_items": MAX_LIST_ITEMS})


@frozen
class Derate:
    """Torque limits of some joints scaled by `factor` from `at` on."""

    kind: ClassVar[str] = "derate"
    at: float = spec(**AT)
    joints: Any = spec("all", doc="'all' or a list of joint names", parse=_parse_joints, json={
        "anyOf": [{"const": "all"}, {"type": "array", "items": {"type": "string"}, "minItems": 1}]})
    factor: float = spec(doc="torque limit multiplier", ge=0.0, le=1.0)

    def label(self) -> str:
        joints = "all joints" if self.joints == "all" else ", ".join(self.joints)
        return f"torque derated to {self.factor * 100:.0f}% on {joints}"

    def joint_refs(self):
        return [] if self.joints == "all" else [(("joints", j), name) for j, name in enumerate(self.joints)]


class DerateEffect(Effect):
    """Rewrites the limit array at each switch-on; costs nothing on the other ticks.

    The limit of a joint is that of the last derate in scenario order that covers it and is on
    (derates overwrite, they do not compound), else its nominal limit.
    """

    def __init__(self, items, ctx: FaultContext):
        J = len(ctx.nominal_limits)
        self.nominal = ctx.nominal_limits
        self.limit_now = ctx.limit_now
        self.steps = [(ctx.first_tick(f.at), np.arange(J) if f.joints == "all"
                       else np.array([ctx.joint_index[j] for j in f.joints]), f.factor) for _, f in items]

    def switch_ticks(self):
        return [k for k, _, _ in self.steps]

    def switch(self, k: int) -> None:
        self.limit_now[:] = self.nominal
        for k_on, idx, factor in self.steps:
            if k >= k_on:
                self.limit_now[idx] = self.nominal[idx] * factor


KIND = FaultKind(schema=Derate, compile=DerateEffect)
