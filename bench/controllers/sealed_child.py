"""The child side of sealed mode: ``python -m bench.controllers.sealed_child NAME``.

Reads a QBX handshake on its standard input (and speaks version 2 when it is
offered, else 1), rebuilds the nominal robot from
the manifest the handshake names (``manifest_path``; without it, the bundled
robot of that name), checks it is the robot described (joints, feet, limits,
pose, height), builds the controller ``NAME`` (a registered name, an entry point
or ``package.module:attribute``) and runs it: binary frames when the handshake
offers ``frames f64le`` (see :mod:`bench.controllers.sealed`), text lines
otherwise, so it also serves as an ``exec:`` program.

Only the protocol uses the original standard input and output: the controller
sees ``/dev/null`` as its input and the child's stderr as its output, so a stray
``print`` cannot corrupt a frame.

Exit codes: 0 the episode ended (BYE, or the bench closed the input); 1 the
controller could not be made or raised (its traceback and a one-line summary on
stderr); 2 bad usage, a broken handshake or a robot that does not match;
3 the controller returned something that is not ``J`` numbers.
"""

from __future__ import annotations

import json
import os
import signal
import sys
import traceback

import numpy as np

from bench.controllers.external import ObservationLayout, sensing_from_header
from bench.controllers.sealed import BYE_TICK, CHILD_SUMMARY, ENV_PARENT_PID, ENV_SYS_PATH, FRAME_DTYPE, FRAMES

EXIT_CONTROLLER_RAISED = 1
EXIT_BAD_INPUT = 2
EXIT_BAD_TORQUES = 3
_PR_SET_PDEATHSIG = 1   # <linux/prctl.h>


class _Stop(Exception):
    """Ends the child with ``code`` after writing ``message`` to stderr."""

    def __init__(self, code: int, message: str):
        super().__init__(message)
        self.code = code


def _die_with_parent() -> None:
    """Be killed when the bench process that started us dies (Linux), and exit if it already has."""
    if sys.platform.startswith("linux"):
        try:
            import ctypes

            ctypes.CDLL(None, use_errno=True).prctl(_PR_SET_PDEATHSIG, int(signal.SIGKILL), 0, 0, 0)
        except (OSError, AttributeError):
            pass
    parent = os.environ.get(ENV_PARENT_PID)
    if parent and parent.isdigit() and os.getppid() != int(parent):
        os._exit(0)   # the parent died before the signal was armed


def _extend_sys_path() -> None:
    """Resolve names as the bench process does: its sys.path entries, after ours."""
    try:
        extra = json.loads(os.environ.get(ENV_SYS_PATH, "[]"))
    except ValueError:
        return
    for p in extra:
        if isinstance(p, str) and p not in sys.path:
            sys.path.append(p)


def _floats(text: str, what: str) -> np.ndarray:
    try:
        return np.array([float(x) for x in text.split()], dtype=float)
    except ValueError:
        raise _Stop(EXIT_BAD_INPUT, f"handshake line {what!r} holds a non-number: {text[:160]!r}") from None


def _read_header(fin) -> dict[str, str] | None:
    first = fin.readline()
    if not first:
        return None
    if first.split()[:2] != [b"QBX", b"1"]:
        raise _Stop(EXIT_BAD_INPUT, f"expected the handshake 'QBX 1', got {first[:160]!r}")
    header: dict[str, str] = {}
    while True:
        line = fin.readline()
        if not line:
            return None
        text = line.decode("utf-8", "replace").rstrip("\n")
        if text == "end":
            return header
        key, _, rest = text.partition(" ")
        header[key] = rest


def _robot(header: dict[str, str]):
    from bench.robot.locate import resolve_robot
    from bench.robot.manifest import load_manifest
    from bench.robot.model import NominalRobot

    path = header.get("manifest_path")
    manifest = load_manifest(path) if path else resolve_robot(header.get("robot", "").strip())
    robot = NominalRobot(manifest)
    joints = header.get("joints", "").split()[1:]
    feet = header.get("feet", "").split()[1:]
    checks = [
        ("joints", joints == list(manifest.joints)),
        ("feet", feet == [f.name for f in manifest.feet]),
        ("torque_limits", np.array_equal(_floats(header.get("torque_limits", ""), "torque_limits"),
                                         robot.torque_limits)),
        ("nominal_pose", np.array_equal(_floats(header.get("nominal_pose", ""), "nominal_pose"),
                                        robot.nominal_pose)),
        ("nominal_height_m", float(header.get("nominal_height_m", "nan")) == robot.nominal_height),
    ]
    wrong = [k for k, ok in checks if not ok]
    if wrong:
        raise _Stop(EXIT_BAD_INPUT, f"the robot rebuilt from {manifest.manifest_path} differs from the handshake in "
                                    f"{', '.join(wrong)} (was the manifest changed during the run?)")
    return robot


def _torques(tau, J: int, k: int, t: float) -> np.ndarray:
    try:
        arr = np.asarray(tau, dtype=float)
    except (TypeError, ValueError) as exc:
        raise _Stop(EXIT_BAD_TORQUES, f"controller returned a non-numeric value at tick {k} (t={t:.3f} s): {exc}")
    if arr.shape != (J,):
        what = "None" if tau is None else f"torques of shape {arr.shape}"
        raise _Stop(EXIT_BAD_TORQUES, f"controller returned {what} at tick {k} (t={t:.3f} s); "
                                      f"expected {J} torques, shape ({J},)")
    return arr


def _stats(controller) -> dict[str, float]:
    if not hasattr(controller, "stats"):
        return {}
    try:
        return {str(a): float(b) for a, b in dict(controller.stats()).items()}
    except Exception:  # noqa: BLE001 - informative only, as in-process
        traceback.print_exc()
        return {}


def _read_exact(fin, view: memoryview) -> bool:
    """Fill ``view`` from ``fin``; False at end of file (the bench has gone)."""
    got = 0
    while got < len(view):
        n = fin.readinto(view[got:])
        if not n:
            return False
        got += n
    return True


def _write_all(fout, data) -> None:
    """Write all of ``data`` (an unbuffered pipe write may take only part of a long line)."""
    view = memoryview(data).cast("B")
    while view:
        view = view[fout.write(view):]


def _serve_binary(fin, fout, controller, layout: ObservationLayout) -> None:
    from bench.controllers.base import Observation

    J, F = layout.J, layout.F
    row = np.zeros(layout.size, dtype=FRAME_DTYPE)
    view = memoryview(row).cast("B")
    answer = np.zeros(1 + J, dtype=FRAME_DTYPE)
    obs = Observation.zeros(J, F)
    command = np.zeros(3)
    while _read_exact(fin, view):
        if row[0] == BYE_TICK:
            _write_all(fout, ("STATS " + json.dumps(_stats(controller)) + "\n").encode())
            return
        k = layout.unpack(row, obs, command)
        tau = _call_step(controller, obs, command, k)
        answer[0] = k
        answer[1:] = _torques(tau, J, k, obs.t)
        _write_all(fout, answer)


def _serve_text(fin, fout, controller, layout: ObservationLayout) -> None:
    from bench.controllers.base import Observation

    J, F = layout.J, layout.F
    row = np.zeros(layout.size, dtype=float)
    obs = Observation.zeros(J, F)
    command = np.zeros(3)
    while True:
        line = fin.readline()
        if not line:
            return
        parts = line.split()
        if not parts:
            continue
        if parts[0] == b"BYE":
            stats = {k: v for k, v in _stats(controller).items() if k and not any(c.isspace() or c == "=" for c in k)}
            _write_all(fout, ("STATS " + " ".join(f"{k}={v!r}" for k, v in stats.items()) + "\n").encode())
            return
        if parts[0] != b"OBS" or len(parts) != len(row) + 1:
            raise _Stop(EXIT_BAD_INPUT, f"expected an OBS line of {len(row) - 1} numbers, got {line[:160]!r}")
        try:
            row[0] = int(parts[1])
            row[1:] = [float(p) for p in parts[2:]]
        except ValueError:
            raise _Stop(EXIT_BAD_INPUT, f"non-number in {line[:160]!r}") from None
        k = layout.unpack(row, obs, command)
        tau = _torques(_call_step(controller, obs, command, k), J, k, obs.t)
        _write_all(fout, ("TAU %d " % k + " ".join(map(repr, tau.tolist())) + "\n").encode())


class _ControllerRaised(Exception):
    def __init__(self, where: str, exc: BaseException):
        super().__init__(f"controller raised {type(exc).__name__} {where}: {exc}")


def _call_step(controller, obs, command, k: int):
    try:
        return controller.step(obs, command)
    except BaseException as exc:  # noqa: BLE001 - SystemExit and the like end this child, reported
        traceback.print_exc()
        raise _ControllerRaised(f"at tick {k} (t={obs.t:.3f} s)", exc) from None


def serve(spec: str, fin, fout) -> int:
    header = _read_header(fin)
    if header is None:
        return 0
    robot = _robot(header)
    try:
        robot.sensing = sensing_from_header(header)
    except ValueError as exc:
        raise _Stop(EXIT_BAD_INPUT, str(exc)) from None
    version = 2 if "2" in header.get("versions", "").split() else 1
    try:
        control_dt = float(header["control_dt_s"])
    except (KeyError, ValueError):
        raise _Stop(EXIT_BAD_INPUT, "handshake lacks a valid 'control_dt_s' line") from None
    from bench.controllers import registry
    from bench.controllers.seeding import reset_keywords

    try:
        params = json.loads(header["controller_params"]) if header.get("controller_params") else None
        _, controller = registry.make(spec, params)
        extra = {}
        if header.get("seed", "").strip():   # the parent's controller seed, as the parent would give it
            seed = int(header["seed"])
            wanted = reset_keywords(controller)
            extra = {k: v for k, v in (("seed", seed), ("rng", np.random.default_rng(seed))) if k in wanted}
        controller.reset(robot, control_dt, **extra)
    except BaseException as exc:  # noqa: BLE001
        traceback.print_exc()
        raise _ControllerRaised("while being made or in reset()", exc) from None
    binary = header.get("frames", "").strip() == FRAMES
    _write_all(fout, f"READY {version} {'frames=' + FRAMES + ' ' if binary else ''}sealed:{spec}\n".encode())
    layout = ObservationLayout(robot.num_joints, robot.num_feet, version, robot.sensing)
    (_serve_binary if binary else _serve_text)(fin, fout, controller, layout)
    return 0


def main(argv: list[str] | None = None) -> int:
    argv = sys.argv[1:] if argv is None else argv
    if len(argv) != 1:
        print("usage: python -m bench.controllers.sealed_child NAME  (speaks QBX 1 or 2 on stdin/stdout)",
              file=sys.stderr)
        return EXIT_BAD_INPUT
    _die_with_parent()
    _extend_sys_path()
    # The protocol keeps private copies of stdin/stdout; the controller gets /dev/null and stderr.
    rfd, wfd = os.dup(0), os.dup(1)
    null = os.open(os.devnull, os.O_RDONLY)
    os.dup2(null, 0)
    os.close(null)
    sys.stdout.flush()
    os.dup2(2, 1)
    fin = os.fdopen(rfd, "rb")
    fout = os.fdopen(wfd, "wb", buffering=0)
    try:
        return serve(argv[0], fin, fout)
    except _ControllerRaised as exc:
        print(f"{CHILD_SUMMARY}{exc}", file=sys.stderr, flush=True)
        return EXIT_CONTROLLER_RAISED
    except _Stop as exc:
        print(f"{CHILD_SUMMARY}{exc}", file=sys.stderr, flush=True)
        return exc.code
    except BrokenPipeError:
        return 0   # the bench closed its end: the episode is over
    except Exception as exc:  # noqa: BLE001 - e.g. the manifest cannot be read: one line, then the traceback
        traceback.print_exc()
        print(f"{CHILD_SUMMARY}{type(exc).__name__}: {exc}", file=sys.stderr, flush=True)
        return EXIT_BAD_INPUT


if __name__ == "__main__":
    sys.exit(main())
