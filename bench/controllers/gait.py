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

Modes
-----
``stand``: all feet in stance, load 1, phase frozen.
``trot``: diagonal pairs (FL+RR, FR+RL) half a period apart.

``update(dt, run)`` with ``run=True`` starts stepping; ``run=False`` asks it to
stop. Stepping always starts and stops inside a double-support window, at the point
where one pair has just landed and finished its load ramp-in while the other is
still fully loaded (this needs ``duty - 0.5 >= 2 * load_ramp``); the phase is
frozen there, so stopping and restarting is phase-continuous, every load is 1 at
the switch, and the first lift-off is preceded by a load ramp-down rather than a
sudden unloading.
A stop request is honoured only after ``min_run_s`` of stepping, so a command that
flickers to zero does not make it stop and start again.
"""

from __future__ import annotations

import numpy as np

GAIT_OFFSETS: dict[str, tuple[float, ...]] = {
    # leg order FL, FR, RL, RR
    "trot": (0.0, 0.5, 0.5, 0.0),
}


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
    """

    def __init__(
        self,
        period_s: float = 0.4,
        duty: float = 0.6,
        gait: str | tuple[float, ...] = "trot",
        load_ramp: float = 0.05,
        min_run_s: float = 0.5,
    ) -> None:
        if period_s <= 0.0:
            raise ValueError("period_s must be > 0")
        if not 0.0 < duty < 1.0:
            raise ValueError("duty must be in (0, 1)")
        offsets = GAIT_OFFSETS[gait] if isinstance(gait, str) else tuple(gait)
        self.period_s = float(period_s)
        self.duty = float(duty)
        self.offsets = np.array(offsets, dtype=float)
        self.n_legs = len(offsets)
        self.load_ramp = float(max(0.0, min(load_ramp, 0.5 * duty)))
        self.min_run_s = float(min_run_s)
        # stand points: a pair has landed and finished its load ramp-in (phase ==
        # load_ramp), so every stance foot there carries full load
        self._stop_points = np.unique(np.round(np.mod(self.load_ramp - self.offsets, 1.0), 12))
        self._offsets = [float(o) for o in self.offsets]
        self._stop_points_list = [float(p) for p in self._stop_points]
        self.reset()

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
        return "trot" if self._running else "stand"

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
        if self._stopping:
            for sp in self._stop_points_list:
                # crossing a stand point (also across the wrap at 1)
                k = sp if sp > old else sp + 1.0
                if k <= new:
                    self.phi = k % 1.0
                    self._running = False
                    self._stopping = False
                    self._fill_stand()
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
