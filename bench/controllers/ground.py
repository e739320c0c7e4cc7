"""Ground estimate from the feet: a plane through the last contact point of each foot.

The controller is never told the terrain. What it can know is where its feet
touched: for every foot the last point it stood on (world x, y and the ground
height under it, i.e. the foot-site height minus the nominal foot-site height
above ground), refreshed while the foot is in stance and in contact, with the
height low-passed (time constant ``tau_s``) to ride over contact jitter.

A least-squares plane ``z = h + gx (x - x0) + gy (y - y0)`` through those points,
centred at the query point ``(x0, y0)`` (the trunk), gives the ground height under
the trunk ``h`` and the slope ``(gx, gy)``. The stacks use ``h`` for the desired
height, the slope for the desired vertical velocity when walking (so a ramp is
tracked without lag) and for foothold heights. ``slope_reg`` is a small ridge
term on the slope (m^2): with feet nearly in a line the plane is ill-posed and
the ridge pulls the slope toward zero instead.

Arithmetic is on Python floats: four points and a 3x3 solve per tick.
"""

from __future__ import annotations

import math


class GroundPlane:
    """Last-contact ground points of ``n_feet`` feet and the plane through them."""

    def __init__(self, n_feet: int = 4, tau_s: float = 0.05, dt: float = 0.002,
                 slope_reg: float = 1e-3, max_slope: float = 1.0) -> None:
        self.n_feet = n_feet
        self.alpha = 1.0 - math.exp(-dt / max(tau_s, 1e-6))
        self.slope_reg = float(slope_reg)
        self.max_slope = float(max_slope)
        self.px = [0.0] * n_feet
        self.py = [0.0] * n_feet
        self.pz = [0.0] * n_feet
        self.height = 0.0
        self.gx = 0.0
        self.gy = 0.0

    def reset(self, foot_xyz, foot_height: float) -> None:
        """Start from the current foot positions (all taken as standing)."""
        for i, p in enumerate(foot_xyz):
            self.px[i], self.py[i], self.pz[i] = p[0], p[1], p[2] - foot_height

    def observe(self, foot_xyz, standing, foot_height: float) -> None:
        """Refresh the points of feet that are ``standing`` (stance and contact)."""
        a = self.alpha
        px, py, pz = self.px, self.py, self.pz
        for i in range(self.n_feet):
            if standing[i]:
                p = foot_xyz[i]
                px[i] = p[0]
                py[i] = p[1]
                pz[i] += a * (p[2] - foot_height - pz[i])

    def fit(self, x0: float, y0: float) -> tuple[float, float, float]:
        """Ground height at ``(x0, y0)`` and slope ``(gx, gy)`` (also stored)."""
        n = self.n_feet
        sx = sy = sxx = sxy = syy = sz = sxz = syz = 0.0
        for i in range(n):
            dx = self.px[i] - x0
            dy = self.py[i] - y0
            z = self.pz[i]
            sx += dx; sy += dy; sz += z
            sxx += dx * dx; sxy += dx * dy; syy += dy * dy
            sxz += dx * z; syz += dy * z
        r = self.slope_reg
        # normal equations [[n, sx, sy], [sx, sxx + r, sxy], [sy, sxy, syy + r]] p = [sz, sxz, syz]
        a11, a12, a13 = float(n), sx, sy
        a22, a23, a33 = sxx + r, sxy, syy + r
        c11 = a22 * a33 - a23 * a23
        c12 = a13 * a23 - a12 * a33
        c13 = a12 * a23 - a13 * a22
        det = a11 * c11 + a12 * c12 + a13 * c13
        if abs(det) < 1e-15:
            h, gx, gy = sz / n, 0.0, 0.0
        else:
            c22 = a11 * a33 - a13 * a13
            c23 = a12 * a13 - a11 * a23
            c33 = a11 * a22 - a12 * a12
            inv = 1.0 / det
            h = (c11 * sz + c12 * sxz + c13 * syz) * inv
            gx = (c12 * sz + c22 * sxz + c23 * syz) * inv
            gy = (c13 * sz + c23 * sxz + c33 * syz) * inv
            m = self.max_slope
            gx = m if gx > m else (-m if gx < -m else gx)
            gy = m if gy > m else (-m if gy < -m else gy)
        self.height, self.gx, self.gy = h, gx, gy
        return h, gx, gy

    def height_at(self, x: float, y: float, x0: float, y0: float) -> float:
        """Height of the last fitted plane (centred at ``(x0, y0)``) at ``(x, y)``."""
        return self.height + self.gx * (x - x0) + self.gy * (y - y0)
