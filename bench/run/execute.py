"""Execute a plan on an executor, hand every outcome to the sinks, and account for every episode.

Whatever executor runs the episodes (serial, process pool, Dask), each outcome
is stamped here with what the parent knows (trial membership, the verdict
fingerprint, a result uid), normalised through the run record, and given to
the sinks in completion order. An episode for which the executor yielded
nothing still gets a result: ``error``, "episode produced no result", so no
planned episode is ever silently missing from a run.
"""

from __future__ import annotations

import uuid

from bench.run.errors import InvalidInput

NO_RESULT = "episode produced no result"


def open_executor(workers: int | None = None, cluster: str | None = None, controller=None, **options):
    """The executor for ``--workers`` / ``--cluster``; raises :class:`InvalidInput` with the reason.

    A controller given as a Python object (the fixture's ``bench_run(path, MyController())``) cannot be
    sent to another process: it runs serially here.
    """
    from bench.execute.executors import ExecutorError, SerialExecutor, make_executor

    if controller is not None and not isinstance(controller, str):
        return SerialExecutor()
    try:
        return make_executor(workers, cluster, **options)
    except ExecutorError as exc:
        raise InvalidInput(str(exc)) from None


def _stamp(episode, outcome) -> None:
    """The parent's part of a result: trial membership, fingerprint, uid; then checked as a record."""
    from bench.report.record import RecordError, RunRecord

    r = outcome.result
    if episode.trial_of is not None:
        r["trial_of"] = episode.trial_of
    if episode.fingerprint is not None:
        r["fingerprint"] = episode.fingerprint.digest
        r["fingerprint_parts"] = dict(episode.fingerprint.parts)
    if not r.get("result_uid"):
        r["result_uid"] = uuid.uuid4().hex
    try:
        outcome.result = RunRecord.from_json(r).to_json()
    except RecordError as exc:
        raise _Malformed(str(exc)) from None


class _Malformed(Exception):
    pass


def _error(plan_job, episode, reason: str):
    from bench.execute.outcomes import error_outcome

    outcome = error_outcome(plan_job, reason)
    _stamp(episode, outcome)
    return outcome


def execute(plan, todo: list[int], executor, sinks: list) -> dict[int, dict]:
    """Run the episodes ``todo`` of ``plan``; return index -> result.json mapping for each of them."""
    from bench.execute.job import run_job
    from bench.execute.outcomes import error_outcome
    from bench.execute.schedule import longest_first

    jobs = plan.jobs()
    # submission order only (longest first keeps workers busy to the end); results go back by index
    order = longest_first(jobs, todo) if getattr(executor, "workers", 1) > 1 else list(todo)
    got: dict[int, dict] = {}
    for j, outcome in executor.map(run_job, [jobs[i] for i in order], on_error=error_outcome):
        i = order[j]
        if i in got:
            continue            # an executor that retried a lost job: the first result stands
        ep = plan.episodes[i]
        try:
            _stamp(ep, outcome)
        except _Malformed as exc:
            outcome = _error(jobs[i], ep, f"the episode gave a malformed result: {exc}")
        _deliver(sinks, ep, outcome)
        got[i] = outcome.result
    for i in todo:
        if i not in got:
            outcome = _error(jobs[i], plan.episodes[i], NO_RESULT)
            _deliver(sinks, plan.episodes[i], outcome)
            got[i] = outcome.result
    return got


def _deliver(sinks, episode, outcome) -> None:
    for sink in sinks:
        sink.on_result(episode, outcome)


def reuse(sinks, plan, results: dict[int, dict]) -> None:
    """Tell the sinks about results reused by ``--resume`` (history records them too, once)."""
    for i, result in sorted(results.items()):
        for sink in sinks:
            on_reused = getattr(sink, "on_reused", None)
            if on_reused is not None:
                on_reused(plan.episodes[i], result)


def close_sinks(sinks) -> None:
    for sink in sinks:
        close = getattr(sink, "close", None)
        if close is not None:
            close()
