"""URDF import: mapping, mass properties, lumping, approximations and every error case.

Outside sources:

* The URDF XML specification (Unified Robot Description Format, an open standard): a joint's
  ``<origin xyz rpy>`` is the child frame in the parent frame with ``R = Rz(yaw) Ry(pitch)
  Rx(roll)`` (fixed axes), ``<axis>`` is given in the joint (= child) frame, ``<inertial>``'s
  origin places the COM and rotates the inertia tensor, ``<limit>`` holds lower/upper (rad),
  effort (N m) and velocity (rad/s), a cylinder's axis is its local z.
* Rigid-body mechanics textbook results: an inertia tensor in rotated axes is ``R I R^T``; the
  parallel-axis theorem ``I_C = I_own + m d^2`` with ``d`` the distance perpendicular to the axis.

Every URDF here is an invented robot written by the tests themselves.
"""
from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
import yaml

from kipup.core import kinematics
from kipup.core.cli import main
from kipup.core.dynamics import center_of_mass
from kipup.core.robot_file import load_robot, robot_to_dict, save_robot, validate_robot_dict
from kipup.core.urdf_import import URDFError, import_urdf, urdf_to_robot_dict

# ----------------------------------------------------------------------------------------
# invented robots
# ----------------------------------------------------------------------------------------
LEG = """<?xml version="1.0"?>
<robot name="hopper">
  <link name="pelvis">
    <inertial><origin xyz="0 0 0.05"/><mass value="2.0"/>
      <inertia ixx="0.02" ixy="0" ixz="0" iyy="0.03" iyz="0" izz="0.02"/></inertial>
    <collision><geometry><box size="0.2 0.16 0.1"/></geometry></collision>
  </link>
  <link name="thigh">
    <inertial><origin xyz="0 0 -0.15"/><mass value="1.0"/><inertia ixx="0.01" iyy="0.01" izz="0.001"/></inertial>
    <collision><origin xyz="0 0 -0.15"/><geometry><cylinder radius="0.03" length="0.3"/></geometry></collision>
  </link>
  <link name="shank">
    <inertial><origin xyz="0.01 0 -0.12"/><mass value="0.6"/><inertia ixx="0.005" iyy="0.006" izz="0.001"/></inertial>
    <collision><origin xyz="0 0 -0.15"/><geometry><cylinder radius="0.025" length="0.3"/></geometry></collision>
  </link>
  <link name="foot">
    <inertial><origin xyz="0.03 0 -0.02"/><mass value="0.3"/>
      <inertia ixx="0.0005" iyy="0.0008" izz="0.0005"/></inertial>
    <visual><geometry><mesh filename="package://hopper/foot.stl"/></geometry></visual>
  </link>
  <joint name="hip" type="revolute">
    <parent link="pelvis"/><child link="thigh"/>
    <origin xyz="0 0 0"/><axis xyz="0 1 0"/>
    <limit lower="-2.0" upper="0.5" effort="40" velocity="12"/>
  </joint>
  <joint name="knee" type="revolute">
    <parent link="thigh"/><child link="shank"/>
    <origin xyz="0 0 -0.3"/><axis xyz="0 -1 0"/>
    <limit lower="-2.4" upper="0" effort="40" velocity="12"/>
  </joint>
  <joint name="ankle" type="revolute">
    <parent link="shank"/><child link="foot"/>
    <origin xyz="0 0 -0.3"/><axis xyz="0 1 0"/>
    <limit lower="-0.8" upper="0.8" effort="20" velocity="15"/>
    <dynamics damping="0.05"/>
  </joint>
</robot>
"""

TORSO_ROLL = 0.4  # rpy roll of the torso's inertial frame


def biped(mass_r: float = 1.5, side_names=("{part}_l", "{part}_r")) -> str:
    """A small biped: torso (inertia with rpy), a head on a fixed joint, and two mirrored legs
    (hip roll joint to drop, hip pitch, knee)."""
    legs = ""
    for fmt, y, m_thigh in ((side_names[0], 0.1, 1.5), (side_names[1], -0.1, mass_r)):
        n = lambda part: fmt.format(part=part)  # noqa: E731
        legs += f"""
  <link name="{n('hip')}"><inertial><mass value="0.5"/><inertia ixx="0.001" iyy="0.001" izz="0.001"/></inertial></link>
  <link name="{n('thigh')}">
    <inertial><origin xyz="0 0 -0.12"/><mass value="{m_thigh}"/><inertia ixx="0.02" iyy="0.02" izz="0.002"/></inertial>
    <collision><origin xyz="0 0 -0.15"/><geometry><cylinder radius="0.04" length="0.3"/></geometry></collision>
  </link>
  <link name="{n('shank')}">
    <inertial><origin xyz="0 0 -0.14"/><mass value="1.0"/><inertia ixx="0.01" iyy="0.012" izz="0.001"/></inertial>
    <collision><origin xyz="0 0 -0.15"/><geometry><cylinder radius="0.03" length="0.3"/></geometry></collision>
  </link>
  <joint name="{n('hip_roll')}" type="revolute">
    <parent link="torso"/><child link="{n('hip')}"/>
    <origin xyz="0 {y} -0.2"/><axis xyz="1 0 0"/><limit lower="-0.5" upper="0.5" effort="30" velocity="10"/>
  </joint>
  <joint name="{n('hip_pitch')}" type="revolute">
    <parent link="{n('hip')}"/><child link="{n('thigh')}"/>
    <origin xyz="0 0 -0.05"/><axis xyz="0 1 0"/><limit lower="-2.5" upper="0.6" effort="50" velocity="14"/>
  </joint>
  <joint name="{n('knee')}" type="revolute">
    <parent link="{n('thigh')}"/><child link="{n('shank')}"/>
    <origin xyz="0 0 -0.3"/><axis xyz="0 1 0"/><limit lower="0" upper="2.6" effort="50" velocity="14"/>
  </joint>
"""
    return f"""<?xml version="1.0"?>
<robot name="strider">
  <link name="torso">
    <inertial><origin xyz="0.01 0 0.1" rpy="{TORSO_ROLL} 0 0"/><mass value="8"/>
      <inertia ixx="0.1" iyy="0.2" izz="0.05"/></inertial>
    <collision><origin xyz="0 0 0.1"/><geometry><box size="0.15 0.25 0.35"/></geometry></collision>
  </link>
  <link name="head">
    <inertial><origin xyz="0 0 0.05"/><mass value="1"/><inertia ixx="0.004" iyy="0.004" izz="0.004"/></inertial>
    <collision><geometry><sphere radius="0.08"/></geometry></collision>
  </link>
  <joint name="neck" type="fixed"><parent link="torso"/><child link="head"/><origin xyz="0.02 0 0.35"/></joint>
{legs}
</robot>
"""


def valid(robot) -> None:
    assert validate_robot_dict(robot_to_dict(robot)) == []


def problems_of(exc: pytest.ExceptionInfo) -> str:
    return "\n".join(str(p) for p in exc.value.problems)


# ----------------------------------------------------------------------------------------
# the 3-link planar leg
# ----------------------------------------------------------------------------------------
def test_planar_leg_structure_mass_and_com():
    robot, notes = import_urdf(LEG)
    valid(robot)
    assert robot.name == "hopper"
    assert robot.link_names == ("pelvis", "thigh", "shank", "foot")
    assert robot.joint_names == ("hip", "knee", "ankle")
    assert [j.parent for j in robot.joints] == ["pelvis", "thigh", "shank"]
    assert robot.total_mass == pytest.approx(2.0 + 1.0 + 0.6 + 0.3)
    # hand computation, all joints at zero and the base frame at the world origin:
    # pelvis COM (0, 0.05); thigh (0, -0.15); shank = knee (0, -0.3) + (0.01, -0.12);
    # foot = ankle (0, -0.6) + (0.03, -0.02)
    m = np.array([2.0, 1.0, 0.6, 0.3])
    c = np.array([[0.0, 0.05], [0.0, -0.15], [0.01, -0.42], [0.03, -0.62]])
    expected = (m[:, None] * c).sum(axis=0) / m.sum()
    np.testing.assert_allclose(np.asarray(center_of_mass(robot, np.zeros(robot.nq))).ravel(), expected, atol=1e-12)
    assert [link.inertia for link in robot.links] == pytest.approx([0.03, 0.01, 0.006, 0.0008])
    assert all(link.sides == (0.0,) for link in robot.links)


def test_minus_y_axis_flips_the_sign_and_the_limits():
    robot, notes = import_urdf(LEG)
    knee = robot.joints[1]
    # URDF range [-2.4, 0] about -y is kipup range [0, 2.4] about +y
    assert (knee.lower, knee.upper) == (0.0, 2.4)
    assert math.copysign(1.0, knee.lower) == 1.0  # no negative zero in the file
    assert any("knee" in n and "axis -y" in n for n in notes)
    # Kinematics: a URDF knee angle theta about -y turns the shank by R = rotation about -y by theta
    # (the URDF spec's axis in the joint frame). The ankle (0, 0, -0.3) in the shank frame then sits at
    # knee + R @ (0, 0, -0.3); kipup must put it at the same place with q_knee = -theta.
    theta = 0.7
    c, s = math.cos(theta), math.sin(theta)
    R_minus_y = np.array([[c, 0, -s], [0, 1, 0], [s, 0, c]])  # Rodrigues for axis (0, -1, 0)
    ankle_world = np.array([0, 0, -0.3]) + R_minus_y @ np.array([0, 0, -0.3])
    q = np.zeros(robot.nq)
    q[robot.coord_index("knee")] = -theta
    got = np.asarray(kinematics.point_position(robot, q, ("shank", (0.0, -0.3)))).ravel()
    np.testing.assert_allclose(got, ankle_world[[0, 2]], atol=1e-12)
    hip = robot.joints[0]
    assert (hip.lower, hip.upper) == (-2.0, 0.5)  # +y: unchanged


def test_limits_actuator_defaults_and_capsules_are_reported():
    robot, notes = import_urdf(LEG)
    hip, knee, ankle = robot.joints
    assert (hip.velocity_limit, hip.actuator.peak_torque) == (12.0, 40.0)
    assert hip.actuator.stall_torque == 40.0  # stall = peak by default
    assert hip.actuator.no_load_speed == pytest.approx(1.5 * 12.0)
    assert hip.actuator.gear_ratio == 1.0
    assert ankle.actuator.viscous_friction == 0.05  # <dynamics damping>
    text = "\n".join(notes)
    assert "no torque-speed line" in text and "1.5" in text
    # thigh: cylinder r = 0.03, length 0.3, centred at z = -0.15 along z -> a capsule of the same
    # overall length: segment from z = -0.03 to z = -0.27
    cap = robot.links[1].capsule
    assert cap.radius == 0.03
    np.testing.assert_allclose([cap.start, cap.end], [[0.0, -0.03], [0.0, -0.27]], atol=1e-12)


def test_mesh_only_geometry_gets_a_guessed_capsule_and_a_leaf_point():
    robot, notes = import_urdf(LEG)
    foot = robot.links[3]
    # no child joint: from the joint to the COM (0.03, -0.02)
    np.testing.assert_allclose([foot.capsule.start, foot.capsule.end], [[0, 0], [0.03, -0.02]], atol=1e-12)
    L = math.hypot(0.03, 0.02)
    # radius: a cylinder of the link's mass at water density, at least 1 cm, at most half the length
    assert foot.capsule.radius == pytest.approx(min(max(math.sqrt(0.3 / (1000 * math.pi * L)), 0.01), 0.5 * L))
    assert any("'foot'" in n and "mesh-only geometry" in n for n in notes)
    # the leaf point at the tip of the capsule, named after the link, not a contact
    p = robot.point("foot")
    assert p.link == "foot" and p.friction is None
    tip = np.array([0.03, -0.02]) * (1 + foot.capsule.radius / L)
    np.testing.assert_allclose(p.position, tip, atol=1e-12)
    assert any("added point 'foot'" in n for n in notes)


def test_user_points_are_placed_in_the_link_frame():
    robot, _ = import_urdf(LEG, points=[("toe", "foot", (0.12, -0.04), 0.8), ("knee_cap", "shank", (0.02, 0.0))])
    toe = robot.point("toe")
    assert (toe.link, toe.position, toe.friction) == ("foot", (0.12, -0.04), 0.8)
    assert robot.point("knee_cap").friction is None
    with pytest.raises(URDFError) as exc:
        import_urdf(LEG, points=[("toe", "nowhere", (0, 0), 0.8)])
    assert "points[0]" in problems_of(exc) and "nowhere" in problems_of(exc)


def test_save_and_load_round_trip(tmp_path: Path):
    robot, _ = import_urdf(LEG)
    path = tmp_path / "hopper.yaml"
    save_robot(robot, path)
    assert load_robot(path) == robot


def test_from_a_file_path_and_gear_ratio_from_a_transmission(tmp_path: Path):
    text = LEG.replace("</robot>", """
  <transmission name="hip_trans"><type>transmission_interface/SimpleTransmission</type>
    <joint name="hip"><hardwareInterface>EffortJointInterface</hardwareInterface></joint>
    <actuator name="hip_motor"><mechanicalReduction>9</mechanicalReduction></actuator>
  </transmission>
</robot>""")
    path = tmp_path / "hopper.urdf"
    path.write_text(text, encoding="utf-8")
    robot, _ = import_urdf(path)
    assert robot.joints[0].actuator.gear_ratio == 9.0
    assert robot.joints[1].actuator.gear_ratio == 1.0


def test_actuator_overrides():
    robot, notes = import_urdf(LEG, actuators={"knee": {"stall_torque": 55.0, "no_load_speed": 30.0,
                                                        "gear_ratio": 6.0}})
    a = robot.joints[1].actuator
    assert (a.peak_torque, a.stall_torque, a.no_load_speed, a.gear_ratio) == (40.0, 55.0, 30.0, 6.0)
    with pytest.raises(URDFError, match="not a joint of the URDF"):
        import_urdf(LEG, actuators={"elbow": {"stall_torque": 1.0}})


def test_pure_pitch_origin_rotates_the_child_data():
    # The ankle's origin pitches the foot frame by 0.3 rad (rpy = 0 0.3 0). By the URDF spec the foot's
    # COM (0.03, 0, -0.02) in its own frame is at ankle + Ry(0.3) @ com in the shank frame, and the kipup
    # link frame is parallel to the shank's at zero angle, so kipup's COM is Ry(0.3) @ com.
    text = LEG.replace('<origin xyz="0 0 -0.3"/><axis xyz="0 1 0"/>\n    <limit lower="-0.8"',
                       '<origin xyz="0 0 -0.3" rpy="0 0.3 0"/><axis xyz="0 1 0"/>\n    <limit lower="-0.8"')
    assert text != LEG
    robot, _ = import_urdf(text)
    c, s = math.cos(0.3), math.sin(0.3)
    Ry = np.array([[c, 0, s], [0, 1, 0], [-s, 0, c]])
    com = Ry @ np.array([0.03, 0.0, -0.02])
    np.testing.assert_allclose(robot.links[3].com, com[[0, 2]], atol=1e-12)
    assert robot.links[3].inertia == pytest.approx(0.0008)  # a pitch rotation keeps Iyy


def test_fixed_joint_with_roll_and_yaw_merges_a_rotated_inertia():
    # A sensor box bolted to the pelvis by a fixed joint with rpy = (0.3, 0, 0.5): by the URDF spec its
    # frame is R = Rz(0.5) Ry(0) Rx(0.3) at p in the pelvis frame, its COM at p + R c, and its inertia
    # tensor in pelvis axes R I R^T, of which kipup keeps e_y^T R I R^T e_y (plus the parallel-axis term).
    text = LEG.replace("</robot>", """<link name="sensor"><inertial><origin xyz="0.02 0.03 0.01"/><mass value="0.5"/>
    <inertia ixx="0.004" iyy="0.001" izz="0.002"/></inertial></link>
  <joint name="mount" type="fixed"><parent link="pelvis"/><child link="sensor"/>
    <origin xyz="0.1 0 0.2" rpy="0.3 0 0.5"/></joint>
</robot>""")
    robot, notes = import_urdf(text)
    cr, sr, cy, sy = math.cos(0.3), math.sin(0.3), math.cos(0.5), math.sin(0.5)
    Rx = np.array([[1, 0, 0], [0, cr, -sr], [0, sr, cr]])
    Rz = np.array([[cy, -sy, 0], [sy, cy, 0], [0, 0, 1]])
    R = Rz @ Rx
    c_sensor = np.array([0.1, 0, 0.2]) + R @ np.array([0.02, 0.03, 0.01])
    iyy_sensor = (R @ np.diag([0.004, 0.001, 0.002]) @ R.T)[1, 1]
    parts = [(2.0, np.array([0.0, 0.05]), 0.03), (0.5, c_sensor[[0, 2]], iyy_sensor)]
    C = (2.0 * parts[0][1] + 0.5 * parts[1][1]) / 2.5
    iyy = sum(i + m * float(np.sum((c - C) ** 2)) for m, c, i in parts)
    base = robot.links[0]
    assert base.mass == pytest.approx(2.5)
    np.testing.assert_allclose(base.com, C, atol=1e-12)
    assert base.inertia == pytest.approx(iyy, rel=1e-12)
    assert any("'sensor': inertia projected onto the pitch axis" in n for n in notes)


def test_plane_yz_reads_a_robot_facing_y():
    # The same leg with URDF y forward: x -> y, y -> -x (so the pitch axis is -x, the knee's axis +x,
    # and the inertia about the pitch axis is the URDF's ixx).
    text = (LEG.replace('<axis xyz="0 1 0"/>', '<axis xyz="-1 0 0"/>').replace('<axis xyz="0 -1 0"/>',
                                                                              '<axis xyz="1 0 0"/>')
            .replace('xyz="0.01 0 -0.12"', 'xyz="0 0.01 -0.12"').replace('xyz="0.03 0 -0.02"', 'xyz="0 0.03 -0.02"')
            .replace('size="0.2 0.16 0.1"', 'size="0.16 0.2 0.1"')
            .replace("ixx=", "TMP=").replace("iyy=", "ixx=").replace("TMP=", "iyy="))
    a, _ = import_urdf(LEG)
    b, _ = import_urdf(text, plane="yz")
    assert b == a
    with pytest.raises(ValueError, match="plane"):
        import_urdf(LEG, plane="xy")


def test_massless_world_root_with_a_floating_joint_is_skipped():
    text = LEG.replace('<link name="pelvis">', '<link name="world"/>\n  <link name="pelvis">').replace(
        '<joint name="hip"', '<joint name="float" type="floating"><parent link="world"/><child link="pelvis"/></joint>'
                             '\n  <joint name="hip"')
    robot, notes = import_urdf(text)
    assert robot.links[0].name == "pelvis" and robot.nj == 3
    assert any("world" in n and "floating" in n for n in notes)


def test_base_link_reroots_across_fixed_joints():
    # A massive root "carrier" bolted to the pelvis by a fixed joint: with base_link="pelvis" the carrier
    # is merged into the pelvis (its frame inverted): carrier origin 0.1 m below the pelvis.
    text = LEG.replace('<link name="pelvis">', """<link name="carrier">
    <inertial><mass value="1.0"/><inertia ixx="0.001" iyy="0.002" izz="0.001"/></inertial></link>
  <joint name="bolt" type="fixed"><parent link="carrier"/><child link="pelvis"/><origin xyz="0 0 0.1"/></joint>
  <link name="pelvis">""")
    robot, notes = import_urdf(text, base_link="pelvis")
    base = robot.links[0]
    assert base.name == "pelvis" and base.mass == pytest.approx(3.0)
    # COM: pelvis 2 kg at z = 0.05, carrier 1 kg at z = -0.1 -> z = 0; Iyy = 0.03 + 0.002 + 2 (0.05)^2 + 1 (0.1)^2
    np.testing.assert_allclose(base.com, (0.0, 0.0), atol=1e-12)
    assert base.inertia == pytest.approx(0.03 + 0.002 + 2 * 0.05 ** 2 + 1 * 0.1 ** 2)
    default, _ = import_urdf(text)
    assert default.links[0].name == "carrier"
    with pytest.raises(URDFError, match="base_link"):
        import_urdf(text, base_link="nope")
    with pytest.raises(URDFError, match="re-root only across fixed"):
        import_urdf(LEG, base_link="shank")


# ----------------------------------------------------------------------------------------
# the biped: pairs, a dropped hip roll, a fixed head, an inertia with rpy
# ----------------------------------------------------------------------------------------
def test_biped_structure_and_dropped_lateral_joints():
    robot, notes = import_urdf(biped())
    valid(robot)
    assert robot.link_names == ("torso", "thigh", "shank")
    assert robot.joint_names == ("hip_pitch", "knee")
    text = "\n".join(notes)
    assert "dropped lateral joint 'hip_roll_l'" in text and "dropped lateral joint 'hip_roll_r'" in text
    assert "fixed joint 'neck'" in text and "parallel-axis" in text
    assert "inertia projected onto the pitch axis" in text


def test_biped_lumping_doubles_mass_inertia_and_torques():
    robot, notes = import_urdf(biped())
    thigh, shank = robot.links[1], robot.links[2]
    assert thigh.sides == (0.1, -0.1) and shank.sides == (0.1, -0.1)
    assert (thigh.mass, thigh.inertia) == (pytest.approx(3.0), pytest.approx(0.04))
    assert (shank.mass, shank.inertia) == (pytest.approx(2.0), pytest.approx(0.024))
    hip, knee = robot.joints
    assert hip.actuator.peak_torque == 100.0 and hip.actuator.stall_torque == 100.0
    assert hip.actuator.no_load_speed == pytest.approx(21.0) and hip.velocity_limit == 14.0
    assert hip.origin == pytest.approx((0.0, -0.25))  # -0.2 to the hip roll, -0.05 more to the pitch joint
    doc = robot_to_dict(robot)  # the file keeps per-side values
    assert doc["links"][0]["pair"] == {"lateral_offset": 0.1} and doc["links"][0]["mass"] == pytest.approx(1.5)
    assert sum("lumped left/right pair" in n for n in notes) == 2


def test_biped_total_mass_com_and_base_inertia_by_hand():
    robot, _ = import_urdf(biped())
    base = robot.links[0]
    # base = torso 8 kg + head 1 kg (fixed) + two hip roll links 0.5 kg (locked at zero)
    assert base.mass == pytest.approx(10.0)
    assert robot.total_mass == pytest.approx(10.0 + 2 * 1.5 + 2 * 1.0)
    # part COMs (x, z) in the torso frame: torso (0.01, 0.1), head (0.02, 0.35 + 0.05), hips (0, -0.2)
    parts = [(8.0, (0.01, 0.1)), (1.0, (0.02, 0.4)), (0.5, (0.0, -0.2)), (0.5, (0.0, -0.2))]
    M = sum(m for m, _ in parts)
    C = np.sum([m * np.array(c) for m, c in parts], axis=0) / M
    np.testing.assert_allclose(base.com, C, atol=1e-12)
    # torso inertial rotated by roll r about x: Iyy' = e_y^T Rx I Rx^T e_y = cos^2 r Iyy + sin^2 r Izz
    r = TORSO_ROLL
    own = [math.cos(r) ** 2 * 0.2 + math.sin(r) ** 2 * 0.05, 0.004, 0.001, 0.001]
    iyy = sum(i + m * ((c[0] - C[0]) ** 2 + (c[1] - C[1]) ** 2) for i, (m, c) in zip(own, parts))
    assert base.inertia == pytest.approx(iyy, rel=1e-12)
    # whole-robot COM at q = 0: thighs' COM at (0, -0.25 - 0.12), shanks' at (0, -0.25 - 0.3 - 0.14)
    all_parts = [(M, tuple(C)), (3.0, (0.0, -0.37)), (2.0, (0.0, -0.69))]
    total = sum(m for m, _ in all_parts)
    expected = np.sum([m * np.array(c) for m, c in all_parts], axis=0) / total
    np.testing.assert_allclose(np.asarray(center_of_mass(robot, np.zeros(robot.nq))).ravel(), expected, atol=1e-12)


def test_biped_with_left_right_prefixes():
    robot, _ = import_urdf(biped(side_names=("left_{part}", "right_{part}")))
    assert robot.link_names == ("torso", "thigh", "shank") and robot.joint_names == ("hip_pitch", "knee")


def test_masses_differing_by_more_than_one_percent_are_not_lumped():
    robot, notes = import_urdf(biped(mass_r=1.6))  # 1.5 vs 1.6 kg: 6 %
    valid(robot)
    assert robot.nj == 4 and all(link.sides == (0.0,) for link in robot.links)
    assert any("masses differ by more than 1 %" in n for n in notes)
    assert any("no mirror partner" in n for n in notes)
    ok, _ = import_urdf(biped(mass_r=1.5 * 1.005))  # 0.5 %: lumped, the mean mass per side
    assert ok.nj == 2 and ok.links[1].mass == pytest.approx(1.5 + 1.5 * 1.005)


def test_explicit_pairs_and_no_pairs():
    robot, _ = import_urdf(biped(), pairs={"upper_leg": ("thigh_l", "thigh_r"), "lower_leg": ("shank_l", "shank_r")})
    assert robot.link_names == ("torso", "upper_leg", "lower_leg")
    apart, notes = import_urdf(biped(), pairs={})
    assert apart.joint_names == ("hip_pitch_l", "knee_l", "hip_pitch_r", "knee_r")
    assert any("sits at y = 0.1 m with no mirror partner" in n for n in notes)
    with pytest.raises(URDFError) as exc:
        import_urdf(biped(), pairs={"upper_leg": ("thigh_l", "thigh_r")})  # the shanks below must pair too
    assert "shank_l" in problems_of(exc) and "must be a pair too" in problems_of(exc)
    with pytest.raises(URDFError) as exc:
        import_urdf(biped(), pairs={"leg": ("thigh_r", "thigh_l"), "shin": ("shank_r", "shank_l")})
    assert "must lie to the left" in problems_of(exc)
    with pytest.raises(URDFError, match="merged into 'torso'"):
        import_urdf(biped(), pairs={"hip": ("hip_l", "hip_r")})


# ----------------------------------------------------------------------------------------
# errors
# ----------------------------------------------------------------------------------------
def test_missing_inertial_names_the_link():
    text = LEG.replace('<inertial><origin xyz="0.01 0 -0.12"/><mass value="0.6"/><inertia ixx="0.005" iyy="0.006" '
                       'izz="0.001"/></inertial>', "")
    assert text != LEG
    with pytest.raises(URDFError) as exc:
        import_urdf(text)
    msg = problems_of(exc)
    assert "link 'shank' has no <inertial>: kipup needs mass, COM and inertia" in msg
    assert '<link name="shank"> (line 12)' in msg


def test_zero_mass_and_zero_inertia_name_the_link():
    with pytest.raises(URDFError, match="link 'thigh' has zero mass"):
        import_urdf(LEG.replace('<mass value="1.0"/>', '<mass value="0"/>'))
    with pytest.raises(URDFError, match="'thigh': its inertia about the pitch axis"):
        import_urdf(LEG.replace('ixx="0.01" iyy="0.01" izz="0.001"', 'ixx="0.01" iyy="0" izz="0.001"'))


def test_unsupported_axis_names_the_joint():
    with pytest.raises(URDFError) as exc:
        import_urdf(LEG.replace('<axis xyz="0 -1 0"/>', '<axis xyz="0 1 1"/>'))
    assert '<joint name="knee"> (line 26)' in problems_of(exc) and "unsupported axis" in problems_of(exc)
    # an origin rolling the joint frame tilts a y axis out of the sagittal plane
    with pytest.raises(URDFError, match='joint name="knee".*unsupported axis'):
        import_urdf(LEG.replace('<origin xyz="0 0 -0.3"/><axis xyz="0 -1 0"/>',
                                '<origin xyz="0 0 -0.3" rpy="0.3 0 0"/><axis xyz="0 -1 0"/>'))


def test_prismatic_and_planar_joints_are_unsupported():
    with pytest.raises(URDFError, match='joint name="knee".*prismatic joints are not supported'):
        import_urdf(LEG.replace('name="knee" type="revolute"', 'name="knee" type="prismatic"'))
    with pytest.raises(URDFError, match="planar joints are supported only"):
        import_urdf(LEG.replace('name="knee" type="revolute"', 'name="knee" type="planar"'))


def test_missing_or_bad_limits_name_the_joint():
    with pytest.raises(URDFError, match="joint 'knee' has no <limit>"):
        import_urdf(LEG.replace('<limit lower="-2.4" upper="0" effort="40" velocity="12"/>', ""))
    with pytest.raises(URDFError, match="joint 'knee': <limit> has no velocity"):
        import_urdf(LEG.replace('<limit lower="-2.4" upper="0" effort="40" velocity="12"/>',
                                '<limit lower="-2.4" upper="0" effort="40"/>'))
    with pytest.raises(URDFError, match='effort="0"> must be > 0'):
        import_urdf(LEG.replace('effort="40" velocity="12"/>\n  </joint>\n  <joint name="ankle"',
                                'effort="0" velocity="12"/>\n  </joint>\n  <joint name="ankle"'))


def test_continuous_joint_gets_a_reported_range():
    text = LEG.replace('name="ankle" type="revolute"', 'name="ankle" type="continuous"').replace(
        '<limit lower="-0.8" upper="0.8" effort="20" velocity="15"/>', '<limit effort="20" velocity="15"/>')
    robot, notes = import_urdf(text)
    assert (robot.joints[2].lower, robot.joints[2].upper) == (-2 * math.pi, 2 * math.pi)
    assert any("continuous joint 'ankle'" in n for n in notes)


def test_doctype_and_entities_are_rejected():
    bomb = ('<?xml version="1.0"?>\n<!DOCTYPE robot [\n <!ENTITY a "aaaaaaaaaa">\n <!ENTITY b "&a;&a;&a;&a;&a;">\n]>\n'
            '<robot name="&b;"><link name="x"/></robot>')
    with pytest.raises(URDFError, match="DOCTYPE.*not allowed"):
        import_urdf(bomb)
    external = '<?xml version="1.0"?>\n<!DOCTYPE robot SYSTEM "file:///etc/hostname">\n<robot name="x"/>'
    with pytest.raises(URDFError, match="DOCTYPE.*not allowed"):
        import_urdf(external)


def test_malformed_xml_names_the_line():
    text = LEG.replace('<joint name="knee" type="revolute">', '<joint name="knee" type="revolute"')
    with pytest.raises(URDFError) as exc:
        import_urdf(text)
    assert "invalid XML at line 27, column 5" in problems_of(exc)  # where expat finds the stray "<"


def test_unknown_parent_and_two_parents_name_the_joint():
    with pytest.raises(URDFError) as exc:
        import_urdf(LEG.replace('<parent link="thigh"/>', '<parent link="thighh"/>'))
    assert '<joint name="knee"> (line 26): parent link \'thighh\' is not defined' in problems_of(exc)
    two = LEG.replace("</robot>", '<joint name="extra" type="fixed"><parent link="pelvis"/><child link="foot"/>'
                                  "</joint>\n</robot>")
    with pytest.raises(URDFError, match="link 'foot' has two parents"):
        import_urdf(two)
    with pytest.raises(URDFError, match="must be one tree"):
        import_urdf(LEG.replace("</robot>", '<link name="stray"/></robot>'))


def test_other_document_errors():
    with pytest.raises(URDFError, match="root element must be <robot>"):
        import_urdf("<model name='x'/>")
    with pytest.raises(URDFError, match="xacro macros must be expanded"):
        import_urdf('<robot xmlns:xacro="http://www.ros.org/wiki/xacro" name="x"><xacro:property name="a" value="1"/>'
                    '<link name="b"/></robot>')
    with pytest.raises(URDFError, match='<mass value="heavy">: must be a number'):
        import_urdf(LEG.replace('<mass value="1.0"/>', '<mass value="heavy"/>'))
    with pytest.raises(URDFError, match="duplicate link name 'thigh'"):
        import_urdf(LEG.replace('<link name="shank">', '<link name="thigh">'))
    with pytest.raises(URDFError, match="no such file"):
        import_urdf(Path("/nonexistent/robot.urdf"))


def test_names_are_made_valid():
    text = LEG.replace('"shank"', '"shank-link"').replace('name="knee"', 'name="2knee"')
    robot, notes = import_urdf(text)
    assert "shank_link" in robot.link_names and "_2knee" in robot.joint_names
    assert any("'shank-link' is called 'shank_link'" in n for n in notes)


def test_robot_dict_is_valid_and_plain():
    doc, notes = urdf_to_robot_dict(biped())
    assert validate_robot_dict(doc) == []
    yaml.safe_dump(doc)  # plain data only


# ----------------------------------------------------------------------------------------
# command line
# ----------------------------------------------------------------------------------------
def test_cli_import_urdf_writes_the_robot_file(tmp_path: Path, capsys):
    src = tmp_path / "strider.urdf"
    src.write_text(biped(), encoding="utf-8")
    out = tmp_path / "strider.yaml"
    assert main(["import-urdf", str(src), "-o", str(out), "--point", "toe,shank_l,0.05,-0.3,0.8"]) == 0
    printed = capsys.readouterr().out
    assert "approximations:" in printed and "- dropped lateral joint 'hip_roll_l'" in printed
    assert f"wrote {out}" in printed
    robot = load_robot(out)
    assert robot.link_names == ("torso", "thigh", "shank") and robot.point("toe").friction == 0.8
    assert main(["check", str(out)]) == 0


def test_cli_import_urdf_error_exits_2_and_writes_nothing(tmp_path: Path, capsys):
    src = tmp_path / "bad.urdf"
    src.write_text(LEG.replace('<axis xyz="0 -1 0"/>', '<axis xyz="0 1 1"/>'), encoding="utf-8")
    out = tmp_path / "bad.yaml"
    assert main(["import-urdf", str(src), "-o", str(out)]) == 2
    printed = capsys.readouterr().out
    assert f'{src}: <joint name="knee"> (line 26): unsupported axis' in printed
    assert not out.exists() and list(tmp_path.iterdir()) == [src]
