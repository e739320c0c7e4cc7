"""A generic L1 adaptive augmentation block (piecewise-constant adaptation law).

Setting
-------
A baseline controller makes the plant behave like a linear *reference model*::

    x_dot = Am x + Bm (u + sigma(t))

where ``Am`` (n x n, Hurwitz) is the closed loop of the baseline, ``Bm``
(n x m) says where the adaptive input ``u`` enters (the matched channels) and
``sigma`` lumps every model error (unknown mass, inertia, COM offset, pushes...).
Without adaptation ``sigma`` drives the state off the reference response; the
block estimates it fast and cancels its low-frequency part.

Three pieces, run once per sample period ``Ts``:

1. **State predictor** (with the error-dynamics matrix ``As = -a I``)::

       xh_dot = Am x + Bm u + sigma_h + As (xh - x)

   integrated exactly over one period with ``x``, ``u``, ``sigma_h`` held.

2. **Piecewise-constant adaptation law**: with ``xt = xh - x`` at the sample,
   ``Phi = As^-1 (exp(As Ts) - I)``::

       sigma_h = -Phi^-1 exp(As Ts) xt           (n-vector, held for one period)

   It picks the constant ``sigma_h`` that would drive the prediction error to zero
   by the next sample. The matched part is ``sigma_m = pinv(Bm) sigma_h``; the
   rest (unmatched) stays in the predictor only. For a constant ``sigma`` the
   estimate is within a few per cent of it after one sample and settles at
   ``exp(-a Ts) sigma`` (an ``O(a Ts)``
   under-estimate, 1 % for ``a Ts = 0.01``), which is the known price of the law's
   one-step design; a small ``a`` keeps it small.

3. **Low-pass filter** ``C(s) = w_c / (s + w_c)`` per channel on the adaptive
   term (discretised exactly)::

       u = -C(s) sigma_m     (optionally clipped to +-u_max)

   ``C(s)`` sets how much of the fast estimate is allowed into the loop: the
   estimate itself is as fast as the sample rate (and as noisy as the state's
   numerical derivative), the filter trades robustness and noise for how fast
   the uncertainty is cancelled. Model error above ``w_c`` is left to the
   baseline.

Parameters and their meaning
----------------------------
``am``, ``bm``: reference model. ``dt``: sample period ``Ts`` (s), the control
period. ``bandwidth``: ``w_c`` (rad/s), scalar or per channel (m,).
``predictor_pole``: ``a`` (1/s) in ``As = -a I``. ``u_max``: clip on ``|u|``
per channel (same units as ``u``), ``None`` for no clip.

Use: ``u = block.update(x)`` with the measured state at each sample; apply ``u``
(in addition to the baseline) until the next sample. The predictor is advanced
with exactly that ``u``.
"""

from __future__ import annotations

import numpy as np


def _check_hurwitz(am: np.ndarray) -> None:
    if np.max(np.linalg.eigvals(am).real) >= 0.0:
        raise ValueError("am must be Hurwitz (the reference model must be stable)")


class L1Adaptive:
    """L1 adaptive augmentation for the reference model ``(am, bm)``."""

    def __init__(
        self,
        am: np.ndarray,
        bm: np.ndarray,
        dt: float,
        bandwidth,
        predictor_pole: float = 5.0,
        u_max=None,
    ) -> None:
        am = np.atleast_2d(np.asarray(am, dtype=float))
        bm = np.asarray(bm, dtype=float)
        if bm.ndim == 1:
            bm = bm[:, None]
        n, m = bm.shape
        if am.shape != (n, n):
            raise ValueError("am must be n x n and bm n x m")
        _check_hurwitz(am)
        if predictor_pole <= 0.0 or dt <= 0.0:
            raise ValueError("predictor_pole and dt must be > 0")
        self.n, self.m = n, m
        self.am, self.bm, self.dt = am, bm, float(dt)
        self.a = float(predictor_pole)
        a_s = -self.a * np.eye(n)
        ad = np.exp(-self.a * dt) * np.eye(n)   # exp(As Ts) for As = -a I, exactly
        phi = np.linalg.solve(a_s, ad - np.eye(n))
        self._a_s, self._ad, self._phi = a_s, ad, phi
        self.gain = -np.linalg.solve(phi, ad)                   # sigma_h = gain @ xt
        self.matched = np.linalg.pinv(bm) @ self.gain            # sigma_m = matched @ xt
        self.k_x = ad + phi @ (am - a_s)                         # see update
        self.k_u = phi @ bm
        self.bandwidth = np.broadcast_to(np.asarray(bandwidth, dtype=float), (m,)).copy()
        self.alpha = 1.0 - np.exp(-self.bandwidth * dt)
        self.u_max = None if u_max is None else np.broadcast_to(np.asarray(u_max, float), (m,)).copy()
        self._neg_u_max = None if self.u_max is None else -self.u_max
        # filter folded into the law: y = -C(s) sigma_m  <=>  y+ = (1 - alpha) y - alpha sigma_m
        self._decay = 1.0 - self.alpha
        self._alpha_matched = self.alpha[:, None] * self.matched

        self.x_hat = np.zeros(n)
        self.x_tilde = np.zeros(n)
        self.y = np.zeros(m)           # unclipped filtered adaptive input
        self.u = np.zeros(m)
        self._tmp_m = np.zeros(m)
        self._tmp_n = np.zeros(n)
        self._started = False

    def reset(self, x0=None) -> None:
        self.x_hat[:] = 0.0 if x0 is None else x0
        self.x_tilde[:] = 0.0
        self.y[:] = 0.0
        self.u[:] = 0.0
        self._started = x0 is not None

    def update(self, x: np.ndarray) -> np.ndarray:
        """Adaptive input (m,) to apply over the coming period, given state ``x``."""
        if not self._started:
            self.x_hat[:] = x
            self._started = True
        np.subtract(self.x_hat, x, out=self.x_tilde)
        # y = (1 - alpha) y - alpha * pinv(Bm) sigma_h,  sigma_h = gain @ x_tilde
        self.y *= self._decay
        np.matmul(self._alpha_matched, self.x_tilde, out=self._tmp_m)
        self.y -= self._tmp_m
        if self.u_max is not None:   # a clip, as two ufunc calls (np.clip goes through four Python layers)
            np.maximum(self.y, self._neg_u_max, out=self.u)
            np.minimum(self.u, self.u_max, out=self.u)
        else:
            self.u[:] = self.y
        # Exact step of xh_dot = As xh + (Am - As) x + Bm u + sigma_h with x, u,
        # sigma_h held: xh+ = Ad xh + Phi((Am - As) x + Bm u + sigma_h). Because
        # Phi sigma_h = -Ad (xh - x), this collapses to (Ad + Phi (Am - As)) x +
        # Phi Bm u: the next prediction depends only on the sample.
        np.matmul(self.k_x, x, out=self.x_hat)
        np.matmul(self.k_u, self.u, out=self._tmp_n)
        self.x_hat += self._tmp_n
        return self.u

    def set_am(self, am: np.ndarray) -> None:
        """Replace the reference model's ``Am`` (e.g. the baseline's gains changed); the state is kept."""
        am = np.asarray(am, dtype=float)
        if am.shape != self.am.shape:
            raise ValueError(f"am must be {self.am.shape}, got {am.shape}")
        _check_hurwitz(am)
        self.am = am
        self.k_x = self._ad + self._phi @ (am - self._a_s)

    def add_applied(self, du: np.ndarray) -> None:
        """The input applied over the coming period differs from the last ``u`` by ``du`` (m,)
        (e.g. an actuator or force limit cut it): advance the predictor with ``u + du``."""
        np.matmul(self.k_u, du, out=self._tmp_n)
        self.x_hat += self._tmp_n

    @property
    def sigma_matched(self) -> np.ndarray:
        """Matched estimate ``pinv(Bm) sigma_h`` from the last update (allocates; diagnostics)."""
        return self.matched @ self.x_tilde

    @property
    def sigma_hat(self) -> np.ndarray:
        """Full (n,) estimate from the last update (allocates; for diagnostics)."""
        return self.gain @ self.x_tilde
