"""Inverse kinematics of a planar floating-base robot: damped least squares on point Jacobians.

:func:`solve_ik` moves the coordinates ``q = (base_x, base_z, base_pitch, joints...)`` so that
named robot points (or points given as ``(link, (x, z))`` in a link frame) reach target
positions in the world x-z plane (m). Each iteration solves the damped least-squares step

    dq = W J^T (J W J^T + lambda^2 I)^-1 e

(``e`` the stacked, weighted position errors, ``J`` the stacked point Jacobians of the free
coordinates, ``lambda`` the damping in m), limits the step, and clamps the joints to their
position limits. A joint at a limit that the step would push further out is dropped from that
step (a simple active set), so targets that need a joint at its limit are still reached.

Pure NumPy on :mod:`kipup.core.kinematics`; used by the workbench's pose editing but free of
any notebook package.
"""
from __future__ import annotations

import math
from typing import Hashable, Iterable, Mapping

import numpy as np

from .kinematics import _resolve_point, _to_world, body_poses
from .robot import Robot
from .spatial import ops_for

__all__ = ["solve_ik", "point_positions", "PointRef"]

#: A target key: a named robot point, or ``(link name, (x, z))`` with (x, z) in the link frame (m).
PointRef = Hashable

_MAX_STEP = 0.35  # rad or m: largest change of any coordinate in one iteration


def _frames(robot: Robot, q: np.ndarray) -> list[tuple]:
    ops = ops_for(q)
    return body_poses(robot, ops.entries(q, robot.nq), ops)


def _resolve(robot: Robot, key: PointRef) -> tuple[int, tuple]:
    if isinstance(key, str):
        return _resolve_point(robot, key)
    link, r = key
    return _resolve_point(robot, (link, (float(r[0]), float(r[1]))))


def point_positions(robot: Robot, q: np.ndarray, points: Iterable[PointRef]) -> dict:
    """World positions (x, z) (m) of several points at ``q``, from one forward-kinematics pass."""
    poses = _frames(robot, np.asarray(q, dtype=float))
    out = {}
    for key in points:
        i, r = _resolve(robot, key)
        x, z = _to_world(poses[i], r)
        out[key] = np.array([float(x), float(z)])
    return out


def _position_and_jacobian(robot: Robot, poses: list[tuple], body: int, r: tuple) -> tuple[np.ndarray, np.ndarray]:
    """World position (2,) of a body point and its 2 x nv Jacobian (the rule of kinematics.point_jacobian)."""
    tree = robot.tree
    rx, rz = _to_world(poses[body], r)
    J = np.zeros((2, robot.nv))
    for j in tree.ancestors(body):
        kind = tree.kind[j]
        if kind == "px":
            J[0, j] = 1.0
        elif kind == "pz":
            J[1, j] = 1.0
        else:  # revolute about +y at the body's origin: d(p)/d(theta) = (dz, -dx)
            jx, jz = poses[j][0], poses[j][1]
            J[0, j] = rz - jz
            J[1, j] = -(rx - jx)
    return np.array([float(rx), float(rz)]), J


def solve_ik(robot: Robot, q0, targets: Mapping[PointRef, tuple[float, float]], *,
             fixed: Iterable[str] = (), damping: float = 1e-2, iters: int = 50, tol: float = 1e-6,
             weights: Mapping[PointRef, float] | None = None) -> np.ndarray:
    """Coordinates near ``q0`` that put each target point at its world position.

    robot: the model; q0: start coordinates (nq,), m and rad.
    targets: ``{point: (x, z)}``, a point being a robot point name or ``(link, (x, z))`` in that
    link's frame; positions in m, world frame. To keep a point where it is (a stance foot), target
    it at its current position.
    fixed: coordinate names (``Robot.coord_names``) that must not change, e.g. the three base
    coordinates while editing a flight pose.
    damping: lambda (m) of the damped least squares; larger is steadier near singular poses but
    slower to converge. iters: most iterations. tol: stop when every weighted error is below it (m).
    weights: per-target weights (default 1); a held foot with weight 10 gives way less than a hand.

    Joints stay within ``Robot.joint_lower/upper`` (q0 is clamped first). An unreachable target
    gives the best effort found (the smallest weighted error norm), never NaN. Returns a new array.
    """
    q = np.array(q0, dtype=float).reshape(-1)
    if q.shape != (robot.nq,):
        raise ValueError(f"q0 must have length {robot.nq} for robot {robot.name!r}, got shape {q.shape}")
    if not np.all(np.isfinite(q)):
        raise ValueError("q0 holds NaN or infinity")
    lower = np.concatenate([np.full(3, -np.inf), np.asarray(robot.joint_lower, dtype=float)])
    upper = np.concatenate([np.full(3, np.inf), np.asarray(robot.joint_upper, dtype=float)])
    q = np.clip(q, lower, upper)
    if not targets:
        return q
    fixed_idx = {robot.coord_index(name) for name in fixed}
    free = np.array([i for i in range(robot.nq) if i not in fixed_idx], dtype=int)
    if free.size == 0:
        return q
    keys = list(targets)
    resolved = [_resolve(robot, k) for k in keys]
    goal = np.concatenate([np.asarray(targets[k], dtype=float).reshape(2) for k in keys])
    if not np.all(np.isfinite(goal)):
        raise ValueError("targets hold NaN or infinity")
    w = np.repeat([float((weights or {}).get(k, 1.0)) for k in keys], 2)
    lam2 = float(damping) ** 2

    def evaluate(qv: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        poses = _frames(robot, qv)
        ps, Js = [], []
        for body, r in resolved:
            p, J = _position_and_jacobian(robot, poses, body, r)
            ps.append(p)
            Js.append(J)
        return np.concatenate(ps), np.vstack(Js)

    best_q, best_err = q.copy(), math.inf
    for _ in range(max(1, int(iters)) + 1):
        p, J = evaluate(q)
        e = w * (goal - p)
        err = float(np.linalg.norm(e))
        if err < best_err:
            best_q, best_err = q.copy(), err
        if float(np.max(np.abs(e))) < tol:
            break
        active = free.copy()
        dq = np.zeros(robot.nq)
        for _attempt in range(len(free) + 1):
            if active.size == 0:
                break
            Ja = (w[:, None] * J)[:, active]
            step = Ja.T @ np.linalg.solve(Ja @ Ja.T + lam2 * np.eye(Ja.shape[0]), e)
            dq = np.zeros(robot.nq)
            dq[active] = step
            # drop joints that sit at a limit and would be pushed beyond it
            blocked = [i for i in active if (q[i] <= lower[i] + 1e-12 and dq[i] < 0)
                       or (q[i] >= upper[i] - 1e-12 and dq[i] > 0)]
            if not blocked:
                break
            active = np.array([i for i in active if i not in blocked], dtype=int)
        biggest = float(np.max(np.abs(dq)))
        if not np.isfinite(biggest) or biggest == 0.0:
            break
        if biggest > _MAX_STEP:
            dq *= _MAX_STEP / biggest
        q = np.clip(q + dq, lower, upper)
    return best_q
