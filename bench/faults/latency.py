"""Fault kind ``latency``: the controller's torques reach the motors late, in whole control ticks."""

from __future__ import annotations

from typing import ClassVar

import numpy as np

from bench.faults.registry import Effect, FaultContext, FaultKind
from bench.fieldspec import AT, frozen, spec


@frozen
class Latency:
    """Torques the controller returns reach the motors `delay` late from `at` on (whole control ticks)."""

    kind: ClassVar[str] = "latency"
    at: float = spec(**AT)
    delay: float = spec(doc="added command delay, rounded to whole control ticks", unit="s", ge=0.0, le=1.0)

    def label(self) -> str:
        return f"extra command latency {self.delay * 1000:.0f} ms"


class LatencyEffect(Effect):
    """A ring of the last torques, kept from the first tick so that a delay starting later has a past.

    Until ``delay`` ticks have passed the motors get zero torque. With several latencies the one
    switched on last (the longer delay on a tie) applies.
    """

    commanding = True

    def __init__(self, items, ctx: FaultContext):
        # In order of (at, delay) as written, not of the tick: two starts within one tick keep their order.
        on = sorted((f.at, max(int(round(f.delay / ctx.ctrl_dt)), 0)) for _, f in items)
        self.steps = [(ctx.first_tick(at), dk) for at, dk in on]
        self.size = max(dk for _, dk in self.steps) + 1
        self.ring = np.zeros((self.size, len(ctx.nominal_limits)))
        self.zeros = np.zeros(len(ctx.nominal_limits))
        self.delay = 0

    def switch_ticks(self):
        return [k for k, _ in self.steps]

    def switch(self, k: int) -> None:
        for k_on, dk in self.steps:
            if k >= k_on:
                self.delay = dk

    def command(self, k: int, tau):
        self.ring[k % self.size] = tau
        if k < self.delay:
            return self.zeros
        return self.ring[(k - self.delay) % self.size]


KIND = FaultKind(schema=Latency, compile=LatencyEffect)
