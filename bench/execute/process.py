"""The local process executor: ``--workers N`` on one machine (and ``--workers 1``: one isolated child).

Each worker is a process of its own, started with the ``forkserver`` method
where the platform has it (else ``spawn``): never plain ``fork``, which would
copy a parent that may hold threads (a Dask client, matplotlib, MuJoCo
callbacks) into every worker. The fork server imports the bench once, so a
worker starts in tens of milliseconds. Workers live until ``close()`` and are
reused by every ``map`` (``bench limit`` runs one batch per bisection round).

The parent talks to each worker over a pipe of its own and hands it one job at a
time, so it always knows which job a worker holds and since when:

- a worker that dies (a segmentation fault in a native controller,
  ``os._exit``, the kernel's out-of-memory killer) takes only its own job with
  it: that job becomes ``on_error(job, reason)`` with the signal or exit code,
  a fresh worker takes its place and the rest of the run goes on;
- a job still running ``grace`` seconds past its wall-clock limit (the
  episode's ``limits.episode_timeout_s``; the in-process watchdog should have
  ended it by then, unless the controller is stuck in native code or switched
  the watchdog off) gets its worker killed, together with the process groups
  that worker started (external controller programs), and becomes
  ``on_error(job, reason, status="timeout")``; a fresh worker takes its place.

Workers ignore ``SIGINT``: a Ctrl-C reaches the whole process group, and the
parent decides what stops (it kills its workers and lets the interrupt through).
"""

from __future__ import annotations

import collections
import multiprocessing as mp
import multiprocessing.connection as mpc
import os
import signal
import time
from multiprocessing.reduction import ForkingPickler
from typing import Callable, Iterator

from bench.execute.executors import ExecutorError, OnError, describe_exception

#: Modules the fork server imports once, so that workers start with them loaded.
PRELOAD = ("bench.execute.job",)
#: Seconds past a job's wall-clock limit before the parent kills its worker (covers building the world before
#: the episode's clock starts, and scoring and sending the result after it stops).
KILL_GRACE_S = 5.0
#: Wait for a worker to start and unpack its job (the fork server may be starting too), s, before the job's own
#: limit applies.
START_GRACE_S = 120.0
#: Wait for a killed or retired worker to go, s.
JOIN_TIMEOUT_S = 5.0


def job_wall_limit(job) -> float | None:
    """A job's wall-clock limit, s: its ``limits.episode_timeout_s`` when positive, else None (no limit)."""
    limit = getattr(getattr(job, "limits", None), "episode_timeout_s", None)
    try:
        limit = float(limit)
    except (TypeError, ValueError):
        return None
    return limit if limit > 0 else None


def _worker_main(conn) -> None:
    """A worker's loop: receive ``(fn, job)``, answer ``("ok", outcome)`` or ``("raised", text)``; None ends it."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    while True:
        try:
            msg = conn.recv()
        except (EOFError, OSError):
            return
        except BaseException as exc:  # noqa: BLE001 - unpickling the job ran code that raised
            conn.send(("raised", f"the job could not be received: {describe_exception(exc)}"))
            continue
        if msg is None:
            return
        fn, job = msg
        conn.send(("started",))   # the job's wall-clock limit runs from here, not from a slow worker start
        try:
            reply = ("ok", fn(job))
        except BaseException as exc:  # noqa: BLE001 - SystemExit and the like end the job, not the worker
            reply = ("raised", f"the episode raised {describe_exception(exc)}")
        del msg, job
        try:
            conn.send(reply)
        except (EOFError, OSError):
            return
        except BaseException as exc:  # noqa: BLE001 - the outcome cannot be pickled
            conn.send(("raised", f"the episode's outcome could not be sent back: {describe_exception(exc)}"))


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


def _proc_table() -> dict[int, tuple[int, int]]:
    """pid -> (parent pid, process group) of every process visible in /proc (empty where there is none)."""
    table = {}
    try:
        names = os.listdir("/proc")
    except OSError:
        return table
    for name in names:
        if not name.isdigit():
            continue
        try:
            with open(f"/proc/{name}/stat", "rb") as f:
                stat = f.read()
        except OSError:
            continue
        fields = stat[stat.rfind(b")") + 2:].split()   # the command name may hold spaces and parentheses
        try:
            table[int(name)] = (int(fields[1]), int(fields[2]))
        except (IndexError, ValueError):
            continue
    return table


def kill_tree(pid: int) -> None:
    """SIGKILL process ``pid``, every process it started, and the process groups those lead.

    An external controller program runs in a process group of its own (so that its whole group
    can be ended); when its worker is killed, it would otherwise be left running. The worker is
    stopped first so that it starts nothing new while the tree is read (Linux ``/proc``; elsewhere
    only ``pid`` itself is killed).
    """
    try:
        os.kill(pid, signal.SIGSTOP)
    except OSError:
        pass
    table = _proc_table()
    children = collections.defaultdict(list)
    for p, (ppid, _) in table.items():
        children[ppid].append(p)
    tree, todo = [], [pid]
    while todo:
        p = todo.pop()
        for c in children.get(p, ()):
            tree.append(c)
            todo.append(c)
    own_group = os.getpgrp()
    groups = {table[p][1] for p in tree if table[p][1] == p and p != own_group}
    for p in [pid, *tree]:
        try:
            os.kill(p, signal.SIGKILL)
        except OSError:
            pass
    for g in groups:
        try:
            os.killpg(g, signal.SIGKILL)
        except OSError:
            pass


class _Worker:
    """One worker process, its end of the pipe, and the job it holds."""

    def __init__(self, ctx) -> None:
        self.conn, child = ctx.Pipe(duplex=True)
        self.process = ctx.Process(target=_worker_main, args=(child,), daemon=True, name="bench-worker")
        self.process.start()
        child.close()
        self.index: int | None = None    # job held (index into the current map's jobs)
        self.kill_at = float("inf")      # time.monotonic() past which the worker is killed
        self.limit_s: float | None = None
        self.started = False             # the worker said it has the job and runs it
        self.tasks = 0

    def kill(self) -> None:
        if self.process.is_alive():
            kill_tree(self.process.pid)
        self.process.join(JOIN_TIMEOUT_S)
        self.conn.close()

    def retire(self) -> None:
        try:
            self.conn.send(None)
        except (OSError, ValueError):
            pass
        self.process.join(JOIN_TIMEOUT_S)
        if self.process.is_alive():
            self.kill()
        else:
            self.conn.close()


class ProcessExecutor:
    """Runs jobs in ``workers`` local processes, one job per process at a time (see the module docstring).

    ``kill_grace_s``: seconds past a job's wall-clock limit before its worker is killed.
    ``deadline_of(job)``: a job's wall-clock limit in seconds, or None for none (default
    :func:`job_wall_limit`).
    """

    name = "process"

    def __init__(self, workers: int, *, method: str | None = None, max_tasks_per_child: int | None = None,
                 preload: tuple[str, ...] = PRELOAD, kill_grace_s: float = KILL_GRACE_S,
                 deadline_of: Callable[[object], float | None] = job_wall_limit):
        self.workers = max(1, int(workers))
        methods = mp.get_all_start_methods()
        self.method = method or ("forkserver" if "forkserver" in methods else "spawn")
        if self.method not in methods:
            raise ExecutorError(f"process start method {self.method!r} is not available here ({', '.join(methods)})")
        self.ctx = mp.get_context(self.method)
        if self.method == "forkserver" and preload:
            self.ctx.set_forkserver_preload(list(preload))
        self.max_tasks_per_child = max_tasks_per_child
        self.kill_grace_s = float(kill_grace_s)
        self.deadline_of = deadline_of
        self._idle: list[_Worker] = []
        self._busy: list[_Worker] = []
        self._active = 0      # map() generators not yet finished
        self.pool_breaks = 0  # for tests and benchmarks: workers that died or were killed
        self.deadline_kills = 0

    # ------------------------------------------------------------------ workers

    def _take_worker(self) -> _Worker:
        while self._idle:
            w = self._idle.pop()
            if w.process.is_alive():
                return w
            w.conn.close()
        try:
            return _Worker(self.ctx)
        except (OSError, ValueError) as exc:
            raise ExecutorError(f"cannot start a worker process: {exc}") from None

    def _release(self, w: _Worker) -> None:
        w.index, w.kill_at, w.limit_s = None, float("inf"), None
        self._busy.remove(w)
        w.tasks += 1
        if self.max_tasks_per_child is not None and w.tasks >= self.max_tasks_per_child:
            w.retire()
        else:
            self._idle.append(w)

    def _drop(self, w: _Worker, kill: bool) -> None:
        self._busy.remove(w)
        self.pool_breaks += 1
        if kill:
            w.kill()
        else:
            w.process.join(JOIN_TIMEOUT_S)
            w.conn.close()

    # ------------------------------------------------------------------ map

    def map(self, fn: Callable, jobs: list, on_error: OnError | None = None) -> Iterator[tuple[int, object]]:
        self._active += 1
        mine: list[_Worker] = []   # this map's busy workers (another map may run on the same executor)
        try:
            yield from self._map(fn, jobs, on_error, mine)
        except BaseException:
            # the consumer stopped early (GeneratorExit), or Ctrl-C / an error arrived while waiting:
            # the running episodes are not wanted
            for w in mine:
                self._busy.remove(w)
                w.kill()
            raise
        finally:
            self._active -= 1

    def run_one(self, fn: Callable, job, on_error: OnError | None = None):
        """``fn(job)`` in a worker process: its outcome, or ``on_error``'s for a death, a timeout or a raise."""
        for _, out in self.map(fn, [job], on_error):
            return out
        raise RuntimeError("no outcome")  # pragma: no cover - map yields once per job

    def _map(self, fn: Callable, jobs: list, on_error: OnError | None,
             mine: list[_Worker]) -> Iterator[tuple[int, object]]:
        todo = collections.deque(range(len(jobs)))
        resent: set[int] = set()   # jobs whose worker died before it said it had started them

        def fail(i: int, reason: str, status: str = "error"):
            if on_error is None:
                raise (TimeoutError if status == "timeout" else RuntimeError)(reason)
            return on_error(jobs[i], reason, status=status) if status != "error" else on_error(jobs[i], reason)

        while todo or mine:
            while todo and len(mine) < self.workers:
                i = todo.popleft()
                try:
                    data = ForkingPickler.dumps((fn, jobs[i]))
                except Exception as exc:  # noqa: BLE001 - e.g. a lambda or an open file in the job
                    yield i, fail(i, f"the episode could not be run in a worker process: {describe_exception(exc)}")
                    continue
                w = self._take_worker()
                try:
                    w.conn.send_bytes(data)
                except OSError:   # the idle worker had died: the job never reached it
                    w.kill()
                    todo.appendleft(i)
                    continue
                del data
                limit = self.deadline_of(jobs[i])
                w.index, w.limit_s, w.started = i, limit, False
                w.kill_at = (time.monotonic() + START_GRACE_S + limit + self.kill_grace_s if limit is not None
                             else float("inf"))
                self._busy.append(w)
                mine.append(w)
            if not mine:
                continue
            next_kill = min(w.kill_at for w in mine)
            timeout = None if next_kill == float("inf") else max(0.0, next_kill - time.monotonic())
            ready = set(mpc.wait([w.conn for w in mine] + [w.process.sentinel for w in mine], timeout))
            now = time.monotonic()
            for w in list(mine):
                i = w.index
                if w.conn not in ready and w.process.sentinel not in ready:
                    if now >= w.kill_at:
                        mine.remove(w)
                        self.deadline_kills += 1
                        self._drop(w, kill=True)
                        yield i, fail(i, f"the episode ran past its wall-clock limit of {w.limit_s:g} s by more "
                                         f"than {self.kill_grace_s:g} s without returning, so its worker process "
                                         f"was killed (a controller stuck in native code, or one that switched off "
                                         f"the watchdog)", "timeout")
                    continue
                msg = None
                try:
                    if w.conn.poll():
                        msg = w.conn.recv()   # a whole message: the worker is writing it
                except (EOFError, OSError):
                    msg = None
                if msg is not None and msg[0] == "started":
                    w.started = True
                    if w.limit_s is not None:
                        w.kill_at = now + w.limit_s + self.kill_grace_s
                    continue
                mine.remove(w)
                if msg is None:   # the pipe closed or the process ended without an answer
                    w.process.join(JOIN_TIMEOUT_S)
                    code = w.process.exitcode
                    self._drop(w, kill=code is None)
                    if not w.started and i not in resent:   # it died before taking the job (e.g. while idle)
                        resent.add(i)
                        todo.appendleft(i)
                        continue
                    yield i, fail(i, death_reason(code))
                elif msg[0] == "ok":
                    self._release(w)
                    yield i, msg[1]
                else:
                    self._release(w)
                    yield i, fail(i, msg[1])

    def close(self) -> None:
        """Stop the workers; if a ``map`` is still unfinished, kill its workers at once."""
        busy, self._busy = self._busy, []
        for w in busy:
            w.kill()
        idle, self._idle = self._idle, []
        for w in idle:
            w.retire()

    def __enter__(self):
        return self

    def __exit__(self, *exc) -> None:
        self.close()
