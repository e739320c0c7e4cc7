"""Fault kinds: one module per kind (schema, world step, compile step and per-tick effect), one registry.

See `bench.faults.registry` for what a kind declares and how it is found. The
built-in kinds are ``derate``, ``lock``, ``limp``, ``latency``,
``sensor_noise`` and ``sensor_freeze``. Importing this package imports no
MuJoCo: the scenario stage reads the schemas through it.
"""

from bench.faults.registry import (
    ENTRY_POINT_GROUP,
    Effect,
    FaultContext,
    FaultKind,
    SchemaTable,
    WorldContext,
    fault_kind,
    fault_kinds,
    group_by_kind,
    register_fault_kind,
    unregister_fault_kind,
)

__all__ = ["ENTRY_POINT_GROUP", "Effect", "FaultContext", "FaultKind", "SchemaTable", "WorldContext", "fault_kind",
           "fault_kinds", "group_by_kind", "register_fault_kind", "unregister_fault_kind"]
