"""Timed events of an episode, compiled once from the scenario into arrays.

Disturbance forces become per-physics-step index ranges with a force and a
point of application; payload mass schedules become functions of time; each
fault becomes a captioned event (its effect is compiled in `bench.sim.faults`). Random draws (push trains) use the scenario seed, so an
episode is reproducible from (scenario, seed). Each event also yields an
:class:`Event` record for captions and plots.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np


@dataclass(frozen=True)
class Event:
    """A span of time during which something the controller was not told about acts."""

    t_start: float
    t_end: float
    kind: str
    label: str

    def to_dict(self) -> dict:
        return {"t_start": self.t_start, "t_end": self.t_end, "kind": self.kind, "label": self.label}


@dataclass
class ForceSchedule:
    """Disturbance forces: force (world, N) and point (trunk frame, m), active on [k0, k1) physics steps."""

    force: np.ndarray   # (D, 3)
    point: np.ndarray   # (D, 3)
    k0: np.ndarray      # (D,)
    k1: np.ndarray      # (D,)

    @property
    def empty(self) -> bool:
        return len(self.k0) == 0


@dataclass
class MassSchedule:
    """Mass of one payload as a function of time."""

    payload_index: int
    base_mass: float
    attach_at: float | None
    drop_at: float | None
    drain: object | None
    steps: list = field(default_factory=list)

    def mass_at(self, t: float) -> float:
        if self.attach_at is not None and t < self.attach_at:
            return 0.0
        if self.drop_at is not None and t >= self.drop_at:
            return 0.0
        m = self.base_mass
        for st in self.steps:
            if t >= st.at:
                m = float(st.mass)
        if self.drain is not None:
            d = self.drain
            if t >= d.at:
                frac = 1.0 if d.duration <= 0 else min((t - d.at) / d.duration, 1.0)
                m = m + (float(d.final_mass) - m) * frac
        return m


def _vec(v, n=3) -> np.ndarray:
    return np.asarray(list(v) if v is not None else [0.0] * n, dtype=float)


def _fmt_force(f: np.ndarray) -> str:
    mag = float(np.linalg.norm(f))
    if mag == 0:
        return "0 N"
    axis = int(np.argmax(np.abs(f)))
    sign = "+" if f[axis] >= 0 else "-"
    return f"{mag:.0f} N {sign}{'xyz'[axis]}"


def push_train_draws(d, seed: int, index: int) -> list[tuple[float, float, np.ndarray]]:
    """Draw the pushes of a push train: (time, duration, force) triples, sorted by time.

    The generator is seeded from (scenario seed, disturbance index) so that adding
    another disturbance does not change this train's draws.
    """
    rng = np.random.default_rng(np.random.SeedSequence([int(seed), 7919, int(index)]))
    times = np.sort(rng.uniform(d.start, d.end, size=int(d.count)))
    out = []
    for t in times:
        mag = rng.uniform(d.magnitude[0], d.magnitude[1])
        dur = rng.uniform(d.duration[0], d.duration[1])
        if d.direction == "horizontal":
            a = rng.uniform(0.0, 2.0 * math.pi)
            u = np.array([math.cos(a), math.sin(a), 0.0])
        else:
            u = rng.standard_normal(3)
            u /= np.linalg.norm(u)
        out.append((float(t), float(dur), mag * u))
    return out


def compile_forces(disturbances, seed: int, dt: float, duration: float) -> tuple[ForceSchedule, list[Event]]:
    forces, points, k0s, k1s, events = [], [], [], [], []

    def add(t0: float, dur: float, f: np.ndarray, p: np.ndarray, kind: str, label: str) -> None:
        k0 = int(round(t0 / dt))
        k1 = max(int(round((t0 + dur) / dt)), k0 + 1)
        forces.append(f)
        points.append(p)
        k0s.append(k0)
        k1s.append(k1)
        events.append(Event(t0, t0 + dur, kind, label))

    for i, d in enumerate(disturbances):
        if d.kind == "push":
            f = _vec(d.force)
            add(d.at, d.duration, f, _vec(d.point), "push", f"push {_fmt_force(f)} for {d.duration:.2f} s")
        elif d.kind == "push_train":
            for t, dur, f in push_train_draws(d, seed, i):
                add(t, dur, f, _vec(d.point), "push", f"push {_fmt_force(f)} for {dur:.2f} s")
        elif d.kind == "steady_force":
            dur = (duration - d.at) if d.duration is None else d.duration
            f = _vec(d.force)
            add(d.at, dur, f, _vec(d.point), "steady_force", f"steady force {_fmt_force(f)}")
    sched = ForceSchedule(
        force=np.array(forces, dtype=float).reshape(-1, 3),
        point=np.array(points, dtype=float).reshape(-1, 3),
        k0=np.array(k0s, dtype=np.int64), k1=np.array(k1s, dtype=np.int64),
    )
    return sched, events


def compile_masses(payloads, duration: float) -> tuple[list[MassSchedule], list[Event]]:
    scheds, events = [], []
    for i, p in enumerate(payloads):
        steps = sorted(list(p.steps or []), key=lambda s: s.at)
        dynamic = p.attach_at is not None or p.drop_at is not None or p.drain is not None or steps
        if not dynamic:
            continue
        scheds.append(MassSchedule(i, float(p.mass), p.attach_at, p.drop_at, p.drain, steps))
        if p.attach_at is not None:
            events.append(Event(p.attach_at, min(p.attach_at + 0.5, duration), "attach",
                                f"load '{p.name}' attached ({p.mass:g} kg)"))
        if p.drop_at is not None:
            events.append(Event(p.drop_at, min(p.drop_at + 0.5, duration), "drop", f"load '{p.name}' dropped"))
        if p.drain is not None:
            d = p.drain
            events.append(Event(d.at, min(d.at + d.duration, duration), "drain",
                                f"'{p.name}' draining to {d.final_mass:g} kg"))
        for st in steps:
            events.append(Event(st.at, min(st.at + 0.5, duration), "mass_step", f"'{p.name}' now {st.mass:g} kg"))
    return scheds, events


def fault_events(faults, duration: float) -> list[Event]:
    """One event per fault, from its switch-on to the end, captioned by the kind's ``label()``."""
    return [Event(float(f.at), duration, f"fault_{f.kind}", f.label() if hasattr(f, "label") else f.kind)
            for f in faults]
