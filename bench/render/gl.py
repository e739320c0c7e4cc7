"""OpenGL back ends for headless rendering: one plain function in front of EGL and OSMesa.

MuJoCo ships a GL context class per back end (``mujoco.egl``, ``mujoco.osmesa``,
``mujoco.glfw``). ``MUJOCO_GL`` picks one when set; otherwise EGL (Mesa's
llvmpipe software renderer when there is no GPU) is tried, then OSMesa. The
choice does not depend on when ``mujoco`` was first imported. When no back end
can be made, :class:`RenderUnavailable` carries one line saying what to install.
"""

from __future__ import annotations

import importlib
import os
import sys

#: Back ends tried in this order when MUJOCO_GL is unset.
DEFAULT_ORDER = ("egl", "osmesa")
#: Module holding each back end's GLContext class.
BACKEND_MODULES = {"egl": "mujoco.egl", "osmesa": "mujoco.osmesa", "glfw": "mujoco.glfw"}
#: What a user needs when none of them can be made (Debian package names).
INSTALL_HINT = ("install an OpenGL back end: Debian packages libegl1 libgl1-mesa-dri (then MUJOCO_GL=egl) "
                "or libosmesa6 (then MUJOCO_GL=osmesa)")

#: Set by :func:`guard_mujoco_gl` when the requested back end could not even be loaded.
REQUEST_ENV, PROBLEM_ENV = "BENCH_MUJOCO_GL", "BENCH_MUJOCO_GL_PROBLEM"

_working: str | None = None


class RenderUnavailable(RuntimeError):
    """No OpenGL context could be made; ``str()`` is a single line for the terminal."""


def guard_mujoco_gl() -> None:
    """Let ``import mujoco`` succeed when ``MUJOCO_GL`` names a back end whose library is missing.

    MuJoCo imports the named back end while it is itself being imported and
    catches only ImportError there; PyOpenGL without its library raises
    AttributeError instead, which would stop the whole bench, simulation
    included. So the library is probed first (the same import MuJoCo would do);
    when it cannot be loaded, MuJoCo is imported with rendering off and the
    request is remembered, so that only videos are lost, with a message.
    Called once from ``bench/__init__.py``, before anything imports mujoco.
    """
    if "mujoco" in sys.modules:
        return
    req = os.environ.get("MUJOCO_GL", "").strip().lower()
    if req not in ("egl", "osmesa") or os.environ.get("PYOPENGL_PLATFORM", req).strip().lower() != req:
        return          # nothing requested, or a mismatch MuJoCo reports as an ImportError it handles itself
    os.environ.setdefault("PYOPENGL_PLATFORM", req)      # what mujoco.egl / mujoco.osmesa set themselves
    try:
        importlib.import_module("OpenGL.GL")
        importlib.import_module("OpenGL.EGL" if req == "egl" else "OpenGL.osmesa")
    except Exception as exc:  # noqa: BLE001 - any failure here means the library is not usable
        os.environ[REQUEST_ENV] = req
        os.environ["MUJOCO_GL"] = "disable"
        os.environ[PROBLEM_ENV] = f"{type(exc).__name__}: {str(exc).strip()[:120]}"


def backend_order() -> tuple[str, ...]:
    requested = (os.environ.get(REQUEST_ENV) or os.environ.get("MUJOCO_GL", "")).strip().lower()
    if requested in ("disable", "disabled", "off", "false", "0"):
        return ()
    if requested in BACKEND_MODULES:
        return (requested,)
    return DEFAULT_ORDER


def make_context(width: int, height: int):
    """Return ``(backend_name, context)`` with the context current, or raise :class:`RenderUnavailable`."""
    global _working
    order = backend_order()
    if not order:
        raise RenderUnavailable(f"rendering is switched off (MUJOCO_GL={os.environ.get('MUJOCO_GL')}); "
                                f"unset it or set MUJOCO_GL=egl")
    if _working in order:                      # the back end that worked before, first
        order = (_working,) + tuple(b for b in order if b != _working)
    problems = []
    if os.environ.get(REQUEST_ENV) and os.environ.get(PROBLEM_ENV):
        problems.append(f"{os.environ[REQUEST_ENV]}: {os.environ[PROBLEM_ENV]}")
        order = ()
    for name in order:
        try:
            mod = importlib.import_module(BACKEND_MODULES[name])
            ctx = mod.GLContext(int(width), int(height))
            ctx.make_current()
        except Exception as exc:  # noqa: BLE001 - every failure is reported together below
            first = str(exc).strip().splitlines()[0] if str(exc).strip() else ""
            problems.append(f"{name}: {type(exc).__name__}" + (f" ({first[:120]})" if first else ""))
            continue
        _working = name
        return name, ctx
    raise RenderUnavailable(f"no OpenGL back end could be made [{'; '.join(problems)}]; {INSTALL_HINT}")
