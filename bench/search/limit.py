"""Breaking-point search: the largest (or smallest) value at which something still passes.

Generic over the thing being tested: ``evaluate(values) -> [Evaluation]``
judges a batch of values at once (so that an executor can run them side by
side); :func:`rate_predicate` makes one from a plain ``value -> pass rate``
function. The search assumes one change from pass to fail across the range
(for ``direction="max"`` low values pass, high values fail; ``"min"`` the
reverse), and finds it in two steps:

1. **bracketing**: the two ends of the range are judged. If the easy end
   already fails, or the hard end still passes, the answer lies outside the
   range and the search says so (``below-range`` / ``above-range``) instead of
   inventing one;
2. **bisection**: the bracket ``[last pass, first fail]`` is cut at
   ``points_per_round`` evenly spaced interior points per round (1 point is
   plain bisection; k points shrink it k + 1 times per round, for k parallel
   workers) until it is no wider than ``tol``.

The answer is the last passing value: the bracket's pass end, so it is a
value that was seen to pass, never an interpolation. When a round finds a pass
beyond a fail (a curve that is not monotone, e.g. a noisy pass rate), the
search keeps the first fail from the easy side (the conservative choice) and
marks the result ``monotone: False``.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field
from typing import Callable, Sequence


@dataclass
class Evaluation:
    """The judgement of one value."""

    pass_rate: float
    passed: bool
    trials: int = 1
    interval: tuple[float, float] | None = None   # e.g. the Wilson interval of the rate
    detail: dict = field(default_factory=dict)    # anything the caller wants kept in the curve


@dataclass
class Point:
    value: float
    pass_rate: float
    passed: bool
    trials: int = 1
    interval: tuple[float, float] | None = None
    round: int = 0
    detail: dict = field(default_factory=dict)


@dataclass
class LimitResult:
    direction: str                 # "max" or "min"
    range: tuple[float, float]
    tol: float
    status: str                    # "found", "above-range" (passes over the whole range), "below-range" (fails everywhere)
    limit: float | None            # the last value seen to pass (the hard end for above-range; None for below-range)
    bracket: tuple[float, float] | None   # (last pass, first fail) when found
    points: list[Point]
    rounds: int
    monotone: bool = True

    @property
    def curve(self) -> list[Point]:
        """Every judged value, sorted by value."""
        return sorted(self.points, key=lambda p: p.value)

    def to_dict(self) -> dict:
        d = asdict(self)
        d["points"] = [asdict(p) for p in self.curve]
        d["evaluations"] = len(self.points)
        return d


Evaluate = Callable[[list[float]], Sequence[Evaluation]]


def rate_predicate(rate: Callable[[float], float], required: float = 1.0) -> Evaluate:
    """A batch evaluator from ``value -> pass rate``: a value passes when its rate >= ``required``."""

    def evaluate(values: list[float]) -> list[Evaluation]:
        out = []
        for v in values:
            r = float(rate(v))
            out.append(Evaluation(r, r >= required))
        return out

    return evaluate


def _interior(p: float, f: float, k: int, integer: bool, decimals: int | None) -> list[float]:
    vals = []
    for j in range(1, k + 1):
        v = p + (f - p) * j / (k + 1)
        if integer:
            v = float(round(v))
        elif decimals is not None:
            v = round(v, decimals)
        if min(p, f) < v < max(p, f) and v not in vals:
            vals.append(v)
    return vals


def find_limit(evaluate: Evaluate, lo: float, hi: float, *, direction: str = "max", tol: float | None = None,
               points_per_round: int = 1, integer: bool = False, decimals: int | None = None,
               max_rounds: int = 64, on_round: Callable[[int, list[Point], tuple | None], None] | None = None
               ) -> LimitResult:
    """Bracket and bisect ``[lo, hi]`` for the pass/fail change; see the module docstring.

    ``tol``: stop when the bracket is at most this wide (default 1 % of the
    range; at least 1 for ``integer``). ``decimals``: round interior values
    (readable ids); keep it finer than ``tol``. ``on_round(round, points, bracket)``
    is called after each round (for progress lines).
    """
    if direction not in ("max", "min"):
        raise ValueError(f"direction must be 'max' or 'min', got {direction!r}")
    lo, hi = float(lo), float(hi)
    if not (math.isfinite(lo) and math.isfinite(hi)) or lo >= hi:
        raise ValueError(f"the range must be two finite numbers LO < HI, got {lo:g} {hi:g}")
    tol = (hi - lo) / 100.0 if tol is None else float(tol)
    if integer:
        tol = max(tol, 1.0)
    if tol <= 0:
        raise ValueError(f"tol must be > 0, got {tol:g}")
    k = max(1, int(points_per_round))
    easy, hard = (lo, hi) if direction == "max" else (hi, lo)
    points: list[Point] = []

    def judge(values: list[float], rnd: int) -> list[Point]:
        evs = list(evaluate(list(values)))
        if len(evs) != len(values):
            raise ValueError(f"evaluate returned {len(evs)} results for {len(values)} values")
        new = [Point(v, float(e.pass_rate), bool(e.passed), int(e.trials),
                     tuple(e.interval) if e.interval is not None else None, rnd, dict(e.detail))
               for v, e in zip(values, evs)]
        points.extend(new)
        return new

    # 1. bracketing
    p_easy, p_hard = judge([easy, hard], 0)
    if not p_easy.passed:
        bracket = None
        result = LimitResult(direction, (lo, hi), tol, "below-range", None, None, points, 1)
        if on_round:
            on_round(0, [p_easy, p_hard], None)
        return result
    if p_hard.passed:
        result = LimitResult(direction, (lo, hi), tol, "above-range", hard, None, points, 1)
        if on_round:
            on_round(0, [p_easy, p_hard], None)
        return result
    p, f = easy, hard
    monotone = True
    if on_round:
        on_round(0, [p_easy, p_hard], (p, f))

    # 2. bisection (k-section)
    rnd = 0
    while abs(f - p) > tol and rnd < max_rounds:
        vals = _interior(p, f, k, integer, decimals)
        if not vals:
            break
        rnd += 1
        new = sorted(judge(vals, rnd), key=lambda q: abs(q.value - p))  # from the easy side outwards
        first_fail = next((i for i, q in enumerate(new) if not q.passed), None)
        if first_fail is None:
            p = new[-1].value
        else:
            if any(q.passed for q in new[first_fail + 1:]):
                monotone = False
            f = new[first_fail].value
            if first_fail > 0:
                p = new[first_fail - 1].value
        if on_round:
            on_round(rnd, new, (p, f))
    bracket = (p, f)
    return LimitResult(direction, (lo, hi), tol, "found", p, bracket, points, rnd + 1, monotone)
