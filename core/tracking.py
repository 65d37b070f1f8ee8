"""Closed-loop simulation of a planned motion: feedforward + joint PD (or TV-LQR in flight), then balance.

The controller, run at ``control_rate_hz`` from the simulated state (no sensor noise):

* **Tracking** (while the planned motion lasts): ``tau = tau_ff(t) + Kp (q_ref - q) + Kd (qd_ref - qd)``
  on the joints, with ``tau_ff`` = :meth:`Motion.sample_torques` and ``q_ref, qd_ref`` =
  :meth:`Motion.sample` at the reference time. With ``lqr`` given, while the robot is airborne
  inside the LQR's flight phase: ``tau = tau_ff - K_k (x - x_ref)`` with ``x = (q, qd)``
  (see :mod:`kipup.core.lqr`).
* **Landing and balance** (with ``balance=True``, from the first touchdown of a landing point after
  the robot was airborne for 20 ms): the stance QP of :mod:`kipup.core.balance` replays the planned
  landing phase from the *actual* touchdown time, over the *actual* feet, then holds the final
  planned pose for ``duration_after`` s. With ``balance=False`` the planned clock runs on and a joint
  PD holds the final pose after the motion.

Each command is held (zero-order hold) for one control period and reaches the motors
``delay_s`` after the state it was computed from. At every simulation step the motors limit it
to their torque-speed envelope, ``|tau| <= min(peak, stall (1 - |qd| / no_load))`` when tau and
qd share a sign and ``|tau| <= peak`` otherwise, and the joints lose ``b qd`` to viscous friction
(the plant's actuators: ``sim_robot`` if given). The plant is :class:`kipup.core.contact_sim.ContactSim`
at ``rate_hz``.

Perturbations: ``sim_robot`` (a robot of the same structure with other masses, inertias, COMs,
actuators), :class:`Push` forces, ``timing_offset_s`` (the push phase is played stretched so the
reference reaches takeoff that much later, < 0: earlier), ``contact`` (e.g. another friction).

The loop runs at most ``ceil(T / dt)`` steps and stops early when the state is non-finite or
huge (|q| > 1e4, |qd| > 1e3) or the robot falls (base pitch more than 1.2 rad off its reference,
or the base lower than 40 % of its planned height above the terrain): the verdict then says
``diverged`` and when.
"""
from __future__ import annotations

import math
from collections import deque
from dataclasses import asdict, dataclass
from typing import Any, Sequence

import numpy as np

from . import dynamics as dyn
from .balance import QPFailed, StanceQP, feet_offset
from .contact_sim import ContactModel, ContactSim, _structure_key, inertial_params, terrain_faces
from .lqr import FlightLQR, flight_lqr
from .motion import Motion
from .robot import Robot
from .sim_result import LandingVerdict, SimResult, TrackingError
from .terrain import exact_height
from .trick import Terrain

__all__ = ["Gains", "Push", "default_gains", "simulate", "envelope_limits"]

MAX_DURATION_AFTER = 30.0  # s
FALL_PITCH = 1.2           # rad off the reference
FALL_HEIGHT = 0.4          # fraction of the planned base height above terrain
HUGE_Q, HUGE_QD = 1e4, 1e3
STILL_COM_SPEED = 0.05     # m/s
STILL_PITCH_RATE = 0.1     # rad/s
TOUCH_GAP = 0.003          # m
NEAR_GROUND = 0.01         # m: a landing point this close joins the stance QP
AIRBORNE = 0.02           # s without any contact: airborne
LATE_LANDING = 1.0         # s: the most a late touchdown may extend the simulation


@dataclass
class Gains:
    """Per-joint PD gains: kp (N m/rad), kd (N m s/rad), in the order of ``Robot.joints``."""

    kp: tuple[float, ...]
    kd: tuple[float, ...]

    def __post_init__(self) -> None:
        self.kp = tuple(float(v) for v in np.atleast_1d(np.asarray(self.kp, dtype=float)))
        self.kd = tuple(float(v) for v in np.atleast_1d(np.asarray(self.kd, dtype=float)))

    def arrays(self, robot: Robot) -> tuple[np.ndarray, np.ndarray]:
        """(kp, kd) as arrays of length nj, checked: ValueError naming the field and joint."""
        out = []
        for name in ("kp", "kd"):
            a = np.asarray(getattr(self, name), dtype=float)
            if a.size == 1 and robot.nj != 1:
                a = np.full(robot.nj, float(a[0]))
            if a.size != robot.nj:
                raise ValueError(f"gains.{name} must have one value per joint ({robot.nj}: "
                                 f"{', '.join(robot.joint_names)}); got {a.size}")
            for j, v in enumerate(a):
                if not math.isfinite(v) or v < 0:
                    raise ValueError(f"gains.{name}[{j}] ({robot.joint_names[j]}) must be a finite number >= 0; "
                                     f"got {v!r}")
            out.append(a)
        return out[0], out[1]


@dataclass
class Push:
    """An external force (N, world frame) and moment (N m, about +y) from ``time`` (s) for ``duration`` (s).

    ``point``: a named point of the robot where the force acts; None for the base frame origin.
    The moment acts on the base.
    """

    time: float
    duration: float
    force: tuple[float, float] = (0.0, 0.0)
    moment: float = 0.0
    point: str | None = None

    def check(self, robot: Robot) -> None:
        for name in ("time", "duration", "moment"):
            v = getattr(self, name)
            if not (isinstance(v, (int, float)) and math.isfinite(v)):
                raise ValueError(f"push.{name} must be a finite number; got {v!r}")
        if self.duration < 0:
            raise ValueError(f"push.duration must be >= 0 s; got {self.duration!r}")
        if len(self.force) != 2 or not all(math.isfinite(float(f)) for f in self.force):
            raise ValueError(f"push.force must be two finite numbers (fx, fz) in N; got {self.force!r}")
        if self.point is not None and self.point not in robot.point_names:
            raise ValueError(f"push.point: robot {robot.name!r} has no point {self.point!r}; "
                             f"points: {', '.join(robot.point_names)}")

    def active(self, t: float) -> bool:
        return self.time <= t < self.time + self.duration


def default_gains(robot: Robot, poses: Any = None, control_rate_hz: float = 500.0,
                  stiffness_angle: float = 0.15, damping_bound: float = 0.8, stiffness_bound: float = 0.25) -> Gains:
    """Per-joint PD gains that a sampled loop at ``control_rate_hz`` keeps stable.

    Start from kp = peak torque / ``stiffness_angle`` (full torque at that error, rad) and
    critical damping kd = 2 sqrt(kp M_jj) (M_jj: the joint's diagonal of the mass matrix). Then,
    at each pose of ``poses`` (an (k, nq) array or one q; default all zero angles), with
    ``L = [M^-1]_joints`` the free-floating joint mobility (the lightest the joints can look,
    in flight), shrink single gains until the spectral radius of ``Tc L Kd`` is at most
    ``damping_bound`` and that of ``Tc^2 L Kp`` at most ``stiffness_bound`` (Tc the control period):
    a PD on a double integrator sampled with a zero-order hold goes unstable near 2 and 4.
    """
    Tc = 1.0 / control_rate_hz
    qs = np.zeros((1, robot.nq)) if poses is None else np.atleast_2d(np.asarray(poses, dtype=float))
    mobilities = []
    for q in qs:
        M = np.asarray(dyn.crba(robot, q))
        mobilities.append(np.linalg.inv(M)[3:, 3:])
    Mjj = np.diag(np.asarray(dyn.crba(robot, qs[0])))[3:]
    kp = np.array(robot.peak_torque, dtype=float) / stiffness_angle
    kd = 2.0 * np.sqrt(kp * Mjj)
    for gain, bound, scale in ((kd, damping_bound, Tc), (kp, stiffness_bound, Tc * Tc)):
        for _ in range(200):
            worst, vec = 0.0, None
            for L in mobilities:
                root = np.sqrt(gain)
                w, v = np.linalg.eigh(scale * root[:, None] * L * root[None, :])
                if w[-1] > worst:
                    worst, vec = w[-1], v[:, -1]
            if worst <= bound:
                break
            gain *= 1.0 - 0.5 * vec ** 2  # shrink the joints that make the worst mode
    return Gains(tuple(kp), tuple(kd))


def envelope_limits(robot: Robot, qd_joints: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(lower, upper) torque bounds (N m) of every joint at joint speeds qd (rad/s), see the module docstring."""
    peak = np.array([j.actuator.peak_torque for j in robot.joints])
    stall = np.array([j.actuator.stall_torque for j in robot.joints])
    no_load = np.array([j.actuator.no_load_speed for j in robot.joints])
    room = np.clip(stall * (1.0 - np.abs(qd_joints) / no_load), 0.0, None)
    same = np.minimum(peak, room)
    upper = np.where(qd_joints > 0, same, peak)
    lower = np.where(qd_joints < 0, -same, -peak)
    return lower, upper


def _gap(terrain: Terrain, sim: ContactSim, point: str) -> float:
    """Distance (m) of a named point to the nearest terrain face, from the last simulated step."""
    P = sim.last_points
    if P is None:
        return math.inf
    i = sim.names.index(point)
    faces = terrain_faces(terrain, float(P[0, i]), float(P[1, i]), 0.05)
    return min((f[3] for f in faces), default=math.inf)


def _check_rate(name: str, v: Any, lo: float, hi: float) -> float:
    if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v) or not lo <= v <= hi:
        raise ValueError(f"{name} must be a number in [{lo}, {hi}]; got {v!r}")
    return float(v)


class _Clock:
    """Reference time of the controller at simulation time t (both s): the first phase stretched by ``offset``."""

    def __init__(self, motion: Motion, offset: float) -> None:
        self.t0, self.tend = motion.t0, motion.tend
        self.t1 = motion.phases[0].end if len(motion.phases) > 1 else motion.tend
        self.offset = offset
        d1 = self.t1 - self.t0
        if d1 + offset <= 0.5 * d1:
            raise ValueError(f"timing_offset_s = {offset!r} s would shrink the first phase ({d1:.3f} s) by half "
                             "or more")
        self.scale = d1 / (d1 + offset)

    def ref(self, t: np.ndarray) -> np.ndarray:
        t = np.asarray(t, dtype=float)
        rel = t - self.t0
        first = self.t0 + rel * self.scale
        later = t - self.offset
        return np.clip(np.where(t < self.t1 + self.offset, first, later), self.t0, self.tend)

    @property
    def end(self) -> float:
        """Simulation time at which the reference reaches the end of the motion (s)."""
        return self.tend + self.offset


def _as_pushes(push: Any, robot: Robot) -> list[Push]:
    if push is None:
        return []
    pushes = [push] if isinstance(push, Push) else list(push)
    for p in pushes:
        if not isinstance(p, Push):
            raise ValueError(f"push must be a Push or a list of Push; got {type(p).__name__}")
        p.check(robot)
    return pushes


def simulate(motion: Motion, robot: Robot, terrain: Terrain, *, gains: Gains | dict | None = None,
             rate_hz: float = 1000.0, control_rate_hz: float = 500.0, delay_s: float = 0.0,
             sim_robot: Robot | None = None, push: Push | Sequence[Push] | None = None,
             duration_after: float = 1.0, lqr: FlightLQR | bool | None = None, balance: bool = True,
             contact: ContactModel | None = None, timing_offset_s: float = 0.0,
             trick_name: str | None = None, start_time: float | None = None,
             start_qd_offset: Sequence[float] | None = None) -> SimResult:
    """Simulate ``motion`` in closed loop on ``terrain`` (see the module docstring); returns a :class:`SimResult`.

    ``robot`` is the controller's model (the one the motion was made for); ``sim_robot`` the plant
    (default: the same). ``gains``: :class:`Gains` or ``{"kp": [...], "kd": [...]}`` (default
    :func:`default_gains`). ``lqr``: a :class:`~kipup.core.lqr.FlightLQR`, or True to build one
    for the first flight phase at the control rate. ``start_time`` (s): start from the planned state
    at that time instead of the motion's start (e.g. the planned takeoff), with ``start_qd_offset``
    (nq) added to the planned velocities (a takeoff velocity error). Bad input raises
    ``ValueError`` naming the field.
    """
    motion.check_robot(robot)
    motion.check_finite()
    plant_robot = robot if sim_robot is None else sim_robot
    if sim_robot is not None:
        if _structure_key(sim_robot) != _structure_key(robot):
            raise ValueError("sim_robot must have the same links, joints and points as robot "
                             "(only masses, inertias, COMs and actuators may differ)")
    if not isinstance(terrain, Terrain):
        raise ValueError(f"terrain must be a Terrain; got {type(terrain).__name__}")
    rate_hz = _check_rate("rate_hz", rate_hz, 50.0, 1e5)
    control_rate_hz = _check_rate("control_rate_hz", control_rate_hz, 1.0, rate_hz)
    n_sub = int(round(rate_hz / control_rate_hz))
    if abs(n_sub * control_rate_hz - rate_hz) > 1e-6 * rate_hz:
        raise ValueError(f"rate_hz ({rate_hz}) must be a whole multiple of control_rate_hz ({control_rate_hz})")
    delay_s = _check_rate("delay_s", delay_s, 0.0, 1.0)
    duration_after = _check_rate("duration_after", duration_after, 0.0, MAX_DURATION_AFTER)
    timing_offset_s = _check_rate("timing_offset_s", timing_offset_s, -1.0, 1.0)
    if gains is None:
        gains = default_gains(robot, motion.q[::4], control_rate_hz)
    elif isinstance(gains, dict):
        unknown = set(gains) - {"kp", "kd"}
        if unknown or not {"kp", "kd"} <= set(gains):
            raise ValueError(f"gains must have exactly the keys 'kp' and 'kd'; got {sorted(gains)}")
        gains = Gains(gains["kp"], gains["kd"])
    elif not isinstance(gains, Gains):
        raise ValueError(f"gains must be a Gains, a dict with kp and kd, or None; got {type(gains).__name__}")
    try:
        kp, kd = gains.arrays(robot)
    except (TypeError, ValueError) as exc:
        raise ValueError(str(exc)) from None
    if lqr is True:
        lqr = flight_lqr(motion, robot, control_rate_hz=control_rate_hz)
    elif lqr is False:
        lqr = None
    if lqr is not None:
        if not isinstance(lqr, FlightLQR):
            raise ValueError(f"lqr must be a FlightLQR, True or None; got {type(lqr).__name__}")
        if abs(lqr.dt * control_rate_hz - 1.0) > 1e-9:
            raise ValueError(f"lqr was built for a control period of {lqr.dt} s but control_rate_hz is "
                             f"{control_rate_hz}")
        if lqr.K.shape[1:] != (robot.nj, 2 * robot.nq):
            raise ValueError(f"lqr gains have shape {lqr.K.shape[1:]}, expected {(robot.nj, 2 * robot.nq)}")
    pushes = _as_pushes(push, plant_robot)

    clock = _Clock(motion, timing_offset_s)
    dt = 1.0 / rate_hz
    t_motion_end = clock.end
    nq, nj = robot.nq, robot.nj
    names = list(robot.point_names)
    first_contacts = set(motion.phases[0].contacts)
    landing = list(motion.phases[-1].contacts)
    flights = [p for p in motion.phases if not p.contacts]
    takeoff_plan = flights[0].start if flights else math.inf
    touchdown_plan = flights[-1].end if flights else math.nan
    pitch_plan_td = float(motion.sample(touchdown_plan)["q"][2]) if flights else math.nan
    q_final = motion.q[-1].copy()
    tau_final = motion.tau[-1].copy()
    stance = StanceQP(robot) if balance else None
    b_fric = np.array([j.actuator.viscous_friction for j in plant_robot.joints])
    # the loop's bound: the planned end plus the hold, plus at most LATE_LANDING for a late touchdown
    t_stop = t_motion_end + duration_after
    t_start = motion.t0 if start_time is None else _check_rate("start_time", start_time, motion.t0, motion.tend)
    if t_start >= t_motion_end:
        raise ValueError(f"start_time must be before the end of the motion ({t_motion_end:.3f} s); got {t_start!r}")
    n_max = int(math.ceil((t_stop + LATE_LANDING - t_start) / dt - 1e-9))
    n_plan = int(math.ceil((t_stop - t_start) / dt - 1e-9))
    sim = ContactSim(plant_robot, terrain, dt, contact, params=inertial_params(plant_robot))

    tr0 = float(clock.ref(t_start))
    start = motion.sample(tr0)
    q, qd = start["q"].copy(), start["qd"].copy()
    if start_qd_offset is not None:
        dqd = np.asarray(start_qd_offset, dtype=float).reshape(-1)
        if dqd.size != nq or not np.all(np.isfinite(dqd)):
            raise ValueError(f"start_qd_offset must be {nq} finite numbers (m/s, rad/s); got {start_qd_offset!r}")
        qd = qd + dqd
    rec_q, rec_qd, rec_tau, rec_f, rec_plan = [], [], [], [], []
    times = t_start + dt * np.arange(n_max)
    pending: deque = deque()
    command = motion.sample_torques(tr0).copy()
    touching: set[str] = set()
    state = "pre" if flights else "landed"
    if flights and tr0 >= touchdown_plan:
        raise ValueError(f"start_time {t_start!r} s is after the planned touchdown ({touchdown_plan:.3f} s)")
    touched: list[str] = []
    other: list[str] = []
    td_time = td_pitch = math.nan
    land_shift = 0.0            # actual - planned touchdown (s)
    offset = np.zeros(2)        # actual - planned feet position (m)
    landed_mode = state == "landed" and stance is not None
    if landed_mode:
        offset = feet_offset(robot, q, motion.q[0], landing)
    diverged, div_time, reason = False, math.nan, ""
    mode_log: list[tuple[float, str]] = []
    mode = ""
    qp_failures = 0
    air_steps = 0
    r_q = motion.q[0].copy()

    def reference(t: float) -> tuple[float, np.ndarray, np.ndarray, np.ndarray, np.ndarray, bool]:
        """(reference time, q, qd, qdd, tau_ff, motion over) of the controller at time t."""
        if landed_mode and flights:
            tr = t - land_shift
        else:
            tr = float(clock.ref(t))
        if tr >= motion.tend or (not landed_mode and t >= t_motion_end):
            return motion.tend, q_final.copy(), np.zeros(nq), np.zeros(nq), tau_final, True
        smp = motion.sample(tr)
        return tr, smp["q"].copy(), smp["qd"], smp["qdd"], motion.sample_torques(tr), False

    i = 0
    while i < n_plan and i < n_max:
        t = float(times[i])
        # ---- checks on the state -------------------------------------------------------------
        if not (np.all(np.isfinite(q)) and np.all(np.isfinite(qd))):
            diverged, div_time, reason = True, t, "non-finite state"
            break
        if np.max(np.abs(q)) > HUGE_Q or np.max(np.abs(qd)) > HUGE_QD:
            diverged, div_time, reason = True, t, "state too large (|q| > 1e4 or |qd| > 1e3)"
            break
        if i % n_sub == 0:
            tr, r_q, r_qd, r_qdd, r_ff, over = reference(t)
            if landed_mode:
                r_q[:2] += offset
            pitch_off = abs(q[2] - r_q[2])
            h_ref = r_q[1] - exact_height(terrain, r_q[0])
            h_now = q[1] - exact_height(terrain, q[0])
            if pitch_off > FALL_PITCH:
                diverged, div_time, reason = True, t, f"fell: base pitch {pitch_off:.2f} rad off its reference"
                break
            if h_now < FALL_HEIGHT * h_ref:
                diverged, div_time, reason = True, t, (f"fell: base {h_now:.2f} m above the terrain, planned "
                                                       f"{h_ref:.2f} m")
                break
            # ---- controller tick ------------------------------------------------------------
            if landed_mode:
                feet, gaps = [], []
                for p in landing:
                    g = _gap(terrain, sim, p)
                    if p in touching or g < NEAR_GROUND:
                        feet.append(p)
                        gaps.append(max(g, 0.0))
                try:
                    cmd = stance.torque(q, qd, feet, r_q, r_qd, r_qdd, envelope_limits(robot, qd[3:]), gaps)
                    new_mode = "balance" if over else "landing"
                except QPFailed:
                    qp_failures += 1
                    cmd = r_ff + kp * (r_q[3:] - q[3:]) + kd * (r_qd[3:] - qd[3:])
                    new_mode = "hold (QP failed)"
            else:
                K = lqr.gain_at(tr) if (lqr is not None and state == "air") else None
                if K is not None:
                    cmd = r_ff - K @ np.concatenate([q - r_q, qd - r_qd])
                    new_mode = "lqr"
                else:
                    cmd = r_ff + kp * (r_q[3:] - q[3:]) + kd * (r_qd[3:] - qd[3:])
                    new_mode = "hold" if over else "track"
            if new_mode != mode:
                mode_log.append((round(t, 9), new_mode))
                mode = new_mode
            pending.append((t + delay_s, cmd))
        while pending and pending[0][0] <= t + 1e-9:
            command = pending.popleft()[1]
        # ---- motors and plant --------------------------------------------------------------------
        lo, hi = envelope_limits(plant_robot, qd[3:])
        tau = np.clip(command, lo, hi)
        Q = np.zeros(nq)
        Q[3:] = tau - b_fric * qd[3:]
        point_forces: dict[str, tuple[float, float]] = {}
        for p in pushes:
            if p.active(t):
                if p.point is None:
                    Q[0] += p.force[0]
                    Q[1] += p.force[1]
                else:
                    fx, fz = point_forces.get(p.point, (0.0, 0.0))
                    point_forces[p.point] = (fx + p.force[0], fz + p.force[1])
                Q[2] += p.moment
        res = sim.step(q, qd, Q, point_forces)
        forces = np.zeros((len(names), 2))
        touching = set()
        for c in res.contacts:
            k = names.index(c.point)
            forces[k, 0] += c.impulse[0] / dt
            forces[k, 1] += c.impulse[1] / dt
            touching.add(c.point)
        rec_q.append(q)
        rec_qd.append(qd)
        rec_tau.append(tau)
        rec_f.append(forces)
        rec_plan.append(r_q)
        # ---- contact events ----------------------------------------------------------------------
        if state == "pre":
            other += [p for p in sorted(touching) if p not in first_contacts and p not in other]
            air_steps = 0 if touching else air_steps + 1
            tr_now = float(clock.ref(t))
            if air_steps * dt >= AIRBORNE and tr_now >= takeoff_plan - 0.05:
                state = "air"
        elif state == "air":
            if touching:
                state = "landed"
                td_time, td_pitch = t + dt, float(res.q[2])
                touched += sorted(touching)
                if stance is not None and any(p in landing for p in touching):
                    landed_mode = True
                    land_shift = td_time - touchdown_plan
                    offset = feet_offset(robot, res.q, motion.sample(touchdown_plan)["q"], landing)
                    end = motion.tend + land_shift + duration_after
                    n_plan = min(n_max, max(n_plan, int(math.ceil((end - motion.t0) / dt - 1e-9))))
        if state == "landed":
            touched += [p for p in sorted(touching) if p not in touched]
            other += [p for p in sorted(touching) if p not in landing and p not in other]
        q, qd = res.q, res.qd
        i += 1

    n = len(rec_q)
    t_rec = times[:n]
    Q_rec = np.array(rec_q).reshape(n, nq)
    QD_rec = np.array(rec_qd).reshape(n, nq)
    plan = np.array(rec_plan).reshape(n, nq)
    during = t_rec <= t_motion_end + 1e-12
    errors = []
    for c, name in enumerate(robot.coord_names):
        e = np.abs(Q_rec[during, c] - plan[during, c]) if during.any() else np.zeros(1)
        errors.append(TrackingError(name, float(np.sqrt(np.mean(e ** 2))), float(np.max(e))))

    verdict = LandingVerdict(touched=touched, other_contacts=other, diverged=diverged, diverged_time=float(div_time),
                             reason=reason)
    if math.isfinite(td_time):
        verdict.touchdown_time = float(td_time)
        verdict.touchdown_time_error = float(td_time - (touchdown_plan + timing_offset_s))
        verdict.pitch_error_at_touchdown = float(td_pitch - pitch_plan_td)
    if not diverged and np.all(np.isfinite(q)):
        cd = np.asarray(dyn.com_velocity(plant_robot, q, qd)).reshape(-1)
        verdict.com_speed_end = float(np.hypot(cd[0], cd[1]))
        verdict.pitch_rate_end = float(abs(qd[2]))
        gaps = []
        for name in landing:
            x, z = np.asarray(dyn.point_position(plant_robot, q, name)).reshape(-1)
            faces = terrain_faces(terrain, float(x), float(z), 1.0)
            gaps.append(min((f[3] for f in faces), default=math.inf))
        feet_down = bool(landing) and all(g < TOUCH_GAP for g in gaps)
        verdict.stands_still = bool(verdict.com_speed_end < STILL_COM_SPEED
                                    and verdict.pitch_rate_end < STILL_PITCH_RATE and feet_down)
    if n:
        lower, upper = np.array(robot.joint_lower), np.array(robot.joint_upper)
        over = np.maximum(Q_rec[:, 3:] - upper, lower - Q_rec[:, 3:]).max(axis=0)
        verdict.joint_limit_excess = [robot.joint_names[j] for j in range(nj) if over[j] > 0.05]

    settings = {
        "rate_hz": rate_hz, "control_rate_hz": control_rate_hz, "delay_s": delay_s,
        "duration_after": duration_after, "timing_offset_s": timing_offset_s,
        "gains": {"kp": list(map(float, kp)), "kd": list(map(float, kd))},
        "lqr": lqr.settings() if lqr is not None else None, "balance": bool(balance),
        "contact": asdict(sim.model), "pushes": [asdict(p) for p in pushes],
        "sim_robot": None if sim_robot is None else "perturbed",
        "modes": [list(m) for m in mode_log], "motion_end": float(t_motion_end),
        "landing_shift": float(land_shift), "start_time": float(t_start),
        "start_qd_offset": None if start_qd_offset is None else [float(v) for v in start_qd_offset], "qp_failures": int(qp_failures),
    }
    return SimResult(robot_name=robot.name, trick_name=trick_name if trick_name is not None else motion.trick_name,
                     coord_names=list(robot.coord_names), joint_names=list(robot.joint_names), point_names=names,
                     t=t_rec, q=Q_rec, qd=QD_rec, q_plan=plan, tau=np.array(rec_tau).reshape(n, nj),
                     forces=np.array(rec_f).reshape(n, len(names), 2), errors=errors, verdict=verdict,
                     settings=settings)
