"""Rigid contact simulation of a planar robot on kipup terrain: velocity-level time stepping.

The model (a semi-implicit, Stewart-Trinkle / Moreau style time-stepping scheme):

* **Dynamics.** Each step of length ``dt`` (s) solves, at the start-of-step configuration q,
  ``M(q) (v+ - v) = dt (Q - h(q, v)) + sum_c G_c(q)^T lambda_c`` and then moves the positions
  with the new velocity, ``q+ = q + dt v+`` (semi-implicit Euler). ``Q`` is the generalized
  force of the joint torques and any external force, ``h`` the Coriolis, centrifugal and gravity
  forces, ``lambda_c = (lambda_n, lambda_t)`` the contact impulse (N s) of contact c.
* **Contacts.** Every named point of the robot (feet, hands, head, knees...) is checked against
  the exact terrain: the ground, every box top, and the two vertical sides of every box. A point
  closer than ``activation`` (m) to a face joins the step's contact problem with that face's
  normal n and tangent t (a point inside a box takes the face it penetrates least).
* **Contact law** (per point, planar, so the friction cone is exact, no polyhedral
  approximation): ``lambda_n >= 0``, ``u_n + b >= 0``, ``lambda_n (u_n + b) = 0`` with
  ``u = G v+`` the point's post-step velocity and ``b = gap / dt`` for a positive gap (the point
  may close the gap but not pass it: Stewart-Trinkle) or ``b = erp * gap / dt`` when it already
  penetrates (a gentle push-out, Baumgarte style); Coulomb friction with maximal dissipation,
  ``|lambda_t| <= mu lambda_n`` and, if the point slides, ``lambda_t = -mu lambda_n sign(u_t)``.
  Restitution is zero: an impact stops the normal velocity within one step (inelastic).
* **Solver.** The impulses are found by projected Gauss-Seidel (PGS) on the Delassus matrix
  ``W = G M^-1 G^T`` (plus a tiny diagonal regularization ``cfm * max diag W`` so that redundant
  contacts, e.g. toe and heel of one rigid foot, stay well posed), warm-started from the previous
  step's impulses, at most ``max_iter`` sweeps, stopping when a sweep changes no contact velocity
  by more than ``tol`` (m/s). The iteration count is bounded, so a step always ends.

What it conserves: nothing exactly. Contacts only remove energy (an inelastic impact removes
the normal kinetic energy of the touching points; friction impulses oppose sliding) except for
the small push-out term when a point penetrates. In free flight the linear and angular
momentum follow the exact rates (gravity, external forces) up to the O(dt) error of
semi-implicit Euler; ``tests/test_simulation.py`` measures the drift. Joint position limits
are not modelled as stops (the tracking layer reports them).

Units: SI; impulses N s, forces N = impulse / dt, world frame (x forward, z up).

The plant's numbers come from one CasADi Function per robot *structure* whose inputs are q, qd
and the links' inertial parameters (mass, COM, inertia per link), so a perturbed robot (see
:func:`inertial_params`) reuses the compiled expression graph.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from typing import Sequence

import casadi as ca
import numpy as np

from . import dynamics as dyn
from .robot import Link, Robot
from .trick import Terrain

__all__ = ["ContactModel", "ContactPoint", "StepResult", "ContactSim", "inertial_params", "with_inertial_params",
           "plant_function", "terrain_faces"]

DEFAULT_MU = 0.5  # friction of a point whose robot file gives none (hip, head...)


# ----- the plant's expression graph --------------------------------------------------------
def inertial_params(robot: Robot) -> np.ndarray:
    """(len(links) * 4,) per link: mass (kg), COM x, COM z (m, link frame), inertia (kg m^2)."""
    return np.array([v for link in robot.links for v in (link.mass, link.com[0], link.com[1], link.inertia)],
                    dtype=float)


def with_inertial_params(robot: Robot, params: Sequence[float]) -> Robot:
    """A copy of ``robot`` whose links take the inertial parameters ``params`` (see :func:`inertial_params`)."""
    p = np.asarray(params, dtype=float).reshape(-1)
    if p.size != 4 * len(robot.links):
        raise ValueError(f"params must have {4 * len(robot.links)} entries (4 per link); got {p.size}")
    links = tuple(replace(link, mass=float(p[4 * i]), com=(float(p[4 * i + 1]), float(p[4 * i + 2])),
                          inertia=float(p[4 * i + 3])) for i, link in enumerate(robot.links))
    return replace(robot, links=links)


def _structure_key(robot: Robot) -> tuple:
    joints = tuple((j.name, j.parent, j.child, tuple(j.origin)) for j in robot.joints)
    points = tuple((p.name, p.link, tuple(p.position)) for p in robot.points)
    return (robot.link_names, joints, points, float(robot.gravity))


_PLANTS: dict[tuple, ca.Function] = {}


def plant_function(robot: Robot) -> ca.Function:
    """``(M, h, P, J) = F(q, qd, params)``: mass matrix, bias forces C qd + g, the named points'
    world positions (2 x n_points) and stacked Jacobians (2 n_points x nq), cached per structure."""
    key = _structure_key(robot)
    fn = _PLANTS.get(key)
    if fn is not None:
        return fn
    nq, nl = robot.nq, len(robot.links)
    q, qd = ca.SX.sym("q", nq), ca.SX.sym("qd", nq)
    par = ca.SX.sym("params", 4 * nl)
    links = tuple(Link(link.name, par[4 * i], (par[4 * i + 1], par[4 * i + 2]), par[4 * i + 3])
                  for i, link in enumerate(robot.links))
    sym_robot = Robot(robot.name, links, robot.joints, robot.points, robot.gravity)
    M = dyn.crba(sym_robot, q)
    h = dyn.bias_forces(sym_robot, q, qd)
    names = robot.point_names
    if names:
        P = ca.horzcat(*[dyn.point_position(robot, q, n) for n in names])
        J = ca.vertcat(*[dyn.point_jacobian(robot, q, n) for n in names])
    else:
        P, J = ca.SX.zeros(2, 0), ca.SX.zeros(0, nq)
    fn = ca.Function("plant", [q, qd, par], [M, h, P, J], ["q", "qd", "params"], ["M", "h", "P", "J"])
    _PLANTS[key] = fn
    return fn


# ----- terrain geometry ----------------------------------------------------------------------
def terrain_faces(terrain: Terrain, x: float, z: float, margin: float) -> list[tuple[str, float, float, float]]:
    """Faces of the exact terrain within ``margin`` (m) of point (x, z): ``(face, nx, nz, gap)``.

    Faces: "ground", "<box>:top", "<box>:front" (the x_min side, normal -x), "<box>:back" (x_max
    side, normal +x). ``gap`` (m) is the signed distance along the normal (negative inside).
    """
    out = []
    over_box = False
    for b in terrain.boxes:
        if b.x_min <= x <= b.x_max:
            over_box = True
            top = z - b.height
            if top < 0.0 and z > terrain.ground - margin:
                # inside the box: the face it penetrates least
                depths = ((-top, "top"), (x - b.x_min, "front"), (b.x_max - x, "back"))
                d, face = min(depths)
                if face == "top":
                    out.append((f"{b.name}:top", 0.0, 1.0, top))
                elif face == "front":
                    out.append((f"{b.name}:front", -1.0, 0.0, -d))
                else:
                    out.append((f"{b.name}:back", 1.0, 0.0, -d))
            elif top < margin:
                out.append((f"{b.name}:top", 0.0, 1.0, top))
        elif z < b.height and z > terrain.ground - margin:
            if b.x_min - margin < x < b.x_min:
                out.append((f"{b.name}:front", -1.0, 0.0, b.x_min - x))
            elif b.x_max < x < b.x_max + margin:
                out.append((f"{b.name}:back", 1.0, 0.0, x - b.x_max))
    if not over_box and z - terrain.ground < margin:
        out.append(("ground", 0.0, 1.0, z - terrain.ground))
    return out


# ----- the simulator -----------------------------------------------------------------------
@dataclass
class ContactModel:
    """Settings of the contact law and its solver (see the module docstring).

    mu_scale: multiplies every point's friction coefficient (robustness studies).
    default_mu: friction of points whose robot file gives none. erp: fraction of a penetration
    (m) removed per step. activation (m): points closer than this to a face join the problem.
    cfm: relative diagonal regularization of the Delassus matrix. max_iter, tol: PGS sweeps and
    the stopping tolerance (m/s, the largest contact-velocity change in a sweep).
    """

    mu_scale: float = 1.0
    default_mu: float = DEFAULT_MU
    erp: float = 0.2
    activation: float = 0.02
    cfm: float = 1e-8
    max_iter: int = 100
    tol: float = 1e-6

    def __post_init__(self) -> None:
        for name in ("mu_scale", "default_mu", "erp", "activation", "cfm", "tol"):
            v = getattr(self, name)
            if not (isinstance(v, (int, float)) and math.isfinite(v) and v >= 0):
                raise ValueError(f"ContactModel.{name} must be a finite number >= 0; got {v!r}")
        if not (isinstance(self.max_iter, int) and self.max_iter >= 1):
            raise ValueError(f"ContactModel.max_iter must be an integer >= 1; got {self.max_iter!r}")


@dataclass
class ContactPoint:
    """One contact of a step: ``point`` on ``face``; impulse (N s) in the world frame and the gap (m)."""

    point: str
    face: str
    impulse: tuple[float, float]
    gap: float


@dataclass
class StepResult:
    """State after a step and the contacts that carried an impulse."""

    q: np.ndarray
    qd: np.ndarray
    contacts: list[ContactPoint] = field(default_factory=list)
    iterations: int = 0


class ContactSim:
    """Time stepper of ``robot`` on ``terrain`` with step ``dt`` (s); see the module docstring.

    ``params``: the links' inertial parameters (default: the robot's own). The step takes the
    generalized force Q (nq: N for base x, z; N m for pitch and joints) held over the step.
    """

    def __init__(self, robot: Robot, terrain: Terrain, dt: float, model: ContactModel | None = None,
                 params: Sequence[float] | None = None) -> None:
        if not (isinstance(dt, (int, float)) and math.isfinite(dt) and 0 < dt <= 0.05):
            raise ValueError(f"dt must be a time step in (0, 0.05] s; got {dt!r}")
        self.robot, self.terrain, self.dt = robot, terrain, float(dt)
        self.model = model or ContactModel()
        self.params = inertial_params(robot) if params is None else np.asarray(params, dtype=float).reshape(-1)
        if self.params.size != 4 * len(robot.links):
            raise ValueError(f"params must have {4 * len(robot.links)} entries; got {self.params.size}")
        self.fn = plant_function(robot)
        self.names = robot.point_names
        self.mu = np.array([(p.friction if p.friction is not None else self.model.default_mu) * self.model.mu_scale
                            for p in robot.points], dtype=float)
        self._warm: dict[tuple[str, str], tuple[float, float]] = {}
        self.last_M: np.ndarray | None = None
        self.last_points: np.ndarray | None = None

    def evaluate(self, q: np.ndarray, qd: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """(M, h, P (2 x n_points), J (2 n_points x nq)) at (q, qd) as NumPy arrays."""
        M, h, P, J = self.fn(q, qd, self.params)
        return M.full(), h.full().reshape(-1), P.full(), J.full()

    def step(self, q: np.ndarray, qd: np.ndarray, Q: np.ndarray,
             point_forces: dict[str, tuple[float, float]] | None = None) -> StepResult:
        """One time step from (q, qd) under generalized force Q (nq) held over the step, plus
        world-frame forces (N) on named points, ``point_forces[name] = (fx, fz)`` (a push)."""
        dt, model = self.dt, self.model
        M, h, P, J = self.evaluate(q, qd)
        self.last_M, self.last_points = M, P
        if point_forces:
            Q = np.array(Q, dtype=float)
            for name, (fx, fz) in point_forces.items():
                i = self.names.index(name)
                Q += J[2 * i:2 * i + 2].T @ np.array([fx, fz], dtype=float)
        try:
            L = np.linalg.cholesky(M)
        except np.linalg.LinAlgError:
            return StepResult(np.full_like(q, np.nan), np.full_like(qd, np.nan))

        def minv(b: np.ndarray) -> np.ndarray:
            return np.linalg.solve(L.T, np.linalg.solve(L, b))

        v_free = qd + dt * minv(Q - h)
        rows, keys, gaps, mus = [], [], [], []
        for i, name in enumerate(self.names):
            x, z = P[0, i], P[1, i]
            if not (math.isfinite(x) and math.isfinite(z)):
                continue
            Ji = J[2 * i:2 * i + 2]
            for face, nx, nz, gap in terrain_faces(self.terrain, x, z, model.activation):
                n = np.array([nx, nz])
                t = np.array([nz, -nx])  # tangent: +x on a horizontal face
                rows.append(n @ Ji)
                rows.append(t @ Ji)
                keys.append((name, face))
                gaps.append(gap)
                mus.append(self.mu[i])
        if not rows:
            self._warm = {}
            return StepResult(q + dt * v_free, v_free)
        G = np.array(rows)
        MinvGT = minv(G.T)
        W = G @ MinvGT
        W[np.diag_indices_from(W)] += model.cfm * max(float(np.max(np.diag(W))), 1e-12)
        u_free = G @ v_free
        nc = len(keys)
        b = np.zeros(2 * nc)
        for c, gap in enumerate(gaps):
            b[2 * c] = gap / dt if gap >= 0.0 else model.erp * gap / dt
        lam = np.zeros(2 * nc)
        for c, key in enumerate(keys):
            lam[2 * c], lam[2 * c + 1] = self._warm.get(key, (0.0, 0.0))
        lam, iters = _pgs(W, u_free + b, lam, np.array(mus), model.max_iter, model.tol)
        v_next = v_free + MinvGT @ lam
        contacts = []
        warm = {}
        for c, key in enumerate(keys):
            ln, lt = float(lam[2 * c]), float(lam[2 * c + 1])
            warm[key] = (ln, lt)
            if ln > 0.0:
                face_n = _face_normal(key[1])
                ix = ln * face_n[0] + lt * face_n[1]
                iz = ln * face_n[1] - lt * face_n[0]
                contacts.append(ContactPoint(key[0], key[1], (ix, iz), gaps[c]))
        self._warm = warm
        return StepResult(q + dt * v_next, v_next, contacts, iters)


def _face_normal(face: str) -> tuple[float, float]:
    if face.endswith(":front"):
        return (-1.0, 0.0)
    if face.endswith(":back"):
        return (1.0, 0.0)
    return (0.0, 1.0)


def _pgs(W: np.ndarray, r0: np.ndarray, lam: np.ndarray, mu: np.ndarray, max_iter: int,
         tol: float) -> tuple[np.ndarray, int]:
    """Projected Gauss-Seidel for the planar frictional contact problem.

    Unknowns ordered (normal, tangent) per contact; residual velocity ``r = W lam + r0`` (m/s).
    Normal: ``lam_n = max(0, lam_n - r_n / W_nn)``; tangent: ``lam_t`` clipped to
    ``[-mu lam_n, mu lam_n]`` after its Gauss-Seidel update. Stops after the first sweep in which
    no update changed a contact velocity by more than ``tol`` (m/s). Returns (lam, sweeps used).
    """
    n = lam.size
    Wl = W.tolist()
    x = lam.tolist()
    r = (W @ lam + r0).tolist()
    diag = [Wl[i][i] for i in range(n)]
    mus = mu.tolist()
    it = 0
    for it in range(1, max_iter + 1):
        biggest = 0.0
        for i in range(n):
            old = x[i]
            new = old - r[i] / diag[i]
            if i % 2 == 0:
                if new < 0.0:
                    new = 0.0
            else:
                bound = mus[i // 2] * x[i - 1]
                new = bound if new > bound else (-bound if new < -bound else new)
            d = new - old
            if d != 0.0:
                x[i] = new
                Wi = Wl[i]
                for k in range(n):
                    r[k] += Wi[k] * d
                dv = abs(d) * diag[i]
                if dv > biggest:
                    biggest = dv
        if biggest <= tol:
            break
    return np.array(x), it
