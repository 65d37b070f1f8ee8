"""Stance control after touchdown: a QP over accelerations, contact forces and torques.

At each control tick, with the stance points c that touch, the controller solves (``qpsolvers``
with the ``quadprog`` backend, a dense active-set QP solver)::

    minimize   |W (qdd - a_des)|^2 + w_c |J_c qdd + Jd_c qd - a_c|^2 + w_f |f|^2 + w_t |tau / peak|^2
    over       qdd (nq), f (2 per point, world frame), tau (nj)
    subject to M(q) qdd + h(q, qd) = S^T tau + J_c^T f          (equations of motion)
               f_z >= 0,  |f_x| <= mu_c f_z                       (friction cone, planar: exact)
               tau_lo(qd) <= tau <= tau_hi(qd)                    (the motor envelope)

with the desired acceleration of every coordinate (base included) ``a_des = qdd_ref + Kp (q_ref
- q) + Kd (qd_ref - qd)``. The stance points are the landing points on the ground or less than
1 cm above it: ``a_c = -kp_c gap n - kd_c v`` brings a lifted toe or heel back down (a foot
rocking on its edges) and keeps a touching one put. That is a heavily weighted cost, not an
equality: a toe and a heel on one rigid foot give dependent rows, which an
equality-constrained active-set solver rejects. The applied torque is the QP's ``tau``.

The reference: right after touchdown, the planned landing phase replayed from the actual
touchdown time; then the final planned pose, held. In both, the planned base position is moved by
the offset between where the feet actually are and where the plan put them, so the controller
keeps the planned posture over the actual feet instead of dragging the body to the planned spot.

:func:`static_contact_forces` gives the statics of a standing robot (least squares,
minimum norm), for checks.
"""
from __future__ import annotations

from typing import Sequence

import numpy as np

from .compiled import functions_for
from .contact_sim import inertial_params, plant_function
from .robot import Robot

__all__ = ["StanceQP", "static_contact_forces", "QPFailed", "feet_offset"]


class QPFailed(RuntimeError):
    """The stance QP had no solution (e.g. contradictory bounds)."""


def static_contact_forces(robot: Robot, q: np.ndarray, points: Sequence[str],
                          params: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Statics at q with ``points`` touching: ``(f (len(points), 2) N world frame, tau_g (nj) N m)``.

    Statics of a floating base: ``g(q) = S^T tau + sum_c J_c^T f_c``. The three base rows fix f up
    to internal forces; this returns the minimum-norm least-squares f and ``tau_g = g_j - J_cj^T f``.
    """
    params = inertial_params(robot) if params is None else params
    q = np.asarray(q, dtype=float)
    _, g, _, J = plant_function(robot)(q, np.zeros(robot.nq), params)
    g, J = g.full().reshape(-1), J.full()
    if not points:
        return np.zeros((0, 2)), g[3:].copy()
    idx = [robot.point_names.index(p) for p in points]
    Jc = np.vstack([J[2 * i:2 * i + 2] for i in idx])
    f, *_ = np.linalg.lstsq(Jc[:, :3].T, g[:3], rcond=None)
    tau_g = g[3:] - Jc[:, 3:].T @ f
    return f.reshape(-1, 2), tau_g


class StanceQP:
    """The stance QP of the module docstring for ``robot`` (the controller's model).

    kp, kd (1/s^2, 1/s): task gains per coordinate (nq); weights (nq): W^2 per coordinate.
    mu_margin: the friction used is the point's coefficient times this (< 1 keeps a margin).
    """

    def __init__(self, robot: Robot, *, kp: Sequence[float] | None = None, kd: Sequence[float] | None = None,
                 weights: Sequence[float] | None = None, contact_weight: float = 1e4, force_weight: float = 1e-6,
                 torque_weight: float = 1e-3, mu_margin: float = 0.8) -> None:
        import qpsolvers  # noqa: F401  (fail early with a clear ImportError)

        self.robot = robot
        n = robot.nq
        self.kp = np.full(n, 150.0) if kp is None else np.asarray(kp, dtype=float)
        self.kd = 2.0 * np.sqrt(self.kp) if kd is None else np.asarray(kd, dtype=float)
        if weights is None:
            weights = np.ones(n)
            weights[:2] = 10.0   # base position
            weights[2] = 10.0    # base pitch
        self.w = np.asarray(weights, dtype=float)
        self.wc, self.wf, self.wt = float(contact_weight), float(force_weight), float(torque_weight)
        self.mu_margin = float(mu_margin)
        self.contact_kp, self.contact_kd = 400.0, 40.0
        self.params = inertial_params(robot)
        self.fn = plant_function(robot)
        self.F = functions_for(robot)
        self.peak = np.array(robot.peak_torque, dtype=float)
        self.last_forces: np.ndarray = np.zeros((0, 2))

    def torque(self, q: np.ndarray, qd: np.ndarray, points: Sequence[str], q_ref: np.ndarray,
               qd_ref: np.ndarray, qdd_ref: np.ndarray, tau_bounds: tuple[np.ndarray, np.ndarray],
               gaps: Sequence[float] | None = None) -> np.ndarray:
        """Joint torques (nj, N m) at (q, qd) with ``points`` on (or just above) the ground, tracking
        the reference. ``gaps`` (m, one per point, default 0): a point above the ground is servoed down,
        its desired normal acceleration being ``-contact_kp * gap - contact_kd * v_n``."""
        from qpsolvers import solve_qp

        r = self.robot
        n, nj, m = r.nq, r.nj, len(points)
        M, h, _, _ = self.fn(q, qd, self.params)
        M, h = M.full(), h.full().reshape(-1)
        a_des = qdd_ref + self.kp * (q_ref - q) + self.kd * (qd_ref - qd)
        nz = n + 2 * m + nj
        P = np.zeros((nz, nz))
        c = np.zeros(nz)
        P[:n, :n] += np.diag(self.w)
        c[:n] -= self.w * a_des
        Jc = np.zeros((2 * m, n))
        Jd = np.zeros(2 * m)
        for k, name in enumerate(points):
            _, v, J, jd = self.F.point(name)(q, qd)
            Jc[2 * k:2 * k + 2] = J.full()
            v = v.full().reshape(-1)
            gap = 0.0 if gaps is None else float(gaps[k])
            # J qdd + Jd qd = a_c: a point on the ground stays put, one just above it comes down
            Jd[2 * k:2 * k + 2] = jd.full().reshape(-1) - np.array(
                [-self.contact_kd * v[0], -self.contact_kp * gap - self.contact_kd * v[1]])
        if m:
            P[:n, :n] += self.wc * Jc.T @ Jc
            c[:n] += self.wc * Jc.T @ Jd
        P[n:n + 2 * m, n:n + 2 * m] += self.wf * np.eye(2 * m)
        P[n + 2 * m:, n + 2 * m:] += np.diag(self.wt / self.peak ** 2)
        P += 1e-9 * np.eye(nz)
        A = np.zeros((n, nz))
        A[:, :n] = M
        A[:, n:n + 2 * m] = -Jc.T
        A[3:, n + 2 * m:] = -np.eye(nj)
        b = -h
        G, hv = [], []
        for k, name in enumerate(points):
            mu = (r.point(name).friction or 0.5) * self.mu_margin
            ix, iz = n + 2 * k, n + 2 * k + 1
            for row in ((iz, -1.0, None, 0.0), (ix, 1.0, iz, -mu), (ix, -1.0, iz, -mu)):
                g = np.zeros(nz)
                g[row[0]] = row[1]
                if row[2] is not None:
                    g[row[2]] = row[3]
                G.append(g)
                hv.append(0.0)
        lo, hi = tau_bounds
        for j in range(nj):
            g = np.zeros(nz)
            g[n + 2 * m + j] = 1.0
            G.append(g)
            hv.append(hi[j])
            G.append(-g)
            hv.append(-lo[j])
        z = solve_qp(P, c, np.array(G), np.array(hv), A, b, solver="quadprog")
        if z is None or not np.all(np.isfinite(z)):
            raise QPFailed("the stance QP has no solution")
        self.last_forces = z[n:n + 2 * m].reshape(-1, 2)
        return z[n + 2 * m:]


def feet_offset(robot: Robot, q_actual: np.ndarray, q_plan: np.ndarray, points: Sequence[str]) -> np.ndarray:
    """Mean (x, z) offset (m) of ``points`` between the actual and the planned configuration."""
    if not points:
        return np.zeros(2)
    F = functions_for(robot)
    d = [F.point(p)(q_actual, np.zeros(robot.nq))[0].full().reshape(-1)
         - F.point(p)(q_plan, np.zeros(robot.nq))[0].full().reshape(-1) for p in points]
    out = np.mean(d, axis=0)
    return out if np.all(np.isfinite(out)) else np.zeros(2)

