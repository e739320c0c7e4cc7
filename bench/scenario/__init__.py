"""The scenario layer: YAML files -> validated, MuJoCo-free `Scenario` values.

Public API:

- `load_scenarios(paths, roots=())`, `load_file(path, roots=())`
- `derive(scenario, overrides, suffix)`, `expand_trials(scenario)`
- `scenario_id(name, variant)`, `scenario_slug(id)`
- `scenario_json_schema()`
- the criteria registry: `register_criterion`, `unregister_criterion`, `criterion_names`, `get_criterion`
- `get_path` / `set_path` / `resolve_path` (dotted paths into a raw document)
- the schema dataclasses (`Scenario`, `RobotRef`, terrain, payload, disturbance, command classes; fault
  kinds are in `bench.faults`, `FAULT_KINDS` is a live view of that registry)
"""

from bench.errors import ScenarioError, ScenarioErrors
from bench.scenario.criteria import criterion_names, get_criterion, register_criterion, unregister_criterion
from bench.scenario.compose import derive, expand_matrix, load_merged
from bench.scenario.ids import scenario_id, scenario_slug
from bench.scenario.jsonschema import scenario_json_schema
from bench.scenario.loader import find_scenario_files, load_file, load_scenarios
from bench.scenario.paths import get_path, resolve_path, set_path
from bench.scenario.schema import (
    DISTURBANCE_KINDS,
    FAULT_KINDS,
    TERRAIN_KINDS,
    Blocks,
    Choice,
    Command,
    Drain,
    FootForce,
    FrictionPatch,
    Ground,
    HeightScan,
    Initial,
    JointTorque,
    MassStep,
    Payload,
    Push,
    PushTrain,
    RobotRef,
    Rough,
    Scenario,
    Sensing,
    Slope,
    SoftPatch,
    Stairs,
    SteadyForce,
    Uniform,
)
from bench.scenario.trials import expand_trials

__all__ = [name for name in dir() if not name.startswith("_")]
