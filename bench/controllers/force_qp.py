"""Stance force distribution: a QP on the single-rigid-body model.

Decision variable: the stacked ground reaction forces ``f`` (3F,) of all feet,
world axes, acting on the robot. With ``r_i`` the foot positions relative to the
centre of mass, the body wrench they produce is ``A f`` with::

    A = [ I      I     ...  ]        (force rows)
        [ [r_1]x [r_2]x ... ]        (moment rows, about the COM)

and the QP is::

    minimise   ||A f - w_des||_S^2 + alpha ||f||^2 + beta ||f - f_prev||^2
    subject to |f_x,i| <= mu f_z,i ,  |f_y,i| <= mu f_z,i      (friction pyramid)
               load_i fz_min <= f_z,i <= load_i fz_max            (stance feet)
               f_i = 0                                            (swing feet, load 0:
                                                                   not variables at all)

``S`` is a diagonal weight on the six wrench rows, ``alpha`` regularises force
size, ``beta`` penalises change from the previous solution (which also makes
the solution continuous in time). ``load_i`` in [0, 1] comes from the gait
scheduler and unloads a foot smoothly before lift-off. The friction pyramid is
in world axes by default (a blind controller does not know the terrain normal; use a
``mu`` with margin). :meth:`ForceQP.set_normals` turns each foot's pyramid to a given
ground normal ``n`` (from a height scan): with ``t1, t2`` the images of the world x and y
axes under the smallest rotation taking world z to ``n`` (Rodrigues' formula), the rows
become ``|t1 . f| <= mu n . f`` and ``|t2 . f| <= mu n . f``. For ``n`` = world z they are
the world-axis rows exactly. The normal-force bounds stay on the world z component.

Solver: ``qpsolvers`` with back end ``solver`` (default ``"daqp"``, a dense
dual active-set solver), given the previous solution as warm start
(``initvals``; back ends that cannot warm start ignore it). The
``qpsolvers.Problem`` of each contact pattern is built once over preallocated
matrices, which are rewritten in place every tick, and handed to
``qpsolvers.solve_problem`` (what ``qpsolvers.solve_qp`` calls after building a
Problem). With ``solver="daqp"`` the same solver is called directly by default
(``direct=None`` or ``True``), without the ``qpsolvers`` wrapper, on the same
preallocated arrays laid out exactly as the wrapper lays them out (bounds first,
then the pyramid rows; same warm start): 2-3x less time per solve and a
bit-identical answer. ``direct=False`` keeps the wrapper, as does any other
back end.

A failed or infeasible solve, an exception inside the solver, or non-finite
output never raises: the previous forces scaled by ``fallback_scale`` are used
(swing feet zeroed) and ``fallbacks`` counts it. ``solve_time_s`` accumulates
the wall time spent in the solver call.
"""

from __future__ import annotations

import math
import time
from ctypes import c_int

import numpy as np

_BIG_FORCE = 1e6  # stand-in for "unbounded" tangential force bounds (N)


class _Pattern:
    """Preallocated QP over the stance feet of one contact pattern.

    Holds ``B = sqrt(2 S) A`` so that ``P = B'B + 2 (alpha + beta) I`` and
    ``q = -B' sqrt(2 S) w - 2 beta f_prev`` take one product each.
    """

    def __init__(self, feet: list[int], s2: np.ndarray, mu: float, reg: float, two_beta: float) -> None:
        k = len(feet)
        nx = 3 * k
        self.feet = feet
        self.idx = np.array([3 * i + c for i in feet for c in range(3)], dtype=np.int64)
        root = np.sqrt(s2)
        self.B = np.zeros((6, nx))
        for j in range(k):
            for c in range(3):
                self.B[c, 3 * j + c] = root[c]
        # moment rows: B[3:6, 3j:3j+3] = sqrt(2 S_t) [r_j]x, from r by one take + multiply + put
        src, dst, sgn = [], [], []
        for j, i in enumerate(feet):
            c = 3 * j
            for row, col, comp, sign in ((3, c + 1, 2, -1.0), (3, c + 2, 1, 1.0),
                                         (4, c + 0, 2, 1.0), (4, c + 2, 0, -1.0),
                                         (5, c + 0, 1, -1.0), (5, c + 1, 0, 1.0)):
                src.append(3 * i + comp)
                dst.append(row * nx + col)
                sgn.append(sign * root[row])
        self.r_src = np.array(src, dtype=np.int64)
        self.b_dst = np.array(dst, dtype=np.int64)
        self.b_sgn = np.array(sgn)
        self.b_vals = np.zeros(len(src))
        self.root = root
        self.reg = reg * np.eye(nx)
        self.P = np.zeros((nx, nx))
        self.q = np.zeros(nx)
        # q = -(B' sqrt(2S) w + 2 beta f_prev) = -(Mq @ z), z = [sqrt(2S) w; f_prev]
        self.z = np.zeros(6 + nx)
        self.sw = self.z[:6]
        self.f_prev = self.z[6:]
        self.Mq = np.zeros((nx, 6 + nx))
        self.Mq[:, 6:] = two_beta * np.eye(nx)
        self.Mq[:, 0:6] = self.B.T
        self.mq_dst = np.array([(d % nx) * (6 + nx) + d // nx for d in dst], dtype=np.int64)
        m_ineq = 4 * k
        self.G = np.zeros((m_ineq, nx))
        for j in range(k):
            r, c = 4 * j, 3 * j
            self.G[r, c], self.G[r, c + 2] = 1.0, -mu
            self.G[r + 1, c], self.G[r + 1, c + 2] = -1.0, -mu
            self.G[r + 2, c + 1], self.G[r + 2, c + 2] = 1.0, -mu
            self.G[r + 3, c + 1], self.G[r + 3, c + 2] = -1.0, -mu
        # bounds and inequality right-hand sides share the arrays DAQP reads:
        # upper = [ub (nx); h (4k)], lower = [lb (nx); -inf (4k)]
        self.upper = np.zeros(nx + m_ineq)
        self.lower = np.full(nx + m_ineq, -1e30)
        self.ub = self.upper[:nx]
        self.lb = self.lower[:nx]
        self.h = self.upper[nx:]
        self.ub[:] = _BIG_FORCE
        self.lb[:] = -_BIG_FORCE
        self.sense = np.zeros(nx + m_ineq, dtype=c_int)
        self.mu = mu
        self.normals = None   # per stance foot: normal the pyramid rows were last written for (None: world z)
        self.problem = None   # the qpsolvers Problem over the same arrays, made when a wrapped solve needs it


class ForceQP:
    """Ground reaction force distribution for ``n_feet`` point feet.

    Parameters
    ----------
    n_feet: number of feet.
    mu: friction coefficient of the pyramid (use a margin below the true one).
    fz_min_n, fz_max_n: normal force bounds of a fully loaded stance foot (N).
    alpha: weight of ``||f||^2``.
    beta: weight of ``||f - f_prev||^2``.
    wrench_weights: diagonal of ``S``: (fx, fy, fz, tx, ty, tz).
    solver: ``qpsolvers`` back end name.
    fallback_scale: factor on the previous forces when a solve fails.
    direct: call DAQP directly; ``None`` (default): when ``solver="daqp"``.

    Swing feet (load 0) are not decision variables at all: each contact pattern
    gets its own preallocated QP over its stance feet (built the first time the
    pattern occurs, at most ``2^F``), so swing forces are exactly zero and no
    solver sees degenerate equality bounds.
    """

    def __init__(
        self,
        n_feet: int = 4,
        mu: float = 0.6,
        fz_min_n: float = 5.0,
        fz_max_n: float = 300.0,
        alpha: float = 1e-4,
        beta: float = 1e-4,
        wrench_weights=(1.0, 1.0, 1.0, 20.0, 20.0, 10.0),
        solver: str = "daqp",
        fallback_scale: float = 0.9,
        direct: bool | None = None,
    ) -> None:
        self.n_feet = n = int(n_feet)
        self.nx = 3 * n
        self.mu = float(mu)
        self.fz_min_n = float(fz_min_n)
        self.fz_max_n = float(fz_max_n)
        self.alpha = float(alpha)
        self.beta = float(beta)
        self.solver = solver
        self.fallback_scale = float(fallback_scale)
        self.s = np.asarray(wrench_weights, dtype=float).copy()
        if self.s.shape != (6,):
            raise ValueError("wrench_weights must have 6 entries")
        if direct and solver != "daqp":
            raise ValueError("direct=True is only available for solver='daqp'")
        self.direct = solver == "daqp" if direct is None else bool(direct)
        if self.direct:
            import daqp  # the back end qpsolvers would call
            self._daqp_solve = daqp.solve
        self._s2 = 2.0 * self.s                  # qpsolvers minimises 1/2 x'Px + q'x
        self._patterns: dict[int, _Pattern] = {}
        for key in range(1, 2 ** n):             # preallocate every pattern up front
            feet = [i for i in range(n) if key >> i & 1]
            self._patterns[key] = _Pattern(feet, self._s2, self.mu, 2.0 * (self.alpha + self.beta),
                                           2.0 * self.beta)
        self._last_key = -1
        self.normals = None                      # per foot ground normal (set_normals); None: world z
        self.f = np.zeros(self.nx)
        self.f_prev = np.zeros(self.nx)
        self.fallbacks = 0
        self.solves = 0
        self.solve_time_s = 0.0
        self.last_solve_s = 0.0
        self.last_ok = True

    def reset(self) -> None:
        self.f[:] = 0.0
        self.f_prev[:] = 0.0
        self._last_key = -1
        self.fallbacks = 0
        self.solves = 0
        self.solve_time_s = 0.0

    def set_normals(self, normals) -> None:
        """Align each foot's friction pyramid with a ground normal: ``normals`` is a sequence of F
        unit 3-vectors (world), or None for world z (the default)."""
        self.normals = None if normals is None else [tuple(float(v) for v in n) for n in normals]

    @staticmethod
    def pyramid_rows(n, mu: float) -> np.ndarray:
        """The four pyramid rows (4, 3) ``g`` with ``g f <= 0`` for unit normal ``n``."""
        a, b, c = n
        k = 1.0 / (1.0 + c) if c > -1.0 + 1e-9 else 0.0
        t1 = (1.0 - a * a * k, -a * b * k, -a)     # world x under the rotation taking z to n
        t2 = (-a * b * k, 1.0 - b * b * k, -b)     # world y under the same rotation
        nn = np.array(n, dtype=float)
        return np.array([np.array(t1) - mu * nn, -np.array(t1) - mu * nn,
                         np.array(t2) - mu * nn, -np.array(t2) - mu * nn])

    def _write_pyramids(self, pt: _Pattern) -> None:
        want = None if self.normals is None else [self.normals[i] for i in pt.feet]
        if want == pt.normals:
            return
        for j in range(len(pt.feet)):
            n = (0.0, 0.0, 1.0) if want is None else want[j]
            pt.G[4 * j:4 * j + 4, 3 * j:3 * j + 3] = self.pyramid_rows(n, pt.mu)
        pt.normals = want

    def solve(self, r: np.ndarray, w_des: np.ndarray, load: np.ndarray) -> np.ndarray:
        """Forces (3F,) for foot offsets ``r`` (F,3) from the COM, desired wrench
        ``w_des`` (6,) about the COM, and per-foot ``load`` in [0, 1] (0 = swing)."""
        key = 0
        for i in range(self.n_feet):
            if load[i] > 0.0:
                key |= 1 << i
        if key == 0:                               # nothing on the ground: no force to give
            self.f[:] = 0.0
            self.f_prev[:] = 0.0
            self._last_key = 0
            return self.f
        pt = self._patterns[key]
        if self.normals is not None or pt.normals is not None:
            self._write_pyramids(pt)
        # wrench map (scaled by sqrt(2 S)), in B and, transposed, in Mq
        r.take(pt.r_src, out=pt.b_vals)
        pt.b_vals *= pt.b_sgn
        pt.B.put(pt.b_dst, pt.b_vals)
        pt.Mq.put(pt.mq_dst, pt.b_vals)
        # normal-force bounds scaled by the load
        lb, ub = pt.lb, pt.ub
        fmin, fmax = self.fz_min_n, self.fz_max_n
        for j, i in enumerate(pt.feet):
            li = load[i]
            lb[3 * j + 2] = li * fmin
            ub[3 * j + 2] = li * fmax
        # cost: P = 2 (A'SA + (alpha + beta) I),  q = -2 (A'S w + beta f_prev)
        np.matmul(pt.B.T, pt.B, out=pt.P)
        pt.P += pt.reg
        np.multiply(w_des, pt.root, out=pt.sw)
        if key != self._last_key:                  # f_prev of this pattern's feet
            self.f_prev.take(pt.idx, out=pt.f_prev)
            self._last_key = key
        np.matmul(pt.Mq, pt.z, out=pt.q)
        np.negative(pt.q, out=pt.q)

        t0 = time.perf_counter()
        x = None
        try:
            if self.direct:
                sol, _, flag, _ = self._daqp_solve(pt.P, pt.q, pt.G, pt.upper, pt.lower, pt.sense,
                                                   primal_start=pt.f_prev)
                if flag > 0:
                    x = sol
            else:
                import qpsolvers  # imported on first use: the default direct path never needs it (nor scipy)

                if pt.problem is None:
                    pt.problem = qpsolvers.Problem(pt.P, pt.q, pt.G, pt.h, lb=pt.lb, ub=pt.ub)
                sol = qpsolvers.solve_problem(pt.problem, solver=self.solver, initvals=pt.f_prev)
                if sol.found:
                    x = sol.x
        except Exception:  # a solver failure must never end the episode
            x = None
        dt = time.perf_counter() - t0
        self.solve_time_s += dt
        self.last_solve_s = dt
        self.solves += 1
        ok = x is not None
        if ok:   # a finite sum means finite elements; else (or on an overflow) look element by element
            xs = x.tolist()
            ok = math.isfinite(sum(xs)) or all(map(math.isfinite, xs))
        f = self.f
        if ok:
            self.last_ok = True
            f[:] = 0.0
            f.put(pt.idx, x)
            pt.f_prev[:] = x
        else:
            self.fallbacks += 1
            self.last_ok = False
            np.multiply(self.f_prev, self.fallback_scale, out=f)
            for i in range(self.n_feet):
                if not key >> i & 1:
                    f[3 * i:3 * i + 3] = 0.0
            f.take(pt.idx, out=pt.f_prev)
        self.f_prev[:] = f
        return f

    @property
    def mean_solve_ms(self) -> float:
        return 1e3 * self.solve_time_s / self.solves if self.solves else 0.0
