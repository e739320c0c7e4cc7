"""Sealed mode (``sealed:NAME``) and what an in-process controller can and cannot change.

In-process, a controller shares the episode's interpreter: the tests below show
what that does and does not protect (its manifest, observation and command are
private copies; the simulation is still reachable through the call stack). In sealed mode the
controller runs in a child process: it finds no simulation, its torques cross
bit for bit, its stats come back, and a crash, a hang or the end of the bench
process takes the child (and what it started) down.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import mujoco
import pytest

import sealed_controllers
from bench.controllers import registry
from bench.controllers.external import ExternalController
from bench.controllers.sealed import SealedController
from bench.execute.job import Job, run_job
from bench.robot.model import NominalRobot
from bench.scenario import load_scenarios
from bench.world.build import build_world, manifest_for

HERE = Path(__file__).parent
REPO = HERE.parent
STAND_1S = HERE / "fixtures" / "bench_plugin" / "stand-1s.yaml"
GOLDEN = json.loads((HERE / "golden" / "suite_digests.json").read_text())
#: Metrics that measure the machine, not the simulation (in the child they time the child's own calls).
TIMING = ("controller_ms", "controller.qp_ms", "controller.ctrl_ms")


def _one(path) -> object:
    return load_scenarios([str(path)])[0]


@pytest.fixture(scope="module")
def stand():
    return _one(STAND_1S)


def _physics_metrics(result: dict) -> dict:
    return {k: v for k, v in result["metrics"].items() if not k.startswith(TIMING)}


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    # A zombie is dead for our purpose.
    try:
        with open(f"/proc/{pid}/stat") as f:
            return f.read().rsplit(")", 1)[1].split()[0] != "Z"
    except OSError:
        return True


def _wait_dead(pid: int, within_s: float = 20.0) -> bool:
    end = time.monotonic() + within_s
    while time.monotonic() < end:
        if not _alive(pid):
            return True
        time.sleep(0.05)
    return False


# -- in-process: the manifest copy, and the known limit --------------------------------------------
def test_in_process_manifest_change_reaches_neither_the_world_nor_the_score(stand):
    manifest = manifest_for(stand)
    world = build_world(stand, manifest)
    robot = NominalRobot(world.robot)
    object.__setattr__(robot.manifest, "nominal_height", 0.001)
    assert robot.manifest is not world.robot
    assert world.robot.nominal_height == manifest.nominal_height == 0.294
    assert not robot.manifest.torque_limits.flags.writeable

    honest = run_job(Job(stand, "zero")).result
    shrinker = run_job(Job(stand, sealed_controllers.ManifestShrinker())).result
    assert shrinker["metrics"]["controller.seen_nominal_height"] == 0.001   # the change was made...
    assert shrinker["status"] == honest["status"] == "failed"               # ...and changed nothing scored
    assert shrinker["reason"] == honest["reason"]
    assert "fall threshold 0.118 m" in shrinker["reason"]
    assert shrinker["trace_sha256"] == honest["trace_sha256"]
    assert _physics_metrics(shrinker) == {**_physics_metrics(honest), "controller.seen_nominal_height": 0.001}


WALK = """
    name: walk-command
    robot: quad12
    duration: 1.5
    commands:
      - {at: 0.0}
      - {at: 0.3, vx: 0.5}
    criteria: {no_fall: true, velocity_rmse_max: 0.1}
"""


@pytest.mark.parametrize("cheat", ["CommandEraser", "VelocityFaker"])
def test_in_process_controller_cannot_change_what_the_runner_records(write_scenario, cheat):
    # A robot standing still under a 0.5 m/s command fails velocity tracking, whatever the controller
    # does to the command and observation objects it was handed.
    sc = _one(write_scenario(WALK))
    honest = run_job(Job(sc, "joint-pd")).result
    r = run_job(Job(sc, getattr(sealed_controllers, cheat)())).result
    assert honest["status"] == "failed" and "velocity_rmse_max" in honest["reason"]
    assert (r["status"], r["reason"], r["trace_sha256"]) == (honest["status"], honest["reason"],
                                                            honest["trace_sha256"])


def test_the_runner_refreshes_every_observation_field_into_the_controllers_copy(stand):
    """Each tick the controller's observation holds this instant's values, even after it broke its own."""
    import dataclasses

    import numpy as np

    from bench.controllers.base import Observation
    from bench.controllers.simple import JointPDController

    seen = []

    class Breaker(JointPDController):
        def step(self, obs, command):
            seen.append((obs.t, obs.joint_pos.copy(), obs.joint_vel.copy(), obs.foot_contact.copy(),
                         obs.imu_quat.copy(), obs.privileged.base_pos.copy()))
            tau = super().step(obs, command)
            if len(seen) == 3:
                obs.joint_pos = np.zeros(3)     # a wrong shape: the runner must hand over a new observation
            if len(seen) == 6:
                obs.privileged = None           # no privileged part: likewise
            return tau

    from bench.sim.episode import run_episode

    man = manifest_for(stand)
    ep = run_episode(build_world(stand, man), stand, Breaker(), NominalRobot(man), seed=0)
    tr = ep.trace
    assert ep.status == "completed" and len(seen) == len(tr["t"]) > 8
    for k, (t, q, v, c, quat, pos) in enumerate(seen):
        assert t == tr["t"][k]
        assert np.array_equal(q, tr["joint_pos"][k]) and np.array_equal(v, tr["joint_vel"][k])
        assert np.array_equal(c, tr["foot_contact"][k]) and np.array_equal(pos, tr["base_pos"][k])
        assert np.array_equal(quat, tr["base_quat"][k])    # the IMU sits at the trunk origin, aligned
    # every field of the observation is one the runner fills (a new field must be added to the runner)
    # (height_scan, foot_force and joint_torque: filled by bench.sim.sensing, checked in test_sensing.py)
    assert {f.name for f in dataclasses.fields(Observation)} == {
        "t", "imu_quat", "imu_gyro", "imu_accel", "joint_pos", "joint_vel", "foot_contact", "privileged",
        "height_scan", "foot_force", "joint_torque", "gait_hint"}


def test_in_process_controller_can_still_reach_the_simulation_known_limit(stand):
    # The documented limit of the in-process default: the episode loop is on the call stack.
    r = run_job(Job(stand, sealed_controllers.WorldGrabber())).result
    assert r["metrics"]["controller.found_world"] == 1.0
    assert r["episode_status"] == "completed" and r["status"] == "passed"


def test_the_frame_carries_every_observation_field():
    # A new Observation field must be carried by the frame too, or sealed controllers silently lose it.
    import dataclasses

    from bench.controllers.base import Observation, Privileged
    from bench.controllers.sealed import FRAME_FIELDS

    fields = [f.name for f in dataclasses.fields(Observation) if f.name != "privileged"]
    fields += [f"privileged.{f.name}" for f in dataclasses.fields(Privileged)]
    # gait_hint is carried (protocol 2) and read with getattr, before and after Observation declares it.
    assert sorted(set(fields) | {"gait_hint"}) == sorted(FRAME_FIELDS)


# -- sealed: no way to the world, same physics --------------------------------------------------
def test_sealed_hostile_controller_finds_no_world_and_the_robot_falls(stand):
    honest = run_job(Job(stand, "zero")).result
    r = run_job(Job(stand, "sealed:sealed_controllers:WorldGrabber")).result
    assert r["controller"] == "sealed:sealed_controllers:WorldGrabber"
    assert r["metrics"]["controller.found_world"] == 0.0
    assert r["metrics"]["controller.frames_walked"] > 0           # it did look
    assert r["episode_status"] == "fell" and r["status"] == "failed"
    # Exactly what honest zero torque does in-process.
    assert r["trace_sha256"] == honest["trace_sha256"]
    assert r["reason"] == honest["reason"]


@pytest.mark.parametrize("sid", ["stand-still", "derate-all-15-loaded"])
def test_sealed_runs_are_bit_identical_to_in_process(sid):
    sc = _one(REPO / "scenarios" / ("basics" if sid == "stand-still" else "faults") / f"{sid}.yaml")
    for name in ("force-qp-l1", "joint-pd"):
        sealed = run_job(Job(sc, "sealed:" + name)).result
        if name in GOLDEN["controllers"] and GOLDEN["mujoco_version"] == mujoco.__version__:
            # The committed in-process reference (made before any of this existed).
            want = GOLDEN["controllers"][name][sid]
            assert (sealed["status"], sealed["trace_sha256"]) == (want["status"], want["trace_sha256"])
            # Its stats crossed the boundary and became controller.* metrics.
            assert {"controller.qp_fallbacks", "controller.qp_ms_mean"} <= set(sealed["metrics"])
            continue
        inproc = run_job(Job(sc, name)).result
        assert sealed["status"] == inproc["status"], sealed["reason"]
        assert sealed["trace_sha256"] == inproc["trace_sha256"]
        assert _physics_metrics(sealed) == _physics_metrics(inproc)


def test_sealed_on_a_users_six_legged_robot_from_its_manifest_path(write_scenario):
    # 18 joints, 6 feet, a manifest given by path: the child rebuilds that robot, not a bundled one.
    import shutil

    path = write_scenario("""
        name: hex-stand-short
        robot: {manifest: hex18/manifest.yaml}
        duration: 0.5
        criteria: {no_fall: true}
    """)
    shutil.copytree(HERE / "fixtures" / "hex18", path.parent / "hex18")
    sc = _one(path)
    inproc = run_job(Job(sc, "joint-pd")).result
    sealed = run_job(Job(sc, "sealed:joint-pd")).result
    assert sealed["status"] == inproc["status"] == "passed", sealed["reason"]
    assert sealed["trace_sha256"] == inproc["trace_sha256"]


def test_stdout_prints_in_the_child_do_not_corrupt_the_frames(stand):
    chatty = run_job(Job(stand, "sealed:sealed_controllers:ChattyPD")).result
    pd = run_job(Job(stand, "joint-pd")).result
    assert chatty["status"] == "passed", chatty["reason"]
    assert chatty["trace_sha256"] == pd["trace_sha256"]


def test_the_child_speaks_plain_qbx1_text_to_an_exec_controller(stand):
    # Same protocol as external programs: the child also serves the text form.
    argv = [sys.executable, "-m", "bench.controllers.sealed_child", "joint-pd"]
    ext = run_job(Job(stand, ExternalController(argv, start_timeout_s=60))).result
    pd = run_job(Job(stand, "joint-pd")).result
    assert ext["status"] == "passed", ext["reason"]
    assert ext["trace_sha256"] == pd["trace_sha256"]


# -- sealed: faults become the episode's status; the child never outlives it ---------------------
@pytest.mark.parametrize("spec, words", [
    ("faulty_controllers:Raises", ["exited with code 1", "at tick 5", "raised RuntimeError", "deliberate failure in tick 5"]),
    ("faulty_controllers:RaisesInReset", ["in reset()", "exited with code 1", "raised ValueError", "deliberate failure in reset"]),
    ("faulty_controllers:WrongShape", ["exited with code 3", "controller returned torques of shape (13,)", "expected 12 torques"]),
    ("sealed_controllers:ExitsAt", ["exited with code 7", "at tick 3", "about to vanish"]),
])
def test_child_crash_is_the_episode_error_with_exit_code_and_stderr_tail(stand, spec, words):
    r = run_job(Job(stand, "sealed:" + spec)).result
    assert r["status"] == "error"
    for w in words:
        assert w in r["reason"], r["reason"]


def test_hung_child_times_out_and_its_whole_group_is_killed(stand, tmp_path, monkeypatch):
    pidfile = tmp_path / "grandchild.pid"
    monkeypatch.setenv(sealed_controllers.PIDFILE_ENV, str(pidfile))
    ctrl = SealedController("sealed_controllers:GrandchildThenHang", tick_timeout_s=0.5)
    pids = []
    original = ctrl._start

    def start_and_note():
        original()
        pids.append(ctrl.pid)

    ctrl._start = start_and_note
    r = run_job(Job(stand, ctrl)).result
    assert r["status"] == "timeout"
    assert "sent no torques within 0.5 s" in r["reason"] and "at tick 0" in r["reason"]
    grandchild = int(pidfile.read_text())
    assert not _alive(pids[0])
    assert _wait_dead(grandchild)   # killed with the group, not left to run its 120 s


def test_what_a_crashed_child_started_is_killed_with_it(stand, tmp_path, monkeypatch):
    pidfile = tmp_path / "grandchild.pid"
    monkeypatch.setenv(sealed_controllers.PIDFILE_ENV, str(pidfile))
    r = run_job(Job(stand, "sealed:sealed_controllers:ExitsAt")).result
    assert r["status"] == "error" and "exited with code 7" in r["reason"]
    assert _wait_dead(int(pidfile.read_text()))


def test_child_dies_with_the_bench_process(tmp_path):
    # A bench process that is SIGKILLed (no cleanup runs) must not leave its sealed child behind.
    script = tmp_path / "parent.py"
    script.write_text(textwrap.dedent(f"""
        import sys, time
        sys.path.insert(0, {str(HERE)!r})
        from bench.controllers.sealed import SealedController
        from bench.robot import NominalRobot, resolve_robot
        c = SealedController("joint-pd")
        c.reset(NominalRobot(resolve_robot("quad12")), 0.004)
        print(c.pid, flush=True)
        time.sleep(120)
    """))
    parent = subprocess.Popen([sys.executable, str(script)], stdout=subprocess.PIPE, text=True, cwd=REPO)
    try:
        child = int(parent.stdout.readline())
        assert _alive(child)
        parent.send_signal(signal.SIGKILL)
        parent.wait(timeout=10)
        assert _wait_dead(child)
    finally:
        if parent.poll() is None:
            parent.kill()
            parent.wait()


# -- names --------------------------------------------------------------------------------------
@pytest.mark.parametrize("name, words", [
    ("sealed:force_qp", ["unknown controller 'force_qp'", "force-qp-l1", "joint-pd", "sealed:force_qp"]),
    ("sealed:", ["needs a controller name", "force-qp-l1"]),
    ("sealed:exec:./prog", ["already run in their own process"]),
    ("sealed:sealed:joint-pd", ["already run in their own process"]),
    ("sealed:no_such_module_here:Ctrl", ["cannot find module 'no_such_module_here'"]),
])
def test_bad_sealed_names_are_refused_with_the_known_names(name, words):
    with pytest.raises(registry.ControllerNotFound) as info:
        registry.resolve(name)
    for w in words:
        assert w in str(info.value), str(info.value)


def test_registered_names_go_sealed_only_when_the_child_can_import_them(stand, monkeypatch):
    monkeypatch.setitem(registry._registered, "my-pd", (sealed_controllers.module_level_factory, ""))
    monkeypatch.setitem(registry._registered, "my-lambda", (lambda: None, ""))
    assert registry.resolve("sealed:my-pd").sealed_spec == "sealed_controllers:module_level_factory"
    with pytest.raises(registry.ControllerNotFound, match="registered in this process only"):
        registry.resolve("sealed:my-lambda")
    r = run_job(Job(stand, "sealed:my-pd")).result
    assert r["status"] == "passed" and r["controller"] == "sealed:my-pd"


# -- command line -------------------------------------------------------------------------------
def _bench(*args, cwd=REPO):
    exe = Path(sys.executable).with_name("bench")
    cmd = [str(exe)] if exe.exists() else [sys.executable, "-m", "bench"]
    return subprocess.run([*cmd, *args], capture_output=True, text=True, cwd=cwd, timeout=300)


def test_bench_run_with_a_sealed_controller_end_to_end(tmp_path):
    out = tmp_path / "out"
    p = _bench("run", str(STAND_1S), "--controller", "sealed:joint-pd", "--out", str(out),
               "--no-plots", "--no-history", "--workers", "1")
    assert p.returncode == 0, p.stdout + p.stderr
    assert "Traceback" not in p.stderr
    results = list(out.glob("*/result.json"))
    assert len(results) == 1
    r = json.loads(results[0].read_text())
    assert r["controller"] == "sealed:joint-pd" and r["status"] == "passed"
    pd = run_job(Job(_one(STAND_1S), "joint-pd")).result
    assert r["trace_sha256"] == pd["trace_sha256"]


def test_bench_list_controllers_is_unchanged():
    p = _bench("list", "controllers")
    assert p.returncode == 0, p.stderr
    names = [line.split()[0] for line in p.stdout.splitlines() if line.strip()]
    assert {"zero", "joint-pd", "force-qp", "force-qp-l1"} <= set(names)
    assert not any(n.startswith("sealed") for n in names)
    # the descriptions start in one column, whatever the names' lengths (force-qp-l1-privileged)
    lines = [line for line in p.stdout.splitlines() if line.strip()]
    starts = {len(line) - len(line[len(line.split()[0]):].lstrip()) for line in lines}
    assert len(starts) == 1, p.stdout


def test_naming_a_sealed_module_runs_none_of_its_code_in_the_bench_process(stand, tmp_path, monkeypatch):
    # A package whose __init__ would tamper with the bench: it may only ever run in the child.
    pkg = tmp_path / "tamper_pkg"
    pkg.mkdir()
    (pkg / "__init__.py").write_text("import bench.sim.episode as e\ne.FALL_HEIGHT_FRACTION = 0.0\n")
    (pkg / "ctrl.py").write_text("from bench.controllers.simple import ZeroController as Ctrl\n")
    monkeypatch.syspath_prepend(str(tmp_path))
    from bench.sim import episode

    factory = registry.resolve("sealed:tamper_pkg.ctrl:Ctrl")
    assert "tamper_pkg" not in sys.modules and episode.FALL_HEIGHT_FRACTION == 0.4
    r = run_job(Job(stand, "sealed:tamper_pkg.ctrl:Ctrl")).result
    assert "tamper_pkg" not in sys.modules and episode.FALL_HEIGHT_FRACTION == 0.4
    assert r["episode_status"] == "fell"   # zero torque, judged with the bench's own threshold
    assert factory.sealed_spec == "tamper_pkg.ctrl:Ctrl"
    with pytest.raises(registry.ControllerNotFound, match="cannot find module 'tamper_pkg.nope'"):
        registry.resolve("sealed:tamper_pkg.nope:Ctrl")


def test_sealed_flag_is_the_sealed_prefix(tmp_path):
    env = {**os.environ, "PYTHONPATH": str(REPO)}
    p = subprocess.run([sys.executable, "-m", "bench", "run", str(STAND_1S), "--sealed", "--controller", "joint-pd",
                        "--out", str(tmp_path / "out"), "--workers", "1", "--no-plots", "--no-history"],
                       capture_output=True, text=True, env=env)
    assert p.returncode in (0, 1), p.stderr
    result = json.loads(next((tmp_path / "out").glob("*/result.json")).read_text())
    assert result["controller"] == "sealed:joint-pd"
    assert result["fingerprint_parts"]["controller"] != ""
