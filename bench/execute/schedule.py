"""Submission order: longest episodes first, so that no worker is left with a long one at the end.

Episodes finish in any order and results are put back in job order, so the
order in which they are handed to the workers changes only the wall time. With
many episodes of mixed length, handing out the longest first (the "longest
processing time first" rule of list scheduling; common practice, no source
needed for the heuristic) keeps the last minutes of a run from being one
worker busy and the others idle. The cost is estimated from the scenario alone:
control ticks (the controller dominates a tick) plus a tenth of the physics
steps.
"""

from __future__ import annotations

#: Weight of one physics step against one control tick in the cost estimate.
PHYSICS_STEP_WEIGHT = 0.1


def estimated_cost(job) -> float:
    sc = job.scenario
    try:
        duration = float(sc.duration)
        return duration * (float(sc.control_rate) + PHYSICS_STEP_WEIGHT / float(sc.timestep))
    except (AttributeError, TypeError, ValueError, ZeroDivisionError):
        return 0.0


def longest_first(jobs: list, indices: list[int] | None = None) -> list[int]:
    """``indices`` (default all) of ``jobs`` reordered: estimated longest first, ties in job order."""
    indices = list(range(len(jobs))) if indices is None else list(indices)
    cost = {i: estimated_cost(jobs[i]) for i in indices}
    return sorted(indices, key=lambda i: (-cost[i], i))
