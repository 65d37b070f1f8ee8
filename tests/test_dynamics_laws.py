"""Physical laws and identities kipup's dynamics must obey (no other software involved).

* Acrobot: Spong's closed-form two-link equations of motion (sources named at the test).
* Energy: with zero torque the total energy T + V of the free-floating robot is constant.
* Free flight: the COM falls with (0, -g) whatever the joint torques, and the angular
  momentum about the COM is constant (Newton-Euler for the whole system: gravity is the
  only external force and acts at the COM).
* Identities between kipup's own functions: ABA inverts RNEA, M is symmetric positive
  definite and equals d tau / d qdd, the point Jacobian is the derivative of the point
  position, T = qd^T M qd / 2, g(q) = dV/dq.
"""
from __future__ import annotations

import math

import casadi as ca
import numpy as np
import pytest

from kipup.core import dynamics as dyn
from kipup.core.compiled import functions_for
from kipup.core.robot import Actuator, Joint, Link, Robot

BUNDLED = ("humanoid", "quadruped")


def bundled(name: str) -> Robot:
    from kipup.core.robot_file import load_bundled

    return load_bundled(name)


@pytest.fixture(scope="module", params=BUNDLED)
def robot(request) -> Robot:
    return bundled(request.param)


def random_state(robot: Robot, rng: np.random.Generator):
    n = robot.nv
    q = np.concatenate([rng.uniform(-1.0, 1.0, 2), rng.uniform(-math.pi, math.pi, n - 2)])
    return q, rng.uniform(-4.0, 4.0, n), rng.uniform(-10.0, 10.0, n)


def close(a, b, tol: float, scale: float | None = None) -> bool:
    a, b = np.asarray(a, float), np.asarray(b, float)
    s = max(1.0, float(np.max(np.abs(b))) if scale is None else scale)
    return float(np.max(np.abs(a - b))) <= tol * s


# ===== Acrobot ==============================================================================
# Source: M. W. Spong, "The swing up control problem for the Acrobot", IEEE Control Systems
# Magazine 15(1), 1995, eqs. (1)-(2); the same two-link planar arm equations are in
# M. W. Spong and M. Vidyasagar, "Robot Dynamics and Control", Wiley 1989 (chapter 6).
# Written here FROM MEMORY, not copied from the text:
#   d11 = m1 lc1^2 + m2 (l1^2 + lc2^2 + 2 l1 lc2 cos q2) + I1 + I2
#   d12 = d21 = m2 (lc2^2 + l1 lc2 cos q2) + I2,   d22 = m2 lc2^2 + I2
#   h1 = -m2 l1 lc2 sin q2 qd2^2 - 2 m2 l1 lc2 sin q2 qd2 qd1,   h2 = m2 l1 lc2 sin q2 qd1^2
#   phi2 = m2 lc2 g cos(q1 + q2),   phi1 = (m1 lc1 + m2 l1) g cos q1 + phi2
#   D(q) qdd + h(q, qd) + phi(q) = tau
# Spong's angles: q1 is link 1's angle from the horizontal X axis, counterclockwise in the
# (X right, Y up) plane; q2 is link 2's angle relative to link 1, same sense. I1, I2 are the
# links' inertias about their COMs, lc1, lc2 the pivot-to-COM distances along each link.
#
# Mapping to kipup. Take Spong's plane as kipup's (X = x, Y = z). A kipup frame at angle
# theta sends its body +x axis to world (cos theta, -sin theta): that is Spong's direction
# at angle -theta (kipup's positive angle turns +z towards +x, i.e. clockwise in this
# picture). So with each link lying along its body +x axis, link 1 = the floating base
# pivoting at the base frame origin, q1 = -pitch, q2 = -q_joint: the coordinate map is
# T = -I, which leaves D unchanged (T^T D T = D) and flips the sign of generalized forces,
# tau_kipup = -tau_spong. The base x, z are held fixed (their rates and accelerations are
# zero), so the pitch/joint rows and columns of kipup's equations are the acrobot's.
ACROBOT_PARAMS = {
    # Spong 1995's simulation values as remembered (from memory): m1 = m2 = 1 kg, l1 = 1 m,
    # l2 = 2 m (not used: only the COM distance matters), lc1 = 0.5 m, lc2 = 1 m,
    # I1 = 0.083, I2 = 0.33 kg m^2, g = 9.8 m/s^2.
    "spong1995": dict(m1=1.0, m2=1.0, l1=1.0, lc1=0.5, lc2=1.0, I1=0.083, I2=0.33, g=9.8),
    # Two uniform 1 m, 1 kg rods (I = m l^2 / 12 about the COM).
    "uniform_rods": dict(m1=1.0, m2=1.0, l1=1.0, lc1=0.5, lc2=0.5, I1=1 / 12, I2=1 / 12, g=9.81),
    # Deliberately unequal values so no term can hide behind a symmetry.
    "unequal": dict(m1=2.3, m2=0.7, l1=0.8, lc1=0.35, lc2=0.6, I1=0.11, I2=0.045, g=9.81),
}

_ACT = Actuator(peak_torque=10.0, gear_ratio=1.0, stall_torque=10.0, no_load_speed=30.0)


def acrobot_robot(p: dict) -> Robot:
    links = (Link("link1", p["m1"], (p["lc1"], 0.0), p["I1"]), Link("link2", p["m2"], (p["lc2"], 0.0), p["I2"]))
    joints = (Joint("elbow", "link1", "link2", (p["l1"], 0.0), -math.pi, math.pi, 30.0, _ACT),)
    return Robot("acrobot", links, joints, gravity=p["g"])


def spong_terms(p: dict, q1, q2, qd1, qd2):
    """Spong's D (2x2), h (2) and phi (2) in his own coordinates."""
    m1, m2, l1, lc1, lc2, I1, I2, g = (p[k] for k in ("m1", "m2", "l1", "lc1", "lc2", "I1", "I2", "g"))
    c2, s2 = math.cos(q2), math.sin(q2)
    d11 = m1 * lc1**2 + m2 * (l1**2 + lc2**2 + 2 * l1 * lc2 * c2) + I1 + I2
    d12 = m2 * (lc2**2 + l1 * lc2 * c2) + I2
    d22 = m2 * lc2**2 + I2
    h1 = -m2 * l1 * lc2 * s2 * qd2**2 - 2 * m2 * l1 * lc2 * s2 * qd2 * qd1
    h2 = m2 * l1 * lc2 * s2 * qd1**2
    phi2 = m2 * lc2 * g * math.cos(q1 + q2)
    phi1 = (m1 * lc1 + m2 * l1) * g * math.cos(q1) + phi2
    return np.array([[d11, d12], [d12, d22]]), np.array([h1, h2]), np.array([phi1, phi2])


@pytest.mark.parametrize("params", list(ACROBOT_PARAMS), ids=list(ACROBOT_PARAMS))
def test_acrobot_matches_spong(params):
    p = ACROBOT_PARAMS[params]
    robot = acrobot_robot(p)
    rng = np.random.default_rng(1995)
    for _ in range(25):
        pitch, qj = rng.uniform(-math.pi, math.pi, 2)
        pitch_d, qj_d = rng.uniform(-5.0, 5.0, 2)
        qdd_k = rng.uniform(-20.0, 20.0, 2)
        q = np.array([rng.uniform(-2, 2), rng.uniform(-2, 2), pitch, qj])  # base x, z: anywhere, held
        qd = np.array([0.0, 0.0, pitch_d, qj_d])
        qdd = np.array([0.0, 0.0, *qdd_k])
        D, h, phi = spong_terms(p, -pitch, -qj, -pitch_d, -qj_d)

        M = dyn.crba(robot, q)[2:, 2:]
        assert close(M, D, 1e-12), (M, D)
        bias = dyn.bias_forces(robot, q, qd)[2:]
        assert close(bias, -(h + phi), 1e-12), (bias, -(h + phi))
        # tau_spong = D qdd_spong + h + phi with qdd_spong = -qdd_kipup; tau_kipup = -tau_spong
        tau = dyn.rnea(robot, q, qd, qdd)[2:]
        assert close(tau, D @ qdd_k - h - phi, 1e-12)


def test_acrobot_mapping_is_not_vacuous():
    """The comparison can fail: the wrong sign convention (q_spong = +q_kipup) is rejected."""
    p = ACROBOT_PARAMS["unequal"]
    robot = acrobot_robot(p)
    q = np.array([0.0, 0.0, 0.4, 0.9])
    qd = np.array([0.0, 0.0, 1.5, -2.0])
    _, h, phi = spong_terms(p, 0.4, 0.9, 1.5, -2.0)
    assert not close(dyn.bias_forces(robot, q, qd)[2:], -(h + phi), 1e-3)
    assert not close(dyn.bias_forces(robot, q, qd)[2:], h + phi, 1e-3)


# ===== integration helpers (CasADi: one call integrates the whole trajectory) ==============
def rk4_trajectory(robot: Robot, x0: np.ndarray, dt: float, steps: int, torque=None, aba_robot=None):
    """States (2 nv x steps+1) of a fixed-step RK4 integration of xd = (qd, aba(q, qd, tau(t, x))).

    ``torque(t, q, qd)`` builds a CasADi expression (zero if None); ``aba_robot`` integrates
    with another robot's ABA (for the negative control).
    """
    n = robot.nv
    aba = functions_for(aba_robot or robot).aba
    x = ca.SX.sym("x", 2 * n)
    t = ca.SX.sym("t")

    def f(tt, xx):
        q, qd = xx[:n], xx[n:]
        tau = torque(tt, q, qd) if torque is not None else ca.SX.zeros(n)
        return ca.vertcat(qd, aba(q, qd, tau))

    k1 = f(t, x)
    k2 = f(t + dt / 2, x + dt / 2 * k1)
    k3 = f(t + dt / 2, x + dt / 2 * k2)
    k4 = f(t + dt, x + dt * k3)
    step = ca.Function("step", [ca.vertcat(x, t)], [ca.vertcat(x + dt / 6 * (k1 + 2 * k2 + 2 * k3 + k4), t + dt)])
    xs = step.mapaccum("traj", steps)(np.concatenate([x0, [0.0]])).full()
    return np.hstack([x0[:, None], xs[:-1, :]])


def energy_fn(robot: Robot, steps: int) -> ca.Function:
    """(T, V, T_internal) at each of ``steps`` states; T_internal = T - m |v_com|^2 / 2."""
    n = robot.nv
    x = ca.SX.sym("x", 2 * n)
    T = dyn.kinetic_energy(robot, x[:n], x[n:])
    V = dyn.potential_energy(robot, x[:n])
    vc = dyn.com_velocity(robot, x[:n], x[n:])
    return ca.Function("energy", [x], [ca.vertcat(T, V, T - 0.5 * robot.total_mass * ca.sumsqr(vc))]).map(steps)


def initial_state(robot: Robot, rng: np.random.Generator) -> np.ndarray:
    q, qd, _ = random_state(robot, rng)
    qd[1] = robot.gravity * 1.0  # thrown upwards: apex at t = 1 s, back to the start height at 2 s
    return np.concatenate([q, qd])


# ===== energy conservation ==================================================================
def test_energy_is_conserved(robot):
    """Zero torque, no contact, RK4 with dt = 0.5 ms for 2 s: |E(t) - E(0)| <= 1e-6 max T_internal.

    The drift is measured against the largest kinetic energy *relative to the COM* (the
    joints' and the pitch's share, about 0.1-2 J here), not against the total T + V, which
    the ballistic throw makes ~1000 times larger and so would hide errors.
    """
    rng = np.random.default_rng(42)
    dt, steps = 5e-4, 4000
    for _ in range(2):
        xs = rk4_trajectory(robot, initial_state(robot, rng), dt, steps)
        T, V, T_int = energy_fn(robot, steps + 1)(xs).full()
        E = T + V
        drift = float(np.max(np.abs(E - E[0])))
        scale = float(np.max(T_int))
        assert scale > 0.05
        assert drift <= 1e-6 * scale, f"energy drift {drift:.3e} J vs max internal T {scale:.3g} J"


def test_energy_check_can_fail():
    """Negative control: integrating a robot whose one link is 2% heavier (same energy measure) drifts."""
    robot = bundled("humanoid")
    k = len(robot.links) - 1
    heavy = robot.links[k]
    links = list(robot.links)
    links[k] = Link(heavy.name, heavy.mass * 1.02, heavy.com, heavy.inertia * 1.02, heavy.capsule, heavy.sides)
    wrong = Robot(robot.name, tuple(links), robot.joints, robot.points, robot.gravity)
    dt, steps = 5e-4, 4000
    xs = rk4_trajectory(robot, initial_state(robot, np.random.default_rng(42)), dt, steps, aba_robot=wrong)
    T, V, T_int = energy_fn(robot, steps + 1)(xs).full()
    E = T + V
    assert np.max(np.abs(E - E[0])) > 1e-3 * np.max(T_int)  # 1000 times the tolerance above


# ===== free flight ==========================================================================
def momentum_rates(robot: Robot) -> ca.Function:
    """(COM acceleration, d/dt centroidal momentum, |largest term|) along aba, by exact AD."""
    n = robot.nv
    q, qd, tau = (ca.SX.sym(s, n) for s in ("q", "qd", "tau"))
    qdd = functions_for(robot).aba(q, qd, tau)
    vc = dyn.com_velocity(robot, q, qd)
    h = dyn.centroidal_momentum(robot, q, qd)

    def rate(e):
        return ca.jtimes(e, q, qd) + ca.jtimes(e, qd, qdd)

    size = ca.mmax(ca.fabs(ca.jacobian(h, qd) @ qdd))
    return ca.Function("rates", [q, qd, tau], [rate(vc), rate(h), size])


def test_free_flight_com_and_angular_momentum(robot):
    """Any joint torques, no base force: COM acceleration (0, -g); d/dt (k, px, pz) = (0, 0, -m g)."""
    rates = momentum_rates(robot)
    rng = np.random.default_rng(5)
    m, g = robot.total_mass, robot.gravity
    for _ in range(30):
        q, qd, _ = random_state(robot, rng)
        tau = np.concatenate([np.zeros(3), rng.uniform(-40.0, 40.0, robot.nj)])
        acc, hdot, size = (np.asarray(v.full()).ravel() for v in rates(q, qd, tau))
        assert close(acc, [0.0, -g], 1e-9, scale=size[0] / m), acc
        assert abs(hdot[0]) <= 1e-7 * max(1.0, size[0]), hdot
        assert close(hdot[1:], [0.0, -m * g], 1e-9, scale=size[0]), hdot


def test_base_torque_changes_angular_momentum():
    """Positive control for the test above: a pure couple tau on the base gives dk/dt = tau."""
    robot = bundled("quadruped")
    rates = momentum_rates(robot)
    rng = np.random.default_rng(6)
    q, qd, _ = random_state(robot, rng)
    tau = np.concatenate([[0.0, 0.0, 3.5], rng.uniform(-10, 10, robot.nj)])
    _, hdot, size = (np.asarray(v.full()).ravel() for v in rates(q, qd, tau))
    assert abs(hdot[0] - 3.5) <= 1e-7 * max(1.0, size[0])


def test_free_flight_angular_momentum_is_constant(robot):
    """0.5 s of flight under random joint torques (RK4, dt = 0.125 ms): k constant to 1e-8 relative.

    Torques: per joint a random sinusoid plus viscous damping (internal, so momentum is still
    conserved; the damping keeps light links from spinning up without bound).
    """
    rng = np.random.default_rng(8)
    n, nj = robot.nv, robot.nj
    amp = rng.uniform(-3.0, 3.0, nj)
    omega = rng.uniform(2.0, 12.0, nj)
    phase = rng.uniform(0.0, 2 * math.pi, nj)

    def torque(t, q, qd):
        joints = [amp[k] * ca.sin(omega[k] * t + phase[k]) - 0.2 * qd[3 + k] for k in range(nj)]
        return ca.vertcat(0.0, 0.0, 0.0, *joints)

    x0 = initial_state(robot, rng)
    x0[n + 2] = 3.0  # a brisk pitch rate, so k(0) is far from zero
    steps = 4000
    xs = rk4_trajectory(robot, x0, 0.5 / steps, steps, torque=torque)
    x = ca.SX.sym("x", 2 * n)
    h = ca.Function("h", [x], [dyn.centroidal_momentum(robot, x[:n], x[n:])]).map(steps + 1)(xs).full()
    k = h[0]
    assert abs(k[0]) > 1.0
    assert np.max(np.abs(k - k[0])) <= 1e-8 * abs(k[0]), np.max(np.abs(k - k[0])) / abs(k[0])
    # ... and it really moved: the joints were driven.
    assert np.max(np.abs(xs[3:n, -1] - xs[3:n, 0])) > 0.05
    # linear momentum: px constant, pz = pz(0) - m g t
    t = np.arange(steps + 1) * 0.5 / steps
    m = robot.total_mass
    assert close(h[1], np.full(steps + 1, h[1][0]), 1e-8, scale=m * robot.gravity)
    assert close(h[2], h[2][0] - m * robot.gravity * t, 1e-8, scale=m * robot.gravity)


# ===== identities ===========================================================================
def test_aba_inverts_rnea(robot):
    f = functions_for(robot)
    rng = np.random.default_rng(9)
    for _ in range(20):
        q, qd, qdd = random_state(robot, rng)
        tau = dyn.rnea(robot, q, qd, qdd)
        assert close(dyn.aba(robot, q, qd, tau), qdd, 1e-9)
        assert close(f.aba(q, qd, f.rnea(q, qd, qdd)).full().ravel(), qdd, 1e-9)
        # and the other way round, through M and the bias: aba = M^-1 (tau - h)
        M, hb = dyn.crba(robot, q), dyn.bias_forces(robot, q, qd)
        assert close(dyn.aba(robot, q, qd, tau), np.linalg.solve(M, tau - hb), 1e-9)
        assert close(M @ qdd + hb, tau, 1e-9)


def test_mass_matrix_symmetric_positive_definite(robot):
    rng = np.random.default_rng(10)
    for _ in range(20):
        q, _, _ = random_state(robot, rng)
        M = dyn.crba(robot, q)
        assert np.array_equal(M, M.T)
        assert np.linalg.eigvalsh(M).min() > 0.0
        np.linalg.cholesky(M)
        # the translational block is the total mass
        assert close(M[:2, :2], robot.total_mass * np.eye(2), 1e-12)


def test_mass_matrix_is_jacobian_of_rnea(robot):
    n = robot.nv
    q, qd, qdd = (ca.SX.sym(s, n) for s in ("q", "qd", "qdd"))
    J = ca.Function("dtau_dqdd", [q, qd, qdd], [ca.jacobian(dyn.rnea(robot, q, qd, qdd), qdd)])
    rng = np.random.default_rng(11)
    for _ in range(10):
        qv, qdv, qddv = random_state(robot, rng)
        assert close(J(qv, qdv, qddv).full(), dyn.crba(robot, qv), 1e-10)


def test_point_jacobians_are_derivatives(robot):
    n = robot.nv
    q, qd = ca.SX.sym("q", n), ca.SX.sym("qd", n)
    rng = np.random.default_rng(12)
    states = [random_state(robot, rng)[:2] for _ in range(5)]
    for name in robot.point_names:
        p = dyn.point_position(robot, q, name)
        J = dyn.point_jacobian(robot, q, name)
        fn = ca.Function("d", [q, qd], [ca.jacobian(p, q), J, ca.jtimes(J @ qd, q, qd),
                                        dyn.point_jdot_qdot(robot, q, qd, name)])
        for qv, qdv in states:
            dp, Jv, jdot_ad, jdot = (v.full() for v in fn(qv, qdv))
            assert close(Jv, dp, 1e-12), name
            assert close(jdot, jdot_ad, 1e-10), name


def test_energy_identities(robot):
    """T = qd^T M qd / 2; gravity forces g(q) = dV/dq; momentum (px, pz) = m * COM velocity."""
    n = robot.nv
    q = ca.SX.sym("q", n)
    dV = ca.Function("dV", [q], [ca.gradient(dyn.potential_energy(robot, q), q)])
    rng = np.random.default_rng(13)
    for _ in range(10):
        qv, qdv, _ = random_state(robot, rng)
        M = dyn.crba(robot, qv)
        assert close(dyn.kinetic_energy(robot, qv, qdv), 0.5 * qdv @ M @ qdv, 1e-10)
        assert close(dyn.gravity_forces(robot, qv), dV(qv).full().ravel(), 1e-10)
        assert close(dyn.centroidal_momentum(robot, qv, qdv)[1:],
                     robot.total_mass * dyn.com_velocity(robot, qv, qdv), 1e-10)
