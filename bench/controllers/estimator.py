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
gyro (:class:`~bench.controllers.trunk_kinematics.TrunkFrameFeet`, which gives
``R r_i`` and ``R rdot_i`` directly when posed at the IMU's orientation)::

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
one per world axis, run batched as ``(3, ...)`` arrays.

Computation (the same filter as the standard form above, to rounding; a test
checks it against a plain standard-form Kalman filter on the whole state):

- the measurement update is in information form (the Woodbury identity):
  ``Y = P^-1 + H^T R^-1 H``, ``P+ = Y^-1``, ``x+ = x + P+ b`` with
  ``b = H^T R^-1 (y - H x)``, one inverse of the predicted ``P`` and one
  solve ``Y [P+ | dx] = [I | b]`` per tick, both ``(2 + F)``-square, instead
  of a solve with the ``3F``-square innovation covariance. ``H^T R^-1 H``
  depends only on the set of feet in contact and the feet's horizontal
  velocity weights: the contact set's part, the process noise's and the mask
  that clears a released foot are made once per set (a dict keyed by the
  contact bit mask), the weights' part when they change. The consistency
  figure comes out of the same sums: ``e^T S^-1 e = e^T R^-1 e - b^T P+ b``;
- per-tick work on a few numbers (weights, rolling term, the prediction of
  ``x``, ``b``) is done on plain Python floats, cheaper than numpy calls on
  arrays of 3 or 4;
- the leg readings come out already rotated into world axes: the nominal
  model's trunk is posed at the IMU's orientation, its foot velocities taken
  from MuJoCo's ``mj_objectVelocity`` (:class:`~bench.controllers.trunk_kinematics.TrunkFrameFeet`).

Arrays are allocated once in the constructor (the per-contact-set constants
the first time a set occurs).

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


def _make_inv():
    """``inv(a, out)`` for stacked matrices without a fresh result array (as :func:`_make_solve`)."""
    try:
        from numpy.linalg import _umath_linalg

        g = _umath_linalg.inv
        a = np.array([[[2.0, 0.0], [0.0, 4.0]]])
        o = np.empty_like(a)
        g(a, out=o, signature="d->d")
        if np.allclose(o[0], ((0.5, 0.0), (0.0, 0.25))):
            return lambda a, out: g(a, out=out, signature="d->d")
    except Exception:  # noqa: BLE001 - any failure means: use the public function
        pass

    def inv(a, out):
        out[...] = np.linalg.inv(a)
        return out

    return inv


_inv = _make_inv()


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


class _ContactSet:
    """Constants of one set of feet in contact (a bit mask), made the first time the set occurs.

    ``C``: the information the set's measurements give, ``H^T R^-1 H`` per world axis (3, n, n),
    without the horizontal velocity rows' share (their weights change every tick); ``Q``: the
    process noise added after the prediction (3, n, n), the pair ``p, v`` block and the vertical
    random walk of the stance feet, with each released foot's variance (its horizontal random
    walk, weighed, is written per tick); ``keep``: 1 where ``P`` keeps its entries, 0 on a
    released foot's row and column (None when every foot is in contact).
    """

    __slots__ = ("key", "active", "released", "n_active", "dof", "C", "Q", "keep", "count")

    def __init__(self, est: "LegImuEstimator", key: int) -> None:
        nf, n = est.n_feet, est.n
        self.key = key
        self.active = [i for i in range(nf) if key >> i & 1]
        self.released = [i for i in range(nf) if not key >> i & 1]
        self.n_active = k = len(self.active)
        self.dof = k * (6 + (1 if est._height_on else 0))
        C = np.zeros((3, n, n))
        for a in range(3):
            for i in self.active:
                j = 2 + i
                ip = 1.0 / est._r_pos[a]           # f_i - p = R r_i
                C[a, 0, 0] += ip
                C[a, j, j] += ip
                C[a, 0, j] -= ip
                C[a, j, 0] -= ip
                if a == 2:
                    C[a, 1, 1] += 1.0 / est._r_vel[a]    # vertical velocity rows: full weight
                    if est._height_on:
                        C[a, j, j] += 1.0 / est._r_h
        self.C = C
        Q = np.zeros((3, n, n))
        Q[:, :2, :2] = est._q_pv
        for i in self.active:
            Q[2, 2 + i, 2 + i] = est._q_stance[2]
        for i in self.released:
            Q[:, 2 + i, 2 + i] = RELEASED_FOOT_VAR_M2
        self.Q = Q
        if self.released:
            keep = np.ones((n, n))
            for i in self.released:
                keep[2 + i, :] = 0.0
                keep[:, 2 + i] = 0.0
            self.keep = keep
        else:
            self.keep = None
        self.count = 0


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
        self.gravity = np.array(robot.model.opt.gravity, dtype=float)
        self._g = self.gravity.tolist()
        self.radius = self.kin.foot_radius_m.copy()
        self._rad = self.radius.tolist()
        self.ground_height_m = 0.0
        self._height_on = p.ground_height_noise_m is not None

        a2 = p.accel_noise_mps2 ** 2
        self._q_pv = a2 * np.array([[dt ** 4 / 4, dt ** 3 / 2], [dt ** 3 / 2, dt ** 2]])
        self._q_stance = _axes(p.stance_foot_drift_m_per_rt_s) ** 2 * dt
        self._r_pos = _axes(p.kin_pos_noise_m) ** 2
        self._r_vel = _axes(p.kin_vel_noise_mps) ** 2
        self._r_h = (p.ground_height_noise_m or 1.0) ** 2
        self._qs = self._q_stance.tolist()
        self._inv_rpos = (1.0 / self._r_pos).tolist()
        self._inv_rvel = (1.0 / self._r_vel).tolist()
        self._inv_rh = 1.0 / self._r_h

        # process: x+ = A x (+ inputs), A = I + dt e_p e_v^T, the same on every axis
        A = np.eye(n)
        A[0, 1] = dt
        self._A = A
        self._At = A.T.copy()
        self.x = np.zeros((3, n))
        # the update solves Y [P+ | dx] = [I | b] (information form, below): P is the left block
        # of the solution array, so the solve writes the new covariance in place
        self._sol = np.zeros((3, n, n + 1))
        self.P = self._sol[:, :, :n]
        self._dx = self._sol[:, :, n]
        self._rhs = np.zeros((3, n, n + 1))
        self._rhs[:, :, :n] = np.eye(n)
        self._b = self._rhs[:, :, n]
        self._Pd = _diag_view(self.P)
        self._T = np.zeros((3, n, n))
        self._Pp = np.zeros((3, n, n))      # predicted covariance
        self._Y = np.zeros((3, n, n))       # information matrix
        self._Q = np.zeros((3, n, n))       # this tick's process noise (contact set and weights)
        self._Qd_xy = _diag_view(self._Q)[:2, 2:]
        self._C = np.zeros((3, n, n))       # this tick's measurement information
        self._sets: dict[int, _ContactSet] = {}
        self._last = None                   # (contact set, weights) _Q and _C were made for
        self._contact = np.zeros(nf, dtype=bool)
        # per-foot settle ramp and measurement weight (see the module docstring), plain floats
        self._settle_ticks = float(p.touchdown_settle_s) / dt
        self._since_on = [0.0] * nf          # ticks since the contact flag turned on (counts from 1)
        self._ramp = [1.0] * nf
        self._w = [1.0] * nf
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

    def _start(self, contact: list, rel: list) -> None:
        p = self.params
        nf = self.n_feet
        use = [i for i in range(nf) if contact[i]] or list(range(nf))
        foot_z = float(np.mean([rel[i][2] - self._rad[i] for i in use]))   # ground below the trunk
        pz = -foot_z if self._initial_height_m is None else self._initial_height_m
        self.ground_height_m = pz + foot_z
        x = self.x
        x[:] = 0.0
        x[0, 0], x[1, 0], x[2, 0] = self._initial_xy[0], self._initial_xy[1], pz
        x[:, 2:] = x[:, 0:1] + np.array(rel).T
        self.P[:] = 0.0
        self._Pd[:, 0] = p.init_pos_std_m ** 2
        self._Pd[:, 1] = p.init_vel_std_mps ** 2
        self._Pd[:, 2:] = p.init_pos_std_m ** 2 + self._r_pos[:, None]
        self._started = True

    def _contact_set(self, key: int) -> _ContactSet:
        cs = self._sets.get(key)
        if cs is None:
            cs = self._sets[key] = _ContactSet(self, key)
        return cs

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
        kin = self.kin
        # the model's trunk turned as the IMU says: the legs' readings come out in world axes (R r_i, R rdot_i)
        kin.orientation[:] = obs.imu_quat
        kin.update(obs.joint_pos, obs.joint_vel, obs.imu_gyro)
        c = self._contact
        c[:] = obs.foot_contact if contact is None else contact
        cl = c.tolist()
        key = self._weigh(cl, trust)
        rel = kin.foot_pos.tolist()           # R r_i
        vel6 = kin.foot_vel6.tolist()         # per foot: world angular velocity, then R rdot_i
        if not self._started:
            self._start(cl, rel)
        else:
            self._step(key, rel, vel6, obs.imu_accel.tolist())
        self._publish(obs.t)
        return self.state

    def _weigh(self, c: list, trust) -> int:
        """Settle ramps and weights this tick; a foot whose trust is 0 is dropped from the contact set.
        Returns the contact set as a bit mask."""
        since, ramp, w = self._since_on, self._ramp, self._w
        settle = self._settle_ticks
        weigh_velocity = self.params.settle_weighs_velocity
        tl = None
        if trust is not None:
            tl = trust.tolist() if isinstance(trust, np.ndarray) else [float(t) for t in trust]
        key = 0
        for i in range(self.n_feet):
            s = since[i] = since[i] + 1.0 if c[i] else 0.0
            if settle > 0.0:
                # smooth 0 -> 1 ramp (3x^2 - 2x^3) over the settle time, first stance tick at x = 1/n
                r = s / settle
                r = 0.0 if r < 0.0 else (1.0 if r > 1.0 else r)
                r *= r * (3.0 - 2.0 * r)
            else:
                r = 1.0
            ramp[i] = r
            wi = r if weigh_velocity else 1.0
            if tl is not None:
                t = tl[i]
                t = 0.0 if t < 0.0 else (1.0 if t > 1.0 else t)
                wi *= t
                if not t > 0.0:
                    c[i] = False
            w[i] = wi if wi > MIN_TRUST or wi != wi else MIN_TRUST
            if c[i]:
                key |= 1 << i
        return key

    def _step(self, key: int, rel: list, vel6: list, accel: list) -> None:
        """Predict to this tick and correct with this tick's leg readings."""
        nf, dt = self.n_feet, self.dt
        cs = self._contact_set(key)
        w, ramp, rad = self._w, self._ramp, self._rad
        # body -> world with the posed trunk's rotation; a = R a_imu + g
        r0, r1, r2, r3, r4, r5, r6, r7, r8 = self.kin.rot.tolist()
        ax, ay, az = accel
        g = self._g
        acc = (r0 * ax + r1 * ay + r2 * az + g[0], r3 * ax + r4 * ay + r5 * az + g[1],
               r6 * ax + r7 * ay + r8 * az + g[2])
        # a round foot rolls: with the contact point at rest its centre moves at w x (radius e_z)
        # = radius (w_y, -w_x, 0), w the foot's world angular velocity; a landing foot skids before
        # it rolls (its settle ramp scales the term). Velocity reading: roll_i - R rdot_i.
        roll_x = [vel6[i][1] * rad[i] * ramp[i] for i in range(nf)]
        roll_y = [-(vel6[i][0] * rad[i]) * ramp[i] for i in range(nf)]

        # ---- prediction. An accelerometer sample describes the motion just before it was read
        # (here: the physics step that ended at this tick), so it drives the prediction from the
        # previous tick to this one.
        xl = self.x.tolist()
        half_dt2 = 0.5 * dt * dt
        for a in range(3):
            xa = xl[a]
            xa[0] += xa[1] * dt + acc[a] * half_dt2
            xa[1] += acc[a] * dt
        for i in range(nf):                 # released feet are re-seated after the update anyway
            xl[0][2 + i] += roll_x[i] * dt
            xl[1][2 + i] += roll_y[i] * dt
        # P <- A P A^T (* keep: a released foot's row and column cleared) + Q
        Pp = self._Pp
        np.matmul(self._A, self.P, out=self._T)
        np.matmul(self._T, self._At, out=Pp)
        if cs.keep is not None:
            Pp *= cs.keep
        # this tick's Q and measurement information depend on the contact set and the weights
        wkey = (key, *[w[i] for i in cs.active])
        if wkey != self._last:
            self._make_noise(cs)
            self._last = wkey
        Pp += self._Q

        if not cs.n_active:                 # nothing measured: the prediction stands
            self.P[:] = Pp
            self.state.nis = 0.0
            self.state.n_stance = 0
            for a in range(3):
                xa = xl[a]
                for i in range(nf):
                    xa[2 + i] = xa[0] + rel[i][a]
            self.x[:] = xl
            return

        # ---- correction, information form. With the measurements y = H x + noise (R diagonal):
        #   Y = P^-1 + H^T R^-1 H,  P+ = Y^-1,  x+ = x + P+ b,  b = H^T R^-1 (y - H x)
        # (the Woodbury identity turns the standard form's S = H P H^T + R into this). H^T R^-1 H
        # depends on the contact set (cached) and the horizontal velocity weights; b and the
        # innovation's consistency figure are a few sums per axis, taken here in plain floats.
        Y = self._Y
        _inv(Pp, Y)
        Y += self._C
        inv_rpos, inv_rvel = self._inv_rpos, self._inv_rvel
        ground, inv_rh = self.ground_height_m, self._inv_rh
        height_on = self._height_on
        active = cs.active
        bl = []
        quad = 0.0                          # e^T R^-1 e over the measurements
        for a in range(3):
            xa = xl[a]
            p, v = xa[0], xa[1]
            ip = inv_rpos[a]
            iv = inv_rvel[a]
            b = [0.0] * (2 + nf)
            bp = bv = 0.0
            for i in active:
                j = 2 + i
                e = rel[i][a] - (xa[j] - p)                  # f_i - p = R r_i
                bi = e * ip
                quad += e * bi
                bp -= bi
                if a == 0:
                    ev = roll_x[i] - vel6[i][3] - v          # v = roll_i - R rdot_i
                    om = w[i] * iv
                elif a == 1:
                    ev = roll_y[i] - vel6[i][4] - v
                    om = w[i] * iv
                else:
                    ev = -vel6[i][5] - v
                    om = iv
                    if height_on:                            # f_i,z = ground + radius_i
                        eh = ground + rad[i] - xa[j]
                        bh = eh * inv_rh
                        quad += eh * bh
                        bi += bh
                bv += om * ev
                quad += om * ev * ev
                b[j] = bi
            b[0], b[1] = bp, bv
            bl.append(b)
        self._b[:] = bl
        _solve(Y, self._rhs, self._sol)                     # P+ and dx = P+ b, P written in place
        dx = self._dx.tolist()
        bdx = 0.0
        for a in range(3):
            xa, da, ba = xl[a], dx[a], bl[a]
            for j in range(2 + nf):
                xa[j] += da[j]
                bdx += ba[j] * da[j]
            # a released foot: seated at the leg's reach (its covariance was reset in the prediction)
            for i in cs.released:
                xa[2 + i] = xa[0] + rel[i][a]
        self.x[:] = xl
        # normalised innovation squared e^T S^-1 e = e^T R^-1 e - b^T P+ b (Woodbury again)
        self.state.nis = (quad - bdx) / cs.dof
        self.state.n_stance = cs.n_active

    def _make_noise(self, cs: _ContactSet) -> None:
        """This tick's process noise Q and measurement information C from the contact set and the weights."""
        w, qs, iv = self._w, self._qs, self._inv_rvel
        Q, C = self._Q, self._C
        Q[:] = cs.Q
        C[:] = cs.C
        # stance feet may creep (slip, contact compression), a settling foot freely (its weight divides
        # the variance); the horizontal velocity rows of foot i carry w_i / r_vel of information
        qd = self._Qd_xy
        sw = 0.0
        for i in cs.active:
            qd[0, i] = qs[0] / w[i]
            qd[1, i] = qs[1] / w[i]
            sw += w[i]
        C[0, 1, 1] = sw * iv[0]
        C[1, 1, 1] = sw * iv[1]

    def _publish(self, t: float) -> None:
        s = self.state
        x = self.x
        s.t = float(t)
        s.base_pos[:] = x[:, 0]
        s.base_linvel[:] = x[:, 1]
        s.foot_pos[:] = x[:, 2:].T
        np.sqrt(self._Pd[:, 0], out=s.pos_std_m)
        np.sqrt(self._Pd[:, 1], out=s.vel_std_mps)
