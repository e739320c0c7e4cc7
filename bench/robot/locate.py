"""Finding robots: the bundled model folder and name-or-path resolution.

Owns where bundled robots live (`models/<name>/manifest.yaml` in a source
checkout, `bench/_data/models` in an installed package) and
`resolve_robot`, which turns a bundled name, a manifest path, or a scenario's
robot reference into a validated `RobotManifest`.
"""

from __future__ import annotations

import importlib.resources
from pathlib import Path
from typing import Any

import bench
from bench.robot.manifest import RobotError, RobotManifest, load_manifest

MANIFEST_FILENAME = "manifest.yaml"


def bundled_models_dir() -> Path:
    """The folder holding one sub-folder per bundled robot."""
    repo_models = Path(bench.__file__).resolve().parents[1] / "models"
    if repo_models.is_dir():
        return repo_models
    return Path(str(importlib.resources.files("bench") / "_data" / "models"))


def bundled_robot_names() -> list[str]:
    """Names of the bundled robots (folders with a manifest.yaml), sorted."""
    root = bundled_models_dir()
    if not root.is_dir():
        return []
    return sorted(p.name for p in root.iterdir() if (p / MANIFEST_FILENAME).is_file())


def resolve_robot(name_or_manifest_path: Any, base_dir: str | Path | None = None) -> RobotManifest:
    """Return the manifest for a bundled robot name, a manifest path, or a robot reference.

    A reference is anything with `.name` and `.manifest` attributes (the
    scenario's `RobotRef`): `manifest` wins when set. A path is taken relative
    to `base_dir` (e.g. the scenario file's folder) when it is not absolute;
    a folder is accepted and means the `manifest.yaml` inside it.
    """
    ref = name_or_manifest_path
    if hasattr(ref, "manifest") and hasattr(ref, "name"):
        ref = ref.manifest if ref.manifest is not None else ref.name
    if ref is None:
        raise RobotError("<robot>", "robot", "no robot given",
                         f"bundled robots: {', '.join(bundled_robot_names()) or 'none'}")

    if isinstance(ref, Path) or _looks_like_path(str(ref)):
        path = Path(ref).expanduser()
        if not path.is_absolute() and base_dir is not None:
            path = Path(base_dir) / path
        if path.is_dir():
            path = path / MANIFEST_FILENAME
        return load_manifest(path)

    name = str(ref)
    manifest = bundled_models_dir() / name / MANIFEST_FILENAME
    if not manifest.is_file():
        raise RobotError(manifest, "robot", f"unknown bundled robot {name!r}",
                         f"bundled robots: {', '.join(bundled_robot_names()) or 'none'}; "
                         "or give {manifest: path/to/manifest.yaml}")
    return load_manifest(manifest)


def _looks_like_path(text: str) -> bool:
    return "/" in text or "\\" in text or text.endswith((".yaml", ".yml")) or text.startswith(".")
