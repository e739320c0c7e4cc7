"""The local process executor: ``--workers N`` on one machine.

A ``concurrent.futures.ProcessPoolExecutor`` started with the ``forkserver``
method where the platform has it (else ``spawn``): never plain ``fork``, which
would copy a parent that may hold threads (a Dask client, matplotlib, MuJoCo
callbacks) into every worker. The fork server imports the bench once, so a
worker starts in tens of milliseconds. The pool lives until ``close()`` and is
reused by every ``map`` (``bench limit`` runs one batch per bisection round).

A worker that dies (a segmentation fault in a native controller, ``os._exit``,
the kernel's out-of-memory killer) breaks the whole pool: every job not yet
finished gets ``BrokenProcessPool``, the guilty one and its innocent
neighbours alike. Each worker therefore reports, through a pipe, which job it
has just started. After a break, the jobs that had not started go to a fresh
pool; those that had started (at most one per worker) are each run again alone
in a process of their own, whose exit code tells whether that job is the one
that kills its process. The guilty job becomes ``on_error(job, reason)`` with
the signal or exit code in the reason; the others finish normally.
"""

from __future__ import annotations

import concurrent.futures as cf
import itertools
import multiprocessing as mp
import multiprocessing.connection as mpc
import signal
from concurrent.futures.process import BrokenProcessPool
from typing import Callable, Iterator

from bench.execute.executors import ExecutorError, OnError, describe_exception

#: Modules the fork server imports once, so that workers start with them loaded.
PRELOAD = ("bench.execute.job",)
#: A job lost in this many pool breaks without having been seen to start is run alone anyway.
MAX_LOST_UNSTARTED = 2

_started_queue = None  # set in each worker by _init_worker


def _init_worker(queue) -> None:
    global _started_queue
    _started_queue = queue
    # Ctrl-C goes to the whole process group; the parent decides what stops, workers must not
    # print a traceback each.
    signal.signal(signal.SIGINT, signal.SIG_IGN)


def _run_tagged(fn: Callable, token: int, index: int, job):
    # SimpleQueue writes straight into the pipe (no feeder thread), so the message is out
    # before the job can crash the process.
    _started_queue.put((token, index))
    return fn(job)


def _run_alone(conn, fn: Callable, job) -> None:
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    try:
        out = fn(job)
    except Exception as exc:  # noqa: BLE001
        conn.send(("raised", describe_exception(exc)))
    else:
        conn.send(("ok", out))
    conn.close()


def death_reason(exitcode: int | None) -> str:
    """A sentence for a worker process that ended without returning its episode."""
    if exitcode is None:
        return "the worker process running this episode stopped without an exit code"
    if exitcode < 0:
        try:
            name = signal.Signals(-exitcode).name
        except ValueError:
            name = f"signal {-exitcode}"
        return f"the worker process running this episode died: killed by {name} (exit code {exitcode})"
    return f"the worker process running this episode exited with code {exitcode} before returning a result"


class ProcessExecutor:
    """Runs jobs in a pool of ``workers`` local processes."""

    name = "process"

    def __init__(self, workers: int, *, method: str | None = None, max_tasks_per_child: int | None = None,
                 preload: tuple[str, ...] = PRELOAD):
        self.workers = max(1, int(workers))
        methods = mp.get_all_start_methods()
        self.method = method or ("forkserver" if "forkserver" in methods else "spawn")
        if self.method not in methods:
            raise ExecutorError(f"process start method {self.method!r} is not available here ({', '.join(methods)})")
        self.ctx = mp.get_context(self.method)
        if self.method == "forkserver" and preload:
            self.ctx.set_forkserver_preload(list(preload))
        self.max_tasks_per_child = max_tasks_per_child
        self._pool: cf.ProcessPoolExecutor | None = None
        self._queue = None
        self._tokens = itertools.count()
        self._active = 0      # map() generators not yet finished
        self.pool_breaks = 0  # for tests and benchmarks: how many times a worker died

    # ------------------------------------------------------------------ pool

    def _ensure_pool(self) -> cf.ProcessPoolExecutor:
        if self._pool is None:
            self._queue = self.ctx.SimpleQueue()
            kw = {}
            if self.max_tasks_per_child is not None:
                kw["max_tasks_per_child"] = self.max_tasks_per_child
            try:
                self._pool = cf.ProcessPoolExecutor(self.workers, mp_context=self.ctx, initializer=_init_worker,
                                                    initargs=(self._queue,), **kw)
            except (OSError, ValueError) as exc:
                raise ExecutorError(f"cannot start {self.workers} worker processes: {exc}") from None
        return self._pool

    def _discard_pool(self) -> None:
        pool, self._pool = self._pool, None
        if pool is not None:
            pool.shutdown(wait=True, cancel_futures=True)
        if self._queue is not None:
            self._queue.close()
            self._queue = None

    def _drain(self, started: set) -> None:
        q = self._queue
        while q is not None and not q.empty():
            started.add(q.get())

    # ------------------------------------------------------------------ map

    def map(self, fn: Callable, jobs: list, on_error: OnError | None = None) -> Iterator[tuple[int, object]]:
        self._active += 1
        try:
            yield from self._map(fn, jobs, on_error)
        except BaseException:
            # the consumer stopped early (GeneratorExit), or Ctrl-C / an error arrived while waiting:
            # the running episodes are not wanted
            self._terminate_pool()
            raise
        finally:
            self._active -= 1

    def _map(self, fn: Callable, jobs: list, on_error: OnError | None) -> Iterator[tuple[int, object]]:
        token = next(self._tokens)
        todo = list(range(len(jobs)))
        lost_unstarted: dict[int, int] = {}
        while todo:
            pool = self._ensure_pool()
            futures: dict[cf.Future, int] = {}
            lost: list[int] = []
            for n, i in enumerate(todo):
                try:
                    futures[pool.submit(_run_tagged, fn, token, i, jobs[i])] = i
                except BrokenProcessPool:
                    lost.extend(todo[n:])
                    break
            todo = []
            started: set = set()
            pending = set(futures)
            try:
                while pending:
                    done, pending = cf.wait(pending, timeout=0.5, return_when=cf.FIRST_COMPLETED)
                    self._drain(started)
                    for fut in done:
                        i = futures.pop(fut)   # drop the finished future: it holds the outcome (the trace)
                        try:
                            out = fut.result()
                        except BrokenProcessPool:
                            lost.append(i)
                            continue
                        except Exception as exc:  # noqa: BLE001 - e.g. the job could not be pickled
                            if on_error is None:
                                raise
                            out = on_error(jobs[i], f"the episode could not be run in a worker process: "
                                                    f"{describe_exception(exc)}")
                        yield i, out
            finally:
                for fut in pending:  # the consumer stopped early
                    fut.cancel()
            if not lost:
                continue
            self.pool_breaks += 1
            self._drain(started)
            self._discard_pool()
            suspects = []
            for i in sorted(lost):
                if (token, i) in started:
                    suspects.append(i)
                else:
                    lost_unstarted[i] = lost_unstarted.get(i, 0) + 1
                    (suspects if lost_unstarted[i] >= MAX_LOST_UNSTARTED else todo).append(i)
            yield from self._run_isolated(fn, jobs, suspects, on_error)

    def _run_isolated(self, fn: Callable, jobs: list, indices: list[int],
                      on_error: OnError | None) -> Iterator[tuple[int, object]]:
        """Run each job in a process of its own (``workers`` at a time); a death is that job's."""
        queue = list(indices)
        running: dict = {}  # sentinel/conn -> (index, process, conn)
        while queue or running:
            while queue and len(running) < self.workers:
                i = queue.pop(0)
                recv, send = self.ctx.Pipe(duplex=False)
                p = self.ctx.Process(target=_run_alone, args=(send, fn, jobs[i]), daemon=True)
                p.start()
                send.close()
                running[i] = (p, recv)
            ready = mpc.wait([c for _, c in running.values()] + [p.sentinel for p, _ in running.values()])
            for i, (p, conn) in list(running.items()):
                if conn not in ready and p.sentinel not in ready:
                    continue
                msg, closed = None, False
                try:
                    if conn.poll():
                        msg = conn.recv()
                except (EOFError, OSError):
                    closed = True  # the process is gone (or going) without a message
                if msg is None and not closed and p.is_alive():
                    continue  # woke for another process
                p.join()
                conn.close()
                del running[i]
                if msg is not None and msg[0] == "ok":
                    yield i, msg[1]
                    continue
                reason = (f"the episode raised {msg[1]}" if msg is not None else death_reason(p.exitcode))
                if on_error is None:
                    raise RuntimeError(reason)
                yield i, on_error(jobs[i], reason)

    def _terminate_pool(self) -> None:
        pool, self._pool = self._pool, None
        if pool is None:
            return
        for p in list((getattr(pool, "_processes", None) or {}).values()):  # no public way before 3.14
            try:
                p.terminate()
            except Exception:  # noqa: BLE001 - already gone
                pass
        pool.shutdown(wait=False, cancel_futures=True)
        if self._queue is not None:
            self._queue.close()
            self._queue = None

    def close(self) -> None:
        """Shut the pool down; if a ``map`` is still unfinished, stop its workers at once."""
        if self._active:
            self._terminate_pool()
        self._discard_pool()

    def __enter__(self):
        return self

    def __exit__(self, *exc) -> None:
        self.close()
