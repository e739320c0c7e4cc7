"""Which gait the feet actually used, read from the trace's foot contacts and checked against definitions.

Definitions (the trade's own, for a four-legged gait):

- **trot**: diagonal legs move together (front-left with hind-right, front-right with hind-left);
- **pace**: legs on the same side move together;
- **bound**: the two front legs move together and the two hind legs move together;
- **walk**: one leg at a time: at most one foot is off the ground at any instant;
- **stand**: every foot on the ground.

Two legs "move together" when their contact states agree. For two legs in
antiphase with duty factor ``d`` (share of the cycle in stance, ``d > 1/2``)
the states agree only while both stand, a share ``2 d - 1`` of the time; for
two legs in phase they agree all the time. So a pair's agreement separates the
gaits by a margin that shrinks as ``d`` nears 1: at the bench's trot duty of
0.6 an in-phase pair agrees about 1.0 of the time and an antiphase pair about
0.2. :data:`IN_PHASE_MIN` (0.8) leaves room for touch-down and lift-off
timing that differs by a tick or two and for contact chatter, and still sits
well above ``2 d - 1`` for duty factors up to 0.85.

Legs are told apart by where the feet are in the trunk frame at the first
sample (front: ahead of the trunk origin; left: +y), so any foot names work.
Only a Trace is read.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

#: Contact agreement above which two legs count as moving together (see the module docstring).
IN_PHASE_MIN = 0.8
GAITS = ("stand", "walk", "trot", "pace", "bound")


@dataclass
class GaitReading:
    gait: str                       # the best-matching definition, or "irregular"
    agreement: dict[str, float]     # "diagonal", "same_side", "front_hind" -> mean agreement of those pairs
    duty: dict[str, float]          # foot name -> share of time in contact
    max_feet_off: int               # the most feet off the ground at one instant
    samples: int

    def matches(self, gait: str) -> bool:
        """True when the contacts satisfy ``gait``'s definition."""
        a = self.agreement
        if gait == "stand":
            return self.max_feet_off == 0
        if gait == "walk":
            return self.max_feet_off == 1
        pair = {"trot": "diagonal", "pace": "same_side", "bound": "front_hind"}.get(gait)
        if pair is None:
            raise ValueError(f"unknown gait {gait!r}; known: {', '.join(GAITS)}")
        others = [v for k, v in a.items() if k != pair]
        return a[pair] >= IN_PHASE_MIN and all(v < IN_PHASE_MIN for v in others) and self.max_feet_off >= 1


def _quat_rotate_inv(q: np.ndarray, v: np.ndarray) -> np.ndarray:
    """Rotate world vectors ``v`` (n,3) into the frame of unit quaternion ``q`` (w, x, y, z)."""
    w, x, y, z = q
    R = np.array([[1 - 2 * (y * y + z * z), 2 * (x * y - w * z), 2 * (x * z + w * y)],
                  [2 * (x * y + w * z), 1 - 2 * (x * x + z * z), 2 * (y * z - w * x)],
                  [2 * (x * z - w * y), 2 * (y * z + w * x), 1 - 2 * (x * x + y * y)]])
    return v @ R          # R.T @ v for each row


def leg_quadrants(foot_pos0: np.ndarray, base_pos0: np.ndarray, base_quat0: np.ndarray) -> list[tuple[bool, bool]]:
    """(front, left) for each foot from its position in the trunk frame."""
    rel = _quat_rotate_inv(np.asarray(base_quat0, float), np.asarray(foot_pos0, float) - base_pos0)
    return [(bool(r[0] > 0), bool(r[1] > 0)) for r in rel]


def read_gait(trace, foot_names: list[str] | None = None, t_from: float = 0.0, t_to: float | None = None) -> GaitReading:
    """The gait the feet used between ``t_from`` and ``t_to`` (s); needs a four-legged trace."""
    contact = np.asarray(trace["foot_contact"], dtype=bool)
    t = np.asarray(trace["t"])
    if contact.ndim != 2 or contact.shape[1] != 4:
        raise ValueError(f"gait definitions here are for four legs; the trace has {contact.shape[-1]} feet")
    quad = leg_quadrants(trace["foot_pos"][0], trace["base_pos"][0], trace["base_quat"][0])
    if len(set(quad)) != 4:
        raise ValueError("the feet are not one per quadrant (front/hind x left/right) at the first sample")
    idx = {q: i for i, q in enumerate(quad)}
    FL, FR, HL, HR = idx[(True, True)], idx[(True, False)], idx[(False, True)], idx[(False, False)]
    sel = (t >= t_from) & (t <= (t[-1] if t_to is None else t_to))
    c = contact[sel]
    if not len(c):
        raise ValueError("no samples in the window")

    def agree(i: int, j: int) -> float:
        return float(np.mean(c[:, i] == c[:, j]))

    agreement = {
        "diagonal": 0.5 * (agree(FL, HR) + agree(FR, HL)),
        "same_side": 0.5 * (agree(FL, HL) + agree(FR, HR)),
        "front_hind": 0.5 * (agree(FL, FR) + agree(HL, HR)),
    }
    names = foot_names or [f"foot{i}" for i in range(4)]
    duty = {names[i]: float(c[:, i].mean()) for i in range(4)}
    reading = GaitReading("irregular", agreement, duty, int((~c).sum(axis=1).max()), int(len(c)))
    for g in GAITS:
        if reading.matches(g):
            reading.gait = g
            break
    return reading
