"""Review videos for stakeholders: the 1280x720 default, the animated preview, the follow camera on stairs, and the
overlays (neutral live metric without a limit, verdict banner off the robot, title box as wide as its text)."""

from __future__ import annotations

import json
import os
import textwrap

import mujoco
import numpy as np
import pytest

os.environ.setdefault("MUJOCO_GL", "egl")

from bench.cli import UsageError, build_parser, main  # noqa: E402
from bench.cli.render import options_from  # noqa: E402
from bench.execute.job import Job, run_job  # noqa: E402
from bench.render import gl  # noqa: E402
from bench.render.camera import follow_path, ground_height, project  # noqa: E402
from bench.render.overlays import GREEN, NEUTRAL, RED, FrameInfo, OverlayPainter, _overlap  # noqa: E402
from bench.render.replay import load_recording  # noqa: E402
from bench.render.video import EpisodeView, VideoOptions, key_metric  # noqa: E402
from bench.report.results import write_outcome  # noqa: E402
from bench.scenario import load_scenarios  # noqa: E402

# zero falls at about 0.2 s; the only criterion is no_fall, so the live metric (height error) has no limit.
FALL = "name: tiny-fall\nduration: 0.3\ncriteria: {no_fall: true}\n"
PUSH = textwrap.dedent("""
    name: tiny-push
    duration: 0.6
    disturbances:
      - push: {at: 0.2, duration: 0.1, force: [0, 30, 0]}
    criteria: {no_fall: true, height_error_max: 0.0001}
    """)


def _gl_or_skip():
    try:
        _, ctx = gl.make_context(16, 16)
        ctx.free()
    except gl.RenderUnavailable as exc:
        pytest.skip(f"no OpenGL back end here: {exc}")


@pytest.fixture(scope="module")
def recorded(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("media")
    out = {}
    for name, text, ctrl in (("fall", FALL, "zero"), ("push", PUSH, "joint-pd")):
        path = tmp / f"{name}.yaml"
        path.write_text(text)
        sc = load_scenarios([str(path)])[0]
        write_outcome(tmp / name, sc.slug, run_job(Job(sc, ctrl)))
        out[name] = (sc, tmp / name / sc.slug)
    return out


def _args(argv):
    return build_parser().parse_args(argv)


# ---------------------------------------------------------------- size option

def test_review_videos_default_to_1280x720_and_size_option_parses():
    assert (VideoOptions().width, VideoOptions().height) == (1280, 720)
    o = options_from(_args(["render", "x"]))
    assert (o.width, o.height, o.fps) == (1280, 720, 30.0)
    o = options_from(_args(["render", "x", "--size", "1080p"]))
    assert (o.width, o.height) == (1920, 1080)
    o = options_from(_args(["render", "x", "--size", "640x360", "--height", "400"]))
    assert (o.width, o.height) == (640, 400)                  # --width/--height override --size
    # side by side: two panels of half the default each, so the whole video is about 1280 wide
    o = options_from(_args(["render", "--compare", "a", "b"]), compare=True)
    assert (o.width, o.height) == (640, 360)
    with pytest.raises(UsageError, match="--size: '12x' is not WIDTHxHEIGHT"):
        options_from(_args(["render", "x", "--size", "12x"]))
    with pytest.raises(UsageError, match="--width: 1281 must be an even number"):
        options_from(_args(["render", "x", "--size", "1281x720"]))


def test_default_video_is_1280x720_at_30_fps(recorded, tmp_path):
    _gl_or_skip()
    import imageio_ffmpeg

    _, d = recorded["fall"]
    assert main(["render", str(d), "--out", str(tmp_path), "--no-clip", "--preview", "none"]) == 0
    meta = next(imageio_ffmpeg.read_frames(str(tmp_path / "tiny-fall.zero.mp4")))
    assert tuple(meta["size"]) == (1280, 720) and meta["fps"] == pytest.approx(30.0)
    media = json.loads((d / "media.json").read_text())
    main_entry = next(v for v in media["videos"] if v["kind"] == "main")
    assert (main_entry["width"], main_entry["height"], main_entry["camera"]) == (1280, 720, "follow")


# ---------------------------------------------------------------- preview

@pytest.mark.parametrize("fmt", ["gif", "webp"])
def test_animated_preview_is_written_beside_the_video(recorded, tmp_path, fmt):
    _gl_or_skip()
    from PIL import Image

    _, d = recorded["push"]
    assert main(["render", str(d), "--out", str(tmp_path), "--size", "160x90", "--fps", "10", "--no-clip",
                 "--preview", fmt]) == 0
    prev = tmp_path / f"tiny-push.joint-pd.preview.{fmt}"
    with Image.open(prev) as im:
        assert im.format == fmt.upper() and getattr(im, "is_animated", False)
        assert im.n_frames > 1
        assert im.size == (160, 90)                # not larger than the video; 480 px wide at most
    entry = next(v for v in json.loads((d / "media.json").read_text())["videos"] if v["kind"] == "main")
    assert (d / entry["preview"]).resolve() == prev.resolve()


# ---------------------------------------------------------------- overlays

def _metric_line_pixels(img, painter, n_lines):
    """Pixels of the status box's last line (where the live metric is written)."""
    x0, y0, x1, y1 = painter.last_layout["status"]
    top = y0 + painter.pad // 2 + (n_lines - 1) * painter.line
    return np.asarray(img)[top: top + painter.line, x0:x1, :3].reshape(-1, 3).astype(int)


@pytest.mark.parametrize("over,colour", [(None, NEUTRAL), (False, GREEN), (True, RED)])
def test_live_metric_colour_is_neutral_without_a_limit(over, colour):
    painter = OverlayPainter(320, 180, "s", "controller c")
    img = painter.paint(np.zeros((180, 320, 3), np.uint8),
                        FrameInfo(1.0, np.zeros(3), metric="height error -150 mm  (no limit)", metric_over=over))
    px = _metric_line_pixels(img, painter, 3)
    ink = px[px.max(axis=1) > 120]                               # the text's brightest pixels
    assert len(ink) > 20
    greenish = np.sum((ink[:, 1] > ink[:, 0] + 60) & (ink[:, 1] > ink[:, 2] + 60))
    reddish = np.sum((ink[:, 0] > ink[:, 1] + 60) & (ink[:, 0] > ink[:, 2] + 60))
    if colour is NEUTRAL:
        assert greenish == 0 and reddish == 0
    elif colour is GREEN:
        assert greenish > 0.5 * len(ink)
    else:
        assert reddish > 0.5 * len(ink)


def test_live_metric_of_a_fall_without_a_limit_is_unjudged(recorded):
    sc, d = recorded["fall"]
    rec = load_recording(d)
    km = key_metric(rec.result, rec.trace, 0.1)
    assert km.limit is None
    last = len(rec.trace) - 1
    text, over = km.text(last, float(rec.trace["t"][last]))
    assert over is None and "no limit" in text                 # falling: shown, but neither green nor red
    assert abs(km.series[last]) > 0.05                          # it really is a large error


def test_title_box_is_as_wide_as_a_long_controller_label():
    from PIL import Image, ImageDraw

    label = "controller team_pkg.controllers.experimental:make_controller(kp=40.0, kd=1.5, horizon=12)"
    painter = OverlayPainter(640, 360, "stairs-irc-up.trial-3", label)
    painter.paint(np.zeros((360, 640, 3), np.uint8),
                  FrameInfo(1.0, np.array([0.6, 0.0, 0.1]), metric="roll +1.0 deg  (limit 10)", load_kg=3.0))
    lay = painter.last_layout
    x0, _, x1, _ = lay["title"]
    dr = ImageDraw.Draw(Image.new("RGB", (8, 8)))
    fonts = [painter.f] + [painter.f_small] * (len(lay["title_lines"]) - 1)
    for text, font in zip(lay["title_lines"], fonts):
        right = dr.textbbox((x0 + painter.pad, 0), text, font=font)[2]
        assert right <= x1                                      # every drawn line ends inside the box
    assert _overlap(lay["title"], lay["status"]) == 0           # and the status box does not cover it
    assert "".join(lay["title_lines"][1:]).replace(" ", "") == label.replace(" ", "")   # nothing lost
    assert len(lay["title_lines"]) > 2                          # wrapped, since it cannot fit on one line


def test_banner_avoids_the_robot_box():
    painter = OverlayPainter(640, 360, "s", "controller c")
    painter.paint(np.zeros((360, 640, 3), np.uint8), FrameInfo(1.0, np.zeros(3), metric="m"))
    for robot in [(250, 150, 390, 230), (250, 60, 390, 140), (250, 230, 390, 330)]:   # middle, high, low
        rect, compact = painter.banner_rect("failed", "fell at t=0.21 s: trunk touched the ground", robot)
        assert _overlap(rect, robot) == 0 and not compact
    rect, compact = painter.banner_rect("failed", "fell", (0, 0, 640, 360))           # fills the frame
    assert compact and rect[3] - rect[1] < painter.banner_rect("failed", "fell", None)[0][3] - \
        painter.banner_rect("failed", "fell", None)[0][1]


def test_banner_does_not_cover_the_fallen_robot_in_the_rendered_frame(recorded):
    _gl_or_skip()
    sc, d = recorded["fall"]
    view = EpisodeView(load_recording(d), VideoOptions(width=320, height=180), sc)
    try:
        last = len(view.t) - 1
        img = view.frame(last, float(view.t[last]), 1.0)
        robot = view.robot_box()
        assert robot is not None and robot[2] > robot[0] and robot[3] > robot[1]
        view.banner(img)
        assert _overlap(view.painter.last_layout["banner"], robot) == 0
    finally:
        view.close()


def test_projection_matches_the_rendered_pixels(recorded):
    """A bright marker drawn by MuJoCo's renderer at a world point lands on the pixel ``project`` predicts."""
    _gl_or_skip()
    from bench.render.scene import FrameRenderer

    sc, d = recorded["push"]
    view = EpisodeView(load_recording(d), VideoOptions(width=320, height=180), sc)
    view.close()
    rep = view.replay
    k = len(view.t) // 2
    point = view.A["base_pos"][k] + np.array([0.3, -0.2, 0.25])
    with FrameRenderer(rep.model, 320, 180) as r:
        r.set_camera("follow")
        view.camera_path.apply(r.cam, k)
        r.update(rep.set_row(k))
        sc_ = r.scene
        g = sc_.geoms[sc_.ngeom]
        mujoco.mjv_initGeom(g, mujoco.mjtGeom.mjGEOM_SPHERE, np.array([0.02, 0, 0]), point, np.eye(3).ravel(),
                            np.array([1.0, 0.0, 1.0, 1.0], dtype=np.float32))
        g.emission = 1.0
        sc_.ngeom += 1
        img = r.render().astype(int)
        want = r.project(point[None, :])[0]
    mask = (img[..., 0] > 200) & (img[..., 2] > 200) & (img[..., 1] < 80)
    ys, xs = np.nonzero(mask)
    assert len(xs) > 3
    assert abs(xs.mean() + 0.5 - want[0]) < 2.0 and abs(ys.mean() + 0.5 - want[1]) < 2.0


# ---------------------------------------------------------------- follow camera

@pytest.mark.parametrize("file", ["stairs-irc-up.yaml", "stairs-ibc-down.yaml", "slope-12deg-down.yaml"])
def test_follow_camera_keeps_robot_and_terrain_ahead_in_view(file):
    """A trunk carried over the terrain at 0.3 m/s: at every instant the trunk, its feet' height and the ground
    0.8 m ahead project inside the frame (with a margin)."""
    from bench.world.build import build_world

    sc = load_scenarios([f"scenarios/terrain/{file}"])[0]
    world = build_world(sc)
    m, dat = world.model, mujoco.MjData(world.model)
    mujoco.mj_forward(m, dat)
    t = np.arange(0.0, 10.0, 0.02)
    x = np.clip(0.3 * (t - 1.0), 0.0, None)
    ground = np.array([ground_height(m, dat, np.array([xi, 0.0]), 10.0) for xi in x])
    n = len(t)
    arrays = {"t": t, "base_pos": np.stack([x, np.zeros(n), ground + 0.29], axis=1),
              "base_quat": np.tile([1.0, 0.0, 0.0, 0.0], (n, 1)), "terrain_height": ground}
    path = follow_path(arrays, m, dat, 0.294)
    scene, cam, opt, pert = mujoco.MjvScene(m, 100), mujoco.MjvCamera(), mujoco.MjvOption(), mujoco.MjvPerturb()
    W, H = 320, 180
    span = float(ground.max() - ground.min())
    assert span > 0.5 or "slope" in file                       # really a stair
    for k in range(0, n, 10):
        path.apply(cam, k)
        mujoco.mjv_updateScene(m, dat, opt, pert, cam, mujoco.mjtCatBit.mjCAT_ALL, scene)
        ahead = ground_height(m, dat, np.array([x[k] + 0.8, 0.0]), 10.0)
        pts = np.array([arrays["base_pos"][k], [x[k], 0.0, ground[k]], [x[k] + 0.8, 0.0, ahead]])
        px = project(scene, pts, W, H)
        assert np.all(np.isfinite(px))
        assert np.all((px[:, 0] > 0.05 * W) & (px[:, 0] < 0.95 * W)), (k, px)
        assert np.all((px[:, 1] > 0.05 * H) & (px[:, 1] < 0.95 * H)), (k, px)


def test_side_by_side_header_ends_with_an_ellipsis_instead_of_running_off():
    from bench.render.overlays import label_bar

    long = "zero: FAILED - fell at t=0.214 s: trunk 0.115 m above the ground, under the fall threshold 0.118 m"
    img = np.asarray(label_bar(200, 20, long, "failed")).astype(int)
    assert np.all(img[:, -4:] == 25)                               # the right edge is left blank, nothing cut off
    short = np.asarray(label_bar(200, 20, "joint-pd: PASSED", "passed")).astype(int)
    assert np.all(short[:, 120:] == 25)                            # a short label is drawn as it is
