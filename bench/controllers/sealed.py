"""Sealed mode: a Python controller run in a child process, spoken to over the QBX protocol.

``sealed:NAME`` (``NAME`` a registered name, an entry point or
``package.module:attribute``) makes a :class:`SealedController`. In ``reset``
it starts ``python -m bench.controllers.sealed_child NAME``; the child rebuilds
the nominal robot from the manifest file (a robot-only model, as an in-process
controller gets it), builds the real controller there and answers. The episode's
process keeps the world, the scenario and the scoring; the child never holds a
reference to any of them, so no Python trick inside the controller
(``sys._getframe``, ``gc.get_objects``, ``object.__setattr__``) can reach them.

The conversation is protocol QBX (:mod:`bench.controllers.external`), version 1
or 2 as the child answers (the bundled child answers 2), with one addition,
offered in the handshake: the header line ``frames f64le``. A program that
accepts it answers ``READY 2 frames=f64le ...`` (or ``READY 1 ...``) and from
then on every tick is a fixed-size binary frame of little-endian IEEE-754
doubles instead of a text line, so the numbers cross bit for bit without
formatting:

- bench -> program, one frame per tick: the numbers of an ``OBS`` line of the
  answered version, in the same order, the tick number first (version 1:
  ``k t vx vy yaw_rate quat(4) gyro(3) accel(3) joint_pos(J) joint_vel(J)
  foot_contact(F) base_pos(3) base_linvel(3)``, ``2 + 3 + 4 + 3 + 3 + 2J + F + 6``
  doubles; version 2: the gait hint after the contacts, then only the sensors
  the scenario gives, see :class:`~bench.controllers.external.ObservationLayout`);
- program -> bench: ``k tau(J)``;
- end of episode: a frame whose first double is ``-1`` (``BYE``); the program
  answers one text line ``STATS <json object name -> number>`` and exits.

A program that does not know the line ignores it, as protocol 1 requires, and
talks text; the child speaks both, so ``exec:python -m
bench.controllers.sealed_child NAME`` works as a plain external program too.

The child runs in its own process group (the whole group is killed when the
episode ends, fails or times out) and dies with the episode's process (Linux
parent-death signal, and end of file on its input). Its stderr goes to a
temporary file of which only the tail is read. A child that exits, or answers
out of step, ends the episode as ``error`` quoting its exit code and the end of
its stderr; one that does not answer within the per-tick limit ends it as
``timeout``.

This is a process boundary, not an operating-system sandbox: the child runs as
the same user, with the same files and network.
"""

from __future__ import annotations

import importlib
import importlib.machinery
import json
import os
import select
import signal
import subprocess
import sys
import tempfile
import time
import weakref

import numpy as np

from bench.controllers.external import handshake_header as _protocol_header
from bench.controllers.params import canonical
from bench.controllers.external import (
    PROTOCOL_VERSIONS, ExternalControllerError, ExternalControllerTimeout, ObservationLayout, answered_version,
)

PREFIX = "sealed:"
#: The binary framing this module offers and speaks (header line ``frames f64le``).
FRAMES = "f64le"
FRAME_DTYPE = np.dtype("<f8")
#: First double of the frame that ends the episode.
BYE_TICK = -1.0
CHILD_MODULE = "bench.controllers.sealed_child"
#: Environment variables the parent passes to the child.
ENV_SYS_PATH = "BENCH_SEALED_SYS_PATH"
ENV_PARENT_PID = "BENCH_SEALED_PARENT_PID"
#: How the child starts the last line it writes to stderr before it exits on a fault.
CHILD_SUMMARY = "sealed child: "
#: Wait for one answer frame, s (the runner's own per-tick limit defaults to the same).
DEFAULT_TICK_TIMEOUT_S = float(os.environ.get("BENCH_SEALED_TICK_TIMEOUT", "2.0"))
#: Longest text line (READY, STATS) accepted from the child, bytes.
MAX_LINE_BYTES = 1 << 20
#: Wait for the child to start, build its robot and controller, and answer READY, s. Importing the
#: bench and building a solver takes about a second; a loaded machine may take several.
DEFAULT_START_TIMEOUT_S = float(os.environ.get("BENCH_SEALED_START_TIMEOUT", "60.0"))
#: Wait for the child to answer BYE and exit before its group is killed, s.
EXIT_GRACE_S = 2.0
#: How much of the end of the child's stderr is read, and how many of its lines are quoted.
STDERR_TAIL_BYTES = 4096
STDERR_TAIL_LINES = 6


class SealedControllerError(ExternalControllerError):
    """The child process could not be started, exited, or broke the protocol."""


class SealedControllerTimeout(SealedControllerError, ExternalControllerTimeout):
    """The child process did not answer in time (a ``TimeoutError``: the episode ends as ``timeout``)."""


# -- frame layout (shared with the child) ---------------------------------------------------------
#: The Observation fields a frame carries (``privileged`` as its two arrays). A field added to the
#: Observation must be added here, to the frame and to the text protocol, or sealed runs lose it.
FRAME_FIELDS = ("t", "imu_quat", "imu_gyro", "imu_accel", "joint_pos", "joint_vel", "foot_contact",
                "privileged.base_pos", "privileged.base_linvel", "height_scan", "foot_force", "joint_torque",
                "gait_hint")


def handshake_header(robot, control_dt: float, *, frames: str | None = FRAMES) -> str:
    """The protocol's handshake for ``robot``, plus ``manifest_path`` and the ``frames`` offer (ignorable lines)."""
    extra = [f"manifest_path {robot.manifest.manifest_path}"] + ([f"frames {frames}"] if frames else [])
    return _protocol_header(robot, control_dt, extra)


# -- process handling -----------------------------------------------------------------------------
def _kill_group(proc: subprocess.Popen | None) -> None:
    """Kill the child's whole process group (it leads its own session), then reap the child."""
    if proc is None:
        return
    if proc.returncode is None or not hasattr(os, "waitid"):
        # Not reaped yet, so its pid (= the group id) cannot have been reused (without waitid a reaped
        # child's group is killed too: its members keep the id in use).
        try:
            os.killpg(proc.pid, signal.SIGKILL)
        except (ProcessLookupError, PermissionError):
            pass
        except OSError:
            try:
                proc.kill()
            except OSError:
                pass
    try:
        proc.wait(timeout=5)
    except (subprocess.TimeoutExpired, OSError):
        pass


def _wait_unreaped(proc: subprocess.Popen, timeout_s: float) -> bool:
    """True once the child has exited, without reaping it (its group can still be killed safely)."""
    deadline = time.monotonic() + timeout_s
    if not hasattr(os, "waitid"):   # no waitid (macOS): wait and reap; the group is then killed by its id
        try:
            proc.wait(timeout=timeout_s)
            return True
        except subprocess.TimeoutExpired:
            return False
    while True:
        try:
            info = os.waitid(os.P_PID, proc.pid, os.WEXITED | os.WNOHANG | os.WNOWAIT)
        except ChildProcessError:
            return True
        if info is not None:
            return True
        if time.monotonic() >= deadline:
            return False
        time.sleep(0.002)


def _exit_status(proc: subprocess.Popen, timeout_s: float) -> int | None:
    """The child's exit code (negative: the signal that killed it) once it has exited, without reaping it
    (so that what it started can still be killed with its group); None if it still runs."""
    if proc.returncode is not None:
        return proc.returncode
    if not _wait_unreaped(proc, timeout_s):
        return None
    if proc.returncode is not None:
        return proc.returncode
    try:
        info = os.waitid(os.P_PID, proc.pid, os.WEXITED | os.WNOHANG | os.WNOWAIT)
    except ChildProcessError:
        return proc.returncode
    if info is None:
        return None
    return info.si_status if info.si_code == os.CLD_EXITED else -info.si_status


class _At:
    """``at tick k (t=... s)``, formatted only when an error message is built."""

    __slots__ = ("k", "t")

    def __init__(self, k: int, t: float) -> None:
        self.k, self.t = k, t

    def __str__(self) -> str:
        return f"at tick {self.k} (t={self.t:.3f} s)"


class SealedController:
    """Runs the Python controller ``spec`` in a child process (see the module docstring)."""

    def __init__(self, spec: str, *, tick_timeout_s: float | None = None, start_timeout_s: float | None = None,
                 name: str | None = None, params: dict | None = None) -> None:
        self.spec = spec
        self.params = dict(params or {})   # --controller-param keywords, applied in the child
        self.name = name or PREFIX + spec
        self.tick_timeout_s = DEFAULT_TICK_TIMEOUT_S if tick_timeout_s is None else float(tick_timeout_s)
        self.start_timeout_s = DEFAULT_START_TIMEOUT_S if start_timeout_s is None else float(start_timeout_s)
        self.program_name: str | None = None
        self._proc: subprocess.Popen | None = None
        self._stderr = None
        self._finalizer = None
        self._inbuf = bytearray()
        self._stats: dict[str, float] = {}
        self._tick = 0

    @property
    def pid(self) -> int | None:
        """The child's process id while it runs (tests and diagnostics)."""
        return self._proc.pid if self._proc is not None else None

    # -- process -------------------------------------------------------------------------------
    def _start(self) -> None:
        self.close()
        self._stderr = tempfile.TemporaryFile()
        env = dict(os.environ)
        # The child resolves the name as this process would (tests' and notebooks' sys.path included).
        env[ENV_SYS_PATH] = json.dumps([str(p) for p in sys.path])
        env[ENV_PARENT_PID] = str(os.getpid())
        argv = [sys.executable, "-m", CHILD_MODULE, self.spec]
        try:
            self._proc = subprocess.Popen(argv, stdin=subprocess.PIPE, stdout=subprocess.PIPE, stderr=self._stderr,
                                          env=env, bufsize=0, close_fds=True, start_new_session=True)
        except OSError as exc:
            raise SealedControllerError(f"cannot start the sealed child for {self.spec!r}: "
                                        f"{exc.strerror or exc}") from None
        self._wfd = self._proc.stdin.fileno()
        self._rfd = self._proc.stdout.fileno()
        self._poll = select.poll()
        self._poll.register(self._rfd, select.POLLIN | select.POLLHUP | select.POLLERR)
        self._inbuf.clear()
        self._finalizer = weakref.finalize(self, _kill_group, self._proc)

    def _stderr_tail(self) -> str:
        """The child's own one-line summary when it wrote one (``sealed child: ...``), else the last lines."""
        f = self._stderr
        if f is None:
            return ""
        try:
            size = f.seek(0, os.SEEK_END)
            f.seek(max(0, size - STDERR_TAIL_BYTES))
            text = f.read(STDERR_TAIL_BYTES).decode("utf-8", "replace")
        except OSError:
            return ""
        lines = [ln.strip() for ln in text.splitlines() if ln.strip()]
        if size > STDERR_TAIL_BYTES and lines:
            lines = lines[1:]   # the first one is probably cut
        if lines and lines[-1].startswith(CHILD_SUMMARY):
            return ": " + lines[-1][len(CHILD_SUMMARY):]
        lines = lines[-STDERR_TAIL_LINES:]
        return ("; its stderr ends: " + " | ".join(lines)) if lines else ""

    def _died(self, when: str) -> SealedControllerError:
        code = _exit_status(self._proc, 2.0) if self._proc is not None else None
        how = (f"exited with code {code}" if code is not None and code >= 0 else
               f"was killed by signal {-code}" if code is not None else "closed its output")
        return SealedControllerError(f"sealed controller {self.spec!r}: child process {how} {when}"
                                     f"{self._stderr_tail()}")

    def _write(self, data, when: str) -> None:
        view = memoryview(data).cast("B")
        try:
            while view:
                n = os.write(self._wfd, view)
                view = view[n:]
        except OSError:   # BrokenPipeError: the child has gone
            raise self._died(when) from None

    def _fill(self, n: int, deadline: float, when: str, what: str) -> None:
        """Read until ``self._inbuf`` holds at least ``n`` bytes, or raise (exit, timeout)."""
        buf = self._inbuf
        while len(buf) < n:
            left = deadline - time.monotonic()
            ready = False
            if left > 0:
                ready = bool(self._poll.poll(left * 1000.0))
            if not ready:
                raise SealedControllerTimeout(f"sealed controller {self.spec!r} sent no {what} within "
                                              f"{deadline - self._wait_start:.3g} s {when}{self._stderr_tail()}")
            chunk = os.read(self._rfd, max(65536, n - len(buf)))
            if not chunk:
                raise self._died(when)
            buf += chunk

    def _read_line(self, timeout_s: float, when: str, what: str) -> bytes:
        self._wait_start = time.monotonic()
        deadline = self._wait_start + timeout_s
        while True:
            nl = self._inbuf.find(b"\n")
            if nl >= 0:
                line = bytes(self._inbuf[:nl])
                del self._inbuf[:nl + 1]
                if line.startswith(b"#"):
                    continue
                return line
            if len(self._inbuf) > MAX_LINE_BYTES:
                raise SealedControllerError(f"sealed controller {self.spec!r} sent over {MAX_LINE_BYTES} bytes "
                                            f"without a line end {when}")
            self._fill(len(self._inbuf) + 1, deadline, when, what)

    def _abort(self) -> None:
        _kill_group(self._proc)
        self.close()

    def close(self) -> None:
        """End the child: close its input, give it a moment, then kill its process group."""
        proc, self._proc = self._proc, None
        if proc is not None:
            try:
                proc.stdin.close()
            except OSError:
                pass
            _wait_unreaped(proc, EXIT_GRACE_S)
            _kill_group(proc)   # its group too: nothing it started outlives the episode
            try:
                proc.stdout.close()
            except OSError:
                pass
        if self._finalizer is not None:
            self._finalizer.detach()
            self._finalizer = None
        if self._stderr is not None:
            self._stderr.close()
            self._stderr = None

    # -- Controller protocol -------------------------------------------------------------------
    def reset(self, robot, control_dt: float, *, seed: int | None = None) -> None:
        J, F = len(robot.manifest.joints), len(robot.manifest.feet)
        self._stats = {}
        self._start()
        header = handshake_header(robot, control_dt)
        extra = ([f"seed {int(seed)}"] if seed is not None else []) + (
            [f"controller_params {canonical(self.params)}"] if self.params else [])
        if extra:   # lines the child reads and a protocol reader ignores, before the closing 'end'
            head, _, _ = header.rpartition("end\n")
            header = head + "".join(x + "\n" for x in extra) + "end\n"
        try:
            self._handshake(header)
        except BaseException:
            self._abort()
            raise
        self._tick = 0
        self._J = J
        self._layout = ObservationLayout(J, F, self.version, getattr(robot, "sensing", None))
        self._row = np.zeros(self._layout.size, dtype=FRAME_DTYPE)
        self._answer_bytes = (1 + J) * FRAME_DTYPE.itemsize
        self._tau = np.zeros(J)

    def _handshake(self, header: str) -> None:
        when = "during the handshake"
        self._write(header.encode(), when)
        line = self._read_line(self.start_timeout_s, when, "READY line")
        parts = line.split()
        if len(parts) < 2 or parts[0] != b"READY" or answered_version(parts[1]) is None:
            raise SealedControllerError(f"sealed child answered the handshake with {line[:160]!r}; "
                                        f"expected 'READY {PROTOCOL_VERSIONS[-1]} frames={FRAMES}'")
        self.version = answered_version(parts[1])
        if f"frames={FRAMES}".encode() not in parts[2:]:
            raise SealedControllerError(f"sealed child did not accept binary frames ({FRAMES}): {line[:160]!r}")
        self.program_name = b" ".join(p for p in parts[2:] if b"=" not in p).decode("utf-8", "replace") or None

    def step(self, obs, command) -> np.ndarray:
        k, row = self._tick, self._row
        self._layout.pack(row, k, obs, command)
        when = _At(k, obs.t)   # formatted only if a message needs it
        n = self._answer_bytes
        try:
            self._write(row, when)
            self._wait_start = time.monotonic()
            self._fill(n, self._wait_start + self.tick_timeout_s, when, "torques")
            answer = np.frombuffer(self._inbuf, dtype=FRAME_DTYPE, count=1 + self._J)
            if answer[0] != k:
                got = answer[0]
                raise SealedControllerError(f"sealed child answered for tick {got!r} {when}; expected tick {k}")
            self._tau[:] = answer[1:]
            del answer
            del self._inbuf[:n]
        except BaseException:
            self._abort()   # out of step, dead or interrupted: end the child now
            raise
        self._tick = k + 1
        return self._tau

    def stats(self) -> dict[str, float]:
        """Ends the child (the runner calls this once after the last tick) and returns its controller's stats."""
        proc = self._proc
        if proc is not None and proc.poll() is None:
            try:
                bye = np.zeros(len(self._row), dtype=FRAME_DTYPE)
                bye[0] = BYE_TICK
                self._write(bye, "after the last tick")
                line = self._read_line(EXIT_GRACE_S, "after BYE", "STATS line")
                if line.startswith(b"STATS "):
                    data = json.loads(line[6:].decode("utf-8", "replace"))
                    self._stats = {str(k): float(v) for k, v in data.items()}
            except (SealedControllerError, OSError, ValueError, AttributeError, TypeError):
                pass   # stats are informative only, as in-process
        self.close()
        return dict(self._stats)

    def __repr__(self) -> str:
        return f"SealedController({self.spec!r})"


def from_spec(spec: str):
    """The factory for the registry name ``sealed:<spec>``; checks ``spec`` names a Python controller.

    The check never runs the controller's code in this process (a package's ``__init__`` could
    otherwise change the bench before the child even starts): an entry point is checked by name,
    ``package.module:attribute`` by locating the module's file; the child imports and resolves it.
    """
    from bench.controllers import registry

    inner = spec.strip()
    child_spec = inner
    registered = registry._registered
    entry_points = registry._entry_points()
    if not inner:
        known = ", ".join(sorted(set(entry_points) | set(registered))) or "none"
        raise registry.ControllerNotFound(f"'{PREFIX}' needs a controller name ({PREFIX}NAME); known: {known}")
    if inner.startswith(("exec:", PREFIX)):
        raise registry.ControllerNotFound(
            f"controller {PREFIX + spec!r}: {PREFIX} runs a Python controller in a child process; "
            f"{inner.split(':', 1)[0]}: controllers already run in their own process, give {inner!r} alone")
    if inner in registered:
        child_spec = _importable_reference(registered[inner][0])
        if child_spec is None:
            raise registry.ControllerNotFound(
                f"controller {PREFIX + spec!r}: {inner!r} is registered in this process only and the child "
                "process cannot import its factory; give it as package.module:attribute")
    elif inner in entry_points:
        pass
    elif ":" in inner:
        module_name = inner.partition(":")[0]
        if _find_module_spec(module_name) is None:
            raise registry.ControllerNotFound(
                f"controller {PREFIX + spec!r}: cannot find module {module_name!r} on sys.path")
    else:
        try:
            registry.resolve(inner)   # not registered, not an entry point, no ':': raises with the known names
        except registry.ControllerNotFound as exc:
            raise registry.ControllerNotFound(f"{exc} (in {PREFIX + spec!r})") from None

    def factory(params: dict | None = None) -> SealedController:
        return SealedController(child_spec, name=PREFIX + spec, params=params)

    factory.__doc__ = f"{inner} in a sealed child process"
    factory.sealed_spec = child_spec
    return factory


def _find_module_spec(module_name: str):
    """Locate ``module_name`` the way ``import`` would, without executing it or its parent packages."""
    parts = module_name.split(".")
    if not all(p.isidentifier() for p in parts):
        return None
    if module_name in sys.modules:
        return getattr(sys.modules[module_name], "__spec__", None) or importlib.machinery.ModuleSpec(module_name, None)
    path = None
    spec = None
    for i in range(len(parts)):
        name = ".".join(parts[:i + 1])
        loaded = sys.modules.get(name)
        if loaded is not None:
            spec = getattr(loaded, "__spec__", None) or importlib.machinery.ModuleSpec(name, None)
            path = getattr(loaded, "__path__", None)
        else:
            spec = None
            for finder in sys.meta_path:
                find = getattr(finder, "find_spec", None)
                if find is None:
                    continue
                try:
                    spec = find(name, path, None)
                except (ImportError, ValueError, TypeError):
                    spec = None
                if spec is not None:
                    break
            if spec is None:
                return None
            path = spec.submodule_search_locations
        if i < len(parts) - 1 and path is None:
            return None   # a parent that is not a package
    return spec


def _importable_reference(factory) -> str | None:
    """``module:qualname`` of ``factory`` when importing it gives the same object, else None."""
    module_name = getattr(factory, "__module__", None)
    qualname = getattr(factory, "__qualname__", None)
    if not module_name or not qualname or "<" in qualname or module_name == "__main__":
        return None
    try:
        obj = importlib.import_module(module_name)
        for part in qualname.split("."):
            obj = getattr(obj, part)
    except (ImportError, AttributeError):
        return None
    return f"{module_name}:{qualname}" if obj is factory else None
