"""The Dask executor: ``--cluster local`` or ``--cluster tcp://HOST:PORT``.

``local`` starts a ``distributed.LocalCluster`` of single-threaded worker
processes on this machine (one per core unless ``--workers`` says otherwise);
an address connects to a scheduler that already runs, so that a team's
cluster, or a batch system running Dask workers, takes the load. Workers need
the bench (and the controller's package) installed in the same versions.

Jobs are submitted as the cluster has threads free (never more in flight than
its total thread count), so that a worker holds one episode at a time: when a
worker dies, only the episode it was running is suspected. The scheduler
reports the death as ``KilledWorker`` (locally it is told to give up at the
first death, ``allowed-failures: 0``); the episode is then tried once more,
and a second death makes it an ``error`` with the reason, while the rest of
the run goes on.

An episode still running ``kill_grace_s`` past its wall-clock limit (a
controller stuck in native code: the in-process watchdog does not run on a Dask
worker's thread) gets its worker restarted through its nanny and becomes a
``timeout``; the clock starts when the episode is submitted, which is when it
starts, since no more are in flight than the cluster has threads.
"""

from __future__ import annotations

import itertools
import logging
import time
from collections import deque
from typing import Callable, Iterator

from bench.execute.executors import ExecutorError, OnError, default_workers, describe_exception

#: Tries of one episode whose worker died (the first death may have been a neighbour's fault).
MAX_TRIES = 2
CONNECT_TIMEOUT_S = 15
#: With no worker connected for this long, the episodes not finished become errors: a scheduler
#: holds tasks for workers that may come back, so without this the run would wait forever.
NO_WORKER_TIMEOUT_S = 60.0
#: How often a wait for results looks whether any worker is left.
WORKER_POLL_S = 1.0


def _import_distributed():
    try:
        import dask  # noqa: F401
        import distributed
    except ImportError:
        raise ExecutorError("--cluster needs Dask: pip install 'quadruped-bench[dask]' "
                            "(installs dask and distributed)") from None
    return distributed


class DaskExecutor:
    """Runs jobs on a Dask distributed cluster."""

    name = "dask"

    def __init__(self, cluster: str = "local", workers: int | None = None, *, kill_grace_s: float | None = None,
                 deadline_of=None):
        from bench.execute.process import KILL_GRACE_S, job_wall_limit

        distributed = _import_distributed()
        import dask

        self.kill_grace_s = KILL_GRACE_S if kill_grace_s is None else float(kill_grace_s)
        self.deadline_of = deadline_of or job_wall_limit
        self.deadline_kills = 0
        self.address = cluster
        self.cluster = None
        self._keys = itertools.count()
        self.worker_deaths = 0
        if cluster == "local":
            n = default_workers() if workers is None else int(workers)
            # allowed-failures 0: a death is reported at once (this class retries it itself);
            # worker-saturation 1.0: a worker is handed one queued episode per thread, no more.
            with dask.config.set({"distributed.scheduler.allowed-failures": 0,
                                  "distributed.scheduler.worker-saturation": 1.0}):
                try:
                    self.cluster = distributed.LocalCluster(
                        n_workers=n, threads_per_worker=1, processes=True, dashboard_address=None,
                        silence_logs=logging.CRITICAL, preload=["bench.execute.job"])
                    self.client = distributed.Client(self.cluster, set_as_default=False)
                except Exception as exc:  # noqa: BLE001
                    self.close()
                    raise ExecutorError(f"cannot start a local Dask cluster of {n} workers: "
                                        f"{describe_exception(exc)}") from None
        else:
            if "://" not in cluster:
                raise ExecutorError(f"--cluster {cluster!r}: expected 'local' or a scheduler address such as "
                                    f"tcp://10.0.0.5:8786")
            try:
                self.client = distributed.Client(cluster, timeout=CONNECT_TIMEOUT_S, set_as_default=False)
            except Exception as exc:  # noqa: BLE001 - OSError, TimeoutError, ValueError for a bad address
                raise ExecutorError(f"cannot reach the Dask scheduler at {cluster}: {describe_exception(exc)}") \
                    from None
            try:
                self.check_workers()
            except ExecutorError:
                self.close()
                raise
        self.workers = self.threads()

    def check_workers(self) -> None:
        """Every worker must run the same bench source, MuJoCo, NumPy and Python as this machine."""
        from bench.execute.executors import code_fingerprint

        here = code_fingerprint()
        try:
            theirs = self.client.run(code_fingerprint)
        except Exception as exc:  # noqa: BLE001 - e.g. bench not installed on the workers
            raise ExecutorError(f"the workers of {self.address} cannot run the bench: {describe_exception(exc)}; "
                                f"install the same quadruped-bench (and controller package) on every worker") from None
        if not theirs:
            raise ExecutorError(f"the Dask scheduler at {self.address} has no workers")
        for worker, fp in sorted(theirs.items()):
            diff = [f"{k} {fp.get(k)} there, {v} here" for k, v in here.items() if fp.get(k) != v]
            if diff:
                raise ExecutorError(f"worker {worker} of {self.address} would not give the same results: "
                                    f"{'; '.join(diff)}. Install the same versions on every worker (and restart "
                                    f"the workers after changing the code)")

    def threads(self) -> int:
        """Total worker threads in the cluster now (at least 1)."""
        try:
            return max(1, sum(self.client.nthreads().values()))
        except Exception:  # noqa: BLE001
            return 1

    def map(self, fn: Callable, jobs: list, on_error: OnError | None = None) -> Iterator[tuple[int, object]]:
        from distributed import as_completed
        from distributed.scheduler import KilledWorker

        todo = deque(range(len(jobs)))
        tries = [0] * len(jobs)
        ac = as_completed(raise_errors=False, loop=self.client.loop)
        index: dict[str, int] = {}
        kill_at: dict[str, tuple[float, float, object]] = {}   # key -> (time.monotonic() deadline, limit s, future)
        abandoned: set[str] = set()                    # keys given up as timeouts, still in ``ac``

        def submit_more() -> None:
            limit = self.threads()
            while todo and ac.count() - len(abandoned) < limit:
                i = todo.popleft()
                tries[i] += 1
                fut = self.client.submit(fn, jobs[i], key=f"bench-episode-{next(self._keys)}", pure=False)
                index[fut.key] = i
                wall = self.deadline_of(jobs[i])
                if wall is not None:
                    kill_at[fut.key] = (time.monotonic() + wall + self.kill_grace_s, wall, fut)
                ac.add(fut)

        submit_more()
        try:
            while ac.count() - len(abandoned) or todo:
                if not ac.count() - len(abandoned):
                    submit_more()
                    continue
                waited = self._wait_ready(ac, kill_at, abandoned)
                if waited is None:
                    reason = (f"no Dask worker was left on {self.address} for {NO_WORKER_TIMEOUT_S:g} s "
                              f"(the last one was lost); the episode did not finish")
                    if on_error is None:
                        raise ExecutorError(reason)
                    for fut in list(ac.futures):
                        fut.cancel()
                    for i in [index.pop(k) for k in list(index)] + list(todo):
                        yield i, on_error(jobs[i], reason)
                    return
                if waited != "ready":   # an episode past its deadline; its worker was restarted
                    key, wall = waited
                    i = index.pop(key)
                    reason = (f"the episode ran past its wall-clock limit of {wall:g} s by more than "
                              f"{self.kill_grace_s:g} s without returning, so its Dask worker was restarted "
                              f"(a controller stuck in native code)")
                    if on_error is None:
                        raise TimeoutError(reason)
                    submit_more()
                    yield i, on_error(jobs[i], reason, status="timeout")
                    continue
                fut = next(ac)
                kill_at.pop(fut.key, None)
                if fut.key in abandoned:
                    abandoned.discard(fut.key)
                    fut.release()
                    submit_more()
                    continue
                i = index.pop(fut.key)
                try:
                    out = fut.result()
                except KilledWorker as exc:
                    self.worker_deaths += 1
                    if tries[i] < MAX_TRIES:
                        todo.appendleft(i)
                        submit_more()
                        continue
                    reason = (f"the worker process running this episode died ({tries[i]} times, last on "
                              f"{getattr(exc.last_worker, 'address', '?')})")
                    if on_error is None:
                        raise
                    out = on_error(jobs[i], reason)
                except Exception as exc:  # noqa: BLE001
                    if on_error is None:
                        raise
                    out = on_error(jobs[i], f"the episode failed on the Dask cluster: {describe_exception(exc)}")
                finally:
                    fut.release()
                submit_more()
                yield i, out
        finally:
            for fut in list(ac.futures):
                fut.cancel()

    def _overdue(self, kill_at: dict, abandoned: set) -> tuple[str, float] | None:
        """The key of an episode past its deadline, after restarting the worker that runs it; else None."""
        now = time.monotonic()
        for key, (deadline, wall, fut) in list(kill_at.items()):
            if now < deadline:
                continue
            del kill_at[key]
            abandoned.add(key)
            self.deadline_kills += 1
            try:
                holders = [w for w, keys in self.client.processing().items() if key in keys]
                self.client.cancel([fut], force=True)
                if holders:
                    self.client.restart_workers(holders, raise_for_error=False)
            except Exception:  # noqa: BLE001 - the timeout stands whether or not the restart worked
                pass
            return key, wall
        return None

    def _wait_ready(self, ac, kill_at: dict, abandoned: set):
        """Wait until a result is ready: ``"ready"``; or an episode is past its deadline (its worker is then
        restarted): ``(key, limit_s)``; or no worker has been connected for NO_WORKER_TIMEOUT_S: None."""
        alone_since = None
        next_look = time.monotonic() + WORKER_POLL_S
        while not ac.has_ready():
            if kill_at:
                overdue = self._overdue(kill_at, abandoned)
                if overdue is not None:
                    return overdue
            time.sleep(0.01)
            now = time.monotonic()
            if now < next_look:
                continue
            next_look = now + WORKER_POLL_S
            try:
                workers = len(self.client.nthreads())
            except Exception:  # noqa: BLE001 - the scheduler itself is gone: no worker either
                workers = 0
            if workers:
                alone_since = None
            elif alone_since is None:
                alone_since = now
            elif now - alone_since >= NO_WORKER_TIMEOUT_S:
                return None
        return "ready"

    def close(self) -> None:
        client, self.client = getattr(self, "client", None), None
        if client is not None:
            try:
                client.close()
            except Exception:  # noqa: BLE001
                pass
        cluster, self.cluster = self.cluster, None
        if cluster is not None:
            try:
                cluster.close()
            except Exception:  # noqa: BLE001
                pass

    def __enter__(self):
        return self

    def __exit__(self, *exc) -> None:
        self.close()
