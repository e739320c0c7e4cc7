"""quadruped-bench: a scenario test bench for legged-robot controllers, backed by MuJoCo."""

__version__ = "0.1.0"

# Before anything imports mujoco: a MUJOCO_GL naming a missing OpenGL library must cost only the videos.
from bench.render.gl import guard_mujoco_gl as _guard_mujoco_gl  # noqa: E402

_guard_mujoco_gl()
