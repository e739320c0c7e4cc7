"""A table of plugins: objects named by an entry point group, plus ones registered in-process.

Entry point names are read from package metadata without importing anything;
an entry point is loaded the first time its name is asked for, once. A plugin
that cannot be loaded (or that its table's ``check`` refuses) is left out and
the reason kept in ``load_errors``, to be shown where a scenario names it: one
broken package never breaks loading scenarios that do not use it. The fault
kinds (`bench.faults`) and the criteria (`bench.scenario.criteria`) are such
tables.
"""

from __future__ import annotations

from importlib.metadata import entry_points
from typing import Any, Callable


class PluginTable:
    """name -> object: entry points of ``group``, then in-process registrations (which win)."""

    def __init__(self, group: str, check: Callable[[Any, str], Any] | None = None):
        self.group = group
        self.check = check              # (object, name) -> object, raises to refuse it
        self.load_errors: dict[str, str] = {}
        self._in_process: dict[str, Any] = {}
        self._eps: dict[str, Any] | None = None
        self._loaded: dict[str, Any] = {}

    def _entry_points(self) -> dict[str, Any]:
        if self._eps is None:
            try:
                self._eps = {ep.name: ep for ep in entry_points(group=self.group)}
            except Exception:  # noqa: BLE001 - broken package metadata must not break loading scenarios
                self._eps = {}
        return self._eps

    def register(self, name: str, obj: Any) -> Any:
        self._in_process[name] = self.check(obj, name) if self.check else obj
        return obj

    def unregister(self, name: str) -> None:
        self._in_process.pop(name, None)

    def names(self) -> list[str]:
        """Every registered name, sorted, loaded or not (nothing is imported)."""
        return sorted({*self._entry_points(), *self._in_process})

    def get(self, name: str) -> Any | None:
        """The object called ``name``; None when there is none or it cannot be loaded (see ``load_errors``)."""
        if name in self._in_process:
            return self._in_process[name]
        if name not in self._loaded:
            ep = self._entry_points().get(name)
            if ep is None:
                return None
            try:
                obj = ep.load()
                self._loaded[name] = self.check(obj, name) if self.check else obj
            except Exception as exc:  # noqa: BLE001 - a broken plugin is reported where it is named
                self.load_errors[name] = f"{type(exc).__name__}: {exc}"
                self._loaded[name] = None
        return self._loaded[name]

    def all(self) -> dict[str, Any]:
        """Every object that loads, by name (sorted)."""
        return {name: obj for name in self.names() if (obj := self.get(name)) is not None}
