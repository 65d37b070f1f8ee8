"""The result of an optimization: a motion as plain data, with dense evaluation, metrics and files.

A :class:`Motion` holds the knots of the collocation scheme of :mod:`kipup.core.transcription`
for every phase, stored back to back. ``K`` is the total number of knots over all phases. A
phase boundary instant appears twice: as the last knot of one phase and as the first knot of
the next, so ``t`` is non-decreasing but not strictly increasing. At a boundary that adds
contacts the velocities jump (rigid impact): the earlier copy holds the pre-impact state, the
later copy the post-impact state.

Arrays (float64, SI units, radians; q ordered as ``Robot.coord_names``):

* ``t (K,)`` s; ``q, qd, qdd (K, nq)``; ``tau (K, nj)`` joint torques N m;
* ``forces (K, len(contact_points), 2)`` world-frame contact force ``(fx, fz)`` N per contact
  point, zero where the point is not in contact.

Between two knots of a phase, ``t_k <= t <= t_k+1`` with ``h = t_k+1 - t_k``, ``s = t - t_k``,
qdd is linear, qd quadratic and q cubic (the scheme integrates the linear qdd exactly)::

    qdd(t) = qdd_k + (qdd_k+1 - qdd_k) s / h
    qd(t)  = qd_k + qdd_k s + (qdd_k+1 - qdd_k) s^2 / (2 h)
    q(t)   = q_k + qd_k s + qdd_k s^2 / 2 + (qdd_k+1 - qdd_k) s^3 / (6 h)

Torques and contact forces are linear between the knots of a phase.

Files: :meth:`Motion.to_json` / :meth:`Motion.from_json` (format ``kipup-motion/1``) and
:meth:`Motion.to_npz` / :meth:`Motion.from_npz`. Both round trips are exact (float64 values
are written by their shortest exact repr, or natively in NPZ). Writes are atomic and refuse
NaN or infinite values, naming the field, so a written file never holds one.
"""
from __future__ import annotations

import json
import math
import os
from dataclasses import dataclass, field, fields
from typing import Any, Sequence

import numpy as np

from . import __version__ as _KIPUP_VERSION
from .atomic import atomic_write

__all__ = [
    "MOTION_FORMAT",
    "MOTION_CAUTION",
    "STATUSES",
    "PhaseSpan",
    "Impulse",
    "Violation",
    "JointMetrics",
    "MotionMetrics",
    "Motion",
    "render_report",
]

MOTION_FORMAT = "kipup-motion/1"
MOTION_CAUTION = "Simulate before running on hardware; follow your lab's safety rules and local regulations."
STATUSES = ("solved", "acceptable", "infeasible", "max_iter", "time_limit", "cancelled", "failed",
            "running")  # running: an intermediate iterate shown while a solve goes on

_ARRAYS = ("t", "q", "qd", "qdd", "tau", "forces")
_BASE_COORDS = ("base_x", "base_z", "base_pitch")
_NPZ_META = "meta"


# ----- small records ---------------------------------------------------------------------
@dataclass
class PhaseSpan:
    """One phase of a motion: ``start``/``end`` (s), knots ``first_knot .. last_knot`` (inclusive
    indices into the motion's arrays) and the points in contact during it."""

    name: str
    start: float
    end: float
    first_knot: int
    last_knot: int
    contacts: list[str] = field(default_factory=list)

    @property
    def duration(self) -> float:
        """end - start (s)."""
        return self.end - self.start

    @property
    def knots(self) -> int:
        """Number of knots of the phase (intervals + 1)."""
        return self.last_knot - self.first_knot + 1


@dataclass
class Impulse:
    """Contact impulse ``(Ix, Iz)`` (N s, world frame) on ``point`` at the impact that starts ``phase``."""

    time: float
    phase: str
    point: str
    impulse: tuple[float, float]

    def __post_init__(self) -> None:
        ix, iz = self.impulse
        self.impulse = (float(ix), float(iz))


# kind -> (what is measured, unit, word for the bound)
_KINDS: dict[str, tuple[str, str, str]] = {
    "torque": ("torque", "N m", "limit"),
    "speed": ("speed", "rad/s", "limit"),
    "envelope": ("torque-speed ratio", "", "limit"),
    "joint_limit": ("angle", "rad", "limit"),
    "friction": ("tangential force", "N", "limit"),
    "normal_force": ("normal force", "N", "minimum"),
    "clearance": ("clearance", "m", "minimum"),
    "dynamics": ("dynamics residual", "", "tolerance"),
    "contact": ("contact residual", "m", "tolerance"),
}


def _num(x: float) -> str:
    """A value for people: 3 significant digits, no exponent (132, 0.21, 1234)."""
    x = float(x)
    if not math.isfinite(x):
        return str(x)
    if abs(x) >= 1000:
        return f"{x:.0f}"
    return np.format_float_positional(x, precision=3, unique=False, fractional=False, trim="-")


def _time(x: float) -> str:
    """A time in s, to the millisecond (0.21, 1.005)."""
    x = float(x)
    if not math.isfinite(x):
        return str(x)
    return np.format_float_positional(round(x, 3), precision=3, unique=False, fractional=True, trim="-")


@dataclass
class Violation:
    """One limit the motion does not keep.

    ``kind``: "torque", "speed", "envelope", "joint_limit", "friction", "normal_force",
    "clearance", "dynamics", "contact", "free_fall" (a flight phase whose COM leaves the
    free-fall parabola between knots) or another word; ``name``: the joint, point, phase or
    constraint concerned; ``time`` (s); ``amount``: the value reached; ``limit``: the bound it
    crosses (both in the unit of the kind, e.g. N m for torque); ``message``: optional text that
    replaces the generated one.
    """

    kind: str
    name: str
    time: float
    amount: float
    limit: float
    message: str = ""

    def text(self) -> str:
        """Plain text, e.g. "knee torque 132 N m exceeds its 120 N m limit at t = 0.21 s"."""
        if self.message:
            return self.message
        what, unit, bound = _KINDS.get(self.kind, (self.kind.replace("_", " "), "", "limit"))
        u = f" {unit}" if unit else ""
        verb = "exceeds" if self.amount > self.limit else "is below"
        return (f"{self.name} {what} {_num(self.amount)}{u} {verb} its {_num(self.limit)}{u} {bound} "
                f"at t = {_time(self.time)} s")


def render_report(report: Sequence[Violation], phases: Sequence[PhaseSpan] = ()) -> str:
    """The violations as plain text, one per line, each with its phase when ``phases`` are given."""
    if not report:
        return "No limit violations."
    n = len(report)
    lines = [f"{n} limit violation{'s' if n != 1 else ''}:"]
    for v in report:
        where = ""
        if phases:
            ph = _phase_at(phases, v.time)
            if ph is not None:
                where = f" (phase {ph.name!r})"
        lines.append(f"- {v.text()}{where}")
    return "\n".join(lines)


def _phase_at(phases: Sequence[PhaseSpan], time: float) -> PhaseSpan | None:
    """The phase holding ``time``; at a boundary the later one (post-impact)."""
    found = None
    for ph in phases:
        if ph.start <= time <= ph.end:
            found = ph  # keep going: the later phase wins at a shared boundary
        elif found is not None:
            break
    return found


# ----- metrics ------------------------------------------------------------------------------
@dataclass
class JointMetrics:
    """Per-joint figures of a motion (SI units). Times (s) say where each peak happens."""

    name: str
    peak_torque: float          # max |tau| over the knots (tau is linear between knots), N m
    peak_torque_time: float
    torque_limit: float         # actuator peak torque, N m
    peak_speed: float           # max |qd| of the scheme's quadratic qd (knots and in between), rad/s
    peak_speed_time: float
    speed_limit: float          # joint velocity limit, rad/s
    peak_power: float           # max |tau qd| over the knots, W
    positive_work: float        # integral of max(tau qd, 0), trapezoid on the knots of each phase, J
    energy: float               # integral of |tau qd|, same rule, J
    envelope_ratio: float       # worst torque-speed ratio over the knots (<= 1 is within), see Motion.metrics
    envelope_time: float

    @property
    def torque_ratio(self) -> float:
        return self.peak_torque / self.torque_limit if self.torque_limit > 0 else math.inf

    @property
    def speed_ratio(self) -> float:
        return self.peak_speed / self.speed_limit if self.speed_limit > 0 else math.inf


@dataclass
class MotionMetrics:
    """Figures of a whole motion; ``None`` where there is nothing to measure (no stance knots)."""

    robot_name: str
    trick_name: str
    status: str
    duration: float                           # s
    joints: list[JointMetrics]
    friction_margin: float | None             # min over loaded stance knots of (mu fz - |fx|) / fz
    friction_margin_point: str | None
    friction_margin_time: float | None
    min_normal_force: float | None            # min fz over stance knots, N
    min_normal_force_point: str | None
    min_normal_force_time: float | None
    flight_time: float                        # total duration of phases with no contacts, s
    apex_com_height: float                    # max COM z over the knots, m
    apex_time: float
    total_rotation: float                     # q[-1, pitch] - q[0, pitch], rad (a backflip is about -2 pi)
    min_load: float = 0.0                     # N: stance knots with fz below it are unloaded (no margin ratio)
    unloaded_knots: int = 0                   # stance knots left out of the friction margin as unloaded

    @property
    def total_positive_work(self) -> float:
        return float(sum(j.positive_work for j in self.joints))

    @property
    def total_energy(self) -> float:
        return float(sum(j.energy for j in self.joints))

    def joint(self, name: str) -> JointMetrics:
        for j in self.joints:
            if j.name == name:
                return j
        raise KeyError(f"no joint {name!r}; joints: {', '.join(j.name for j in self.joints)}")

    def as_rows(self) -> list[list[str]]:
        """The per-joint table as rows of strings, the header first."""
        rows = [["joint", "peak |tau| N m", "limit N m", "peak |qd| rad/s", "limit rad/s",
                 "peak power W", "positive work J", "energy J", "envelope ratio"]]
        for j in self.joints:
            rows.append([j.name, _num(j.peak_torque), _num(j.torque_limit), _num(j.peak_speed),
                         _num(j.speed_limit), _num(j.peak_power), _num(j.positive_work), _num(j.energy),
                         _num(j.envelope_ratio)])
        return rows

    def summary_rows(self) -> list[list[str]]:
        """The whole-motion figures as (name, value) rows."""

        def opt(value: float | None, unit: str, point: str | None, time: float | None) -> str:
            if value is None:
                return "no stance"
            return f"{_num(value)}{unit} ({point}, t = {_time(time)} s)"

        def margin() -> str:
            if self.friction_margin is None:
                return "n/a (no load)" if self.unloaded_knots else "no stance"
            where = f"{self.friction_margin_point}, t = {_time(self.friction_margin_time)} s"
            if self.friction_margin == -math.inf:
                return f"violated: tangential force without normal load ({where})"
            skipped = ""
            if self.unloaded_knots:
                s = "s" if self.unloaded_knots > 1 else ""
                skipped = f"; {self.unloaded_knots} unloaded knot{s} (fz < {_num(self.min_load)} N) left out"
            return f"{self.friction_margin:.3f} ({where}{skipped})"   # 0.000: on the cone's edge

        return [
            ["duration", f"{_num(self.duration)} s"],
            ["flight time", f"{_num(self.flight_time)} s"],
            ["apex COM height", f"{_num(self.apex_com_height)} m (t = {_time(self.apex_time)} s)"],
            ["total rotation", f"{_num(self.total_rotation)} rad ({_num(math.degrees(self.total_rotation))} deg)"],
            ["friction margin", margin()],
            ["min normal force", opt(None if self.min_normal_force is None else round(self.min_normal_force, 3) + 0.0,
                                     " N", self.min_normal_force_point, self.min_normal_force_time)],
            ["positive work", f"{_num(self.total_positive_work)} J"],
            ["energy", f"{_num(self.total_energy)} J"],
        ]

    def as_table(self) -> str:
        """The metrics as a formatted plain-text table."""
        rows = self.as_rows()
        widths = [max(len(r[c]) for r in rows) for c in range(len(rows[0]))]
        lines = [f"{self.trick_name or 'motion'} on {self.robot_name} ({self.status})"]
        for i, r in enumerate(rows):
            lines.append("  ".join(cell.rjust(w) if c else cell.ljust(w) for c, (cell, w) in
                                   enumerate(zip(r, widths))))
            if i == 0:
                lines.append("  ".join("-" * w for w in widths))
        lines.append("")
        summary = self.summary_rows()
        w0 = max(len(r[0]) for r in summary)
        lines.extend(f"{name.ljust(w0)}  {value}" for name, value in summary)
        return "\n".join(lines)

    def __str__(self) -> str:
        return self.as_table()


# ----- the motion -------------------------------------------------------------------------
@dataclass(eq=False, kw_only=True)
class Motion:
    """An optimized motion: knots of every phase back to back, plus how the solve went.

    See the module docstring for the arrays and the interpolation. Construction checks shapes,
    names and the phase layout (``ValueError`` naming the field); NaN is allowed in memory (a
    failed solve) but never written to a file.
    """

    robot_name: str
    coord_names: list[str]
    joint_names: list[str]
    contact_points: list[str]
    t: np.ndarray
    q: np.ndarray
    qd: np.ndarray
    qdd: np.ndarray
    tau: np.ndarray
    forces: np.ndarray
    phases: list[PhaseSpan]
    status: str
    impulses: list[Impulse] = field(default_factory=list)
    iterations: int = 0
    solve_time: float = 0.0
    objective: float = 0.0
    trick_name: str = ""
    kipup_version: str = _KIPUP_VERSION
    report: list[Violation] = field(default_factory=list)

    def __post_init__(self) -> None:
        self.coord_names = [str(n) for n in self.coord_names]
        self.joint_names = [str(n) for n in self.joint_names]
        self.contact_points = [str(n) for n in self.contact_points]
        for name in _ARRAYS:
            setattr(self, name, np.array(getattr(self, name), dtype=np.float64))
        self.phases = list(self.phases)
        self.impulses = list(self.impulses)
        self.report = list(self.report)
        self.iterations = int(self.iterations)
        self.solve_time = float(self.solve_time)
        self.objective = float(self.objective)
        self._validate()

    # ----- checks ---------------------------------------------------------------------
    def _validate(self) -> None:
        nq, nj, nc = len(self.coord_names), len(self.joint_names), len(self.contact_points)
        if nq != 3 + nj or tuple(self.coord_names[3:]) != tuple(self.joint_names):
            raise ValueError(f"coord_names must be 3 base coordinates then joint_names {self.joint_names}; "
                             f"got {self.coord_names}")
        if len(set(self.contact_points)) != nc:
            raise ValueError(f"contact_points has repeated names: {self.contact_points}")
        if self.status not in STATUSES:
            raise ValueError(f"status {self.status!r} is not one of {', '.join(STATUSES)}")
        if self.t.ndim != 1 or self.t.size < 2:
            raise ValueError(f"t must be a 1-D array of at least 2 knot times (s); got shape {self.t.shape}")
        K = self.t.size
        expected = {"q": (K, nq), "qd": (K, nq), "qdd": (K, nq), "tau": (K, nj), "forces": (K, nc, 2)}
        for name, shape in expected.items():
            got = getattr(self, name).shape
            if got != shape:
                raise ValueError(f"{name} must have shape {shape} (K = {K} knots); got {got}")
        if np.any(np.diff(self.t) < 0):
            k = int(np.argmax(np.diff(self.t) < 0))
            raise ValueError(f"t must be non-decreasing; t[{k + 1}] = {self.t[k + 1]!r} < t[{k}] = {self.t[k]!r}")
        if not self.phases:
            raise ValueError("phases: a motion needs at least one phase")
        names = [p.name for p in self.phases]
        if len(set(names)) != len(names):
            raise ValueError(f"phases: repeated phase names {names}")
        next_first = 0
        for i, ph in enumerate(self.phases):
            where = f"phases[{i}] ({ph.name!r})"
            ph.start, ph.end = float(ph.start), float(ph.end)
            ph.first_knot, ph.last_knot = int(ph.first_knot), int(ph.last_knot)
            ph.contacts = [str(c) for c in ph.contacts]
            if ph.first_knot != next_first:
                raise ValueError(f"{where}: first_knot must be {next_first} (phases are stored back to back); "
                                 f"got {ph.first_knot}")
            if ph.last_knot <= ph.first_knot or ph.last_knot >= K:
                raise ValueError(f"{where}: last_knot must be in {ph.first_knot + 1} .. {K - 1}; got {ph.last_knot}")
            for label, value, k in (("start", ph.start, ph.first_knot), ("end", ph.end, ph.last_knot)):
                if not _close(value, self.t[k]):
                    raise ValueError(f"{where}: {label} = {value!r} s differs from t[{k}] = {self.t[k]!r} s")
            if i > 0 and not _close(self.t[ph.first_knot], self.t[ph.first_knot - 1]):
                raise ValueError(f"{where}: the boundary instant must appear twice; t[{ph.first_knot - 1}] = "
                                 f"{self.t[ph.first_knot - 1]!r} s, t[{ph.first_knot}] = {self.t[ph.first_knot]!r} s")
            unknown = [c for c in ph.contacts if c not in self.contact_points]
            if unknown:
                raise ValueError(f"{where}: contacts {unknown} are not in contact_points {self.contact_points}")
            next_first = ph.last_knot + 1
        if next_first != K:
            raise ValueError(f"phases cover knots 0 .. {next_first - 1} but there are K = {K} knots")
        in_contact = self.contact_mask()
        off = (np.abs(self.forces) > 0).any(axis=2) & ~in_contact
        if off.any():
            k, c = map(int, np.argwhere(off)[0])
            raise ValueError(f"forces[{k}, {c}]: point {self.contact_points[c]!r} is not in contact at knot {k} "
                             f"(t = {self.t[k]!r} s) but has force {self.forces[k, c].tolist()} N")
        for i, imp in enumerate(self.impulses):
            if imp.phase not in names:
                raise ValueError(f"impulses[{i}].phase: unknown phase {imp.phase!r}; phases: {names}")
            if imp.point not in self.contact_points:
                raise ValueError(f"impulses[{i}].point: {imp.point!r} is not in contact_points {self.contact_points}")

    def check_robot(self, robot: Any, *, allow_other_name: bool = False) -> None:
        """Raise ``ValueError`` if this motion was not made for ``robot``.

        The coordinate and joint names must match in order, and every contact point must be a
        point of the robot with a friction coefficient. The robot's name must match too, unless
        ``allow_other_name`` (e.g. a renamed copy of the same robot file).
        """
        problems = []
        if not allow_other_name and robot.name != self.robot_name:
            problems.append(f"it was made for robot {self.robot_name!r}")
        if tuple(robot.coord_names) != tuple(self.coord_names):
            problems.append(f"its coordinates are ({', '.join(self.coord_names)}) but the robot's are "
                            f"({', '.join(robot.coord_names)})")
        elif tuple(robot.joint_names) != tuple(self.joint_names):
            problems.append(f"its joints are ({', '.join(self.joint_names)}) but the robot's are "
                            f"({', '.join(robot.joint_names)})")
        points = {p.name: p for p in robot.points}
        missing = [p for p in self.contact_points if p not in points]
        if missing:
            problems.append(f"its contact points {missing} are not points of the robot "
                            f"({', '.join(points) or 'none'})")
        no_mu = [p for p in self.contact_points if p in points and points[p].friction is None]
        if no_mu:
            problems.append(f"its contact points {no_mu} have no friction coefficient in the robot")
        if problems:
            raise ValueError(f"this motion does not fit robot {robot.name!r}: " + "; ".join(problems))

    # ----- sizes and lookups ----------------------------------------------------------
    @property
    def K(self) -> int:
        """Total number of knots."""
        return int(self.t.size)

    @property
    def nq(self) -> int:
        return len(self.coord_names)

    @property
    def nj(self) -> int:
        return len(self.joint_names)

    @property
    def t0(self) -> float:
        return float(self.t[0])

    @property
    def tend(self) -> float:
        return float(self.t[-1])

    @property
    def duration(self) -> float:
        """tend - t0 (s)."""
        return self.tend - self.t0

    def phase(self, name: str) -> PhaseSpan:
        for ph in self.phases:
            if ph.name == name:
                return ph
        raise KeyError(f"no phase {name!r}; phases: {', '.join(p.name for p in self.phases)}")

    def phase_at(self, time: float) -> PhaseSpan:
        """The phase holding ``time`` (s); at a phase boundary the later phase (post-impact)."""
        k = self._locate(np.asarray([time], dtype=float))[0]
        return self.phases[int(self._phase_of_knot[k])]

    def contact_mask(self) -> np.ndarray:
        """(K, len(contact_points)) bool: point c is in contact at knot k."""
        mask = np.zeros((self.K, len(self.contact_points)), dtype=bool)
        for ph in self.phases:
            for c in ph.contacts:
                mask[ph.first_knot:ph.last_knot + 1, self.contact_points.index(c)] = True
        return mask

    @property
    def _phase_of_knot(self) -> np.ndarray:
        out = np.empty(self.K, dtype=int)
        for i, ph in enumerate(self.phases):
            out[ph.first_knot:ph.last_knot + 1] = i
        return out

    # ----- dense evaluation -----------------------------------------------------------
    def _locate(self, times: np.ndarray) -> np.ndarray:
        """Index k of the interval [t_k, t_k+1] (both knots in one phase) holding each time.

        Intervals are half-open [t_k, t_k+1) except the last of the motion, so a phase boundary
        time goes to the later phase and a knot time to the interval it starts.
        """
        lo, hi = self.t0, self.tend
        bad = ~((times >= lo) & (times <= hi))  # NaN is bad too
        if bad.any():
            raise ValueError(f"sample times must lie within the motion's time range [{lo!r}, {hi!r}] s; "
                             f"got {float(times[bad][0])!r} s ({int(bad.sum())} of {times.size} outside)")
        starts = np.array([self.t[ph.first_knot] for ph in self.phases])
        which = np.clip(np.searchsorted(starts, times, side="right") - 1, 0, len(self.phases) - 1)
        k = np.empty(times.shape, dtype=int)
        for i, ph in enumerate(self.phases):
            sel = which == i
            if not sel.any():
                continue
            tp = self.t[ph.first_knot:ph.last_knot + 1]
            j = np.clip(np.searchsorted(tp, times[sel], side="right") - 1, 0, tp.size - 2)
            k[sel] = ph.first_knot + j
        return k

    def _prepare(self, times: Any) -> tuple[np.ndarray, bool]:
        arr = np.asarray(times, dtype=float)
        if arr.ndim > 1:
            raise ValueError(f"times must be a scalar or a 1-D array (s); got shape {arr.shape}")
        return np.atleast_1d(arr), arr.ndim == 0

    def _interval(self, times: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        k = self._locate(times)
        h = self.t[k + 1] - self.t[k]
        s = times - self.t[k]
        inv_h = np.divide(1.0, h, out=np.zeros_like(h), where=h > 0)  # a zero-length interval: s = 0
        return k, s, inv_h

    def sample(self, times: Any) -> dict[str, np.ndarray]:
        """Evaluate q, qd, qdd at ``times`` (s) with the scheme's cubic (see the module docstring).

        ``times``: a scalar or 1-D array within ``[t0, tend]`` (else ``ValueError`` naming the
        range). At a phase boundary time the later phase is used, i.e. the post-impact
        velocities; at a knot time the knot's values are returned exactly (the final time is
        evaluated on the last interval, equal to the last knot when the defects hold). Returns
        ``{"q", "qd", "qdd"}``, each ``(len(times), nq)``, or ``(nq,)`` for a scalar time.
        """
        times, scalar = self._prepare(times)
        k, s, inv_h = self._interval(times)
        s1 = s[:, None]
        dqdd = self.qdd[k + 1] - self.qdd[k]
        r = (s * inv_h)[:, None]  # s / h
        qdd = self.qdd[k] + dqdd * r
        qd = self.qd[k] + self.qdd[k] * s1 + dqdd * (r * s1 / 2.0)
        q = self.q[k] + self.qd[k] * s1 + self.qdd[k] * (s1 * s1 / 2.0) + dqdd * (r * s1 * s1 / 6.0)
        out = {"q": q, "qd": qd, "qdd": qdd}
        return {key: v[0] for key, v in out.items()} if scalar else out

    def _linear(self, values: np.ndarray, times: Any) -> np.ndarray:
        times, scalar = self._prepare(times)
        k, s, inv_h = self._interval(times)
        r = (s * inv_h).reshape((-1,) + (1,) * (values.ndim - 1))
        out = values[k] + (values[k + 1] - values[k]) * r
        return out[0] if scalar else out

    def sample_torques(self, times: Any) -> np.ndarray:
        """Joint torques (N m) at ``times`` (s): linear between the knots of a phase, the later
        phase at a boundary (as :meth:`sample`). Shape ``(len(times), nj)`` or ``(nj,)``."""
        return self._linear(self.tau, times)

    def sample_forces(self, times: Any) -> np.ndarray:
        """Contact forces (N) at ``times`` (s), linear between knots like :meth:`sample_torques`.
        Shape ``(len(times), len(contact_points), 2)`` or ``(len(contact_points), 2)``."""
        return self._linear(self.forces, times)

    # ----- metrics ----------------------------------------------------------------------
    def _interval_mask(self) -> np.ndarray:
        """(K-1,) bool: interval k -> k+1 lies inside one phase."""
        inside = np.ones(self.K - 1, dtype=bool)
        for ph in self.phases[:-1]:
            inside[ph.last_knot] = False
        return inside

    def metrics(self, robot: Any, *, allow_other_name: bool = False,
                min_load: float | None = None) -> MotionMetrics:
        """Figures of the motion against ``robot``'s limits (checks the robot first, see :meth:`check_robot`).

        Per joint: peak |tau| over the knots against the actuator's peak torque; peak |qd| of the
        quadratic qd (knots and the stationary points between them) against the velocity limit;
        peak power max |tau qd| over the knots; positive work = integral of max(tau qd, 0) and
        energy = integral of |tau qd| (trapezoid on the knots of each phase, J); the worst
        torque-speed envelope ratio over the knots: ``|tau| / (stall (1 - |qd| / no_load))`` when
        tau and qd share a sign (infinite at or beyond the no-load speed), else ``|tau| / peak``;
        1 or less is within the envelope (the peak torque is compared separately).

        Whole motion: friction margin = min over *loaded* stance knots (fz >= ``min_load`` > 0)
        of ``(mu fz - |fx|) / fz`` (mu from the robot's point). ``min_load`` (N) defaults to 1 %
        of the robot's weight: a point about to lift off carries solver noise (fz of +-1e-7 N)
        whose ratio means nothing, so unloaded knots are left out and counted
        (``unloaded_knots``); an unloaded knot whose |fx| exceeds ``mu * min_load`` is a real
        tangential force without load and makes the margin -inf. None when no stance knot is
        loaded. Minimum normal force fz over stance knots (N); flight time (s, phases with no
        contacts); apex height of the COM over the knots (m); total rotation
        ``q[-1, pitch] - q[0, pitch]`` (rad).
        """
        from .dynamics import center_of_mass

        self.check_robot(robot, allow_other_name=allow_other_name)
        t, tau, qd = self.t, self.tau, self.qd[:, 3:]
        power = tau * qd
        inside = self._interval_mask()
        h = np.diff(t) * inside

        def integral(p: np.ndarray) -> np.ndarray:
            return (0.5 * (p[:-1] + p[1:]) * h[:, None]).sum(axis=0)

        work = integral(np.maximum(power, 0.0))
        energy = integral(np.abs(power))
        speed_peak, speed_time = self._peak_speed()
        joints = []
        for j, joint in enumerate(robot.joints):
            act = joint.actuator
            a_tau, a_qd = np.abs(tau[:, j]), np.abs(qd[:, j])
            same = power[:, j] > 0
            room = act.stall_torque * (1.0 - a_qd / act.no_load_speed)
            with np.errstate(divide="ignore", invalid="ignore"):
                ratio = np.where(same, np.where(room > 0, a_tau / np.where(room > 0, room, 1.0), math.inf),
                                 a_tau / act.peak_torque)
            kt, kp, ke = int(np.argmax(a_tau)), int(np.argmax(np.abs(power[:, j]))), int(np.argmax(ratio))
            joints.append(JointMetrics(
                name=joint.name,
                peak_torque=float(a_tau[kt]), peak_torque_time=float(t[kt]), torque_limit=float(act.peak_torque),
                peak_speed=float(speed_peak[j]), peak_speed_time=float(speed_time[j]),
                speed_limit=float(joint.velocity_limit),
                peak_power=float(abs(power[kp, j])),
                positive_work=float(work[j]), energy=float(energy[j]),
                envelope_ratio=float(ratio[ke]), envelope_time=float(t[ke]),
            ))

        # contacts
        mask = self.contact_mask()
        if min_load is None:
            min_load = 0.01 * float(robot.total_mass) * float(robot.gravity)
        min_load = float(min_load)
        if not (math.isfinite(min_load) and min_load >= 0.0):
            raise ValueError(f"min_load must be a finite force >= 0 N, got {min_load!r}")
        unloaded = 0
        margin = fz_min = None
        margin_at: tuple[str | None, float | None] = (None, None)
        fz_at: tuple[str | None, float | None] = (None, None)
        for c, name in enumerate(self.contact_points):
            ks = np.flatnonzero(mask[:, c])
            if ks.size == 0:
                continue
            mu = robot.point(name).friction
            fx, fz = self.forces[ks, c, 0], self.forces[ks, c, 1]
            i = int(np.argmin(fz))
            if fz_min is None or fz[i] < fz_min:
                fz_min, fz_at = float(fz[i]), (name, float(t[ks[i]]))
            loaded = (fz >= min_load) & (fz > 0)
            unloaded += int(np.count_nonzero(~loaded))
            with np.errstate(divide="ignore", invalid="ignore"):
                m = np.where(loaded, (mu * fz - np.abs(fx)) / np.where(loaded, fz, 1.0),
                             np.where(np.abs(fx) > mu * min_load, -math.inf, math.nan))
            if np.all(np.isnan(m)):
                continue
            i = int(np.nanargmin(m))
            if margin is None or m[i] < margin:
                margin, margin_at = float(m[i]), (name, float(t[ks[i]]))

        flight = float(sum(ph.duration for ph in self.phases if not ph.contacts))
        com_z = np.array([float(np.asarray(center_of_mass(robot, qk)).reshape(-1)[1]) for qk in self.q])
        ka = int(np.argmax(com_z))
        return MotionMetrics(
            robot_name=self.robot_name, trick_name=self.trick_name, status=self.status,
            duration=self.duration, joints=joints,
            friction_margin=margin, friction_margin_point=margin_at[0], friction_margin_time=margin_at[1],
            min_normal_force=fz_min, min_normal_force_point=fz_at[0], min_normal_force_time=fz_at[1],
            flight_time=flight, apex_com_height=float(com_z[ka]), apex_time=float(t[ka]),
            total_rotation=float(self.q[-1, 2] - self.q[0, 2]),
            min_load=min_load, unloaded_knots=unloaded,
        )

    def _peak_speed(self) -> tuple[np.ndarray, np.ndarray]:
        """Per joint max |qd| of the piecewise-quadratic qd and its time (s)."""
        qd, qdd, t = self.qd[:, 3:], self.qdd[:, 3:], self.t
        a_qd = np.abs(qd)
        best = a_qd.max(axis=0)
        when = t[np.argmax(a_qd, axis=0)]
        ks = np.flatnonzero(self._interval_mask() & (np.diff(t) > 0))
        if ks.size:
            h = (t[ks + 1] - t[ks])[:, None]
            a, b = qdd[ks], qdd[ks + 1]
            d = b - a
            with np.errstate(divide="ignore", invalid="ignore"):
                s = np.where(d != 0, -a * h / np.where(d != 0, d, 1.0), -1.0)  # qdd(s) = 0
            ok = (s > 0) & (s < h)
            s = np.where(ok, s, 0.0)
            v = np.where(ok, np.abs(qd[ks] + a * s + d * s * s / (2.0 * h)), -1.0)
            i = np.argmax(v, axis=0)
            cols = np.arange(v.shape[1])
            better = v[i, cols] > best
            best = np.where(better, v[i, cols], best)
            when = np.where(better, t[ks][i] + s[i, cols], when)
        return best, when

    # ----- report -----------------------------------------------------------------------
    def report_text(self) -> str:
        """The violations as plain text a user can act on, with the phase of each."""
        return render_report(self.report, self.phases)

    # ----- equality -----------------------------------------------------------------------
    def __eq__(self, other: object) -> bool:
        if not isinstance(other, Motion):
            return NotImplemented
        for f in fields(self):
            a, b = getattr(self, f.name), getattr(other, f.name)
            if f.name in _ARRAYS:
                if a.dtype != b.dtype or not np.array_equal(a, b):
                    return False
            elif a != b:
                return False
        return True

    # ----- plain data ---------------------------------------------------------------------
    def _meta_dict(self) -> dict[str, Any]:
        return {
            "format": MOTION_FORMAT,
            "caution": MOTION_CAUTION,
            "robot_name": self.robot_name,
            "trick_name": self.trick_name,
            "kipup_version": self.kipup_version,
            "status": self.status,
            "iterations": self.iterations,
            "solve_time": self.solve_time,
            "objective": self.objective,
            "coord_names": list(self.coord_names),
            "joint_names": list(self.joint_names),
            "contact_points": list(self.contact_points),
            "phases": [{"name": p.name, "start": float(p.start), "end": float(p.end), "first_knot": int(p.first_knot),
                        "last_knot": int(p.last_knot), "contacts": list(p.contacts)} for p in self.phases],
            "impulses": [{"time": float(i.time), "phase": i.phase, "point": i.point,
                          "impulse": [float(i.impulse[0]), float(i.impulse[1])]} for i in self.impulses],
            "report": [{"kind": v.kind, "name": v.name, "time": float(v.time), "amount": float(v.amount),
                        "limit": float(v.limit), "message": v.message} for v in self.report],
        }

    def to_dict(self) -> dict[str, Any]:
        """Plain data (str, int, float, lists): metadata plus the arrays as nested lists."""
        d = self._meta_dict()
        for name in _ARRAYS:
            d[name] = getattr(self, name).tolist()
        return d

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> "Motion":
        """Inverse of :meth:`to_dict` (also accepts arrays in place of nested lists)."""
        return cls._from_parts(d, {name: _need(d, name) for name in _ARRAYS})

    @classmethod
    def _from_parts(cls, meta: dict[str, Any], arrays: dict[str, Any]) -> "Motion":
        fmt = meta.get("format")
        if fmt != MOTION_FORMAT:
            raise ValueError(f"format: expected {MOTION_FORMAT!r}, got {fmt!r}")
        coord_names = list(_need(meta, "coord_names"))
        joint_names = list(_need(meta, "joint_names"))
        contact_points = list(_need(meta, "contact_points"))
        t = np.asarray(arrays["t"], dtype=np.float64).reshape(-1)
        K, nq, nj, nc = t.size, len(coord_names), len(joint_names), len(contact_points)
        shapes = {"q": (K, nq), "qd": (K, nq), "qdd": (K, nq), "tau": (K, nj), "forces": (K, nc, 2)}
        data = {"t": t}
        for name, shape in shapes.items():
            a = np.asarray(arrays[name], dtype=np.float64)
            if a.size != math.prod(shape):
                raise ValueError(f"{name} must have shape {shape} (K = {K} knots); got {a.shape}")
            data[name] = a.reshape(shape)
        try:
            phases = [PhaseSpan(name=p["name"], start=float(p["start"]), end=float(p["end"]),
                                first_knot=int(p["first_knot"]), last_knot=int(p["last_knot"]),
                                contacts=list(p.get("contacts", []))) for p in _need(meta, "phases")]
            impulses = [Impulse(time=float(i["time"]), phase=i["phase"], point=i["point"],
                                impulse=tuple(i["impulse"])) for i in meta.get("impulses", [])]
            report = [Violation(kind=v["kind"], name=v["name"], time=float(v["time"]), amount=float(v["amount"]),
                                limit=float(v["limit"]), message=v.get("message", "")) for v in meta.get("report", [])]
        except KeyError as e:
            raise ValueError(f"motion data: a phase, impulse or report entry lacks field {e.args[0]!r}") from None
        return cls(
            robot_name=_need(meta, "robot_name"), coord_names=coord_names, joint_names=joint_names,
            contact_points=contact_points, phases=phases, impulses=impulses, report=report,
            status=_need(meta, "status"), iterations=int(meta.get("iterations", 0)),
            solve_time=float(meta.get("solve_time", 0.0)), objective=float(meta.get("objective", 0.0)),
            trick_name=meta.get("trick_name", ""), kipup_version=meta.get("kipup_version", ""), **data,
        )

    # ----- files --------------------------------------------------------------------------
    def check_finite(self) -> None:
        """Raise ``ValueError`` naming the first field (and index) that holds NaN or infinity."""
        for name in _ARRAYS:
            a = getattr(self, name)
            bad = ~np.isfinite(a)
            if bad.any():
                idx = tuple(int(i) for i in np.argwhere(bad)[0])
                what = "NaN" if np.isnan(a[idx]) else "infinite"
                raise ValueError(f"{name}[{', '.join(map(str, idx))}] is {what}; refusing to write the motion "
                                 f"(status {self.status!r})")
        scalars = [("solve_time", self.solve_time), ("objective", self.objective)]
        for i, p in enumerate(self.phases):
            scalars += [(f"phases[{i}].start", p.start), (f"phases[{i}].end", p.end)]
        for i, imp in enumerate(self.impulses):
            scalars += [(f"impulses[{i}].time", imp.time), (f"impulses[{i}].impulse[0]", imp.impulse[0]),
                        (f"impulses[{i}].impulse[1]", imp.impulse[1])]
        for i, v in enumerate(self.report):
            scalars += [(f"report[{i}].time", v.time), (f"report[{i}].amount", v.amount),
                        (f"report[{i}].limit", v.limit)]
        for name, value in scalars:
            if not math.isfinite(value):
                what = "NaN" if math.isnan(value) else "infinite"
                raise ValueError(f"{name} is {what}; refusing to write the motion (status {self.status!r})")

    def to_json(self, path: str | os.PathLike[str]) -> None:
        """Write a ``kipup-motion/1`` JSON file at ``path`` atomically; refuses NaN/inf (nothing written)."""
        self.check_finite()
        meta = self._meta_dict()
        parts = [f"  {json.dumps(k)}: {json.dumps(v, allow_nan=False)}" for k, v in meta.items()]
        for name in _ARRAYS:
            a = getattr(self, name)
            if a.ndim == 1:  # t on one line, the other arrays one knot a line
                parts.append(f"  {json.dumps(name)}: {json.dumps(a.tolist(), allow_nan=False)}")
                continue
            rows = ",\n".join("    " + json.dumps(row, allow_nan=False) for row in a.tolist())
            parts.append(f"  {json.dumps(name)}: [\n{rows}\n  ]")
        text = "{\n" + ",\n".join(parts) + "\n}\n"
        atomic_write(path, lambda f: f.write(text.encode("utf-8")))

    @classmethod
    def from_json(cls, path: str | os.PathLike[str]) -> "Motion":
        with open(path, encoding="utf-8") as f:
            d = json.load(f)
        if not isinstance(d, dict):
            raise ValueError(f"{path}: not a kipup motion file (expected a JSON object)")
        return cls.from_dict(d)

    def to_npz(self, path: str | os.PathLike[str]) -> None:
        """Write an NPZ file at exactly ``path`` atomically: the arrays natively, the metadata as a
        JSON string entry ``meta``. Refuses NaN/inf (nothing written)."""
        self.check_finite()
        meta = json.dumps(self._meta_dict(), allow_nan=False)
        arrays = {name: getattr(self, name) for name in _ARRAYS}
        atomic_write(path, lambda f: np.savez(f, **{_NPZ_META: np.array(meta)}, **arrays))

    @classmethod
    def from_npz(cls, path: str | os.PathLike[str]) -> "Motion":
        with np.load(path, allow_pickle=False) as data:
            if _NPZ_META not in data.files:
                raise ValueError(f"{path}: not a kipup motion file (no {_NPZ_META!r} entry)")
            meta = json.loads(str(data[_NPZ_META]))
            missing = [n for n in _ARRAYS if n not in data.files]
            if missing:
                raise ValueError(f"{path}: missing arrays {missing}")
            arrays = {name: data[name] for name in _ARRAYS}
        return cls._from_parts(meta, arrays)


def _need(d: dict[str, Any], key: str) -> Any:
    try:
        return d[key]
    except KeyError:
        raise ValueError(f"motion data: missing field {key!r}") from None


def _close(a: float, b: float) -> bool:
    return abs(a - b) <= 1e-9 * (1.0 + abs(b))
