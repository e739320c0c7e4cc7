"""The criteria registry: one table of the criteria a scenario may set, used by validation, scoring and `bench list`.

A criterion is an object with ``name``, ``description``, ``unit``,
``evaluate(metrics, series, trace, limit, score_from) -> result`` and, for
validation and margins, optional attributes: ``boolean`` (a yes/no criterion,
set with ``true``; default False), ``ge``/``le`` (the limits a scenario may
write; default none), ``direction`` (``"max"``: the value must stay at or
under the limit, a ceiling; ``"min"``: at or over it, a floor) and ``scope``
(``"trials"`` for one judged over a scenario's trials, not per episode).

Criteria are found through the entry point group ``bench.criteria`` (the
built-ins are registered there by this package's own ``pyproject.toml``,
exactly as a user's would be) and through `register_criterion` in-process.
Names come from package metadata without importing anything; one criterion's
module is imported when a scenario first uses it, so checking a scenario does
not import every plugin.
"""

from __future__ import annotations

from importlib.metadata import entry_points
from typing import Any

ENTRY_POINT_GROUP = "bench.criteria"

_in_process: dict[str, Any] = {}
_entry_points: dict[str, Any] | None = None   # name -> EntryPoint (not yet loaded)
_loaded: dict[str, Any] = {}
#: Entry points that could not be loaded: name -> why.
load_errors: dict[str, str] = {}


def _eps() -> dict[str, Any]:
    global _entry_points
    if _entry_points is None:
        try:
            _entry_points = {ep.name: ep for ep in entry_points(group=ENTRY_POINT_GROUP)}
        except Exception:  # noqa: BLE001 - broken package metadata must not break loading scenarios
            _entry_points = {}
    return _entry_points


def register_criterion(criterion: Any) -> Any:
    """Make ``criterion`` usable in this process under ``criterion.name`` (replaces one of the same name)."""
    for attr in ("name", "evaluate"):
        if not hasattr(criterion, attr):
            raise TypeError(f"a criterion needs a {attr!r} attribute; got {type(criterion).__name__}")
    _in_process[criterion.name] = criterion
    return criterion


def unregister_criterion(name: str) -> None:
    _in_process.pop(name, None)


def criterion_names() -> list[str]:
    """Every registered name, sorted (nothing is imported)."""
    return sorted({*_eps(), *_in_process})


def get_criterion(name: str) -> Any | None:
    """The criterion called ``name``, or None when there is none or it cannot be loaded (see `load_errors`)."""
    if name in _in_process:
        return _in_process[name]
    if name not in _loaded:
        ep = _eps().get(name)
        if ep is None:
            return None
        try:
            _loaded[name] = ep.load()
        except Exception as exc:  # noqa: BLE001 - a broken plugin is reported where it is used
            load_errors[name] = f"{type(exc).__name__}: {exc}"
            _loaded[name] = None
    return _loaded[name]


def all_criteria() -> dict[str, Any]:
    """Every criterion that loads, by name (sorted)."""
    out = {}
    for name in criterion_names():
        crit = get_criterion(name)
        if crit is not None:
            out[name] = crit
    return out


def unit_of(criterion: Any) -> str | None:
    """The criterion's unit without the spacing used in sentences (``" m"`` -> ``"m"``), or None."""
    unit = str(getattr(criterion, "unit", "") or "").strip()
    return unit or None
