"""Terrain-aware stepping: foothold adjustment on a height scan, plane fits, the rotated friction
pyramid, and a short stair episode through the real sensing path."""

import math
import textwrap

import numpy as np
import pytest

from bench.controllers.foothold import HeightScanMap, fit_plane, plane_normal
from bench.controllers.force_qp import ForceQP
from bench.controllers.ground import GroundPlane

RISE, RUN, START = 0.10, 0.30, 0.80          # synthetic stairs: edges at START + k RUN
EDGES = [START + k * RUN for k in range(4)]


def _grid(size=(1.1, 0.5), res=0.02, offset=(0.1, 0.0)):
    nx, ny = int(round(size[0] / res)) + 1, int(round(size[1] / res)) + 1
    gx = offset[0] + np.linspace(-size[0] / 2, size[0] / 2, nx)
    gy = offset[1] + np.linspace(-size[1] / 2, size[1] / 2, ny)
    return np.stack(np.meshgrid(gx, gy, indexing="ij"), axis=-1)


def _stairs(wx):
    return np.clip(np.floor((wx - START) / RUN) + 1, 0, 4) * RISE


def _scan_map(trunk_xy=(0.9, 0.0), yaw=0.0, **kw):
    xy = _grid()
    m = HeightScanMap(xy, **kw)
    c, s = math.cos(yaw), math.sin(yaw)
    wx = trunk_xy[0] + c * xy[..., 0] - s * xy[..., 1]
    m.update(_stairs(wx), trunk_xy[0], trunk_xy[1], yaw)
    return m


@pytest.mark.parametrize("yaw_deg", [0.0, 20.0])
def test_footholds_keep_off_stair_edges(yaw_deg):
    margin = 0.065
    m = _scan_map(yaw=math.radians(yaw_deg), edge_margin_m=margin, max_shift_m=0.12)
    # heuristic points swept across two edges, also off the centre line
    for x in np.arange(0.70, 1.25, 0.005):
        for y in (-0.1, 0.0, 0.1):
            m.forget(0)
            fx, fy, found = m.adjust(0, x, y, travel=1)
            assert found
            d_edge = min(abs(fx - e) for e in EDGES)
            # the safety window spans whole cells of 2 cm: the kept distance is the margin less half a cell
            assert d_edge >= margin - 0.01 - 1e-9, (x, y, fx)
            assert math.hypot(fx - x, fy - y) <= 0.12 + 1e-9
            # a point already safe stays exactly where it is (the window is a square in the scan's
            # frame: its reach across a turned edge is up to sqrt(2) times the margin, plus a cell)
            fi, fj = m.to_index(x, y)
            inside = 5 <= fi <= m.shape[0] - 6 and 5 <= fj <= m.shape[1] - 6   # window within the scan
            if inside and min(abs(x - e) for e in EDGES) > margin * math.sqrt(2.0) + 0.02:
                assert (fx, fy) == pytest.approx((x, y))


def test_foothold_prefers_the_tread_ahead_and_keeps_its_shift():
    m = _scan_map(edge_margin_m=0.065)
    e = EDGES[1]                                  # 1.10
    fx, _, _ = m.adjust(1, e - 0.01, 0.0, travel=1)
    assert fx > e + 0.05                          # onto the next tread, not back behind the edge
    m.forget(1)
    bx, _, _ = m.adjust(1, e - 0.01, 0.0, travel=-1)
    assert bx < e - 0.05                          # walking backward: back onto the tread behind
    m.forget(1)
    m.adjust(1, e - 0.01, 0.0, travel=1)
    fx2, _, _ = m.adjust(1, e + 0.005, 0.0, travel=1)
    assert fx2 - (e + 0.005) == pytest.approx(fx - (e - 0.01))   # the same shift while it stays safe
    m.forget(1)
    fx3, _, _ = m.adjust(1, e + 0.005, 0.0, travel=1)
    assert fx3 - (e + 0.005) < fx2 - (e + 0.005) - 0.01         # a fresh search would shift it less


def test_dropouts_and_off_scan_points_are_never_footholds():
    m = _scan_map()
    h = m.heights.copy()
    h[20:30, 10:16] = np.nan
    m.update(h, 0.9, 0.0, 0.0)
    x, y = m.to_world(25, 13)
    fx, fy, found = m.adjust(0, x, y)
    assert found and not np.isnan(m.height_at(fx, fy))
    holes = [m.to_world(i, j) for i in range(20, 30) for j in range(10, 16)]
    gap = min(math.hypot(fx - hx, fy - hy) for hx, hy in holes)
    # a dropout is an edge point: kept at the margin (a missing point half a cell further than its centre)
    assert gap >= m.edge_margin_m + 0.5 * m.res - 0.5 * m.res * math.sqrt(2.0) - 1e-9
    assert m.adjust(0, 10.0, 0.0) == (10.0, 0.0, False)


def test_apex_search_sees_the_riser_between_liftoff_and_touchdown():
    m = _scan_map()
    assert m.max_height_along(0.95, 0.0, 1.2, 0.0) == pytest.approx(0.2)
    assert m.max_height_along(0.85, 0.0, 1.05, 0.0) == pytest.approx(0.1)


@pytest.mark.parametrize("plane", [(0.3, 0.0, 0.0), (0.1, math.tan(math.radians(12)), 0.0),
                                   (-0.2, 0.15, -0.3)])
def test_plane_fits_match_numpy_lstsq(plane):
    rng = np.random.default_rng(7)
    h, gx, gy = plane
    pts = rng.uniform(-0.3, 0.3, size=(4, 2))
    z = h + gx * pts[:, 0] + gy * pts[:, 1] + rng.normal(0, 0.01, 4)
    a = np.column_stack([np.ones(4), pts])
    ref = np.linalg.lstsq(a, z, rcond=None)[0]
    assert fit_plane(np.column_stack([pts, z])) == pytest.approx(tuple(ref), abs=1e-12)
    # the stacks' closed-form ground plane (no ridge) centred at the origin gives the same plane
    g = GroundPlane(4, slope_reg=0.0, max_slope=10.0)
    g.reset([(p[0], p[1], zi + 0.02) for p, zi in zip(pts, z)], 0.02)
    assert g.fit(0.0, 0.0) == pytest.approx(tuple(ref), abs=1e-9)


def test_scan_normal_of_a_tilted_plane_and_none_on_an_edge():
    xy = _grid()
    m = HeightScanMap(xy)
    gx, gy = 0.2, -0.1
    m.update(0.05 + gx * (1.0 + xy[..., 0]) + gy * xy[..., 1], 1.0, 0.0, 0.0)
    assert m.normal_at(1.1, 0.0) == pytest.approx(plane_normal(gx, gy), abs=1e-9)
    assert _scan_map().normal_at(EDGES[1] + 0.01, 0.0) is None
    assert _scan_map().normal_at(EDGES[1] + 0.15, 0.0) == pytest.approx((0.0, 0.0, 1.0), abs=1e-12)


def _cone_excess(f, n, mu):
    """Second formulation: circular cone ||f - (f.n) n|| <= mu_c (f.n); returns the excess (<= 0 inside)."""
    fn = float(f @ n)
    return float(np.linalg.norm(f - fn * n)) - mu * fn


@pytest.mark.parametrize("tilt_deg", [10.0, 20.0])
def test_rotated_pyramid_keeps_forces_in_the_tilted_cone(tilt_deg):
    from scipy.spatial.transform import Rotation

    mu = 0.5
    a = math.radians(tilt_deg)
    n = np.array([-math.sin(a), 0.0, math.cos(a)])          # ground rising along +x
    r = np.array([[0.17, 0.13, -0.29], [0.17, -0.13, -0.29], [-0.17, 0.13, -0.29], [-0.17, -0.13, -0.29]])
    # a forward push of 0.45 of the weight: inside the world-axis pyramid, outside the tilted one
    w = np.array([54.0, 0.0, 120.0, 0.0, 0.0, 0.0])
    world = ForceQP(4, mu=mu, alpha=1e-3, beta=0.0)
    f_world = world.solve(r, w, [1.0] * 4).reshape(4, 3).copy()
    turned = ForceQP(4, mu=mu, alpha=1e-3, beta=0.0)
    turned.set_normals([n] * 4)
    f = turned.solve(r, w, [1.0] * 4).reshape(4, 3).copy()
    assert world.last_ok and turned.last_ok
    # tangent axes from an independent construction: scipy's rotation taking z to n
    rot, _ = Rotation.align_vectors([n], [[0.0, 0.0, 1.0]])
    t1, t2 = rot.apply([1.0, 0.0, 0.0]), rot.apply([0.0, 1.0, 0.0])
    assert rot.apply([0.0, 0.0, 1.0]) == pytest.approx(n, abs=1e-12)
    for fi in f:
        fn = fi @ n
        assert fn > 0
        assert abs(fi @ t1) <= mu * fn + 1e-6 and abs(fi @ t2) <= mu * fn + 1e-6
        # the pyramid of half-width mu lies inside the circular cone of mu * sqrt(2)
        assert _cone_excess(fi, n, mu * math.sqrt(2.0)) <= 1e-6
    # the world-axis pyramid gives forces the tilted ground cannot hold
    assert max(_cone_excess(fi, n, mu * math.sqrt(2.0)) for fi in f_world) > 0.0


def test_pyramid_rows_for_world_z_are_the_world_axis_rows():
    rows = ForceQP.pyramid_rows((0.0, 0.0, 1.0), 0.5)
    assert rows.tolist() == [[1.0, 0.0, -0.5], [-1.0, 0.0, -0.5], [0.0, 1.0, -0.5], [0.0, -1.0, -0.5]]


ONE_STEP = """
name: scan-one-step
description: one 10 cm step, 30 cm tread, with a height scan
robot: quad12
duration: {duration}
seed: 5
terrain:
  - stairs: {{start: 0.45, steps: 1, rise: 0.10, run: 0.30, direction: up}}
{sensing}
commands:
  - {{at: 0.0}}
  - {{at: 0.3, vx: 0.3}}
criteria:
  no_fall: true
"""


def _episode(tmp_path, sensing, duration=3.2, controller=None, text=None):
    from bench.robot.model import NominalRobot
    from bench.scenario import load_scenarios
    from bench.sim.episode import run_episode
    from bench.world.build import build_world
    from bench.controllers.stacks import ForceQPL1Controller

    path = tmp_path / "s.yaml"
    path.write_text(textwrap.dedent((text or ONE_STEP).format(duration=duration, sensing=sensing)))
    sc = load_scenarios([str(path)])[0]
    world = build_world(sc)
    ep = run_episode(world, sc, controller or ForceQPL1Controller(), NominalRobot(world.robot))
    return ep


def test_short_stair_episode_climbs_one_step(tmp_path):
    sensing = "sensing:\n  height_scan: {size: [1.1, 0.5], resolution: 0.02, offset: [0.1, 0.0]}"
    ep = _episode(tmp_path, sensing)
    assert ep.status == "completed", ep.reason
    pos = ep.trace.arrays["base_pos"]
    feet = ep.trace.arrays["foot_pos"][-1]
    # all four feet up on the step (its edge at x = 0.45, top at 0.10; the foot site is 2 cm above the
    # ground it stands on), and the trunk at standing height above it
    assert np.all(feet[:, 0] > 0.45 + 0.05), feet
    assert np.all(feet[:, 2] > 0.08), feet         # on the lower ground they would read about 0.01
    assert pos[-1, 2] > 0.10 + 0.25


def test_scan_is_shifted_into_the_trunk_states_vertical_frame(tmp_path):
    """The scan reads world heights; a stack's trunk state may be off vertically (an estimate that
    drifted). Here the true state is handed over 5 cm too high: the stack's scan offset must take up
    those 5 cm (compared with the same run without the bias, which leaves only the feet's contact
    compression in the offset), else footholds and swing apexes would mix two vertical frames."""
    from bench.controllers.stacks import ForceQPL1Controller

    class Biased(ForceQPL1Controller):
        def step(self, obs, command):
            obs.privileged.base_pos[2] += 0.05
            return super().step(obs, command)

    sensing = "sensing:\n  height_scan: {size: [1.1, 0.5], resolution: 0.02, offset: [0.1, 0.0]}"
    plain, biased = ForceQPL1Controller(privileged=True), Biased(privileged=True)
    for ctrl in (plain, biased):
        ep = _episode(tmp_path, sensing, controller=ctrl)
        assert ep.status == "completed", ep.reason
    assert plain._scan_off is not None and abs(plain._scan_off) < 0.01      # contact compression only
    assert abs((biased._scan_off - plain._scan_off) - 0.05) < 0.003, (biased._scan_off, plain._scan_off)
    # and it still climbs the step in the shifted frame
    assert np.all(ep.trace.arrays["foot_pos"][-1][:, 2] > 0.08)


# ------------------------------------------------------------------ taller on a descent

def test_descent_height_ramp_endpoints():
    from bench.controllers.stacks import descent_height

    start, full = math.radians(5.0), math.radians(14.0)
    assert descent_height(0.0, 0.06, start, full) == 0.0                      # level
    assert descent_height(math.radians(-14.0), 0.06, start, full) == 0.0      # nose up (a climb)
    assert descent_height(math.radians(4.9), 0.06, start, full) == 0.0
    assert descent_height(start, 0.06, start, full) == 0.0                    # ramp starts at 0 ...
    assert descent_height(full, 0.06, start, full) == pytest.approx(0.06)     # ... and is full at the clip
    assert descent_height(math.radians(9.5), 0.06, start, full) == pytest.approx(0.03)
    assert descent_height(math.radians(20.0), 0.06, start, full) == pytest.approx(0.06)
    assert descent_height(math.radians(10.0), 0.0, start, full) == 0.0        # switched off
    # a start at or past the clip makes it a step at the start
    assert descent_height(math.radians(14.0), 0.06, full, full) == 0.0
    assert descent_height(math.radians(14.1), 0.06, full, full) == pytest.approx(0.06)
    assert descent_height(math.radians(1.0), 0.06, 0.0, full) > 0.0           # start 0: any nose-down pitch


@pytest.mark.parametrize("rise,run", [(0.08, 0.35), (0.10, 0.30)])
def test_scan_slope_of_a_staircase_is_about_rise_over_run_at_every_phase(rise, run):
    from bench.controllers.stacks import scan_slope, scan_slope_weights

    # the bundled scan's grid along the heading (1.1 m, 2 cm, 10 cm ahead), 26 rows across
    x = np.tile(np.arange(-0.45, 0.65 + 1e-9, 0.02)[:, None], (1, 26))
    w = scan_slope_weights(x)
    for phase in np.arange(0.0, run, 0.01):
        h = np.floor((x + phase) / run) * rise
        s = scan_slope(h, x, w)
        assert 0.9 * rise / run < s < 1.1 * rise / run
        assert s == pytest.approx(np.polyfit(x.ravel(), h.ravel(), 1)[0], abs=1e-12)
        assert scan_slope(-h, x, w) == pytest.approx(-s)          # the flight down
        # dropouts are left out: the slope of the points left
        hn = h.copy()
        hn[:5] = np.nan
        assert scan_slope(hn, x, w) == pytest.approx(np.polyfit(x[5:].ravel(), h[5:].ravel(), 1)[0], abs=1e-12)
    assert scan_slope(np.full(x.shape, np.nan), x, w) == 0.0
    assert scan_slope(0.3 + 0.0 * x, x, w) == pytest.approx(0.0, abs=1e-12)   # level, at any height


def test_bound_pitch_keeps_the_desired_pitch_between_level_and_the_scaled_slope():
    from bench.controllers.stacks import bound_pitch

    r = math.radians
    assert bound_pitch(r(14.0), r(12.9), 0.8) == pytest.approx(r(0.8 * 12.9))    # down a flight: clipped
    assert bound_pitch(r(-14.0), r(-12.9), 0.8) == pytest.approx(r(-0.8 * 12.9))  # up a flight
    assert bound_pitch(r(6.0), r(12.9), 0.8) == r(6.0)          # inside the bound: unchanged
    assert bound_pitch(r(-6.0), r(-12.9), 0.8) == r(-6.0)
    assert bound_pitch(r(-10.0), r(8.0), 0.8) == 0.0             # plane nose up, terrain ahead down: level
    assert bound_pitch(r(10.0), 0.0, 0.8) == 0.0                 # level terrain: level trunk
    assert bound_pitch(r(10.0), r(-3.0), math.inf) == r(10.0)    # inf: no bound
    assert bound_pitch(r(-10.0), r(3.0), math.inf) == r(-10.0)


def _recording(**params):
    """A force-qp-l1 (true state) recording, per tick, the commanded height above the ground plane's
    nominal and the low-passed desired pitch."""
    from bench.controllers.stacks import ForceQPL1Controller

    class Recording(ForceQPL1Controller):
        def step(self, obs, command):
            tau = super().step(obs, command)
            pitch = self._tilt[0] if self.scan_map is not None else None
            self.rows.append((float(self.p_des[2] - self.ground_z - self.height_nominal), pitch))
            return tau

    ctrl = Recording(privileged=True, **params)
    ctrl.rows = []
    return ctrl


STEP_DOWN = ONE_STEP.replace("steps: 1, rise: 0.10, run: 0.30, direction: up",
                             "steps: 1, rise: 0.10, run: 0.30, direction: down")


def test_trunk_stands_taller_only_while_the_stance_plane_pitches_nose_down(tmp_path):
    from bench.controllers.stacks import descent_height

    sensing = "sensing:\n  height_scan: {size: [1.1, 0.5], resolution: 0.02, offset: [0.1, 0.0]}"
    start, full = math.radians(5.0), math.radians(14.0)
    # down one 10 cm step with the scan: the fitted plane pitches nose down and the trunk is raised by the
    # ramp of that pitch, tick by tick; up the same step it is never raised
    # (without the bound on the scan's mean slope: a single step is no flight, and over the 1.1 m scan
    # its mean slope is about 1.5 x 0.10 / 1.1 m, 7.8 deg, times scan_slope_factor)
    for text, descending in ((STEP_DOWN, True), (ONE_STEP, False)):
        ctrl = _recording(scan_slope_factor=math.inf)
        ep = _episode(tmp_path, sensing, duration=3.5, controller=ctrl, text=text)
        assert ep.status == "completed", ep.reason
        lift = np.array([r[0] for r in ctrl.rows])
        pitch = np.array([r[1] for r in ctrl.rows])
        lift_m = ctrl.params["scan_descent_height_m"]
        assert lift_m > 0.02
        assert ctrl.params["scan_descent_tilt_deg"] == 5.0 and ctrl.params["scan_max_tilt_deg"] == 14.0
        want = np.array([descent_height(p, lift_m, start, full) for p in pitch])
        assert np.allclose(lift, want, atol=1e-9)
        if descending:
            assert pitch.max() > math.radians(8.0)     # the step down tilts the plane nose down ...
            assert lift.max() > 0.02                   # ... and the trunk stands taller
        else:
            assert pitch.min() < -math.radians(8.0)    # nose up on the climb
            assert np.abs(lift).max() < 1e-9            # round-off of the subtraction only


def test_descent_height_changes_nothing_without_a_scan(tmp_path):
    # no scan, down the step: the same episode with and without the descent height, tick for tick
    runs = []
    for dz in (0.06, 0.0):
        ctrl = _recording(scan_descent_height_m=dz)
        ep = _episode(tmp_path, "", duration=3.5, controller=ctrl, text=STEP_DOWN)
        runs.append((ep.trace.arrays["qpos"], [r[0] for r in ctrl.rows]))
        assert all(r[1] is None for r in ctrl.rows)
    assert np.array_equal(runs[0][0], runs[1][0])
    assert runs[0][1] == runs[1][1]


# ------------------------------------------------------------------ scan gains, L1 applied input

SCAN = "sensing:\n  height_scan: {size: [1.1, 0.5], resolution: 0.02, offset: [0.1, 0.0]}"


def test_scan_attitude_gains_and_the_l1_reference_model_follow_them(tmp_path):
    from bench.controllers.stacks import ForceQPL1Controller

    blind, scan = ForceQPL1Controller(privileged=True), ForceQPL1Controller(privileged=True)
    _episode(tmp_path, "", duration=0.5, controller=blind)
    _episode(tmp_path, SCAN, duration=0.5, controller=scan)
    p = scan.params
    np.testing.assert_array_equal(blind.wrench.kp_rot, p["kp_rot"])
    np.testing.assert_array_equal(scan.wrench.kp_rot, p["scan_kp_rot"])
    np.testing.assert_array_equal(scan.wrench.kd_rot, p["scan_kd_rot"])
    assert scan.wrench._kp[3:6] == list(p["scan_kp_rot"]) and scan.wrench._kd[3:6] == list(p["scan_kd_rot"])
    for ctrl in (blind, scan):     # the predictor's model is the closed loop of the gains in use
        kp, kd = ctrl.wrench.kp, ctrl.wrench.kd
        np.testing.assert_array_equal(ctrl.l1.am[6:12, 0:6], -np.diag(kp))
        np.testing.assert_array_equal(ctrl.l1.am[6:12, 6:12], -np.diag(kd))
    # the next episode starts from the plain gains again
    scan.reset(scan.robot, scan.dt)
    np.testing.assert_array_equal(scan.wrench.kp_rot, p["kp_rot"])


def test_l1_applied_input_is_the_wrench_shortfall_and_only_on_a_scan(tmp_path):
    """The shortfall handed to the predictor, against a plain recomputation: the stance forces'
    net force and moment about the COM minus the desired wrench, over the nominal mass, and the
    moment's part turned into the body frame and through the inverse nominal inertia."""
    from bench.controllers.stacks import ForceQPL1Controller

    seen = []

    class Spy(ForceQPL1Controller):
        def _applied(self, f, w):
            before = self.l1.x_hat.copy()
            super()._applied(f, w)
            seen.append((self.l1.x_hat - before, f.copy(), w.copy(), self.r.copy(), self.kin.rot.copy(),
                         self.scan_map is not None))

    for sensing in ("", SCAN):
        seen.clear()
        ctrl = Spy(privileged=True)
        _episode(tmp_path, sensing, duration=1.2, controller=ctrl)
        m = ctrl.robot.mass_kg
        inertia = np.asarray(ctrl.wrench.inertia)
        moved = 0
        for dx, f, w, r, rot, has_scan in seen[::25]:
            if not has_scan:
                assert not dx.any()
                continue
            fr = f.reshape(-1, 3)
            force = np.zeros(3)
            moment = np.zeros(3)
            for k in range(len(fr)):
                force += fr[k]
                moment += np.cross(r[k], fr[k])
            acc = np.concatenate([(force - w[:3]) / m, np.linalg.solve(inertia, rot.T @ (moment - w[3:]))])
            np.testing.assert_allclose(dx, ctrl.l1.k_u @ acc, rtol=1e-9, atol=1e-12)
            moved += bool(np.abs(acc).max() > 1e-3)
        assert moved > 0 if sensing else moved == 0    # on a scan the QP falls short of the wrench at times
