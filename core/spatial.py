"""Planar spatial vector algebra (Featherstone, Rigid Body Dynamics Algorithms, 2008, sec. 2.16).

Motion in the world x-z plane with rotation about +y. A planar motion vector is
``m = (w, ux, uz)``: angular velocity about +y (rad/s) and the linear velocity (m/s) of the
body point at the frame origin, in that frame's coordinates. A planar force vector is
``f = (n, fx, fz)``: moment about +y at the frame origin (N m) and force (N).

Everything here works on plain scalars, so one implementation serves floats and CasADi
SX/MX scalars alike (see :class:`Ops`). Vectors are 3-tuples; inertias are given either as
``(m, hx, hz, J)`` (mass, first moment of mass m*c, rotational inertia about the frame
origin) or, for articulated inertias, as a symmetric 3x3 nested list.
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Callable, Sequence

import numpy as np

try:  # CasADi is a hard dependency, but keep numeric use importable without it.
    import casadi as ca
except ImportError:  # pragma: no cover
    ca = None

Scalar = Any
Mvec = tuple  # (w, ux, uz)
Fvec = tuple  # (n, fx, fz)


def is_symbolic(*values: Any) -> bool:
    """True if any argument is a CasADi SX or MX expression."""
    if ca is None:
        return False
    return any(isinstance(v, (ca.SX, ca.MX)) for v in values)


@dataclass(frozen=True)
class Ops:
    """Scalar functions and array builders for one backend (NumPy floats or CasADi symbols)."""

    symbolic: bool
    sin: Callable
    cos: Callable

    def entries(self, x: Any, n: int) -> list:
        """The n scalar entries of a vector-like argument."""
        if self.symbolic and isinstance(x, (ca.SX, ca.MX)):
            return [x[i] for i in range(n)]
        arr = np.asarray(x, dtype=float).reshape(-1)
        if arr.shape[0] != n:
            raise ValueError(f"expected a vector of length {n}, got {arr.shape[0]}")
        return [float(v) for v in arr]

    def vector(self, items: Sequence) -> Any:
        if self.symbolic:
            return ca.vertcat(*items)
        return np.array([float(v) for v in items])

    def matrix(self, rows: Sequence[Sequence]) -> Any:
        if self.symbolic:
            return ca.vertcat(*[ca.horzcat(*row) for row in rows])
        return np.array([[float(v) for v in row] for row in rows])


NUMERIC = Ops(False, math.sin, math.cos)
SYMBOLIC = Ops(True, ca.sin, ca.cos) if ca is not None else None


def ops_for(*values: Any) -> Ops:
    """The backend for these arguments: symbolic if any is a CasADi expression."""
    return SYMBOLIC if is_symbolic(*values) else NUMERIC


# ----- transforms -------------------------------------------------------------
@dataclass(frozen=True)
class Xform:
    """Planar coordinate transform from frame A (parent) to frame B (child).

    B's origin is at ``(px, pz)`` in A coordinates and B's axes are A's turned by an angle
    with cosine ``c`` and sine ``s`` about +y (body-to-A rotation E = [[c, s], [-s, c]]).
    """

    c: Scalar
    s: Scalar
    px: Scalar
    pz: Scalar

    def apply(self, m: Mvec) -> Mvec:
        """X m: a motion vector in A coordinates expressed in B coordinates."""
        w, vx, vz = m
        ux = vx + w * self.pz
        uz = vz - w * self.px
        return (w, self.c * ux - self.s * uz, self.s * ux + self.c * uz)

    def apply_transpose(self, f: Fvec) -> Fvec:
        """X^T f: a force vector in B coordinates expressed in A coordinates."""
        n, fx, fz = f
        ax = self.c * fx + self.s * fz
        az = -self.s * fx + self.c * fz
        return (n + self.pz * ax - self.px * az, ax, az)

    def matrix(self) -> list:
        """The 3x3 matrix of :meth:`apply`, as nested lists."""
        c, s, px, pz = self.c, self.s, self.px, self.pz
        return [[1.0, 0.0, 0.0], [c * pz + s * px, c, -s], [s * pz - c * px, s, c]]


def crm(v: Mvec, m: Mvec) -> Mvec:
    """Motion cross product v x m."""
    w, ux, uz = v
    mw, mx, mz = m
    return (0.0, w * mz - mw * uz, -w * mx + mw * ux)


def crf(v: Mvec, f: Fvec) -> Fvec:
    """Force cross product v x* f."""
    w, ux, uz = v
    n, fx, fz = f
    return (uz * fx - ux * fz, w * fz, -w * fx)


# ----- rigid-body inertia as (m, hx, hz, J) -----------------------------------
def body_inertia(mass: float, com: Sequence[float], inertia_com: float) -> tuple:
    """(m, hx, hz, J) of a body: J is the inertia about the frame origin (parallel-axis theorem)."""
    cx, cz = com
    return (mass, mass * cx, mass * cz, inertia_com + mass * (cx * cx + cz * cz))


def inertia_times(inertia: tuple, v: Mvec) -> Fvec:
    """I v: the momentum of a body with inertia (m, hx, hz, J) moving with v."""
    m, hx, hz, J = inertia
    w, ux, uz = v
    return (J * w + hz * ux - hx * uz, m * ux + w * hz, m * uz - w * hx)


def inertia_to_parent(inertia: tuple, X: Xform) -> tuple:
    """X^T I X for (m, hx, hz, J): the same body's inertia in parent coordinates."""
    m, hx, hz, J = inertia
    ex = X.c * hx + X.s * hz  # E h
    ez = -X.s * hx + X.c * hz
    return (m, m * X.px + ex, m * X.pz + ez,
            J + m * (X.px * X.px + X.pz * X.pz) + 2.0 * (X.px * ex + X.pz * ez))


def inertia_matrix(inertia: tuple) -> list:
    """The symmetric 3x3 matrix of a rigid-body inertia (m, hx, hz, J)."""
    m, hx, hz, J = inertia
    return [[J, hz, -hx], [hz, m, 0.0], [-hx, 0.0, m]]


# ----- 3x3 helpers for articulated inertias -----------------------------------
def mat_vec(A: list, v: Sequence) -> tuple:
    return tuple(A[r][0] * v[0] + A[r][1] * v[1] + A[r][2] * v[2] for r in range(3))


def congruence(A: list, X: Xform) -> list:
    """X^T A X for a symmetric 3x3 A (child coordinates) -> parent coordinates."""
    Xm = X.matrix()
    AX = [[sum(A[r][k] * Xm[k][col] for k in range(3)) for col in range(3)] for r in range(3)]
    out = [[None] * 3 for _ in range(3)]
    for r in range(3):
        for col in range(r, 3):
            val = Xm[0][r] * AX[0][col] + Xm[1][r] * AX[1][col] + Xm[2][r] * AX[2][col]
            out[r][col] = val
            out[col][r] = val
    return out


def vadd(a: Sequence, b: Sequence) -> tuple:
    return (a[0] + b[0], a[1] + b[1], a[2] + b[2])
