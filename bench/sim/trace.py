"""The Trace: what an episode recorded, one row per control tick.

Keys and meanings are the documented ``trace.npz`` format (`KEY_DOCS`, published as
docs/reference/result-files.md); extra keys are allowed and never change meaning. ``meta`` carries the scalars scoring needs
(nominal height, control period, fall time) so that scoring reads only a Trace.
"""

from __future__ import annotations

import io
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from bench.fileio import write_atomic

#: Keys the documented trace.npz format promises, in the order they are documented.
CONTRACT_KEYS = (
    "t", "base_pos", "base_quat", "base_linvel", "base_angvel", "joint_pos", "joint_vel",
    "joint_torque", "foot_pos", "foot_force", "command", "total_mass", "com_pos",
    "ext_force", "terrain_height",
)
#: Extra keys this bench adds (allowed by the contract).
EXTRA_KEYS = ("qpos", "torque_limit", "controller_ms", "foot_contact", "payload_mass")
#: Extra keys present only when the scenario uses what they record: ``gait_hint`` (int8 per row: 0 none,
#: 1 stand, 2 trot, 3 pace, 4 bound, 5 walk; the names in ``meta["gait_hint_names"]``, comma-separated).
OPTIONAL_KEYS = ("gait_hint",)
#: What each trace key holds (N = control ticks, J = joints, F = feet, in manifest order; world frame z-up,
#: quaternions w, x, y, z). Published by `python -m bench.docgen`; a test checks every key has an entry.
KEY_DOCS = {
    "t": "(N,) time of the tick, s",
    "base_pos": "(N, 3) trunk origin, world, m",
    "base_quat": "(N, 4) trunk orientation, world, w x y z",
    "base_linvel": "(N, 3) trunk linear velocity, world, m/s",
    "base_angvel": "(N, 3) trunk angular velocity, body frame, rad/s",
    "joint_pos": "(N, J) joint angles, rad",
    "joint_vel": "(N, J) joint velocities, rad/s",
    "joint_torque": "(N, J) torque applied, after the (possibly derated) limits, N m",
    "foot_pos": "(N, F, 3) foot site positions, world, m",
    "foot_force": "(N, F, 3) ground reaction force on each foot, world, N",
    "command": "(N, 3) velocity command `vx, vy, yaw_rate`, body frame",
    "total_mass": "(N,) robot plus every carried payload at that tick, kg",
    "com_pos": "(N, 3) centre of mass of robot plus carried payloads, world, m",
    "ext_force": "(N, 3) sum of the disturbance forces acting, world, N",
    "terrain_height": "(N,) ground height under the trunk, m",
    "qpos": "(N, nq) full MuJoCo position state, for exact replay",
    "torque_limit": "(N, J) torque limits in force (after derating), N m",
    "controller_ms": "(N,) controller compute time of the tick, ms (wall clock; left out of the trace digest)",
    "foot_contact": "(N, F) foot touching the ground (bool)",
    "payload_mass": "(N, P) mass of each payload at that tick, kg (0 while not attached)",
    "gait_hint": "(N,) int8 gait hint of the tick's command: 0 none, 1 stand, 2 trot, 3 pace, 4 bound, 5 walk "
                 "(names in `meta_gait_hint_names`); only when a command of the scenario sets `gait:`",
    "signal_<name>": "(N, ...) a signal the controller logged each tick (its `signals` mapping), float64, NaN "
                     "where it was missing; left out of the trace digest",
}


@dataclass
class Trace:
    arrays: dict[str, np.ndarray]
    meta: dict[str, float | int | str] = field(default_factory=dict)

    def __getitem__(self, key: str) -> np.ndarray:
        return self.arrays[key]

    def __len__(self) -> int:
        return len(self.arrays["t"])

    @classmethod
    def allocate(cls, n: int, n_joints: int, n_feet: int, nq: int, n_payloads: int) -> "Trace":
        z = np.zeros
        arrays = {
            "t": z(n), "base_pos": z((n, 3)), "base_quat": z((n, 4)), "base_linvel": z((n, 3)),
            "base_angvel": z((n, 3)), "joint_pos": z((n, n_joints)), "joint_vel": z((n, n_joints)),
            "joint_torque": z((n, n_joints)), "foot_pos": z((n, n_feet, 3)), "foot_force": z((n, n_feet, 3)),
            "command": z((n, 3)), "total_mass": z(n), "com_pos": z((n, 3)), "ext_force": z((n, 3)),
            "terrain_height": z(n), "qpos": z((n, nq)), "torque_limit": z((n, n_joints)),
            "controller_ms": z(n), "foot_contact": z((n, n_feet), dtype=bool),
            "payload_mass": z((n, n_payloads)),
        }
        return cls(arrays)

    def truncate(self, n: int) -> None:
        for k, v in self.arrays.items():
            self.arrays[k] = v[:n]

    def to_npz_bytes(self) -> bytes:
        buf = io.BytesIO()
        payload = dict(self.arrays)
        for k, v in self.meta.items():
            payload[f"meta_{k}"] = np.asarray(v)
        np.savez_compressed(buf, **payload)
        return buf.getvalue()

    def save(self, path: str | Path) -> None:
        """Write atomically (see :mod:`bench.fileio`)."""
        write_atomic(path, self.to_npz_bytes())

    @classmethod
    def load(cls, path: str | Path) -> "Trace":
        with np.load(path, allow_pickle=False) as z:
            arrays, meta = {}, {}
            for k in z.files:
                if k.startswith("meta_"):
                    v = z[k]
                    meta[k[5:]] = v.item() if v.shape == () else v
                else:
                    arrays[k] = z[k]
        return cls(arrays, meta)
