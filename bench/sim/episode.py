"""One episode: the physics loop, control ticks, timed events, faults and the trace.

Physics runs at the scenario's timestep; the controller is called at the
control rate and its torques are held (after clipping to the, possibly
derated, limits) until the next call. On a control tick the step is split
(``mj_step1``/``mj_step2``) so that the observation, the recorded row and the
contact forces all belong to the same instant; the other substeps are plain
``mj_step``. Ends early on a fall, on non-finite state, on a MuJoCo warning, on
a controller fault or timeout; each becomes a status with a reason, never an
exception that unwinds the run.

Hung controllers: on the main thread of a process (every worker process of
``bench run``, and the bench's own process with ``--in-process``) a watchdog
timer (``SIGALRM`` every ``WATCH_FRACTION`` of the smallest limit) interrupts a
controller call that has run past the per-tick limit, or past the episode's
wall-clock deadline, by raising a private exception inside it; the episode ends
as ``timeout`` naming the tick and time. It costs one attribute write per call
(the timer is set once per episode, not per tick). Once per watchdog period,
after a call, it checks that the controller has not replaced its handler,
stopped its timer or blocked ``SIGALRM``, and puts them back if so (listed in
``EpisodeResult.watchdog_restored``). Elsewhere (another thread, such as a Dask
worker's, or when the process already uses ``SIGALRM``) each call is measured
after it returns instead. Code stuck inside a C call that never returns cannot
be interrupted in-process (Python runs signal handlers between bytecodes), nor
can a call that switches the watchdog off and then hangs: the process executor
kills such a worker past the episode's deadline; a controller program behind
``exec:`` has its own timeout.

Whatever a controller raises in ``reset``, ``step`` or ``stats`` (``SystemExit``,
``KeyboardInterrupt``, ``GeneratorExit``, any ``BaseException``) ends its
episode as ``error`` with the exception and the tick; only the user's own Ctrl-C
goes through (see :mod:`bench.sim.interrupts`).

MuJoCo's warnings are captured while an episode runs (MuJoCo's own message
text, instead of its default of printing and writing ``MUJOCO_LOG.TXT`` into
the working folder); a fatal one ends the episode as ``error`` with that text.

Per tick the runner's own work is kept small (see docs/explanation/speed.md): the
state of the instant (qpos, qvel, the trunk's orientation, the foot sites, the body
COMs, the applied torques) is one fancy-index copy from a raw view of MjData's memory
into one row, the controller's observation one more (its arrays are views into one
buffer), the foot contact forces are rebuilt after the episode from raw contact
records logged per tick (:mod:`bench.sim.contacts`), and the trace's derived columns
are filled vectorised after the loop; the raw views are checked against MuJoCo's
bindings once (:mod:`bench.sim.rawmem`), with the bindings as the fallback.

The controller gets only an :class:`~bench.controllers.base.Observation` and a
command, its own copies refreshed every tick (what it does to them cannot change
the recorded trace; if it replaces or deletes a field of the observation, it is
given a fresh observation at the next tick): the world model, the scenario, payloads and disturbances
stay out of its reach, as far as an in-process call can keep them (see
``sealed:`` controllers for a process boundary).
"""

from __future__ import annotations

import math
import signal
import sys
import threading
import time
from dataclasses import dataclass, field

import mujoco
import numpy as np

from bench.controllers.base import Observation, Privileged
from bench.controllers.seeding import reset_kwargs
from bench.faults import FaultContext
from bench.gaits import GAIT_HINT_NAMES, gait_code
from bench.sim.contacts import CONTACT_DIST_M, ContactTable
from bench.sim.interrupts import UserInterrupts, raised_reason
from bench.sim.signals import SignalError, SignalRecorder
from bench.sim.events import Event, compile_forces, compile_masses, fault_events
from bench.sim.faults import compile_faults
from bench.sim.rawmem import DataView
from bench.sim.sensing import compile_sensing, sensing_info
from bench.sim.trace import Trace
from bench.world.payloads import PAYLOAD_CONTYPE, PAYLOAD_RGBA

#: A fall: trunk origin closer to the ground under it than this share of the nominal height.
FALL_HEIGHT_FRACTION = 0.4
#: Samples per metre of the ground-level table used by the per-tick fall check.
TABLE_PER_M = 100
#: MuJoCo warnings that end an episode as an error (the state can no longer be trusted).
FATAL_WARNINGS = (
    mujoco.mjtWarning.mjWARN_BADQACC, mujoco.mjtWarning.mjWARN_BADQPOS, mujoco.mjtWarning.mjWARN_BADQVEL,
    mujoco.mjtWarning.mjWARN_CONTACTFULL, mujoco.mjtWarning.mjWARN_CNSTRFULL, mujoco.mjtWarning.mjWARN_BADCTRL,
)
_WARN_TEXT = {
    mujoco.mjtWarning.mjWARN_BADQACC: "simulation unstable: bad acceleration (QACC)",
    mujoco.mjtWarning.mjWARN_BADQPOS: "bad joint position (QPOS)",
    mujoco.mjtWarning.mjWARN_BADQVEL: "bad joint velocity (QVEL)",
    mujoco.mjtWarning.mjWARN_CONTACTFULL: "contact buffer full",
    mujoco.mjtWarning.mjWARN_CNSTRFULL: "constraint buffer full",
    mujoco.mjtWarning.mjWARN_BADCTRL: "bad control value",
}


#: The watchdog looks at a running controller call this often, as a share of the smallest limit, so a
#: stuck call is interrupted at most 10 % late; clamped to [WATCH_PERIOD_MIN_S, WATCH_PERIOD_MAX_S].
WATCH_FRACTION = 0.1
WATCH_PERIOD_MIN_S = 0.005
WATCH_PERIOD_MAX_S = 0.25
#: At most this many MuJoCo warning messages are kept per episode.
MAX_WARNING_MESSAGES = 16


class _ControllerHung(BaseException):
    """Raised inside a controller call by the watchdog; caught by the runner, never seen outside.

    A ``BaseException`` so that a controller's own ``except Exception`` does not swallow it.
    """

    def __init__(self, which: str, elapsed_s: float):
        super().__init__(which, elapsed_s)
        self.which = which            # "tick" or "episode"
        self.elapsed_s = elapsed_s    # how long the interrupted call had been running


class _Watchdog:
    """Interrupts a controller call stuck in Python code (see the module docstring).

    The runner sets ``call_start`` (a ``perf_counter`` value) before each call and
    0.0 right after it, and ``call_limit_s`` to the limit of that kind of call.
    ``start()`` returns False (and the watchdog does nothing) where it cannot
    work: not the main thread, no ``setitimer``, or ``SIGALRM``/the real-time
    timer already in use by someone else (it never takes them over).
    """

    def __init__(self, tick_limit_s: float | None, deadline: float):
        self.tick_limit_s = math.inf if tick_limit_s is None or tick_limit_s <= 0 else float(tick_limit_s)
        self.deadline = deadline
        self.call_start = 0.0
        self.call_limit_s = self.tick_limit_s
        self.active = False
        self.period_s = 0.0
        self._previous = None
        self.handler = self._on_alarm   # the one bound method installed, so that ``is`` can check it
        self.checked_at = 0.0           # perf_counter of the latest ``check``
        self.interval_s = 0.0
        self.restored: list[str] = []   # what a controller changed and the watchdog put back

    def start(self) -> bool:
        limit = min(self.tick_limit_s, self.deadline - time.perf_counter())
        if not math.isfinite(limit) or not hasattr(signal, "setitimer"):
            return False
        if threading.current_thread() is not threading.main_thread():
            return False
        try:
            if signal.getsignal(signal.SIGALRM) not in (signal.SIG_DFL, signal.SIG_IGN, None):
                return False
            if signal.getitimer(signal.ITIMER_REAL)[0] > 0:
                return False
            self.period_s = min(max(limit * WATCH_FRACTION, WATCH_PERIOD_MIN_S), WATCH_PERIOD_MAX_S)
            self._previous = signal.signal(signal.SIGALRM, self.handler)
            signal.setitimer(signal.ITIMER_REAL, self.period_s, self.period_s)
        except (ValueError, OSError):  # not the main interpreter, or the platform refuses
            return False
        self.interval_s = signal.getitimer(signal.ITIMER_REAL)[1]   # as the system rounded it, for ``check``
        self.checked_at = time.perf_counter()
        self.active = True
        return True

    def check(self, now: float, where: str) -> None:
        """After a controller call: put back the handler, the timer and the signal mask if a call changed them.

        The controller runs in this process and could otherwise switch the watchdog off for good
        (its own ``SIGALRM`` handler, ``setitimer(ITIMER_REAL, 0)``, ``SIGALRM`` blocked). The runner
        calls this at most once per watchdog period (a few microseconds each time, nothing on the
        other ticks), so the watchdog is back within one period. A call that switches the watchdog
        off and then hangs is past this check; the executor's deadline kill is the backstop for that.
        """
        self.checked_at = now
        changed = []
        try:
            if signal.getsignal(signal.SIGALRM) is not self.handler:
                signal.signal(signal.SIGALRM, self.handler)
                changed.append("SIGALRM handler replaced")
            if signal.getitimer(signal.ITIMER_REAL)[1] != self.interval_s:
                changed.append("timer stopped or changed")
            if hasattr(signal, "pthread_sigmask") and signal.SIGALRM in signal.pthread_sigmask(signal.SIG_BLOCK, []):
                signal.pthread_sigmask(signal.SIG_UNBLOCK, [signal.SIGALRM])
                changed.append("SIGALRM blocked")
            if changed:
                signal.setitimer(signal.ITIMER_REAL, self.period_s, self.period_s)
        except (ValueError, OSError):
            return
        if changed and len(self.restored) < MAX_WARNING_MESSAGES:
            self.restored.append(f"{where}: {', '.join(changed)}; the bench's watchdog was put back")

    def stop(self) -> None:
        if not self.active:
            return
        self.active = False
        self.call_start = 0.0
        # Ignore first, then cancel, then restore: an alarm already on its way when the timer is
        # cancelled must not reach a default handler (which would end the process).
        signal.signal(signal.SIGALRM, signal.SIG_IGN)
        signal.setitimer(signal.ITIMER_REAL, 0.0, 0.0)
        signal.signal(signal.SIGALRM, self._previous if self._previous is not None else signal.SIG_DFL)

    def _on_alarm(self, signum, frame) -> None:
        start = self.call_start
        if not start:
            return  # between calls: physics and bookkeeping are never interrupted
        now = time.perf_counter()
        # Raised again at every alarm while the call goes on, so a controller that swallows it
        # (a bare ``except:``) is interrupted again. The runner clears call_start first thing after
        # catching it, well within one period (>= 5 ms).
        if now - start > self.call_limit_s:
            raise _ControllerHung("tick", now - start)
        if now > self.deadline:
            raise _ControllerHung("episode", now - start)


_warn_lock = threading.Lock()
_warn_users = 0
_warn_previous = None
_warn_local = threading.local()


def _on_mujoco_warning(message) -> None:
    box = getattr(_warn_local, "box", None)
    if box is not None:
        if len(box) < MAX_WARNING_MESSAGES:
            box.append(str(message))
        return
    previous = _warn_previous
    if previous is not None:
        previous(message)
    else:  # a warning on a thread with no episode while one runs elsewhere: print, but write no log file
        print(f"MuJoCo warning: {message}", file=sys.stderr)


class _CaptureMujocoWarnings:
    """Collect MuJoCo's warning messages raised on this thread into ``box`` (a list) while entered."""

    def __init__(self, box: list[str]):
        self.box = box

    def __enter__(self) -> list[str]:
        global _warn_users, _warn_previous
        _warn_local.box = self.box
        if hasattr(mujoco, "set_mju_user_warning"):
            with _warn_lock:
                if _warn_users == 0:
                    _warn_previous = mujoco.get_mju_user_warning()
                    mujoco.set_mju_user_warning(_on_mujoco_warning)
                _warn_users += 1
        return self.box

    def __exit__(self, *exc) -> None:
        global _warn_users, _warn_previous
        _warn_local.box = None
        if hasattr(mujoco, "set_mju_user_warning"):
            with _warn_lock:
                _warn_users -= 1
                if _warn_users == 0:
                    mujoco.set_mju_user_warning(_warn_previous)
                    _warn_previous = None


def _one_line(exc: BaseException) -> str:
    return " ".join(str(exc).split()) or type(exc).__name__


def _mujoco_message(warning, info: int, captured: list[str]) -> str:
    """MuJoCo's own text for ``warning``: the captured message (it carries MuJoCo's time) or mju_warningText."""
    own = mujoco.mju_warningText(int(warning), int(info)) if hasattr(mujoco, "mju_warningText") else ""
    head = own.split(" at ")[0][:30] if own else ""
    for msg in captured:
        if head and msg.startswith(head):
            return msg
    return own or _WARN_TEXT.get(warning, str(warning))


@dataclass
class EpisodeLimits:
    """Wall-clock limits; exceeding one ends the episode as ``timeout``.

    ``tick_timeout_s``: one ``controller.step`` call (``None`` or a value <= 0: no limit).
    ``episode_timeout_s``: the whole episode, ``reset`` included (``None`` or a value <= 0: no limit). Both interrupt a call stuck in Python code
    where the watchdog can run (see the module docstring), else they are checked after each call.
    """

    tick_timeout_s: float | None = 2.0
    episode_timeout_s: float | None = 600.0


@dataclass
class EpisodeResult:
    """What an episode returns: the trace plus how and why it ended."""

    trace: Trace
    status: str                    # "completed", "fell", "error" or "timeout"
    reason: str | None
    sim_time_s: float
    wall_time_s: float
    events: list[Event] = field(default_factory=list)
    controller_stats: dict = field(default_factory=dict)
    mujoco_warnings: list[str] = field(default_factory=list)   # MuJoCo's messages, fatal or not
    interruptible: bool = False                                # whether the watchdog could run
    watchdog_restored: list[str] = field(default_factory=list)  # watchdog state a controller changed, put back
    cpu_time_s: float = 0.0    # this process's CPU time over the same span as wall_time_s (the tick loop)


def _as_slice(idx):
    """``slice`` equal to an index array when it is contiguous and increasing, else the array itself."""
    idx = np.asarray(idx, dtype=np.int64)
    if len(idx) and np.array_equal(idx, np.arange(idx[0], idx[0] + len(idx))):
        return slice(int(idx[0]), int(idx[0]) + len(idx))
    return idx




def run_episode(world, scenario, controller, robot, *, seed: int | None = None,
                limits: EpisodeLimits | None = None) -> EpisodeResult:
    """Run ``scenario`` in ``world`` with ``controller`` (already constructed) and return the result."""
    limits = limits or EpisodeLimits()
    t_start = time.perf_counter()
    ep_limit = limits.episode_timeout_s
    deadline = math.inf if ep_limit is None or ep_limit <= 0 else t_start + float(ep_limit)
    watchdog = _Watchdog(limits.tick_timeout_s, deadline)
    captured: list[str] = []
    with _CaptureMujocoWarnings(captured), UserInterrupts() as user:
        interruptible = watchdog.start()
        try:
            try:
                ep = _run_episode(world, scenario, controller, robot, seed, limits, watchdog, captured, user)
            finally:
                closed = _close_controller(controller, watchdog, limits, user)
        finally:
            watchdog.stop()
    if closed and ep.status == "completed":   # a fault in close() counts when nothing else went wrong
        ep.status, ep.reason = closed
    ep.mujoco_warnings = captured
    ep.interruptible = interruptible
    ep.watchdog_restored = watchdog.restored
    return ep


def _close_controller(controller, watchdog: _Watchdog, limits: EpisodeLimits, user: UserInterrupts):
    """Call the controller's optional ``close()`` once the episode is over, however it ended.

    Returns None, or (status, reason) when ``close()`` hung or raised (a user's Ctrl-C still goes through).
    """
    close = getattr(controller, "close", None)
    if not callable(close):
        return None
    watchdog.call_limit_s = watchdog.tick_limit_s
    watchdog.call_start = time.perf_counter()
    try:
        close()
        return None
    except _ControllerHung as hung:
        return "timeout", _timeout_reason(hung, limits, "in close()")
    except BaseException as exc:  # noqa: BLE001 - the controller's fault, reported as its episode's
        if user.by_user(exc):
            raise
        return "error", raised_reason(exc, "in close()")
    finally:
        watchdog.call_start = 0.0


def _timeout_reason(hung: _ControllerHung, limits: EpisodeLimits, where: str) -> str:
    if hung.which == "tick":
        return (f"controller did not return within the per-tick limit of {limits.tick_timeout_s:g} s {where}; "
                f"interrupted after {hung.elapsed_s:.2f} s")
    return (f"episode exceeded the wall-clock limit of {limits.episode_timeout_s:g} s {where}; "
            f"controller interrupted after {hung.elapsed_s:.2f} s in the call")


def _run_episode(world, scenario, controller, robot, seed, limits: EpisodeLimits, watchdog: _Watchdog,
                 captured: list[str], user: UserInterrupts) -> EpisodeResult:
    seed = int(scenario.seed if seed is None else seed)
    m = world.model
    d = mujoco.MjData(m)
    dt = float(m.opt.timestep)
    ctrl_dt = 1.0 / float(scenario.control_rate)
    substeps = max(int(round(ctrl_dt / dt)), 1)
    n_ticks = int(round(float(scenario.duration) * float(scenario.control_rate)))
    J, F, P = len(world.joint_qpos_adr), len(world.foot_site_ids), len(world.payloads)
    trace = Trace.allocate(n_ticks, J, F, m.nq, P)
    A = trace.arrays
    rng = np.random.default_rng(np.random.SeedSequence([seed, 104729]))

    # --- compile timed events once -------------------------------------------------
    forces, events = compile_forces(scenario.disturbances, seed, dt, float(scenario.duration))
    mass_scheds, mass_events = compile_masses(scenario.payloads, float(scenario.duration))
    events += mass_events + fault_events(scenario.faults, float(scenario.duration))
    events.sort(key=lambda e: e.t_start)
    nominal_limits = np.asarray(world.robot.torque_limits, dtype=float)
    limit_now = nominal_limits.copy()
    faults = compile_faults(scenario.faults, FaultContext(
        model=m, data=d, world=world, ctrl_dt=ctrl_dt, n_ticks=n_ticks,
        joint_index={name: i for i, name in enumerate(world.robot.joints)},
        nominal_limits=nominal_limits, limit_now=limit_now, rng=rng))
    payload_mass = np.array([float(p.spec.mass) if not p.spec.attach_at else 0.0 for p in world.payloads])
    # As built (not as a previous episode on this world may have left them).
    payload_geom_contype = np.full(len(world.payloads), PAYLOAD_CONTYPE, dtype=int)
    base_rgba_alpha = np.full(len(world.payloads), PAYLOAD_RGBA[3])

    # --- id tables for the hot loop ------------------------------------------------------
    trunk = world.trunk_body_id
    qa, va = world.root_qpos_adr, world.root_dof_adr
    jq, jv, act = world.joint_qpos_adr, world.joint_dof_adr, world.actuator_ids
    feet_sites = world.foot_site_ids
    contacts = ContactTable(m.ngeom, world.terrain_geom_ids, world.foot_geom_ids, world.fall_geom_ids)
    iq, ig, ia = world.imu_quat_adr, world.imu_gyro_adr, world.imu_accel_adr
    cmd_times = np.array([c.at for c in scenario.commands] or [0.0])
    cmd_vals = np.array([[c.vx, c.vy, c.yaw_rate] for c in scenario.commands] or [[0.0, 0.0, 0.0]])
    cmd_index = np.clip(np.searchsorted(cmd_times, np.arange(n_ticks) * ctrl_dt + 1e-9, side="right") - 1, 0, None)
    cmd_rows = cmd_vals[cmd_index]
    # Gait hints: each held from the command that sets one until a later command sets another (code 0: none).
    # Recorded (column gait_hint) only when the scenario gives one, so other traces keep their digests.
    hint_codes, held = [], 0
    for c in scenario.commands:
        held = gait_code(c.gait) if getattr(c, "gait", None) is not None else held
        hint_codes.append(held)
    has_hints = any(hint_codes)
    hint_rows = np.array(hint_codes or [0], dtype=np.int8)[cmd_index]
    hint_of = [None if code == 0 else GAIT_HINT_NAMES[code] for code in range(len(GAIT_HINT_NAMES))]
    # Payload mass changes, tick -> [(payload index, new mass)]: the schedules evaluated once, up front.
    mass_changes: dict[int, list[tuple[int, float]]] = {}
    for ms in mass_scheds:
        before = payload_mass[ms.payload_index]
        for k in range(n_ticks):
            mass = ms.mass_at(k * ctrl_dt)
            if mass != before:
                mass_changes.setdefault(k, []).append((ms.payload_index, mass))
                before = mass
    fall_z = FALL_HEIGHT_FRACTION * world.robot.nominal_height
    # Ground level along the path at 1 cm for the per-tick fall check (the exact query is vectorised after).
    ground_table = world.terrain.ground_table(TABLE_PER_M)
    ground_at = ground_table.at
    # Flat ground (most scenarios): the table holds one level, so the per-tick lookup is a constant.
    flat_ground = float(ground_table.heights[0]) if np.all(ground_table.heights == ground_table.heights[0]) else None
    fatal_idx = np.array([int(w) for w in FATAL_WARNINGS])
    applied_buf = np.zeros(J)
    neg_limit = -limit_now   # refreshed whenever a fault may have changed limit_now
    f_active = np.zeros(len(forces.k0), dtype=bool)
    R = np.zeros(9)
    ext_now = np.zeros(3)
    has_forces = not forces.empty

    # Views into MjData resolved once (its arrays never move), slices where the ids are contiguous.
    qpos, qvel, sensordata = d.qpos, d.qvel, d.sensordata
    s_quat, s_gyro, s_accel = sensordata[iq:iq + 4], sensordata[ig:ig + 3], sensordata[ia:ia + 3]
    jq_s, jv_s = _as_slice(jq), _as_slice(jv)   # indexed each tick: a slice gives a view, an index array a copy
    q_base, v_base = qpos[qa:qa + 3], qvel[va:va + 3]
    xquat_trunk = d.xquat[trunk]
    feet_s, act_s = _as_slice(feet_sites), _as_slice(act)
    # Torques are clipped straight into MjData's ctrl when the actuators are one range (a view), else via a buffer.
    ctrl_act = d.ctrl[act_s] if isinstance(act_s, slice) else None
    site_xpos, xipos = d.site_xpos, d.xipos
    warn_number = d.warning.number
    no_warnings = bytes(warn_number.nbytes)   # a bytes comparison is cheaper than a numpy reduction
    # Per-tick copies: qpos, qvel, the trunk's orientation, the foot sites and body COMs go whole into one
    # row per tick (one fancy index on a raw view of MjData, see bench.sim.rawmem); what the trace wants from
    # them (joints, base, centre of mass) is taken out after the episode, vectorised.
    R_contact = A["foot_contact"]
    R_payload, R_torque, R_limit, R_ext = A["payload_mass"], A["joint_torque"], A["torque_limit"], A["ext_force"]
    R_force = A["foot_force"].reshape(n_ticks, -1)   # flat (3F,) rows, a view
    nq, nv, nb = m.nq, m.nv, m.nbody
    cols = np.cumsum([0, nq, nv, 4, 3 * F, 3 * nb, J])   # qpos | qvel | trunk quat | foot sites | body COMs | ctrl
    R_row = np.zeros((n_ticks, int(cols[-1])))
    R_qpos, R_qvel, R_quat = R_row[:, cols[0]:cols[1]], R_row[:, cols[1]:cols[2]], R_row[:, cols[2]:cols[3]]
    R_feet = R_row[:, cols[3]:cols[4]].reshape(n_ticks, F, 3)
    R_xipos = R_row[:, cols[4]:cols[5]].reshape(n_ticks, nb, 3)
    R_ctrl = R_row[:, cols[5]:cols[6]]   # the applied torques as MjData's ctrl holds them
    # Faults that change the limits (derating) switch on at a tick or act on the command: with none, the
    # limits are the nominal ones throughout and are filled in after the episode.
    record_limits = bool(faults.effects)

    # --- initial state -------------------------------------------------------------
    d.qpos[:] = world.initial_qpos
    for i, (p, mass) in enumerate(zip(world.payloads, payload_mass)):
        _set_payload_mass(m, p, mass)
        # A load not yet attached is massless, invisible and touches nothing, as after a drop.
        m.geom_contype[p.geom_id] = payload_geom_contype[i] if mass > 0 else 0
        m.geom_rgba[p.geom_id, 3] = base_rgba_alpha[i] if mass > 0 else 0.0
    try:
        mujoco.mj_forward(m, d)
    except mujoco.FatalError as exc:
        return EpisodeResult(trace.__class__({k: v[:0] for k, v in A.items()}), "error",
                             f"MuJoCo error at t=0.000 s, before the first tick: {_one_line(exc)}", 0.0, 0.0, events)
    # The runner's own contact flags (recorded); the controller gets an observation and a command of its
    # own, filled from MjData every tick: what it does to them (np.clip(command, ..., out=command),
    # swapping an array) cannot change what is recorded, and is overwritten at the next tick.
    ctrl_command = np.zeros(3)
    # Extra sensors (scenario key sensing:); None without them, and then nothing of them runs per tick.
    sensing = getattr(scenario, "sensing", None)
    privileged = sensing is None or bool(sensing.privileged)
    # The controller's observation: its arrays are views into one buffer, filled by one fancy index of the
    # raw MjData view per tick (or field by field through the bindings where the view does not check).
    ctrl_obs, obs_buf, obs_parts = _buffered_observation(J, F, privileged)
    v_quat, v_gyro, v_accel, v_jpos, v_jvel, v_fc, v_priv, v_bpos, v_bvel = obs_parts
    view = DataView.build(d, ("qpos", "qvel", "sensordata", "xquat", "site_xpos", "xipos", "ctrl"))
    if view is not None:
        flat = view.flat
        obs_idx = np.concatenate([view.index("sensordata", np.arange(iq, iq + 4)),
                                  view.index("sensordata", np.arange(ig, ig + 3)),
                                  view.index("sensordata", np.arange(ia, ia + 3)),
                                  view.index("qpos", jq), view.index("qvel", jv)]
                                 + ([view.index("qpos", np.arange(qa, qa + 3)),
                                     view.index("qvel", np.arange(va, va + 3))] if privileged else []))
        row_idx = np.concatenate([view.index("qpos"), view.index("qvel"),
                                  view.index("xquat", np.arange(4 * trunk, 4 * trunk + 4)),
                                  view.index("site_xpos", (3 * np.asarray(feet_sites)[:, None] + np.arange(3)).ravel()),
                                  view.index("xipos"), view.index("ctrl", act)])
        o_q, o_v = view.offsets["qpos"], view.offsets["qvel"]
        # qpos and qvel side by side (as MuJoCo lays them out): one list for the finiteness check
        state = flat[o_q:o_q + nq + nv] if o_v == o_q + nq else None
        state_zeros = np.zeros(nq + nv)
    else:
        state = None
    contacts.bind_raw(m, d)
    contacts.start_log(m, R_force)
    sensors = compile_sensing(scenario, world, m, d, contacts, seed, float(scenario.control_rate))
    try:
        robot.sensing = sensing_info(sensing)
    except AttributeError:   # a robot object that takes no attributes: the controller goes without the description
        pass
    status, reason = "completed", None
    ctrl_ms = A["controller_ms"]
    ctrl_s = [0.0] * n_ticks   # controller call times, s (a list item is cheaper to set than an array's)

    # reset() may take long (building a solver): only the episode deadline applies to it.
    watchdog.call_limit_s = math.inf
    c0 = watchdog.call_start = time.perf_counter()
    try:
        controller.reset(robot, ctrl_dt, **reset_kwargs(controller, seed))   # + seed/rng if it takes them
        watchdog.call_start = 0.0
    except _ControllerHung as hung:
        watchdog.call_start = 0.0
        return EpisodeResult(trace.__class__({k: v[:0] for k, v in A.items()}), "timeout",
                             _timeout_reason(hung, limits, "in reset()"), 0.0, time.perf_counter() - c0, events)
    except BaseException as exc:  # noqa: BLE001 - SystemExit, KeyboardInterrupt... of the controller: its fault
        watchdog.call_start = 0.0
        if user.by_user(exc):
            raise
        return EpisodeResult(trace.__class__({k: v[:0] for k, v in A.items()}), "error",
                             raised_reason(exc, "in reset()"), 0.0, 0.0, events)
    if watchdog.active:
        watchdog.check(time.perf_counter(), "reset()")
    if time.perf_counter() > watchdog.deadline:
        return EpisodeResult(trace.__class__({k: v[:0] for k, v in A.items()}), "timeout",
                             f"episode exceeded the wall-clock limit of {limits.episode_timeout_s:g} s in reset() "
                             f"(reset took {time.perf_counter() - c0:.2f} s)", 0.0, time.perf_counter() - c0, events)
    watchdog.call_limit_s = watchdog.tick_limit_s
    tick_limit_s = watchdog.tick_limit_s
    deadline = watchdog.deadline
    signals = SignalRecorder.attach(controller, n_ticks)   # None (nothing per tick) unless it logs signals

    def apply_forces(step: int) -> None:
        d.xfrc_applied[trunk, :] = 0.0
        ext_now[:] = 0.0
        if forces.empty:
            return
        np.logical_and(forces.k0 <= step, step < forces.k1, out=f_active)
        if not f_active.any():
            return
        mujoco.mju_quat2Mat(R, d.xquat[trunk])
        Rm = R.reshape(3, 3)
        for i in np.flatnonzero(f_active):
            f = forces.force[i]
            pt = d.xpos[trunk] + Rm @ forces.point[i]
            d.xfrc_applied[trunk, :3] += f
            d.xfrc_applied[trunk, 3:] += np.cross(pt - d.xipos[trunk], f)
            ext_now[:] += f

    # Module attributes the tick uses, bound once.
    perf_counter, mj_step1, mj_step2, mj_step = time.perf_counter, mujoco.mj_step1, mujoco.mj_step2, mujoco.mj_step
    more_substeps = range(substeps - 1)
    shape_j = (J,)
    cmd_list = list(cmd_rows)   # the rows as arrays of their own: no row view made per tick
    # The fault plan's per-tick hooks as local flags, refreshed when faults switch on (the only time they change).
    next_fault = faults.next_tick
    fault_obs, fault_cmd, fault_app = bool(faults.observers), bool(faults.commanders), bool(faults.appliers)
    cpu0 = time.process_time()
    wall0 = time.perf_counter()
    step = 0
    physics_fault = False  # MuJoCo may have reset d (and d.time) on the way: time is counted in steps
    k = 0
    try:
        for k in range(n_ticks):
            t = k * ctrl_dt
            # Timed changes to the world the controller is not told about.
            if k in mass_changes:
                for i, mass in mass_changes[k]:
                    p = world.payloads[i]
                    _set_payload_mass(m, p, mass)
                    visible = mass > 0
                    m.geom_contype[p.geom_id] = payload_geom_contype[i] if visible else 0
                    m.geom_rgba[p.geom_id, 3] = base_rgba_alpha[i] if visible else 0.0
                    payload_mass[i] = mass
            if k == next_fault:   # faults switching on (derated limits, a lock's constraint...)
                faults.switch(k)
                next_fault = faults.next_tick
                fault_obs, fault_cmd, fault_app = bool(faults.observers), bool(faults.commanders), bool(faults.appliers)
                np.negative(limit_now, out=neg_limit)

            if has_forces:
                apply_forces(step)
            mj_step1(m, d)

            # Contacts of this instant, then the controller's observation: sensors, joints, contacts.
            fc = R_contact[k]   # zeros as allocated: classify marks the feet touching
            fell_contact = contacts.classify(d, fc)
            o = ctrl_obs
            try:   # the controller may have replaced or deleted a field: then it gets a fresh observation
                intact = (o.imu_quat is v_quat and o.imu_gyro is v_gyro and o.imu_accel is v_accel
                          and o.joint_pos is v_jpos and o.joint_vel is v_jvel and o.foot_contact is v_fc
                          and o.privileged is v_priv
                          and (v_priv is None or (v_priv.base_pos is v_bpos and v_priv.base_linvel is v_bvel)))
            except AttributeError:
                intact = False
            if not intact:
                ctrl_obs, obs_buf, obs_parts = _buffered_observation(J, F, privileged)
                v_quat, v_gyro, v_accel, v_jpos, v_jvel, v_fc, v_priv, v_bpos, v_bvel = obs_parts
            if view is not None:
                obs_buf[:] = flat[obs_idx]
            else:
                v_quat[:] = s_quat
                v_gyro[:] = s_gyro
                v_accel[:] = s_accel
                v_jpos[:] = qpos[jq_s]
                v_jvel[:] = qvel[jv_s]
                if privileged:
                    v_bpos[:] = q_base
                    v_bvel[:] = v_base
            v_fc[:] = fc
            ctrl_obs.t = t
            if has_hints:
                ctrl_obs.gait_hint = hint_of[hint_rows[k]]
            if sensors is not None:
                sensors.observe(k, ctrl_obs)
            if P:
                R_payload[k] = payload_mass
            if fault_obs:   # sensor faults act on what the controller sees, never on the record
                faults.observe(ctrl_obs)
            ctrl_command[:] = cmd_list[k]

            # The controller.
            c0 = watchdog.call_start = perf_counter()
            try:
                tau = controller.step(ctrl_obs, ctrl_command)
                watchdog.call_start = 0.0
            except _ControllerHung as hung:
                watchdog.call_start = 0.0
                ctrl_s[k] = time.perf_counter() - c0
                status, reason = "timeout", _timeout_reason(hung, limits, f"at tick {k} (t={t:.3f} s)")
                break
            except BaseException as exc:  # noqa: BLE001 - SystemExit, KeyboardInterrupt... of the controller
                watchdog.call_start = 0.0
                if user.by_user(exc):
                    raise
                status = "timeout" if isinstance(exc, TimeoutError) else "error"   # e.g. an external program's wait
                reason = raised_reason(exc, f"at tick {k} (t={t:.3f} s)")
                break
            c1 = perf_counter()
            ctrl_s[k] = c1 - c0
            if c1 - watchdog.checked_at > watchdog.period_s and watchdog.active:
                watchdog.check(c1, f"tick {k} (t={t:.3f} s)")
            if c1 - c0 > tick_limit_s:
                status, reason = "timeout", (f"controller took {c1 - c0:.2f} s at tick {k} (t={t:.3f} s), "
                                             f"over the per-tick limit of {tick_limit_s:g} s")
                break
            if c1 > deadline:
                status, reason = "timeout", (f"episode exceeded the wall-clock limit of {limits.episode_timeout_s:g} s "
                                             f"at tick {k} (t={t:.3f} s)")
                break
            try:
                tau = np.asarray(tau, dtype=float)
            except (TypeError, ValueError) as exc:
                status, reason = "error", f"controller returned a non-numeric value at tick {k} (t={t:.3f} s): {exc}"
                break
            except BaseException as exc:  # noqa: BLE001 - the returned object's own code (__array__, __float__)
                if user.by_user(exc):
                    raise
                status, reason = "error", raised_reason(exc, f"converting its torques at tick {k} (t={t:.3f} s)")
                break
            if tau.shape != shape_j:
                what = "None" if tau.shape == () and math.isnan(float(tau)) else f"torques of shape {tau.shape}"
                status, reason = "error", (f"controller returned {what} at tick {k} (t={t:.3f} s); "
                                           f"expected {J} torques, shape ({J},)")
                break
            # A finite sum means finite elements; only when it is not (a non-finite element, or an overflow
            # of large finite torques such as 1e308, which are only clipped) look element by element.
            if not math.isfinite(sum(tau.tolist())) and not np.isfinite(tau).all():
                status, reason = "error", f"controller returned non-finite torques at tick {k} (t={t:.3f} s)"
                break
            if signals is not None:
                try:
                    signals.record(k)
                except SignalError as exc:
                    status, reason = "error", f"{exc} (t={t:.3f} s)"
                    break
                except BaseException as exc:  # noqa: BLE001 - its own signals property or mapping raised
                    if user.by_user(exc):
                        raise
                    status, reason = "error", raised_reason(exc, f"giving its signals at tick {k} (t={t:.3f} s)")
                    break

            # Faults on the command (latency), the limits, faults on the applied torque (limp joints),
            # then hold until the next tick.
            if fault_cmd:
                tau = faults.command(k, tau)
                np.negative(limit_now, out=neg_limit)
            applied = applied_buf if ctrl_act is None else ctrl_act
            np.minimum(tau, limit_now, out=applied)
            np.maximum(applied, neg_limit, out=applied)
            if fault_app:
                faults.apply(applied)
            if ctrl_act is None:
                d.ctrl[act_s] = applied
            # Record the row of this instant: the true state (before any sensor fault; nothing has moved since
            # mj_step1) and the torques in ctrl (contact forces come from this step's solve, below).
            if view is not None:
                R_row[k] = flat[row_idx]
            else:
                R_qpos[k] = qpos
                R_qvel[k] = qvel
                R_quat[k] = xquat_trunk
                R_feet[k] = site_xpos[feet_s]
                R_xipos[k] = xipos
                R_ctrl[k] = applied
            if record_limits:
                R_limit[k] = limit_now

            mj_step2(m, d)
            step += 1

            if has_forces:
                R_ext[k] = ext_now
            if contacts.logging:   # raw records now, the forces after the episode (bit for bit the same)
                contacts.log(d, k)
            else:
                contacts.forces(m, d, R_force[k])

            for _ in more_substeps:
                if has_forces:
                    apply_forces(step)
                mj_step(m, d)
                step += 1
            if sensors is not None:
                sensors.after_physics()

            # End conditions.
            if warn_number.tobytes() != no_warnings and warn_number[fatal_idx].any():
                w = next(w for w in FATAL_WARNINGS if d.warning[w].number > 0)
                # After a bad acceleration MuJoCo resets the data (d.time too): the time is counted here.
                sim_t = step * dt
                status, reason = "error", (f"MuJoCo warning at tick {k} (t={t:.3f}-{sim_t:.3f} s): "
                                           f"{_mujoco_message(w, d.warning[w].lastinfo, captured)} "
                                           f"[{_WARN_TEXT[w]}; mjtWarning.{mujoco.mjtWarning(w).name}]")
                physics_fault = True
                k += 1
                break
            # x * 0 is NaN for a NaN or an infinity and 0 otherwise: the dot product with zeros is finite
            # exactly when every element is
            if not math.isfinite(state.dot(state_zeros) if state is not None
                                 else sum(qpos.tolist()) + sum(qvel.tolist())):
                status, reason = "error", (f"non-finite state (NaN or infinity in qpos/qvel) at tick {k} "
                                           f"(t={t:.3f}-{step * dt:.3f} s)")
                physics_fault = True
                k += 1
                break
            z = qpos[qa + 2]
            ground = ground_at(qpos[qa]) if flat_ground is None else flat_ground
            if fell_contact or z - ground < fall_z:
                why = contacts.fall_parts(m, d) if fell_contact else (
                    f"trunk {z - ground:.3f} m above the ground, under the fall threshold {fall_z:.3f} m")
                status, reason = "fell", f"fell at t={t:.3f} s: {why}"
                k += 1
                break
        else:
            k = n_ticks
    except mujoco.FatalError as exc:  # mju_error inside a step (e.g. the arena is out of memory)
        status, reason = "error", f"MuJoCo error at tick {k} (t={k * ctrl_dt:.3f} s): {_one_line(exc)}"
        physics_fault = True
    wall = time.perf_counter() - wall0
    cpu = time.process_time() - cpu0

    n = k
    contacts.flush()
    if not record_limits:
        R_limit[:n] = limit_now
    A["qpos"][:n] = R_qpos[:n]
    A["base_quat"][:n] = R_quat[:n]
    A["foot_pos"][:n] = R_feet[:n]
    R_torque[:n] = R_ctrl[:n]
    ctrl_ms[:n] = np.array(ctrl_s[:n]) * 1e3
    trace.truncate(n)
    if signals is not None:
        signals.into(trace.arrays, n)
    if n:
        A = trace.arrays
        _derive_rows(A, n, ctrl_dt, world, m, R_qvel[:n], R_xipos[:n], cmd_rows[:n])
        A["terrain_height"][:] = world.terrain.height_at(A["base_pos"][:, 0], A["base_pos"][:, 1])
    if has_hints:
        trace.arrays["gait_hint"] = hint_rows[:n].copy()
        trace.meta["gait_hint_names"] = ",".join(GAIT_HINT_NAMES)
    stats = {}
    watchdog.call_limit_s = watchdog.tick_limit_s
    c0 = watchdog.call_start = time.perf_counter()
    try:
        if hasattr(controller, "stats"):
            stats = {str(a): float(b) for a, b in dict(controller.stats()).items()}
        watchdog.call_start = 0.0
    except _ControllerHung as hung:
        watchdog.call_start = 0.0
        stats = {}
        if status not in ("error", "timeout"):
            status, reason = "timeout", _timeout_reason(hung, limits, "in stats()")
    except Exception:  # noqa: BLE001 - optional and informative only
        watchdog.call_start = 0.0
        stats = {}
    except BaseException as exc:  # noqa: BLE001 - SystemExit, KeyboardInterrupt...: the controller's fault
        watchdog.call_start = 0.0
        if user.by_user(exc):
            raise
        stats = {}
        if status not in ("error", "timeout"):
            status, reason = "error", raised_reason(exc, "in stats()")
    trace.meta.update({
        "nominal_height": float(world.robot.nominal_height),
        "control_dt": ctrl_dt,
        "timestep": dt,
        "duration": float(scenario.duration),
        "status": status,
        "fall_time": float(n * ctrl_dt) if status == "fell" else -1.0,
    })
    sim_time = float(step * dt) if physics_fault else float(d.time)
    return EpisodeResult(trace, status, reason, sim_time_s=sim_time, wall_time_s=wall,
                         events=events, controller_stats=stats, cpu_time_s=cpu)


def _buffered_observation(J: int, F: int, privileged: bool):
    """A controller observation whose float arrays are views into one buffer, the buffer, and the parts
    (imu_quat, imu_gyro, imu_accel, joint_pos, joint_vel, foot_contact, privileged, base_pos, base_linvel;
    the last three None when ``privileged`` is False). Buffer layout: quat 4, gyro 3, accel 3, joint
    positions J, joint velocities J, then (privileged) base position 3 and base velocity 3."""
    buf = np.zeros(10 + 2 * J + (6 if privileged else 0))
    buf[0] = 1.0
    parts = [buf[0:4], buf[4:7], buf[7:10], buf[10:10 + J], buf[10 + J:10 + 2 * J], np.zeros(F, dtype=bool)]
    priv = None
    if privileged:
        priv = Privileged(base_pos=buf[10 + 2 * J:13 + 2 * J], base_linvel=buf[13 + 2 * J:16 + 2 * J])
    o = Observation(imu_quat=parts[0], imu_gyro=parts[1], imu_accel=parts[2], joint_pos=parts[3],
                    joint_vel=parts[4], foot_contact=parts[5], privileged=priv)
    return o, buf, (*parts, priv, priv.base_pos if priv else None, priv.base_linvel if priv else None)


def _set_payload_mass(m: mujoco.MjModel, p, mass: float) -> None:
    delta = mass - float(m.body_mass[p.body_id])
    m.body_mass[p.body_id] = mass
    m.body_inertia[p.body_id] = p.unit_inertia * mass
    # Keep the compiled subtree masses in step (MuJoCo's subtree_com and subtreecom sensors divide by them).
    b = p.body_id
    while True:
        m.body_subtreemass[b] += delta
        if b == 0:
            break
        b = int(m.body_parentid[b])


def _derive_rows(A, n, ctrl_dt, world, m, qvel, xipos, commands) -> None:
    """Fill the trace columns that follow from the per-tick copies (``n`` rows; exact copies and the
    same arithmetic as row by row, so the values are those a per-tick computation gives)."""
    qa, va = world.root_qpos_adr, world.root_dof_adr
    qpos = A["qpos"]
    A["t"][:] = np.arange(n) * ctrl_dt
    A["base_pos"][:] = qpos[:, qa:qa + 3]
    A["joint_pos"][:] = qpos[:, world.joint_qpos_adr]
    A["base_linvel"][:] = qvel[:, va:va + 3]
    A["base_angvel"][:] = qvel[:, va + 3:va + 6]   # free-joint angular velocity is in the body frame
    A["joint_vel"][:] = qvel[:, world.joint_dof_adr]
    A["command"][:] = commands
    # Masses of robot and carried loads per tick: robot bodies are fixed, loads as recorded.
    robot = world.robot_body_ids
    mass = np.empty((n, len(robot) + len(world.payloads)))
    mass[:, :len(robot)] = m.body_mass[robot]
    mass[:, len(robot):] = A["payload_mass"]
    total = mass.sum(axis=1)
    A["total_mass"][:] = total
    A["com_pos"][:] = (mass[:, :, None] * xipos[:, world.carried_body_ids]).sum(axis=1) / total[:, None]
