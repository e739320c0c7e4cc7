"""An envelope map as a picture: judged points and the pass/fail boundary, Cartesian or polar.

A periodic x axis (a direction, degrees) is drawn on polar axes with the
direction as the angle and the y field as the radius; otherwise x and y are
the plot's axes. The boundary is the 0.5 level of the pass/fail verdicts
interpolated over a Delaunay triangulation of the judged points (matplotlib's
``tricontour``): it runs between passing and failing neighbours, so it is as
sharp as the refinement made the grid there.
"""

from __future__ import annotations

import io
import math
from pathlib import Path


def plot_envelope(env, path: str | Path, *, title: str = "") -> Path:
    """Write ``env`` (a :class:`~bench.search.envelope.EnvelopeMap`) as a PNG at ``path``."""
    import numpy as np
    from matplotlib.figure import Figure  # no pyplot: no backend or global state touched
    from matplotlib.tri import Triangulation

    from bench.fileio import write_atomic

    polar = env.x.periodic
    fig = Figure(figsize=(7.0, 6.0) if polar else (7.5, 5.5), dpi=110)
    ax = fig.add_subplot(1, 1, 1, projection="polar" if polar else None)
    pts = env.points
    xs = np.array([p.x for p in pts], dtype=float)
    ys = np.array([p.y for p in pts], dtype=float)
    ok = np.array([p.passed for p in pts])
    # where to draw: radians for a direction; a wrapped copy of the first column closes the circle
    if polar:
        period = env.x.hi - env.x.lo
        first = np.isclose(xs, env.x.lo)
        xs_t = np.concatenate([xs, xs[first] + period])
        ys_t = np.concatenate([ys, ys[first]])
        ok_t = np.concatenate([ok, ok[first]])
        ang = np.radians(xs_t) if "deg" in (env.x.label + env.x.path).lower() or period > 2 * math.pi + 1e-9 \
            else xs_t
        px, py = ang, ys_t
    else:
        px, py, ok_t = xs, ys, ok
    if len(px) >= 3 and ok_t.any() and (~ok_t).any():
        try:
            tri = Triangulation(px, py)
            ax.tricontourf(tri, ok_t.astype(float), levels=[-0.5, 0.5, 1.5], colors=["#f3d2cf", "#d3ecd4"])
            ax.tricontour(tri, ok_t.astype(float), levels=[0.5], colors=["0.15"], linewidths=1.6)
        except (ValueError, RuntimeError):   # degenerate (collinear) points: draw the points alone
            pass
    n = len(xs)
    for passed, colour, label in ((True, "tab:green", "passed"), (False, "tab:red", "failed")):
        sel = ok_t[:n] == passed if not polar else ok == passed
        if not sel.any():
            continue
        ax.scatter((px[:n] if polar else px)[sel], (py[:n] if polar else py)[sel], s=14, c=colour,
                   edgecolors="none", label=f"{label} ({int(sel.sum())})", zorder=3)
    xl = env.x.label or env.x.path
    yl = env.y.label or env.y.path
    if polar:
        ax.set_title(title or f"{yl} (radius) by {xl} (angle)", pad=18)
        ax.set_rlabel_position(112.5)
    else:
        ax.set_xlabel(xl)
        ax.set_ylabel(yl)
        ax.set_xlim(env.x.lo, env.x.hi)
        ax.set_ylim(env.y.lo, env.y.hi)
        ax.set_title(title or f"envelope: {yl} by {xl}")
        ax.grid(True, alpha=0.3)
    rx, ry = env.resolution
    fig.text(0.01, 0.01, f"{len(pts)} points, boundary to {rx:.3g} x {ry:.3g}"
             + (" (point budget reached)" if env.budget_hit else ""), fontsize=8, color="0.3")
    ax.legend(loc="upper right", fontsize=8, framealpha=0.9)
    buf = io.BytesIO()
    fig.savefig(buf, format="png")
    write_atomic(path, buf.getvalue())
    return Path(path)
