"""`bench schema` prints a JSON Schema that every bundled scenario file validates against.

Reference: the `jsonschema` package's draft 2020-12 validator (an implementation
independent of the bench's own loader).
"""

from __future__ import annotations

import json
from pathlib import Path

import jsonschema
import pytest

from bench.cli import main
from bench.scenario.yamlload import load_yaml

REPO = Path(__file__).resolve().parents[1]
BUNDLED = sorted((REPO / "scenarios").rglob("*.yaml"))   # partials (_*.yaml) included: editors open them too


@pytest.fixture(scope="module")
def validator(tmp_path_factory):
    out = tmp_path_factory.mktemp("schema") / "scenario.schema.json"
    assert main(["schema", "-o", str(out)]) == 0
    schema = json.loads(out.read_text())
    jsonschema.Draft202012Validator.check_schema(schema)
    return jsonschema.Draft202012Validator(schema)


def test_schema_prints_to_stdout_as_json(capsys):
    assert main(["schema"]) == 0
    schema = json.loads(capsys.readouterr().out)
    assert schema["$schema"].endswith("2020-12/schema")
    assert {"terrain", "payloads", "disturbances", "faults", "extends", "matrix"} <= set(schema["properties"])


def test_there_is_a_bundled_suite():
    assert len([p for p in BUNDLED if not p.name.startswith("_")]) >= 15


@pytest.mark.parametrize("path", BUNDLED, ids=lambda p: str(p.relative_to(REPO / "scenarios")))
def test_bundled_scenario_validates_against_the_schema(validator, path):
    doc = load_yaml(path).data          # the raw document exactly as the loader reads it
    errors = sorted(validator.iter_errors(doc), key=lambda e: list(e.absolute_path))
    assert not errors, "\n".join(f"{'.'.join(map(str, e.absolute_path))}: {e.message}" for e in errors)


@pytest.mark.parametrize("text,where", [
    ("name: x\nduration: 1\nterain: []\n", ""),                                          # unknown key
    ("name: x\nduration: 1\nterrain:\n  - slope: {start: 0, length: 1, angle_deg: 60}\n", "terrain.0.slope.angle_deg"),
    ("name: x\nduration: 1\npayloads:\n  - {name: a, type: sloshy, mass: 1, size: [1, 1, 1]}\n", "payloads.0.type"),
    ("name: x\nduration: 1\nfaults:\n  - sensor_noise: {sensor: lidar, std: 1}\n", "faults.0.sensor_noise.sensor"),
    ("name: x\nduration: 1\nterrain:\n  - stairs: {start: 0, steps: 3}\n", "terrain.0.stairs"),  # no rise/run/preset
    ("name: x\n", ""),                                                                   # no duration
])
def test_schema_rejects_what_the_loader_rejects(validator, tmp_path, text, where):
    path = tmp_path / "bad.yaml"
    path.write_text(text)
    doc = load_yaml(path).data
    errors = list(validator.iter_errors(doc))
    assert errors
    assert any(".".join(map(str, e.absolute_path)).startswith(where) for e in errors)
    assert main(["check", "-q", str(path)]) == 2
