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

from typing import Any

from bench.plugins import PluginTable

ENTRY_POINT_GROUP = "bench.criteria"


def _check(criterion: Any, name: str) -> Any:
    for attr in ("name", "evaluate"):
        if not hasattr(criterion, attr):
            raise TypeError(f"a criterion needs a {attr!r} attribute; got {type(criterion).__name__}")
    if criterion.name != name:
        raise TypeError(f"registered as {name!r} but named {criterion.name!r}")
    return criterion


_table = PluginTable(ENTRY_POINT_GROUP, _check)
#: Entry points that could not be loaded: name -> why.
load_errors = _table.load_errors


def register_criterion(criterion: Any) -> Any:
    """Make ``criterion`` usable in this process under ``criterion.name`` (replaces one of the same name)."""
    return _table.register(getattr(criterion, "name", None), criterion)


def unregister_criterion(name: str) -> None:
    _table.unregister(name)


def criterion_names() -> list[str]:
    """Every registered name, sorted (nothing is imported)."""
    return _table.names()


def get_criterion(name: str) -> Any | None:
    """The criterion called ``name``, or None when there is none or it cannot be loaded (see `load_errors`)."""
    return _table.get(name)


def all_criteria() -> dict[str, Any]:
    """Every criterion that loads, by name (sorted)."""
    return _table.all()


def unit_of(criterion: Any) -> str | None:
    """The criterion's unit without the spacing used in sentences (``" m"`` -> ``"m"``), or None."""
    unit = str(getattr(criterion, "unit", "") or "").strip()
    return unit or None
