"""Executors: one interface in front of serial, local-process and Dask execution.

An executor runs ``run_job`` over many jobs and yields ``(index, outcome)`` as
each finishes. Results never depend on which executor ran them: every job is
a pure function of (scenario, controller, seed).
"""

from __future__ import annotations

from typing import Callable, Iterable, Iterator, Protocol


class Executor(Protocol):
    name: str

    def map(self, fn: Callable, jobs: list) -> Iterator[tuple[int, object]]: ...

    def close(self) -> None: ...


class SerialExecutor:
    """Runs jobs one after another in this process."""

    name = "serial"

    def map(self, fn: Callable, jobs: list) -> Iterator[tuple[int, object]]:
        for i, job in enumerate(jobs):
            yield i, fn(job)

    def close(self) -> None:
        pass


def make_executor(workers: int | None = None, cluster: str | None = None) -> Executor:
    """The executor for ``--workers N`` / ``--cluster ADDR`` (serial until the others land)."""
    return SerialExecutor()
