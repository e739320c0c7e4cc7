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
