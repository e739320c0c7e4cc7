"""Ground plane from the feet's last contact points."""

import math

import numpy as np
import pytest

from bench.controllers.ground import GroundPlane

FEET = [(0.18, 0.13), (0.18, -0.13), (-0.16, 0.13), (-0.16, -0.13)]
R = 0.02  # foot-site height above the ground it stands on


def _feet_on(plane, offsets=FEET, x0=1.0, y0=0.5):
    h, gx, gy = plane
    return [[x0 + dx, y0 + dy, h + gx * dx + gy * dy + R] for dx, dy in offsets]


@pytest.mark.parametrize("slope_deg", [0.0, 12.0, -12.0, 30.0])
def test_recovers_a_slope_exactly(slope_deg):
    g = math.tan(math.radians(slope_deg))
    gp = GroundPlane(slope_reg=0.0)
    gp.reset(_feet_on((0.3, g, -0.5 * g)), R)
    h, gx, gy = gp.fit(1.0, 0.5)
    assert (h, gx, gy) == pytest.approx((0.3, g, -0.5 * g), abs=1e-12)
    assert gp.height_at(1.5, 0.5, 1.0, 0.5) == pytest.approx(0.3 + 0.5 * g)


def test_height_is_under_the_query_point_not_the_feet_centroid():
    # stale feet all behind the trunk on a 12 degree ramp: the plane still gives the height under it
    g = math.tan(math.radians(12))
    gp = GroundPlane()
    gp.reset(_feet_on((0.0, g, 0.0), offsets=[(dx - 0.1, dy) for dx, dy in FEET]), R)
    h, _, _ = gp.fit(1.0, 0.5)
    assert h == pytest.approx(0.0, abs=2e-3)            # the mean of the points would say -2 cm


def test_ridge_keeps_collinear_points_well_posed():
    gp = GroundPlane(slope_reg=1e-3)
    gp.reset([[0.0, 0.0, R], [0.0, 0.0, R], [0.1, 0.0, 0.01 + R], [0.1, 0.0, 0.01 + R]], R)
    h, gx, gy = gp.fit(0.05, 0.0)
    assert np.isfinite([h, gx, gy]).all()
    assert gy == pytest.approx(0.0) and h == pytest.approx(0.005, abs=1e-3)


def test_only_standing_feet_update_and_heights_are_low_passed():
    gp = GroundPlane(tau_s=0.05, dt=0.002)
    gp.reset(_feet_on((0.0, 0.0, 0.0)), R)
    raised = _feet_on((0.1, 0.0, 0.0))
    gp.observe(raised, [True, False, False, False], R)
    a = 1.0 - math.exp(-0.002 / 0.05)
    assert gp.pz[0] == pytest.approx(0.1 * a)
    assert gp.pz[1:] == [pytest.approx(0.0)] * 3
    for _ in range(500):
        gp.observe(raised, [True, True, True, True], R)
    assert gp.fit(1.0, 0.5)[0] == pytest.approx(0.1, abs=1e-6)
