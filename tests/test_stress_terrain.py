"""Terrain pieces do physically what their names say, checked against outside references.

Each test builds the world with the bench's own builder (``build_world``), removes
the robot where it would only be in the way, and drops a test body (a box or a
ball) on the piece. The reference for each check is named beside it.
"""

from __future__ import annotations

import math

import mujoco
import numpy as np
import pytest

from bench.scenario.schema import STAIR_PRESETS
from bench.world.build import build_world, export_mjcf
from bench.world.terrain import rough_heights
from mjspec_compat import spec_remove

G = 9.81
INCH_M = 0.0254  # exact by definition of the international inch


def _world(write_scenario, load_one, text: str):
    return build_world(load_one(write_scenario(text)))


def _probe_model(world, shape: str, half, mass: float, pos, quat=(1.0, 0.0, 0.0, 0.0)):
    """The world's terrain without the robot, plus one free test body; returns (model, data, qpos address).

    ``half``: a ball's radius, or a box's half extents (one number for a cube).
    """
    spec = world.spec.copy()
    spec_remove(spec, spec.body(world.robot.trunk))
    body = spec.worldbody.add_body(name="probe", pos=list(pos), quat=list(quat))
    body.add_freejoint()
    body.explicitinertial = True
    body.ipos = [0.0, 0.0, 0.0]   # else the inertial frame is not the body frame
    body.iquat = [1.0, 0.0, 0.0, 0.0]
    body.mass = mass
    if shape == "box":
        hx, hy, hz = np.broadcast_to(np.asarray(half, dtype=float), (3,))
        body.inertia = [mass * (hy * hy + hz * hz) / 3.0, mass * (hx * hx + hz * hz) / 3.0,
                        mass * (hx * hx + hy * hy) / 3.0]           # solid box: m (b^2 + c^2) / 12, full sides
        body.add_geom(type=mujoco.mjtGeom.mjGEOM_BOX, size=[hx, hy, hz], contype=2, conaffinity=0)
    else:
        body.inertia = [0.4 * mass * half * half] * 3               # solid ball: 2/5 m r^2
        body.add_geom(type=mujoco.mjtGeom.mjGEOM_SPHERE, size=[half, 0, 0], contype=2, conaffinity=0)
    m = spec.compile()
    d = mujoco.MjData(m)
    qa = int(m.jnt_qposadr[m.body_jntadr[m.nbody - 1]])
    return m, d, qa


def _ray_down(m, d, x: float, y: float, top: float = 5.0) -> float:
    """Ground height under (x, y) by MuJoCo's own ray caster (static geoms only)."""
    geomid = np.zeros(1, dtype=np.int32)
    dist = mujoco.mj_ray(m, d, np.array([x, y, top]), np.array([0.0, 0.0, -1.0]), None, 1, -1, geomid)
    assert dist >= 0, f"ray at ({x}, {y}) hit nothing"
    return top - dist


# --------------------------------------------------------------------------- slope + ground friction: Coulomb


@pytest.mark.parametrize("ratio", [0.8, 1.2])
def test_box_on_the_bench_slope_slides_only_when_tan_angle_exceeds_friction(write_scenario, load_one, ratio):
    # Reference: Coulomb friction. A block on an incline stays when tan(angle) < mu and otherwise slides down
    # with acceleration g (sin a - mu cos a) (any mechanics textbook).
    mu = 0.5
    angle = math.atan(ratio * mu)
    world = _world(write_scenario, load_one, f"""
        name: incline
        duration: 1.0
        ground: {{friction: {mu}}}
        terrain:
          - slope: {{start: 0.0, length: 4.0, angle_deg: {math.degrees(angle)}}}
    """)
    half, x = 0.05, 2.0
    normal = np.array([-math.sin(angle), 0.0, math.cos(angle)])
    along = np.array([math.cos(angle), 0.0, math.sin(angle)])   # up the slope
    centre = np.array([x, 0.0, x * math.tan(angle)]) + normal * half
    quat = [math.cos(-angle / 2), 0.0, math.sin(-angle / 2), 0.0]
    m, d, qa = _probe_model(world, "box", half, 1.0, centre, quat)
    mujoco.mj_forward(m, d)
    p0 = d.qpos[qa:qa + 3].copy()
    t, s = [], []
    for _ in range(1000):
        mujoco.mj_step(m, d)
        t.append(d.time)
        s.append(float((d.qpos[qa:qa + 3] - p0) @ along))
    t, s = np.array(t), np.array(s)
    late = t > 0.3
    accel = 2.0 * np.polyfit(t[late], s[late], 2)[0]     # s = s0 + v0 t + a t^2 / 2
    if ratio < 1.0:
        assert abs(accel) < 0.01
        assert abs(s[-1]) < 0.005       # MuJoCo's soft friction lets it creep by millimetres, no more
    else:
        expected = -G * (math.sin(angle) - mu * math.cos(angle))
        assert accel == pytest.approx(expected, rel=0.02)


def test_friction_patch_really_has_its_friction(write_scenario, load_one):
    # Reference: Coulomb friction, a block sliding on a level surface decelerates at mu g.
    world = _world(write_scenario, load_one, """
        name: ice
        duration: 1.0
        ground: {friction: 0.8}
        terrain:
          - friction_patch: {start: 0.0, length: 3.0, friction: 0.1}
    """)
    decel = {}
    for x0, name in ((0.3, "patch"), (-2.0, "ground")):
        # A flat slab, so that the friction's moment about its centre cannot rock it onto an edge.
        m, d, qa = _probe_model(world, "box", (0.05, 0.05, 0.01), 2.0, [x0, 0.0, 0.01])
        dof = int(m.jnt_dofadr[m.body_jntadr[m.nbody - 1]])
        d.qvel[dof] = 1.5
        t, v = [], []
        for _ in range(150):
            mujoco.mj_step(m, d)
            t.append(d.time)
            v.append(d.qvel[dof])
        t, v = np.array(t), np.array(v)
        moving = (t > 0.02) & (v > 0.2)
        decel[name] = -np.polyfit(t[moving], v[moving], 1)[0]
    assert decel["patch"] == pytest.approx(0.1 * G, rel=0.02)
    assert decel["ground"] == pytest.approx(0.8 * G, rel=0.02)


# --------------------------------------------------------------------------- soft patch: MuJoCo's contact model


def _resting_sink(world, x: float, cone: int) -> float:
    m, d, qa = _probe_model(world, "ball", 0.05, 3.0, [x, 0.0, 0.05])
    m.opt.cone = cone
    for _ in range(3000):
        mujoco.mj_step(m, d)
    return 0.05 - float(d.qpos[qa + 2])


def _predicted_sink(timeconst: float, dampratio: float, solimp=(0.9, 0.95, 0.001, 0.5, 2.0)) -> float:
    # Reference: MuJoCo documentation, Computation > Soft constraints: reference acceleration
    # aref = -b v - k r with k = d / (dmax^2 timeconst^2 dampratio^2) ... at rest (v = 0) on one contact row with
    # regulariser R = (1 - d) / d * A, equilibrium needs aref = (1 - d) / d * g, so the depth is
    # r = g (1 - d) dmax^2 timeconst^2 dampratio^2 / d^2, with d = d(r) from solimp. Solved by fixed point.
    dmin, dmax, width, mid, power = solimp

    def impedance(r):
        x = min(r / width, 1.0)
        y = x ** power / mid ** (power - 1) if x <= mid else 1 - (1 - x) ** power / (1 - mid) ** (power - 1)
        return dmin + y * (dmax - dmin)

    r = 1e-4
    for _ in range(300):
        dd = impedance(r)
        r = 0.5 * r + 0.5 * G * (1 - dd) * (dmax * timeconst * dampratio) ** 2 / (dd * dd)
    return r


def test_soft_patch_is_softer_and_sinks_as_mujoco_contact_model_predicts(write_scenario, load_one):
    world = _world(write_scenario, load_one, """
        name: soft
        duration: 1.0
        terrain:
          - soft_patch: {start: 0.0, length: 2.0, timeconst: 0.1, dampratio: 1.0}
    """)
    elliptic, pyramidal = int(mujoco.mjtCone.mjCONE_ELLIPTIC), int(mujoco.mjtCone.mjCONE_PYRAMIDAL)
    # Against MuJoCo's own contact model (elliptic cone: the normal force is a row of its own).
    assert _resting_sink(world, 1.0, elliptic) == pytest.approx(_predicted_sink(0.1, 1.0), rel=0.01)
    assert _resting_sink(world, -2.0, elliptic) == pytest.approx(_predicted_sink(0.02, 1.0), rel=0.01)
    # In the bench's own worlds (pyramidal cone), the same ball under the same load sinks deeper on the patch.
    soft, hard = _resting_sink(world, 1.0, pyramidal), _resting_sink(world, -2.0, pyramidal)
    assert soft > 5 * hard and soft > 0.002


# --------------------------------------------------------------------------- stairs: building-code presets


# Limits from memory (check the current edition before relying on them):
#   IRC (International Residential Code) R311.7.5.1: riser height at most 7 3/4 in;
#   IRC R311.7.5.2: tread depth at least 10 in;
#   IBC (International Building Code) 1011.5.2: riser height 4 in to 7 in, tread depth at least 11 in.
CODE_LIMITS_M = {
    "irc-residential": {"rise_min": 0.0, "rise_max": 7.75 * INCH_M, "run_min": 10 * INCH_M},
    "ibc-commercial": {"rise_min": 4 * INCH_M, "rise_max": 7 * INCH_M, "run_min": 11 * INCH_M},
}


@pytest.mark.parametrize("preset", sorted(STAIR_PRESETS))
def test_stair_presets_respect_the_building_code_and_compile_to_it(write_scenario, load_one, preset):
    lim = CODE_LIMITS_M[preset]
    rise, run = STAIR_PRESETS[preset]
    assert lim["rise_min"] <= rise <= lim["rise_max"]
    assert run >= lim["run_min"]
    # The compiled world has exactly those steps (measured with mj_ray at every tread's middle).
    world = _world(write_scenario, load_one, f"""
        name: stairs
        duration: 1.0
        initial: {{x: -3.0}}
        terrain:
          - stairs: {{start: 1.0, steps: 5, preset: {preset}}}
          - stairs: {{start: 3.0, steps: 5, preset: {preset}, direction: down}}
    """)
    m = world.model
    d = mujoco.MjData(m)
    d.qpos[:] = world.initial_qpos
    mujoco.mj_forward(m, d)
    for start in (1.0, 3.0):
        tops = [_ray_down(m, d, start + (i + 0.5) * run, 0.0) for i in range(5)]
        before = _ray_down(m, d, start - 0.05, 0.0)
        rises = np.abs(np.diff([before] + tops))
        assert np.all(lim["rise_min"] <= rises) and np.all(rises <= lim["rise_max"])
        np.testing.assert_allclose(rises, rise, atol=1e-9)
        # Tread depth: where the height changes, found by bisection along x.
        edges = []
        for i in range(5):
            lo, hi = start + (i - 0.5) * run, start + (i + 0.5) * run
            z_hi = _ray_down(m, d, hi, 0.0)
            for _ in range(40):
                mid = 0.5 * (lo + hi)
                if abs(_ray_down(m, d, mid, 0.0) - z_hi) < 1e-9:
                    hi = mid
                else:
                    lo = mid
            edges.append(hi)
        treads = np.diff(edges)
        assert np.all(treads >= lim["run_min"] - 1e-9)
        np.testing.assert_allclose(treads, run, atol=1e-6)


def test_custom_stairs_and_blocks_compile_to_the_heights_asked(write_scenario, load_one):
    world = _world(write_scenario, load_one, """
        name: blocks
        duration: 1.0
        initial: {x: -3.0}
        terrain:
          - blocks: {start: 1.0, heights: [0.05, 0.12, 0.0, 0.08], block_length: 0.25, gap: 0.1}
          - stairs: {start: 3.0, steps: 3, rise: 0.1, run: 0.35, direction: down}
    """)
    m = world.model
    d = mujoco.MjData(m)
    d.qpos[:] = world.initial_qpos
    mujoco.mj_forward(m, d)
    for i, h in enumerate([0.05, 0.12, 0.0, 0.08]):
        x0 = 1.0 + i * 0.35
        assert _ray_down(m, d, x0 + 0.125, 0.0) == pytest.approx(h, abs=1e-9)        # block top
        if i < 3:
            assert _ray_down(m, d, x0 + 0.25 + 0.05, 0.0) == pytest.approx(0.0, abs=1e-9)   # gap at the level
    for i in range(3):
        assert _ray_down(m, d, 3.0 + (i + 0.5) * 0.35, 0.0) == pytest.approx(-0.1 * (i + 1), abs=1e-9)
    # The analytic height query the runner uses agrees with the compiled geometry everywhere along the path.
    for x in np.linspace(-1.0, 5.0, 61) + 0.0137:   # off the edges, where either side is right
        assert world.terrain.height_at([x], [0.3])[0] == pytest.approx(_ray_down(m, d, x, 0.3), abs=1e-9)


# --------------------------------------------------------------------------- rough: seeded heightfield

ROUGH = """
    name: rough
    duration: 1.0
    seed: {seed}
    initial: {{x: -3.0}}
    terrain:
      - rough: {{start: 0.0, length: 3.0, width: 2.0, height: {height}, wavelength: 0.2, cell_size: 0.02}}
"""


def test_heightfield_amplitude_measured_with_mj_ray(write_scenario, load_one):
    world = _world(write_scenario, load_one, ROUGH.format(seed=11, height=0.03))
    m = world.model
    d = mujoco.MjData(m)
    d.qpos[:] = world.initial_qpos
    mujoco.mj_forward(m, d)
    xs, ys = np.linspace(0.0, 3.0, 151), np.linspace(-1.0, 1.0, 101)   # every heightfield vertex ...
    xs[[0, -1]] += [1e-7, -1e-7]                                       # ... the border ones just inside
    ys[[0, -1]] += [1e-7, -1e-7]
    z = np.array([[_ray_down(m, d, x, y) for x in xs] for y in ys])
    # Bumps lie in [0, height] above the level and span that whole range (tapered to 0 at the border).
    assert z.min() == pytest.approx(0.0, abs=1e-6)
    assert z.max() == pytest.approx(0.03, abs=1e-6)
    assert np.all(np.abs(z[:, 0]) < 1e-6) and np.all(np.abs(z[:, -1]) < 1e-6)
    # The runner's height query (fall check, terrain_height in the trace) agrees with MuJoCo's geometry.
    rng = np.random.default_rng(0)
    px, py = rng.uniform(0, 3, 200), rng.uniform(-0.99, 0.99, 200)
    rays = np.array([_ray_down(m, d, x, y) for x, y in zip(px, py)])
    # MuJoCo triangulates each cell, the query interpolates bilinearly: they differ by far less than a bump.
    np.testing.assert_allclose(world.terrain.height_at(px, py), rays, atol=0.03 * 0.05)


def test_heightfield_is_reproducible_from_the_seed(write_scenario, load_one):
    def field(seed):
        w = _world(write_scenario, load_one, ROUGH.format(seed=seed, height=0.02))
        return w.model.hfield_data.copy()

    a, b, c = field(5), field(5), field(6)
    np.testing.assert_array_equal(a, b)
    assert np.abs(a - c).max() > 0.3     # another seed gives another field (data normalised to [0, 1])
    # An explicit piece seed wins over the scenario seed.
    path = write_scenario(ROUGH.format(seed=6, height=0.02).replace("cell_size: 0.02}", "cell_size: 0.02, seed: 5}"),
                          "pinned.yaml")
    np.testing.assert_array_equal(build_world(load_one(path)).model.hfield_data, a)


def test_heightfield_bumps_are_wavelength_apart():
    # Reference: for a stationary Gaussian process the mean number of local maxima per unit length is
    # sqrt(m4 / m2) / (2 pi) (m_k the spectral moments; the standard level-crossing result of random-process
    # theory). The generator chooses its filter from it so that neighbouring bumps are `wavelength` apart on
    # average along a line; measured here on a large field, along x and along y.
    for wavelength, cell in ((0.2, 0.02), (0.5, 0.02)):
        f = rough_heights(400, 400, cell, wavelength, seed=3)
        margin = int(2 * wavelength / cell)
        g = f[margin:-margin, margin:-margin]
        for arr in (g, g.T):
            peaks = ((arr[:, 1:-1] > arr[:, :-2]) & (arr[:, 1:-1] >= arr[:, 2:])).sum(axis=1).mean()
            spacing = (arr.shape[1] - 1) * cell / peaks
            assert spacing == pytest.approx(wavelength, rel=0.1)


def test_every_piece_is_visible_with_its_extent_in_the_exported_mjcf(write_scenario, load_one, tmp_path):
    world = _world(write_scenario, load_one, """
        name: course
        duration: 1.0
        terrain:
          - slope: {start: 1.0, length: 2.0, angle_deg: 10}
          - stairs: {start: 3.5, steps: 2, preset: irc-residential}
          - rough: {start: 4.5, length: 1.0, height: 0.02}
          - blocks: {start: 6.0, heights: [0.05, 0.1], gap: 0.1}
          - friction_patch: {start: 7.0, length: 1.0, friction: 0.1}
          - soft_patch: {start: 8.5, length: 1.0}
    """)
    out = tmp_path / "world.xml"
    export_mjcf(world, out)
    reloaded = mujoco.MjModel.from_xml_path(str(out))
    names = [mujoco.mj_id2name(reloaded, mujoco.mjtObj.mjOBJ_GEOM, g) or "" for g in range(reloaded.ngeom)]
    for kind in ("slope", "step", "rough", "block", "gap", "friction", "soft"):
        assert any(n.startswith("terrain_") and n.endswith(kind) for n in names), kind
    # Extents survive the round trip: the ice patch spans x 7..8 with friction 0.1, the soft patch has its solref.
    ice = names.index(next(n for n in names if n.endswith("_friction")))
    assert reloaded.geom_pos[ice][0] - reloaded.geom_size[ice][0] == pytest.approx(7.0)
    assert reloaded.geom_pos[ice][0] + reloaded.geom_size[ice][0] == pytest.approx(8.0)
    assert reloaded.geom_friction[ice][0] == pytest.approx(0.1)
    soft = names.index(next(n for n in names if n.endswith("_soft")))
    np.testing.assert_allclose(reloaded.geom_solref[soft], [0.05, 1.0])
