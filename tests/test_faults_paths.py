"""Files a scenario names stay inside the allowed roots; no scenario name writes outside the results folder.

Allowed roots: the scenario file's own folder tree, the bundled ``models/`` and
``scenarios/``, and folders given with ``--root``. Everything is reported as a
located error with exit code 2 before anything runs.
"""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest

from bench.cli import main
from bench.scenario.compose import REPO_ROOT

FIXTURE_ROBOT = Path(__file__).resolve().parent / "fixtures" / "quad12_long"


@pytest.fixture
def tree(tmp_path):
    """``tmp/project/scenarios`` (the scenario's tree) and ``tmp/elsewhere`` (outside it)."""
    project = tmp_path / "project" / "scenarios"
    project.mkdir(parents=True)
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    (elsewhere / "base.yaml").write_text("name: base\nduration: 0.2\n")
    return project, elsewhere


def check(paths, capsys, *extra) -> tuple[int, str]:
    rc = main(["check", *map(str, paths), *extra])
    err = capsys.readouterr().err
    assert "Traceback" not in err
    return rc, err


def test_extends_outside_the_tree_is_refused(tree, capsys):
    project, elsewhere = tree
    s = project / "s.yaml"
    s.write_text("name: s\nextends: ../../elsewhere/base.yaml\n")
    rc, err = check([s], capsys)
    assert rc == 2
    assert f"{s}:2:10: extends: '../../elsewhere/base.yaml' is outside the allowed folders" in err
    rc, _ = check([s], capsys, "--root", str(elsewhere))
    assert rc == 0


def test_extends_by_absolute_path_or_symlink_is_refused(tree, capsys):
    project, elsewhere = tree
    s = project / "abs.yaml"
    s.write_text(f"name: s\nextends: {elsewhere / 'base.yaml'}\n")
    assert check([s], capsys)[0] == 2
    (project / "link.yaml").symlink_to(elsewhere / "base.yaml")   # a link inside the tree to a file outside
    t = project / "via-link.yaml"
    t.write_text("name: t\nextends: link.yaml\n")
    rc, err = check([t], capsys)
    assert rc == 2 and f"{t}:2:10: extends: 'link.yaml' is outside the allowed folders" in err


def test_extends_may_reach_the_bundled_scenarios(tree, capsys):
    project, _ = tree
    s = project / "s.yaml"
    s.write_text(f"name: mine\nextends: {REPO_ROOT / 'scenarios' / 'basics' / 'stand-still.yaml'}\n")
    assert check([s], capsys)[0] == 0


def test_robot_manifest_outside_the_tree_is_refused(tree, capsys):
    project, elsewhere = tree
    shutil.copytree(FIXTURE_ROBOT, elsewhere / "robot")
    s = project / "s.yaml"
    s.write_text("name: s\nduration: 0.2\nrobot: {manifest: ../../elsewhere/robot/manifest.yaml}\n")
    rc, err = check([s], capsys)
    assert rc == 2
    assert f"{s}:3:19: robot.manifest: robot manifest" in err and "is outside the allowed folders" in err
    assert check([s], capsys, "--root", str(elsewhere))[0] == 0


def test_manifest_inside_whose_mjcf_is_outside_is_refused(tree, capsys):
    project, elsewhere = tree
    robot = project / "robot"
    shutil.copytree(FIXTURE_ROBOT, robot)
    shutil.move(robot / "quad12_long.xml", elsewhere / "quad12_long.xml")
    manifest = robot / "manifest.yaml"
    text = manifest.read_text().replace("mjcf: quad12_long.xml", "mjcf: ../../../elsewhere/quad12_long.xml")
    manifest.write_text(text)
    line = text.splitlines().index("mjcf: ../../../elsewhere/quad12_long.xml") + 1
    s = project / "s.yaml"
    s.write_text("name: s\nduration: 0.2\nrobot: {manifest: robot/manifest.yaml}\n")
    rc, err = check([s], capsys)
    assert rc == 2
    assert f"robot/manifest.yaml:{line}:7: mjcf: MJCF '../../../elsewhere/quad12_long.xml' is outside" in err


def test_manifest_alias_bomb_is_stopped_by_the_scenario_limits(tree, capsys):
    project, _ = tree
    bomb = ["a0: &a0 [x, x, x, x, x, x, x, x, x, x]"]
    bomb += [f"a{i}: &a{i} [" + ", ".join([f"*a{i - 1}"] * 10) + "]" for i in range(1, 9)]
    (project / "bomb.yaml").write_text("\n".join(bomb) + "\n")
    s = project / "s.yaml"
    s.write_text("name: s\nduration: 0.2\nrobot: {manifest: bomb.yaml}\n")
    rc, err = check([s], capsys)
    assert rc == 2 and "bomb.yaml:" in err and "aliases" in err


def test_robot_name_that_is_a_file_name_is_refused(tree, capsys):
    project, _ = tree
    s = project / "s.yaml"
    s.write_text("name: s\nduration: 0.2\nrobot: manifest.yaml\n")
    rc, err = check([s], capsys)
    assert rc == 2 and f"{s}:3:8: robot: robot name 'manifest.yaml' is not a bundled model name" in err


def test_randomized_manifest_choices_are_checked_too(tree, capsys):
    project, elsewhere = tree
    shutil.copytree(FIXTURE_ROBOT, elsewhere / "robot")
    shutil.copytree(FIXTURE_ROBOT, project / "robot")
    s = project / "s.yaml"
    s.write_text("name: s\nduration: 0.2\ntrials: 2\nrobot: {manifest: robot/manifest.yaml}\n"
                 "randomize:\n  robot.manifest: {choice: [robot/manifest.yaml, ../../elsewhere/robot/manifest.yaml]}\n")
    rc, err = check([s], capsys)
    assert rc == 2 and "is outside the allowed folders" in err


# --------------------------------------------------------------------------- files the MJCF names

def _robot_in(project: Path, edit) -> tuple[Path, Path]:
    """The fixture robot copied into the scenario's tree, its MJCF passed through ``edit``; and a scenario."""
    robot = project / "robot"
    shutil.copytree(FIXTURE_ROBOT, robot)
    xml = robot / "quad12_long.xml"
    xml.write_text(edit(xml.read_text()))
    s = project / "s.yaml"
    s.write_text("name: s\nduration: 0.2\nrobot: {manifest: robot/manifest.yaml}\n")
    return s, xml


def _line_of(path: Path, needle: str) -> int:
    return next(i for i, line in enumerate(path.read_text().splitlines(), 1) if needle in line)


OPTION_XML = '<mujoco><option timestep="0.001"/></mujoco>\n'


def test_mjcf_include_outside_the_tree_is_refused(tree, capsys):
    project, elsewhere = tree
    (elsewhere / "extra.xml").write_text(OPTION_XML)
    inc = '<include file="../../../elsewhere/extra.xml"/>'
    s, xml = _robot_in(project, lambda t: t.replace("</mujoco>", f"  {inc}\n</mujoco>"))
    rc, err = check([s], capsys)
    assert rc == 2
    line = _line_of(xml, inc)
    assert (f"robot/quad12_long.xml:{line}:3: include.file: file '../../../elsewhere/extra.xml' named by the MJCF "
            "is outside the allowed folders") in err
    assert check([s], capsys, "--root", str(elsewhere))[0] == 0


def test_mjcf_include_inside_is_fine_and_its_own_includes_are_checked(tree, capsys):
    project, elsewhere = tree
    (elsewhere / "far.xml").write_text(OPTION_XML)
    s, xml = _robot_in(project, lambda t: t.replace("</mujoco>", '  <include file="parts/opts.xml"/>\n</mujoco>'))
    (xml.parent / "parts").mkdir()
    (xml.parent / "parts" / "opts.xml").write_text(OPTION_XML)
    assert check([s], capsys)[0] == 0
    # the episode runs: the include is really read by MuJoCo
    assert main(["run", str(s), "--controller", "zero", "--workers", "1", "--out", str(project / "out"),
                 "--no-plots", "--no-history"]) in (0, 1)
    assert '"status": "error"' not in (project / "out" / "s" / "result.json").read_text()
    (xml.parent / "parts" / "opts.xml").write_text(
        '<mujoco>\n  <include file="../../../../elsewhere/far.xml"/>\n</mujoco>\n')
    rc, err = check([s], capsys)
    assert rc == 2 and "robot/parts/opts.xml:2:3: include.file: file '../../../../elsewhere/far.xml'" in err


def test_mjcf_mesh_and_texture_files_outside_are_refused(tree, capsys):
    project, elsewhere = tree
    (elsewhere / "m.stl").write_bytes(b"solid x\nendsolid x\n")
    asset = ('  <compiler meshdir="../../../elsewhere"/>\n  <asset>\n    <mesh name="m" file="m.stl"/>\n'
             '    <texture name="t" type="2d" file="/etc/hostname"/>\n  </asset>\n')
    s, xml = _robot_in(project, lambda t: t.replace("</mujoco>", asset + "</mujoco>"))
    rc, err = check([s], capsys)
    assert rc == 2
    assert f"quad12_long.xml:{_line_of(xml, 'mesh name')}:5: mesh.file: file 'm.stl' named by the MJCF" in err
    assert f"quad12_long.xml:{_line_of(xml, 'texture name')}:5: texture.file: file '/etc/hostname'" in err


def test_mjcf_symlink_to_outside_is_refused(tree, capsys):
    project, elsewhere = tree
    (elsewhere / "extra.xml").write_text(OPTION_XML)
    s, xml = _robot_in(project, lambda t: t.replace("</mujoco>", '  <include file="extra.xml"/>\n</mujoco>'))
    (xml.parent / "extra.xml").symlink_to(elsewhere / "extra.xml")
    rc, err = check([s], capsys)
    assert rc == 2 and "include.file: file 'extra.xml' named by the MJCF is outside the allowed folders" in err


def test_mjcf_doctype_and_entities_are_refused(tree, capsys):
    project, _ = tree
    dtd = '<?xml version="1.0"?>\n<!DOCTYPE mujoco [<!ENTITY x SYSTEM "file:///etc/passwd">]>\n'
    s, _ = _robot_in(project, lambda t: dtd + t)
    rc, err = check([s], capsys)
    assert rc == 2 and "robot/quad12_long.xml:2:" in err and "mjcf: MJCF has a DOCTYPE declaration" in err


def test_mjcf_include_loop_is_stopped(tree, capsys):
    project, _ = tree
    s, xml = _robot_in(project, lambda t: t.replace("</mujoco>", '  <include file="loop.xml"/>\n</mujoco>'))
    (xml.parent / "loop.xml").write_text('<mujoco>\n  <include file="loop.xml"/>\n</mujoco>\n')
    rc, err = check([s], capsys)
    assert rc == 2 and "includes nested more than 16 deep" in err
