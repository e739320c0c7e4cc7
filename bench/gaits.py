"""The gait names a scenario command may hint (``gait: bound``) and their integer codes.

One small table shared by the scenario schema, the runner (trace column
``gait_hint``), the controllers' observation and the external protocol, so that
none of them imports another for it. Code 0 means no hint; the codes are part of
the documented trace and protocol formats: only ever append a name.
"""

from __future__ import annotations

#: Hintable gaits in code order: code = index + 1 (0 is "no hint").
GAIT_HINTS: tuple[str, ...] = ("stand", "trot", "pace", "bound", "walk")
#: ``trace.npz``'s ``meta_gait_hint_names``: the name of each code, ``none`` for 0.
GAIT_HINT_NAMES: tuple[str, ...] = ("none",) + GAIT_HINTS


def gait_code(name: str | None) -> int:
    """0 for no hint, else the gait's code (1 stand, 2 trot, 3 pace, 4 bound, 5 walk)."""
    return 0 if name is None else GAIT_HINTS.index(name) + 1


def gait_name(code: int) -> str | None:
    """The gait of ``code``, None for 0; ValueError for a code outside the table."""
    code = int(code)
    if code == 0:
        return None
    if not 0 < code <= len(GAIT_HINTS):
        raise ValueError(f"gait code {code} is not one of 0..{len(GAIT_HINTS)}")
    return GAIT_HINTS[code - 1]
