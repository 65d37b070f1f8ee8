"""Headless tests of kipup.widgets.RobotView (no browser: the widget models only).

Reference for the frame check: kipup's own convention in core/robot.py,
``world = p + E(theta) @ body`` with ``E = [[c, s], [-s, c]]`` on (x, z), and the usual
unit-quaternion rotation matrix (written out below, independent of the widget code).
"""
from __future__ import annotations

import math

import numpy as np
import pytest

from kipup.core.robot import Actuator, Capsule, Joint, Link, Point, Robot
from kipup.widgets import RobotView
from kipup.widgets.robot_view import pitch_quaternion, planar_center_of_mass, planar_link_poses, to_three


def quat_matrix(qt) -> np.ndarray:
    """Rotation matrix of a unit quaternion (x, y, z, w)."""
    x, y, z, w = qt
    return np.array([
        [1 - 2 * (y * y + z * z), 2 * (x * y - z * w), 2 * (x * z + y * w)],
        [2 * (x * y + z * w), 1 - 2 * (x * x + z * z), 2 * (y * z - x * w)],
        [2 * (x * z - y * w), 2 * (y * z + x * w), 1 - 2 * (x * x + y * y)],
    ])


def E(theta: float) -> np.ndarray:
    c, s = math.cos(theta), math.sin(theta)
    return np.array([[c, s], [-s, c]])


def kipup_to_three(x: float, y: float, z: float) -> np.ndarray:
    return np.array([x, z, -y])


_ACT = Actuator(peak_torque=10.0, gear_ratio=10.0, stall_torque=12.0, no_load_speed=20.0)


def toy_robot() -> Robot:
    """An invented three-link test robot: a trunk, a lumped pair of legs, and a shin on each leg."""
    links = (
        Link("trunk", 5.0, (0.0, 0.1), 0.05, Capsule((0.0, 0.0), (0.0, 0.3), 0.06)),
        Link("thigh", 1.0, (0.0, -0.1), 0.01, Capsule((0.0, 0.0), (0.0, -0.25), 0.03), (0.08, -0.08)),
        Link("shin", 0.5, (0.02, -0.12), 0.005, Capsule((0.0, 0.0), (0.05, -0.25), 0.02), (0.08, -0.08)),
    )
    joints = (
        Joint("hip", "trunk", "thigh", (0.0, -0.02), -2.0, 1.0, 20.0, _ACT),
        Joint("knee", "thigh", "shin", (0.0, -0.25), 0.0, 2.5, 20.0, _ACT),
    )
    points = (Point("toe", "shin", (0.05, -0.25), 0.8), Point("head", "trunk", (0.0, 0.36)))
    return Robot("toy", links, joints, points)


def bundled(name: str) -> Robot:
    from kipup.core.robot_file import load_bundled

    return load_bundled(name)


ROBOTS = {
    "toy": toy_robot,
    "humanoid": lambda: bundled("humanoid"),
    "quadruped": lambda: bundled("quadruped"),
}


@pytest.fixture(params=sorted(ROBOTS))
def robot(request) -> Robot:
    return ROBOTS[request.param]()


def random_q(robot: Robot, rng: np.random.Generator) -> np.ndarray:
    q = np.empty(robot.nq)
    q[:2] = rng.uniform(-1.0, 1.0, 2)
    q[2] = rng.uniform(-math.pi, math.pi)
    q[3:] = rng.uniform(robot.joint_lower, robot.joint_upper)
    return q


# ----------------------------------------------------------------------------


@pytest.mark.parametrize("theta", [0.0, 0.3, -1.2, math.pi / 2, -math.pi, 2.7, -2 * math.pi + 0.1])
def test_pitch_quaternion_maps_body_points_like_kipup(theta):
    rng = np.random.default_rng(1)
    R = quat_matrix(pitch_quaternion(theta))
    for _ in range(20):
        bx, by, bz = rng.normal(size=3)
        wx, wz = E(theta) @ np.array([bx, bz])
        # a pitch leaves the lateral coordinate alone
        assert np.allclose(R @ kipup_to_three(bx, by, bz), kipup_to_three(wx, by, wz), atol=1e-12)


def test_quarter_pitch_tips_head_forward():
    # robot.py: a positive pitch turns +z towards +x
    R = quat_matrix(pitch_quaternion(math.pi / 2))
    assert np.allclose(R @ kipup_to_three(0, 0, 1), kipup_to_three(1, 0, 0), atol=1e-12)


def test_to_three_is_a_proper_rotation():
    M = np.column_stack([to_three((1, 0)), to_three((0, 0), 1.0), to_three((0, 1))])  # images of x, y, z
    assert np.allclose(M, [[1, 0, 0], [0, 0, 1], [0, -1, 0]])
    assert np.isclose(np.linalg.det(M), 1.0)


def test_fk_by_hand():
    robot = toy_robot()
    q = np.array([1.0, 2.0, math.pi / 2, 0.5, 0.0])
    poses = planar_link_poses(robot, q)
    assert np.allclose(poses[0][0], [1.0, 2.0]) and poses[0][1] == pytest.approx(math.pi / 2)
    # hip origin (0, -0.02) under a base turned head-forward lies behind the base: (1 - 0.02, 2)
    assert np.allclose(poses[1][0], [0.98, 2.0]) and poses[1][1] == pytest.approx(math.pi / 2 + 0.5)
    th = math.pi / 2 + 0.5
    assert np.allclose(poses[2][0], [0.98 - 0.25 * math.sin(th), 2.0 - 0.25 * math.cos(th)])


def test_mesh_count_is_one_per_capsule_side(robot):
    view = RobotView(robot)
    expected = sum(len(link.sides) for link in robot.links if link.capsule is not None)
    assert len(view.capsule_meshes) == expected
    meshes_in_groups = [m for g in view.link_groups.values() for m in g.children if m.name.startswith("capsule:")]
    assert len(meshes_in_groups) == expected
    assert set(view.link_groups) == set(robot.link_names)
    assert sum(len(v) for v in view.point_meshes.values()) == sum(
        len(robot.links[robot.link_index(p.link)].sides) for p in robot.points
    )


def test_lumped_links_are_drawn_left_and_right(robot):
    view = RobotView(robot)
    for link in robot.links:
        if link.capsule is None:
            continue
        lateral = sorted(m.position[2] for m in view.link_groups[link.name].children if m.name.startswith("capsule:"))
        assert np.allclose(lateral, sorted(-s for s in link.sides))


def _world_of(group, mesh, local_three) -> np.ndarray:
    """Where a point given in a mesh's local three.js frame ends up in the three.js world."""
    in_group = np.asarray(mesh.position) + quat_matrix(mesh.quaternion) @ np.asarray(local_three)
    return np.asarray(group.position) + quat_matrix(group.quaternion) @ in_group


def test_set_pose_moves_groups_as_fk(robot):
    rng = np.random.default_rng(7)
    view = RobotView(robot)
    geometries = [m.geometry for m in view.capsule_meshes]
    children_before = {name: g.children for name, g in view.link_groups.items()}
    for _ in range(5):
        q = random_q(robot, rng)
        view.set_pose(q)
        assert np.allclose(view.q, q)
        for link, (p, th) in zip(robot.links, planar_link_poses(robot, q)):
            group = view.link_groups[link.name]
            assert np.allclose(group.position, [p[0], p[1], 0.0])
            assert np.allclose(group.quaternion, pitch_quaternion(th))
            cap = link.capsule
            if cap is None:
                continue
            # both capsule end points, through the three.js transforms, versus kipup's formula
            for mesh in (m for m in group.children if m.name.startswith("capsule:")):
                side = -mesh.position[2]
                half = cap.length / 2.0
                for local_y, end in ((half, cap.end), (-half, cap.start)):
                    got = _world_of(group, mesh, (0.0, local_y, 0.0))
                    wx, wz = p + E(th) @ np.asarray(end)
                    assert np.allclose(got, kipup_to_three(wx, side, wz), atol=1e-9)
        for point in robot.points:
            p, th = planar_link_poses(robot, q)[robot.link_index(point.link)]
            group = view.link_groups[point.link]
            for mesh in view.point_meshes[point.name]:
                wx, wz = p + E(th) @ np.asarray(point.position)
                assert np.allclose(_world_of(group, mesh, (0, 0, 0)), kipup_to_three(wx, -mesh.position[2], wz))
        com = planar_center_of_mass(robot, q)
        assert np.allclose(view.com_marker.position, [com[0], com[1], 0.0])
    # nothing rebuilt
    assert [m.geometry for m in view.capsule_meshes] == geometries
    assert {name: g.children for name, g in view.link_groups.items()} == children_before


def test_default_pose_stands_on_the_ground(robot):
    view = RobotView(robot)
    q = view.q
    lowest = math.inf
    for link, (p, th) in zip(robot.links, planar_link_poses(robot, q)):
        if link.capsule is not None:
            for end in (link.capsule.start, link.capsule.end):
                lowest = min(lowest, (p + E(th) @ np.asarray(end))[1] - link.capsule.radius)
    for point in robot.points:
        p, th = planar_link_poses(robot, q)[robot.link_index(point.link)]
        lowest = min(lowest, (p + E(th) @ np.asarray(point.position))[1])
    assert lowest == pytest.approx(0.0, abs=1e-12)


def test_wrong_length_is_refused():
    view = RobotView(toy_robot())
    with pytest.raises(ValueError, match="length 5"):
        view.set_pose(np.zeros(4))
    with pytest.raises(ValueError):
        RobotView(toy_robot(), np.zeros(6))


def test_fk_agrees_with_core_dynamics(robot):
    """Cross-check against kipup.core.dynamics, written independently of this module."""
    from kipup.core import dynamics
    rng = np.random.default_rng(3)
    for _ in range(5):
        q = random_q(robot, rng)
        poses = planar_link_poses(robot, q)
        for point in robot.points:
            p, th = poses[robot.link_index(point.link)]
            expected = p + E(th) @ np.asarray(point.position)
            assert np.allclose(np.ravel(dynamics.point_position(robot, q, point.name)), expected, atol=1e-9)
        assert np.allclose(np.ravel(dynamics.center_of_mass(robot, q)), planar_center_of_mass(robot, q), atol=1e-9)
