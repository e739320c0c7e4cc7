"""The faults of one episode, compiled once into effects the tick loop calls through a few flags.

`compile_faults` runs each registered kind's compile step (see `bench.faults`)
and returns a `FaultPlan`. Per tick the episode does three cheap checks:
``k == plan.next_tick`` (a switch-on is due), ``plan.observers`` and
``plan.commanders``/``plan.appliers`` (lists of effects that act every tick).
With no fault on, the lists are empty and no loop over faults runs.
"""

from __future__ import annotations

from bench.faults import Effect, FaultContext, group_by_kind


class FaultPlan:
    """Compiled effects, the ticks at which they switch, and the lists of those acting every tick."""

    def __init__(self, effects: list[Effect], n_ticks: int):
        self.effects = effects   # in phase order: (order, first fault index)
        due: dict[int, list[Effect]] = {}
        for e in effects:
            for k in sorted(set(int(k) for k in e.switch_ticks())):
                if 0 <= k < n_ticks:
                    due.setdefault(k, []).append(e)
        self._due = due
        self._ticks = sorted(due, reverse=True)   # popped from the end
        self.next_tick = self._ticks.pop() if self._ticks else -1
        self._refresh()

    def _refresh(self) -> None:
        self.observers = [e for e in self.effects if e.observing]
        self.commanders = [e for e in self.effects if e.commanding]
        self.appliers = [e for e in self.effects if e.applying]

    def switch(self, k: int) -> None:
        """Run the switch-ons due at tick ``k`` (the caller checks ``k == next_tick``)."""
        for e in self._due[k]:
            e.switch(k)
        self.next_tick = self._ticks.pop() if self._ticks else -1
        self._refresh()

    def observe(self, obs) -> None:
        for e in self.observers:
            e.observe(obs)

    def command(self, k: int, tau):
        for e in self.commanders:
            tau = e.command(k, tau)
        return tau

    def apply(self, applied) -> None:
        for e in self.appliers:
            e.apply(applied)


def compile_faults(faults, ctx: FaultContext) -> FaultPlan:
    """Compile a scenario's ``faults`` for one episode (after the world is built, before the first tick)."""
    compiled = []
    for kind, items in group_by_kind(faults):
        effect = kind.compile(items, ctx)
        if effect is not None:
            compiled.append((effect.order, items[0][0], effect))
    compiled.sort(key=lambda c: (c[0], c[1]))
    return FaultPlan([e for _, _, e in compiled], ctx.n_ticks)
