"""Outcomes made by the executor side, for episodes that returned none of their own."""

from __future__ import annotations

from bench.execute.job import Job, Outcome, _base_result


def error_outcome(job: Job, reason: str, status: str = "error") -> Outcome:
    """An ``error`` outcome for ``job`` (its worker died, it could not be sent, it was lost).

    ``status="timeout"``: the executor killed it past its wall-clock limit.
    """
    sc = job.scenario
    seed = int(sc.seed if job.seed is None else job.seed)
    name = job.controller if isinstance(job.controller, str) else getattr(job.controller, "name", "custom")
    result = _base_result(sc, str(name), seed)
    result["reason"] = reason
    result["status"] = status
    return Outcome(result, None)
