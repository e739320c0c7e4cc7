"""Robots: manifests (what an MJCF means to the bench), bundled-model lookup, and the nominal robot."""

from bench.robot.locate import bundled_models_dir, bundled_robot_names, resolve_robot
from bench.robot.manifest import Foot, RobotError, RobotManifest, load_manifest
from bench.robot.model import NominalRobot, load_robot_spec

__all__ = [
    "Foot", "NominalRobot", "RobotError", "RobotManifest", "bundled_models_dir",
    "bundled_robot_names", "load_manifest", "load_robot_spec", "resolve_robot",
]
