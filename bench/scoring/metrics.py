"""Metrics: a Trace -> named floats, plus the per-tick error series criteria need.

Conventions:
- trunk height error: trunk origin height above the ground under it, minus the
  robot's nominal standing height (the manifest's ``nominal_height``). For quad12
  that is a measurement, 0.294 m: a settled stand on flat ground with the joints
  held at the nominal pose by a joint PD (kp 200 N m/rad, kd 3 N m s/rad). The
  kinematic height of the nominal pose (lowest foot point on the ground) is 4.7 mm
  higher, and a controller that holds the nominal angles stiffly stands up to about
  4 mm high (kp 1000: +3.3 mm, kp 3000: +3.7 mm; kp 100: -3.8 mm; the reference
  stacks, which servo the trunk to ``nominal_height``: -0.7 mm), about 8 % of a
  5 cm ``height_error_max`` before it does anything wrong
  (``python tests/benchmarks/bench_nominal_height.py`` prints the table);
- roll and pitch error: trunk roll and pitch (intrinsic z-y-x Euler angles of the
  trunk orientation) against a level trunk, in degrees;
- drift: horizontal distance from the position at ``score_from`` over ticks whose
  command is zero (standing);
- velocity tracking: trunk velocity in the heading frame (world velocity rotated
  by -yaw) against the commanded ``vx, vy``; yaw rate is the world-z angular
  velocity against the commanded yaw rate. Ticks within ``settle_s`` after a
  command change are left out ("once settled").
Error metrics cover ticks with ``t >= score_from``.

Each metric's meaning is in `METRIC_DOCS` (published as docs/reference/metrics-and-criteria.md).
"""

from __future__ import annotations

import re

import numpy as np

from bench.sim.trace import Trace

#: Time after each command change left out of velocity tracking, s (common practice, no source).
COMMAND_SETTLE_S = 1.0
#: Metric names that hold wall-clock figures (``controller_ms_p99``, ``controller.qp_ms_mean``): they depend on
#: the machine and its load, not on the controller's behaviour.
_TIMING_TOKEN = re.compile(r"(^|[._])(ms|wall|time_ms)([._]|$)")


def is_timing_metric(name: str) -> bool:
    """True for a wall-clock metric (compute time), which comparisons leave out unless asked."""
    return bool(_TIMING_TOKEN.search(name))


#: A joint counts as saturated at this share of its limit.
SATURATION_SHARE = 0.99


def quat_to_rpy(q: np.ndarray) -> np.ndarray:
    """Roll, pitch, yaw (rad) of quaternions (..., 4) in w, x, y, z order; intrinsic z-y-x."""
    w, x, y, z = q[..., 0], q[..., 1], q[..., 2], q[..., 3]
    roll = np.arctan2(2 * (w * x + y * z), 1 - 2 * (x * x + y * y))
    pitch = np.arcsin(np.clip(2 * (w * y - z * x), -1.0, 1.0))
    yaw = np.arctan2(2 * (w * z + x * y), 1 - 2 * (y * y + z * z))
    return np.stack([roll, pitch, yaw], axis=-1)


def quat_rotate(q: np.ndarray, v: np.ndarray) -> np.ndarray:
    """Rotate vectors v (..., 3) by quaternions q (..., 4), w, x, y, z."""
    w = q[..., :1]
    u = q[..., 1:]
    t = 2.0 * np.cross(u, v)
    return v + w * t + np.cross(u, t)


def error_series(trace: Trace) -> dict[str, np.ndarray]:
    """Per-tick series (absolute errors) used for first-violation times and plots."""
    A = trace.arrays
    nominal = float(trace.meta.get("nominal_height", 0.0))
    rpy = quat_to_rpy(A["base_quat"]) if len(trace) else np.zeros((0, 3))
    height = A["base_pos"][:, 2] - A["terrain_height"] - nominal
    yaw = rpy[:, 2]
    c, s = np.cos(yaw), np.sin(yaw)
    v = A["base_linvel"]
    v_heading = np.stack([c * v[:, 0] + s * v[:, 1], -s * v[:, 0] + c * v[:, 1]], axis=-1)
    omega_world = quat_rotate(A["base_quat"], A["base_angvel"]) if len(trace) else np.zeros((0, 3))
    return {
        "height_error": height,
        "roll_error_deg": np.degrees(rpy[:, 0]),
        "pitch_error_deg": np.degrees(rpy[:, 1]),
        "v_heading": v_heading,
        "yaw_rate": omega_world[:, 2],
    }


def _settled_mask(t: np.ndarray, command: np.ndarray, settle_s: float) -> np.ndarray:
    mask = np.ones(len(t), dtype=bool)
    if len(t) == 0:
        return mask
    change = np.flatnonzero(np.any(np.diff(command, axis=0) != 0, axis=1)) + 1
    for i in np.concatenate([[0], change]):
        mask &= ~((t >= t[i]) & (t < t[i] + settle_s))
    return mask


def compute_metrics(trace: Trace, score_from: float = 0.0, settle_s: float = COMMAND_SETTLE_S,
                    controller_stats: dict | None = None) -> tuple[dict[str, float], dict[str, np.ndarray]]:
    """Every metric of a trace, and the series behind them."""
    A = trace.arrays
    n = len(trace)
    t = A["t"]
    series = error_series(trace)
    win = t >= score_from
    if not win.any():
        win = np.ones(n, dtype=bool)
    met: dict[str, float] = {}

    def stat(name: str, x: np.ndarray) -> None:
        xw = np.abs(x[win]) if n else np.zeros(1)
        met[f"{name}_max"] = float(xw.max()) if xw.size else 0.0
        met[f"{name}_mean"] = float(xw.mean()) if xw.size else 0.0

    stat("height_error", series["height_error"])
    hw = series["height_error"][win] if n else np.zeros(1)
    met["height_error_rms"] = float(np.sqrt(np.mean(hw ** 2))) if hw.size else 0.0
    met["height_error_signed_mean"] = float(hw.mean()) if hw.size else 0.0
    stat("roll_error_deg", series["roll_error_deg"])
    stat("pitch_error_deg", series["pitch_error_deg"])

    xy = A["base_pos"][:, :2]
    standing = win & np.all(A["command"] == 0, axis=1)
    if n and standing.any():
        ref = xy[np.argmax(win)]
        drift = np.linalg.norm(xy - ref, axis=1)
        series["drift"] = np.where(standing, drift, 0.0)
        met["drift_max"] = float(drift[standing].max())
    else:
        series["drift"] = np.zeros(n)
        met["drift_max"] = 0.0
    met["distance"] = float(np.linalg.norm(xy[-1] - xy[0])) if n else 0.0
    met["path_length"] = float(np.sum(np.linalg.norm(np.diff(xy, axis=0), axis=1))) if n > 1 else 0.0

    settled = win & _settled_mask(t, A["command"], settle_s)
    if n and settled.any():
        ev = series["v_heading"][settled] - A["command"][settled, :2]
        met["velocity_rmse"] = float(np.sqrt(np.mean(np.sum(ev ** 2, axis=1))))
        ey = series["yaw_rate"][settled] - A["command"][settled, 2]
        met["yaw_rate_rmse"] = float(np.sqrt(np.mean(ey ** 2)))
    else:
        met["velocity_rmse"] = 0.0
        met["yaw_rate_rmse"] = 0.0

    lim = A["torque_limit"]
    sat = np.any(np.abs(A["joint_torque"]) >= SATURATION_SHARE * np.maximum(lim, 1e-12), axis=1) if n else np.zeros(0)
    met["torque_saturation"] = float(sat.mean()) if n else 0.0
    ms = A["controller_ms"]
    met["controller_ms_p50"] = float(np.percentile(ms, 50)) if n else 0.0
    met["controller_ms_p99"] = float(np.percentile(ms, 99)) if n else 0.0
    met["controller_ms_max"] = float(ms.max()) if n else 0.0
    met["fell"] = 1.0 if trace.meta.get("status") == "fell" else 0.0
    met["survival_time_s"] = float(t[-1] + trace.meta.get("control_dt", 0.0)) if n else 0.0
    met["total_mass_max"] = float(A["total_mass"].max()) if n else 0.0
    met["ext_impulse_ns"] = float(np.sum(np.linalg.norm(A["ext_force"], axis=1)) * trace.meta.get("control_dt", 0.0))
    for k, v in (controller_stats or {}).items():
        if np.isfinite(v):
            met[f"controller.{k}"] = float(v)
    return met, series


#: What each metric of ``compute_metrics`` means (published by `python -m bench.docgen`; a test checks that
#: every metric computed has an entry). ``controller.<name>`` metrics come from a controller's ``stats()``.
METRIC_DOCS = {
    "height_error_max": "largest |trunk height error|, m: trunk origin height above the ground under it minus "
                        "the nominal standing height",
    "height_error_mean": "mean |trunk height error|, m",
    "height_error_rms": "RMS trunk height error, m",
    "height_error_signed_mean": "mean signed trunk height error, m (negative: the trunk sags)",
    "roll_error_deg_max": "largest |roll| of the trunk (intrinsic z-y-x Euler angles) against level, deg",
    "roll_error_deg_mean": "mean |roll| of the trunk, deg",
    "pitch_error_deg_max": "largest |pitch| of the trunk against level, deg",
    "pitch_error_deg_mean": "mean |pitch| of the trunk, deg",
    "drift_max": "largest horizontal distance from the position at score_from, over ticks commanded to stand, m",
    "distance": "net horizontal distance travelled over the episode, m",
    "path_length": "horizontal path length travelled, m",
    "velocity_rmse": "RMSE of the heading-frame trunk velocity against the commanded vx, vy, leaving out "
                     "1 s after each command change, m/s",
    "yaw_rate_rmse": "RMSE of the world-z angular velocity against the commanded yaw rate, same window, rad/s",
    "torque_saturation": "share of ticks with any joint at 99 % of its (possibly derated) torque limit",
    "controller_ms_p50": "median controller compute time per tick, ms (wall clock)",
    "controller_ms_p99": "99th percentile of controller compute time per tick, ms (wall clock)",
    "controller_ms_max": "largest controller compute time of a tick, ms (wall clock)",
    "fell": "1 when the robot fell (trunk, hip or thigh touched the ground, or the trunk origin dropped below "
            "40 % of the nominal height above the ground under it), else 0",
    "survival_time_s": "simulated time until the episode ended (the fall, or the end), s",
    "total_mass_max": "largest robot-plus-payload mass during the episode, kg",
    "ext_impulse_ns": "sum over ticks of |disturbance force| times the control period, N s",
}
