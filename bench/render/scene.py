"""Offscreen frames of a MuJoCo world, with force arrows added as scene geoms.

Shadows, reflections and multisampling are off: on Mesa's software renderer
they cost more than the rest of the frame together, and a review video does not
need them (``shadows=True`` turns shadows and a reflective floor on, for the
benchmark that measures what they cost). Frames come back top row first, as (height, width, 3) uint8.
"""

from __future__ import annotations

import mujoco
import numpy as np

from bench.render.camera import project
from bench.render.defaults import CAMERAS
from bench.render.gl import make_context

#: Arrow length per newton of force, m (100 N draws as 0.4 m).
FORCE_SCALE_M_PER_N = 0.004
#: Forces below this are not drawn, N.
FORCE_MIN_N = 1.0
FOOT_ARROW_RGBA = np.array([0.15, 0.85, 0.95, 0.9], dtype=np.float32)
PUSH_ARROW_RGBA = np.array([0.95, 0.15, 0.15, 0.95], dtype=np.float32)
#: Shadow map size and floor reflectance used when shadows are asked for (MuJoCo's own default shadow size).
SHADOW_SIZE = 4096
FLOOR_REFLECTANCE = 0.2


class FrameRenderer:
    """One GL context and MuJoCo render context for one model at one size."""

    def __init__(self, model: mujoco.MjModel, width: int, height: int, samples: int = 0, shadows: bool = False):
        self.width, self.height = int(width), int(height)
        g = model.vis.global_
        g.offwidth = max(int(g.offwidth), self.width)
        g.offheight = max(int(g.offheight), self.height)
        model.vis.quality.offsamples = int(samples)
        if shadows:
            model.vis.quality.shadowsize = SHADOW_SIZE
            model.light_castshadow[:] = 1
            model.mat_reflectance[:] = np.maximum(model.mat_reflectance, FLOOR_REFLECTANCE)
        self.model = model
        self.backend, self._gl = make_context(self.width, self.height)
        self._con = mujoco.MjrContext(model, mujoco.mjtFontScale.mjFONTSCALE_100)
        mujoco.mjr_setBuffer(mujoco.mjtFramebuffer.mjFB_OFFSCREEN, self._con)
        self.scene = mujoco.MjvScene(model, maxgeom=max(1000, 4 * model.ngeom + 64))
        for flag in (mujoco.mjtRndFlag.mjRND_SHADOW, mujoco.mjtRndFlag.mjRND_REFLECTION):
            self.scene.flags[flag] = int(bool(shadows))
        self.opt = mujoco.MjvOption()
        self._pert = mujoco.MjvPerturb()
        self.cam = mujoco.MjvCamera()
        self._rect = mujoco.MjrRect(0, 0, self.width, self.height)
        self._buf = np.empty((self.height, self.width, 3), dtype=np.uint8)
        self._eye = np.eye(3).ravel()
        self._zero3 = np.zeros(3)

    def set_camera(self, name: str) -> None:
        """A camera of the world by name; ``follow`` makes it a free camera that the caller aims each frame."""
        if name == "follow":
            self.cam.type = mujoco.mjtCamera.mjCAMERA_FREE
            return
        cid = mujoco.mj_name2id(self.model, mujoco.mjtObj.mjOBJ_CAMERA, name)
        if cid < 0:
            raise ValueError(f"camera {name!r} not in the world (have {', '.join(CAMERAS)})")
        self.cam.type = mujoco.mjtCamera.mjCAMERA_FIXED
        self.cam.fixedcamid = cid

    def update(self, data: mujoco.MjData) -> None:
        mujoco.mjv_updateScene(self.model, data, self.opt, self._pert, self.cam,
                               mujoco.mjtCatBit.mjCAT_ALL, self.scene)

    def add_arrow(self, start: np.ndarray, end: np.ndarray, rgba: np.ndarray, width: float = 0.012) -> None:
        sc = self.scene
        if sc.ngeom >= sc.maxgeom:
            return
        g = sc.geoms[sc.ngeom]
        mujoco.mjv_initGeom(g, mujoco.mjtGeom.mjGEOM_ARROW, self._zero3, self._zero3, self._eye, rgba)
        mujoco.mjv_connector(g, mujoco.mjtGeom.mjGEOM_ARROW, width, start, end)
        sc.ngeom += 1

    def add_forces(self, points: np.ndarray, forces: np.ndarray, rgba: np.ndarray,
                   scale: float = FORCE_SCALE_M_PER_N) -> None:
        """Arrows from each point along its force (rows of (K, 3) arrays)."""
        for p, f in zip(points, forces):
            if float(f @ f) >= FORCE_MIN_N * FORCE_MIN_N:
                self.add_arrow(p, p + f * scale, rgba)

    def add_push(self, point: np.ndarray, force: np.ndarray, scale: float = FORCE_SCALE_M_PER_N) -> None:
        """A push drawn ending at the point it acts on, so the arrow shows where it comes from."""
        if float(force @ force) >= FORCE_MIN_N * FORCE_MIN_N:
            self.add_arrow(point - force * scale, point, PUSH_ARROW_RGBA, width=0.02)

    def project(self, points: np.ndarray) -> np.ndarray:
        """Pixel (x, y) of world points in the view of the last :meth:`update` (NaN behind the camera)."""
        return project(self.scene, points, self.width, self.height)

    def render(self) -> np.ndarray:
        """The current scene as an (height, width, 3) uint8 array, top row first (a view of a reused buffer)."""
        self._gl.make_current()
        mujoco.mjr_render(self._rect, self.scene, self._con)
        mujoco.mjr_readPixels(self._buf, None, self._rect, self._con)
        return self._buf[::-1]

    def close(self) -> None:
        con, gl = getattr(self, "_con", None), getattr(self, "_gl", None)
        if gl is not None:
            try:
                gl.make_current()
                if con is not None:
                    con.free()
            finally:
                gl.free()
        self._con = self._gl = None

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()
