"""The two reference controller stacks: ``force-qp`` and ``force-qp-l1``.

Both are assembled from the parts in this package and differ in exactly one
thing: ``force-qp-l1`` adds an L1 adaptive augmentation of the trunk dynamics.
Per control tick:

0. Trunk state: by default the reference estimator (``LegImuEstimator``: IMU +
   leg kinematics under the contact flags) gives the trunk position and
   velocity; the stacks never read ``obs.privileged``. With ``privileged=True``
   they read the simulator's true trunk state there instead.
1. ``LegKinematics.update``: pose the nominal robot from the observation and
   that trunk state (feet, Jacobians, COM).
2. Command shaping: the body-frame command ``[vx, vy, yaw_rate]`` is rate
   limited (``max_lin_acc``, ``max_yaw_acc``), turned to world by the current
   heading and integrated into a desired heading and horizontal position (the
   position error is clipped to ``max_pos_err_m`` so a blocked robot does not
   wind up). The desired height is the nominal standing height above the ground
   estimate under the trunk (``GroundPlane``: a plane through the last contact
   point of every foot), the desired vertical velocity follows that plane's
   slope, and the desired attitude is level at the desired heading. The
   controller never knows the terrain; this is all it infers.
3. ``GaitScheduler``: stands while the shaped command is zero; trots (from a
   double-support point, with load ramps) as soon as it is not, and returns to
   standing once the command has been zero for a while. (Documented choice:
   it trots when commanded to move, stands otherwise.) A scenario's gait hint
   (``obs.gait_hint``) picks the gait instead: ``pace``, ``bound``, ``walk`` or
   ``trot`` when moving (parameters per gait in ``gait.GAIT_TUNING``); ``stand``
   stands still whatever the velocity command (it is shaped as a zero command);
   an unknown hint is ignored; without a hint it trots as above.
4. ``DesiredWrench``: PD + nominal gravity compensation -> body wrench.
   ``force-qp-l1`` first runs ``L1Adaptive`` on the trunk error state and writes
   its adaptive acceleration into the wrench's feed-forward slot.
5. ``ForceQP``: stance ground reaction forces, ``tau = -J^T f`` on stance legs.
6. ``SwingPlanner``: Raibert foothold + velocity feedback, Bezier path, Cartesian
   PD through ``J^T``. Every leg also gets the nominal model's gravity/Coriolis
   joint torques (``qfrc_bias``), so the SRB forces act as modelled.
7. Clip to the manifest torque limits.

With a height scan (``obs.height_scan`` not None; see ``foothold.py``) four things change, and
nothing else: footholds move to the nearest safe cell of the scan and land at the scan's
height; the swing apex clears the highest scan point between lift-off and touch-down and the
foot rises before it moves (``scan_swing_hold``); the desired trunk attitude follows the
roll and pitch of the plane fitted to the feet's last contact points (clipped to
``scan_max_tilt_deg``, the pitch also kept between level and ``scan_slope_factor`` times the
scan's mean slope along the heading; the height may be raised by ``scan_height_offset_m``, 0 by default, and
is raised by up to ``scan_descent_height_m`` while that plane pitches nose down, i.e. on a
descent: from ``scan_descent_tilt_deg`` of desired pitch, in full at the tilt clip); each
stance foot's friction pyramid is turned to the scan's local normal under it. The scan
is placed with the trunk's current position and heading (exact for a scan without latency).
The scan reads world heights while the trunk state may be an estimate whose height drifts, so
the scan is shifted into the estimate's vertical frame: the offset is the mean, over stance
feet on safe cells, of (foot height from the estimate and the legs) minus (scan height under
the foot), low-passed with ``scan_align_tau_s``. With the true state it stays near zero.
Without a scan none of this code runs.

Neither stack is told about payloads: only the nominal robot's mass, inertia
and COM are used.
"""

from __future__ import annotations

import math
import time

import numpy as np

from bench.controllers import so3
from bench.controllers.estimator import LegImuEstimator

#: Estimator settings of the stacks on top of ``EstimatorParams``' defaults (``estimator=`` overrides).
STACK_ESTIMATOR = {"touchdown_settle_s": 0.05, "settle_weighs_velocity": True}
from bench.controllers.force_qp import ForceQP
from bench.controllers.gait import GAIT_TUNING, GaitScheduler
from bench.controllers.ground import GroundPlane
from bench.controllers.kinematics import LegKinematics
from bench.controllers.l1 import L1Adaptive
from bench.controllers.swing import SwingPlanner
from bench.controllers.wrench import DesiredWrench

CHANNELS = ("x", "y", "z", "roll", "pitch", "yaw")
#: Standard gravity, m/s^2 (the value the robot models use; only for the l1_load_kg signal).
GRAVITY_M_S2 = 9.81


def _rot_y(a: float) -> np.ndarray:
    c, s = math.cos(a), math.sin(a)
    return np.array([[c, 0.0, s], [0.0, 1.0, 0.0], [-s, 0.0, c]])


def _rot_x(a: float) -> np.ndarray:
    c, s = math.cos(a), math.sin(a)
    return np.array([[1.0, 0.0, 0.0], [0.0, c, -s], [0.0, s, c]])


def descent_height(pitch: float, lift_m: float, start: float, full: float) -> float:
    """Extra trunk height for a nose-down desired ``pitch`` (rad, positive nose down).

    0 up to ``start``, ``lift_m`` from ``full`` on, linear in between (a step at ``start``
    when ``full <= start``); 0 for a level or nose-up pitch whatever ``start``.
    """
    if pitch <= 0.0 or pitch <= start:
        return 0.0
    if pitch >= full:
        return lift_m
    return lift_m * (pitch - start) / (full - start)


def scan_slope_weights(x) -> np.ndarray:
    """Weights ``w`` with ``w @ h`` = least-squares slope dh/dx of heights ``h`` at abscissae ``x``."""
    x = np.asarray(x, dtype=float).ravel()
    d = x - x.mean()
    ss = float(d @ d)
    return d / ss if ss > 0.0 else np.zeros_like(d)


def scan_slope(heights, x, weights=None, finite=None) -> float:
    """Least-squares slope dh/dx of the scan ``heights`` over the points' heading offsets ``x``.

    Over a scan longer than a few treads of a staircase this is about rise/run whatever the
    phase of the treads under it; non-finite heights are left out (0 with fewer than 2 points left).
    ``weights``: ``scan_slope_weights(x)``, used when every height is finite (``finite``: whether
    they are, when the caller knows; else checked here).
    """
    h = np.asarray(heights, dtype=float).ravel()
    if finite is None:
        finite = bool(np.isfinite(h).all())
    if weights is not None and finite:
        return float(weights @ h)
    x = np.asarray(x, dtype=float).ravel()
    ok = np.isfinite(h)
    if ok.sum() < 2:
        return 0.0
    return float(scan_slope_weights(x[ok]) @ h[ok])


def bound_pitch(pitch: float, scan_pitch: float, factor: float) -> float:
    """``pitch`` kept between 0 and ``factor * scan_pitch`` (rad; a factor of inf: unchanged)."""
    if math.isinf(factor):
        return pitch
    b = factor * scan_pitch
    return max(min(0.0, b), min(max(0.0, b), pitch))


class ForceQPController:
    """Trotting controller: SRB force QP for stance, Cartesian PD for swing (no adaptation).

    Parameters (all keyword, all have defaults)
    -------------------------------------------
    gait_period_s, duty, load_ramp: gait scheduler (see ``gait.py``), for the trot.
    gait_tuning: gait name -> ``{period_s, duty, load_ramp, swing_height_m}`` overriding
        ``gait.GAIT_TUNING`` for the hinted gaits (pace, bound, walk).
    swing_height_m, k_vel, max_reach_m, swing_kp, swing_kd: swing planner.
    leg_bias_ff: add the nominal model's gravity/Coriolis joint torques (feed-forward).
    mu, fz_min_n, fz_max_n, alpha, beta, wrench_weights, solver, qp_direct: force QP
        (``qp_direct``: call DAQP without the qpsolvers wrapper; ``None``, the default, does
        so when ``solver="daqp"``, ``False`` keeps the wrapper; see ``force_qp.py``).
    kp_pos, kd_pos, kp_rot, kd_rot: trunk PD (accelerations per unit error).
    max_lin_acc (m/s^2), max_yaw_acc (rad/s^2): command rate limits.
    max_pos_err_m, max_yaw_err_rad: clip on the horizontal position / heading error.
    move_threshold: command size (m/s or rad/s) above which it trots.
    ground_tau_s: time constant of the ground-height estimate (``ground.py``).
    scan_edge_margin_m, scan_max_roughness_m, scan_max_shift_m: foothold adjustment on a height
        scan (safety window half-width, largest height range in it, farthest shift; ``foothold.py``).
    scan_clearance_m: swing apex above the highest scan point along the swing (m).
    scan_kp_rot, scan_kd_rot: trunk attitude PD while a scan is present (``None``: ``kp_rot`` /
        ``kd_rot``). Stiffer in pitch (600 against 250 rad/s^2 per rad, damping ratio about 0.94
        against 0.95): on a flight the trunk overshot the desired pitch by 3 to 5 degrees at the
        top of the climb, against the bar of the stair slope (``stair_margin.py``).
    scan_swing_hold: share of the swing at each end without horizontal motion (``swing.py``).
    scan_max_tilt_deg: clip on the desired roll and pitch taken from the fitted ground plane.
    scan_tilt_tau_s: time constant of the low-pass on that desired roll and pitch (s).
    scan_slope_factor: the desired pitch from the fitted plane (before the low-pass) is kept
        between 0 and this factor times the pitch of the terrain's mean slope along the heading
        (least-squares slope of all scan heights against their heading offsets: over a scan
        a few treads long, about rise/run of a flight). The plane through the feet's last
        contacts tilts more than the flight while the front feet are a tread higher than the
        rear (a riser short of a whole flight between them), and the trunk then pitched past the
        flight's slope on a shallow flight; below 1 it leaves room for the tracking overshoot.
        ``.inf``: no bound.
    scan_align_tau_s: time constant of the vertical alignment of the scan with the trunk-state
        estimate's frame (s; see above).
    scan_height_offset_m: added to the desired trunk height while a scan is present (m); a taller
        stance folds the knees less far back, away from the edge of the step behind when descending.
    scan_descent_height_m: added to the desired trunk height while the desired pitch taken from the
        fitted ground plane is nose down (a descent), ramped from 0 at ``scan_descent_tilt_deg`` to
        the full value at ``scan_max_tilt_deg`` (m). Going down stairs at the nominal height a
        leg stepping down a riser often ends its swing with the shank resting on the nose of the
        tread it left and the foot short of the lower tread, and the trunk falls onto that leg;
        standing taller on the way down keeps the shanks off the noses. Up a flight and on the
        level it adds nothing.
    scan_descent_tilt_deg: desired nose-down pitch where ``scan_descent_height_m`` starts (deg).
    privileged: read the true trunk position and velocity from ``obs.privileged``
        instead of estimating them (a scenario or run without privileged state then
        stops the episode with an error saying so).
    estimator: keyword overrides of the estimator's noise figures
        (``EstimatorParams`` in ``estimator.py``); unused when ``privileged``.
    """

    name = "force-qp"

    def __init__(
        self,
        gait_period_s: float = 0.32,
        duty: float = 0.6,
        load_ramp: float = 0.05,
        swing_height_m: float = 0.07,
        k_vel: float = 0.06,
        max_reach_m: float = 0.15,
        swing_kp=(700.0, 700.0, 700.0),
        swing_kd=(18.0, 18.0, 18.0),
        leg_bias_ff: bool = True,
        mu: float = 0.5,
        fz_min_n: float = 5.0,
        fz_max_n: float = 300.0,
        alpha: float = 1e-4,
        beta: float = 1e-4,
        wrench_weights=(1.0, 1.0, 1.0, 20.0, 20.0, 10.0),
        solver: str = "daqp",
        qp_direct: bool | None = None,
        kp_pos=(40.0, 40.0, 100.0),
        kd_pos=(12.0, 12.0, 20.0),
        kp_rot=(250.0, 250.0, 200.0),
        kd_rot=(30.0, 30.0, 28.0),
        max_lin_acc: float = 1.5,
        max_yaw_acc: float = 3.0,
        max_pos_err_m: float = 0.08,
        max_yaw_err_rad: float = 0.3,
        move_threshold: float = 0.02,
        ground_tau_s: float = 0.05,
        scan_edge_margin_m: float = 0.065,
        scan_max_roughness_m: float = 0.03,
        scan_max_shift_m: float = 0.12,
        scan_clearance_m: float = 0.07,
        scan_kp_rot=(250.0, 600.0, 200.0),
        scan_kd_rot=(30.0, 46.0, 28.0),
        scan_swing_hold: float = 0.15,
        scan_max_tilt_deg: float = 14.0,
        scan_tilt_tau_s: float = 0.4,
        scan_slope_factor: float = 0.8,
        scan_height_offset_m: float = 0.0,
        scan_descent_height_m: float = 0.05,
        scan_descent_tilt_deg: float = 5.0,
        scan_align_tau_s: float = 0.1,
        gait_tuning: dict | None = None,
        privileged: bool = False,
        estimator: dict | None = None,
    ) -> None:
        self.params = dict(locals())
        self.params.pop("self")
        self.params.pop("__class__", None)
        self.robot = None

    # ------------------------------------------------------------------ setup
    def reset(self, robot, control_dt: float) -> None:
        if robot.num_feet != 4:
            # The gait tables (diagonal pairs) and the foot order are a quadruped's; the bench core is not.
            raise ValueError(f"{type(self).__name__} drives four-legged robots only; {robot.manifest.name!r} "
                             f"has {robot.num_feet} feet")
        p = self.params
        self.robot = robot
        self.dt = float(control_dt)
        self.kin = LegKinematics(robot, with_bias=p["leg_bias_ff"])
        nf, nj = self.kin.n_feet, self.kin.n_joints
        self.n_feet, self.n_joints = nf, nj
        tuning = {g: {**v, **(p["gait_tuning"] or {}).get(g, {})} for g, v in GAIT_TUNING.items()}
        self.gait = GaitScheduler(p["gait_period_s"], p["duty"], load_ramp=p["load_ramp"], tuning=tuning)
        self._swing_height = {g: float(v.get("swing_height_m", p["swing_height_m"])) for g, v in tuning.items()}
        self._swing_height["trot"] = float(p["swing_height_m"])
        self._hint = None
        self._hint_stand = False
        self.swing = SwingPlanner(nf, p["swing_height_m"], p["k_vel"], p["max_reach_m"],
                                  kp=p["swing_kp"], kd=p["swing_kd"])
        self.qp = ForceQP(nf, mu=p["mu"], fz_min_n=p["fz_min_n"], fz_max_n=p["fz_max_n"],
                          alpha=p["alpha"], beta=p["beta"], wrench_weights=p["wrench_weights"],
                          solver=p["solver"], direct=p["qp_direct"])
        self.wrench = DesiredWrench(robot.mass_kg, robot.trunk_inertia_body,
                                    p["kp_pos"], p["kd_pos"], p["kp_rot"], p["kd_rot"])
        self.height_nominal = float(robot.nominal_height)
        self.torque_limits = np.asarray(robot.torque_limits, dtype=float).copy()
        self.max_lin_step = p["max_lin_acc"] * self.dt
        self.max_yaw_step = p["max_yaw_acc"] * self.dt
        self.ground = GroundPlane(nf, p["ground_tau_s"], self.dt)

        self.nominal_xy = self.kin.foot_nominal_body[:, 0:2].copy()
        self._nominal_xy = [tuple(map(float, xy)) for xy in self.nominal_xy]
        self._neg_limits = -self.torque_limits
        self._move_threshold = float(p["move_threshold"])
        self._bias_ff = bool(p["leg_bias_ff"])
        self._max_pos_err = float(p["max_pos_err_m"])
        self._max_yaw_err = float(p["max_yaw_err_rad"])

        # state and work arrays
        self.cmd = [0.0, 0.0, 0.0]
        self._p_des = [0.0, 0.0, 0.0]
        self._u_list = [0.0] * (3 * nf)
        self.p_des = np.zeros(3)
        self.v_des = np.zeros(3)
        self.rot_des = np.eye(3)
        self.w_des = np.zeros(3)
        self.yaw_des = 0.0
        self.ground_z = 0.0
        self.r = np.zeros((nf, 3))
        self.u = np.zeros(3 * nf)
        self.tau = np.zeros(nj)
        self._prev_contact = [True] * nf
        self._started = False
        # height-scan stepping: made on the first tick that carries a scan (see _scan_update)
        self.scan_map = None
        self._normals = [(0.0, 0.0, 1.0)] * nf
        self._normal_set = [False] * nf
        self.ticks = 0
        self.step_time_s = 0.0
        self.est = None   # None: the true state is read (privileged=True)
        if not p["privileged"]:
            # short stance phases (bound, pace: ~0.1 s) make a landing foot's skid a large share of
            # its stance: a settle ramp for the rolling term and the velocity (see estimator.py)
            self.est = LegImuEstimator(robot, self.dt, **{**STACK_ESTIMATOR, **(p["estimator"] or {})})
            self.est.reset()
            self._est_contact = np.ones(nf, dtype=bool)
            self._est_trust = np.ones(nf)
        # Per-tick signals the bench records (trace.npz ``signal_*``, plots, report): 1 when this tick's
        # force QP solved, 0 when it fell back to the previous forces.
        self.signals = {"qp_ok": 1.0}
        self._reset_extra()

    def _reset_extra(self) -> None:
        """Hook for the adaptive stack."""

    def _set_rot_gains(self, kp_rot, kd_rot) -> None:
        """Replace the trunk attitude PD gains (roll pitch yaw) from this tick on."""
        self.wrench.set_rot_gains(kp_rot, kd_rot)
        self._gains_changed()

    def _gains_changed(self) -> None:
        """Hook: the adaptive stack's reference model follows the PD gains."""

    # ------------------------------------------------------------------- tick
    def step(self, obs, command) -> np.ndarray:
        t0 = time.perf_counter()
        kin = self.kin
        base_pos, base_vel = self._trunk_state(obs)
        kin.update(obs, base_pos, base_vel)
        rot = kin.rot
        pos = base_pos.tolist()
        vel = base_vel.tolist()
        dt = self.dt
        if not self._started:
            self._start(pos)

        # a gait hint picks the gait (see the module docstring); "stand" stands still; an unknown hint is ignored
        hint = getattr(obs, "gait_hint", None)
        if hint != self._hint:
            self._hint = hint
            self._hint_stand = hint == "stand"
            if hint in self.gait.gaits:
                self.gait.request(hint)

        # command shaping
        c = self.cmd
        cx, cy_, cz = float(command[0]), float(command[1]), float(command[2])
        if self._hint_stand:
            cx = cy_ = cz = 0.0
        ls, ys = self.max_lin_step, self.max_yaw_step
        c[0] += min(ls, max(-ls, cx - c[0]))
        c[1] += min(ls, max(-ls, cy_ - c[1]))
        c[2] += min(ys, max(-ys, cz - c[2]))
        thr = self._move_threshold
        moving = (cx != 0.0 or cy_ != 0.0 or cz != 0.0
                  or abs(c[0]) > thr or abs(c[1]) > thr or abs(c[2]) > thr)

        r00, r10 = rot[0, 0], rot[1, 0]
        yaw = math.atan2(r10, r00)
        cyaw, syaw = math.cos(yaw), math.sin(yaw)
        vx = cyaw * c[0] - syaw * c[1]
        vy = syaw * c[0] + cyaw * c[1]
        pd = self._p_des
        lim = self._max_pos_err
        for k, vk in ((0, vx), (1, vy)):
            v = pd[k] + vk * dt
            e = v - pos[k]
            if e > lim:
                v = pos[k] + lim
            elif e < -lim:
                v = pos[k] - lim
            pd[k] = v
        yd = self.yaw_des + c[2] * dt
        ey = math.remainder(yd - yaw, math.tau)
        ylim = self._max_yaw_err
        if ey > ylim:
            yd = yaw + ylim
        elif ey < -ylim:
            yd = yaw - ylim
        self.yaw_des = yd
        so3.rot_z(yd, out=self.rot_des)

        # gait
        gait = self.gait
        gait.update(dt, moving)
        self.swing.swing_height_m = self._swing_height.get(gait.gait, self.swing.swing_height_m)
        contact = gait.contact_list

        scan = getattr(obs, "height_scan", None)
        smap = None
        if scan is not None:
            smap = self._scan_update(scan, pos[0], pos[1], yaw)

        # ground: plane through the last contact point of each foot
        fp = kin.foot_pos.tolist()
        fc = obs.foot_contact.tolist()
        if not any(fc):
            # no contact sensing reported (or airborne): trust fully loaded stance feet
            fc = [ld >= 1.0 for ld in gait.load_list]
        fh = kin.foot_height_nominal
        if smap is not None:
            self._scan_align(smap, contact, fc, fp, fh)
        ground = self.ground
        ground.observe(fp, [contact[i] and fc[i] for i in range(self.n_feet)], fh)
        gz, gx, gy = ground.fit(pos[0], pos[1])
        self.ground_z = gz
        pd[2] = gz + self.height_nominal
        self.p_des[:] = pd
        v_des = [vx, vy, gx * vx + gy * vy]
        self.v_des[:] = v_des
        self.w_des[2] = c[2]
        if smap is not None:
            # trunk attitude along the fitted ground plane: pitch from the slope along the heading,
            # roll from the slope across it (nose up on an ascending slope is a negative pitch about y),
            # low-passed because on stairs the plane through the feet jumps by a riser at each landing
            tmax, a = self._max_tilt, self._tilt_alpha
            tilt = self._tilt
            tp = max(-tmax, min(tmax, -math.atan(cyaw * gx + syaw * gy)))
            if self._slope_k != math.inf:
                # pitch target bounded by the scan's mean slope along the heading (about rise/run on a flight)
                sp = -math.atan(scan_slope(smap.heights, self._scan_x, self._scan_w, smap.finite))
                tp = bound_pitch(tp, sp, self._slope_k)
            tilt[0] += a * (tp - tilt[0])
            tilt[1] += a * (max(-tmax, min(tmax, math.atan(-syaw * gx + cyaw * gy))) - tilt[1])
            # taller on a descent (nose-down plane), ramped in with the low-passed pitch
            pd[2] += self._scan_dz + descent_height(tilt[0], self._descent_dz, self._descent_from, tmax)
            self.p_des[2] = pd[2]
            so3.rot_z(yd, out=self.rot_des)
            self.rot_des[:] = self.rot_des @ _rot_y(tilt[0]) @ _rot_x(tilt[1])

        # wrench (+ adaptive term) and stance forces; 3-vectors handed over as Python floats (same values)
        wr = self.wrench
        wr.update_errors(pos, vel, rot, obs.imu_gyro.tolist(), pd, v_des, self.rot_des, self.w_des.tolist())
        self._adapt()
        w = wr.compute_wrench(rot)
        np.subtract(kin.foot_pos, kin.com, out=self.r)
        if smap is not None:
            self._stance_normals(smap, contact, fp)
        fa = self.qp.solve(self.r, w, gait.load_list)
        self._applied(fa, w)
        f = fa.tolist()
        self.signals["qp_ok"] = 1.0 if self.qp.last_ok else 0.0

        # per-foot Cartesian force on the foot: -f for stance, swing PD otherwise
        sw = self.swing
        fv = None
        t_st = gait.stance_duration_s
        t_sw = gait.swing_duration_s
        u = self._u_list
        prev = self._prev_contact
        nom = self._nominal_xy
        for i in range(self.n_feet):
            j = 3 * i
            if contact[i]:
                u[j] = -f[j]; u[j + 1] = -f[j + 1]; u[j + 2] = -f[j + 2]
            else:
                if fv is None:
                    fv = kin.foot_vel.tolist()
                if prev[i]:
                    sw.start_swing(i, fp[i])
                    if smap is not None:
                        smap.forget(i)
                        self._normal_set[i] = False
                nx, ny = nom[i]
                ox, oy = cyaw * nx - syaw * ny, syaw * nx + cyaw * ny
                fh_i = sw.plan_foothold(i, pos[0] + ox, pos[1] + oy, ox, oy, vel[0], vel[1], vx, vy, c[2],
                                        gait.time_to_touchdown_s(i), t_st, 0.0)
                fh_i[2] = ground.height_at(fh_i[0], fh_i[1], pos[0], pos[1]) + fh
                if smap is not None:
                    self._scan_foothold(smap, i, fh_i, fh)
                u[j], u[j + 1], u[j + 2] = sw.track(i, gait.swing_phase_list[i], t_sw, fp[i], fv[i])
            prev[i] = contact[i]
        self.u[:] = u

        tau = kin.torques(self.u, self.tau)
        # the legs' own gravity/Coriolis torques (nominal model): with them the
        # stance forces act on the whole robot as the SRB model assumes
        if self._bias_ff:
            tau += kin.bias
        np.minimum(tau, self.torque_limits, out=tau)
        np.maximum(tau, self._neg_limits, out=tau)
        self.ticks += 1
        self.step_time_s += time.perf_counter() - t0
        return tau

    # ------------------------------------------------------------ height scan
    def _scan_update(self, scan, x: float, y: float, yaw: float):
        if self.scan_map is None:
            sensing = getattr(self.robot, "sensing", None)
            xy = getattr(sensing, "height_scan_xy", None)
            if xy is None:
                raise ValueError("the observation carries a height scan but robot.sensing.height_scan_xy "
                                 "(its point offsets) is missing")
            from bench.controllers.foothold import HeightScanMap

            p = self.params
            self.scan_map = HeightScanMap(xy, edge_margin_m=p["scan_edge_margin_m"],
                                          max_roughness_m=p["scan_max_roughness_m"],
                                          max_shift_m=p["scan_max_shift_m"])
            self.swing.hold = float(p["scan_swing_hold"])
            if p["scan_kp_rot"] is not None or p["scan_kd_rot"] is not None:
                self._set_rot_gains(p["kp_rot"] if p["scan_kp_rot"] is None else p["scan_kp_rot"],
                                    p["kd_rot"] if p["scan_kd_rot"] is None else p["scan_kd_rot"])
            self._max_tilt = math.radians(p["scan_max_tilt_deg"])
            self._tilt_alpha = 1.0 - math.exp(-self.dt / max(p["scan_tilt_tau_s"], 1e-6))
            self._tilt = [0.0, 0.0]   # desired pitch, roll (rad)
            self._slope_k = float(p["scan_slope_factor"])
            self._scan_x = np.asarray(xy, dtype=float)[..., 0].ravel()   # heading offsets of the scan points
            self._scan_w = scan_slope_weights(self._scan_x)
            self._scan_dz = float(p["scan_height_offset_m"])
            self._descent_dz = float(p["scan_descent_height_m"])
            self._descent_from = math.radians(p["scan_descent_tilt_deg"])
            self._align_alpha = 1.0 - math.exp(-self.dt / max(p["scan_align_tau_s"], 1e-6))
            self._scan_off = None          # estimate frame minus world, m (None: not yet seen a stance foot)
            self._scan_buf = np.empty(np.shape(scan))
        smap = self.scan_map
        smap.update(scan, x, y, yaw)
        if self._scan_off:
            np.add(smap.heights, self._scan_off, out=self._scan_buf)
            smap.heights = self._scan_buf
        return smap

    def _scan_align(self, smap, contact, fc, fp, fh: float) -> None:
        """Update the offset between the trunk-state frame and the scan's world heights from the stance feet."""
        acc, n = 0.0, 0
        for i in range(self.n_feet):
            if contact[i] and fc[i]:
                x, y, z = fp[i]
                if smap.is_safe(x, y):
                    h = smap.height_at(x, y)
                    if h == h:
                        acc += (z - fh) - h
                        n += 1
        if n:
            r = acc / n
            if self._scan_off is None:
                self._scan_off = r        # first reading: take it whole (the estimate starts anywhere)
            else:
                self._scan_off += self._align_alpha * r

    def _scan_foothold(self, smap, i: int, fh_i: list, fh: float) -> None:
        """Move the planned foothold ``fh_i`` of swing foot ``i`` onto the scan; set its apex."""
        sw = self.swing
        cx = self.cmd[0]
        # direction of travel for the backward-shift weighting: the shaped forward command, with a
        # dead band so that standing and turning on the spot favour neither way
        x, y, _ = smap.adjust(i, fh_i[0], fh_i[1], 1 if cx > 0.05 else (-1 if cx < -0.05 else 0))
        z = smap.height_at(x, y)
        fh_i[0], fh_i[1] = x, y
        if z == z:                     # not NaN: land at the scanned height
            fh_i[2] = z + fh
        lo = sw.liftoff[i]
        top = smap.max_height_along(lo[0], lo[1], x, y)
        apex = max(lo[2], fh_i[2])
        if top == top:
            apex = max(apex, top + fh)
        sw.apex_z[i] = apex + self.params["scan_clearance_m"]

    def _stance_normals(self, smap, contact, fp) -> None:
        """Ground normal under each stance foot, read from the scan once per stance."""
        changed = False
        for i in range(self.n_feet):
            if contact[i] and not self._normal_set[i]:
                n = smap.normal_at(fp[i][0], fp[i][1])
                self._normals[i] = n if n is not None else (0.0, 0.0, 1.0)
                self._normal_set[i] = True
                changed = True
        if changed:
            self.qp.set_normals(self._normals)

    def _trunk_state(self, obs):
        """Trunk position and velocity (world) this tick: the estimate, or the truth when privileged."""
        if self.est is None:
            priv = obs.privileged
            if priv is None:
                raise RuntimeError(f"{self.name} was made with privileged=True but this run gives no privileged "
                                   f"state (obs.privileged is None); use the default privileged=False, which "
                                   f"estimates the trunk state")
            return priv.base_pos, priv.base_linvel
        # the feet the stack itself treats as stance (last tick's schedule) and the sensor says are down
        c = self._est_contact
        fc = obs.foot_contact
        if fc.any():
            np.logical_and(self.gait.contact_list, fc, out=c)
        else:
            # no contact sensing reported (or airborne): fully loaded stance feet, as the ground estimate does
            c[:] = [ld >= 1.0 for ld in self.gait.load_list]
        # the schedule's load ramps (touchdown, lift-off) weigh a foot's measurements: where the
        # stack itself does not lean on a foot, the estimator does not either
        self._est_trust[:] = self.gait.load_list
        s = self.est.update(obs, contact=c, trust=self._est_trust)
        return s.base_pos, s.base_linvel

    def _start(self, pos) -> None:
        kin = self.kin
        self._p_des[:] = pos
        self.yaw_des = so3.yaw_of_mat(kin.rot)
        self.ground.reset(kin.foot_pos.tolist(), kin.foot_height_nominal)
        self._started = True

    def _adapt(self) -> None:
        """Hook: the adaptive stack writes ``self.wrench.a_ff`` here."""

    def _applied(self, f: np.ndarray, w: np.ndarray) -> None:
        """Hook: the stance forces ``f`` (3F,) the QP gave for the desired wrench ``w`` (6,)."""

    def stats(self) -> dict[str, float]:
        return {
            "qp_fallbacks": float(self.qp.fallbacks) if self.robot else 0.0,
            "qp_ms_mean": self.qp.mean_solve_ms if self.robot else 0.0,
            "ctrl_ms_mean": 1e3 * self.step_time_s / self.ticks if self.robot and self.ticks else 0.0,
        }


class ForceQPL1Controller(ForceQPController):
    """force-qp plus an L1 adaptive augmentation of the trunk dynamics (compensates unknown model error).

    The reference model is the trunk PD closed loop per channel,
    ``e_ddot = -Kp e - Kd e_dot (+ u + sigma)``, state
    ``[e_pos(3), e_rot(3), e_vel(3), e_angvel(3)]`` (``actual - desired``; x y z
    world, roll pitch yaw body). The adaptive acceleration ``u`` of the chosen
    channels enters the desired wrench's feed-forward slot, so it is scaled by
    the nominal mass / inertia like the PD terms.

    Extra parameters
    ----------------
    l1_channels: which of ``x y z roll pitch yaw`` get an adaptive input (all six).
    l1_bandwidth: C(s) cut-off per channel, rad/s (a scalar, six values x .. yaw,
        or one per chosen channel). Low on x/y (5 rad/s: the horizontal error
        mostly reflects stepping, which the filter should not chase), high on
        z/roll/pitch (40 rad/s) where the payload acts.
    l1_predictor_pole: ``a`` in ``As = -a I`` (1/s); ``a Ts`` small keeps the
        one-sample estimate's bias ``exp(-a Ts)`` near 1.
    l1_u_max: clip on each adaptive acceleration (m/s^2 or rad/s^2), same forms;
        z 12 m/s^2 covers a load up to about 1.2x the body mass.
    scan_l1_applied_input: with a height scan, advance the predictor with the input the stance
        forces actually give (the desired wrench's shortfall added to ``u``; see ``_applied``).
    """

    name = "force-qp-l1"

    def __init__(
        self,
        l1_channels=CHANNELS,
        l1_bandwidth=(5.0, 5.0, 40.0, 40.0, 40.0, 30.0),
        l1_predictor_pole: float = 5.0,
        l1_u_max=(5.0, 5.0, 12.0, 120.0, 120.0, 40.0),
        scan_l1_applied_input: bool = True,
        **kwargs,
    ) -> None:
        super().__init__(**kwargs)
        self.params.update(l1_channels=tuple(l1_channels), l1_bandwidth=l1_bandwidth,
                           l1_predictor_pole=l1_predictor_pole, l1_u_max=l1_u_max,
                           scan_l1_applied_input=bool(scan_l1_applied_input))

    def _reference_model(self) -> np.ndarray:
        """The trunk PD closed loop as the 12 x 12 ``Am`` (see the class docstring)."""
        kp, kd = self.wrench.kp, self.wrench.kd
        am = np.zeros((12, 12))
        am[0:6, 6:12] = np.eye(6)
        am[6:12, 0:6] = -np.diag(kp)
        am[6:12, 6:12] = -np.diag(kd)
        return am

    def _gains_changed(self) -> None:
        self.l1.set_am(self._reference_model())

    def _reset_extra(self) -> None:
        p = self.params
        am = self._reference_model()
        chans = [CHANNELS.index(ch) for ch in p["l1_channels"]]
        bm = np.zeros((12, len(chans)))
        for j, ch in enumerate(chans):
            bm[6 + ch, j] = 1.0
        bw = self._per_channel(p["l1_bandwidth"], chans)
        umax = None if p["l1_u_max"] is None else self._per_channel(p["l1_u_max"], chans)
        self.l1 = L1Adaptive(am, bm, self.dt, bandwidth=bw, predictor_pole=p["l1_predictor_pole"],
                             u_max=umax)
        self._l1_chans = np.asarray(chans, dtype=np.int64)
        self._l1_applied = bool(p["scan_l1_applied_input"])
        self._a_short = np.zeros(len(chans))
        self._l1_all = chans == list(range(len(CHANNELS)))
        # Signals: the adaptive accelerations of the chosen channels (m/s^2 or rad/s^2, the L1 input u),
        # and, when z is adapted, the load it stands for: m * u_z / g, the extra mass whose weight the
        # vertical adaptive force carries (an estimate: it also absorbs any other vertical model error).
        self.signals["l1_u"] = self.l1.u
        self._mass_kg_per_g = float(self.robot.mass_kg) / GRAVITY_M_S2
        self._l1_z = chans.index(CHANNELS.index("z")) if CHANNELS.index("z") in chans else None
        if self._l1_z is not None:
            self.signals["l1_load_kg"] = 0.0

    @staticmethod
    def _per_channel(value, chans) -> np.ndarray:
        """A scalar, six values (x .. yaw) or one value per chosen channel -> per chosen channel."""
        v = np.asarray(value, dtype=float)
        if v.ndim == 0:
            return np.full(len(chans), float(v))
        if v.shape == (len(CHANNELS),):
            return v[chans]
        if v.shape == (len(chans),):
            return v
        raise ValueError(f"expected a scalar, 6 values or {len(chans)} values, got shape {v.shape}")

    def _applied(self, f: np.ndarray, w: np.ndarray) -> None:
        """Tell the L1 predictor the acceleration the stance forces actually give (anti-windup).

        The desired wrench (PD + adaptive term) is not always reachable: with two feet down no
        force makes a torque about the line through them, and the friction pyramids and normal-force
        bounds clip the rest. The predictor is advanced with the input actually applied, ``u`` plus
        the shortfall of the QP's wrench against the desired one in acceleration units, so that the
        law does not read an unreachable wrench as model error and wind up against it.

        Only while a height scan is present (``scan_l1_applied_input``): on blind ground the wound-up
        roll and pitch terms are what carries a sloshing payload through the trot's two-foot phases
        (applied blind, this change lost five roll verdicts of the bundled suite: the sloshing tank's four
        and ``noisy-sensors``; it gained ``rough-5cm``), while on stairs and stepping stones they drove
        the falls (``stair_margin.py --all`` with the mean-slope bound: 10 falls in 60 variants with them,
        none without)."""
        if not self._l1_applied or self.scan_map is None:
            return
        fl = f.tolist()
        fx = fy = fz = tx = ty = tz = 0.0
        for i, (rx, ry, rz) in enumerate(self.r.tolist()):       # net force, and moment about the COM
            ax, ay, az = fl[3 * i], fl[3 * i + 1], fl[3 * i + 2]
            fx += ax; fy += ay; fz += az
            tx += ry * az - rz * ay; ty += rz * ax - rx * az; tz += rx * ay - ry * ax
        wl = w.tolist()
        a = self.wrench.accel_of((fx - wl[0], fy - wl[1], fz - wl[2], tx - wl[3], ty - wl[4], tz - wl[5]))
        du = self._a_short
        if self._l1_all:
            du[:] = a
        else:
            du[:] = [a[c] for c in self._l1_chans.tolist()]
        self.l1.add_applied(du)

    def _adapt(self) -> None:
        u = self.l1.update(self.wrench.error_state)
        if self._l1_z is not None:
            self.signals["l1_load_kg"] = self._mass_kg_per_g * float(u[self._l1_z])
        if self._l1_all:
            self.wrench.a_ff[:] = u
        else:
            self.wrench.a_ff[self._l1_chans] = u


class ForceQPPrivilegedController(ForceQPController):
    """force-qp reading the true trunk position and velocity (obs.privileged) instead of estimating them."""

    name = "force-qp-privileged"

    def __init__(self, **kwargs) -> None:
        kwargs.setdefault("privileged", True)
        super().__init__(**kwargs)


class ForceQPL1PrivilegedController(ForceQPL1Controller):
    """force-qp-l1 reading the true trunk position and velocity (obs.privileged) instead of estimating them."""

    name = "force-qp-l1-privileged"

    def __init__(self, **kwargs) -> None:
        kwargs.setdefault("privileged", True)
        super().__init__(**kwargs)
