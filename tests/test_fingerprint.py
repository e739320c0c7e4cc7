"""Verdict fingerprint: each input that decides a verdict changes the digest and its own part, nothing else does."""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
import textwrap
from pathlib import Path
from types import SimpleNamespace

import pytest

from bench.run.fingerprint import PARTS, Fingerprint, controller_identity, robot_part, stale_reason, verdict_fingerprint
from bench.scenario.loader import load_file
from bench.sim.episode import EpisodeLimits

REPO = Path(__file__).resolve().parents[1]
LIMITS = EpisodeLimits(tick_timeout_s=2.0, episode_timeout_s=600.0)

SCENARIO = """\
name: fp-stand
robot: {manifest: robot/manifest.yaml}
duration: 1.0
criteria:
  no_fall: true
"""


@pytest.fixture
def world(tmp_path):
    """A copy of models/quad12 whose MJCF includes one more file, a scenario using it, a controller module."""
    robot = tmp_path / "robot"
    shutil.copytree(REPO / "models" / "quad12", robot)
    xml = robot / "quad12.xml"
    text = xml.read_text()
    xml.write_text(text.replace('<mujoco model="quad12">', '<mujoco model="quad12">\n  <include file="extra.xml"/>', 1))
    (robot / "extra.xml").write_text('<mujoco><custom><numeric name="fp_test" data="1"/></custom></mujoco>\n')
    (tmp_path / "s.yaml").write_text(SCENARIO)
    (tmp_path / "fp_ctrl_mod.py").write_text("class Ctrl:\n    GAIN = 1.0\n")
    return tmp_path


def fingerprint(world: Path, spec: str = "joint-pd", limits=LIMITS) -> Fingerprint:
    (sc,) = load_file(world / "s.yaml")
    return verdict_fingerprint(sc, spec, limits)


def changed_parts(a: Fingerprint, b: Fingerprint) -> set[str]:
    assert set(a.parts) == set(b.parts) == set(PARTS)
    return {k for k in PARTS if a.parts[k] != b.parts[k]}


def edit(path: Path, old: str, new: str) -> None:
    text = path.read_text()
    assert old in text
    path.write_text(text.replace(old, new, 1))


def test_identical_inputs_give_identical_digests(world):
    a, b = fingerprint(world), fingerprint(world)
    assert a == b and len(a.digest) == 64
    assert a.parts["mujoco"] and a.parts["numpy"]


def test_each_robot_file_changes_the_robot_part(world):
    before = fingerprint(world)
    edit(world / "robot" / "quad12.xml", "quad12: the open", "quad12 (edited): the open")
    after_mjcf = fingerprint(world)
    assert changed_parts(before, after_mjcf) == {"robot"} and after_mjcf.digest != before.digest

    edit(world / "robot" / "extra.xml", 'data="1"', 'data="2"')       # an included file, same size
    after_include = fingerprint(world)
    assert changed_parts(after_mjcf, after_include) == {"robot"}

    edit(world / "robot" / "manifest.yaml", "nominal_height was", "nominal height was")
    after_manifest = fingerprint(world)
    assert changed_parts(after_include, after_manifest) == {"robot"}


def test_files_an_mjcf_names_are_part_of_the_robot(tmp_path):
    # meshes, textures and heightfields are hashed by content, whichever folder <compiler> puts them in
    (tmp_path / "assets").mkdir()
    (tmp_path / "manifest.yaml").write_text("mjcf: r.xml\n")
    (tmp_path / "r.xml").write_text('<mujoco><compiler meshdir="assets" texturedir="assets"/><asset>'
                                    '<mesh name="m" file="leg.stl"/><texture name="t" type="2d" file="skin.png"/>'
                                    '<hfield name="h" file="ground.png"/></asset></mujoco>')
    for name in ("leg.stl", "skin.png", "ground.png"):
        (tmp_path / "assets" / name).write_bytes(b"v1")
    sc = SimpleNamespace(robot=SimpleNamespace(name=None, manifest=tmp_path / "manifest.yaml"))
    seen = {robot_part(sc)}
    for name in ("leg.stl", "skin.png", "ground.png"):
        (tmp_path / "assets" / name).write_bytes(b"v2")
        seen.add(robot_part(sc))
    assert len(seen) == 4


def test_the_same_robot_in_another_folder_has_the_same_part(world, tmp_path_factory):
    other = tmp_path_factory.mktemp("moved")
    shutil.copytree(world, other, dirs_exist_ok=True)
    assert fingerprint(world).digest == fingerprint(other).digest


def test_the_scenario_changes_the_scenario_part(world):
    before = fingerprint(world)
    edit(world / "s.yaml", "duration: 1.0", "duration: 1.5")
    assert changed_parts(before, fingerprint(world)) == {"scenario"}


def test_limits_change_the_limits_part_and_no_limit_is_one_value(world):
    base = fingerprint(world)
    longer = fingerprint(world, limits=EpisodeLimits(tick_timeout_s=2.0, episode_timeout_s=900.0))
    assert changed_parts(base, longer) == {"limits"}
    tick = fingerprint(world, limits=EpisodeLimits(tick_timeout_s=0.5, episode_timeout_s=600.0))
    assert changed_parts(base, tick) == {"limits"} and tick.parts["limits"] != longer.parts["limits"]
    # no limits given means the defaults, as the episode runner reads it
    assert fingerprint(world, limits=None).digest == fingerprint(world, limits=EpisodeLimits()).digest
    # 0 and None both mean "no limit" (see EpisodeLimits)
    assert (fingerprint(world, limits=EpisodeLimits(0, 0)).digest
            == fingerprint(world, limits=EpisodeLimits(None, None)).digest)


def test_a_module_controller_changes_with_its_file(world, monkeypatch):
    monkeypatch.syspath_prepend(str(world))
    spec = "fp_ctrl_mod:Ctrl"
    before = fingerprint(world, spec)
    assert changed_parts(fingerprint(world), before) == {"controller"}
    edit(world / "fp_ctrl_mod.py", "GAIN = 1.0", "GAIN = 2.0")
    assert changed_parts(before, fingerprint(world, spec)) == {"controller"}
    # sealed runs the same code in a child process: its own identity, and it follows the inner one
    sealed = fingerprint(world, "sealed:" + spec)
    assert changed_parts(fingerprint(world, spec), sealed) == {"controller"}
    edit(world / "fp_ctrl_mod.py", "GAIN = 2.0", "GAIN = 3.0")
    assert changed_parts(sealed, fingerprint(world, "sealed:" + spec)) == {"controller"}


def test_a_module_controller_follows_the_helpers_of_its_own_package(world, monkeypatch):
    pkg = world / "fp_pkg"
    pkg.mkdir()
    (pkg / "__init__.py").write_text("")
    (pkg / "gains.py").write_text("KP = 40.0\n")
    (pkg / "ctrl.py").write_text("from fp_pkg.gains import KP\n\nclass Ctrl:\n    pass\n")
    monkeypatch.syspath_prepend(str(world))
    before = fingerprint(world, "fp_pkg.ctrl:Ctrl")
    edit(pkg / "gains.py", "40.0", "41.0")            # the named module is unchanged
    assert changed_parts(before, fingerprint(world, "fp_pkg.ctrl:Ctrl")) == {"controller"}


def test_a_registered_name_is_its_module_file_and_an_entry_point_its_distribution(world, monkeypatch):
    from bench.controllers import registry

    monkeypatch.syspath_prepend(str(world))
    import fp_ctrl_mod

    monkeypatch.setitem(registry._registered, "fp-registered", (fp_ctrl_mod.Ctrl, "test"))
    before = fingerprint(world, "fp-registered")
    edit(world / "fp_ctrl_mod.py", "GAIN = 1.0", "GAIN = 5.0")
    assert changed_parts(before, fingerprint(world, "fp-registered")) == {"controller"}

    ident = controller_identity("joint-pd")           # the bench's own, registered as an entry point
    assert ident["kind"] == "entry point" and ident["distribution"]["name"] == "quadruped-bench"
    assert len(ident["file_sha256"]) == 64


def test_an_exec_controller_changes_with_its_program_and_arguments(world):
    prog = world / "ctrl.sh"
    prog.write_text("#!/bin/sh\necho v1\n")
    prog.chmod(0o755)
    spec = f"exec:{prog} --gain 1"
    before = fingerprint(world, spec)
    edit(prog, "v1", "v2")
    after = fingerprint(world, spec)
    assert changed_parts(before, after) == {"controller"}
    assert changed_parts(after, fingerprint(world, f"exec:{prog} --gain 2")) == {"controller"}
    # a script given to an interpreter counts as well as the interpreter
    script = world / "ctrl.py"
    script.write_text("print(1)\n")
    a = fingerprint(world, f"exec:{sys.executable} {script}")
    script.write_text("print(2)\n")
    assert changed_parts(a, fingerprint(world, f"exec:{sys.executable} {script}")) == {"controller"}


def test_digests_agree_across_processes(world):
    here = fingerprint(world)
    code = textwrap.dedent(f"""
        import json
        from bench.run.fingerprint import verdict_fingerprint
        from bench.scenario.loader import load_file
        from bench.sim.episode import EpisodeLimits
        (sc,) = load_file({str(world / 's.yaml')!r})
        fp = verdict_fingerprint(sc, "joint-pd", EpisodeLimits(tick_timeout_s=2.0, episode_timeout_s=600.0))
        print(json.dumps({{"digest": fp.digest, "parts": fp.parts}}))
    """)
    env = dict(os.environ, PYTHONHASHSEED="12345")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True, env=env,
                         cwd=world, timeout=120)
    there = json.loads(out.stdout.strip().splitlines()[-1])
    assert there == {"digest": here.digest, "parts": here.parts}


def test_stale_reason_says_which_inputs_differ(world):
    before = fingerprint(world)
    result = {"scenario": "fp-stand", **before.result_fields()}
    assert stale_reason(result, before) == ""
    assert stale_reason({"scenario": "fp-stand"}, before) == ("result.json has no verdict fingerprint "
                                                              "(made by an older bench)")
    edit(world / "robot" / "extra.xml", 'data="1"', 'data="7"')
    after = fingerprint(world, limits=EpisodeLimits(tick_timeout_s=1.0, episode_timeout_s=600.0))
    assert stale_reason(result, after) == ("result.json was made with another robot model and limits "
                                           "(its verdict fingerprint differs)")
    assert json.loads(json.dumps(result)) == result      # the fields are plain JSON


def test_a_fifo_for_an_mjcf_or_an_unimportable_controller_does_not_stop_it(tmp_path, monkeypatch):
    (tmp_path / "manifest.yaml").write_text("mjcf: pipe.xml\n")
    os.mkfifo(tmp_path / "pipe.xml")                    # reading it would block forever
    sc = SimpleNamespace(robot=SimpleNamespace(name=None, manifest=tmp_path / "manifest.yaml"))
    assert len(robot_part(sc)) == 64
    (tmp_path / "fp_broken").mkdir()
    (tmp_path / "fp_broken" / "__init__.py").write_text("raise RuntimeError('broken on import')\n")
    monkeypatch.syspath_prepend(str(tmp_path))
    from bench.run.fingerprint import _safe_controller_identity

    ident = _safe_controller_identity("fp_broken.ctrl:Ctrl")
    assert ident["kind"] in ("module", "unresolved")
    assert _safe_controller_identity("fp_broken.ctrl:Ctrl") == ident     # stable
