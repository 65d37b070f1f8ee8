"""Time-varying LQR around a planned flight phase (the published finite-horizon discrete LQR).

1. **Linearize** the free-flight dynamics ``x' = f(x, u)``, ``x = (q, qd)`` (2 nq), ``u`` the joint
   torques (nj), ``f = (qd, aba(q, qd, S^T (u - b qd)))`` with the joints' viscous friction b, by
   CasADi Jacobians of :func:`kipup.core.dynamics.aba` at the planned states and torques.
2. **Discretize** each linearization for a zero-order hold of period ``dt`` (the control period)
   exactly: ``[[A_d, B_d], [0, I]] = expm([[A, B], [0, 0]] dt)`` (SciPy ``expm``).
3. **Backward Riccati recursion** over the finite horizon ``k = N-1 .. 0``::

       K_k = (R + B_k^T P_k+1 B_k)^-1 B_k^T P_k+1 A_k
       P_k = Q + A_k^T P_k+1 (A_k - B_k K_k),      P_N = Q_f

   (any optimal-control text, e.g. Anderson & Moore, *Optimal Control: Linear Quadratic
   Methods*, 1990, ch. 2), giving ``u_k = u_ff,k - K_k (x_k - x_ref,k)``.

The weights: the landing attitude matters most, so the terminal cost puts a large weight on base
pitch and its rate; the running cost keeps joints near the plan; R scales each torque by its
actuator's peak torque. Base x and z are left out: in flight the COM moves ballistically whatever
the torques, so they are not controllable (only their offset from the COM is).

Units: SI, rad; gains in N m per unit of the state entry (rad, m, rad/s, m/s).
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import casadi as ca
import numpy as np
from scipy.linalg import expm

from . import dynamics as dyn
from .motion import Motion
from .robot import Robot

__all__ = ["FlightLQR", "LQRWeights", "tvlqr", "linearize", "discretize", "flight_lqr"]


def tvlqr(A: list[np.ndarray], B: list[np.ndarray], Q: np.ndarray, R: np.ndarray,
          Qf: np.ndarray) -> tuple[list[np.ndarray], list[np.ndarray]]:
    """Finite-horizon discrete LQR: gains K_0..K_N-1 and cost-to-go P_0..P_N for x_k+1 = A_k x_k + B_k u_k,
    cost ``x_N^T Qf x_N + sum_k (x_k^T Q x_k + u_k^T R u_k)``."""
    if len(A) != len(B):
        raise ValueError(f"A and B must have the same length; got {len(A)} and {len(B)}")
    N = len(A)
    P = [None] * (N + 1)
    K = [None] * N
    P[N] = np.asarray(Qf, dtype=float)
    for k in range(N - 1, -1, -1):
        Ak, Bk, Pn = A[k], B[k], P[k + 1]
        BtP = Bk.T @ Pn
        K[k] = np.linalg.solve(R + BtP @ Bk, BtP @ Ak)
        Pk = Q + Ak.T @ Pn @ (Ak - Bk @ K[k])
        P[k] = 0.5 * (Pk + Pk.T)
    return K, P


def _jacobian_function(robot: Robot) -> ca.Function:
    key = "_kipup_flight_jacobians"
    fn = robot.__dict__.get(key)
    if fn is None:
        n, nj = robot.nq, robot.nj
        q, qd, u = ca.SX.sym("q", n), ca.SX.sym("qd", n), ca.SX.sym("u", nj)
        b = ca.DM([j.actuator.viscous_friction for j in robot.joints]) if nj else ca.DM.zeros(0, 1)
        tau = ca.vertcat(ca.SX.zeros(3), u - b * qd[3:])
        qdd = dyn.aba(robot, q, qd, tau)
        x = ca.vertcat(q, qd)
        f = ca.vertcat(qd, qdd)
        fn = ca.Function("flight_jac", [q, qd, u], [ca.jacobian(f, x), ca.jacobian(f, u)],
                         ["q", "qd", "u"], ["A", "B"])
        object.__setattr__(robot, key, fn)
    return fn


def linearize(robot: Robot, q: np.ndarray, qd: np.ndarray, u: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Continuous-time Jacobians (A (2nq x 2nq), B (2nq x nj)) of free flight at (q, qd, u)."""
    A, B = _jacobian_function(robot)(q, qd, u)
    return A.full(), B.full()


def discretize(A: np.ndarray, B: np.ndarray, dt: float) -> tuple[np.ndarray, np.ndarray]:
    """Exact zero-order-hold discretization of (A, B) over ``dt`` (s)."""
    n, m = B.shape
    E = np.zeros((n + m, n + m))
    E[:n, :n], E[:n, n:] = A, B
    F = expm(E * dt)
    return F[:n, :n], F[:n, n:]


@dataclass
class LQRWeights:
    """Diagonal LQR weights, per unit of each state entry (see the module docstring).

    joint, joint_rate: running cost on joint angle (1/rad^2) and rate errors; pitch, pitch_rate:
    running cost on base pitch; final_pitch, final_pitch_rate, final_joint: terminal cost;
    torque: weight on (u / peak torque)^2.
    """

    joint: float = 10.0
    joint_rate: float = 0.05
    pitch: float = 50.0
    pitch_rate: float = 1.0
    final_pitch: float = 2000.0
    final_pitch_rate: float = 20.0
    final_joint: float = 20.0
    torque: float = 0.05

    def __post_init__(self) -> None:
        for k, v in vars(self).items():
            if not (isinstance(v, (int, float)) and math.isfinite(v) and v >= 0):
                raise ValueError(f"LQRWeights.{k} must be a finite number >= 0; got {v!r}")


@dataclass
class FlightLQR:
    """Gains of one flight phase: ``K[k]`` (nj x 2nq) holds on ``[start + k dt, start + (k+1) dt)``."""

    phase: str
    start: float
    end: float
    dt: float
    K: np.ndarray

    def gain_at(self, t: float) -> np.ndarray | None:
        """The gain for reference time t (s), or None outside the phase."""
        if not (self.start <= t < self.end):
            return None
        k = min(int((t - self.start) / self.dt), len(self.K) - 1)
        return self.K[k]

    def settings(self) -> dict:
        return {"phase": self.phase, "start": self.start, "end": self.end, "dt": self.dt, "steps": int(len(self.K))}


def flight_lqr(motion: Motion, robot: Robot, *, control_rate_hz: float = 500.0, phase: str | None = None,
               weights: LQRWeights | None = None) -> FlightLQR:
    """TV-LQR gains around ``phase`` (default: the first phase without contacts) of ``motion``."""
    motion.check_robot(robot)
    if not (isinstance(control_rate_hz, (int, float)) and math.isfinite(control_rate_hz) and control_rate_hz > 0):
        raise ValueError(f"control_rate_hz must be a positive number; got {control_rate_hz!r}")
    w = weights or LQRWeights()
    if phase is None:
        flights = [p for p in motion.phases if not p.contacts]
        if not flights:
            raise ValueError("the motion has no flight phase (a phase without contacts) to stabilize")
        span = flights[0]
    else:
        span = motion.phase(phase)
        if span.contacts:
            raise ValueError(f"phase {phase!r} has contacts {span.contacts}: TV-LQR here is for free flight")
    dt = 1.0 / float(control_rate_hz)
    N = max(1, int(math.ceil(span.duration / dt - 1e-9)))
    times = np.minimum(span.start + dt * np.arange(N), span.end)
    ref = motion.sample(times)
    u_ff = motion.sample_torques(times)
    nq, nj = robot.nq, robot.nj
    A_list, B_list = [], []
    for k in range(N):
        A, B = linearize(robot, ref["q"][k], ref["qd"][k], u_ff[k])
        Ad, Bd = discretize(A, B, dt)
        A_list.append(Ad)
        B_list.append(Bd)
    Q = np.zeros(2 * nq)
    Q[3:nq] = w.joint
    Q[nq + 3:] = w.joint_rate
    Q[2], Q[nq + 2] = w.pitch, w.pitch_rate
    Qf = np.zeros(2 * nq)
    Qf[3:nq] = w.final_joint
    Qf[2], Qf[nq + 2] = w.final_pitch, w.final_pitch_rate
    peak = np.array(robot.peak_torque, dtype=float)
    R = np.diag(w.torque / peak ** 2) if nj else np.zeros((0, 0))
    K, _ = tvlqr(A_list, B_list, np.diag(Q), R, np.diag(Qf))
    return FlightLQR(phase=span.name, start=span.start, end=span.end, dt=dt, K=np.array(K))
