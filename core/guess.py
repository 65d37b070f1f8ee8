"""Initial guess for a trick's NLP from its keyframes and phase timing.

Joint angles and pitch are interpolated linearly between keyframes (the landing pose closes
the motion, the rotation goal sets the landing pitch). In stance the base is placed so that
the held contact point sits on its surface; in flight the centre of mass follows the
ballistic parabola from takeoff to touchdown. Velocities and accelerations are finite
differences; torques and contact forces are the least-squares solution of the equations of
motion at each knot.
"""
from __future__ import annotations

import numpy as np
from scipy.interpolate import PchipInterpolator

from .compiled import functions_for
from .robot import Robot
from .transcription import TrickProblem, locate_phase
from .trick import Trick


def _coord_tracks(trick: Trick, robot: Robot, t_end: float) -> list[tuple[np.ndarray, np.ndarray]]:
    """Per coordinate, the (times, values) it is set to by keyframes and the landing pose."""
    tracks: list[tuple[list, list]] = [([], []) for _ in range(robot.nq)]
    starts = np.cumsum([0.0] + [p.duration for p in trick.phases])
    for kf in trick.keyframes:
        i, frac = locate_phase(trick, kf.phase, kf.time)
        t = starts[i] + frac * trick.phases[i].duration
        for name, value in kf.pose.items():
            tracks[robot.coord_index(name)][0].append(t)
            tracks[robot.coord_index(name)][1].append(value)
    pitch0 = np.interp(0.0, *_sorted(tracks[2])) if tracks[2][0] else 0.0
    landing = dict(trick.landing_pose)
    if trick.goals.rotation is not None:
        landing["base_pitch"] = pitch0 + trick.goals.rotation
    for name, value in landing.items():
        k = robot.coord_index(name)
        if not any(abs(t - t_end) < 1e-9 for t in tracks[k][0]):
            tracks[k][0].append(t_end)
            tracks[k][1].append(value)
    return [(_sorted(tr)) for tr in tracks]


def _smooth_track(times: np.ndarray, values: np.ndarray, t_end: float):
    """A shape-preserving C1 interpolant through keyframe values, flat before the first and after the last."""
    t, idx = np.unique(times, return_index=True)
    v = values[idx]
    if t.size == 1:
        return lambda x: np.full(np.shape(x), v[0])
    if t[0] > 0.0:
        t, v = np.r_[0.0, t], np.r_[v[0], v]
    if t[-1] < t_end:
        t, v = np.r_[t, t_end], np.r_[v, v[-1]]
    spline = PchipInterpolator(t, v, extrapolate=True)
    return lambda x: spline(np.clip(x, t[0], t[-1]))


def _sorted(track: tuple[list, list]) -> tuple[np.ndarray, np.ndarray]:
    t, v = np.asarray(track[0], float), np.asarray(track[1], float)
    order = np.argsort(t, kind="stable")
    return t[order], v[order]


def initial_guess(problem: TrickProblem, trick: Trick) -> np.ndarray:
    """Scaled decision vector of an initial guess for ``problem`` solving ``trick``."""
    robot = problem.robot
    fns = functions_for(robot)
    nq = robot.nq
    starts = np.cumsum([0.0] + [p.duration for p in trick.phases])
    t_end = starts[-1]
    tracks = _coord_tracks(trick, robot, t_end)
    grids = [starts[i] + np.linspace(0.0, ph.duration, ph.knots + 1) for i, ph in enumerate(trick.phases)]
    Qs = [np.zeros((nq, grid.size)) for grid in grids]
    for k, (tt, vv) in enumerate(tracks):
        if not tt.size:
            continue
        track = _smooth_track(tt, vv, t_end)
        for Q, grid in zip(Qs, grids):
            Q[k] = track(grid)

    def point_at(q: np.ndarray, name: str) -> np.ndarray:
        return np.asarray(fns.point(name)(q, np.zeros(nq))[0]).ravel()

    def com_at(q: np.ndarray) -> np.ndarray:
        return np.asarray(fns.com(q, np.zeros(nq))[0]).ravel()

    heights = {"ground": trick.terrain.ground, **{b.name: b.height for b in trick.terrain.boxes}}
    anchors: dict[int, list[float]] = {}
    base_x0 = Qs[0][0, 0]
    last_stance = len(trick.phases) - 1
    for i, (ph, lay) in enumerate(zip(trick.phases, problem.phases)):
        if not lay.contacts:
            continue
        Q = Qs[i]
        held = lay.contacts[0]
        if i == 0:
            ref_k, ref_x = 0, base_x0
        elif i == last_stance and trick.goals.landing_x is not None:
            ref_k, ref_x = Q.shape[1] - 1, 0.5 * sum(trick.goals.landing_x)
        else:
            ref_k, ref_x = 0, None
        q_ref = Q[:, ref_k].copy()
        q_ref[:2] = 0.0
        if ref_x is None:  # continue from where the previous phase ended
            prev = Qs[i - 1][:, -1].copy()
            q0 = Q[:, 0].copy()
            q0[:2] = 0.0
            ax = point_at(prev, held.point)[0]
        else:
            ax = ref_x + point_at(q_ref, held.point)[0]
        hz = heights[held.surface]
        for k in range(Q.shape[1]):
            qk = Q[:, k].copy()
            qk[:2] = 0.0
            p = point_at(qk, held.point)
            Q[0, k], Q[1, k] = ax - p[0], hz - p[1]
        anchors[i] = [ax if c.hold_x else None for c in lay.contacts]
    # flight phases: ballistic COM between the neighbouring stance knots
    g = robot.gravity
    for i, lay in enumerate(problem.phases):
        if lay.contacts or i == 0 or i == len(problem.phases) - 1:
            continue
        Q = Qs[i]
        c0, c1 = com_at(Qs[i - 1][:, -1]), com_at(Qs[i + 1][:, 0])
        T = trick.phases[i].duration
        v0 = (c1 - c0 + np.array([0.0, 0.5 * g * T * T])) / T
        for k, t in enumerate(np.linspace(0.0, T, Q.shape[1])):
            c = c0 + v0 * t - np.array([0.0, 0.5 * g * t * t])
            qk = Q[:, k].copy()
            qk[:2] = 0.0
            off = com_at(qk)
            Q[0, k], Q[1, k] = c[0] - off[0], c[1] - off[1]
    blocks: dict[str, np.ndarray] = {}
    for i, (Q, grid, lay) in enumerate(zip(Qs, grids, problem.phases)):
        V = np.gradient(Q, grid, axis=1, edge_order=2) if Q.shape[1] > 2 else np.zeros_like(Q)
        A = np.gradient(V, grid, axis=1, edge_order=2) if Q.shape[1] > 2 else np.zeros_like(Q)
        if i == 0 and trick.start_at_rest:
            V[:, 0] = 0.0
        if i == len(Qs) - 1 and trick.end_at_rest:
            V[:, -1] = 0.0
            A[:, -1] = 0.0
        tau, lam = _forces(robot, fns, lay, Q, V, A)
        blocks[f"q{i}"], blocks[f"v{i}"], blocks[f"a{i}"], blocks[f"tau{i}"] = Q, V, A, tau
        if lay.nc:
            blocks[f"lam{i}"] = lam
            blocks[f"anchor{i}"] = np.array([a for a in anchors[i] if a is not None])
        blocks[f"T{i}"] = np.array([trick.phases[i].duration])
        if lay.impact:
            blocks[f"imp{i}"] = np.tile([0.0, 1.0], lay.nc) * robot.total_mass * 0.5
    return problem.pack(blocks)


def _forces(robot: Robot, fns, lay, Q, V, A) -> tuple[np.ndarray, np.ndarray]:
    nq, nj, K = robot.nq, robot.nj, Q.shape[1]
    tau = np.zeros((nj, K))
    lam = np.zeros((2 * lay.nc, K))
    peak = np.asarray(robot.peak_torque)
    for k in range(K):
        rhs = np.asarray(fns.rnea(Q[:, k], V[:, k], A[:, k])).ravel()
        cols = [np.vstack([np.zeros((3, nj)), np.eye(nj)])]
        for c in lay.contacts:
            cols.append(np.asarray(fns.point(c.point)(Q[:, k], V[:, k])[2]).T)
        sol = np.linalg.lstsq(np.hstack(cols), rhs, rcond=None)[0]
        tau[:, k] = np.clip(sol[:nj], -peak, peak)
        if lay.nc:
            lk = sol[nj:].reshape(lay.nc, 2)
            lk[:, 1] = np.maximum(lk[:, 1], 0.0)
            lam[:, k] = lk.reshape(-1)
    return tau, lam
