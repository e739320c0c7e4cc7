"""The schema definitions and the JSON Schema generated from them."""

from __future__ import annotations

import dataclasses
import keyword
import math
from pathlib import Path

import jsonschema
import pytest

from bench.scenario import schema, scenario_json_schema
from bench.scenario.validate import yaml_fields
from bench.scenario.yamlload import load_yaml, load_yaml_text

FIXTURES = Path(__file__).parent / "fixtures" / "scenarios"


def all_classes() -> list[type]:
    seen: list[type] = []

    def walk(cls: type) -> None:
        if cls in seen:
            return
        seen.append(cls)
        import typing

        for tp in typing.get_type_hints(cls).values():
            for t in (tp, *typing.get_args(tp), *[a for x in typing.get_args(tp) for a in typing.get_args(x)]):
                if dataclasses.is_dataclass(t) and isinstance(t, type):
                    walk(t)

    walk(schema.Scenario)
    for table in (schema.TERRAIN_KINDS, schema.DISTURBANCE_KINDS, schema.FAULT_KINDS):
        for cls in table.values():
            walk(cls)
    return seen


def test_kind_tables_match_class_kinds():
    for table in (schema.TERRAIN_KINDS, schema.DISTURBANCE_KINDS, schema.FAULT_KINDS):
        for key, cls in table.items():
            assert cls.kind == key
            assert "kind" not in {f.name for f in dataclasses.fields(cls)}  # a class attribute, not a field
    assert set(schema.TERRAIN_KINDS) == {"slope", "stairs", "rough", "blocks", "friction_patch", "soft_patch"}
    assert set(schema.DISTURBANCE_KINDS) == {"push", "push_train", "steady_force"}
    assert set(schema.FAULT_KINDS) == {"derate", "lock", "limp", "latency", "sensor_noise", "sensor_freeze"}


def test_every_class_is_frozen_with_documented_fields():
    for cls in all_classes():
        assert cls.__dataclass_params__.frozen, cls
        for f in yaml_fields(cls):
            assert not keyword.iskeyword(f.name)
            assert f.metadata.get("doc"), f"{cls.__name__}.{f.name} has no doc"


def test_scenario_fields_follow_spec():
    keys = {f.name for f in yaml_fields(schema.Scenario)}
    assert keys == {"name", "description", "tags", "robot", "duration", "timestep", "control_rate", "seed", "ground",
                    "initial", "score_from", "terrain", "payloads", "disturbances", "faults", "commands", "criteria",
                    "trials", "randomize", "sensing"}
    computed = {f.name for f in dataclasses.fields(schema.Scenario)} - keys
    assert {"id", "slug", "source", "content_hash", "document", "variant"} <= computed
    payload = {f.name for f in yaml_fields(schema.Payload)}
    assert payload == {"name", "type", "mass", "size", "offset", "attach_at", "drop_at", "drain", "steps", "axis",
                       "stiffness", "damping", "travel"}


def test_terrain_geometry_helpers():
    s = schema.Stairs(start=1.0, steps=4, rise=0.1, run=0.25, direction="down")
    assert s.end == pytest.approx(2.0) and s.level_change == pytest.approx(-0.4)
    slope = schema.Slope(start=0.0, length=2.0, angle_deg=45.0)
    assert slope.level_change == pytest.approx(2.0)
    b = schema.Blocks(start=0.0, heights=(0.1, 0.2), block_length=0.3, gap=0.1)
    assert b.end == pytest.approx(0.7) and b.level_change == 0.0


def test_register_criterion_extends_the_vocabulary(tmp_path):
    from bench.scenario import load_file, register_criterion, unregister_criterion
    from bench.scoring.criteria import MetricCriterion

    p = tmp_path / "s.yaml"
    p.write_text("name: t\nduration: 5\ncriteria: {my_metric_max: 3}\n")
    with pytest.raises(Exception):
        load_file(p)
    register_criterion(MetricCriterion("my_metric_max", "my_metric", "a user metric", le=10.0))
    try:
        [s] = load_file(p)
        assert s.criteria == {"my_metric_max": 3.0}
        assert scenario_json_schema()["$defs"]["criteria"]["properties"]["my_metric_max"]["maximum"] == 10.0
    finally:
        unregister_criterion("my_metric_max")


# --------------------------------------------------------------------------- JSON Schema


@pytest.fixture(scope="module")
def validator():
    s = scenario_json_schema()
    jsonschema.Draft202012Validator.check_schema(s)
    return jsonschema.Draft202012Validator(s)


def test_schema_is_draft_2020_12_with_docs(validator):
    s = scenario_json_schema()
    assert s["$schema"] == "https://json-schema.org/draft/2020-12/schema"
    assert s["additionalProperties"] is False
    duration = s["properties"]["duration"]
    assert "[s]" in duration["description"] and duration["exclusiveMinimum"] == 0 and duration["maximum"] == 600
    assert s["properties"]["timestep"]["default"] == 0.001
    payload = s["$defs"]["Payload"]
    assert payload["properties"]["type"]["enum"] == ["rigid", "shifting", "tray"]
    assert set(payload["required"]) == {"name", "mass", "size"}
    assert s["$defs"]["Stairs"]["properties"]["rise"]["maximum"] == 0.5


@pytest.mark.parametrize("name", ["full-course.yaml", "_base-trot.yaml", "rear-load-trot.yaml",
                                  "speed-load-grid.yaml"])
def test_fixtures_validate_against_json_schema(validator, name):
    doc = load_yaml(FIXTURES / name).data
    errors = [e.message for e in validator.iter_errors(doc)]
    assert errors == []


@pytest.mark.parametrize("text", [
    "name: t\nduration: 5\ndurration: 5\n",                                  # unknown key
    "name: t\n",                                                              # missing required
    "name: t\nduration: -1\n",                                               # out of range
    "name: t\nduration: 5\nseed: 1.5\n",                                     # not an integer
    "name: t\nduration: 5\npayloads: [{name: a, type: rigd, mass: 1, size: [1, 1, 1]}]\n",  # enum
    "name: t\nduration: 5\npayloads: [{name: a, mass: 1, size: [1, 1]}]\n",  # vector length
    "name: t\nduration: 5\nterrain: [{slop: {start: 0, length: 1, angle_deg: 3}}]\n",  # unknown kind
    "name: t\nduration: 5\nterrain: [{stairs: {start: 0, steps: 3}}]\n",    # neither rise/run nor preset
    "name: t\nduration: 5\ncriteria: {no_fal: true}\n",                      # unknown criterion
    "name: t\nduration: 5\nfaults: [{derate: {at: 1, joints: some, factor: 0.5}}]\n",
])
def test_invalid_documents_fail_json_schema_and_loader(validator, tmp_path, text):
    doc = load_yaml_text(text, "x.yaml").data
    assert list(validator.iter_errors(doc)), "JSON schema accepted it"
    from bench.errors import ScenarioErrors
    from bench.scenario import load_file

    p = tmp_path / "x.yaml"
    p.write_text(text)
    with pytest.raises(ScenarioErrors):
        load_file(p)


def test_extending_file_need_not_repeat_required(validator):
    assert not list(validator.iter_errors({"extends": "base.yaml", "seed": 2}))
    assert list(validator.iter_errors({"extends": "base.yaml", "sed": 2}))


def test_stairs_with_preset_valid(validator):
    doc = {"name": "t", "duration": 5, "terrain": [{"stairs": {"start": 0, "steps": 3, "preset": "ibc-commercial"}}]}
    assert not list(validator.iter_errors(doc))


def test_schema_defaults_are_finite_json():
    import json

    text = json.dumps(scenario_json_schema(), allow_nan=False)
    assert "NaN" not in text and not math.isnan(len(text))
