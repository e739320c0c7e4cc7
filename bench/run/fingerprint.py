"""Verdict fingerprint: one hash of everything that decided an episode's verdict.

A result is only as good as the inputs that made it. ``verdict_fingerprint``
hashes each input into a named part, and the parts into one digest:

- ``scenario``: the merged scenario document (``Scenario.content_hash``: extends,
  matrix values and trial draws applied; the robot is named there by path or
  name only, so its files are a part of their own);
- ``robot``: the robot manifest, its MJCF and every file the MJCF includes or
  names (includes, meshes, heightfields, skins, textures, attached models), found
  with the scanner that confines those files to the allowed folders;
- ``bench``: the package version and a hash of its Python source;
- ``mujoco`` and ``numpy``: their versions (both change the numbers);
- ``limits``: the wall-clock limits that can end an episode as ``timeout``;
- ``controller``: what the controller spec resolves to (see ``controller_identity``);
- ``controller_params``: the ``--controller-param`` keywords, present only when some were given
  (so a run without any keeps the fingerprint it always had).

Parts are sha256 hex digests, except ``mujoco`` and ``numpy``, which are
version strings. No absolute path enters a part (except one written in an
``exec:`` command line): the same files in another folder give the same
fingerprint, so a moved checkout keeps its history.

Cheap per episode: file hashes are cached by (path, mtime_ns, size, inode),
and the MJCF scan is redone only when one of the files it found changed.
"""

from __future__ import annotations

import dataclasses
import hashlib
import importlib.util
import json
import os
import shlex
import shutil
import sys
import threading
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Any

#: Bumped when the way a part is computed changes, so that old digests never match new ones.
FORMAT = 1

#: The parts, in the order they are reported.
PARTS = ("scenario", "robot", "controller", "limits", "bench", "mujoco", "numpy")
#: Parts present only when they apply (``controller_params``: when ``--controller-param`` was given).
OPTIONAL_PARTS = ("controller_params",)

SETTLE_NS = 2_000_000_000
_lock = threading.Lock()
_file_hashes: dict[tuple, str] = {}
_robot_cache: dict[str, tuple[tuple, str]] = {}
_process_cache: dict[str, Any] = {}


@dataclass(frozen=True)
class Fingerprint:
    """``digest``: sha256 hex over every part; ``parts``: part name -> sha256 hex or version string."""

    digest: str
    parts: dict[str, str]

    def result_fields(self) -> dict[str, Any]:
        """The keys a result.json gets: ``fingerprint`` (the digest) and ``fingerprint_parts``."""
        return {"fingerprint": self.digest, "fingerprint_parts": dict(self.parts)}


def verdict_fingerprint(scenario, controller_spec: str, limits, controller_params: dict | None = None) -> Fingerprint:
    """The fingerprint of one episode: ``scenario`` (a validated Scenario), the controller spec as
    given to ``--controller`` (``sealed:``/``exec:`` prefixes included), and the episode limits
    (an ``EpisodeLimits``, a mapping, or None)."""
    import mujoco
    import numpy

    parts = {
        "scenario": scenario_part(scenario),
        "robot": robot_part(scenario),
        "controller": _sha(_canonical(_safe_controller_identity(controller_spec))),
        "limits": limits_part(limits),
        "bench": bench_part(),
        "mujoco": str(mujoco.__version__),
        "numpy": str(numpy.__version__),
    }
    if controller_params:
        parts["controller_params"] = _sha(_canonical(controller_params))
    return Fingerprint(_sha(_canonical({"format": FORMAT, "parts": parts})), parts)


#: Each part in words, for messages ("made with another robot model").
PART_NOUNS = {"scenario": "scenario content", "robot": "robot model", "controller": "controller code",
              "controller_params": "set of controller parameters",
              "limits": "limits", "bench": "bench code", "mujoco": "MuJoCo version", "numpy": "NumPy version"}


def stale_reason(result: dict, fp: Fingerprint) -> str:
    """"" when ``result`` (a result.json dict) was made with the inputs ``fp`` describes, else why not
    (``--resume`` reuses a result only when this is empty)."""
    digest = result.get("fingerprint")
    parts = result.get("fingerprint_parts")
    if isinstance(digest, dict):
        digest, parts = digest.get("digest"), parts or digest.get("parts")
    if not digest:
        return "result.json has no verdict fingerprint (made by an older bench)"
    if digest == fp.digest:
        return ""
    old = parts if isinstance(parts, dict) else {}
    changed = [PART_NOUNS.get(k, k) for k in PARTS + OPTIONAL_PARTS if old.get(k) != fp.parts.get(k)]
    if not changed:
        return "result.json was made with other inputs (its verdict fingerprint differs)"
    words = changed[0] if len(changed) == 1 else ", ".join(changed[:-1]) + " and " + changed[-1]
    return f"result.json was made with another {words} (its verdict fingerprint differs)"


def _safe_controller_identity(spec) -> dict:
    # A spec that cannot be resolved fails its episodes with the resolver's message; its
    # fingerprint just says so (stably) instead of stopping the run here.
    try:
        return controller_identity(spec)
    except Exception as exc:  # noqa: BLE001
        return {"kind": "unresolved", "spec": str(spec), "error": type(exc).__name__}


# --------------------------------------------------------------------------- hashing helpers


def _canonical(obj: Any) -> str:
    return json.dumps(obj, sort_keys=True, separators=(",", ":"), ensure_ascii=False, default=str)


def _sha(text: str) -> str:
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def _stat_key(path: Path) -> tuple | None:
    try:
        st = path.stat()
    except OSError:
        return None
    return (str(path), st.st_mtime_ns, st.st_size, st.st_ino, st.st_dev)


def _settled(key: tuple | None) -> bool:
    """Whether a file's stat key may stand for its content: a file changed within the last
    ``SETTLE_NS`` could change again without its mtime moving (file times tick coarsely),
    so its hash is not cached (the "racy" case of stat-keyed caches; common practice, no source)."""
    return key is None or time.time_ns() - key[1] > SETTLE_NS


def file_sha256(path: str | Path) -> str:
    """sha256 hex of a file's bytes, cached by (path, mtime_ns, size, inode); ``missing`` when it cannot be read.

    Only regular files are read (a FIFO or a device would block or never end).
    """
    p = Path(path)
    key = _stat_key(p)
    if key is None:
        return "missing"
    with _lock:
        hit = _file_hashes.get(key)
    if hit is not None:
        return hit
    import stat as _stat

    try:
        if not _stat.S_ISREG(p.stat().st_mode):
            return "not-a-file"
        h = hashlib.sha256()
        with open(p, "rb") as fh:
            for block in iter(lambda: fh.read(1 << 20), b""):
                h.update(block)
        digest = h.hexdigest()
    except OSError:
        return "unreadable"
    if _settled(key):
        with _lock:
            _file_hashes[key] = digest
    return digest


# --------------------------------------------------------------------------- scenario, limits, bench


def scenario_part(scenario) -> str:
    """The merged document's hash (what ``content_hash`` holds), computed when the scenario has none."""
    h = getattr(scenario, "content_hash", "") or ""
    if h:
        return h
    from bench.scenario.validate import content_hash

    return content_hash(getattr(scenario, "document", None))


def limits_part(limits) -> str:
    """Hash of the limits; a limit of None or <= 0 means "no limit" either way, so both hash alike.

    ``limits=None`` means the defaults, as the episode runner reads it (``EpisodeLimits()``).
    """
    if limits is None:
        from bench.sim.episode import EpisodeLimits

        limits = EpisodeLimits()
    if dataclasses.is_dataclass(limits):
        values = dataclasses.asdict(limits)
    elif isinstance(limits, dict):
        values = dict(limits)
    else:
        values = dict(vars(limits))
    norm = {}
    for k, v in values.items():
        if k.endswith("_timeout_s") and (v is None or (isinstance(v, (int, float)) and v <= 0)):
            v = None
        elif isinstance(v, int) and not isinstance(v, bool):
            v = float(v)
        norm[str(k)] = v
    return _sha(_canonical(norm))


def bench_source_digest() -> str:
    """sha256 over every ``*.py`` file of the ``bench`` package in use (relative name and bytes);
    computed once per process."""
    with _lock:
        hit = _process_cache.get("bench-source")
    if hit is not None:
        return hit
    import bench

    root = Path(bench.__file__).resolve().parent
    h = hashlib.sha256()
    for f in sorted(root.rglob("*.py")):
        h.update(f.relative_to(root).as_posix().encode())
        h.update(b"\0")
        h.update(f.read_bytes())
        h.update(b"\0")
    digest = h.hexdigest()
    with _lock:
        _process_cache["bench-source"] = digest
    return digest


def bench_part() -> str:
    import bench

    return _sha(_canonical({"version": bench.__version__, "source": bench_source_digest()}))


# --------------------------------------------------------------------------- robot


def robot_manifest_path(scenario) -> Path | None:
    """The manifest file a scenario's robot reference points at (without loading or compiling anything)."""
    ref = getattr(scenario, "robot", None)
    if ref is None:
        return None
    if getattr(ref, "manifest", None) is not None:
        p = Path(ref.manifest)
        return p / "manifest.yaml" if p.is_dir() else p
    if getattr(ref, "name", None):
        from bench.robot.locate import MANIFEST_FILENAME, bundled_models_dir

        return bundled_models_dir() / ref.name / MANIFEST_FILENAME
    return None


def _manifest_mjcf(manifest: Path) -> str | None:
    from bench.scenario.yamlload import load_yaml

    if not manifest.is_file():
        return None
    try:
        data = load_yaml(manifest).data
    except Exception:  # noqa: BLE001 - an unreadable manifest is reported by the robot checks; hash its bytes only
        return None
    mjcf = data.get("mjcf") if isinstance(data, dict) else None
    return mjcf if isinstance(mjcf, str) and mjcf else None


def _robot_files(manifest: Path) -> tuple[list[tuple[str, str, Path]], list[Path]]:
    """``[(role, name as written, place)]`` for the manifest, its MJCF and every file it names, and
    every path whose state decides that list (so a cached list is reused only while none changed)."""
    from bench.scenario.mjcf_files import scan_mjcf

    files: list[tuple[str, str, Path]] = [("manifest", "manifest", manifest)]
    watched = [manifest]
    mjcf = _manifest_mjcf(manifest)
    if mjcf is None:
        return files, watched
    mjcf_path = manifest.parent / mjcf
    files.append(("mjcf", mjcf, mjcf_path))
    watched.append(mjcf_path)
    if not mjcf_path.is_file():     # missing, or a FIFO or device that reading would block on
        return files, watched
    refs, _problems = scan_mjcf(mjcf_path)
    for ref in refs:
        watched.extend(ref.candidates)
        # MuJoCo uses the first place where the file exists (an include may sit in two places)
        place = next((c for c in ref.candidates if c.is_file()), ref.candidates[0] if ref.candidates else None)
        if place is not None:
            files.append((ref.field, ref.value, place))
    return files, watched


def robot_part(scenario) -> str:
    """Hash of the robot manifest, its MJCF and every file the MJCF includes or names."""
    manifest = robot_manifest_path(scenario)
    if manifest is None:
        return _sha("no robot")
    key = str(manifest.resolve())
    with _lock:
        cached = _robot_cache.get(key)
    if cached is not None:
        watched_state, digest = cached
        if tuple(_stat_key(Path(p)) for p, _ in watched_state) == tuple(s for _, s in watched_state):
            return digest
    files, watched = _robot_files(manifest)
    listing = [(role, name, file_sha256(place)) for role, name, place in files]
    digest = _sha(_canonical(listing))
    state = tuple((str(p), _stat_key(Path(p))) for p in dict.fromkeys(watched))
    if all(_settled(s) for _, s in state):
        with _lock:
            _robot_cache[key] = (state, digest)
    return digest


# --------------------------------------------------------------------------- controller


def _distributions() -> dict[str, list[str]]:
    with _lock:
        hit = _process_cache.get("distributions")
    if hit is None:
        from importlib.metadata import packages_distributions

        try:
            hit = packages_distributions()
        except Exception:  # noqa: BLE001 - a broken installed package must not stop a run
            hit = {}
        with _lock:
            _process_cache["distributions"] = hit
    return hit


def _distribution_of(module_name: str) -> dict | None:
    """``{"name", "version"}`` of the installed distribution that provides the module's top-level package."""
    from importlib.metadata import PackageNotFoundError, version

    top = module_name.split(".")[0]
    key = "distribution-of:" + top
    with _lock:
        if key in _process_cache:
            return _process_cache[key]
    found = None
    for dist in sorted(_distributions().get(top, [])):
        try:
            found = {"name": dist, "version": version(dist)}
            break
        except PackageNotFoundError:
            continue
    with _lock:
        _process_cache[key] = found
    return found


def _module_file(module_name: str) -> Path | None:
    mod = sys.modules.get(module_name)
    origin = getattr(mod, "__file__", None) if mod is not None else None
    if origin is None:
        try:
            spec = importlib.util.find_spec(module_name)
        except Exception:  # noqa: BLE001 - importing a parent package may raise anything
            spec = None
        origin = spec.origin if spec is not None and spec.has_location else None
    return Path(origin) if origin else None


#: A package tree with more Python files than this is hashed once per process instead of per call.
TREE_FILES_PER_CALL = 400


def _package_dirs(top: str) -> list[Path]:
    mod = sys.modules.get(top)
    paths = list(getattr(mod, "__path__", []) or []) if mod is not None else []
    if not paths:
        try:
            spec = importlib.util.find_spec(top)
        except Exception:  # noqa: BLE001 - importing a parent package may raise anything
            spec = None
        paths = list(spec.submodule_search_locations or []) if spec is not None else []
    return [Path(p) for p in paths]


def _in_site_packages(path: Path) -> bool:
    return any(part in ("site-packages", "dist-packages") for part in path.parts)


def _tree_files(dirs: list[Path]) -> list[tuple[str, Path]]:
    out = []
    for root in dirs:
        for folder, subdirs, names in os.walk(root):
            subdirs[:] = sorted(d for d in subdirs if not d.startswith(".") and d != "__pycache__")
            for name in sorted(names):
                if name.endswith(".py"):
                    p = Path(folder) / name
                    out.append((p.relative_to(root).as_posix(), p))
    return out


def package_tree_digest(top: str) -> str | None:
    """Hash of every ``*.py`` file of the top-level package ``top`` when it is a package of one's own
    (not the bench, not installed into site-packages, whose version stands for it); else None.

    A controller module usually imports helpers from its own package (gains, models): an edit
    there changes the controller as much as an edit of the module itself.
    """
    if top == "bench":
        return None                     # the ``bench`` part covers it
    dirs = [d for d in _package_dirs(top) if d.is_dir() and not _in_site_packages(d.resolve())]
    if not dirs:
        return None
    key = "tree:" + top
    with _lock:
        hit = _process_cache.get(key)
    if hit is not None:
        return hit
    files = _tree_files(dirs)
    digest = _sha(_canonical([(rel, file_sha256(p)) for rel, p in files]))
    if len(files) > TREE_FILES_PER_CALL:   # large: walking it per episode would cost more than it guards
        with _lock:
            _process_cache[key] = digest
    return digest


def _module_identity(module_name: str) -> dict:
    """The module's file hash, the distribution it comes from (name, version) if any, and the hash of
    its own package's source when that package is not an installed one."""
    f = _module_file(module_name)
    out: dict[str, Any] = {"module": module_name, "file_sha256": file_sha256(f) if f is not None else "unknown"}
    dist = _distribution_of(module_name)
    if dist is not None:
        out["distribution"] = dist
    if "." in module_name:
        tree = package_tree_digest(module_name.split(".")[0])
        if tree is not None:
            out["package_sha256"] = tree
    return out


def _program_path(program: str) -> Path | None:
    """Where ``subprocess.Popen`` finds ``program``: a path when it has a slash, else on PATH."""
    if os.sep in program or (os.altsep and os.altsep in program):
        return Path(program)
    found = shutil.which(program)
    return Path(found) if found else None


def controller_identity(spec) -> dict:
    """What a controller spec resolves to, without constructing the controller.

    - registered name or entry point: the distribution's name and version (if any) and the
      hash of the module file that defines it;
    - ``package.module:attr``: the module file's hash and its distribution's version, if any;
    - in both cases, when the module's top-level package is one's own (not installed into
      site-packages, not the bench), the hash of every ``*.py`` file of that package too;
    - ``exec:PROGRAM ARGS``: the program file's hash, the arguments, and the hash of every
      argument that names an existing file (``exec:python3 ctrl.py`` changes with ctrl.py);
    - ``sealed:SPEC``: the inner spec's identity, marked sealed;
    - a controller object or factory (tests, notebooks): its class's module.
    """
    if not isinstance(spec, str):
        cls = spec if isinstance(spec, type) else (spec if callable(spec) and not hasattr(spec, "step")
                                                   else type(spec))
        module = getattr(cls, "__module__", None) or "?"
        return {"kind": "object", "qualname": getattr(cls, "__qualname__", repr(cls)), **_module_identity(module)}
    if spec.startswith("sealed:"):
        return {"kind": "sealed", "inner": controller_identity(spec[len("sealed:"):])}
    from bench.controllers import registry

    registered = getattr(registry, "_registered", {}).get(spec)   # read only: names registered in this process
    if registered is not None:
        factory = registered[0]
        module = getattr(factory, "__module__", None) or "?"
        return {"kind": "registered", "name": spec, "qualname": getattr(factory, "__qualname__", ""),
                **_module_identity(module)}
    eps = _entry_points()
    if spec in eps:
        ep = eps[spec]
        out = {"kind": "entry point", "name": spec, "value": ep.value, **_module_identity(ep.module)}
        dist = _entry_point_distribution(spec, ep)
        if dist is not None:
            out["distribution"] = dist
        return out
    if spec.startswith("exec:"):
        try:
            argv = shlex.split(spec[len("exec:"):])
        except ValueError:
            argv = [spec[len("exec:"):]]
        if not argv:
            return {"kind": "exec", "argv": []}
        program = _program_path(argv[0])
        files = {}
        for i, arg in enumerate(argv[1:], 1):
            p = Path(arg)
            if p.is_file():
                files[str(i)] = file_sha256(p)
        return {"kind": "exec", "argv": argv,
                "program_sha256": file_sha256(program) if program is not None else "not found",
                "argument_files": files}
    if ":" in spec:
        module_name, _, attr = spec.partition(":")
        return {"kind": "module", "attr": attr, **_module_identity(module_name)}
    return {"kind": "unknown", "name": spec}


def _entry_points() -> dict:
    with _lock:
        hit = _process_cache.get("entry-points")
    if hit is None:
        from bench.controllers.registry import ENTRY_POINT_GROUP
        from importlib.metadata import entry_points

        hit = {ep.name: ep for ep in entry_points(group=ENTRY_POINT_GROUP)}
        with _lock:
            _process_cache["entry-points"] = hit
    return hit


def _entry_point_distribution(name: str, ep) -> dict | None:
    key = "entry-point-distribution:" + name
    with _lock:
        if key in _process_cache:
            return _process_cache[key]
    dist = getattr(ep, "dist", None)
    found = None if dist is None else {"name": dist.metadata["Name"], "version": dist.version}
    with _lock:
        _process_cache[key] = found
    return found


def clear_caches() -> None:
    """Forget every cached hash (tests that install or remove things mid-process)."""
    with _lock:
        _file_hashes.clear()
        _robot_cache.clear()
        _process_cache.clear()
