"""Rigid-body dynamics of a planar floating-base tree (Featherstone, RBDA 2008).

* :func:`rnea` - recursive Newton-Euler, inverse dynamics (RBDA Table 5.1)
* :func:`crba` - composite rigid body algorithm, joint-space inertia matrix (RBDA Table 6.2)
* :func:`aba`  - articulated body algorithm, forward dynamics (RBDA Table 7.1)

Equation of motion in generalized coordinates q = (x, z, pitch, joints):
``M(q) qdd + C(q, qd) qd + g(q) = tau + sum_k J_k(q)^T f_k``, where tau has zeros in its
three base entries for an unactuated floating base, and f_k are world-frame point forces.
Gravity acts along -z (Featherstone's trick: the world is given an upward acceleration g).

Every function accepts NumPy arrays or CasADi SX/MX vectors and returns the same kind.
Units: SI, angles in rad; generalized forces in N (base x, z) and N m (pitch, joints).
"""
from __future__ import annotations

from typing import Any

from .kinematics import (  # noqa: F401  (re-exported: one place to import dynamics from)
    body_poses, body_velocities, center_of_mass, com_velocity, joint_xforms, link_poses,
    point_jacobian, point_jdot_qdot, point_position, point_velocity, _joint_motion, _rotate,
)
from .robot import Robot
from .spatial import (
    body_inertia, congruence, crf, crm, inertia_matrix, inertia_times, inertia_to_parent,
    mat_vec, ops_for, vadd,
)

Array = Any


def _dot_s(kind: str, f: tuple) -> Any:
    """S_i^T f for a joint of this kind."""
    return f[0] if kind == "ry" else (f[1] if kind == "px" else f[2])


def _inertias(robot: Robot) -> list[tuple]:
    tree = robot.tree
    return [body_inertia(tree.mass[i], tree.com[i], tree.inertia[i]) for i in range(tree.nb)]


def rnea(robot: Robot, q: Array, qd: Array, qdd: Array, gravity: bool = True) -> Array:
    """Inverse dynamics: the generalized forces tau (nv) that produce qdd at (q, qd).

    ``rnea(q, qd, 0)`` is the bias vector C(q, qd) qd + g(q). With ``gravity=False`` the
    gravity term is left out.
    """
    ops = ops_for(q, qd, qdd)
    tree = robot.tree
    nb = tree.nb
    qe, qde, qdde = ops.entries(q, nb), ops.entries(qd, nb), ops.entries(qdd, nb)
    X = joint_xforms(robot, qe, ops)
    inertia = _inertias(robot)
    a_world = (0.0, 0.0, robot.gravity if gravity else 0.0)
    v, a, f = [], [], []
    for i in range(nb):
        lam = tree.parent[i]
        kind = tree.kind[i]
        vl, al = (v[lam], a[lam]) if lam >= 0 else ((0.0, 0.0, 0.0), a_world)
        vj = _joint_motion(kind, qde[i])
        vi = vadd(X[i].apply(vl), vj)
        ai = vadd(vadd(X[i].apply(al), _joint_motion(kind, qdde[i])), crm(vi, vj))
        v.append(vi)
        a.append(ai)
        f.append(vadd(inertia_times(inertia[i], ai), crf(vi, inertia_times(inertia[i], vi))))
    tau = [None] * nb
    for i in reversed(range(nb)):
        tau[i] = _dot_s(tree.kind[i], f[i])
        lam = tree.parent[i]
        if lam >= 0:
            f[lam] = vadd(f[lam], X[i].apply_transpose(f[i]))
    return ops.vector(tau)


def bias_forces(robot: Robot, q: Array, qd: Array) -> Array:
    """C(q, qd) qd + g(q) (nv), that is rnea(q, qd, 0)."""
    return rnea(robot, q, qd, [0.0] * robot.nv)


def gravity_forces(robot: Robot, q: Array) -> Array:
    """g(q) (nv): generalized gravity forces, rnea(q, 0, 0)."""
    zeros = [0.0] * robot.nv
    return rnea(robot, q, zeros, zeros)


def crba(robot: Robot, q: Array) -> Array:
    """Joint-space inertia matrix M(q) (nv x nv), symmetric positive definite."""
    ops = ops_for(q)
    tree = robot.tree
    nb = tree.nb
    X = joint_xforms(robot, ops.entries(q, nb), ops)
    Ic = _inertias(robot)
    for i in reversed(range(nb)):
        lam = tree.parent[i]
        if lam >= 0:
            pi = inertia_to_parent(Ic[i], X[i])
            Ic[lam] = tuple(Ic[lam][k] + pi[k] for k in range(4))
    H = [[0.0] * nb for _ in range(nb)]
    for i in range(nb):
        F = inertia_times(Ic[i], _joint_motion(tree.kind[i], 1.0))
        H[i][i] = _dot_s(tree.kind[i], F)
        j = i
        while tree.parent[j] >= 0:
            F = X[j].apply_transpose(F)
            j = tree.parent[j]
            H[i][j] = H[j][i] = _dot_s(tree.kind[j], F)
    return ops.matrix(H)


def aba(robot: Robot, q: Array, qd: Array, tau: Array) -> Array:
    """Forward dynamics: qdd (nv) under generalized forces tau (nv) and gravity.

    Point forces enter as ``tau + J^T f`` (see :func:`point_jacobian`).
    """
    ops = ops_for(q, qd, tau)
    tree = robot.tree
    nb = tree.nb
    qe, qde, taue = ops.entries(q, nb), ops.entries(qd, nb), ops.entries(tau, nb)
    X = joint_xforms(robot, qe, ops)
    inertia = _inertias(robot)
    v, c, IA, pA = [], [], [], []
    for i in range(nb):
        lam = tree.parent[i]
        vj = _joint_motion(tree.kind[i], qde[i])
        vi = vadd(X[i].apply(v[lam]), vj) if lam >= 0 else vj
        v.append(vi)
        c.append(crm(vi, vj))
        IA.append(inertia_matrix(inertia[i]))
        pA.append(crf(vi, inertia_times(inertia[i], vi)))
    U, D, u = [None] * nb, [None] * nb, [None] * nb
    for i in reversed(range(nb)):
        kind = tree.kind[i]
        col = 0 if kind == "ry" else (1 if kind == "px" else 2)
        U[i] = (IA[i][0][col], IA[i][1][col], IA[i][2][col])
        D[i] = U[i][col]
        u[i] = taue[i] - pA[i][col]
        lam = tree.parent[i]
        if lam >= 0:
            Ia = [[IA[i][r][k] - U[i][r] * U[i][k] / D[i] for k in range(3)] for r in range(3)]
            Iac = mat_vec(Ia, c[i])
            pa = tuple(pA[i][r] + Iac[r] + U[i][r] * u[i] / D[i] for r in range(3))
            P = congruence(Ia, X[i])
            IA[lam] = [[IA[lam][r][k] + P[r][k] for k in range(3)] for r in range(3)]
            pA[lam] = vadd(pA[lam], X[i].apply_transpose(pa))
    a: list = [None] * nb
    qdd: list = [None] * nb
    a_world = (0.0, 0.0, robot.gravity)
    for i in range(nb):
        lam = tree.parent[i]
        ap = vadd(X[i].apply(a[lam] if lam >= 0 else a_world), c[i])
        qdd[i] = (u[i] - (U[i][0] * ap[0] + U[i][1] * ap[1] + U[i][2] * ap[2])) / D[i]
        a[i] = vadd(ap, _joint_motion(tree.kind[i], qdd[i]))
    return ops.vector(qdd)


def centroidal_momentum(robot: Robot, q: Array, qd: Array) -> Array:
    """(k, px, pz): angular momentum about the COM (+y, kg m^2/s) and linear momentum (kg m/s), world frame."""
    ops = ops_for(q, qd)
    tree = robot.tree
    qe, qde = ops.entries(q, tree.nb), ops.entries(qd, tree.nb)
    poses = body_poses(robot, qe, ops)
    v = body_velocities(robot, qe, qde, ops)
    com = center_of_mass(robot, q)
    gx, gz = com[0], com[1]
    k = px = pz = 0.0
    for i in range(tree.nb):
        m = tree.mass[i]
        if m == 0.0:
            continue
        w, ux, uz = v[i]
        cx, cz = tree.com[i]
        x, z, cth, sth = poses[i]
        rx = x + cth * cx + sth * cz - gx
        rz = z - sth * cx + cth * cz - gz
        vx, vz = _rotate(poses[i], (ux + w * cz, uz - w * cx))
        k = k + tree.inertia[i] * w + m * (rz * vx - rx * vz)
        px = px + m * vx
        pz = pz + m * vz
    return ops.vector((k, px, pz))


def kinetic_energy(robot: Robot, q: Array, qd: Array) -> Any:
    """Kinetic energy (J): sum over bodies of 1/2 v_i^T I_i v_i."""
    ops = ops_for(q, qd)
    tree = robot.tree
    v = body_velocities(robot, ops.entries(q, tree.nb), ops.entries(qd, tree.nb), ops)
    inertia = _inertias(robot)
    T = 0.0
    for i in range(tree.nb):
        h = inertia_times(inertia[i], v[i])
        T = T + 0.5 * (h[0] * v[i][0] + h[1] * v[i][1] + h[2] * v[i][2])
    return T


def potential_energy(robot: Robot, q: Array) -> Any:
    """Gravitational potential energy (J), zero at world height z = 0."""
    com = center_of_mass(robot, q)
    return robot.total_mass * robot.gravity * com[1]
