"""Review videos: exact replay of the trace, MP4 output, overlays' inputs, side by side, no-GL fallback."""

from __future__ import annotations

import json
import os
import textwrap

import mujoco
import numpy as np
import pytest

os.environ.setdefault("MUJOCO_GL", "egl")

from bench.cli import main  # noqa: E402
from bench.execute.job import Job, run_job  # noqa: E402
from bench.render import gl  # noqa: E402
from bench.render.replay import ReplayMismatch, build_replay, load_recording  # noqa: E402
from bench.render.video import first_violation, frame_rows  # noqa: E402
from bench.report.results import write_outcome  # noqa: E402
from bench.scenario import load_scenarios  # noqa: E402

# A load put on at 0.4 s, a push at 0.6 s; the height limit is far too tight, so the scenario fails.
SCENARIO = """
name: tiny-load
duration: 1.0
score_from: 0.2
payloads:
  - {name: crate, mass: 3.0, size: [0.16, 0.12, 0.08], offset: [-0.05, 0, 0.09], attach_at: 0.4}
disturbances:
  - push: {at: 0.6, duration: 0.1, force: [0, 40, 0]}
criteria: {no_fall: true, height_error_max: 0.001}
"""
TINY = dict(width=96, height=64, fps=10.0)


def _gl_or_skip():
    try:
        _, ctx = gl.make_context(16, 16)
        ctx.free()
    except gl.RenderUnavailable as exc:
        pytest.skip(f"no OpenGL back end here: {exc}")


@pytest.fixture(scope="module")
def recorded(tmp_path_factory):
    """Two result folders of the same scenario: joint-pd (stands, fails the tight limit) and zero (falls)."""
    tmp = tmp_path_factory.mktemp("rec")
    path = tmp / "tiny-load.yaml"
    path.write_text(textwrap.dedent(SCENARIO))
    sc = load_scenarios([str(path)])[0]
    dirs = {}
    for ctrl in ("joint-pd", "zero"):
        out = run_job(Job(sc, ctrl))
        write_outcome(tmp / ctrl, sc.slug, out)
        dirs[ctrl] = tmp / ctrl / sc.slug
    return sc, dirs


def test_replay_reproduces_the_recorded_state(recorded):
    sc, dirs = recorded
    rec = load_recording(dirs["joint-pd"])
    rep = build_replay(rec, sc)
    A = rec.trace.arrays
    crate = rep.world.payloads[0]
    for k in range(0, len(rec.trace), 7):
        d = rep.set_row(k)
        # mj_forward's kinematics from the recorded qpos give back the recorded trunk and foot positions.
        np.testing.assert_allclose(d.xpos[rep.world.trunk_body_id], A["base_pos"][k], atol=1e-9)
        np.testing.assert_allclose(d.site_xpos[rep.world.foot_site_ids], A["foot_pos"][k], atol=1e-9)
        quat = d.xquat[rep.world.trunk_body_id]
        np.testing.assert_allclose(np.abs(quat @ A["base_quat"][k]), 1.0, atol=1e-9)
        # The payload is there (mass and drawn) exactly when the trace says it is carried.
        assert rep.model.body_mass[crate.body_id] == pytest.approx(A["payload_mass"][k, 0])
        assert (rep.model.geom_rgba[crate.geom_id, 3] > 0) == (A["payload_mass"][k, 0] > 0)
        assert rep.check() <= 1e-9
    assert A["payload_mass"][0, 0] == 0 and A["payload_mass"][-1, 0] == pytest.approx(3.0)


def test_replay_refuses_a_trace_that_does_not_match(recorded):
    sc, dirs = recorded
    rec = load_recording(dirs["joint-pd"])
    rec.trace.arrays["foot_pos"] = rec.trace.arrays["foot_pos"] + 1e-3   # as if the robot's legs had changed
    with pytest.raises(ReplayMismatch, match="changed since the run"):
        build_replay(rec, sc)


def test_replay_finds_the_scenario_from_result_source(recorded):
    _, dirs = recorded
    rec = load_recording(dirs["joint-pd"])
    rep = build_replay(rec)                       # no scenario given: loaded from result.json 'source'
    assert rep.scenario.id == rec.result["scenario"]


def test_frame_rows_follow_fps_and_slow_motion():
    t = np.arange(500) * 0.002                     # 1 s at 500 Hz
    rows, times = frame_rows(t, 0.0, float(t[-1]), fps=10, slowmo=1.0)
    assert len(rows) == 10 and times[1] - times[0] == pytest.approx(0.1)
    np.testing.assert_allclose(t[rows], times, atol=0.001)
    rows2, _ = frame_rows(t, 0.0, float(t[-1]), fps=10, slowmo=4.0)
    assert len(rows2) == 40                        # four times slower: four times the frames


def test_first_violation_time_and_text():
    res = {"status": "failed", "criteria": [
        {"name": "no_fall", "passed": True, "first_violation_s": None},
        {"name": "height_error_max", "passed": False, "first_violation_s": 0.7},
        {"name": "roll_error_max_deg", "passed": False, "first_violation_s": 0.4}]}
    assert first_violation(res, 1.0) == (0.4, "first violation: roll_error_max_deg at 0.40 s")
    assert first_violation({"status": "passed"}, 1.0) is None
    err = first_violation({"status": "error", "reason": "controller raised", "criteria": []}, 0.8)
    assert err[0] == 0.8 and "controller raised" in err[1]


def _frames(path):
    import imageio_ffmpeg

    gen = imageio_ffmpeg.read_frames(str(path))
    meta = next(gen)
    n = sum(1 for _ in gen)
    return meta, n


def test_render_writes_main_video_and_violation_clip_and_leaves_the_verdict(recorded, tmp_path):
    _gl_or_skip()
    sc, dirs = recorded
    before = (dirs["joint-pd"] / "result.json").read_bytes()
    rc = main(["render", str(dirs["joint-pd"]), "--out", str(tmp_path / "v"), "--width", "96", "--height", "64",
               "--fps", "10"])
    assert rc == 0
    main_mp4 = tmp_path / "v" / "tiny-load.joint-pd.mp4"
    clip = tmp_path / "v" / "tiny-load.joint-pd.violation.mp4"
    meta, n = _frames(main_mp4)
    assert tuple(meta["size"]) == (96, 64)
    assert n == 10 + 15                            # 1 s at 10 fps, then 1.5 s of the verdict banner
    assert clip.stat().st_size > 0
    assert (dirs["joint-pd"] / "result.json").read_bytes() == before   # rendering never touches the verdict
    media = json.loads((dirs["joint-pd"] / "media.json").read_text())
    kinds = {m["kind"]: m for m in media["videos"]}
    assert set(kinds) >= {"main", "violation"}
    assert (dirs["joint-pd"] / kinds["main"]["path"]).resolve() == main_mp4.resolve()
    assert kinds["violation"]["slowmo"] == 4.0


def test_payload_is_drawn_in_its_colour_only_while_carried(recorded):
    _gl_or_skip()
    from bench.render.scene import FrameRenderer

    sc, dirs = recorded
    rec = load_recording(dirs["joint-pd"])
    rep = build_replay(rec, sc)
    pm = rec.trace["payload_mass"][:, 0]
    before, after = int(np.argmax(pm > 0)) - 5, len(pm) - 1

    def orange_pixels(k):
        with FrameRenderer(rep.model, 160, 120) as r:
            r.set_camera("track")
            r.update(rep.set_row(k))
            img = r.render().astype(int)
        # The payload geoms are orange (rgba 0.95, 0.55, 0.10): red high, blue low; nothing else in the world is.
        return int(np.sum((img[..., 0] > 150) & (img[..., 2] < 60) & (img[..., 0] - img[..., 2] > 120)))

    assert orange_pixels(before) == 0
    assert orange_pixels(after) > 20


def test_force_arrows_are_added_for_feet_in_contact(recorded):
    _gl_or_skip()
    from bench.render.scene import FOOT_ARROW_RGBA, FrameRenderer

    sc, dirs = recorded
    rec = load_recording(dirs["joint-pd"])
    rep = build_replay(rec, sc)
    k = len(rec.trace) - 1
    with FrameRenderer(rep.model, 64, 48) as r:
        r.update(rep.set_row(k))
        n0 = r.scene.ngeom
        r.add_forces(rec.trace["foot_pos"][k], rec.trace["foot_force"][k], FOOT_ARROW_RGBA)
        in_contact = int(np.sum(np.linalg.norm(rec.trace["foot_force"][k], axis=1) >= 1.0))
        assert r.scene.ngeom - n0 == in_contact == 4
        g = r.scene.geoms[r.scene.ngeom - 1]
        assert g.type == mujoco.mjtGeom.mjGEOM_ARROW


def test_side_by_side_is_time_synchronised_and_labelled(recorded, tmp_path):
    _gl_or_skip()
    _, dirs = recorded
    rc = main(["render", "--compare", str(dirs["joint-pd"]), str(dirs["zero"]), "--out", str(tmp_path),
               "--width", "96", "--height", "64", "--fps", "10"])
    assert rc == 0
    out = tmp_path / "tiny-load.joint-pd-vs-zero.mp4"
    meta, n = _frames(out)
    w, h = meta["size"]
    assert w == 2 * 96 + 4 and h > 64            # two panels, a gap, a header with controller and verdict
    # The longer episode sets the length; the one that fell early holds its last frame.
    zero = json.loads((dirs["zero"] / "result.json").read_text())
    assert zero["sim_time_s"] < 1.0
    assert n == 10 + 15


def test_compare_refuses_two_different_scenarios(recorded, tmp_path, capsys):
    _, dirs = recorded
    other = tmp_path / "other"
    other.mkdir()
    res = json.loads((dirs["zero"] / "result.json").read_text())
    res["scenario"] = "something-else"
    (other / "result.json").write_text(json.dumps(res))
    (other / "trace.npz").write_bytes((dirs["zero"] / "trace.npz").read_bytes())
    assert main(["render", "--compare", str(dirs["joint-pd"]), str(other), "--out", str(tmp_path)]) == 2
    assert "same scenario" in capsys.readouterr().err


def test_render_bad_input_is_one_line_exit_2(tmp_path, capsys):
    assert main(["render", str(tmp_path / "nowhere")]) == 2
    assert "no such folder" in capsys.readouterr().err
    (tmp_path / "r").mkdir()
    assert main(["render", str(tmp_path / "r"), "--width", "63"]) == 2
    assert "--width: 63 must be an even number" in capsys.readouterr().err


def test_no_gl_back_end_gives_one_clear_line_and_results_are_still_written(tmp_path, monkeypatch, capsys):
    path = tmp_path / "s.yaml"
    path.write_text("name: tiny-load\nduration: 0.4\ncriteria: {no_fall: true, height_error_max: 0.0001}\n")
    monkeypatch.delenv("MUJOCO_GL", raising=False)
    monkeypatch.setattr(gl, "BACKEND_MODULES", {"egl": "bench_no_such_egl", "osmesa": "bench_no_such_osmesa"})
    monkeypatch.setattr(gl, "_working", None)
    out = tmp_path / "res"
    rc = main(["run", str(path), "--controller", "joint-pd", "--out", str(out), "--video", "all", "--no-plots",
               "--video-dir", str(tmp_path / "v")])
    printed = capsys.readouterr().out
    assert rc == 1                                 # the scenario's own verdict (failed), not a video problem
    lines = [ln for ln in printed.splitlines() if ln.startswith("video:")]
    assert len(lines) == 1
    assert "libegl1 libgl1-mesa-dri" in lines[0] and "libosmesa6" in lines[0] and "MUJOCO_GL=egl" in lines[0]
    assert json.loads((out / "tiny-load" / "result.json").read_text())["status"] == "failed"
    assert not (tmp_path / "v").exists() or not any((tmp_path / "v").iterdir())


def test_missing_gl_library_named_by_mujoco_gl_costs_only_the_videos(tmp_path):
    """MUJOCO_GL=osmesa without libOSMesa used to stop `import mujoco` itself (PyOpenGL raises AttributeError)."""
    import subprocess
    import sys

    path = tmp_path / "s.yaml"
    path.write_text("name: tiny\nduration: 0.4\ncriteria: {no_fall: true, height_error_max: 0.05}\n")
    env = {k: v for k, v in os.environ.items() if k not in ("PYOPENGL_PLATFORM", gl.REQUEST_ENV, gl.PROBLEM_ENV)}
    env["MUJOCO_GL"] = "osmesa"
    proc = subprocess.run([sys.executable, "-c", "import sys; from bench.cli import main; sys.exit(main())", "run", str(path), "--controller", "joint-pd", "--out",
                           str(tmp_path / "res"), "--video", "all", "--no-plots", "--video-dir", str(tmp_path / "v"),
                           "--width", "64", "--height", "48", "--fps", "5"],
                          capture_output=True, text=True, timeout=120, env=env, cwd=tmp_path)
    assert "Traceback" not in proc.stderr + proc.stdout
    assert proc.returncode == 0                               # the verdict decides, not the video
    assert json.loads((tmp_path / "res" / "tiny" / "result.json").read_text())["status"] == "passed"
    made = list((tmp_path / "v").glob("*.mp4")) if (tmp_path / "v").exists() else []
    if not made:                                              # no libOSMesa here: one line says what to install
        lines = [ln for ln in proc.stdout.splitlines() if ln.startswith("video:")]
        assert len(lines) == 1 and "libosmesa6" in lines[0], proc.stdout
