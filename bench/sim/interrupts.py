"""Telling the user's Ctrl-C apart from a ``KeyboardInterrupt`` raised by controller code.

A controller is untrusted code: whatever it raises (``SystemExit`` from
``sys.exit`` or ``argparse``, ``KeyboardInterrupt``, ``GeneratorExit``...) is a
fault of its episode, never the end of the run. Only a real ``SIGINT`` (the user
pressing Ctrl-C while episodes run in this process) must still stop the run.

:class:`UserInterrupts`, entered around controller calls, tells the two apart:

- on the main thread with Python's default ``SIGINT`` handler, it puts in a
  handler that does the same (raise ``KeyboardInterrupt``) and also counts the
  signal, so a ``KeyboardInterrupt`` with no signal counted came from code;
- where ``SIGINT`` is ignored (the bench's worker processes: the parent decides
  what stops) or off the main thread (Python delivers signals to the main
  thread only), every ``KeyboardInterrupt`` came from code;
- on the main thread under a handler someone else installed, it cannot tell and
  treats a ``KeyboardInterrupt`` as the user's (the run stops, as Ctrl-C asks).
"""

from __future__ import annotations

import signal
import threading

_received = 0   # SIGINTs counted by _on_sigint in this process
_depth = 0      # UserInterrupts contexts entered with _on_sigint installed
_previous = None


def _on_sigint(signum, frame) -> None:
    global _received
    _received += 1
    raise KeyboardInterrupt


class UserInterrupts:
    """While entered, ``by_user(exc)`` says whether ``exc`` is the user's Ctrl-C (see the module docstring)."""

    def __init__(self) -> None:
        self._mark = 0
        self._installed = False
        self._unknown = False

    def __enter__(self) -> "UserInterrupts":
        global _depth, _previous
        self._mark = _received
        if threading.current_thread() is not threading.main_thread():
            return self
        try:
            current = signal.getsignal(signal.SIGINT)
            if current is _on_sigint:
                _depth += 1
                self._installed = True
            elif current is signal.default_int_handler:
                _previous = signal.signal(signal.SIGINT, _on_sigint)
                _depth += 1
                self._installed = True
            elif current not in (signal.SIG_IGN, signal.SIG_DFL, None):
                self._unknown = True
        except ValueError:  # not the main interpreter
            self._unknown = True
        return self

    def __exit__(self, *exc) -> None:
        global _depth, _previous
        if not self._installed:
            return
        self._installed = False
        _depth -= 1
        if _depth == 0:
            try:
                if signal.getsignal(signal.SIGINT) is _on_sigint:
                    signal.signal(signal.SIGINT, _previous or signal.default_int_handler)
            except ValueError:
                pass
            _previous = None

    def by_user(self, exc: BaseException) -> bool:
        """True when ``exc`` is a ``KeyboardInterrupt`` from a real ``SIGINT`` (or one that cannot be told apart)."""
        if not isinstance(exc, KeyboardInterrupt):
            return False
        return _received > self._mark or self._unknown


def raised_reason(exc: BaseException, where: str) -> str:
    """The reason of an episode whose controller raised ``exc`` ``where`` (e.g. ``in reset()``).

    ``SystemExit`` names its exit code: ``sys.exit`` and ``argparse`` end a program, not the run.
    """
    name = type(exc).__name__
    if isinstance(exc, SystemExit):
        return f"controller raised {name} {where}: exit code {exc.code!r} (a controller cannot end the run)"
    if isinstance(exc, Exception):
        return f"controller raised {name} {where}: {exc}"
    text = " ".join(str(exc).split())
    return f"controller raised {name} {where}" + (f": {text}" if text else "")
