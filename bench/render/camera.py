"""The ``follow`` camera of review videos, and world-to-pixel projection of a rendered view.

The follow camera is computed once per video from the whole trace (the episode
is over, so the smoothing can look both ways and does not lag): it aims at a
point between the trunk and the terrain ahead of it, looks ahead along the
heading in proportion to the forward speed, rises and falls with the terrain
ahead (found by casting rays down onto the world's static geometry), looks down
more steeply where the ground ahead drops (stairs down, a downhill slope), and
turns with the trunk's heading slowly enough not to swing on every step.

:func:`project` gives the pixel of a world point in the last rendered view; the
overlays use it to keep the verdict banner off the robot.
"""

from __future__ import annotations

from dataclasses import dataclass

import mujoco
import numpy as np

#: Smoothing of the aim point and of the heading (standard deviation of a Gaussian window), s.
#: Long enough that a trot's sway does not shake the picture (common practice, no source).
POSITION_SIGMA_S = 0.4
HEADING_SIGMA_S = 0.8
#: How far ahead the camera looks at full forward speed, and the speed counted as full, m and m/s.
LOOKAHEAD_M = 0.8
FULL_SPEED_M_S = 0.3
#: Camera distance and elevation on flat ground, in robot standing heights and degrees.
#: The elevation keeps the horizon (and the empty sky above it) just out of a 45 degree field of view.
DISTANCE_HEIGHTS = 6.0
ELEVATION_DEG = -25.0
#: Camera azimuth from the heading, degrees: a three-quarter view from behind and to the right.
AZIMUTH_OFFSET_DEG = 60.0
#: Rays for the terrain height ahead are cast at this rate, Hz (then interpolated).
TERRAIN_SAMPLE_HZ = 25.0


@dataclass
class CameraPath:
    """Free-camera parameters for every trace row (MuJoCo's ``mjvCamera`` fields)."""

    lookat: np.ndarray        # (N, 3) m
    distance: np.ndarray      # (N,) m
    azimuth: np.ndarray       # (N,) deg
    elevation: np.ndarray     # (N,) deg

    def apply(self, cam: mujoco.MjvCamera, k: int) -> None:
        cam.type = mujoco.mjtCamera.mjCAMERA_FREE
        cam.lookat[:] = self.lookat[k]
        cam.distance = float(self.distance[k])
        cam.azimuth = float(self.azimuth[k])
        cam.elevation = float(self.elevation[k])


def smooth(x: np.ndarray, t: np.ndarray, sigma_s: float) -> np.ndarray:
    """Zero-phase Gaussian smoothing of ``x`` (N, ...) sampled at times ``t``; the ends are held, not faded."""
    x = np.asarray(x, dtype=float)
    n = len(x)
    if n < 3 or sigma_s <= 0:
        return x.copy()
    dt = float(np.median(np.diff(t))) or 1e-3
    half = int(min(np.ceil(3.0 * sigma_s / dt), n - 1))
    if half < 1:
        return x.copy()
    k = np.exp(-0.5 * (np.arange(-half, half + 1) * dt / sigma_s) ** 2)
    k /= k.sum()
    flat = x.reshape(n, -1)
    out = np.empty_like(flat)
    for j in range(flat.shape[1]):
        padded = np.concatenate([np.full(half, flat[0, j]), flat[:, j], np.full(half, flat[-1, j])])
        out[:, j] = np.convolve(padded, k, mode="valid")
    return out.reshape(x.shape)


def ground_height(model: mujoco.MjModel, data: mujoco.MjData, xy: np.ndarray, z_from: float) -> float | None:
    """World z of the static terrain below ``xy``: the median of three rays cast down from ``z_from`` 1 cm
    apart (one ray exactly on the seam between two stair blocks can slip through), each passing through
    anything that moves (the robot, payloads). None when nothing static is hit."""
    hits = [_ray_down(model, data, np.asarray(xy, dtype=float) + off, z_from)
            for off in ((0.0, 0.0), (SEAM_PROBE_M, 0.0), (-SEAM_PROBE_M, 0.0))]
    hits = [h for h in hits if h is not None]
    return float(np.median(hits)) if hits else None


#: Spacing of the three rays of :func:`ground_height`, m.
SEAM_PROBE_M = 0.01


def _ray_down(model: mujoco.MjModel, data: mujoco.MjData, xy: np.ndarray, z_from: float) -> float | None:
    pnt = np.array([xy[0], xy[1], z_from], dtype=float)
    down = np.array([0.0, 0.0, -1.0])
    geomid = np.zeros(1, dtype=np.int32)
    for _ in range(8):
        dist = mujoco.mj_ray(model, data, pnt, down, None, 1, -1, geomid)
        if dist < 0 or geomid[0] < 0:
            return None
        hit_z = pnt[2] - dist
        if model.body_weldid[model.geom_bodyid[geomid[0]]] == 0:    # welded to the world: terrain
            return float(hit_z)
        pnt[2] = hit_z - 1e-4                                      # a moving body: look further down
    return None


def follow_path(arrays: dict, model: mujoco.MjModel, data: mujoco.MjData, nominal_height: float) -> CameraPath:
    """The follow camera for every row of a trace (``t``, ``base_pos``, ``base_quat``, ``terrain_height``)."""
    from bench.scoring.metrics import quat_to_rpy

    t = np.asarray(arrays["t"], dtype=float)
    pos = np.asarray(arrays["base_pos"], dtype=float)
    n = len(t)
    yaw = np.unwrap(quat_to_rpy(np.asarray(arrays["base_quat"], dtype=float))[:, 2])
    yaw_s = smooth(yaw, t, HEADING_SIGMA_S)
    pos_s = smooth(pos, t, POSITION_SIGMA_S)
    heading = np.stack([np.cos(yaw_s), np.sin(yaw_s)], axis=1)
    vel = np.gradient(pos_s[:, :2], t, axis=0) if n > 1 else np.zeros((n, 2))
    v_fwd = np.sum(vel * heading, axis=1)
    ahead = LOOKAHEAD_M * np.clip(v_fwd / FULL_SPEED_M_S, -1.0, 1.0)      # signed: walking backwards looks back
    here = np.asarray(arrays.get("terrain_height", np.zeros(n)), dtype=float)
    # The terrain ahead, sampled at TERRAIN_SAMPLE_HZ and interpolated; where no ray hits, the ground here.
    dt = float(np.median(np.diff(t))) if n > 1 else 1.0
    stride = max(1, int(round(1.0 / (TERRAIN_SAMPLE_HZ * dt))))
    rows = np.unique(np.r_[np.arange(0, n, stride), n - 1])
    z_top = float(np.max(pos[:, 2])) + 5.0
    probe = np.sign(ahead) * np.maximum(np.abs(ahead), 0.3 * LOOKAHEAD_M)
    g_rows = []
    for k in rows:
        xy = pos_s[k, :2] + probe[k] * heading[k]
        g = ground_height(model, data, xy, z_top)
        g_rows.append(here[k] if g is None else g)
    g_ahead = smooth(np.interp(t, t[rows], np.asarray(g_rows)), t, POSITION_SIGMA_S)
    here_s = smooth(here, t, POSITION_SIGMA_S)
    h = max(float(nominal_height), 0.1)
    lookat = np.empty((n, 3))
    lookat[:, :2] = pos_s[:, :2] + 0.5 * ahead[:, None] * heading
    # Between the trunk and the ground ahead: the legs, the feet and the next steps stay in the frame.
    lookat[:, 2] = 0.5 * (pos_s[:, 2] + g_ahead)
    drop = here_s - g_ahead                                   # > 0: the ground ahead is lower (going down)
    reach = np.maximum(np.abs(probe), 0.3)
    slope_deg = np.degrees(np.arctan2(drop, reach))
    elevation = np.clip(ELEVATION_DEG - 0.6 * np.maximum(slope_deg, 0.0) + 0.3 * np.maximum(-slope_deg, 0.0),
                        -55.0, -15.0)
    distance = DISTANCE_HEIGHTS * h + 0.8 * np.abs(drop)
    azimuth = np.degrees(yaw_s) + AZIMUTH_OFFSET_DEG
    return CameraPath(lookat, distance, azimuth, elevation)


# ---------------------------------------------------------------- projection

def gl_camera(scene: mujoco.MjvScene):
    """The (average of the stereo pair) OpenGL camera of the last ``mjv_updateScene``."""
    return mujoco.mjv_averageCamera(scene.camera[0], scene.camera[1])


def project(scene: mujoco.MjvScene, points: np.ndarray, width: int, height: int) -> np.ndarray:
    """Pixel coordinates (x right, y down, top-left origin) of world ``points`` (K, 3) in the view that
    ``scene`` was last updated to, at ``width`` x ``height``. Points behind the camera get NaN.

    The perspective is the one ``mjr_render`` sets up (``glFrustum`` from the camera's frustum; the
    half-width follows the viewport's aspect ratio when ``frustum_width`` is 0).
    """
    cam = gl_camera(scene)
    pos, fwd, up = (np.asarray(v, dtype=float) for v in (cam.pos, cam.forward, cam.up))
    right = np.cross(fwd, up)
    near, bottom, top = float(cam.frustum_near), float(cam.frustum_bottom), float(cam.frustum_top)
    half = float(cam.frustum_width) or 0.5 * (width / height) * (top - bottom)
    centre = float(cam.frustum_center)
    d = np.atleast_2d(np.asarray(points, dtype=float)) - pos
    z = d @ fwd
    with np.errstate(divide="ignore", invalid="ignore"):
        xn = (d @ right) * near / z
        yn = (d @ up) * near / z
    px = (xn - (centre - half)) / (2 * half) * width
    py = (1.0 - (yn - bottom) / (top - bottom)) * height
    out = np.stack([px, py], axis=1)
    out[z <= 1e-9] = np.nan
    return out
