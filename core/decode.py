"""From a solved NLP to a :class:`~kipup.core.motion.Motion`, with its constraint report."""
from __future__ import annotations

import casadi as ca
import numpy as np

from . import dynamics as dyn
from .limits import RANGE_TOL, SPEED_TOL
from .motion import Impulse, Motion, PhaseSpan, Violation
from .robot import Robot
from .solver import SolveOutcome
from .transcription import TrickProblem
from .trick import Trick

TOL = 1e-5  # constraint violation (scaled units) reported as a violation
FLIGHT_TOL = 0.02  # m: largest COM distance from the free-fall parabola in a flight phase



def decode(problem: TrickProblem, trick: Trick, x: np.ndarray, status: str = "solved",
           outcome: SolveOutcome | None = None, report: bool = True) -> Motion:
    """Motion of a (scaled) decision vector ``x`` of ``problem``."""
    r = problem.robot
    B = problem.unpack(x)
    contact_points: list[str] = []
    for ph in problem.phases:
        for c in ph.contacts:
            if c.point not in contact_points:
                contact_points.append(c.point)
    ts, qs, vs, as_, taus, fs, spans, impulses = [], [], [], [], [], [], [], []
    t0, k0 = 0.0, 0
    for ph in problem.phases:
        i = ph.index
        T = float(B[f"T{i}"].item())
        grid = t0 + np.linspace(0.0, T, ph.K)
        ts.append(grid)
        qs.append(B[f"q{i}"].T)
        vs.append(B[f"v{i}"].T)
        as_.append(B[f"a{i}"].T)
        taus.append(B[f"tau{i}"].T)
        F = np.zeros((ph.K, len(contact_points), 2))
        for c, row in enumerate(ph.contacts):
            F[:, contact_points.index(row.point), :] = B[f"lam{i}"][2 * c:2 * c + 2].T
        fs.append(F)
        spans.append(PhaseSpan(ph.name, t0, t0 + T, k0, k0 + ph.K - 1, [c.point for c in ph.contacts]))
        if ph.impact:
            imp = B[f"imp{i}"].reshape(-1)
            for c, row in enumerate(ph.contacts):
                impulses.append(Impulse(t0, ph.name, row.point, (imp[2 * c], imp[2 * c + 1])))
        t0 += T
        k0 += ph.K
    motion = Motion(
        robot_name=r.name, coord_names=list(r.coord_names), joint_names=list(r.joint_names),
        contact_points=contact_points, t=np.concatenate(ts), q=np.vstack(qs), qd=np.vstack(vs),
        qdd=np.vstack(as_), tau=np.vstack(taus), forces=np.concatenate(fs, axis=0), phases=spans,
        impulses=impulses, status=status, trick_name=trick.name,
        iterations=outcome.iterations if outcome else 0,
        solve_time=outcome.solve_time if outcome else 0.0,
        objective=outcome.objective if outcome else 0.0,
    )
    if report:
        motion.report = constraint_report(problem, trick, x, motion)
    return motion


def flight_deviation(robot: Robot, motion: Motion, phase: PhaseSpan) -> tuple[float, float]:
    """Largest distance (m) between the COM at the knots of flight ``phase`` and the free-fall
    parabola through the COM's position and velocity at the phase's first knot, and its time (s)."""
    idx = np.nonzero((motion.t >= phase.start - 1e-12) & (motion.t <= phase.end + 1e-12))[0]
    if idx.size < 2:
        return 0.0, float(phase.start)
    # the first knot of the phase (at a boundary the knot is doubled: take the later copy)
    i0 = idx[0]
    while i0 + 1 <= idx[-1] and motion.t[i0 + 1] <= motion.t[i0] + 1e-12:
        i0 += 1
    c0 = np.asarray(dyn.center_of_mass(robot, motion.q[i0])).reshape(-1)
    v0 = np.asarray(dyn.com_velocity(robot, motion.q[i0], motion.qd[i0])).reshape(-1)
    worst, t_worst = 0.0, float(motion.t[i0])
    for i in idx[idx > i0]:
        dt = float(motion.t[i] - motion.t[i0])
        c = np.asarray(dyn.center_of_mass(robot, motion.q[i])).reshape(-1)
        free = c0 + v0 * dt + np.array([0.0, -0.5 * robot.gravity * dt * dt])
        d = float(np.hypot(*(c - free)))
        if d > worst:
            worst, t_worst = d, float(motion.t[i])
    return worst, t_worst


def constraint_report(problem: TrickProblem, trick: Trick, x: np.ndarray, motion: Motion,
                      tol: float = TOL) -> list[Violation]:
    """Every violated constraint, worst first within each kind, one entry per (kind, name)."""
    r: Robot = problem.robot
    out: dict[tuple[str, str], Violation] = {}

    def note(kind: str, name: str, time: float, amount: float, limit: float, excess: float,
             message: str = "") -> None:
        key = (kind, name)
        if key not in out or excess > out[key].__dict__.get("_excess", 0.0):
            v = Violation(kind, name, float(time), float(amount), float(limit), message)
            v.__dict__["_excess"] = excess
            out[key] = v

    # bounds: joint angles, speeds, torques
    lo, hi = np.asarray(r.joint_lower), np.asarray(r.joint_upper)
    peak = np.asarray(r.peak_torque)
    qj = motion.q[:, 3:]
    for j, name in enumerate(r.joint_names):
        for arr, kind, lim_lo, lim_hi in ((qj[:, j], "joint_limit", lo[j], hi[j]),
                                          (np.abs(motion.tau[:, j]), "torque", -np.inf, peak[j])):
            exc = np.maximum(arr - lim_hi, lim_lo - arr)
            k = int(np.argmax(exc))
            if exc[k] > tol * max(1.0, abs(lim_hi) if np.isfinite(lim_hi) else 1.0):
                limit = lim_hi if arr[k] > lim_hi else lim_lo
                note(kind, name, motion.t[k], arr[k], limit, exc[k])
    # joint ranges between knots (the NLP bounds knots and interval midpoints)
    dense_t = np.linspace(motion.t[0], motion.t[-1], max(2, int((motion.t[-1] - motion.t[0]) * 1000) + 1))
    dense_q = motion.sample(dense_t)["q"][:, 3:]
    for j, name in enumerate(r.joint_names):
        over = np.maximum(dense_q[:, j] - hi[j], lo[j] - dense_q[:, j])
        k = int(np.argmax(over))
        if over[k] > RANGE_TOL:
            limit = hi[j] if dense_q[k, j] > hi[j] else lo[j]
            note("joint_limit", name, dense_t[k], dense_q[k, j], limit, over[k])
    # speeds: the exact peak of the quadratic qd between knots (the NLP bounds knots and midpoints)
    for jm in motion.metrics(r, allow_other_name=True).joints:
        if jm.peak_speed > jm.speed_limit * (1 + SPEED_TOL):
            note("speed", jm.name, jm.peak_speed_time, jm.peak_speed, jm.speed_limit,
                 jm.peak_speed - jm.speed_limit)
    # general constraints, located by their labels
    g = np.asarray(ca.Function("g", [problem.nlp["x"], problem.nlp["p"]], [problem.nlp["g"]])(
        x, problem.parameters(trick))).ravel()
    lbg, ubg = problem.bounds(trick)[2:]
    viol = np.maximum(lbg - g, 0.0) + np.maximum(g - ubg, 0.0)
    offset = 0
    knot_phase = {f"knots{ph.index}": ph for ph in problem.phases}
    for label, n in problem.g_names:
        seg = viol[offset:offset + n]
        if seg.size and seg.max() > tol:
            if label in knot_phase:
                ph = knot_phase[label]
                labels = problem.knot_labels[ph.index]
                per = len(labels)
                span = motion.phases[ph.index]
                for row in np.nonzero(seg > tol)[0]:
                    k, j = divmod(int(row), per)
                    kind, name = labels[j]
                    t = span.start + (span.end - span.start) * k / ph.N
                    note(kind, name, t, g[offset + row], lbg[offset + row] if g[offset + row] < lbg[offset + row]
                         else ubg[offset + row], seg[row],
                         f"{kind} constraint of {name} violated by {seg[row]:.3g} (scaled) at t = {t:.3f} s "
                         f"in phase {ph.name}")
            else:
                row = int(np.argmax(seg))
                digits = label.rstrip("0123456789")
                idx = label[len(digits):]
                at = motion.phases[int(idx)].start if idx and digits not in ("keyframe", "reach") \
                    else motion.t[-1]
                note(label, label, at, g[offset + row], 0.0, seg[row],
                     f"{label} constraint violated by {seg[row]:.3g} (scaled)")
        offset += n
    # physics between the knots: in a flight phase the COM must fall freely (a parabola with the
    # robot's gravity from its position and velocity at takeoff). The knot equations hold, but too
    # coarse a grid for a fast tuck lets the integrated motion leave that parabola; a controller
    # executing the plan would then miss its landing by that much.
    for ph in motion.phases:
        if ph.contacts:
            continue
        dev, t_dev = flight_deviation(r, motion, ph)
        if dev > FLIGHT_TOL:
            n = int(np.sum((motion.t > ph.start + 1e-9) & (motion.t <= ph.end + 1e-9)))
            h = (ph.end - ph.start) / max(n, 1)
            note("free_fall", ph.name, t_dev, dev, FLIGHT_TOL, dev / FLIGHT_TOL * 1e3,
                 f"in flight phase {ph.name!r} the COM leaves the free-fall parabola by {dev:.3f} m "
                 f"(at t = {t_dev:.3f} s; allowed {FLIGHT_TOL:.3f} m): {n} intervals of {h * 1e3:.1f} ms "
                 f"are too coarse for this motion; give the phase more knots (about one per 10 ms)")
    items = sorted(out.values(), key=lambda v: -v.__dict__.get("_excess", 0.0))
    for v in items:
        v.__dict__.pop("_excess", None)
    return items
