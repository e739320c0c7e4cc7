"""Executors: one interface in front of serial, local-process and Dask execution.

An executor runs a function over many jobs and yields ``(index, outcome)`` as
each finishes (in completion order; the caller puts them back in job order).
Results never depend on which executor ran them: every job is a pure function
of (scenario, controller, seed), and no executor passes anything else along.

Each back end is a short module of its own with the same shape:

- :class:`bench.execute.process.ProcessExecutor`: local worker processes, one job each at a time
  (``--workers N``, and ``--workers 1``: a single isolated child, the default for one worker);
- :class:`bench.execute.dask_cluster.DaskExecutor`: a Dask distributed cluster;
- :class:`SerialExecutor` (here): one job after another in this process (``--in-process``, for
  debugging with breakpoints and profilers). Nothing stands between the run and the controller
  there: ``os._exit`` or a crash in native code ends the run, and a call stuck in native code is
  not interrupted.

``on_error(job, reason) -> outcome`` turns a job that produced no result
(its worker process died, it could not be sent to a worker, the function
raised) into an outcome of its own, so that the rest of the run goes on; a job
killed past its wall-clock limit is ``on_error(job, reason, status="timeout")``.
Without it, the failure is raised.
"""

from __future__ import annotations

import os
from typing import Callable, Iterator, Protocol

OnError = Callable[[object, str], object]


class Executor(Protocol):
    name: str
    workers: int

    def map(self, fn: Callable, jobs: list, on_error: OnError | None = None) -> Iterator[tuple[int, object]]: ...

    def close(self) -> None: ...


class ExecutorError(Exception):
    """The executor cannot be set up (no such cluster, Dask not installed): a message for the user."""


def default_workers() -> int:
    """The number of cores this process may run on."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except (AttributeError, OSError):
        return max(1, os.cpu_count() or 1)


def code_fingerprint() -> dict[str, str]:
    """Versions that decide an episode's numbers: bench (plus a hash of its source), MuJoCo, NumPy, Python.

    A remote worker whose fingerprint differs from this machine's would give
    different results for the same scenario.
    """
    import platform
    from pathlib import Path

    import mujoco
    import numpy

    import bench
    from bench.fileio import sha256_files

    root = Path(bench.__file__).resolve().parent
    source = sha256_files(root, root.rglob("*.py"))
    return {"bench": f"{bench.__version__} (source {source[:12]})", "mujoco": mujoco.__version__,
            "numpy": numpy.__version__, "python": platform.python_version()}


def describe_exception(exc: BaseException) -> str:
    text = str(exc).strip().splitlines()
    return f"{type(exc).__name__}: {text[0]}" if text else type(exc).__name__


class SerialExecutor:
    """Runs jobs one after another in this process (no isolation: a crash ends the run; the user's Ctrl-C too)."""

    name = "serial"
    workers = 1

    def map(self, fn: Callable, jobs: list, on_error: OnError | None = None) -> Iterator[tuple[int, object]]:
        for i, job in enumerate(jobs):
            try:
                out = fn(job)
            except KeyboardInterrupt:
                raise
            except BaseException as exc:  # noqa: BLE001 - one job's fault is that job's outcome, SystemExit too
                if on_error is None:
                    raise
                out = on_error(job, f"the episode raised {describe_exception(exc)}")
            yield i, out

    def close(self) -> None:
        pass

    def __enter__(self):
        return self

    def __exit__(self, *exc) -> None:
        self.close()


def make_executor(workers: int | None = None, cluster: str | None = None, *, in_process: bool = False) -> Executor:
    """The executor for ``--workers N`` / ``--cluster local|tcp://HOST:PORT`` / ``--in-process``.

    ``workers`` defaults to the core count; 1 means one worker process (a controller that
    exits, crashes or hangs in native code takes only its episode with it). ``in_process``
    runs every episode in this process, one after another, for debugging.
    With ``cluster``, ``workers`` is the number of local Dask workers
    (``local``) and is ignored for an existing scheduler's address.
    Raises :class:`ExecutorError` with a message for the user.
    """
    if workers is not None and int(workers) < 1:
        raise ExecutorError(f"--workers must be at least 1, got {workers}")
    if in_process:
        if cluster:
            raise ExecutorError("--in-process runs episodes in this process; it cannot be combined with --cluster")
        if workers is not None and int(workers) > 1:
            raise ExecutorError(f"--in-process runs one episode at a time; it cannot be combined with "
                                f"--workers {workers}")
        return SerialExecutor()
    if cluster:
        from bench.execute.dask_cluster import DaskExecutor

        return DaskExecutor(cluster, workers=workers)
    n = default_workers() if workers is None else int(workers)
    from bench.execute.process import ProcessExecutor

    return ProcessExecutor(n)
