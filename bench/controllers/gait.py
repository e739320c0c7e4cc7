"""Gait scheduler: which feet are in stance, and how far each swing has gone.

One global phase ``phi`` in [0, 1) advances at ``1 / period_s`` while the gait
runs; leg ``i`` has phase ``(phi + offset_i) mod 1``. A leg is in stance while its
phase is below ``duty`` and in swing otherwise, with swing phase
``(phase - duty) / (1 - duty)`` in [0, 1].

Besides the boolean contact schedule the scheduler gives each foot a *load* in
[0, 1]: 1 in the middle of stance, ramping in over the first ``load_ramp`` of the
stance time and out over the last ``load_ramp`` (a fraction of the period).
The force QP scales each foot's normal-force bounds by it, so a foot is unloaded
smoothly before it lifts and loaded smoothly after it lands, which is what keeps
the start and stop of stepping from jolting the trunk.

Gaits (leg order FL, FR, RL, RR; :data:`GAIT_OFFSETS`)
------------------------------------------------------
``stand``: all feet in stance, load 1, phase frozen (the scheduler's state
while it is not running, whatever gait it holds).
``trot``: diagonal pairs (FL+RR, FR+RL) half a period apart.
``pace``: same-side pairs (FL+RL, FR+RR) half a period apart.
``bound``: front pair (FL+FR) and hind pair (RL+RR) half a period apart.
``walk``: one leg at a time, a quarter period apart, in the order RL, FL, RR,
FR (each hind foot is followed by the front foot on its side); with a duty
factor above 0.75 there is an all-stance window between two swings.

``update(dt, run)`` with ``run=True`` starts stepping; ``run=False`` asks it to
stop. Stepping always starts and stops at a *stand point*: the instant when one
leg (or pair) has just landed and finished its load ramp-in while every other leg
is still fully loaded (this needs ``duty - (1 - gap) >= 2 * load_ramp``, where
``gap`` is the smallest phase distance between two groups: 0.5 for the
two-pair gaits, 0.25 for the walk). The phase is frozen there, so stopping and
restarting is phase-continuous, every load is 1 at the switch, and the first
lift-off is preceded by a load ramp-down rather than a sudden unloading.
A stop request is honoured only after ``min_run_s`` of stepping, so a command that
flickers to zero does not make it stop and start again.

Gait changes (``request(gait)``) go through a stand point too: a standing
scheduler takes the new gait at once; a stepping one keeps its gait until the
next stand point of it, takes the new gait's parameters there and goes on
stepping from the new gait's stand point whose legs' stance progress
(``phase / duty``) is closest to the old one's, so the legs that have stood
longest lift first. At the switch every foot is in stance with load 1 in both
gaits; nothing jumps.

Per-gait parameters (:data:`GAIT_TUNING`): the trot's come from the
constructor (the stacks' ``gait_period_s``, ``duty``, ``load_ramp``), the others'
from the table or the ``tuning`` argument.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

GAIT_OFFSETS: dict[str, tuple[float, ...]] = {
    # leg order FL, FR, RL, RR
    "trot": (0.0, 0.5, 0.5, 0.0),
    "pace": (0.0, 0.5, 0.0, 0.5),
    "bound": (0.0, 0.0, 0.5, 0.5),
    # lift-off order RL, FL, RR, FR: a leg lifts when phi + offset reaches duty
    "walk": (0.75, 0.25, 0.0, 0.5),
}

#: Per-gait parameters of the reference stacks for the gaits other than the trot (the trot's are the
#: stacks' own ``gait_period_s``/``duty``/``load_ramp``/``swing_height_m``). Tuned on flat ground with
#: quad12 (see the gait scenarios); each satisfies the stand-point condition of the module docstring.
GAIT_TUNING: dict[str, dict[str, float]] = {
    "pace": {"period_s": 0.16, "duty": 0.66, "load_ramp": 0.05, "swing_height_m": 0.05},
    "bound": {"period_s": 0.16, "duty": 0.6, "load_ramp": 0.05, "swing_height_m": 0.05},
    "walk": {"period_s": 0.8, "duty": 0.9, "load_ramp": 0.05, "swing_height_m": 0.05},
}


@dataclass(frozen=True)
class GaitSpec:
    """One gait: per-leg phase offsets, cycle period (s), duty factor and load ramp (share of the period)."""

    name: str
    offsets: tuple[float, ...]
    period_s: float
    duty: float
    load_ramp: float


def _smooth(x: float) -> float:
    """C1 ramp 0 -> 1 on [0, 1]."""
    if x <= 0.0:
        return 0.0
    if x >= 1.0:
        return 1.0
    return x * x * (3.0 - 2.0 * x)


class GaitScheduler:
    """Per-leg phase, contact schedule, swing phase and load.

    Parameters
    ----------
    period_s: duration of one full gait cycle (s).
    duty: fraction of the cycle each leg is in stance, in (0.5, 1) for a trot
        with double-support windows (0.5 is allowed but then start/stop has no
        double support to ramp in).
    gait: key of :data:`GAIT_OFFSETS`, or a tuple of per-leg phase offsets.
    load_ramp: fraction of the period over which a foot's load ramps in after
        touch-down and out before lift-off.
    min_run_s: minimum stepping time before a stop request is honoured (s).
    tuning: gait name -> ``{period_s, duty, load_ramp}`` for the gaits that
        ``request`` may switch to (defaults: :data:`GAIT_TUNING`); the gait given
        by ``gait`` uses ``period_s``, ``duty`` and ``load_ramp`` above.
    """

    def __init__(
        self,
        period_s: float = 0.4,
        duty: float = 0.6,
        gait: str | tuple[float, ...] = "trot",
        load_ramp: float = 0.05,
        min_run_s: float = 0.5,
        tuning: dict[str, dict[str, float]] | None = None,
    ) -> None:
        self.min_run_s = float(min_run_s)
        name = gait if isinstance(gait, str) else "custom"
        offsets = GAIT_OFFSETS[gait] if isinstance(gait, str) else tuple(gait)
        first = self._make_spec(name, offsets, period_s, duty, load_ramp)
        self._specs: dict[str, GaitSpec] = {first.name: first}
        table = {**GAIT_TUNING, **(tuning or {})}
        for g, params in table.items():
            if g == first.name or g not in GAIT_OFFSETS:
                continue
            self._specs[g] = self._make_spec(g, GAIT_OFFSETS[g], params["period_s"], params["duty"],
                                             params.get("load_ramp", load_ramp))
        self._pending: GaitSpec | None = None
        self.switches = 0
        self._apply(first)
        self.reset()

    @staticmethod
    def _make_spec(name: str, offsets, period_s: float, duty: float, load_ramp: float) -> GaitSpec:
        if period_s <= 0.0:
            raise ValueError("period_s must be > 0")
        if not 0.0 < duty < 1.0:
            raise ValueError("duty must be in (0, 1)")
        return GaitSpec(name, tuple(float(o) for o in offsets), float(period_s), float(duty),
                        float(max(0.0, min(load_ramp, 0.5 * duty))))

    def _apply(self, spec: GaitSpec) -> None:
        """Take ``spec``'s parameters (the phase ``phi`` is set by the caller)."""
        self.spec = spec
        self.period_s = spec.period_s
        self.duty = spec.duty
        self.offsets = np.array(spec.offsets, dtype=float)
        self.n_legs = len(spec.offsets)
        self.load_ramp = spec.load_ramp
        # stand points: a leg (pair) has landed and finished its load ramp-in (phase == load_ramp), so
        # every stance foot there carries full load
        self._stop_points = np.unique(np.round(np.mod(self.load_ramp - self.offsets, 1.0), 12))
        self._offsets = [float(o) for o in self.offsets]
        self._stop_points_list = [float(p) for p in self._stop_points]

    @property
    def gaits(self) -> tuple[str, ...]:
        """The gaits ``request`` accepts."""
        return tuple(self._specs)

    @property
    def gait(self) -> str:
        """The gait whose parameters are in force (a requested one takes over at the next stand point)."""
        return self.spec.name

    @property
    def stance_duration_s(self) -> float:
        return self.duty * self.period_s

    @property
    def swing_duration_s(self) -> float:
        return (1.0 - self.duty) * self.period_s

    @property
    def running(self) -> bool:
        return self._running

    @property
    def mode(self) -> str:
        return self.spec.name if self._running else "stand"

    # Per-leg state is kept as short Python lists (contact_list, phase_list,
    # stance_phase_list, swing_phase_list, load_list): the stacks read them
    # element by element every tick, which is far cheaper on lists than on numpy
    # arrays. The array properties below are copies for analysis and tests.

    @property
    def contact(self) -> np.ndarray:
        return np.array(self.contact_list, dtype=bool)

    @property
    def phase(self) -> np.ndarray:
        return np.array(self.phase_list)

    @property
    def stance_phase(self) -> np.ndarray:
        return np.array(self.stance_phase_list)

    @property
    def swing_phase(self) -> np.ndarray:
        return np.array(self.swing_phase_list)

    @property
    def load(self) -> np.ndarray:
        return np.array(self.load_list)

    def reset(self) -> None:
        # start frozen at a stand point (both pairs in stance, full load)
        self.phi = float(self._stop_points[-1]) if len(self._stop_points) else 0.0
        self._running = False
        self._stopping = False
        self._run_time = 0.0
        self._fill_stand()

    def request(self, gait: str) -> None:
        """Step in ``gait`` from the next stand point on (at once when standing); see the module docstring."""
        spec = self._specs.get(gait)
        if spec is None:
            raise ValueError(f"unknown gait {gait!r}; this scheduler knows {', '.join(self._specs)}")
        self._pending = None if spec is self.spec else spec
        if self._pending is not None and not self._running:
            self._switch()

    def _switch(self) -> None:
        """At a stand point of the current gait: take the pending gait, at its closest stand point."""
        new = self._pending
        self._pending = None
        old_progress = [min(((self.phi + o) % 1.0) / self.duty, 1.0) for o in self._offsets]
        self._apply(new)
        best, best_cost = self.phi, None
        for sp in self._stop_points_list:
            cost = sum((min(((sp + o) % 1.0) / self.duty, 1.0) - a) ** 2
                       for o, a in zip(self._offsets, old_progress))
            if best_cost is None or cost < best_cost - 1e-12:
                best, best_cost = sp, cost
        self.phi = best
        self.switches += 1
        self._fill_stand()

    def _fill_stand(self) -> None:
        n = self.n_legs
        self.contact_list = [True] * n
        self.swing_phase_list = [0.0] * n
        self.load_list = [1.0] * n
        self.phase_list = [(self.phi + o) % 1.0 for o in self._offsets]
        self.stance_phase_list = [min(p / self.duty, 1.0) for p in self.phase_list]

    def update(self, dt: float, run: bool) -> None:
        """Advance by ``dt`` seconds; ``run`` says whether stepping is wanted."""
        if not self._running:
            if not run:
                return
            self._running = True
            self._stopping = False
            self._run_time = 0.0
        else:
            self._run_time += dt
            self._stopping = (not run) and self._run_time >= self.min_run_s
        old = self.phi
        new = old + dt / self.period_s
        if self._stopping or self._pending is not None:
            for sp in self._stop_points_list:
                # crossing a stand point (also across the wrap at 1)
                k = sp if sp > old else sp + 1.0
                if k <= new:
                    self.phi = k % 1.0
                    if self._pending is not None:
                        # a gait change: stand for this tick in the new gait, then step on unless stopping
                        self._switch()
                        self._running = not self._stopping
                        self._run_time = 0.0
                    else:
                        self._running = False
                        self._fill_stand()
                    self._stopping = False
                    return
        self.phi = phi = new % 1.0
        duty, ramp = self.duty, self.load_ramp
        inv_ramp = 1.0 / ramp if ramp > 0.0 else 0.0
        inv_swing = 1.0 / (1.0 - duty)
        contact, swing, load, phase, stance = [], [], [], [], []
        for o in self._offsets:
            p = (phi + o) % 1.0
            phase.append(p)
            if p < duty:
                contact.append(True)
                stance.append(p / duty)
                swing.append(0.0)
                if ramp > 0.0:
                    load.append(min(_smooth(p * inv_ramp), _smooth((duty - p) * inv_ramp)))
                else:
                    load.append(1.0)
            else:
                contact.append(False)
                stance.append(1.0)
                swing.append((p - duty) * inv_swing)
                load.append(0.0)
        self.contact_list, self.swing_phase_list, self.load_list = contact, swing, load
        self.phase_list, self.stance_phase_list = phase, stance

    def time_to_touchdown_s(self, leg: int) -> float:
        """Seconds until leg ``leg`` lands (0 when in stance)."""
        if self.contact_list[leg]:
            return 0.0
        return (1.0 - self.swing_phase_list[leg]) * self.swing_duration_s
