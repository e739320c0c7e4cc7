"""Defaults of review videos, shared by the command line and the renderer; importable without MuJoCo or OpenGL.

1280x720 is the default frame: stakeholders watch review videos full screen, and
it is the largest 16:9 size a CPU renderer keeps near real time (see
tests/benchmarks/bench_video.py for the measured rates).
"""

#: Frame size of a review video, pixels (width, height).
DEFAULT_SIZE = (1280, 720)
#: Frames per second of a review video.
DEFAULT_FPS = 30.0
#: Animated preview formats (``none``: no preview).
PREVIEW_FORMATS = ("gif", "webp", "none")
#: Camera names: ``follow`` is computed from the trace; the others are cameras of the world.
CAMERAS = ("follow", "track", "side", "top")
