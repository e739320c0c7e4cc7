"""The extra sensors (scenario key ``sensing:``) against outside references.

References, named beside each check:
- the terrain's exact height query (``Terrain.height_at``, closed-form boxes and slopes);
- MuJoCo's own single-ray function ``mujoco.mj_ray`` cast exactly vertically in a data of the
  same model with the robot moved far below the ground;
- for heightfields, MuJoCo's documented triangulation of the elevation grid (each cell is two
  triangles): bilinear and planar interpolation over a cell differ by at most |twist| / 4, with
  twist = h00 + h11 - h10 - h01 (derived in ``_triangulation_bound``);
- the normal law of a sample mean and the chi-square law of a sample variance (``scipy.stats``);
- the trace's own records of the same instants (foot forces, applied torques, trunk pose).
"""

from __future__ import annotations

import math

import mujoco
import numpy as np
import pytest
from scipy import stats

from bench.controllers.simple import JointPDController
from bench.robot.model import NominalRobot
from bench.sim.episode import run_episode
from bench.sim.sensing import HeightScanner, TerrainRays, scan_grid
from bench.world.build import build_world

BOX_TOL_M = 1e-6
EDGE_CLEARANCE_M = 1e-4   # points this close to a step edge may read either side (see bench.sim.sensing)


class Recorder(JointPDController):
    """Holds the nominal pose and keeps a copy of every observation field of interest."""

    def reset(self, robot, control_dt):
        super().reset(robot, control_dt)
        self.info = robot.sensing
        self.rows = []

    def step(self, obs, command):
        self.rows.append({
            "t": obs.t,
            "height_scan": None if obs.height_scan is None else obs.height_scan.copy(),
            "foot_force": None if obs.foot_force is None else obs.foot_force.copy(),
            "joint_torque": None if obs.joint_torque is None else obs.joint_torque.copy(),
            "privileged": obs.privileged,
        })
        return super().step(obs, command)


def _run(sc, controller=None):
    world = build_world(sc)
    ctrl = controller or Recorder()
    ep = run_episode(world, sc, ctrl, NominalRobot(world.robot))
    return world, ep, ctrl


def _yaw(q) -> float:
    w, x, y, z = q
    return math.atan2(2 * (w * z + x * y), 1 - 2 * (y * y + z * z))


def _world_points(grid, x, y, yaw):
    c, s = math.cos(yaw), math.sin(yaw)
    return x + c * grid[..., 0] - s * grid[..., 1], y + s * grid[..., 0] + c * grid[..., 1]


def _posed_scanner(sc, x, y, yaw, z=0.6):
    """A world, its scanner and a data with the trunk posed at (x, y, z, yaw)."""
    world = build_world(sc)
    m = world.model
    d = mujoco.MjData(m)
    d.qpos[:] = world.initial_qpos
    a = world.root_qpos_adr
    d.qpos[a:a + 7] = [x, y, z, math.cos(yaw / 2), 0, 0, math.sin(yaw / 2)]
    mujoco.mj_kinematics(m, d)
    scanner = HeightScanner(sc.sensing.height_scan, world, d, float(sc.control_rate), np.random.default_rng(0))
    return world, m, d, scanner


def _reference_rays(world, xs, ys, z_from=50.0):
    """MuJoCo's own mj_ray, exactly vertical, in a fresh data with the robot parked 1000 m down."""
    m = world.model
    d = mujoco.MjData(m)
    d.qpos[:] = world.initial_qpos
    d.qpos[world.root_qpos_adr + 2] = -1000.0
    mujoco.mj_kinematics(m, d)
    out = np.empty(xs.shape)
    gid = np.zeros(1, dtype=np.int32)
    for idx in np.ndindex(xs.shape):
        dist = mujoco.mj_ray(m, d, np.array([xs[idx], ys[idx], z_from]), np.array([0.0, 0.0, -1.0]), None, 1, -1, gid)
        out[idx] = z_from - dist if dist >= 0 else np.nan
    return out


def _away_from_edges(xs, world):
    edges = np.array([s.x0 for s in world.terrain.sections] + [world.terrain.sections[-1].x1])
    return np.min(np.abs(xs[..., None] - edges), axis=-1) > EDGE_CLEARANCE_M


STAIRS = """
    name: scan-stairs
    duration: 0.1
    terrain:
      - stairs: {start: 0.3, steps: 5, rise: 0.08, run: 0.27}
      - slope: {start: 1.65, length: 1.0, angle_deg: 15}
    sensing:
      height_scan: {size: [3.0, 1.2], resolution: 0.07, offset: [0.6, 0.1]}
"""


@pytest.mark.parametrize("x,y,yaw", [(0.0, 0.0, 0.0), (0.9, 0.2, 0.35), (1.4, -0.3, -2.6)])
def test_box_and_slope_heights_match_the_exact_query_and_mj_ray(write_scenario, load_one, x, y, yaw):
    sc = load_one(write_scenario(STAIRS))
    world, m, d, scanner = _posed_scanner(sc, x, y, yaw)
    scanner.take(0)
    z = scanner.slots[0]
    assert scanner.poses[0] == pytest.approx([x, y, yaw], abs=1e-12)
    xs, ys = _world_points(scan_grid(sc.sensing.height_scan), x, y, yaw)
    exact = world.terrain.height_at(xs.ravel(), ys.ravel()).reshape(xs.shape)     # reference: exact query
    ray = _reference_rays(world, xs, ys)                                            # reference: mj_ray
    inside = _away_from_edges(xs, world) & (np.abs(ys) < 1.5 - EDGE_CLEARANCE_M)   # on the 3 m wide pieces
    assert inside.sum() > 0.8 * inside.size
    assert np.all(np.isfinite(z))
    np.testing.assert_allclose(z[inside], exact[inside], atol=BOX_TOL_M, rtol=0)
    np.testing.assert_allclose(z[inside], ray[inside], atol=BOX_TOL_M, rtol=0)
    # The steps are really there (the scan is not flat).
    assert np.ptp(z[inside]) > 0.3


def _triangulation_bound(world, piece_x0, piece, xs, ys):
    """Per point: |twist| / 4 of its heightfield cell, m, plus float32 storage of the elevations.

    Bilinear interpolation over a unit cell f(u, v) = h00 + (h10 - h00) u + (h01 - h00) v + T u v,
    T = h00 + h11 - h10 - h01; the plane through the triangle (0,0), (1,0), (1,1) is
    g = h00 + (h10 - h00) u + (h11 - h10) v, so f - g = -T v (1 - u), at most |T| / 4 (u = v = 1/2);
    the other triangle and the other diagonal give the same bound by symmetry.
    """
    hid = int(world.model.hfield_nrow.shape[0]) - 1
    nrow, ncol = int(world.model.hfield_nrow[hid]), int(world.model.hfield_ncol[hid])
    data = world.model.hfield_data[world.model.hfield_adr[hid]:world.model.hfield_adr[hid] + nrow * ncol]
    data = data.reshape(nrow, ncol).astype(float) * piece.height
    fx = (xs - piece_x0) / (piece.length / (ncol - 1))
    fy = (ys + piece.width / 2) / (piece.width / (nrow - 1))
    ix = np.clip(np.floor(fx).astype(int), 0, ncol - 2)
    iy = np.clip(np.floor(fy).astype(int), 0, nrow - 2)
    twist = data[iy, ix] + data[iy + 1, ix + 1] - data[iy, ix + 1] - data[iy + 1, ix]
    return np.abs(twist) / 4 + 1e-6


def test_heightfield_heights_match_mj_ray_and_the_triangulation_bound(write_scenario, load_one):
    sc = load_one(write_scenario("""
        name: scan-rough
        duration: 0.1
        seed: 5
        terrain:
          - rough: {start: 0.2, length: 2.0, width: 2.0, height: 0.08, wavelength: 0.25, cell_size: 0.05}
        sensing:
          height_scan: {size: [1.5, 1.0], resolution: 0.033, offset: [0.7, 0.0]}
    """))
    world, m, d, scanner = _posed_scanner(sc, 0.35, 0.05, 0.2)
    scanner.take(0)
    z = scanner.slots[0]
    xs, ys = _world_points(scan_grid(sc.sensing.height_scan), 0.35, 0.05, 0.2)
    piece = sc.terrain[0]
    on = (xs > piece.start + 1e-3) & (xs < piece.start + piece.length - 1e-3) & (np.abs(ys) < piece.width / 2 - 1e-3)
    assert on.sum() > 0.9 * on.size
    ray = _reference_rays(world, xs, ys)                                            # reference: mj_ray
    np.testing.assert_allclose(z[on], ray[on], atol=BOX_TOL_M, rtol=0)
    exact = world.terrain.height_at(xs.ravel(), ys.ravel()).reshape(xs.shape)     # bilinear query
    bound = _triangulation_bound(world, piece.start, piece, xs[on], ys[on])
    err = np.abs(z[on] - exact[on])
    assert np.all(err <= bound), f"worst excess {np.max(err - bound):.3g} m"
    assert np.ptp(z[on]) > 0.04   # the bumps are there


def test_the_robot_and_payloads_never_appear_in_the_scan(write_scenario, load_one):
    sc = load_one(write_scenario("""
        name: scan-load
        duration: 0.1
        payloads:
          - {name: crate, mass: 2.0, size: [0.5, 0.4, 0.3], offset: [0.0, 0.0, 0.25]}
        sensing:
          height_scan: {size: [1.2, 0.8], resolution: 0.05}
    """))
    world, m, d, scanner = _posed_scanner(sc, 0.0, 0.0, 0.0, z=0.4)
    # In the episode's own data a vertical ray from above the grid centre meets the crate (MuJoCo's mj_ray):
    gid = np.zeros(1, dtype=np.int32)
    mujoco.mj_ray(m, d, np.array([0.0, 0.0, 5.0]), np.array([0.0, 0.0, -1.0]), None, 1, -1, gid)
    assert int(gid[0]) == world.payloads[0].geom_id
    scanner.take(0)
    np.testing.assert_array_equal(scanner.slots[0], 0.0)   # the ground plane under everything, z = 0
    # The episode end to end: every scan of a standing robot reads the ground.
    _, ep, rec = _run(sc)
    assert ep.status == "completed"
    for row in rec.rows:
        np.testing.assert_array_equal(row["height_scan"], 0.0)


STEP_AHEAD = "tests/fixtures/scenarios/sensing-step-ahead.yaml"


def test_a_controller_sees_a_10_cm_step_ahead(load_one):
    sc = load_one(STEP_AHEAD)
    world, ep, rec = _run(sc)
    assert ep.status == "completed"
    info = rec.info
    assert info.privileged is False and info.foot_force is None and info.joint_torque is False
    grid = info.height_scan_xy
    assert grid.shape[2] == 2 and rec.rows[0]["height_scan"].shape == grid.shape[:2]
    step_x = sc.terrain[0].start
    for row, pos, quat in zip(rec.rows, ep.trace["base_pos"], ep.trace["base_quat"]):
        assert row["privileged"] is None
        xs, ys = _world_points(grid, pos[0], pos[1], _yaw(quat))
        z = row["height_scan"]
        far = np.abs(xs - step_x) > EDGE_CLEARANCE_M
        np.testing.assert_allclose(z[far & (xs > step_x)], 0.10, atol=BOX_TOL_M, rtol=0)
        np.testing.assert_allclose(z[far & (xs < step_x)], 0.0, atol=BOX_TOL_M, rtol=0)
        assert (far & (xs > step_x)).sum() >= grid.shape[1] and (far & (xs < step_x)).sum() >= grid.shape[1]


def _scan_from_trace(world, sc, trace, k):
    """The noiseless scan a scanner takes with the trunk where the trace has it at tick k (exact query)."""
    grid = scan_grid(sc.sensing.height_scan)
    pos, quat = trace["base_pos"][k], trace["base_quat"][k]
    xs, ys = _world_points(grid, pos[0], pos[1], _yaw(quat))
    return world.terrain.height_at(xs.ravel(), ys.ravel()).reshape(xs.shape)


@pytest.mark.parametrize("rate,latency,period,lag", [(None, 0.0, 1, 0), (100.0, 0.006, 5, 3), (50.0, 0.05, 10, 25)])
def test_rate_and_latency_to_the_exact_tick(write_scenario, load_one, rate, latency, period, lag):
    rate_text = "" if rate is None else f", rate: {rate}"
    sc = load_one(write_scenario(f"""
        name: scan-timing
        duration: 0.3
        terrain:
          - slope: {{start: -2.0, length: 6.0, angle_deg: 10}}
        disturbances:
          - steady_force: {{at: 0.0, force: [150.0, 40.0, 0.0]}}
        sensing:
          height_scan: {{size: [0.6, 0.4], resolution: 0.1, latency: {latency}{rate_text}}}
    """))
    world, ep, rec = _run(sc)
    trace = ep.trace
    n = len(trace)
    assert n == 150
    # The trunk moves enough between ticks that a scan one tick off differs by far more than the tolerance.
    step_m = np.abs(np.diff(trace["base_pos"][:, 0]))
    assert np.median(step_m) * math.tan(math.radians(10)) > 10 * BOX_TOL_M
    for k in range(n):
        z = rec.rows[k]["height_scan"]
        if k < lag:
            assert np.isnan(z).all(), f"tick {k}: a scan arrived before the latency"
            continue
        taken = ((k - lag) // period) * period
        np.testing.assert_allclose(z, _scan_from_trace(world, sc, trace, taken), atol=BOX_TOL_M, rtol=0,
                                   err_msg=f"tick {k} should show the scan of tick {taken}")


def _flat_scan(write_scenario, load_one, noise, dropout, duration=0.2, rate=None):
    rate_text = "" if rate is None else f", rate: {rate}"
    sc = load_one(write_scenario(f"""
        name: scan-noise
        duration: {duration}
        seed: 11
        sensing:
          height_scan: {{size: [1.0, 1.0], resolution: 0.05, noise: {noise}, dropout: {dropout}{rate_text}}}
    """))
    return _run(sc)


def test_height_noise_has_the_asked_std_and_zero_mean(write_scenario, load_one):
    # Flat ground at z = 0: a reading is the noise alone. References: the sample mean of n draws has
    # standard error std / sqrt(n) (normal law); (n - 1) s^2 / std^2 follows a chi-square law with n - 1
    # degrees of freedom (scipy.stats.chi2). Bounds at a 1e-6 two-sided risk.
    std = 0.02
    _, ep, rec = _flat_scan(write_scenario, load_one, std, 0.0, rate=50.0)
    scans = np.array([r["height_scan"] for r in rec.rows[::10]])   # one per scan (50 Hz of 500 Hz)
    x = scans.ravel()
    n = x.size
    assert n > 4000
    z = stats.norm.ppf(1 - 5e-7)
    assert abs(x.mean()) < z * std / math.sqrt(n)
    lo, hi = stats.chi2.ppf([5e-7, 1 - 5e-7], n - 1)
    assert lo * std ** 2 / (n - 1) < x.var(ddof=1) < hi * std ** 2 / (n - 1)
    assert stats.normaltest(x).pvalue > 1e-4
    # Held between scans: the ticks in between repeat the scan exactly.
    for k in range(1, 10):
        np.testing.assert_array_equal(rec.rows[k]["height_scan"], rec.rows[0]["height_scan"])


def test_dropout_fraction_follows_the_binomial_law(write_scenario, load_one):
    # Reference: the number of dropped points of n is Binomial(n, p); bounds at a 1e-6 two-sided risk
    # (scipy.stats.binom).
    p = 0.15
    _, ep, rec = _flat_scan(write_scenario, load_one, 0.0, p, duration=0.05)
    scans = np.array([r["height_scan"] for r in rec.rows])
    lost = np.isnan(scans)
    n = lost.size
    lo, hi = stats.binom.ppf([5e-7, 1 - 5e-7], n, p)
    assert lo <= lost.sum() <= hi
    np.testing.assert_array_equal(scans[~lost], 0.0)   # the points kept are exact


def test_noise_is_reproducible_and_leaves_the_trace_alone(write_scenario, load_one):
    _, ep1, rec1 = _flat_scan(write_scenario, load_one, 0.01, 0.1, duration=0.05)
    _, ep2, rec2 = _flat_scan(write_scenario, load_one, 0.01, 0.1, duration=0.05)
    for a, b in zip(rec1.rows, rec2.rows):
        np.testing.assert_array_equal(a["height_scan"], b["height_scan"])
    _, ep3, _ = _flat_scan(write_scenario, load_one, 0.0, 0.0, duration=0.05)
    # A sensor only reads: the physics (and the trace) is the same with and without its noise.
    np.testing.assert_array_equal(ep1.trace["qpos"], ep3.trace["qpos"])


ONE_STEP_PER_TICK = """
    name: forces
    duration: 0.3
    timestep: 0.002
    control_rate: 500
    faults:
      - limp: {{at: 0.1, joint: FL_knee}}
    sensing:
      privileged: true
      foot_force: {{mode: {mode}, noise: {noise}}}
      joint_torque: {{noise: {tnoise}}}
"""


@pytest.mark.parametrize("mode", ["3d", "normal"])
def test_foot_force_and_joint_torque_are_the_last_step_s_values(write_scenario, load_one, mode):
    # References: the trace's foot_force (MuJoCo's mj_contactForce of the tick's physics step) and
    # joint_torque (the torque applied after the limits and the motor faults) of the previous tick; with
    # one physics step per tick the sensors read exactly those.
    sc = load_one(write_scenario(ONE_STEP_PER_TICK.format(mode=mode, noise=0.0, tnoise=0.0)))
    world, ep, rec = _run(sc)
    tr = ep.trace
    assert ep.status == "completed"
    assert rec.info.foot_force == mode and rec.info.joint_torque is True and rec.info.height_scan_xy is None
    F = len(world.foot_site_ids)
    for k, row in enumerate(rec.rows):
        ff, jt = row["foot_force"], row["joint_torque"]
        assert ff.shape == ((F, 3) if mode == "3d" else (F,))
        assert row["privileged"] is not None and row["height_scan"] is None
        if k == 0:
            np.testing.assert_array_equal(ff, 0.0)
            np.testing.assert_array_equal(jt, 0.0)
            continue
        want = tr["foot_force"][k - 1]
        if mode == "3d":
            np.testing.assert_array_equal(ff, want)
        else:   # flat ground: the contact normal is world z
            np.testing.assert_allclose(ff, want[:, 2], atol=1e-9, rtol=0)
        np.testing.assert_allclose(jt, tr["joint_torque"][k - 1], atol=1e-12, rtol=0)
    # The limp knee applies nothing, and the sensor says so.
    knee = list(world.robot.joints).index("FL_knee")
    late = np.array([r["joint_torque"][knee] for r in rec.rows[60:]])
    np.testing.assert_array_equal(late, 0.0)
    assert np.abs(np.array([r["joint_torque"] for r in rec.rows[60:]])).max() > 1.0
    standing = np.array([r["foot_force"] for r in rec.rows[100:]])
    total_z = standing.sum(axis=1) if mode == "normal" else standing[:, :, 2].sum(axis=1)
    assert np.median(total_z) > 0.5 * NominalRobot(world.robot).mass_kg * 9.81


def test_force_and_torque_noise_have_the_asked_std(write_scenario, load_one):
    # Reading minus the trace's value of the previous tick is the noise alone; same laws and risk as above.
    fstd, tstd = 2.0, 0.3
    sc = load_one(write_scenario(ONE_STEP_PER_TICK.format(mode="3d", noise=fstd, tnoise=tstd)))
    world, ep, rec = _run(sc)
    tr = ep.trace
    fn = np.array([r["foot_force"] for r in rec.rows[1:]]) - tr["foot_force"][:-1]
    tn = np.array([r["joint_torque"] for r in rec.rows[1:]]) - tr["joint_torque"][:-1]
    zq = stats.norm.ppf(1 - 5e-7)
    for x, std in ((fn.ravel(), fstd), (tn.ravel(), tstd)):
        n = x.size
        assert abs(x.mean()) < zq * std / math.sqrt(n)
        lo, hi = stats.chi2.ppf([5e-7, 1 - 5e-7], n - 1)
        assert lo * std ** 2 / (n - 1) < x.var(ddof=1) < hi * std ** 2 / (n - 1)


def test_without_a_sensing_key_nothing_changes(write_scenario, load_one):
    sc = load_one(write_scenario("""
        name: plain
        duration: 0.05
    """))
    from bench.controllers.base import SensingInfo

    world, ep, rec = _run(sc)
    assert NominalRobot(world.robot).sensing == SensingInfo()   # there before any episode, too
    assert rec.info.privileged is True and rec.info.height_scan_xy is None
    assert rec.info.foot_force is None and rec.info.joint_torque is False
    for row in rec.rows:
        assert row["privileged"] is not None
        assert row["height_scan"] is None and row["foot_force"] is None and row["joint_torque"] is None


def test_terrain_rays_read_nan_off_the_terrain(write_scenario, load_one):
    sc = load_one(write_scenario(STAIRS))
    world = build_world(sc)
    rays = TerrainRays(world, 1)
    z, gid = rays.cast_one(0.5, 0.0, 20.0)
    assert z == pytest.approx(0.08, abs=1e-12) and gid in set(world.terrain_geom_ids.tolist())
    # Pointing away from everything: no hit at all.
    out = np.zeros(1)
    rays.vec[:] = 0
    mujoco_miss = rays.cast_one(0.5, 0.0, -5000.0)   # below the catch-all plane, looking further down
    assert math.isnan(mujoco_miss[0])
    rays.cast(np.array([0.5]), np.array([0.0]), 0.5, 0.0, 0.0, out)
    assert out[0] == pytest.approx(0.08, abs=1e-9)


def test_bad_sensing_fields_are_reported_with_file_line_and_field(write_scenario, load_one):
    from bench.errors import ScenarioErrors

    path = write_scenario("""
        name: bad-sensing
        duration: 1.0
        sensing:
          privileged: maybe
          height_scan: {size: [1.0, 1.0], resolution: 0.1, rate: 70, latency: 0.003}
          foot_force: {mode: 2d}
          joint_torque: {noise: -1}
    """)
    with pytest.raises(ScenarioErrors) as info:
        load_one(path)
    text = str(info.value)
    lines = text.splitlines()
    for field, line in (("sensing.privileged", 5), ("sensing.height_scan.rate", 6), ("sensing.height_scan.latency", 6),
                        ("sensing.foot_force.mode", 7),
                        ("sensing.joint_torque.noise", 8)):
        assert any(f"{path}:{line}:" in ln and f"{field}:" in ln for ln in lines), (field, text)
    assert "rate 70 Hz is not the control rate 500 Hz divided by a whole number" in text
    assert "latency 0.003 s is not a whole number of control ticks" in text
    path = write_scenario("""
        name: bad-dropout
        duration: 1.0
        sensing:
          height_scan:
            size: [1.0, 1.0]
            resolution: 0.001
            dropout: 1.5
    """, name="dropout.yaml")
    with pytest.raises(ScenarioErrors) as info:
        load_one(path)
    assert f"{path}:8:" in str(info.value) and "sensing.height_scan.dropout:" in str(info.value)
    path = write_scenario("""
        name: too-many-points
        duration: 1.0
        sensing:
          height_scan:
            size: [1.0, 1.0]
            resolution: 0.005
    """, name="points.yaml")
    with pytest.raises(ScenarioErrors) as info:
        load_one(path)
    assert f"{path}:7:" in str(info.value) and "201 x 201 = 40401 points" in str(info.value)


def test_json_schema_documents_the_sensing_key():
    from bench.scenario import scenario_json_schema

    schema = scenario_json_schema()
    text = str(schema)
    for word in ("height_scan", "foot_force", "joint_torque", "privileged", "resolution", "dropout", "latency"):
        assert word in text
    assert "sensing" in schema["properties"]


def test_a_controller_cannot_change_what_it_is_shown_next(write_scenario, load_one):
    sc = load_one(write_scenario("""
        name: vandal
        duration: 0.05
        terrain:
          - blocks: {start: 0.3, heights: [0.1], block_length: 1.0}
        sensing:
          height_scan: {size: [1.0, 0.6], resolution: 0.1}
          foot_force: {mode: normal}
          joint_torque: {}
    """))

    class Vandal(Recorder):
        def step(self, obs, command):
            tau = super().step(obs, command)
            k = len(self.rows)
            if k % 3 == 1:
                obs.height_scan[:] = 99.0       # scribbles on its copy
                obs.foot_force[:] = -1.0
                obs.joint_torque[:] = 7.0
            elif k % 3 == 2:
                obs.height_scan = None          # throws it away
                obs.foot_force = obs.joint_torque = None
            return tau

    _, ep_v, vandal = _run(sc, Vandal())
    _, ep_h, honest = _run(sc)
    assert len(vandal.rows) == len(honest.rows) == 25
    for a, b in zip(vandal.rows, honest.rows):
        for key in ("height_scan", "foot_force", "joint_torque"):
            np.testing.assert_array_equal(a[key], b[key])


ONE_STEP_RUNOUT = """
    name: scan-runout
    duration: 0.1
    terrain:
      - stairs: {start: 0.45, steps: 1, rise: 0.10, run: 0.30, direction: up}
"""


def test_rays_read_a_long_run_out_box_whatever_the_batch_origin(write_scenario, load_one):
    """A 30 m run-out box beyond one step, read from batch origins that are not above it: the batch
    of MuJoCo 3.3's mj_multiRay read the ground plane 1.6 m below it there, so on 3.3 and 3.4 every
    point is cast on its own. Both paths (the one this MuJoCo uses in ``cast``, and the per-point
    one) against the exact height query of the terrain."""
    sc = load_one(write_scenario(ONE_STEP_RUNOUT))
    world = build_world(sc)
    rng = np.random.default_rng(11)
    xs, ys = rng.uniform(-0.5, 2.5, 400), rng.uniform(-0.8, 0.8, 400)
    exact = world.terrain.height_at(xs, ys)
    edge = (np.abs(xs - 0.45) < EDGE_CLEARANCE_M) | (np.abs(xs - 0.75) < EDGE_CLEARANCE_M)
    rays = TerrainRays(world, len(xs))
    assert np.any(exact[~edge] > 0.05) and np.any(np.abs(exact[~edge]) < 1e-9)   # both levels are there
    for cx in (-0.5, 0.3, 0.6, 1.5):
        batch, each = np.zeros(len(xs)), np.zeros(len(xs))
        rays.cast(xs, ys, cx, 0.0, 0.0, batch)
        rays._cast_each(xs, ys, 0.0, each)
        np.testing.assert_allclose(batch[~edge], exact[~edge], atol=BOX_TOL_M, rtol=0)
        np.testing.assert_allclose(each[~edge], exact[~edge], atol=1e-9, rtol=0)
