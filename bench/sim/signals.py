"""Per-tick signals a controller logs about itself (an adaptive estimate, a solver status).

A controller that has a ``signals`` attribute (a mapping from name to a number or a
small fixed-size array) once ``reset()`` has returned gets it read after every
``step()``: each value is copied into a column of the trace, saved in ``trace.npz``
as ``signal_<name>`` (float64, one row per control tick, NaN on a tick where the name
was missing). The plots draw them in panels of their own and the HTML report lists
them. A controller without the attribute (or with ``signals = None``) costs nothing
per tick: the runner looks once, after ``reset()``.

Rules (a break is the episode's ``error``, naming the signal and the tick): a name is
a letter then letters, digits or ``_`` (at most ``MAX_NAME_CHARS``); a value is a
real number, a bool or an array of at most ``MAX_SIZE`` numbers whose shape stays
the same for the whole episode; at most ``MAX_SIGNALS`` names.

Signals are the controller's account of itself, not the bench's measurement: the
``trace_sha256`` digest of a result leaves them out (as it leaves out the
controller's compute time), so a controller that starts or stops logging a signal
keeps its digests; every other trace column is unchanged by them.
"""

from __future__ import annotations

import re

import numpy as np

#: Prefix of a signal's key in trace.npz.
PREFIX = "signal_"
MAX_SIGNALS = 32
MAX_SIZE = 64
MAX_NAME_CHARS = 48
_NAME = re.compile(r"^[A-Za-z][A-Za-z0-9_]*$")


class SignalError(ValueError):
    """A signal that breaks the rules; the message names it."""


def signal_names(arrays) -> list[str]:
    """The signal names in a trace's arrays (keys ``signal_<name>``), sorted."""
    return sorted(k[len(PREFIX):] for k in arrays if k.startswith(PREFIX))


def _shape(value) -> tuple:
    try:
        return np.shape(value)
    except Exception:  # noqa: BLE001 - ragged lists and the like: a shape no column has
        return ("?",)


class SignalRecorder:
    """Copies a controller's ``signals`` into per-tick columns (allocated on first sight of each name)."""

    def __init__(self, controller, n_ticks: int):
        self.controller = controller
        self.n_ticks = int(n_ticks)
        self.columns: dict[str, np.ndarray] = {}
        self.shapes: dict[str, tuple] = {}

    @classmethod
    def attach(cls, controller, n_ticks: int) -> "SignalRecorder | None":
        """A recorder when the controller has a ``signals`` mapping after ``reset()``, else None."""
        try:
            sig = getattr(controller, "signals", None)
        except Exception:  # noqa: BLE001 - a property of the controller's own that raises: no signals
            return None
        if sig is None or not hasattr(sig, "items"):
            return None
        return cls(controller, n_ticks)

    def record(self, k: int) -> None:
        """Read the controller's ``signals`` after tick ``k``'s step; raises :class:`SignalError`."""
        sig = self.controller.signals
        if sig is None:
            return
        columns, shapes = self.columns, self.shapes
        for name, value in sig.items():
            col = columns.get(name)
            if col is None:
                col = self._new(name, value, k)
            # Fast paths (a few hundred ns): a Python float for a scalar signal, an ndarray of the
            # recorded shape for an array one; anything else goes through np.shape.
            kind = type(value)
            if kind is float and col.ndim == 1:
                col[k] = value
                continue
            shape = value.shape if kind is np.ndarray else _shape(value)
            if shape != shapes[name]:
                raise SignalError(f"controller signal {name!r} changed shape from {shapes[name]} to {shape} "
                                  f"at tick {k}")
            try:
                col[k] = value
            except Exception as exc:  # noqa: BLE001 - a value numpy cannot store as float64
                raise SignalError(f"controller signal {name!r} at tick {k} is not numeric: {exc}") from None

    def _new(self, name, value, k: int) -> np.ndarray:
        if not isinstance(name, str) or not _NAME.match(name) or len(name) > MAX_NAME_CHARS:
            raise SignalError(f"controller signal name {name!r} at tick {k}: use a letter then letters, digits "
                              f"or '_', at most {MAX_NAME_CHARS} characters")
        if len(self.columns) >= MAX_SIGNALS:
            raise SignalError(f"controller signal {name!r} at tick {k}: more than {MAX_SIGNALS} signals")
        try:
            arr = np.asarray(value, dtype=float)
        except Exception as exc:  # noqa: BLE001
            raise SignalError(f"controller signal {name!r} at tick {k} is not numeric: {exc}") from None
        if arr.size > MAX_SIZE:
            raise SignalError(f"controller signal {name!r} at tick {k} has {arr.size} values; at most {MAX_SIZE}")
        col = np.full((self.n_ticks, *arr.shape), np.nan)
        self.columns[name] = col
        self.shapes[name] = arr.shape
        return col

    def into(self, arrays: dict, n: int) -> None:
        """Add the first ``n`` rows of every column to a trace's arrays as ``signal_<name>``."""
        for name, col in self.columns.items():
            arrays[PREFIX + name] = col[:n]
