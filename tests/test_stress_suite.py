"""The bundled suite: valid, organised by what it stresses, and covering every primitive."""

from __future__ import annotations

import math

from pathlib import Path

import pytest

from bench.cli import main
from bench.gaits import GAIT_HINTS
from bench.scenario import DISTURBANCE_KINDS, FAULT_KINDS, TERRAIN_KINDS, load_scenarios
from bench.scenario.schema import SENSORS, STAIR_PRESETS
from bench.scenario.yamlload import load_yaml

REPO = Path(__file__).resolve().parents[1]
SCENARIOS = REPO / "scenarios"
FOLDERS = ("basics", "payload", "locomotion", "terrain", "disturbance", "faults", "demo", "gaits")


@pytest.fixture(scope="module")
def suite():
    return load_scenarios([str(SCENARIOS)])


def test_bench_check_passes_on_the_bundled_suite(capsys):
    assert main(["check", str(SCENARIOS)]) == 0
    out = capsys.readouterr().out
    assert "orchard-sprayer" in out and "trot-load-sweep[mass=6]" in out     # the expanded list


def test_folders_by_what_they_stress(suite):
    files = [p for p in SCENARIOS.rglob("*.yaml") if not p.name.startswith("_")]
    assert len(files) >= 15
    for folder in FOLDERS:
        assert any(p.parent.name == folder for p in files), folder
    assert {p.parent.name for p in files} <= set(FOLDERS)


def test_every_file_says_what_it_stresses():
    for path in SCENARIOS.rglob("*.yaml"):
        if path.name.startswith("_"):
            continue
        doc = load_yaml(path).data
        desc = " ".join(str(doc.get("description", "")).split())
        assert len(desc.split()) >= 20, f"{path.name}: description too short"
        assert "stress" in desc.lower(), f"{path.name}: description does not say what it stresses"


def test_every_primitive_appears_in_the_suite(suite):
    seen = {"terrain": set(), "disturbance": set(), "fault": set(), "payload": set(), "schedule": set(),
            "preset": set(), "sensor": set(), "direction": set(), "gait": set()}
    for sc in suite:
        for piece in sc.terrain:
            seen["terrain"].add(piece.kind)
            if piece.kind == "stairs":
                seen["direction"].add(piece.direction)
                if piece.preset:
                    seen["preset"].add(piece.preset)
        for d in sc.disturbances:
            seen["disturbance"].add(d.kind)
        seen["gait"].update(c.gait for c in sc.commands if c.gait is not None)
        for f in sc.faults:
            seen["fault"].add(f.kind)
            if f.kind == "sensor_noise":
                seen["sensor"].add(f.sensor)
        for p in sc.payloads:
            seen["payload"].add(p.type)
            for key in ("attach_at", "drop_at", "drain", "steps"):
                if getattr(p, key) is not None:
                    seen["schedule"].add(key)
    assert seen["terrain"] == set(TERRAIN_KINDS)
    assert seen["disturbance"] == set(DISTURBANCE_KINDS)
    assert seen["fault"] == set(FAULT_KINDS)
    assert seen["payload"] == {"rigid", "shifting", "tray"}
    assert seen["schedule"] == {"attach_at", "drop_at", "drain", "steps"}
    assert seen["preset"] == set(STAIR_PRESETS)
    assert seen["direction"] == {"up", "down"}
    assert seen["sensor"] == set(SENSORS)
    assert seen["gait"] == set(GAIT_HINTS)
    # Composition is used too: a file that extends another, and matrices that expand into variants.
    assert any(sc.variant for sc in suite)
    assert any("extends" in load_yaml(p).data for p in SCENARIOS.rglob("*.yaml"))
    # ...and randomised trials judged on a pass rate
    assert any(sc.trials > 1 and sc.randomize and sc.criteria.get("pass_rate_min") for sc in suite)


def test_the_orchard_sprayer_demo_has_what_it_promises(suite):
    demo = next(sc for sc in suite if sc.id == "orchard-sprayer")
    kinds = {p.kind for p in demo.terrain}
    assert {"slope", "stairs"} <= kinds
    liquid = next(p for p in demo.payloads if p.type == "shifting")
    assert liquid.drain is not None and liquid.drain.final_mass < liquid.mass / 2
    assert {d.kind for d in demo.disturbances} == {"push", "steady_force"}
    # gusts come from the crosswind's side and stay realistic: drag grows with the square of the wind
    # speed, so a gust of at most 1.5 times the mean speed adds at most 1.5^2 - 1 = 1.25 times the
    # steady force (gust factor: common practice, no source)
    wind = next(d for d in demo.disturbances if d.kind == "steady_force")
    gusts = [d for d in demo.disturbances if d.kind == "push"]
    assert len(gusts) >= 3
    for g in gusts:
        assert g.force[1] * wind.force[1] > 0
        assert math.hypot(*g.force) <= 1.25 * math.hypot(*wind.force)


def test_list_shows_the_bundled_suite(suite, capsys):
    assert main(["list", "scenarios"]) == 0
    listed = {line.split()[0] for line in capsys.readouterr().out.splitlines() if line.strip()}
    assert {sc.id for sc in suite} <= listed


def test_every_bundled_world_compiles(suite):
    from bench.world.build import build_world

    for sc in suite:
        world = build_world(sc)
        assert world.model.nbody > 10, sc.id
