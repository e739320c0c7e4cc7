"""A controller that is a separate program, spoken to over its stdin/stdout (protocol ``QBX``, versions 1 and 2).

The bench starts the program once per episode (in ``reset``), sends it a
handshake describing the robot and the rates, then, every control tick, one
observation line; the program answers each with one torque line. Any language
that can read and write lines of text works (C++: ``std::getline`` and
``std::strtod``). The full protocol (published as docs/reference/external-protocol.md by
``python -m bench.docgen``):

Lines are UTF-8 text ending in ``\\n``; fields are separated by single spaces;
numbers are decimal floats as C's ``strtod`` reads them (the bench writes the
shortest text that reads back to the same double, so nothing is lost).

Handshake, bench -> program (``J`` joints, ``F`` feet)::

    QBX 1
    robot <name>
    joints <J> <joint name> ... (manifest order)
    feet <F> <foot name> ...
    control_rate_hz <float>
    control_dt_s <float>
    torque_limits <J floats, N m>
    nominal_pose <J floats, rad>
    nominal_height_m <float>
    mass_kg <float>
    versions 1 2
    privileged <1: the true trunk state is given, 0: not>
    foot_force <none | normal | 3d>
    joint_torque <0 | 1>
    height_scan <nx> <ny> <scans per second> <latency s>     (0 0 0 0: no height scan)
    height_scan_xy <2 nx ny floats, m: x y of point (0,0), (0,1), ... (i along the heading, j to the left)>
    end

A program must ignore header lines it does not know (later versions of
protocol 1 may add some before ``end``). It then answers ``READY 1`` or
``READY 2`` (the protocol version it speaks, one of ``versions``; anything
after it on the line is ignored). The lines from ``privileged`` to
``height_scan_xy`` describe the scenario's ``sensing:`` key (``robot.sensing``
of an in-process controller); ``height_scan_xy`` is only there with a height
scan.

Each control tick ``k`` (0, 1, 2, ...), bench -> program, one line::

    OBS <k> <t> <vx> <vy> <yaw_rate> <quat w x y z> <gyro x y z> <accel x y z>
        <joint_pos J> <joint_vel J> <foot_contact F: 1.0 touching, 0.0 not> <base_pos x y z> <base_linvel x y z>

(the command is body frame; the quaternion is the trunk orientation in the
world; gyro and accel are body frame; ``base_pos`` and ``base_linvel`` are
privileged true state, world frame, ``nan`` when the scenario says
``privileged: false``.)

Version 2 (``READY 2``) sends, in this order, only what the scenario gives::

    OBS <k> <t> <vx> <vy> <yaw_rate> <quat w x y z> <gyro x y z> <accel x y z>
        <joint_pos J> <joint_vel J> <foot_contact F> <gait_hint>
        [<base_pos x y z> <base_linvel x y z>]        when privileged is 1
        [<height_scan nx*ny, m, row-major: i along the heading, j to the left; nan: no reading>]
        [<foot_force F normal N, or 3F world-frame x y z per foot, N>]
        [<joint_torque J, N m>]

``gait_hint`` is the command's gait hint as a code: 0 none, 1 stand, 2 trot,
3 pace, 4 bound, 5 walk. The program answers, in either version::

    TAU <k> <J floats, N m, manifest order>

Lines the program writes that start with ``#`` are ignored (log to stderr
rather than stdout all the same). At the end of an episode the bench sends
``BYE`` and closes the program's stdin; the program may answer one line
``STATS <name>=<float> ...`` (reported as ``controller.<name>`` metrics) and
should exit within a second; it is killed otherwise.

Failures end the episode with a reason: the program cannot be started, exits
(its exit code and last lines of stderr are quoted), answers something
malformed (the line is quoted), answers for another tick, or does not answer
within the per-tick timeout (``ExternalControllerTimeout``, a ``TimeoutError``:
status ``timeout``).

The program runs in a process group (a session) of its own: at the end of the
episode, on a timeout or on an error, the whole group is ended (``SIGTERM``,
then ``SIGKILL`` after a grace), so that a wrapper script's children go with
it. Its stderr is read as it comes by a thread that keeps only the last
``STDERR_TAIL_BYTES``: a program that floods stderr neither fills memory nor
the disk, nor stalls on a full pipe.
"""

from __future__ import annotations

import os
import select
import shlex
import signal
import subprocess
import threading
import time
import weakref
from pathlib import Path

import numpy as np

from bench.controllers.base import Observation, Privileged, SensingInfo
from bench.gaits import GAIT_HINTS, gait_code

PROTOCOL = "QBX"
#: The version on the handshake's first line (every program reads it; ``versions`` offers the rest).
PROTOCOL_VERSION = 1
#: The versions this bench speaks; a program picks one in its READY line.
PROTOCOL_VERSIONS = (1, 2)
#: Gait hint names -> the integer code of protocol 2 (0: no hint).
GAIT_CODES = {name: gait_code(name) for name in GAIT_HINTS}
GAIT_NAMES = {code: name for name, code in GAIT_CODES.items()}
PREFIX = "exec:"
#: Default wait for one torque line, s (the runner's own per-tick limit defaults to the same).
DEFAULT_TICK_TIMEOUT_S = float(os.environ.get("BENCH_EXEC_TICK_TIMEOUT", "2.0"))
#: Default wait for the program to start and answer the handshake, s.
DEFAULT_START_TIMEOUT_S = float(os.environ.get("BENCH_EXEC_START_TIMEOUT", "10.0"))
#: Wait for the program to exit after BYE before it is killed, s.
EXIT_GRACE_S = 1.0
#: Wait after SIGTERM to the program's process group before SIGKILL, s.
TERM_GRACE_S = 0.5
#: The last bytes of the program's stderr kept for the reason of a failure.
STDERR_TAIL_BYTES = 64 * 1024
_QUOTE_CHARS = 160
_STDERR_TAIL_LINES = 8


class ExternalControllerError(RuntimeError):
    """The external program died, could not be started, or broke the protocol."""


class ExternalControllerTimeout(ExternalControllerError, TimeoutError):
    """The external program did not answer in time."""


def _quote(line: bytes | str) -> str:
    text = line.decode("utf-8", "replace") if isinstance(line, bytes) else line
    text = text.rstrip("\n")
    return repr(text if len(text) <= _QUOTE_CHARS else text[:_QUOTE_CHARS] + "...")


def _num(x: float) -> str:
    # repr of a Python float is the shortest text that reads back to the same double.
    return repr(float(x))


def sensing_lines(sensing: SensingInfo | None, control_dt: float) -> list[str]:
    """The handshake lines that describe ``robot.sensing`` (see the module docstring)."""
    s = sensing if sensing is not None else SensingInfo()
    lines = [
        "versions " + " ".join(map(str, PROTOCOL_VERSIONS)),
        f"privileged {int(bool(s.privileged))}",
        f"foot_force {s.foot_force or 'none'}",
        f"joint_torque {int(bool(s.joint_torque))}",
    ]
    if s.height_scan_xy is None:
        lines.append("height_scan 0 0 0 0")
    else:
        nx, ny = s.height_scan_xy.shape[:2]
        rate = s.height_scan_rate_hz if s.height_scan_rate_hz is not None else 1.0 / control_dt
        lines.append(f"height_scan {nx} {ny} {_num(rate)} {_num(s.height_scan_latency_s)}")
        lines.append("height_scan_xy " + " ".join(map(_num, np.asarray(s.height_scan_xy).reshape(-1))))
    return lines


def sensing_from_header(header: dict[str, str]) -> SensingInfo:
    """``robot.sensing`` as a handshake's lines describe it (``header``: key -> rest of the line).

    Raises ``ValueError`` naming the line when one is malformed; absent lines mean today's defaults.
    """
    def ints(key: str, n: int) -> list[int]:
        parts = header.get(key, "").split()
        try:
            return [int(float(p)) for p in parts[:n]]
        except ValueError:
            raise ValueError(f"handshake line {key!r} holds a non-number: {header.get(key, '')[:160]!r}") from None

    privileged = header.get("privileged", "1").strip() != "0"
    foot = header.get("foot_force", "none").strip() or "none"
    if foot not in ("none", "normal", "3d"):
        raise ValueError(f"handshake line 'foot_force' is {foot[:40]!r}; expected none, normal or 3d")
    torque = header.get("joint_torque", "0").strip() not in ("", "0")
    xy, rate, latency = None, None, 0.0
    scan = header.get("height_scan", "0 0 0 0").split()
    dims = ints("height_scan", 2) if scan else [0, 0]
    if len(dims) == 2 and dims[0] > 0 and dims[1] > 0:
        nx, ny = dims
        try:
            rate, latency = float(scan[2]), float(scan[3])
            flat = np.array([float(x) for x in header.get("height_scan_xy", "").split()], dtype=float)
        except (IndexError, ValueError):
            raise ValueError("handshake lines 'height_scan'/'height_scan_xy' are malformed") from None
        if flat.size != 2 * nx * ny:
            raise ValueError(f"handshake line 'height_scan_xy' holds {flat.size} numbers; expected {2 * nx * ny}")
        xy = flat.reshape(nx, ny, 2)
        xy.setflags(write=False)
    return SensingInfo(privileged=privileged, height_scan_xy=xy, foot_force=None if foot == "none" else foot,
                       joint_torque=torque, height_scan_rate_hz=rate, height_scan_latency_s=latency)


class ObservationLayout:
    """Where each number of an observation sits in an ``OBS`` line (and a sealed frame) of one protocol version.

    Index 0 is the tick. Version 1 always carries the privileged state (``nan`` when it is withheld);
    version 2 carries the gait hint and then only what ``sensing`` gives.
    """

    def __init__(self, n_joints: int, n_feet: int, version: int = 1, sensing: SensingInfo | None = None):
        s = sensing if sensing is not None else SensingInfo()
        J, F = int(n_joints), int(n_feet)
        self.version, self.J, self.F = int(version), J, F
        i = 15 + 2 * J + F
        self.gait = None
        self.privileged = None
        self.scan = self.foot = self.torque = None
        self.scan_shape = None
        self.foot_shape = None
        if self.version == 1:
            self.privileged = slice(i, i + 6)
            i += 6
        else:
            self.gait = i
            i += 1
            if s.privileged:
                self.privileged = slice(i, i + 6)
                i += 6
            if s.height_scan_xy is not None:
                self.scan_shape = tuple(s.height_scan_xy.shape[:2])
                n = self.scan_shape[0] * self.scan_shape[1]
                self.scan = slice(i, i + n)
                i += n
            if s.foot_force is not None:
                self.foot_shape = (F, 3) if s.foot_force == "3d" else (F,)
                n = 3 * F if s.foot_force == "3d" else F
                self.foot = slice(i, i + n)
                i += n
            if s.joint_torque:
                self.torque = slice(i, i + J)
                i += J
        self.size = i

    def pack(self, row: np.ndarray, k: int, obs, command) -> None:
        """Write tick ``k``'s observation and command into ``row`` (an ``OBS`` line's numbers, tick first)."""
        J, F = self.J, self.F
        row[0] = k
        row[1] = obs.t
        row[2:5] = command
        row[5:9] = obs.imu_quat
        row[9:12] = obs.imu_gyro
        row[12:15] = obs.imu_accel
        row[15:15 + J] = obs.joint_pos
        row[15 + J:15 + 2 * J] = obs.joint_vel
        row[15 + 2 * J:15 + 2 * J + F] = obs.foot_contact
        if self.gait is not None:
            row[self.gait] = GAIT_CODES.get(getattr(obs, "gait_hint", None), 0)
        p = self.privileged
        if p is not None:
            priv = obs.privileged
            if priv is None:
                row[p] = np.nan
            else:
                row[p.start:p.start + 3] = priv.base_pos
                row[p.start + 3:p.stop] = priv.base_linvel
        for sl, value in ((self.scan, obs.height_scan), (self.foot, obs.foot_force), (self.torque, obs.joint_torque)):
            if sl is not None:
                row[sl] = np.nan if value is None else np.asarray(value, dtype=float).reshape(-1)

    def unpack(self, row: np.ndarray, obs, command: np.ndarray) -> int:
        """Fill ``obs`` and ``command`` in place from ``row``; return the tick number."""
        J, F = self.J, self.F
        obs.t = float(row[1])
        command[:] = row[2:5]
        obs.imu_quat[:] = row[5:9]
        obs.imu_gyro[:] = row[9:12]
        obs.imu_accel[:] = row[12:15]
        obs.joint_pos[:] = row[15:15 + J]
        obs.joint_vel[:] = row[15 + J:15 + 2 * J]
        np.not_equal(row[15 + 2 * J:15 + 2 * J + F], 0.0, out=obs.foot_contact)
        if self.gait is not None:
            code = row[self.gait]
            obs.gait_hint = GAIT_NAMES.get(int(code)) if code == code else None
        p = self.privileged
        if p is None:
            obs.privileged = None
        else:
            if obs.privileged is None:
                obs.privileged = Privileged()
            obs.privileged.base_pos[:] = row[p.start:p.start + 3]
            obs.privileged.base_linvel[:] = row[p.start + 3:p.stop]
        if self.scan is not None:
            if obs.height_scan is None or obs.height_scan.shape != self.scan_shape:
                obs.height_scan = np.zeros(self.scan_shape)
            obs.height_scan.reshape(-1)[:] = row[self.scan]
        if self.foot is not None:
            if obs.foot_force is None or obs.foot_force.shape != self.foot_shape:
                obs.foot_force = np.zeros(self.foot_shape)
            obs.foot_force.reshape(-1)[:] = row[self.foot]
        if self.torque is not None:
            if obs.joint_torque is None or obs.joint_torque.shape != (J,):
                obs.joint_torque = np.zeros(J)
            obs.joint_torque[:] = row[self.torque]
        return int(row[0])


def handshake_header(robot, control_dt: float, extra_lines=()) -> str:
    """The protocol's handshake for ``robot`` (its ``sensing`` included); ``extra_lines`` go before ``end``
    (programs ignore lines they do not know)."""
    man = robot.manifest
    feet = [getattr(f, "name", str(f)) for f in man.feet]
    lines = [
        f"{PROTOCOL} {PROTOCOL_VERSION}",
        f"robot {man.name}",
        "joints " + " ".join([str(len(man.joints)), *man.joints]),
        "feet " + " ".join([str(len(feet)), *feet]),
        f"control_rate_hz {_num(1.0 / control_dt)}",
        f"control_dt_s {_num(control_dt)}",
        "torque_limits " + " ".join(map(_num, robot.torque_limits)),
        "nominal_pose " + " ".join(map(_num, robot.nominal_pose)),
        f"nominal_height_m {_num(robot.nominal_height)}",
        f"mass_kg {_num(robot.mass_kg)}",
        *sensing_lines(getattr(robot, "sensing", None), control_dt),
        *extra_lines,
        "end",
    ]
    return "\n".join(lines) + "\n"


def _signal_group(pgid: int, sig: int) -> bool:
    """Send ``sig`` to process group ``pgid``; False when the group is gone."""
    try:
        os.killpg(pgid, sig)
    except ProcessLookupError:
        return False
    except OSError:
        return False
    return True


def end_process_group(proc: subprocess.Popen, grace_s: float = TERM_GRACE_S) -> None:
    """End ``proc``, started with ``start_new_session=True``, and every process of its group.

    SIGTERM to the group, up to ``grace_s`` for the leader to go, then SIGKILL to the group. The
    group is signalled even when the leader has already exited: a wrapper's children may still run.
    """
    pgid = proc.pid   # a session leader's group id is its pid
    if _signal_group(pgid, signal.SIGTERM):
        try:
            proc.wait(timeout=grace_s)
        except (subprocess.TimeoutExpired, OSError):
            pass
        _signal_group(pgid, signal.SIGKILL)
    _kill(proc, group=False)


def _kill(proc: subprocess.Popen | None, group: bool | None = None) -> None:
    """Kill ``proc`` (its whole group when it was started in a session of its own) and reap it."""
    if proc is None:
        return
    if group is None:
        group = getattr(proc, "_bench_own_group", False)
    if group:
        end_process_group(proc)
        return
    if proc.poll() is None:
        try:
            proc.kill()
        except OSError:
            pass
    try:
        proc.wait(timeout=5)
    except (OSError, subprocess.SubprocessError):
        pass


class StderrTail:
    """Reads a pipe to its end on a thread of its own, keeping only the last ``limit`` bytes."""

    def __init__(self, fd: int, limit: int = STDERR_TAIL_BYTES) -> None:
        self.fd = fd
        self.limit = int(limit)
        self.buf = bytearray()
        self.total = 0          # bytes read in all
        self._lock = threading.Lock()
        self._thread = threading.Thread(target=self._pump, name="bench-exec-stderr", daemon=True)
        self._thread.start()

    def _pump(self) -> None:
        try:
            while True:
                chunk = os.read(self.fd, 65536)
                if not chunk:
                    break
                with self._lock:
                    self.total += len(chunk)
                    self.buf += chunk
                    if len(self.buf) > 2 * self.limit:   # trim in batches, not on every read
                        del self.buf[:len(self.buf) - self.limit]
        except OSError:
            pass
        finally:
            try:
                os.close(self.fd)
            except OSError:
                pass

    def join(self, timeout_s: float) -> None:
        self._thread.join(timeout_s)

    def tail(self) -> bytes:
        """The last ``limit`` bytes read so far."""
        with self._lock:
            return bytes(self.buf[-self.limit:])


def answered_version(token: bytes) -> int | None:
    """The protocol version a READY line names, if this bench speaks it."""
    for v in PROTOCOL_VERSIONS:
        if token == str(v).encode():
            return v
    return None


class _LineReader:
    """Reads whole lines from a pipe with a deadline (select on the raw descriptor, no Python buffering)."""

    def __init__(self, fd: int) -> None:
        self.fd = fd
        self.buf = bytearray()
        self.eof = False

    def readline(self, timeout_s: float) -> bytes | None:
        """A line without its newline; None at end of file; raises TimeoutError after ``timeout_s``."""
        deadline = time.monotonic() + timeout_s
        while True:
            nl = self.buf.find(b"\n")
            if nl >= 0:
                line = bytes(self.buf[:nl])
                del self.buf[:nl + 1]
                return line
            if self.eof:
                if self.buf:
                    line = bytes(self.buf)
                    self.buf.clear()
                    return line
                return None
            left = deadline - time.monotonic()
            if left <= 0:
                raise TimeoutError
            ready, _, _ = select.select([self.fd], [], [], left)
            if not ready:
                raise TimeoutError
            chunk = os.read(self.fd, 65536)
            if chunk:
                self.buf += chunk
            else:
                self.eof = True


class ExternalController:
    """Runs ``argv`` as a controller speaking protocol QBX 1 or 2 over stdin/stdout (see the module docstring)."""

    def __init__(self, argv: list[str] | str, *, tick_timeout_s: float | None = None,
                 start_timeout_s: float | None = None, cwd: str | Path | None = None,
                 env: dict[str, str] | None = None, name: str | None = None) -> None:
        self.argv = shlex.split(argv) if isinstance(argv, str) else [str(a) for a in argv]
        if not self.argv:
            raise ExternalControllerError("no program given (write exec:path/to/program [args])")
        self.tick_timeout_s = DEFAULT_TICK_TIMEOUT_S if tick_timeout_s is None else float(tick_timeout_s)
        self.start_timeout_s = DEFAULT_START_TIMEOUT_S if start_timeout_s is None else float(start_timeout_s)
        self.cwd = cwd
        self.env = env
        self.name = name or PREFIX + shlex.join(self.argv)
        self.program_name: str | None = None
        self._proc: subprocess.Popen | None = None
        self._stderr = None
        self._reader: _LineReader | None = None
        self._finalizer = None
        self._stats: dict[str, float] = {}

    # -- process ---------------------------------------------------------------------
    def _start(self) -> None:
        self.close()
        err_read, err_write = os.pipe()
        try:
            # A session of its own: the whole group (a wrapper script and what it starts) can be ended.
            self._proc = subprocess.Popen(self.argv, stdin=subprocess.PIPE, stdout=subprocess.PIPE,
                                          stderr=err_write, cwd=self.cwd, env=self.env, bufsize=0,
                                          start_new_session=True)
        except OSError as exc:
            os.close(err_read)
            raise ExternalControllerError(f"cannot start {shlex.join(self.argv)!r}: {exc.strerror or exc}") from None
        finally:
            os.close(err_write)
        self._proc._bench_own_group = True
        self._stderr = StderrTail(err_read)
        self._reader = _LineReader(self._proc.stdout.fileno())
        self._finalizer = weakref.finalize(self, _kill, self._proc)

    def _stderr_tail(self) -> str:
        if self._stderr is None:
            return ""
        lines = self._stderr.tail().decode("utf-8", "replace").splitlines()[-_STDERR_TAIL_LINES:]
        lines = [line if len(line) <= _QUOTE_CHARS else line[:_QUOTE_CHARS] + "..." for line in lines]
        return ("; its stderr ends: " + " | ".join(lines)) if lines else ""

    def _died(self, when: str) -> ExternalControllerError:
        code = None
        if self._proc is not None:
            try:
                code = self._proc.wait(timeout=1.0)
            except subprocess.TimeoutExpired:
                pass
        if code is not None and self._stderr is not None:
            self._stderr.join(0.5)   # its last lines, unless a child of it still holds the pipe open
        how = f"exited with code {code}" if code is not None else "closed its stdout"
        return ExternalControllerError(f"controller program {how} {when}{self._stderr_tail()}")

    def _send(self, text: str, when: str) -> None:
        try:
            self._proc.stdin.write(text.encode())
        except (BrokenPipeError, ValueError, OSError):
            raise self._died(when) from None

    def _receive(self, timeout_s: float, when: str, what: str) -> bytes:
        while True:
            try:
                line = self._reader.readline(timeout_s)
            except TimeoutError:
                if self._proc is not None and self._proc.poll() is not None:
                    raise self._died(when) from None   # it exited (e.g. busy flooding stderr) without closing stdout
                raise ExternalControllerTimeout(
                    f"controller program sent no {what} within {timeout_s:g} s {when}{self._stderr_tail()}") from None
            if line is None:
                raise self._died(when)
            if not line.startswith(b"#"):
                return line

    def _abort(self) -> None:
        _kill(self._proc)
        self.close()

    def close(self) -> None:
        """End the program (close stdin, wait briefly, then end its whole process group)."""
        proc, self._proc = self._proc, None
        if proc is not None:
            if proc.poll() is None:
                try:
                    proc.stdin.close()
                except OSError:
                    pass
                try:
                    proc.wait(timeout=EXIT_GRACE_S)
                except subprocess.TimeoutExpired:
                    pass
            _kill(proc)   # the whole group, even after the leader left: what it started goes too
            for f in (proc.stdout, proc.stdin):
                try:
                    f.close()
                except OSError:
                    pass
        if self._finalizer is not None:
            self._finalizer.detach()
            self._finalizer = None
        if self._stderr is not None:
            self._stderr.join(1.0)
            self._stderr = None

    # -- Controller protocol ---------------------------------------------------------
    def reset(self, robot, control_dt: float) -> None:
        man = robot.manifest
        J, F = len(man.joints), len(man.feet)
        self._J, self._F = J, F
        self._stats = {}
        self._start()
        try:
            version = self._handshake(handshake_header(robot, control_dt))
        except BaseException:
            self._abort()
            raise
        self._tick = 0
        self._tau = np.zeros(J)
        self.version = version
        self._layout = ObservationLayout(J, F, version, getattr(robot, "sensing", None))
        # One preallocated row of every observation number, in protocol order (the tick first).
        self._row = np.zeros(self._layout.size)
        self._fmt = "OBS %d " + " ".join(["%r"] * (len(self._row) - 1)) + "\n"

    def _handshake(self, header: str) -> int:
        """Send the handshake; return the protocol version the program answered."""
        when = "during the handshake"
        self._send(header, when)
        line = self._receive(self.start_timeout_s, when, "READY line")
        parts = line.split()
        if len(parts) < 2 or parts[0] != b"READY":
            raise ExternalControllerError(f"controller program answered the handshake with {_quote(line)}; "
                                          f"expected 'READY {PROTOCOL_VERSION}' or 'READY {PROTOCOL_VERSIONS[-1]}'")
        version = answered_version(parts[1])
        if version is None:
            raise ExternalControllerError(f"controller program speaks protocol version {_quote(parts[1])}; "
                                          f"this bench speaks {PROTOCOL} {' and '.join(map(str, PROTOCOL_VERSIONS))}")
        self.program_name = b" ".join(parts[2:]).decode("utf-8", "replace") or None
        return version

    def step(self, obs: Observation, command: np.ndarray) -> np.ndarray:
        row, k = self._row, self._tick
        self._layout.pack(row, k, obs, command)
        # %r of a float is its shortest round-trip text; foot contacts go out as 0.0/1.0.
        text = self._fmt % (k, *row.tolist()[1:])
        try:
            self._tau[:] = self._exchange(text, k, obs.t)
        except BaseException:
            self._abort()   # the conversation is out of step: end the program now
            raise
        self._tick = k + 1
        return self._tau

    def _exchange(self, text: str, k: int, t: float) -> list[float]:
        J = self._J
        when = f"at tick {k} (t={t:.3f} s)"
        self._send(text, when)
        line = self._receive(self.tick_timeout_s, when, "TAU line")
        parts = line.split()
        if len(parts) != J + 2 or parts[0] != b"TAU":
            raise ExternalControllerError(f"controller program answered {_quote(line)} {when}; expected "
                                          f"'TAU {k}' followed by {J} torques")
        if parts[1] != str(k).encode():
            raise ExternalControllerError(f"controller program answered for tick {_quote(parts[1])} {when}; "
                                          f"expected 'TAU {k} ...' (one answer per OBS line, in order)")
        try:
            return [float(p) for p in parts[2:]]
        except ValueError:
            raise ExternalControllerError(f"controller program answered a non-number in {_quote(line)} {when}") from None

    def stats(self) -> dict[str, float]:
        """Ends the program (called once by the runner after the last tick) and returns its STATS, if any."""
        if self._proc is not None and self._proc.poll() is None:
            try:
                self._proc.stdin.write(b"BYE\n")
                self._proc.stdin.close()
                line = self._receive(EXIT_GRACE_S, "after BYE", "STATS line")
                parts = line.split()
                if parts and parts[0] == b"STATS":
                    for p in parts[1:]:
                        key, _, value = p.decode("utf-8", "replace").partition("=")
                        try:
                            self._stats[key] = float(value)
                        except ValueError:
                            continue
            except (ExternalControllerError, OSError, ValueError):
                pass   # STATS is optional
        self.close()
        return dict(self._stats)

    def __repr__(self) -> str:
        return f"ExternalController({self.argv!r})"


def from_spec(spec: str):
    """The factory for the registry name ``exec:<command line>`` (``spec`` is the part after ``exec:``)."""
    argv = shlex.split(spec)
    if not argv:
        raise ExternalControllerError("'exec:' needs a program: exec:path/to/program [args]")

    def factory() -> ExternalController:
        return ExternalController(argv, name=PREFIX + spec)

    factory.__doc__ = f"external program {spec}"
    return factory
