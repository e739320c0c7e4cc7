"""What must be identical whichever executor ran an episode, as a comparable value.

Every metric and every trace array is a pure function of (scenario,
controller, seed) except the wall-clock measurements: the controller's compute
time per tick (``controller_ms`` in the trace, ``controller_ms_*`` and
controller statistics such as ``controller.qp_ms_mean`` in the metrics) and the
episode's wall time. Those are left out; everything else is compared bit for
bit (float64 values and raw array bytes, not rounded).
"""

from __future__ import annotations

import hashlib

import numpy as np

#: Trace arrays that hold wall-clock measurements.
TIMING_TRACE_KEYS = frozenset({"controller_ms"})
from bench.scoring.metrics import is_timing_metric  # noqa: F401 - re-exported


def result_metrics(result: dict) -> dict[str, float]:
    """The metrics of a result that must not depend on the executor."""
    from bench.report.record import as_record

    return {k: v for k, v in as_record(result).metrics.items() if not is_timing_metric(k)}


def trace_digest(trace) -> str:
    """sha256 over every non-timing trace array (name, dtype, shape, bytes) and the meta values."""
    if trace is None:
        return ""
    h = hashlib.sha256()
    for key in sorted(trace.arrays):
        if key in TIMING_TRACE_KEYS:
            continue
        a = np.ascontiguousarray(trace.arrays[key])
        h.update(f"{key}|{a.dtype.str}|{a.shape}|".encode())
        h.update(a.tobytes())
    for key in sorted(trace.meta):
        h.update(f"meta|{key}|{trace.meta[key]!r}|".encode())
    return h.hexdigest()


def outcome_fingerprint(outcome) -> dict:
    """Status, reason, criteria values, non-timing metrics and the trace digest of one outcome."""
    from bench.report.record import as_record

    r = as_record(outcome.result)
    criteria = [(c.name, c.value, c.limit, c.passed, c.first_violation_s)
                for c in r.criteria if not is_timing_metric(c.name)]
    return {
        "scenario": r.scenario,
        "status": r.status,
        "reason": r.reason,
        "sim_time_s": r.sim_time_s,
        "criteria": criteria,
        "metrics": result_metrics(r),
        "trace": trace_digest(outcome.trace),
    }
