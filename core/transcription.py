"""Direct transcription of a trick into a nonlinear program (NLP) for IPOPT.

Scheme: per phase, a uniform grid of ``N`` intervals (``N + 1`` knots) over the phase
duration ``T`` (a decision variable, fixed by equal bounds unless the phase is free).
Decision variables at every knot: q, qd, qdd, joint torques and contact forces. Between
knots qdd is linear in time, so qd is quadratic and q cubic; the defects integrate that
exactly:

    qd[k+1] = qd[k] + h/2 (qdd[k] + qdd[k+1])
    q[k+1]  = q[k] + h qd[k] + h^2/6 (2 qdd[k] + qdd[k+1])

(trapezoidal collocation of qd' = qdd with the matching cubic for q). The equations of
motion are imposed at every knot in inverse-dynamics form, ``rnea(q, qd, qdd) = S^T tau +
sum J_c^T f_c``, which needs no mass-matrix inverse and keeps each constraint local to one
knot. The motion between knots is the cubic above, so dense evaluation and resampling for
export are exact for the optimized trajectory.

Contacts: a stance point is held at its surface at every knot (a position-level
constraint; its contact force enters the equations of motion); a second point on the same link is held in z only (the link's x and angle are already
fixed), which keeps the constraints independent. Normal force >= 0, friction cone
``|fx| <= mu fz``. A phase that adds contacts starts with a rigid inelastic impact:
``M(q) (qd+ - qd-) = sum J_c^T P_c`` with compressive impulses in the cone, and the stance
points are at rest right after it, ``J_c qd+ = 0``.

What changes without a rebuild: everything in the parameter vector (cost weights, keyframe
values, weights and times within their phase, goal values, terrain heights and extents, bar
positions) and in the bounds (phase durations fixed or free, landing range).
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import casadi as ca
import numpy as np

from . import dynamics as dyn
from .robot import Robot
from .trick import Trick

INF = np.inf


class TrickSpecError(ValueError):
    """The trick asks for something the robot or the terrain cannot give; names the field."""


# ----- layouts -------------------------------------------------------------------
@dataclass
class Block:
    """A rows x cols block of the decision vector (column-major), with its scale."""

    offset: int
    rows: int
    cols: int

    @property
    def size(self) -> int:
        return self.rows * self.cols

    def take(self, vec: np.ndarray) -> np.ndarray:
        return np.asarray(vec[self.offset:self.offset + self.size]).reshape(self.cols, self.rows).T


class VectorLayout:
    """Allocates named blocks in one vector and keeps scales, bounds and guesses for them."""

    def __init__(self) -> None:
        self.n = 0
        self.blocks: dict[str, Block] = {}
        self._scale: list[np.ndarray] = []
        self._lb: list[np.ndarray] = []
        self._ub: list[np.ndarray] = []

    def add(self, name: str, rows: int, cols: int = 1, scale: Any = 1.0,
            lb: Any = -INF, ub: Any = INF) -> Block:
        block = Block(self.n, rows, cols)
        self.blocks[name] = block
        self.n += block.size

        def expand(val: Any) -> np.ndarray:
            arr = np.asarray(val, dtype=float)
            if arr.ndim == 0:
                arr = np.full(rows, float(arr))
            return np.tile(arr.reshape(rows, 1), (1, cols)).T.reshape(-1)

        self._scale.append(expand(scale))
        self._lb.append(expand(lb))
        self._ub.append(expand(ub))
        return block

    @property
    def scale(self) -> np.ndarray:
        return np.concatenate(self._scale) if self._scale else np.zeros(0)

    @property
    def lb(self) -> np.ndarray:
        return np.concatenate(self._lb) if self._lb else np.zeros(0)

    @property
    def ub(self) -> np.ndarray:
        return np.concatenate(self._ub) if self._ub else np.zeros(0)


class ParamLayout:
    """Named slices of the parameter vector, with values taken from a trick."""

    def __init__(self) -> None:
        self.n = 0
        self.slices: dict[str, slice] = {}

    def add(self, name: str, size: int) -> slice:
        s = slice(self.n, self.n + size)
        self.slices[name] = s
        self.n += size
        return s


@dataclass
class ContactRow:
    """One stance contact of a phase: its point, surface, friction, and which rows it holds."""

    point: str
    surface: str
    mu: float
    hold_x: bool  # False for a second point on a link already held


@dataclass
class PhaseLayout:
    index: int
    name: str
    N: int
    contacts: list[ContactRow]
    free_points: list[str]
    impact: bool
    new_contacts: list[str] = field(default_factory=list)

    @property
    def K(self) -> int:
        return self.N + 1

    @property
    def nc(self) -> int:
        return len(self.contacts)


@dataclass
class KeyframeLayout:
    index: int
    phase: int
    coords: list[int]
    hard: bool


@dataclass
class ReachLayout:
    index: int
    phase: int
    point: str
    hard: bool


@dataclass
class KnotTerm:
    """One phase's mapped knot function in the NLP: constraints ``g_label`` (ng x K, knot by
    knot) and running cost ``(T / N) * sum_k weights[k] * L_k``. Inputs per knot:
    (q, v, a, tau, lam, anchor, prm) with ``prm`` the MX expression of the parameters.
    ``inputs``: the knot variables (q, v, a, tau, lam, anchor, T) stacked per knot (rows x K,
    physical units), for the derivatives."""

    phase: int
    function: ca.Function
    g_label: str
    weights: np.ndarray
    prm: ca.MX
    inputs: ca.MX


# ----- the problem ------------------------------------------------------------------
class TrickProblem:
    """The NLP of one trick structure on one robot: built once, solved many times.

    ``structure_key(trick)`` tells whether an edited trick can reuse this problem.
    ``parameters(trick)`` and ``bounds(trick)`` give the numbers for a solve.
    """

    def __init__(self, trick: Trick, robot: Robot) -> None:
        self.robot = robot
        self.trick_name = trick.name
        self.key = structure_key(trick, robot)
        self._check(trick)
        self.x = VectorLayout()
        self.p = ParamLayout()
        self.phases = self._phase_layouts(trick)
        self._allocate(trick)
        self._build(trick)

    # --- checks ------------------------------------------------------------------
    def _check(self, trick: Trick) -> None:
        r = self.robot
        if not trick.phases:
            raise TrickSpecError("phases: a trick needs at least one phase")
        for i, ph in enumerate(trick.phases):
            if ph.knots < 1:
                raise TrickSpecError(f"phases[{i}].knots: must be at least 1, got {ph.knots}")
            for j, c in enumerate(ph.contacts):
                if c.point not in r.point_names:
                    raise TrickSpecError(f"phases[{i}].contacts[{j}].point: unknown point {c.point!r}; "
                                         f"points: {', '.join(r.point_names)}")
                if r.point(c.point).friction is None:
                    raise TrickSpecError(f"phases[{i}].contacts[{j}].point: point {c.point!r} has no "
                                         "friction coefficient in the robot file")
                if c.surface not in trick.terrain.surface_names():
                    raise TrickSpecError(f"phases[{i}].contacts[{j}].surface: unknown surface {c.surface!r}")
        for i, kf in enumerate(trick.keyframes):
            for name in kf.pose:
                if name not in r.coord_names:
                    raise TrickSpecError(f"keyframes[{i}].pose.{name}: unknown coordinate; "
                                         f"coordinates: {', '.join(r.coord_names)}")
            if kf.phase is not None and kf.phase not in [p.name for p in trick.phases]:
                raise TrickSpecError(f"keyframes[{i}].phase: unknown phase {kf.phase!r}")
        for name in trick.landing_pose:
            if name not in r.coord_names:
                raise TrickSpecError(f"landing_pose.{name}: unknown coordinate")

    def _phase_layouts(self, trick: Trick) -> list[PhaseLayout]:
        r = self.robot
        out = []
        prev: set[str] = set()
        for i, ph in enumerate(trick.phases):
            rows = []
            held_links: set[str] = set()
            for c in ph.contacts:
                link = r.point(c.point).link
                rows.append(ContactRow(c.point, c.surface, float(r.point(c.point).friction),
                                       hold_x=link not in held_links))
                held_links.add(link)
            names = {c.point for c in ph.contacts}
            free = [p for p in r.point_names if p not in names]
            new = sorted(names - prev)
            out.append(PhaseLayout(i, ph.name, ph.knots, rows, free, impact=(i > 0 and bool(new)),
                                   new_contacts=new))
            prev = names
        return out

    # --- allocation --------------------------------------------------------------
    def _allocate(self, trick: Trick) -> None:
        r, X = self.robot, self.x
        nq, nj = r.nq, r.nj
        mg = r.total_mass * r.gravity
        qlb = np.r_[-INF, -INF, -INF, r.joint_lower]
        qub = np.r_[INF, INF, INF, r.joint_upper]
        vmax = np.r_[INF, INF, INF, r.velocity_limit]
        peak = np.asarray(r.peak_torque)
        for ph in self.phases:
            K = ph.K
            X.add(f"q{ph.index}", nq, K, 1.0, qlb, qub)
            X.add(f"v{ph.index}", nq, K, 5.0, -vmax, vmax)
            X.add(f"a{ph.index}", nq, K, 50.0)
            X.add(f"tau{ph.index}", nj, K, peak, -peak, peak)
            if ph.nc:
                lam_lb = np.tile([-INF, 0.0], ph.nc)
                X.add(f"lam{ph.index}", 2 * ph.nc, K, mg / ph.nc, lam_lb, INF)
                X.add(f"anchor{ph.index}", sum(c.hold_x for c in ph.contacts), 1, 1.0)
            X.add(f"T{ph.index}", 1, 1, 0.3, 1e-3, INF)
            if ph.impact:
                X.add(f"imp{ph.index}", 2 * ph.nc, 1, r.total_mass, np.tile([-INF, 0.0], ph.nc), INF)
        P = self.p
        P.add("costs", 7)  # effort, work, torque_rate, keyframes, landing_pose, force_smoothness, reg
        nb = len(trick.terrain.boxes)
        P.add("terrain", 1 + 3 * nb)
        P.add("bars", 3 * len(trick.terrain.bars))
        P.add("rotation", 1)
        P.add("landing_pose", nq)
        P.add("landing_mask", nq)
        self.keyframes: list[KeyframeLayout] = []
        for i, kf in enumerate(trick.keyframes):
            phase = locate_phase(trick, kf.phase, kf.time)[0]
            coords = [r.coord_index(c) for c in kf.pose]
            self.keyframes.append(KeyframeLayout(i, phase, coords, kf.hard))
            P.add(f"kf{i}.value", len(coords))
            P.add(f"kf{i}.interp", self.phases[phase].K)
            P.add(f"kf{i}.weight", 1)
        self.reaches: list[ReachLayout] = []
        for i, rc in enumerate(trick.goals.reach):
            phase = trick.phase_index(rc.phase)
            self.reaches.append(ReachLayout(i, phase, rc.point, rc.hard))
            P.add(f"reach{i}.target", 2)
            P.add(f"reach{i}.interp", self.phases[phase].K)

    # --- build -------------------------------------------------------------------
    def _knot_function(self, ph: PhaseLayout, trick: Trick) -> tuple[ca.Function, np.ndarray, np.ndarray]:
        """Per-knot constraints and running cost of one phase, as an SX Function.

        Inputs (q, v, a, tau, lam, anchor, prm) with prm = (w_effort, w_work, w_reg, terrain..., bars...).
        """
        r = self.robot
        nq, nj = r.nq, r.nj
        q, v, a = ca.SX.sym("q", nq), ca.SX.sym("v", nq), ca.SX.sym("a", nq)
        tau = ca.SX.sym("tau", nj)
        lam = ca.SX.sym("lam", 2 * ph.nc)
        n_anchor = sum(c.hold_x for c in ph.contacts)
        anchor = ca.SX.sym("anchor", n_anchor)
        nb, nbar = len(trick.terrain.boxes), len(trick.terrain.bars)
        prm = ca.SX.sym("prm", 3 + 1 + 3 * nb + 3 * nbar)
        w_eff, w_work, w_reg = prm[0], prm[1], prm[2]
        ground = prm[3]
        boxes = [(prm[4 + 3 * b], prm[5 + 3 * b], prm[6 + 3 * b]) for b in range(nb)]
        bars = [(prm[4 + 3 * nb + 3 * b], prm[5 + 3 * nb + 3 * b], prm[6 + 3 * nb + 3 * b]) for b in range(nbar)]
        mg = r.total_mass * r.gravity

        def height(x: Any) -> Any:
            h = ground
            for x0, x1, top in boxes:
                step = 0.5 * (1 + ca.tanh(0.5 * (x - x0) / 0.004)) * 0.5 * (1 + ca.tanh(0.5 * (x1 - x) / 0.004))
                h = h + (top - ground) * step
            return h

        surface_h = {"ground": ground}
        for b, box in enumerate(trick.terrain.boxes):
            surface_h[box.name] = boxes[b][2]

        g, lbg, ubg = [], [], []
        labels: list[tuple[str, str]] = []

        def add(expr: Any, lo: float, hi: float, kind: str, names: list[str]) -> None:
            n = expr.shape[0]
            g.append(expr)
            lbg.extend([lo] * n)
            ubg.extend([hi] * n)
            labels.extend((kind, nm) for nm in names)

        gen = dyn.rnea(r, q, v, a) - ca.vertcat(ca.SX.zeros(3), tau)
        k_anchor = 0
        for c, row in enumerate(ph.contacts):
            J = dyn.point_jacobian(r, q, row.point)
            gen = gen - J.T @ lam[2 * c:2 * c + 2]
        add(gen / mg, 0.0, 0.0, "dynamics", list(r.coord_names))
        for c, row in enumerate(ph.contacts):
            p = dyn.point_position(r, q, row.point)
            hz = surface_h[row.surface]
            if row.hold_x:
                add(ca.vertcat(p[0] - anchor[k_anchor], p[1] - hz), 0.0, 0.0, "contact",
                    [f"{row.point} x", f"{row.point} z"])
                k_anchor += 1
            else:
                add(p[1] - hz, 0.0, 0.0, "contact", [f"{row.point} z"])
            fx, fz = lam[2 * c], lam[2 * c + 1]
            add(ca.vertcat(row.mu * fz - fx, row.mu * fz + fx) / mg, 0.0, INF, "friction", [row.point] * 2)
        vj = v[3:]
        env = []
        for j, joint in enumerate(r.joints):
            act = joint.actuator
            env.append((act.stall_torque * (1 - vj[j] / act.no_load_speed) - tau[j]) / act.stall_torque)
            env.append((tau[j] + act.stall_torque * (1 + vj[j] / act.no_load_speed)) / act.stall_torque)
        add(ca.vertcat(*env), 0.0, INF, "envelope", [n for n in r.joint_names for _ in (0, 1)])
        for name in ph.free_points:
            p = dyn.point_position(r, q, name)
            add(p[1] - height(p[0]), 0.0, INF, "clearance", [name])
            for bx, bz, br in bars:
                add(((p[0] - bx) ** 2 + (p[1] - bz) ** 2) / (br + 0.03) ** 2 - 1.0, 0.0, INF, "bar", [name])
        peak = np.asarray(r.peak_torque)
        effort = ca.sumsqr(tau / peak)
        power = tau * vj / (peak * np.asarray(r.velocity_limit))
        work = ca.sum1(0.01 * ca.log(1 + ca.exp(power / 0.01)))  # smooth positive part
        reg = ca.sumsqr(a / 50.0) + ca.sumsqr(lam / mg)
        L = w_eff * effort + w_work * work + w_reg * reg
        F = ca.Function(f"knot{ph.index}", [q, v, a, tau, lam, anchor, prm], [ca.vertcat(*g), L])
        self.knot_labels.append(labels)
        return F, np.array(lbg), np.array(ubg)

    def _build(self, trick: Trick) -> None:
        r = self.robot
        nq = r.nq
        X, P = self.x, self.p
        # one MX graph whose heavy parts are the mapped SX knot functions: nlpsol builds its
        # derivatives in 0.4 s (1.75 s for an all-SX graph); the solver expands them to SX once
        xs = ca.MX.sym("x", X.n)
        p = ca.MX.sym("p", P.n)
        xp = xs * ca.DM(X.scale)

        def blk(name: str) -> ca.MX:
            b = X.blocks[name]
            return ca.reshape(xp[b.offset:b.offset + b.size], b.rows, b.cols)

        def par(name: str) -> ca.MX:
            return p[P.slices[name]]

        costs = par("costs")
        g, lbg, ubg = [], [], []
        self.g_names: list[tuple[str, int]] = []  # (label, length) in g order

        def add(label: str, expr: ca.MX, lo: Any, hi: Any) -> None:
            n = expr.numel()
            expr = ca.reshape(expr, n, 1)
            g.append(expr)
            self.g_parts.append((label, expr))
            lbg.append(np.broadcast_to(np.asarray(lo, float), (n,)).copy())
            ubg.append(np.broadcast_to(np.asarray(hi, float), (n,)).copy())
            self.g_names.append((label, n))

        J = 0  # every cost term but the knot functions' running costs
        J_knots = 0
        self.g_parts: list[tuple[str, ca.MX]] = []
        self.knot_terms: list[KnotTerm] = []
        terr = par("terrain")
        bars = par("bars")
        self.knot_fns = []
        self.knot_labels: list[list[tuple[str, str]]] = []
        for ph in self.phases:
            i, K, N = ph.index, ph.K, ph.N
            Q, V, A, TAU = blk(f"q{i}"), blk(f"v{i}"), blk(f"a{i}"), blk(f"tau{i}")
            LAM = blk(f"lam{i}") if ph.nc else ca.MX(0, K)
            anchor = blk(f"anchor{i}") if ph.nc else ca.MX(0, 1)
            T = blk(f"T{i}")
            h = T / N
            F, lo, hi = self._knot_function(ph, trick)
            self.knot_fns.append((F, lo, hi))
            prm = ca.vertcat(costs[0], costs[1], costs[6], terr, bars)
            Fm = F.map(K, "serial")
            G, L = Fm(Q, V, A, TAU, LAM, ca.repmat(anchor, 1, K), ca.repmat(prm, 1, K))
            add(f"knots{i}", G, np.tile(lo, K), np.tile(hi, K))
            wtrap = np.ones(K)
            wtrap[0] = wtrap[-1] = 0.5
            J_knots = J_knots + h * ca.mtimes(L, ca.DM(wtrap))
            z = ca.vertcat(Q, V, A, TAU, LAM, ca.repmat(anchor, 1, K), ca.repmat(T, 1, K))
            self.knot_terms.append(KnotTerm(i, F, f"knots{i}", wtrap, prm, z))
            # integration defects (scaled like the variables)
            dv = V[:, 1:] - V[:, :-1] - h / 2 * (A[:, :-1] + A[:, 1:])
            dq = Q[:, 1:] - Q[:, :-1] - h * V[:, :-1] - h ** 2 / 6 * (2 * A[:, :-1] + A[:, 1:])
            add(f"defect_v{i}", dv / 5.0, 0.0, 0.0)
            # joint speed limits also at a third and two thirds of each interval (qd is quadratic
            # between knots; two inner samples keep its peak closer to the limit than one midpoint)
            v13 = V[3:, :-1] + h / 18 * (5 * A[3:, :-1] + A[3:, 1:])
            v23 = V[3:, :-1] + h / 9 * (4 * A[3:, :-1] + 2 * A[3:, 1:])
            vlim = np.tile(np.asarray(r.velocity_limit), 2 * N)
            add(f"speed_mid{i}", ca.vertcat(v13, v23), -vlim, vlim)
            # and joint position limits at interval midpoints (q is cubic between knots)
            qmid = (Q[3:, :-1] + h / 2 * V[3:, :-1] + h ** 2 / 8 * A[3:, :-1]
                    + h ** 2 / 48 * (A[3:, 1:] - A[3:, :-1]))
            add(f"range_mid{i}", qmid, np.tile(np.asarray(r.joint_lower), N),
                np.tile(np.asarray(r.joint_upper), N))
            add(f"defect_q{i}", dq, 0.0, 0.0)
            # torque rate and contact-force smoothness
            peak = ca.DM(np.asarray(r.peak_torque))
            dtau = (TAU[:, 1:] - TAU[:, :-1]) / ca.repmat(peak, 1, N)
            J = J + costs[2] * 0.01 * ca.sumsqr(dtau) / h
            if ph.nc:
                mg = r.total_mass * r.gravity
                dl = (LAM[:, 1:] - LAM[:, :-1]) / mg
                J = J + costs[5] * 0.01 * ca.sumsqr(dl) / h
            # phase transition
            if i > 0:
                Qp, Vp = blk(f"q{i - 1}"), blk(f"v{i - 1}")
                add(f"link_q{i}", Q[:, 0] - Qp[:, -1], 0.0, 0.0)
                if ph.impact:
                    imp = blk(f"imp{i}")
                    M = self._mass_matrix_fn(Q[:, 0])
                    res = ca.mtimes(M, V[:, 0] - Vp[:, -1])
                    fr = []
                    for c, row in enumerate(ph.contacts):
                        res = res - ca.mtimes(self._jac_fn(row.point)(Q[:, 0]).T, imp[2 * c:2 * c + 2])
                        fr.append(ca.vertcat(row.mu * imp[2 * c + 1] - imp[2 * c],
                                             row.mu * imp[2 * c + 1] + imp[2 * c]))
                    add(f"impact{i}", res / r.total_mass, 0.0, 0.0)
                    rest = []
                    for row in ph.contacts:  # the stance points are at rest after the impact
                        pv = ca.mtimes(self._jac_fn(row.point)(Q[:, 0]), V[:, 0])
                        rest.append(pv if row.hold_x else pv[1])
                    add(f"impact_rest{i}", ca.vertcat(*rest) / 5.0, 0.0, 0.0)
                    add(f"impact_cone{i}", ca.vertcat(*fr) / r.total_mass, 0.0, INF)
                else:
                    add(f"link_v{i}", (V[:, 0] - Vp[:, -1]) / 5.0, 0.0, 0.0)
        # keyframes. Soft: the knots around the keyframe time are pulled towards the pose with
        # the interpolation weights (a diagonal Hessian: no coupling between knots, so the KKT
        # system keeps its banded structure). Hard: the interpolated pose equals the keyframe.
        for kl in self.keyframes:
            Q = blk(f"q{kl.phase}")
            w = par(f"kf{kl.index}.interp")
            target = par(f"kf{kl.index}.value")
            if kl.hard:
                add(f"keyframe{kl.index}", ca.mtimes(Q, w)[kl.coords] - target, 0.0, 0.0)
            else:
                dev = Q[kl.coords, :] - ca.repmat(target, 1, Q.shape[1])
                J = J + costs[3] * par(f"kf{kl.index}.weight") * ca.mtimes(ca.sum1(dev ** 2), w)
        # reach goals: the point's position interpolated between knots reaches the target
        for rl in self.reaches:
            Q = blk(f"q{rl.phase}")
            pts = self._point_fn(rl.point).map(Q.shape[1])(Q)
            err = ca.mtimes(pts, par(f"reach{rl.index}.interp")) - par(f"reach{rl.index}.target")
            if rl.hard:
                add(f"reach{rl.index}", err, 0.0, 0.0)
            else:
                J = J + 100.0 * ca.sumsqr(err)
        first, last = self.phases[0], self.phases[-1]
        q_start = blk(f"q{first.index}")[:, 0]
        q_end = blk(f"q{last.index}")[:, -1]
        if trick.goals.rotation is not None:
            add("rotation", q_end[2] - q_start[2] - par("rotation"), 0.0, 0.0)
        add("landing_x", q_end[0], -INF, INF)  # bounds set per solve
        J = J + costs[4] * ca.sumsqr(par("landing_mask") * (q_end - par("landing_pose")))
        self._g_lb = np.concatenate(lbg)
        self._g_ub = np.concatenate(ubg)
        self.nlp = {"x": xs, "p": p, "f": J_knots + J, "g": ca.vertcat(*g)}
        self.f_rest = J  # the objective without the knot running costs (see derivatives.py)
        self._xs, self._p = xs, p

    # --- cached small functions ---------------------------------------------------
    def _mass_matrix_fn(self, q: ca.MX) -> ca.MX:
        from .compiled import functions_for

        return functions_for(self.robot).crba(q)

    def _jac_fn(self, point: str) -> ca.Function:
        from .compiled import functions_for

        F = functions_for(self.robot).point(point)
        qs = ca.SX.sym("q", self.robot.nq)
        return ca.Function(f"J_{point}", [qs], [F(qs, ca.SX.zeros(self.robot.nq))[2]])

    def _point_fn(self, point: str) -> ca.Function:
        qs = ca.SX.sym("q", self.robot.nq)
        return ca.Function(f"p_{point}", [qs], [dyn.point_position(self.robot, qs, point)])

    # --- numbers for a solve ------------------------------------------------------
    def parameters(self, trick: Trick) -> np.ndarray:
        """The parameter vector for this trick (must share this problem's structure)."""
        r, P = self.robot, self.p
        vals = np.zeros(P.n)
        c = trick.costs
        vals[P.slices["costs"]] = [c.effort, c.work, c.torque_rate, c.keyframes, c.landing_pose,
                                   c.force_smoothness, 1e-3]
        terr = [trick.terrain.ground]
        for b in trick.terrain.boxes:
            terr += [b.x_min, b.x_max, b.height]
        vals[P.slices["terrain"]] = terr
        vals[P.slices["bars"]] = [v for b in trick.terrain.bars for v in (b.x, b.z, b.radius)]
        vals[P.slices["rotation"]] = trick.goals.rotation or 0.0
        pose = np.zeros(r.nq)
        mask = np.zeros(r.nq)
        for name, value in trick.landing_pose.items():
            pose[r.coord_index(name)] = value
            mask[r.coord_index(name)] = 1.0
        vals[P.slices["landing_pose"]] = pose
        vals[P.slices["landing_mask"]] = mask
        for kl, kf in zip(self.keyframes, trick.keyframes):
            phase, frac = locate_phase(trick, kf.phase, kf.time)
            vals[P.slices[f"kf{kl.index}.value"]] = [kf.pose[n] for n in kf.pose]
            vals[P.slices[f"kf{kl.index}.interp"]] = interp_weights(self.phases[phase].N, frac)
            vals[P.slices[f"kf{kl.index}.weight"]] = kf.weight
        targets = {t.name: t for t in trick.terrain.targets}
        for rl, rc in zip(self.reaches, trick.goals.reach):
            if rc.target not in targets:
                raise TrickSpecError(f"goals.reach[{rl.index}].target: unknown target {rc.target!r}")
            t = targets[rc.target]
            vals[P.slices[f"reach{rl.index}.target"]] = [t.x, t.z]
            vals[P.slices[f"reach{rl.index}.interp"]] = interp_weights(self.phases[rl.phase].N, rc.time)
        return vals

    def bounds(self, trick: Trick) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """(lbx, ubx, lbg, ubg) in scaled variables for this trick."""
        X = self.x
        lb, ub = X.lb.copy(), X.ub.copy()
        for ph, spec in zip(self.phases, trick.phases):
            b = X.blocks[f"T{ph.index}"]
            if spec.free:
                lb[b.offset], ub[b.offset] = spec.duration_min, spec.duration_max
            else:
                lb[b.offset] = ub[b.offset] = spec.duration
        nq = self.robot.nq
        if trick.start_at_rest:
            b = X.blocks[f"v{self.phases[0].index}"]
            lb[b.offset:b.offset + nq] = 0.0
            ub[b.offset:b.offset + nq] = 0.0
        if trick.end_at_rest:
            # at rest: every velocity zero and the joints not accelerating. The base acceleration is
            # left to the equations of motion: with the feet held it follows from the joints', and
            # fixing it too made the constraints dependent (multipliers 1e13-1e18, IPOPT ending in
            # Error_In_Step_Computation on the backflip and box jump).
            last = self.phases[-1]
            for name, first in ((f"v{last.index}", 0), (f"a{last.index}", 3)):
                b = X.blocks[name]
                end = b.offset + b.size
                lb[end - nq + first:end] = 0.0
                ub[end - nq + first:end] = 0.0
        # Liftoff: a point that leaves its surface when its stance phase ends carries no force at
        # that instant (the normal force of a unilateral contact falls to zero as it opens). Left
        # free, the last knot's force is a push the tracked robot cannot reproduce: it lifted off
        # 5-8 ms early and left with 2.5 % less momentum than planned.
        for ph, nxt in zip(self.phases[:-1], self.phases[1:]):
            if not ph.nc:
                continue
            staying = {c.point for c in nxt.contacts}
            b = X.blocks[f"lam{ph.index}"]
            for c, row in enumerate(ph.contacts):
                if row.point not in staying:
                    k = b.offset + b.size - 2 * ph.nc + 2 * c
                    lb[k:k + 2] = 0.0
                    ub[k:k + 2] = 0.0
        s = X.scale
        lbg, ubg = self._g_lb.copy(), self._g_ub.copy()
        if trick.goals.landing_x is not None:
            k = self.g_offset("landing_x")
            lbg[k], ubg[k] = trick.goals.landing_x
        return lb / s, ub / s, lbg, ubg

    def g_offset(self, label: str) -> int:
        k = 0
        for name, n in self.g_names:
            if name == label:
                return k
            k += n
        raise KeyError(label)

    # --- decoding -----------------------------------------------------------------
    def unpack(self, xs: np.ndarray) -> dict[str, np.ndarray]:
        """Scaled decision vector -> physical blocks by name."""
        xp = np.asarray(xs, float).reshape(-1) * self.x.scale
        return {name: b.take(xp) for name, b in self.x.blocks.items()}

    def pack(self, blocks: dict[str, np.ndarray]) -> np.ndarray:
        """Physical blocks by name -> scaled decision vector (missing blocks are zero)."""
        xp = np.zeros(self.x.n)
        for name, b in self.x.blocks.items():
            if name in blocks:
                xp[b.offset:b.offset + b.size] = np.asarray(blocks[name], float).reshape(b.rows, b.cols).T.reshape(-1)
        return xp / self.x.scale


def interp_weights(N: int, fraction: float) -> np.ndarray:
    """Weights over N + 1 knots that linearly interpolate a value at ``fraction`` (0..1) of the phase."""
    w = np.zeros(N + 1)
    s = min(max(float(fraction), 0.0), 1.0) * N
    k = min(int(np.floor(s)), N - 1) if N > 0 else 0
    u = s - k
    w[k] += 1.0 - u
    if N > 0:
        w[k + 1] += u
    return w


def locate_phase(trick: Trick, phase: str | None, time: float) -> tuple[int, float]:
    """(phase index, fraction within the phase) for a keyframe time (see :class:`Keyframe`)."""
    if phase is not None:
        return trick.phase_index(phase), float(time)
    t0 = 0.0
    for i, ph in enumerate(trick.phases):
        if time <= t0 + ph.duration + 1e-12 or i == len(trick.phases) - 1:
            return i, (time - t0) / ph.duration
        t0 += ph.duration
    raise AssertionError("unreachable")


def structure_key(trick: Trick, robot: Robot) -> tuple:
    """What must match for a built problem to serve an edited trick (see module docstring)."""
    return (
        robot.name, robot.nq, robot.coord_names,
        tuple((p.name, p.knots, tuple((c.point, c.surface) for c in p.contacts)) for p in trick.phases),
        tuple(b.name for b in trick.terrain.boxes), len(trick.terrain.bars),
        tuple((locate_phase(trick, k.phase, k.time)[0], tuple(k.pose), k.hard) for k in trick.keyframes),
        tuple((r.point, r.phase, r.hard) for r in trick.goals.reach),
        trick.goals.rotation is not None,
    )
