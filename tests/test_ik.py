"""kipup.core.ik.solve_ik: reaches reachable targets, keeps joint limits and fixed coordinates,
and gives a finite best effort for unreachable targets.

The Jacobian check compares against kipup.core.kinematics.point_jacobian (an independent
implementation in the core) and against central finite differences of point_position.
"""
from __future__ import annotations

import numpy as np
import pytest

from kipup.core.ik import _frames, _position_and_jacobian, _resolve, point_positions, solve_ik
from kipup.core.kinematics import point_jacobian, point_position
from kipup.core.robot_file import load_bundled

BASE = ("base_x", "base_z", "base_pitch")


@pytest.fixture(scope="module")
def humanoid():
    return load_bundled("humanoid")


def bent_pose(robot):
    q = np.zeros(robot.nq)
    q[1] = 0.55
    q[3:] = [-0.3, 0.5, -0.2, 0.3, -0.4]  # hip, knee, ankle, shoulder, elbow (within every limit)
    return q


def test_jacobian_matches_the_kinematics_module_and_finite_differences(humanoid):
    q = bent_pose(humanoid)
    q[2] = 0.3
    for key in ("hand", "toe", "head", ("forearm", (0.01, -0.05))):
        body, r = _resolve(humanoid, key)
        p, J = _position_and_jacobian(humanoid, _frames(humanoid, q), body, r)
        ref = np.asarray(point_jacobian(humanoid, q, key), dtype=float)
        assert np.allclose(J, ref, atol=1e-12), key
        fd = np.zeros_like(J)
        for i in range(humanoid.nq):
            dq = np.zeros(humanoid.nq)
            dq[i] = 1e-6
            fd[:, i] = (np.asarray(point_position(humanoid, q + dq, key)).ravel()
                        - np.asarray(point_position(humanoid, q - dq, key)).ravel()) / 2e-6
        assert np.allclose(J, fd, atol=1e-7), key
        assert np.allclose(p, np.asarray(point_position(humanoid, q, key)).ravel())


def test_reaches_a_reachable_hand_target_with_the_base_fixed(humanoid):
    q0 = bent_pose(humanoid)
    start = point_positions(humanoid, q0, ["hand"])["hand"]
    target = start + np.array([0.10, 0.15])
    q = solve_ik(humanoid, q0, {"hand": target}, fixed=BASE)
    reached = point_positions(humanoid, q, ["hand"])["hand"]
    assert np.linalg.norm(reached - target) < 1e-4
    assert np.array_equal(q[:3], q0[:3])                  # the base did not move
    assert np.array_equal(q[3:6], q0[3:6])                # nor the legs: nothing pulls on them
    assert not np.allclose(q[6:], q0[6:])


def test_holding_the_feet_while_moving_the_hip_down_is_a_crouch(humanoid):
    q0 = bent_pose(humanoid)
    feet = point_positions(humanoid, q0, ["toe", "heel"])
    hip = point_positions(humanoid, q0, ["hip"])["hip"]
    targets = {"hip": hip + np.array([0.0, -0.08]), **feet}
    q = solve_ik(humanoid, q0, targets, weights={"toe": 10.0, "heel": 10.0}, iters=100)
    got = point_positions(humanoid, q, ["hip", "toe", "heel"])
    for name, goal in targets.items():
        assert np.linalg.norm(got[name] - goal) < 1e-4, name
    assert q[4] > q0[4]  # the knee bent further


def test_respects_joint_limits_and_reaches_a_target_that_needs_a_joint_at_its_limit(humanoid):
    q0 = bent_pose(humanoid)
    lower, upper = np.asarray(humanoid.joint_lower), np.asarray(humanoid.joint_upper)
    # where the hand is with the elbow straight (at its upper limit 0) and the shoulder moved
    q_goal = q0.copy()
    q_goal[6], q_goal[7] = 0.6, 0.0
    target = point_positions(humanoid, q_goal, ["hand"])["hand"]
    q = solve_ik(humanoid, q0, {"hand": target}, fixed=BASE, iters=200)
    assert np.all(q[3:] >= lower - 1e-12) and np.all(q[3:] <= upper + 1e-12)
    assert np.linalg.norm(point_positions(humanoid, q, ["hand"])["hand"] - target) < 1e-4
    # with the shoulder held, a hand target that needs the elbow folded 45 degrees backwards
    # (elbow > 0, beyond its upper limit 0): the elbow stops at the limit, the closest it can get
    q1 = q0.copy()
    q1[6], q1[7] = 0.0, -0.5
    elbow = point_positions(humanoid, q1, [("forearm", (0.0, 0.0))])[("forearm", (0.0, 0.0))]
    behind = elbow + 0.20 * np.array([-np.sin(np.pi / 4), -np.cos(np.pi / 4)])
    q = solve_ik(humanoid, q1, {"hand": behind}, fixed=BASE + ("shoulder",))
    assert np.all(q[3:] >= lower - 1e-12) and np.all(q[3:] <= upper + 1e-12)
    assert q[7] == pytest.approx(upper[4], abs=1e-9)


def test_a_start_outside_the_limits_is_clamped(humanoid):
    q0 = bent_pose(humanoid)
    q0[4] = -0.5  # knee below its lower limit 0
    q = solve_ik(humanoid, q0, {"hand": point_positions(humanoid, q0, ["hand"])["hand"]}, fixed=BASE)
    assert q[4] >= 0.0


def test_unreachable_target_gives_a_finite_best_effort(humanoid):
    q0 = bent_pose(humanoid)
    start = point_positions(humanoid, q0, ["hand"])["hand"]
    target = np.array([5.0, 3.0])  # metres away: the arm is 0.38 m long
    q = solve_ik(humanoid, q0, {"hand": target}, fixed=BASE)
    assert np.all(np.isfinite(q))
    reached = point_positions(humanoid, q, ["hand"])["hand"]
    assert np.linalg.norm(reached - target) < np.linalg.norm(start - target) - 0.1  # it got closer
    shoulder = point_positions(humanoid, q, [("upper_arm", (0.0, 0.0))])[("upper_arm", (0.0, 0.0))]
    # best effort is the arm stretched towards the target
    direction = (target - shoulder) / np.linalg.norm(target - shoulder)
    along = (reached - shoulder) / np.linalg.norm(reached - shoulder)
    assert float(direction @ along) > 0.99


def test_contradictory_targets_do_not_produce_nan(humanoid):
    q0 = bent_pose(humanoid)
    p = point_positions(humanoid, q0, ["toe"])["toe"]
    q = solve_ik(humanoid, q0, {"toe": p, "heel": p})  # two points of one foot at one spot
    assert np.all(np.isfinite(q))


def test_fixed_coordinates_and_bad_input(humanoid):
    q0 = bent_pose(humanoid)
    target = point_positions(humanoid, q0, ["hand"])["hand"] + 0.05
    q = solve_ik(humanoid, q0, {"hand": target}, fixed=BASE + ("shoulder",))
    assert q[6] == q0[6]
    with pytest.raises(ValueError):
        solve_ik(humanoid, q0[:4], {"hand": target})
    with pytest.raises(ValueError):
        solve_ik(humanoid, q0, {"hand": (np.nan, 0.0)})
    with pytest.raises(KeyError):
        solve_ik(humanoid, q0, {"hand": target}, fixed=("no_such_joint",))
    assert np.array_equal(solve_ik(humanoid, q0, {}), q0)
