"""Forward kinematics of a planar floating-base tree: frames, named points, COM.

All functions take a :class:`~kipup.core.robot.Robot` and generalized coordinates
``q`` (and velocities ``qd``) as NumPy arrays or CasADi SX/MX column vectors, and return
the same kind. Positions in m, angles in rad, world frame (x forward, z up) unless said.
"""
from __future__ import annotations

from typing import Any, Sequence

from .robot import Robot
from .spatial import Ops, Xform, crm, ops_for, vadd

Array = Any


def joint_xforms(robot: Robot, q_entries: Sequence, ops: Ops) -> list[Xform]:
    """X_up[i]: parent-to-body transform of every body of ``robot.tree`` at coordinates q."""
    tree = robot.tree
    out = []
    for i in range(tree.nb):
        ox, oz = tree.origin[i]
        qi = q_entries[i]
        kind = tree.kind[i]
        if kind == "px":
            out.append(Xform(1.0, 0.0, ox + qi, oz))
        elif kind == "pz":
            out.append(Xform(1.0, 0.0, ox, oz + qi))
        else:
            out.append(Xform(ops.cos(qi), ops.sin(qi), ox, oz))
    return out


def body_poses(robot: Robot, q_entries: Sequence, ops: Ops) -> list[tuple]:
    """World pose (x, z, cos, sin) of every body frame, as scalars."""
    tree = robot.tree
    X = joint_xforms(robot, q_entries, ops)
    poses: list[tuple] = []
    for i in range(tree.nb):
        Xi = X[i]
        lam = tree.parent[i]
        if lam < 0:
            poses.append((Xi.px, Xi.pz, Xi.c, Xi.s))
            continue
        x, z, c, s = poses[lam]
        # p_world = p_parent + E_parent p_local ; E_world = E_parent E_local
        wx = x + c * Xi.px + s * Xi.pz
        wz = z - s * Xi.px + c * Xi.pz
        if tree.kind[i] == "ry":
            c2 = c * Xi.c - s * Xi.s
            s2 = s * Xi.c + c * Xi.s
        else:
            c2, s2 = c, s
        poses.append((wx, wz, c2, s2))
    return poses


def body_velocities(robot: Robot, q_entries: Sequence, qd_entries: Sequence, ops: Ops,
                    X: list[Xform] | None = None) -> list[tuple]:
    """Body spatial velocities v_i (body coordinates)."""
    tree = robot.tree
    X = X or joint_xforms(robot, q_entries, ops)
    v: list[tuple] = []
    for i in range(tree.nb):
        lam = tree.parent[i]
        vi = X[i].apply(v[lam]) if lam >= 0 else (0.0, 0.0, 0.0)
        v.append(vadd(vi, _joint_motion(tree.kind[i], qd_entries[i])))
    return v


def _joint_motion(kind: str, rate: Any) -> tuple:
    """S_i times a joint rate: revolute about y, or prismatic along x or z."""
    if kind == "ry":
        return (rate, 0.0, 0.0)
    if kind == "px":
        return (0.0, rate, 0.0)
    return (0.0, 0.0, rate)


def _body_of(robot: Robot, link: str) -> int:
    try:
        return robot.tree.body_of_link[link]
    except KeyError:
        raise KeyError(f"robot {robot.name!r} has no link {link!r}") from None


def _to_world(pose: tuple, r: Sequence) -> tuple:
    x, z, c, s = pose
    return (x + c * r[0] + s * r[1], z - s * r[0] + c * r[1])


def _rotate(pose: tuple, v: Sequence) -> tuple:
    _, _, c, s = pose
    return (c * v[0] + s * v[1], -s * v[0] + c * v[1])


def _resolve_point(robot: Robot, point: str | tuple) -> tuple[int, tuple]:
    """A named point, or (link name, (x, z)), -> (body index, position in body frame)."""
    if isinstance(point, str):
        p = robot.point(point)
        return _body_of(robot, p.link), tuple(p.position)
    link, r = point
    return _body_of(robot, link), tuple(r)


# ----- public functions ---------------------------------------------------------
def link_poses(robot: Robot, q: Array) -> list[tuple]:
    """World pose ``(x, z, pitch)`` of each link frame, in ``robot.links`` order (m, m, rad)."""
    ops = ops_for(q)
    poses = body_poses(robot, ops.entries(q, robot.nq), ops)
    qe = ops.entries(q, robot.nq)
    out = []
    pitch = qe[2]
    angles = [0.0, 0.0, pitch]
    tree = robot.tree
    for i in range(3, tree.nb):
        angles.append(angles[tree.parent[i]] + qe[i])
    for link in robot.links:
        i = tree.body_of_link[link.name]
        out.append((poses[i][0], poses[i][1], angles[i]))
    return out


def point_position(robot: Robot, q: Array, point: str | tuple) -> Array:
    """World position (x, z) of a named point, or of ``(link, (x, z))`` given in the link frame."""
    ops = ops_for(q)
    i, r = _resolve_point(robot, point)
    pose = body_poses(robot, ops.entries(q, robot.nq), ops)[i]
    return ops.vector(_to_world(pose, r))


def point_velocity(robot: Robot, q: Array, qd: Array, point: str | tuple) -> Array:
    """World linear velocity (m/s) of a point fixed on a link."""
    ops = ops_for(q, qd)
    qe, qde = ops.entries(q, robot.nq), ops.entries(qd, robot.nv)
    i, r = _resolve_point(robot, point)
    X = joint_xforms(robot, qe, ops)
    pose = body_poses(robot, qe, ops)[i]
    w, ux, uz = body_velocities(robot, qe, qde, ops, X)[i]
    return ops.vector(_rotate(pose, (ux + w * r[1], uz - w * r[0])))


def point_jacobian(robot: Robot, q: Array, point: str | tuple) -> Array:
    """2 x nv Jacobian of a point's world position (rows x, z) with respect to q."""
    ops = ops_for(q)
    qe = ops.entries(q, robot.nq)
    tree = robot.tree
    i, r = _resolve_point(robot, point)
    poses = body_poses(robot, qe, ops)
    rx, rz = _to_world(poses[i], r)
    cols = [(0.0, 0.0)] * tree.nb
    for j in tree.ancestors(i):
        kind = tree.kind[j]
        if kind == "px":
            cols[j] = (1.0, 0.0)
        elif kind == "pz":
            cols[j] = (0.0, 1.0)
        else:
            jx, jz = poses[j][0], poses[j][1]
            cols[j] = (rz - jz, -(rx - jx))
    return ops.matrix([[c[0] for c in cols], [c[1] for c in cols]])


def point_jdot_qdot(robot: Robot, q: Array, qd: Array, point: str | tuple) -> Array:
    """dJ/dt qd: the point's world acceleration (m/s^2) when qdd = 0 (no gravity)."""
    ops = ops_for(q, qd)
    qe, qde = ops.entries(q, robot.nq), ops.entries(qd, robot.nv)
    tree = robot.tree
    i, r = _resolve_point(robot, point)
    X = joint_xforms(robot, qe, ops)
    v = body_velocities(robot, qe, qde, ops, X)
    a: list[tuple] = []
    for b in range(tree.nb):
        lam = tree.parent[b]
        ab = X[b].apply(a[lam]) if lam >= 0 else (0.0, 0.0, 0.0)
        a.append(vadd(ab, crm(v[b], _joint_motion(tree.kind[b], qde[b]))))
    w, ux, uz = v[i]
    dw, dux, duz = a[i]
    vrx, vrz = ux + w * r[1], uz - w * r[0]
    acc = (dux + dw * r[1] + w * vrz, duz - dw * r[0] - w * vrx)
    pose = body_poses(robot, qe, ops)[i]
    return ops.vector(_rotate(pose, acc))


def center_of_mass(robot: Robot, q: Array) -> Array:
    """World position (x, z) of the whole robot's centre of mass (m)."""
    ops = ops_for(q)
    tree = robot.tree
    poses = body_poses(robot, ops.entries(q, robot.nq), ops)
    sx = sz = 0.0
    for i in range(tree.nb):
        if tree.mass[i] == 0.0:
            continue
        cx, cz = _to_world(poses[i], tree.com[i])
        sx = sx + tree.mass[i] * cx
        sz = sz + tree.mass[i] * cz
    m = robot.total_mass
    return ops.vector((sx / m, sz / m))


def com_velocity(robot: Robot, q: Array, qd: Array) -> Array:
    """World velocity (m/s) of the centre of mass."""
    ops = ops_for(q, qd)
    qe, qde = ops.entries(q, robot.nq), ops.entries(qd, robot.nv)
    tree = robot.tree
    poses = body_poses(robot, qe, ops)
    v = body_velocities(robot, qe, qde, ops)
    sx = sz = 0.0
    for i in range(tree.nb):
        m = tree.mass[i]
        if m == 0.0:
            continue
        w, ux, uz = v[i]
        cx, cz = tree.com[i]
        vx, vz = _rotate(poses[i], (ux + w * cz, uz - w * cx))
        sx = sx + m * vx
        sz = sz + m * vz
    M = robot.total_mass
    return ops.vector((sx / M, sz / M))
