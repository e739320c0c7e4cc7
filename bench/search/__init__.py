"""Breaking-point search: bracketing and bisection over a pass/fail predicate (``bench limit``)."""

from bench.search.limit import Evaluation, LimitResult, Point, find_limit, rate_predicate

__all__ = ["Evaluation", "LimitResult", "Point", "find_limit", "rate_predicate"]
