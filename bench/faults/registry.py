"""The fault-kind registry: one table, name -> `FaultKind`, for validation, world building and the episode.

A fault kind is one module (the built-ins are `bench.faults.<kind>`) that
declares, in one place:

- ``schema``: a frozen dataclass declared with `bench.fieldspec.spec`,
  with a class attribute ``kind`` equal to its name and a field ``at`` (the
  switch-on time, s). The scenario stage validates and documents it; it must
  import no MuJoCo. Optional methods: ``label()`` (the event caption) and
  ``joint_refs()`` (``(relative field path, joint name)`` pairs that the robot
  checks confirm against the manifest).
- ``compile(items, ctx) -> Effect | None``: run once per episode by the sim
  stage with every fault of this kind as ``(index in faults:, fault)`` pairs and
  a `FaultContext`; the returned `Effect` is what acts per tick.
- ``build_world(items, ctx)`` (optional): run by the world stage before the
  model is compiled, to add what the fault needs to the ``MjSpec``.

Kinds are found through the entry point group ``bench.faults`` (each entry
point names a `FaultKind` object; the built-ins are registered there by this
package's own ``pyproject.toml``, exactly as a user's would be) and through
`register_fault_kind` for a kind defined in-process.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Iterable, Iterator, Mapping
from dataclasses import dataclass
from typing import Any, Callable

from bench.plugins import PluginTable

ENTRY_POINT_GROUP = "bench.faults"


class Effect:
    """What a kind's compile step returns; the episode calls only the hooks whose flag is set.

    ``switch_ticks()`` lists the control ticks at which ``switch(k)`` runs (at the start of the tick,
    before the physics step): that is where an effect turns itself on and sets its flags. While
    ``observing``, ``observe(obs)`` runs every tick on the controller's observation (after the true
    state is recorded); while ``commanding``, ``command(k, tau) -> tau`` on the controller's torques
    before the torque limits; while ``applying``, ``apply(applied)`` on the limited torques, in place.
    With no flag set an effect costs nothing per tick. Effects of one phase run in ``order`` (lower
    first), then in the order of their first fault in the scenario.
    """

    order: int = 100
    observing: bool = False
    commanding: bool = False
    applying: bool = False

    def switch_ticks(self) -> Iterable[int]:
        return ()

    def switch(self, k: int) -> None:
        """Turn on what is due at tick ``k``."""

    def observe(self, obs: Any) -> None:
        """Change the controller's observation in place."""

    def command(self, k: int, tau: Any) -> Any:
        return tau

    def apply(self, applied: Any) -> None:
        """Change the torques about to be applied, in place."""


@dataclass
class FaultContext:
    """What a compile step may use: the compiled world, this episode's data and its schedules.

    ``limit_now`` is the torque limit array the episode clips to (change it in place); ``rng`` is the
    episode's generator for sensor faults (draws must stay in tick order to be reproducible).
    """

    model: Any
    data: Any
    world: Any
    ctrl_dt: float
    n_ticks: int
    joint_index: dict[str, int]
    nominal_limits: Any
    limit_now: Any
    rng: Any

    def first_tick(self, at: float) -> int:
        """The first control tick ``k`` with ``k * ctrl_dt >= at`` (the episode's clock), or ``n_ticks``."""
        k = max(int(math.floor(at / self.ctrl_dt)) - 1, 0)
        while k * self.ctrl_dt < at:
            k += 1
        return min(k, self.n_ticks)


@dataclass
class WorldContext:
    """What a world step may use: the robot's ``MjSpec`` before compiling, and the scenario."""

    spec: Any
    scenario: Any


@dataclass(frozen=True)
class FaultKind:
    """One fault kind: its schema (scenario stage), world step and compile step (see the module docstring)."""

    schema: type
    compile: Callable[[list, FaultContext], Effect | None]
    build_world: Callable[[list, WorldContext], None] | None = None

    @property
    def name(self) -> str:
        return self.schema.kind


def _check(kind: Any, name: str) -> FaultKind:
    if not isinstance(kind, FaultKind):
        raise TypeError(f"expected a bench.faults.FaultKind, got {type(kind).__name__}")
    cls = kind.schema
    if not (dataclasses.is_dataclass(cls) and isinstance(getattr(cls, "kind", None), str)):
        raise TypeError("the schema must be a dataclass with a class attribute 'kind'")
    if cls.kind != name:
        raise TypeError(f"registered as {name!r} but its schema's kind is {cls.kind!r}")
    if "at" not in {f.name for f in dataclasses.fields(cls)}:
        raise TypeError(f"fault kind {cls.kind!r} has no field 'at' (its switch-on time)")
    return kind


_table = PluginTable(ENTRY_POINT_GROUP, _check)
#: Entry points that could not be loaded: name -> why.
load_errors = _table.load_errors


def register_fault_kind(kind: FaultKind) -> FaultKind:
    """Make ``kind`` available to scenarios in this process (replaces a kind of the same name)."""
    return _table.register(getattr(getattr(kind, "schema", None), "kind", None), kind)


def unregister_fault_kind(name: str) -> None:
    _table.unregister(name)


def fault_kinds() -> dict[str, FaultKind]:
    """Every kind that loads, by name: entry points and in-process registrations (which win)."""
    return _table.all()


def fault_kind(name: str) -> FaultKind:
    kind = _table.get(name)
    if kind is None:
        why = load_errors.get(name)
        raise KeyError(f"fault kind {name!r} cannot be loaded: {why}" if why else f"unknown fault kind {name!r}")
    return kind


class SchemaTable(Mapping):
    """A live view kind name -> schema class (what the validator and the JSON Schema read)."""

    def __getitem__(self, name: str) -> type:
        return fault_kinds()[name].schema

    def __iter__(self) -> Iterator[str]:
        return iter(fault_kinds())

    def __len__(self) -> int:
        return len(fault_kinds())

    def __repr__(self) -> str:
        return f"SchemaTable({list(self)})"

    @property
    def load_errors(self) -> dict[str, str]:
        """Registered kinds that could not be loaded: name -> why."""
        return load_errors


def group_by_kind(faults: Iterable[Any]) -> list[tuple[FaultKind, list[tuple[int, Any]]]]:
    """The faults of a scenario as ``(kind, [(index, fault), ...])``, kinds in order of first appearance."""
    groups: dict[str, list[tuple[int, Any]]] = {}
    for i, f in enumerate(faults):
        groups.setdefault(f.kind, []).append((i, f))
    return [(fault_kind(name), items) for name, items in groups.items()]
