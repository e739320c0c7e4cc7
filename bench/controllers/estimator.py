"""Reference trunk state estimator: a linear Kalman filter with leg kinematics as measurements.

Method
------
Leg odometry fused with the IMU by a linear Kalman filter, switched by the
contact schedule. The trunk orientation is taken from the IMU (not estimated),
which makes every model below linear.

State, world frame: trunk position ``p`` (3), trunk velocity ``v`` (3) and the
position ``f_i`` of every foot site (3 per foot).

Process, over one control period ``dt`` with the acceleration held::

    a    = R(q_imu) a_imu + g          (accelerometer reads specific force, body frame)
    p+   = p + v dt + a dt^2 / 2
    v+   = v + a dt
    f_i+ = f_i + w_i

``w_i`` is a small random walk for a foot in stance (it does not move, bar slip
and contact compression); a foot out of contact is released (below). The
accelerometer sample read at a tick drives the step that ends at that tick (it
describes the motion just before it was read). The acceleration noise enters ``p, v`` as a per-sample white
acceleration (the discrete white-noise-acceleration model).

Measurements, per foot ``i``, with ``r_i`` and ``rdot_i`` the foot position and
velocity relative to the trunk, trunk frame, from the joint encoders and the
gyro (:class:`~bench.controllers.trunk_kinematics.TrunkFrameFeet`)::

    f_i - p = R r_i                   every foot (the leg's length and direction)
    v       = -R rdot_i + roll_i      a stance foot does not slide in the world
    f_i,z   = ground_z + radius_i     optional: a stance foot is on known flat ground

``f_i`` is the centre of the foot site. A round foot of radius ``rho`` rolls
without sliding, so its centre moves at ``roll_i = w_i x (rho e_z)`` (``w_i``
the foot's angular velocity in the world): this is added to the stance foot's
process and to its velocity measurement. Left out, it reads as the trunk
moving slower than it does (a few per cent of the distance on the bundled
robot's 2 cm feet).

Touchdown and lift-off: a foot that has just touched down is still moving (it
lands at up to a few m/s, skids and sinks into a compliant ground for a few
ticks) and its angular velocity is still the swinging shank's, not a rolling
one; a foot about to lift is unloaded and may start moving before its flag
turns off. Counted as still and rolling, such a foot reads as the trunk moving
faster in the direction the foot skids (measured in the bundled bound: +0.8
m/s of velocity measurement error at a foot's first stance tick, +0.25 at the
eighth; the estimate ran 0.16 m/s ahead of the truth). Two weights handle it:

- a settle ramp ``s_i``, smooth from 0 to 1 over ``touchdown_settle_s`` after
  the foot's contact flag turns on, scales the rolling term ``roll_i`` (the
  rolling model holds once the foot rolls on the ground);
- a measurement weight ``w_i`` in (0, 1]: an optional caller-given trust (e.g.
  the gait scheduler's load, which ramps down before lift-off), times ``s_i``
  when ``settle_weighs_velocity`` is on. The foot's horizontal velocity
  measurement variance and horizontal random-walk variance are divided by
  ``w_i``, so a settling or unloading foot slides freely in the filter and
  tells little about the trunk's horizontal motion.

The vertical rows keep full weight: on a compliant ground the foot sinks after
touchdown and rises back out before lift-off, and the two cancel over a stance
only if both are seen (weighing down the sink alone leaves the rise, read as
the trunk sinking: -0.2 m/s of vertical velocity bias measured in the bound).
Both are off by default (``touchdown_settle_s = 0``: the filter as above) as
neither helps everywhere (benchmark ``tests/benchmarks/bench_estimator.py``,
horizontal drift in % of the distance, no ramp / rolling ramp only / both): on
the bundled 12 degree climb 4.4 / 2.5 / 8.6 (the landing foot's sink is along
the ground normal, so it has a horizontal part that otherwise partly cancels
the stance feet's creep downhill), on flat trotting 3.0 / 4.4 / 0.2, in the
bound 21 / 16 / 7.4, in the sideways pace 44 / 40 / 8.4. The reference stacks,
whose bound and pace have ~0.1 s stance phases of which the landing takes a
fifth, turn both on (``touchdown_settle_s = 0.05``). Raising a foot's measurement noise near touchdown and lift-off is common
practice in leg-odometry + IMU filters; the ramp shapes and lengths are ours,
no source.

The rows of a foot out of contact are left out (zeroed), and its state is
re-seated at the leg's reach ``p + R r_i`` with a large variance and no
correlation to the rest, so it says nothing about the trunk and is caught
fresh where it lands.

Structure used: every noise is diagonal in world axes (the accelerometer's is
isotropic, and ``s^2 I`` stays ``s^2 I`` under any rotation; the kinematic
ones may be given per world axis) and every model acts on each world axis
alone, so the filter is exactly three independent filters of size ``2 + F``,
one per world axis, run batched as ``(3, ...)`` arrays. Arrays are allocated
once in the constructor; a tick creates no arrays.

Health: ``pos_std_m`` and ``vel_std_mps`` are the filter's own standard
deviations; ``nis`` is the normalised innovation squared per stance-foot
measurement, about 1 or below while the sensors agree with the model and
larger when they do not (noisy sensors, slipping feet).

Use::

    est = LegImuEstimator(robot, control_dt)      # robot: NominalRobot
    est.reset()                                   # or reset(initial_height_m=...)
    s = est.update(obs)                           # each tick; s.base_pos, s.base_linvel
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from bench.controllers import so3
from bench.controllers.trunk_kinematics import TrunkFrameFeet

#: Variance of a foot out of contact (m^2): its position is unknown until it lands.
RELEASED_FOOT_VAR_M2 = 1.0
#: Smallest weight a stance foot gets (its variances are divided by the weight; 0 would divide by 0).
MIN_TRUST = 1e-3


def _diag_view(a: np.ndarray) -> np.ndarray:
    """Writable view of the diagonals of a stack of square matrices ``(B, n, n) -> (B, n)``."""
    b, n, _ = a.shape
    return np.lib.stride_tricks.as_strided(a, shape=(b, n), strides=(a.strides[0], a.strides[1] + a.strides[2]))


def _axes(value) -> np.ndarray:
    """A noise figure given for all axes or per world axis (x, y, z) as a (3,) array."""
    return np.broadcast_to(np.asarray(value, dtype=float), (3,)).copy()


def _make_solve():
    """``solve(a, b, out)`` for stacked systems without a fresh result array.

    ``numpy.linalg.solve`` has no ``out=``; the generalised ufunc behind it
    does. It is a private name, so it is checked once and the public function
    is the fallback.
    """
    try:
        from numpy.linalg import _umath_linalg

        g = _umath_linalg.solve
        a = np.array([[[2.0, 0.0], [0.0, 4.0]]])
        b = np.ones((1, 2, 1))
        o = np.empty_like(b)
        g(a, b, out=o, signature="dd->d")
        if np.allclose(o[0, :, 0], (0.5, 0.25)):
            return lambda a, b, out: g(a, b, out=out, signature="dd->d")
    except Exception:  # noqa: BLE001 - any failure means: use the public function
        pass

    def solve(a, b, out):
        out[...] = np.linalg.solve(a, b)
        return out

    return solve


_solve = _make_solve()


#: Noise figures that may be given per world axis (x, y, z).
_PER_AXIS = ("stance_foot_drift_m_per_rt_s", "kin_pos_noise_m", "kin_vel_noise_mps")


@dataclass
class EstimatorParams:
    """Noise figures of :class:`LegImuEstimator` (SI; every one a standard deviation).

    ``accel_noise_mps2``: per-sample accelerometer noise plus unmodelled
    acceleration. ``stance_foot_drift_m_per_rt_s``: random-walk intensity of a
    stance foot (its position std grows as this times the square root of time:
    slip, contact compression). ``kin_pos_noise_m``: foot position from the
    legs (encoders, link lengths). ``kin_vel_noise_mps``: foot velocity from
    the legs (joint velocity noise, impacts, contact compression). These three
    may also be given per world axis ``(x, y, z)``. ``ground_height_noise_m``:
    the stance-foot height pseudo-measurement on flat ground at
    ``ground_height_m`` (the height the robot starts on, or
    :meth:`LegImuEstimator.set_ground_height`); ``None`` (default) turns it
    off, as it is wrong on slopes and steps. ``init_pos_std_m`` /
    ``init_vel_std_mps``: uncertainty at reset. ``touchdown_settle_s``: time
    after a foot's contact flag turns on over which its settle ramp goes from 0
    to 1 (0: none). ``settle_weighs_velocity``: the settle ramp also weighs the
    foot's horizontal velocity measurement and drift (see the module docstring
    for when to turn it on).

    Defaults were chosen on trotting and slope runs of the bundled robot and
    are on the cautious side for its noiseless simulated sensors.
    """

    accel_noise_mps2: float = 0.2
    stance_foot_drift_m_per_rt_s: float = 0.01
    kin_pos_noise_m: float = 0.005
    kin_vel_noise_mps: float = 0.1
    ground_height_noise_m: float | None = None
    init_pos_std_m: float = 0.001
    init_vel_std_mps: float = 0.1
    touchdown_settle_s: float = 0.0
    settle_weighs_velocity: bool = False

    def check(self) -> None:
        for name in ("accel_noise_mps2", "stance_foot_drift_m_per_rt_s",
                     "kin_pos_noise_m", "kin_vel_noise_mps", "init_pos_std_m", "init_vel_std_mps"):
            v = getattr(self, name)
            per_axis = name in _PER_AXIS
            try:
                a = np.asarray(v, dtype=float)
                good = (a.shape == () or (per_axis and a.shape == (3,))) and bool(np.all(np.isfinite(a) & (a > 0)))
            except (TypeError, ValueError):
                good = False
            if not good:
                what = "a positive number or three (x, y, z)" if per_axis else "a positive number"
                raise ValueError(f"EstimatorParams.{name} must be {what}, got {v!r}")
        g = self.ground_height_noise_m
        if g is not None and not (isinstance(g, (int, float)) and math.isfinite(g) and g > 0):
            raise ValueError(f"EstimatorParams.ground_height_noise_m must be a positive number or None, got {g!r}")
        ts = self.touchdown_settle_s
        if not (isinstance(ts, (int, float)) and not isinstance(ts, bool) and math.isfinite(ts) and ts >= 0):
            raise ValueError(f"EstimatorParams.touchdown_settle_s must be a number of seconds >= 0, got {ts!r}")
        if not isinstance(self.settle_weighs_velocity, bool):
            raise ValueError(f"EstimatorParams.settle_weighs_velocity must be true or false, "
                             f"got {self.settle_weighs_velocity!r}")


@dataclass
class EstimatorState:
    """What :meth:`LegImuEstimator.update` returns (one object, updated in place every tick).

    ``base_pos`` trunk origin, world, m; ``base_linvel`` its velocity, world,
    m/s; ``foot_pos`` (F,3) foot sites, world, m; ``pos_std_m``, ``vel_std_mps``
    (3,) the filter's standard deviations per world axis; ``nis`` normalised
    innovation squared per stance-foot measurement (about 1 when consistent);
    ``n_stance`` feet taken as in stance this tick; ``t`` time of the
    observation, s.
    """

    base_pos: np.ndarray = field(default_factory=lambda: np.zeros(3))
    base_linvel: np.ndarray = field(default_factory=lambda: np.zeros(3))
    foot_pos: np.ndarray = field(default_factory=lambda: np.zeros((0, 3)))
    pos_std_m: np.ndarray = field(default_factory=lambda: np.zeros(3))
    vel_std_mps: np.ndarray = field(default_factory=lambda: np.zeros(3))
    nis: float = 0.0
    n_stance: int = 0
    t: float = 0.0


class LegImuEstimator:
    """Trunk position and velocity from the IMU, the joint encoders and the contact flags.

    ``robot``: the :class:`~bench.robot.model.NominalRobot` a controller gets in
    ``reset``; ``control_dt``: the period between :meth:`update` calls, s;
    ``params``: an :class:`EstimatorParams` (or keyword overrides of its fields).
    """

    def __init__(self, robot, control_dt: float, params: EstimatorParams | None = None, **overrides) -> None:
        p = params if params is not None else EstimatorParams()
        if overrides:
            p = EstimatorParams(**{**p.__dict__, **overrides})
        p.check()
        if not (math.isfinite(control_dt) and control_dt > 0):
            raise ValueError(f"control_dt must be a positive number of seconds, got {control_dt!r}")
        self.params = p
        self.dt = dt = float(control_dt)
        self.kin = TrunkFrameFeet(robot)
        nf = self.n_feet = self.kin.n_feet
        n = self.n = 2 + nf                 # per axis: p, v, f_1..f_F
        m = self.m = 3 * nf                 # per axis: F positions, F velocities, F heights
        self.gravity = np.array(robot.model.opt.gravity, dtype=float)
        self.radius = self.kin.foot_radius_m.copy()
        self.ground_height_m = 0.0

        # measurement matrix per axis; the height rows only on z, and only if enabled
        H = np.zeros((3, m, n))
        for i in range(nf):
            H[:, i, 0] = -1.0
            H[:, i, 2 + i] = 1.0
            H[:, nf + i, 1] = 1.0
            if p.ground_height_noise_m is not None:
                H[2, 2 * nf + i, 2 + i] = 1.0
        self._H0 = H
        self.H = H.copy()                   # H0 with the rows of feet out of contact zeroed
        self._Ht = self.H.transpose(0, 2, 1)
        self._mask = np.zeros((3, m))
        self._active = np.zeros(nf, dtype=bool)
        self._height_on = p.ground_height_noise_m is not None

        a2 = p.accel_noise_mps2 ** 2
        self._q_pv = a2 * np.array([[dt ** 4 / 4, dt ** 3 / 2], [dt ** 3 / 2, dt ** 2]])
        self._q_stance = _axes(p.stance_foot_drift_m_per_rt_s) ** 2 * dt
        self._r_pos = _axes(p.kin_pos_noise_m) ** 2
        self._r_vel = _axes(p.kin_vel_noise_mps) ** 2
        self._r_h = (p.ground_height_noise_m or 1.0) ** 2

        # state and work arrays
        self.x = np.zeros((3, n))
        self.P = np.zeros((3, n, n))
        self._Pd = _diag_view(self.P)
        self._Pd_feet = self._Pd[:, 2:]
        self._Pv = self.P[:, :2, :2]
        self._rot = np.eye(3)
        self._rel_pos = np.zeros((nf, 3))
        self._rel_vel = np.zeros((nf, 3))
        self._foot_w = np.zeros((nf, 3))
        self._roll = np.zeros((nf, 3))
        self._roll_step = np.zeros((3, nf))
        self._t3 = np.zeros(3)
        self._t3n = np.zeros((3, n))
        self._acc = np.zeros(3)
        self._dx = np.zeros((3, 1, n))
        self._y = np.zeros((3, m))
        self._hx = np.zeros((3, m, 1))
        self._e = np.zeros((3, m))
        self._e_row = self._e[:, None, :]
        self._r = np.ones((3, m))           # measurement variances (rows left out keep 1)
        self._r[:, :nf] = self._r_pos[:, None]
        self._r[:, nf:2 * nf] = self._r_vel[:, None]
        self._r[2, 2 * nf:] = self._r_h
        self._HP = np.zeros((3, m, n))
        self._S = np.zeros((3, m, m))
        self._Sd = _diag_view(self._S)
        self._rhs = np.zeros((3, m, n + 1))
        self._sol = np.zeros((3, m, n + 1))
        self._KT = self._sol[:, :, :n]
        self._Sinv_e = self._sol[:, :, n]
        self._nis_terms = np.zeros((3, m))
        self._tmp_nn = np.zeros((3, n, n))
        self._q_feet = np.repeat(self._q_stance[:, None], nf, axis=1)
        self._contact = np.zeros(nf, dtype=bool)
        # per-foot settle ramp and measurement weight (see the module docstring)
        self._settle_ticks = float(p.touchdown_settle_s) / dt
        self._since_on = np.zeros(nf)       # ticks since the contact flag turned on (counts from 1)
        self._ramp = np.ones(nf)
        self._w = np.ones(nf)
        self._trust_in = np.ones(nf)
        self._trust_pos = np.ones(nf, dtype=bool)
        self.state = EstimatorState(foot_pos=np.zeros((nf, 3)))
        self._initial_height_m: float | None = None
        self._initial_xy = (0.0, 0.0)
        self._started = False

    # ------------------------------------------------------------------ setup
    def reset(self, initial_height_m: float | None = None, initial_xy_m=(0.0, 0.0)) -> None:
        """Start over at the next :meth:`update`.

        ``initial_height_m``: trunk height in the world at the first update;
        ``None`` takes it from the legs, with the feet in contact (all feet if
        none is) standing on ground at z = 0. ``initial_xy_m``: trunk x, y then.
        The ground height for the optional pseudo-measurement starts at the
        height the stance feet stand on.
        """
        self._initial_height_m = None if initial_height_m is None else float(initial_height_m)
        self._initial_xy = (float(initial_xy_m[0]), float(initial_xy_m[1]))
        self._started = False

    def set_ground_height(self, z_m: float) -> None:
        """Ground height (world z, m) the stance feet are taken to stand on, for the
        optional height pseudo-measurement (e.g. from a terrain map)."""
        self.ground_height_m = float(z_m)

    def _start(self, contact: np.ndarray) -> None:
        p = self.params
        rel = self._rel_pos
        use = contact if contact.any() else np.ones(self.n_feet, dtype=bool)
        foot_z = float(np.mean(rel[use, 2] - self.radius[use]))   # ground below the trunk
        pz = -foot_z if self._initial_height_m is None else self._initial_height_m
        self.ground_height_m = pz + foot_z
        x = self.x
        x[:] = 0.0
        x[0, 0], x[1, 0], x[2, 0] = self._initial_xy[0], self._initial_xy[1], pz
        x[:, 2:] = x[:, 0:1] + rel.T
        self.P[:] = 0.0
        self._Pd[:, 0] = p.init_pos_std_m ** 2
        self._Pd[:, 1] = p.init_vel_std_mps ** 2
        self._Pd[:, 2:] = p.init_pos_std_m ** 2 + self._r_pos[:, None]
        self._started = True

    # ------------------------------------------------------------------- tick
    def update(self, obs, contact: np.ndarray | None = None, trust=None) -> EstimatorState:
        """Fuse one observation; returns :attr:`state` (updated in place).

        ``contact``: per-foot stance flags to use instead of ``obs.foot_contact``
        (e.g. a gait schedule ANDed with the sensor). ``trust``: optional
        per-foot weight in [0, 1] of a stance foot's measurements (e.g. the gait
        scheduler's load, low just after touchdown and before lift-off); it
        multiplies the foot's weight (see the module docstring). A foot with
        trust 0 is treated as out of contact.
        """
        nf = self.n_feet
        rot = so3.quat_to_mat(obs.imu_quat, out=self._rot)
        kin = self.kin
        kin.update(obs.joint_pos, obs.joint_vel, obs.imu_gyro)
        np.matmul(kin.foot_pos, rot.T, out=self._rel_pos)     # rows: R r_i
        np.matmul(kin.foot_vel, rot.T, out=self._rel_vel)     # rows: R rdot_i
        # a round foot rolls: with the contact point at rest its centre moves at
        # w x (radius e_z) = radius (w_y, -w_x, 0), w the foot's world angular velocity
        w = np.matmul(kin.foot_angvel, rot.T, out=self._foot_w)
        roll = self._roll
        np.multiply(w[:, 1], self.radius, out=roll[:, 0])
        np.multiply(w[:, 0], self.radius, out=roll[:, 1])
        np.negative(roll[:, 1], out=roll[:, 1])
        c = self._contact
        c[:] = obs.foot_contact if contact is None else contact
        self._weigh(c, trust)
        roll *= self._ramp[:, None]          # a landing foot skids before it rolls
        acc = self._acc
        np.matmul(rot, obs.imu_accel, out=acc)
        acc += self.gravity

        if not self._started:
            self._start(c)
        else:
            self._predict(c)
            self._correct()
        self._publish(obs.t)
        return self.state

    def _weigh(self, c: np.ndarray, trust) -> None:
        """Settle ramps and weights this tick; a foot whose trust is 0 is dropped from the contact set."""
        since = self._since_on
        since += 1.0
        np.multiply(since, c, out=since)
        ramp, w = self._ramp, self._w
        if self._settle_ticks > 0.0:
            # smooth 0 -> 1 ramp (3x^2 - 2x^3) over the settle time, first stance tick at x = 1/n
            np.divide(since, self._settle_ticks, out=ramp)
            np.clip(ramp, 0.0, 1.0, out=ramp)
            ramp *= ramp * (3.0 - 2.0 * ramp)
        else:
            ramp[:] = 1.0
        if self.params.settle_weighs_velocity:
            w[:] = ramp
        else:
            w[:] = 1.0
        if trust is not None:
            t = self._trust_in
            t[:] = trust
            np.clip(t, 0.0, 1.0, out=t)
            w *= t
            np.greater(t, 0.0, out=self._trust_pos)
            np.logical_and(c, self._trust_pos, out=c)
        np.maximum(w, MIN_TRUST, out=w)

    def _predict(self, contact: np.ndarray) -> None:
        dt = self.dt
        x, P = self.x, self.P
        a = self._acc
        # an accelerometer sample describes the motion just before it was read
        # (here: the physics step that ended at this tick), so it drives the
        # prediction from the previous tick to this one
        t3 = self._t3
        np.multiply(x[:, 1], dt, out=t3)
        x[:, 0] += t3
        np.multiply(a, 0.5 * dt * dt, out=t3)
        x[:, 0] += t3
        np.multiply(a, dt, out=t3)
        x[:, 1] += t3
        np.multiply(self._roll.T, dt, out=self._roll_step)
        x[:, 2:] += self._roll_step          # released feet are re-seated after the update anyway
        # P <- A P A^T with A = I + dt e_p e_v^T: a row operation, then a column operation
        t3n = self._t3n
        np.multiply(P[:, 1, :], dt, out=t3n)
        P[:, 0, :] += t3n
        np.multiply(P[:, :, 1], dt, out=t3n)
        P[:, :, 0] += t3n
        self._Pv += self._q_pv

        # stance feet may creep (slip, contact compression), a settling foot freely (its
        # weight divides the variance); released feet are reset after the update
        np.divide(self._q_stance[:2, None], self._w[None, :], out=self._q_feet[:2])
        self._Pd_feet += self._q_feet
        self._active[:] = contact

    def _correct(self) -> None:
        nf = self.n_feet
        x, P, H = self.x, self.P, self.H
        y, r, mask = self._y, self._r, self._mask
        active = self._active
        # rows of a foot out of contact are left out exactly (zero row, zero reading)
        mask[:, :nf] = active
        mask[:, nf:2 * nf] = active
        mask[2, 2 * nf:] = active
        np.multiply(self._H0, mask[:, :, None], out=H)
        y[:, :nf] = self._rel_pos.T
        np.subtract(self._roll.T, self._rel_vel.T, out=y[:, nf:2 * nf])
        if self._height_on:
            y[2, 2 * nf:] = self.radius
            y[2, 2 * nf:] += self.ground_height_m
        y *= mask

        np.matmul(H, x[:, :, None], out=self._hx)
        np.subtract(y, self._hx[:, :, 0], out=self._e)
        np.matmul(H, P, out=self._HP)
        np.matmul(self._HP, self._Ht, out=self._S)
        np.divide(self._r_vel[:2, None], self._w[None, :], out=r[:2, nf:2 * nf])
        self._Sd += r
        # one solve gives the gain (S^-1 H P) and S^-1 e for the consistency figure
        self._rhs[:, :, :self.n] = self._HP
        self._rhs[:, :, self.n] = self._e
        _solve(self._S, self._rhs, self._sol)
        np.matmul(self._e_row, self._KT, out=self._dx)
        x += self._dx[:, 0, :]
        tmp = self._tmp_nn
        np.matmul(self._HP.transpose(0, 2, 1), self._KT, out=tmp)
        P -= tmp
        np.add(P, P.transpose(0, 2, 1), out=tmp)
        np.multiply(tmp, 0.5, out=P)

        np.multiply(self._e, self._Sinv_e, out=self._nis_terms)
        n_active = int(np.count_nonzero(active))
        dof = n_active * (6 + (1 if self._height_on else 0))
        self.state.nis = float(self._nis_terms.sum()) / dof if dof else 0.0
        self.state.n_stance = n_active

        # a released foot: seated at the leg's reach, uncorrelated, uncertain; caught where it lands
        if n_active < nf:
            for i in range(nf):
                if not active[i]:
                    j = 2 + i
                    np.add(x[:, 0], self._rel_pos[i], out=x[:, j])
                    P[:, j, :] = 0.0
                    P[:, :, j] = 0.0
                    P[:, j, j] = RELEASED_FOOT_VAR_M2

    def _publish(self, t: float) -> None:
        s = self.state
        x = self.x
        s.t = float(t)
        s.base_pos[:] = x[:, 0]
        s.base_linvel[:] = x[:, 1]
        s.foot_pos[:] = x[:, 2:].T
        np.sqrt(self._Pd[:, 0], out=s.pos_std_m)
        np.sqrt(self._Pd[:, 1], out=s.vel_std_mps)
