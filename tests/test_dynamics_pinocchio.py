"""kipup's planar dynamics against the Pinocchio rigid-body library.

Source of the reference values: Pinocchio (``pin`` on PyPI), a general 3D rigid-body
dynamics library; the model is built from each kipup robot by :mod:`pinocchio_ref`
(prismatic-x, prismatic-z and revolute-y joints for the floating base, revolute-y joints
for the limbs). Checked at random states, for the two bundled robots and for random trees
drawn by hypothesis: the joint-space inertia matrix (pin.crba), bias forces
(pin.nonLinearEffects), inverse dynamics (pin.rnea), forward dynamics (pin.aba), named
point positions, 2 x nv point Jacobians (LOCAL_WORLD_ALIGNED rows x, z), J-dot q-dot
(classical acceleration at qdd = 0), COM position and velocity, centroidal angular
momentum, and kinetic and potential energy. Tolerance 1e-9, relative to the size of the
reference value when it is larger than 1.

kipup is evaluated three ways: the NumPy path of :mod:`kipup.core.dynamics`, the cached
SX CasADi Functions of :func:`kipup.core.compiled.functions_for`, and (once) the same
algorithms traced with CasADi MX symbols.
"""
from __future__ import annotations

import math

import casadi as ca
import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import pinocchio as pin  # the reference (a test-only dependency: the pyproject [test] extra)

from kipup.core import dynamics as dyn
from kipup.core.compiled import functions_for
from kipup.core.robot import Actuator, Joint, Link, Point, Robot
from pinocchio_ref import PinocchioReference

TOL = 1e-9
BUNDLED = ("humanoid", "quadruped")


def bundled(name: str) -> Robot:
    from kipup.core.robot_file import load_bundled

    return load_bundled(name)


def assert_close(actual, expected, what: str, tol: float = TOL) -> None:
    """|actual - expected| <= tol * max(1, max|expected|), entrywise."""
    a = np.asarray(actual, dtype=float)
    e = np.asarray(expected, dtype=float)
    assert a.shape == e.shape, f"{what}: shape {a.shape} != {e.shape}"
    scale = max(1.0, float(np.max(np.abs(e))) if e.size else 1.0)
    err = float(np.max(np.abs(a - e))) if e.size else 0.0
    assert err <= tol * scale, f"{what}: max error {err:.3e} > {tol:.0e} * {scale:.3g}\n{a}\nvs\n{e}"


def random_state(robot: Robot, rng: np.random.Generator) -> tuple[np.ndarray, ...]:
    n = robot.nv
    q = np.concatenate([rng.uniform(-1.0, 1.0, 2), rng.uniform(-math.pi, math.pi, n - 2)])
    qd = rng.uniform(-4.0, 4.0, n)
    qdd = rng.uniform(-10.0, 10.0, n)
    tau = rng.uniform(-30.0, 30.0, n)
    return q, qd, qdd, tau


# ----- the checks, one state at a time ---------------------------------------------------
def check_numpy(robot: Robot, ref: PinocchioReference, q, qd, qdd, tau) -> None:
    assert_close(dyn.crba(robot, q), ref.mass_matrix(q), "M (crba)")
    assert_close(dyn.bias_forces(robot, q, qd), ref.bias(q, qd), "bias forces")
    assert_close(dyn.rnea(robot, q, qd, qdd), ref.rnea(q, qd, qdd), "rnea")
    assert_close(dyn.aba(robot, q, qd, tau), ref.aba(q, qd, tau), "aba")
    for p in robot.point_names:
        assert_close(dyn.point_position(robot, q, p), ref.point_position(q, p), f"position of {p}")
        assert_close(dyn.point_jacobian(robot, q, p), ref.point_jacobian(q, p), f"Jacobian of {p}")
        assert_close(dyn.point_jdot_qdot(robot, q, qd, p), ref.point_jdot_qdot(q, qd, p), f"Jdot qd of {p}")
        assert_close(dyn.point_velocity(robot, q, qd, p), ref.point_jacobian(q, p) @ qd, f"velocity of {p}")
    c, cd = ref.com(q, qd)
    assert_close(dyn.center_of_mass(robot, q), c, "COM")
    assert_close(dyn.com_velocity(robot, q, qd), cd, "COM velocity")
    assert_close(dyn.centroidal_momentum(robot, q, qd), ref.centroidal_momentum(q, qd), "centroidal momentum")
    assert_close(dyn.kinetic_energy(robot, q, qd), ref.kinetic_energy(q, qd), "kinetic energy")
    assert_close(dyn.potential_energy(robot, q), ref.potential_energy(q), "potential energy")


def check_compiled(robot: Robot, ref: PinocchioReference, q, qd, qdd, tau) -> None:
    f = functions_for(robot)
    assert_close(f.crba(q).full(), ref.mass_matrix(q), "compiled crba")
    assert_close(f.bias(q, qd).full().ravel(), ref.bias(q, qd), "compiled bias")
    assert_close(f.rnea(q, qd, qdd).full().ravel(), ref.rnea(q, qd, qdd), "compiled rnea")
    assert_close(f.aba(q, qd, tau).full().ravel(), ref.aba(q, qd, tau), "compiled aba")
    c, cd = f.com(q, qd)
    rc, rcd = ref.com(q, qd)
    assert_close(c.full().ravel(), rc, "compiled COM")
    assert_close(cd.full().ravel(), rcd, "compiled COM velocity")
    assert_close(f.momentum(q, qd).full().ravel(), ref.centroidal_momentum(q, qd), "compiled momentum")
    for p in robot.point_names:
        pos, vel, J, jdqd = f.point(p)(q, qd)
        assert_close(pos.full().ravel(), ref.point_position(q, p), f"compiled position of {p}")
        assert_close(J.full(), ref.point_jacobian(q, p), f"compiled Jacobian of {p}")
        assert_close(vel.full().ravel(), ref.point_jacobian(q, p) @ qd, f"compiled velocity of {p}")
        assert_close(jdqd.full().ravel(), ref.point_jdot_qdot(q, qd, p), f"compiled Jdot qd of {p}")


# ----- the bundled robots -----------------------------------------------------------------
@pytest.fixture(scope="module", params=BUNDLED)
def robot_and_ref(request):
    robot = bundled(request.param)
    return robot, PinocchioReference(robot)


def test_reference_model_matches_robot(robot_and_ref):
    """The Pinocchio model has one joint per kipup coordinate and the same total mass."""
    robot, ref = robot_and_ref
    assert ref.model.nq == robot.nq and ref.model.nv == robot.nv
    assert [ref.model.names[i + 1] for i in range(3)] == ["base_x", "base_z", "base_pitch"]
    assert [ref.model.names[4 + i] for i in range(robot.nj)] == [robot.coord_names[k] for k in ref.perm[3:]]
    assert sorted(ref.perm) == list(range(robot.nv))
    assert math.isclose(pin.computeTotalMass(ref.model), robot.total_mass, rel_tol=1e-12)
    assert robot.points, "bundled robots are expected to name some points"


def test_bundled_numpy(robot_and_ref):
    robot, ref = robot_and_ref
    rng = np.random.default_rng(20240601)
    for _ in range(20):
        check_numpy(robot, ref, *random_state(robot, rng))


def test_bundled_compiled(robot_and_ref):
    robot, ref = robot_and_ref
    rng = np.random.default_rng(7)
    for _ in range(20):
        check_compiled(robot, ref, *random_state(robot, rng))


def test_bundled_zero_state(robot_and_ref):
    """At q = 0 (an exactly representable configuration) too, not only at random ones."""
    robot, ref = robot_and_ref
    z = np.zeros(robot.nv)
    tau = np.linspace(-5.0, 5.0, robot.nv)
    check_numpy(robot, ref, z, z, z, tau)


def test_mx_path_once():
    """The same algorithms traced with CasADi MX symbols (not SX) give Pinocchio's values."""
    robot = bundled("humanoid")
    ref = PinocchioReference(robot)
    n = robot.nv
    q, qd, qdd, tau = (ca.MX.sym(s, n) for s in ("q", "qd", "qdd", "tau"))
    point = robot.point_names[0]
    fn = ca.Function(
        "mx_all", [q, qd, qdd, tau],
        [dyn.crba(robot, q), dyn.rnea(robot, q, qd, qdd), dyn.aba(robot, q, qd, tau),
         dyn.bias_forces(robot, q, qd), dyn.point_position(robot, q, point),
         dyn.point_jacobian(robot, q, point), dyn.point_jdot_qdot(robot, q, qd, point),
         dyn.center_of_mass(robot, q), dyn.com_velocity(robot, q, qd),
         dyn.centroidal_momentum(robot, q, qd), dyn.kinetic_energy(robot, q, qd),
         dyn.potential_energy(robot, q)])
    assert isinstance(dyn.rnea(robot, q, qd, qdd), ca.MX)
    rng = np.random.default_rng(3)
    for _ in range(3):
        s = random_state(robot, rng)
        qv, qdv, qddv, tauv = s
        out = [o.full() for o in fn(*s)]
        c, cd = ref.com(qv, qdv)
        expected = [ref.mass_matrix(qv), ref.rnea(qv, qdv, qddv), ref.aba(qv, qdv, tauv), ref.bias(qv, qdv),
                    ref.point_position(qv, point), ref.point_jacobian(qv, point),
                    ref.point_jdot_qdot(qv, qdv, point), c, cd, ref.centroidal_momentum(qv, qdv),
                    ref.kinetic_energy(qv, qdv), ref.potential_energy(qv)]
        names = ["M", "rnea", "aba", "bias", "p", "J", "Jdqd", "com", "vcom", "momentum", "T", "V"]
        for name, got, want in zip(names, out, expected):
            want = np.asarray(want, float)
            assert_close(got.reshape(want.shape), want, f"MX {name}")


# ----- random trees -----------------------------------------------------------------------
_ACT = Actuator(peak_torque=10.0, gear_ratio=10.0, stall_torque=12.0, no_load_speed=20.0)
_coord = st.floats(-0.6, 0.6, allow_nan=False)
_vec2 = st.tuples(_coord, _coord)


@st.composite
def random_trees(draw) -> Robot:
    """An invented tree: 1..8 revolute joints, each on a random earlier link, random constants."""
    n = draw(st.integers(1, 8))
    links, joints = [], []
    for k in range(n + 1):
        mass = draw(st.floats(0.05, 20.0))
        inertia = draw(st.floats(1e-3, 2.0))
        links.append(Link(f"l{k}", mass, draw(_vec2), inertia))
        if k:
            parent = draw(st.integers(0, k - 1))
            joints.append(Joint(f"j{k}", f"l{parent}", f"l{k}", draw(_vec2), -3.0, 3.0, 20.0, _ACT))
    n_points = draw(st.integers(1, 4))
    points = tuple(Point(f"p{i}", f"l{draw(st.integers(0, n))}", draw(_vec2)) for i in range(n_points))
    gravity = draw(st.sampled_from([9.81, 1.62, 0.0, 3.7]))
    return Robot("random_tree", tuple(links), tuple(joints), points, gravity=gravity)


@settings(max_examples=30, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(robot=random_trees(), seed=st.integers(0, 2**32 - 1))
def test_random_trees_numpy(robot, seed):
    ref = PinocchioReference(robot)
    rng = np.random.default_rng(seed)
    for _ in range(5):
        check_numpy(robot, ref, *random_state(robot, rng))


@settings(max_examples=30, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(robot=random_trees(), seed=st.integers(0, 2**32 - 1))
def test_random_trees_compiled(robot, seed):
    ref = PinocchioReference(robot)
    rng = np.random.default_rng(seed)
    for _ in range(3):
        check_compiled(robot, ref, *random_state(robot, rng))


def test_tree_not_in_depth_first_order():
    """A tree whose file order is not depth-first (l3 hangs on l1 but comes after l2).

    Pinocchio needs depth-first joint numbering, kipup only parent-before-child order; the
    reference reorders (see :mod:`pinocchio_ref`). Without that, Pinocchio's CRBA leaves out
    the l0-l2 coupling and this test fails: it guards the reference, not only kipup.
    """
    links = tuple(Link(f"l{k}", 1.0 + 0.3 * k, (0.05 * k, -0.1), 0.02 + 0.01 * k) for k in range(4))
    joints = (Joint("j1", "l0", "l1", (0.1, -0.2), -3, 3, 20, _ACT),
              Joint("j2", "l0", "l2", (-0.1, 0.3), -3, 3, 20, _ACT),
              Joint("j3", "l1", "l3", (0.0, -0.3), -3, 3, 20, _ACT))
    points = (Point("tip", "l3", (0.02, -0.3)), Point("top", "l2", (0.0, 0.2)))
    robot = Robot("not_depth_first", links, joints, points)
    ref = PinocchioReference(robot)
    assert list(ref.perm) == [0, 1, 2, 3, 5, 4]
    rng = np.random.default_rng(11)
    for _ in range(5):
        check_numpy(robot, ref, *random_state(robot, rng))


def test_reference_detects_a_wrong_model():
    """The comparison can fail: moving one joint origin by 1 mm is caught."""
    robot = bundled("quadruped")
    j = robot.joints[-1]
    moved = Joint(j.name, j.parent, j.child, (j.origin[0] + 1e-3, j.origin[1]), j.lower, j.upper,
                  j.velocity_limit, j.actuator)
    wrong = Robot(robot.name, robot.links, robot.joints[:-1] + (moved,), robot.points, robot.gravity)
    ref = PinocchioReference(wrong)
    q, qd, qdd, tau = random_state(robot, np.random.default_rng(1))
    with pytest.raises(AssertionError):
        assert_close(dyn.rnea(robot, q, qd, qdd), ref.rnea(q, qd, qdd), "rnea")
