"""Which gait the feet actually used, read from the trace's foot contacts and checked against definitions.

Definitions (the trade's own, for a four-legged gait):

- **trot**: diagonal legs move together (front-left with hind-right, front-right with hind-left);
- **pace**: legs on the same side move together;
- **bound**: the two front legs move together and the two hind legs move together;
- **walk**: one leg at a time: at most one foot is off the ground at any instant
  (which makes every duty factor at least 0.75);
- **stand**: every foot on the ground.

Two legs "move together" when their contact states agree. For two legs in
antiphase with duty factor ``d`` (share of the cycle in stance, ``d > 1/2``)
the states agree only while both stand, a share ``2 d - 1`` of the time; for
two legs in phase they agree all the time. So a pair's agreement separates the
gaits by a margin that shrinks as ``d`` nears 1: at the bench's trot duty of
0.6 an in-phase pair agrees about 1.0 of the time and an antiphase pair about
0.2. :data:`IN_PHASE_MIN` (0.8) leaves room for touch-down and lift-off
timing that differs by a tick or two and for contact chatter, and still sits
well above ``2 d - 1`` for duty factors up to 0.85 (a rule of thumb: common
practice, no source).

"At any instant" is read with a tolerance, :data:`CHATTER_MAX` (0.02): a stance
foot that carries almost no load (in a walk, the foot diagonal to the swinging
one while the centre of mass sits on the line between the other two) loses
contact for a tick now and then without lifting. Up to 2 % of the samples may
break the walk's and the stand's rule (common practice, no source). It still
tells a walk from a trot: a trot with duty ``d`` has two feet off for a share
``2 (1 - d)`` of the time, more than 2 % for any ``d`` below 0.99.

Legs are told apart by where the feet are in the trunk frame at the first
sample (front: ahead of the trunk origin; left: +y), so any foot names work.
Only a Trace is read.

Scoring criteria (registered in the entry point group ``bench.criteria``):

- ``gait``: the contacts match a definition over a time window. Written as a
  gait name (from the scoring window's start to the end), a mapping
  ``{expect: bound, from: 2.0, to: 8.0}`` (``from`` defaults to the scoring
  window's start, ``to`` to the end) or a list of such mappings (every window
  must match: a gait sequence). Value: the expected pattern's score, limit: its
  threshold (see :func:`pattern_score`); the worst window is reported.
- ``duty_factor_min`` / ``duty_factor_max``: the lowest / highest duty factor
  over the feet (share of the scoring window each foot is in contact), at least
  / at most the limit.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from bench.scoring.criteria import CriterionResult

#: Contact agreement above which two legs count as moving together (see the module docstring).
IN_PHASE_MIN = 0.8
#: Share of samples that may break the walk's or the stand's "at any instant" rule (contact chatter).
CHATTER_MAX = 0.02
GAITS = ("stand", "walk", "trot", "pace", "bound")
PAIRING = {"trot": "diagonal", "pace": "same_side", "bound": "front_hind"}


@dataclass
class GaitReading:
    gait: str                       # the best-matching definition, or "irregular"
    agreement: dict[str, float]     # "diagonal", "same_side", "front_hind" -> mean agreement of those pairs
    duty: dict[str, float]          # foot name -> share of time in contact
    max_feet_off: int               # the most feet off the ground at one instant
    samples: int
    share_any_off: float = 0.0      # share of samples with at least one foot off
    share_multi_off: float = 0.0    # share of samples with more than one foot off

    def score(self, gait: str) -> tuple[float, float]:
        """``(value, threshold)``: ``gait`` matches exactly when value >= threshold (see :func:`pattern_score`)."""
        return pattern_score(self, gait)

    def matches(self, gait: str) -> bool:
        """True when the contacts satisfy ``gait``'s definition."""
        value, threshold = pattern_score(self, gait)
        return value >= threshold


def pattern_score(r: GaitReading, gait: str) -> tuple[float, float]:
    """How well reading ``r`` fits ``gait``: ``(value, threshold)``, a match exactly when value >= threshold.

    - trot, pace, bound: the agreement of the gait's pairs, threshold :data:`IN_PHASE_MIN`; lowered to
      ``2 IN_PHASE_MIN - a`` when another pairing's agreement ``a`` reaches the threshold too (legs that
      nearly all agree are not that gait), and 0 when no foot ever lifts;
    - walk: ``1 - k b`` with ``b`` the share of samples with more than one foot off, scaled by
      ``k = (1 - IN_PHASE_MIN) / CHATTER_MAX`` (10) so that the allowed chatter share lands on the same
      threshold :data:`IN_PHASE_MIN` and margins compare across gaits (clipped at 0); 0 when feet are off
      for no more than the chatter share (standing is not walking);
    - stand: the same with ``b`` the share of samples with any foot off.
    """
    k = (1.0 - IN_PHASE_MIN) / CHATTER_MAX
    if gait == "stand":
        return max(0.0, 1.0 - k * r.share_any_off), IN_PHASE_MIN
    if gait == "walk":
        if r.share_any_off <= CHATTER_MAX:
            return 0.0, IN_PHASE_MIN
        return max(0.0, 1.0 - k * r.share_multi_off), IN_PHASE_MIN
    pair = PAIRING.get(gait)
    if pair is None:
        raise ValueError(f"unknown gait {gait!r}; known: {', '.join(GAITS)}")
    if r.max_feet_off < 1:
        return 0.0, IN_PHASE_MIN
    a = r.agreement
    strongest_other = max(v for k, v in a.items() if k != pair)
    value = a[pair] if strongest_other < IN_PHASE_MIN else min(a[pair], 2 * IN_PHASE_MIN - strongest_other)
    return value, IN_PHASE_MIN


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
    if not len(t):
        raise ValueError("no samples in the window")
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
    off = (~c).sum(axis=1)
    reading = GaitReading("irregular", agreement, duty, int(off.max()), int(len(c)),
                          float(np.mean(off >= 1)), float(np.mean(off >= 2)))
    for g in GAITS:
        if reading.matches(g):
            reading.gait = g
            break
    return reading


# --------------------------------------------------------------------------- criteria


@dataclass(frozen=True)
class GaitWindow:
    """One expectation of the ``gait`` criterion: ``expect`` between ``from_s`` and ``to_s`` (None: default)."""

    expect: str
    from_s: float | None = None
    to_s: float | None = None


@dataclass
class GaitResult(CriterionResult):
    """A ``gait`` criterion's result; ``detail`` says what was read where it failed."""

    detail: str = ""

    def sentence(self) -> str:
        return f"gait: {self.detail}"


_WINDOW_KEYS = ("expect", "from", "to")


def _fmt_reading(r: GaitReading) -> str:
    a = r.agreement
    return (f"read {r.gait} (pair agreement diagonal {a['diagonal']:.2f}, same-side {a['same_side']:.2f}, "
            f"front-hind {a['front_hind']:.2f}; two or more feet off {100 * r.share_multi_off:.1f} % of the time)")


@dataclass(frozen=True)
class GaitCriterion:
    """The feet's contacts match a gait definition over one or more time windows (see the module docstring)."""

    name: str = "gait"
    description: str = ("the foot contacts match a gait's definition (trot, pace, bound, walk, stand): a name, "
                         "{expect: bound, from: s, to: s} or a list of those")
    unit: str = ""
    boolean = False
    direction = "min"
    reads = "foot_contact"     # the trace column it judges (for the reference page)
    limit_doc = "a gait name, `{expect, from, to}` or a list of those"

    # ---- validation (called by the scenario schema for a criterion that is not a plain number)
    def parse(self, v, raw, path: tuple):
        items = raw if isinstance(raw, list) else [raw]
        if isinstance(raw, list) and not raw:
            return v.fail(path, "expected at least one gait window", "e.g. gait: {expect: bound, from: 2.0}")
        out, ok = [], True
        for n, item in enumerate(items):
            p = path + (n,) if isinstance(raw, list) else path
            w = self._window(v, item, p)
            if w is v.INVALID:
                ok = False
            else:
                out.append(w)
        return tuple(out) if ok else v.INVALID

    def _window(self, v, item, p: tuple):
        if isinstance(item, str):
            item = {"expect": item}
            at_name = True
        else:
            at_name = False
        if not isinstance(item, dict):
            return v.fail(p, f"expected a gait name or {{expect: gait, from: s, to: s}}, got {v.describe(item)}",
                          "e.g. gait: bound, or gait: {expect: bound, from: 2.0}")
        ok = True
        for k in item:
            if k not in _WINDOW_KEYS:
                v.unknown_key(p + (k,), k, _WINDOW_KEYS)
                ok = False
        if "expect" not in item:
            return v.fail(p, "missing required field 'expect'", "e.g. {expect: bound, from: 2.0}",
                          field=p + ("expect",))
        expect = item["expect"]
        if not isinstance(expect, str) or expect not in GAITS:
            from bench.suggest import did_you_mean

            hint = did_you_mean(expect, GAITS) if isinstance(expect, str) else None
            v.fail(p if at_name else p + ("expect",),
                   f"expected one of {', '.join(GAITS)}; got {v.describe(expect)}", hint)
            ok = False
        times = {}
        for k in ("from", "to"):
            if item.get(k) is not None:
                got = v.convert(float, item[k], p + (k,), {"ge": 0.0, "unit": "s"})
                if got is v.INVALID:
                    ok = False
                times[k] = got
        if ok and times.get("from") is not None and times.get("to") is not None and times["to"] <= times["from"]:
            v.fail(p + ("to",), f"to {times['to']:g} s is not after from {times['from']:g} s")
            ok = False
        if not ok:
            return v.INVALID
        return GaitWindow(expect, times.get("from"), times.get("to"))

    def json_schema(self) -> dict:
        window = {"type": "object", "properties": {
            "expect": {"enum": list(GAITS), "description": "the gait the contacts must match"},
            "from": {"type": "number", "minimum": 0, "description": "window start [s] (default: score_from)"},
            "to": {"type": "number", "minimum": 0, "description": "window end [s] (default: the end)"}},
            "required": ["expect"], "additionalProperties": False}
        return {"description": self.description, "anyOf": [
            {"enum": list(GAITS)}, window, {"type": "array", "minItems": 1, "items": window}, {"type": "null"}]}

    # ---- scoring
    def evaluate(self, metrics, series, trace, limit, score_from: float) -> CriterionResult:
        windows = limit if isinstance(limit, (tuple, list)) else (limit,)
        windows = [GaitWindow(w) if isinstance(w, str) else w for w in windows]
        t = np.asarray(trace["t"]) if len(trace) else np.zeros(0)
        end = float(trace.meta.get("duration", t[-1] if len(t) else 0.0))
        dt = float(t[1] - t[0]) if len(t) > 1 else 0.0
        ended_early = not len(t) or t[-1] + dt < end - 1e-9     # fell, or stopped by a fault
        worst = None   # (passed, value - threshold, result)
        for w in windows:
            t0 = score_from if w.from_s is None else w.from_s
            t1 = w.to_s
            where = f"{w.expect} from {t0:.2f} s" + (f" to {t1:.2f} s" if t1 is not None else "")
            if not len(t) or t[-1] < t0 or (ended_early and (t1 is None or t[-1] < t1)):
                last = float(t[-1]) if len(t) else 0.0
                res = GaitResult(self.name, None, None, False, t0, self.unit,
                                 detail=f"expected {where}, but the episode ended at {last:.2f} s")
                key = (False, -math.inf)
            else:
                try:
                    reading = read_gait(trace, t_from=t0, t_to=t1)
                except ValueError as exc:   # not four legs, or not one foot per quadrant: cannot be judged
                    return GaitResult(self.name, None, None, False, t0, self.unit,
                                      detail=f"expected {where}, but {exc}")
                value, threshold = reading.score(w.expect)
                passed = value >= threshold
                detail = f"expected {where}, " + _fmt_reading(reading)
                res = GaitResult(self.name, float(value), float(threshold), passed, None if passed else t0,
                                 self.unit, detail=detail)
                key = (passed, value - threshold)
            if worst is None or key < worst[0]:
                worst = (key, res)
        return worst[1]


@dataclass(frozen=True)
class DutyFactorCriterion:
    """Lowest (``sense='min'``) or highest (``'max'``) duty factor over the feet in the scoring window."""

    name: str
    description: str
    sense: str
    unit: str = ""
    ge: float = 0.0
    le: float = 1.0
    boolean = False
    reads = "foot_contact"

    @property
    def direction(self) -> str:
        return self.sense

    def evaluate(self, metrics, series, trace, limit, score_from: float) -> CriterionResult:
        lim = float(limit)
        if not len(trace):
            return CriterionResult(self.name, None, lim, False, None, self.unit)
        t = np.asarray(trace["t"])
        c = np.asarray(trace["foot_contact"], dtype=bool)[t >= score_from]
        if not len(c):
            return CriterionResult(self.name, None, lim, False, None, self.unit)
        duty = c.mean(axis=0)
        value = float(duty.min() if self.sense == "min" else duty.max())
        passed = value >= lim if self.sense == "min" else value <= lim
        return CriterionResult(self.name, value, lim, bool(passed), None if passed else float(t[-1]), self.unit)


GAIT = GaitCriterion()
DUTY_FACTOR_MIN = DutyFactorCriterion("duty_factor_min", "lowest duty factor over the feet (share of the scoring "
                                      "window each foot is in contact), at least", "min")
DUTY_FACTOR_MAX = DutyFactorCriterion("duty_factor_max", "highest duty factor over the feet (share of the scoring "
                                      "window each foot is in contact), at most", "max")
