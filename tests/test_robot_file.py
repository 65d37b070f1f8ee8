"""Robot files: the bundled demo robots, the lumping rule, validation and round trips.

The lumping checks compare the loaded (lumped) robot against the per-side numbers read
straight from the bundled YAML files with plain PyYAML (the outside source for those tests).
"""
from __future__ import annotations

import copy
import math
import os
from dataclasses import replace
from pathlib import Path

import pytest
import yaml
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from kipup.core.lumping import is_paired, lump_pair, unlump_pair
from kipup.core.robot import Actuator, Joint, Link, Robot
from kipup.core.robot_file import (
    FORMAT,
    Problem,
    RobotFileError,
    bundled_robot_names,
    bundled_robot_path,
    load_bundled,
    load_robot,
    parse_yaml,
    read_yaml_file,
    robot_from_dict,
    robot_to_dict,
    robot_to_yaml,
    save_robot,
    validate_robot_dict,
)

ROBOTS = ["humanoid", "quadruped"]


def raw(name: str) -> dict:
    """The bundled file as plain PyYAML reads it (per-side values, file order)."""
    return yaml.safe_load(bundled_robot_path(name).read_text(encoding="utf-8"))


def error_text(data: object) -> str:
    with pytest.raises(RobotFileError) as info:
        robot_from_dict(data)  # type: ignore[arg-type]
    return str(info.value)


def humanoid_with(mutate) -> dict:
    d = copy.deepcopy(raw("humanoid"))
    mutate(d)
    return d


def link_index(d: dict, name: str) -> int:
    return [link["name"] for link in d["links"]].index(name)


# ---------------------------------------------------------------------------------------
# bundled robots
# ---------------------------------------------------------------------------------------
def test_bundled_names():
    assert set(ROBOTS) <= set(bundled_robot_names())
    with pytest.raises(ValueError, match="humanoid"):
        bundled_robot_path("no_such_robot")
    with pytest.raises(ValueError, match="quadruped"):
        load_bundled("../robots/humanoid")


@pytest.mark.parametrize("name, nq", [("humanoid", 8), ("quadruped", 7)])
def test_bundled_load_and_validate(name: str, nq: int):
    assert validate_robot_dict(raw(name)) == []
    robot = load_bundled(name)
    assert isinstance(robot, Robot)
    assert robot.nq == nq
    assert robot == load_robot(bundled_robot_path(name))
    assert robot == load_robot(str(bundled_robot_path(name)))
    assert robot.description


@pytest.mark.parametrize("name", ROBOTS)
def test_round_trip(name: str, tmp_path: Path):
    robot = robot_from_dict(raw(name))
    d = robot_to_dict(robot)
    assert validate_robot_dict(d) == []
    assert robot_from_dict(d) == robot
    assert robot_to_dict(robot_from_dict(d)) == d
    # per-side values are written back: the dict matches the file's numbers
    file_links = {link["name"]: link for link in raw(name)["links"]}
    for link in d["links"]:
        f = file_links[link["name"]]
        assert link["mass"] == f["mass"]
        assert link["joint"]["actuator"]["peak_torque"] == f["joint"]["actuator"]["peak_torque"]
        assert link.get("pair") == f.get("pair")
    # through YAML text and through a saved file
    assert load_robot(robot_to_yaml(robot)) == robot
    path = tmp_path / "robot.yaml"
    save_robot(robot, path)
    assert load_robot(path) == robot


def test_total_masses():
    assert 18.0 <= load_bundled("humanoid").total_mass <= 22.0
    assert 11.0 <= load_bundled("quadruped").total_mass <= 13.0


def _standing_world_z(robot: Robot, point: str) -> float:
    """z (m) of a point at q = 0 with the base frame at the origin: all frames are parallel."""
    p = robot.point(point)
    z, link = p.position[1], p.link
    joints = {j.child: j for j in robot.joints}
    while link in joints:
        z += joints[link].origin[1]
        link = joints[link].parent
    return z


def test_humanoid_shape():
    robot = load_bundled("humanoid")
    assert robot.link_names[0] == "torso"
    assert set(robot.joint_names) == {"hip", "knee", "ankle", "shoulder", "elbow"}
    assert {"toe", "heel", "hand", "head"} <= set(robot.point_names)
    ground = min(_standing_world_z(robot, "toe"), _standing_world_z(robot, "heel"))
    height = _standing_world_z(robot, "head") - ground
    assert 0.9 <= height <= 1.1
    assert _standing_world_z(robot, "hand") < _standing_world_z(robot, "head")  # arms hang down
    for name in ("thigh", "shank", "upper_arm", "forearm"):  # limbs point down at q = 0
        cap = robot.links[robot.link_index(name)].capsule
        assert cap is not None and cap.end[1] < cap.start[1]
    j = {jt.name: jt for jt in robot.joints}
    assert j["knee"].lower >= 0.0 < j["knee"].upper  # the knee bends one way only
    assert j["elbow"].upper <= 0.0
    # lumped torques (N m): legs strong enough for a backflip, within reason for a 20 kg robot
    for name, lo, hi in [("hip", 60.0, 150.0), ("knee", 60.0, 150.0), ("ankle", 30.0, 80.0),
                         ("shoulder", 15.0, 30.0), ("elbow", 15.0, 30.0)]:
        assert lo <= j[name].actuator.peak_torque <= hi, name
    for jt in robot.joints:
        assert 15.0 <= jt.actuator.no_load_speed <= 35.0
        assert jt.velocity_limit <= jt.actuator.no_load_speed
        assert jt.actuator.stall_torque >= jt.actuator.peak_torque
    for p in ("toe", "heel"):
        assert robot.point(p).friction == 0.8


def test_quadruped_shape():
    robot = load_bundled("quadruped")
    body = robot.links[0]
    assert body.capsule is not None and abs(body.capsule.end[0] - body.capsule.start[0]) > 0.3  # horizontal
    assert body.capsule.end[1] == body.capsule.start[1]
    feet = [p for p in robot.points if p.name.endswith("foot")]
    assert len(feet) == 2 and all(p.friction == 0.7 for p in feet)
    assert all(is_paired(link) for link in robot.links[1:])


# ---------------------------------------------------------------------------------------
# lumping
# ---------------------------------------------------------------------------------------
@pytest.mark.parametrize("name", ROBOTS)
def test_lumping_rule_against_file_values(name: str):
    """Lumped values vs the per-side numbers in the YAML file (read with plain PyYAML)."""
    robot = load_bundled(name)
    assert robot.links[0].sides == (0.0,)
    for f in raw(name)["links"]:
        k = robot.link_index(f["name"])
        link, joint = robot.links[k], robot.joints[k - 1]
        fa, a = f["joint"]["actuator"], joint.actuator
        assert "pair" in f
        w = f["pair"]["lateral_offset"]
        assert link.sides == (w, -w)
        assert link.mass == pytest.approx(2 * f["mass"])
        assert link.inertia == pytest.approx(2 * f["inertia"])
        assert link.com == tuple(f["com"])
        assert a.peak_torque == pytest.approx(2 * fa["peak_torque"])
        assert a.stall_torque == pytest.approx(2 * fa["stall_torque"])
        assert a.viscous_friction == pytest.approx(2 * fa["viscous_friction"])
        assert a.no_load_speed == fa["no_load_speed"]
        assert a.gear_ratio == fa["gear_ratio"]
        lim = f["joint"]["limits"]
        assert (joint.lower, joint.upper, joint.velocity_limit) == (lim["lower"], lim["upper"], lim["velocity"])
        assert joint.origin == tuple(f["joint"]["origin"])
        assert tuple(link.capsule.end) == tuple(f["capsule"]["end"])
    # points on paired links are unchanged
    for fp, p in zip(raw(name)["points"], robot.points):
        assert (p.name, p.link, p.position) == (fp["name"], fp["link"], tuple(fp["position"]))


def _side() -> tuple[Link, Joint]:
    link = Link(name="shin", mass=1.25, com=(0.01, -0.1), inertia=0.007)
    joint = Joint(name="knee", parent="thigh", child="shin", origin=(0.0, -0.3), lower=0.0, upper=2.5,
                  velocity_limit=15.0,
                  actuator=Actuator(peak_torque=30.0, gear_ratio=9.0, stall_torque=33.0, no_load_speed=20.0,
                                    viscous_friction=0.05))
    return link, joint


def test_lump_pair_numbers():
    link, joint = _side()
    lumped, ljoint = lump_pair(link, joint, 0.09)
    assert (lumped.mass, lumped.inertia, lumped.com, lumped.sides) == (2.5, 0.014, (0.01, -0.1), (0.09, -0.09))
    a = ljoint.actuator
    assert (a.peak_torque, a.stall_torque, a.viscous_friction) == (60.0, 66.0, 0.1)
    assert (a.gear_ratio, a.no_load_speed) == (9.0, 20.0)
    assert (ljoint.lower, ljoint.upper, ljoint.velocity_limit, ljoint.origin) == (0.0, 2.5, 15.0, (0.0, -0.3))
    side, sjoint, w = unlump_pair(lumped, ljoint)
    assert (side, sjoint, w) == (link, joint, 0.09)
    assert is_paired(lumped) and not is_paired(link)


@pytest.mark.parametrize("w", [0.0, -0.1, math.nan])
def test_lump_pair_rejects_bad_offset(w: float):
    link, joint = _side()
    with pytest.raises(ValueError, match="lateral_offset"):
        lump_pair(link, joint, w)


@settings(max_examples=60, deadline=None)
@given(mass=st.floats(1e-3, 1e3), inertia=st.floats(1e-6, 10.0), torque=st.floats(1e-2, 1e3),
       w=st.floats(1e-3, 1.0))
def test_lump_unlump_exact(mass: float, inertia: float, torque: float, w: float):
    link, joint = _side()
    link = replace(link, mass=mass, inertia=inertia)
    joint = replace(joint, actuator=replace(joint.actuator, peak_torque=torque, stall_torque=torque))
    assert unlump_pair(*lump_pair(link, joint, w)) == (link, joint, w)


# ---------------------------------------------------------------------------------------
# ordering
# ---------------------------------------------------------------------------------------
def test_links_sorted_parent_first_keeping_file_order():
    d = raw("humanoid")
    d["links"] = list(reversed(d["links"]))  # forearm, upper_arm, foot, shank, thigh
    robot = robot_from_dict(d)
    assert robot.link_names == ("torso", "upper_arm", "forearm", "thigh", "shank", "foot")
    assert robot.coord_names[3:] == ("shoulder", "elbow", "hip", "knee", "ankle")
    # same constants, only the order differs
    assert {lk.name: lk for lk in robot.links} == {lk.name: lk for lk in load_bundled("humanoid").links}


def test_file_order_kept_when_already_parent_first():
    d = raw("humanoid")
    names = [link["name"] for link in d["links"]]
    assert load_bundled("humanoid").link_names[1:] == tuple(names)


# ---------------------------------------------------------------------------------------
# bad input: one test per rule, each asserting the field path
# ---------------------------------------------------------------------------------------
def _act(d: dict, link: str) -> dict:
    return d["links"][link_index(d, link)]["joint"]["actuator"]


@pytest.mark.parametrize("field, value", [
    ("peak_torque", -40.0), ("peak_torque", 0.0), ("stall_torque", 0.0), ("no_load_speed", 0.0),
    ("no_load_speed", -3.0), ("gear_ratio", 0.0),
])
def test_nonpositive_actuator_limits(field: str, value: float):
    d = humanoid_with(lambda d: _act(d, "upper_arm").__setitem__(field, value))
    i = link_index(d, "upper_arm")
    assert f"links[{i}].joint.actuator.{field}: must be > 0" in error_text(d)


def test_negative_viscous_friction():
    d = humanoid_with(lambda d: _act(d, "shank").__setitem__("viscous_friction", -0.1))
    assert "links[1].joint.actuator.viscous_friction: must be >= 0" in error_text(d)


def test_nonpositive_velocity_limit():
    d = humanoid_with(lambda d: d["links"][2]["joint"]["limits"].__setitem__("velocity", 0.0))
    assert "links[2].joint.limits.velocity: must be > 0" in error_text(d)


@pytest.mark.parametrize("field", ["mass", "inertia"])
def test_nonpositive_mass_inertia(field: str):
    d = humanoid_with(lambda d: d["links"][0].__setitem__(field, 0.0))
    assert f"links[0].{field}: must be > 0" in error_text(d)
    d = humanoid_with(lambda d: d["base"].__setitem__(field, -1.0))
    assert f"base.{field}: must be > 0" in error_text(d)


def test_nonpositive_lateral_offset_and_radius():
    d = humanoid_with(lambda d: (d["links"][3]["pair"].__setitem__("lateral_offset", 0.0),
                                 d["base"]["capsule"].__setitem__("radius", 0.0)))
    text = error_text(d)
    assert "links[3].pair.lateral_offset: must be > 0" in text
    assert "base.capsule.radius: must be > 0" in text


def test_negative_friction():
    d = humanoid_with(lambda d: d["points"][1].__setitem__("friction", -0.2))
    assert "points[1].friction: must be >= 0" in error_text(d)


@pytest.mark.parametrize("token, message", [(".nan", "not NaN"), (".inf", "must be finite"),
                                            ("-.inf", "must be finite"), (".NaN", "not NaN")])
def test_nan_and_infinite_numbers_from_yaml(token: str, message: str):
    """YAML .nan/.inf parse to floats that the schema's bounds let through; they must be caught."""
    text = bundled_robot_path("humanoid").read_text(encoding="utf-8")
    text = text.replace("peak_torque: 10.0, gear_ratio: 6.0, stall_torque: 11.0, no_load_speed: 22.0",
                        f"peak_torque: {token}, gear_ratio: 6.0, stall_torque: 11.0, no_load_speed: 22.0", 1)
    assert token in text
    with pytest.raises(RobotFileError) as info:
        load_robot(text)
    problems = [p for p in info.value.problems if p.path == "links[3].joint.actuator.peak_torque"]
    assert len(problems) == 1 and message in problems[0].message  # reported once, not twice


@pytest.mark.parametrize("where", ["com", "origin", "position", "gravity", "limits"])
def test_nan_anywhere(where: str):
    def mutate(d):
        if where == "com":
            d["links"][2]["com"][1] = math.nan
        elif where == "origin":
            d["links"][2]["joint"]["origin"][0] = math.inf
        elif where == "position":
            d["points"][0]["position"][1] = -math.inf
        elif where == "gravity":
            d["gravity"] = math.nan
        else:
            d["links"][2]["joint"]["limits"]["upper"] = math.nan
    path = {"com": "links[2].com[1]", "origin": "links[2].joint.origin[0]", "position": "points[0].position[1]",
            "gravity": "gravity", "limits": "links[2].joint.limits.upper"}[where]
    assert f"{path}: must be" in error_text(humanoid_with(mutate))


def test_duplicate_link_name():
    d = humanoid_with(lambda d: d["links"][4].__setitem__("name", "thigh"))
    assert "links[4].name: duplicate link name 'thigh' (also links[0].name)" in error_text(d)


def test_link_named_like_the_base():
    d = humanoid_with(lambda d: d["links"][3].__setitem__("name", "torso"))
    assert "links[3].name: duplicate link name 'torso' (also base.name)" in error_text(d)


def test_duplicate_joint_name():
    d = humanoid_with(lambda d: d["links"][4]["joint"].__setitem__("name", "shoulder"))
    assert "links[4].joint.name: duplicate joint name 'shoulder'" in error_text(d)


def test_reserved_joint_name():
    d = humanoid_with(lambda d: d["links"][4]["joint"].__setitem__("name", "base_pitch"))
    assert "links[4].joint.name: joint name 'base_pitch' is reserved" in error_text(d)


def test_duplicate_point_name():
    d = humanoid_with(lambda d: d["points"][3].__setitem__("name", "toe"))
    assert "points[3].name: duplicate point name 'toe' (also points[0].name)" in error_text(d)


def test_unknown_parent():
    d = humanoid_with(lambda d: d["links"][2].__setitem__("parent", "shin"))
    text = error_text(d)
    assert "links[2].parent: unknown link 'shin'" in text
    assert "shank" in text  # lists the known links


def test_loop_in_tree():
    d = humanoid_with(lambda d: d["links"][0].__setitem__("parent", "foot"))  # thigh <- foot
    text = error_text(d)
    for i in (0, 1, 2):
        assert f"links[{i}].parent: link" in text
    assert "never reaches the base 'torso'" in text
    assert "loop thigh -> foot -> shank -> thigh" in text


def test_own_parent():
    d = humanoid_with(lambda d: d["links"][4].__setitem__("parent", "forearm"))
    assert "links[4].parent: link 'forearm' cannot be its own parent" in error_text(d)


def test_point_on_unknown_link():
    d = humanoid_with(lambda d: d["points"][2].__setitem__("link", "shin"))
    assert "points[2].link: unknown link 'shin'" in error_text(d)


@pytest.mark.parametrize("lower, upper", [(1.0, 0.5), (0.5, 0.5)])
def test_lower_not_below_upper(lower: float, upper: float):
    d = humanoid_with(lambda d: d["links"][1]["joint"].__setitem__(
        "limits", {"lower": lower, "upper": upper, "velocity": 10.0}))
    assert "links[1].joint.limits.lower: lower limit" in error_text(d)


def test_stall_below_peak():
    d = humanoid_with(lambda d: _act(d, "foot").__setitem__("stall_torque", 15.0))
    assert "links[2].joint.actuator.stall_torque: stall torque (15.0 N m) is below the peak torque" in error_text(d)


def test_centre_link_under_a_pair():
    d = humanoid_with(lambda d: d["links"][2].pop("pair"))  # foot under the paired shank
    assert "links[2].pair: required" in error_text(d)


def test_missing_required_fields():
    d = humanoid_with(lambda d: (d["links"][1].pop("mass"), d["links"][3]["joint"]["actuator"].pop("peak_torque"),
                                 d.pop("name")))
    text = error_text(d)
    assert "links[1].mass: required field is missing" in text
    assert "links[3].joint.actuator.peak_torque: required field is missing" in text
    assert "name: required field is missing" in text


def test_unknown_field_suggests_a_name():
    d = humanoid_with(lambda d: d["links"][1]["joint"]["limits"].__setitem__("uper", 1.0))
    assert "links[1].joint.limits.uper: unknown field (did you mean 'upper'?)" in error_text(d)


def test_wrong_types_and_lengths():
    d = humanoid_with(lambda d: (d["links"][1].__setitem__("com", [0.0, -0.1, 0.0]),
                                 d["links"][1].__setitem__("inertia", "small"),
                                 d["points"][0].__setitem__("position", [0.1]),
                                 d["base"].__setitem__("mass", True)))
    text = error_text(d)
    assert "links[1].com: must be a list of 2 numbers [x, z] (got 3 items)" in text
    assert "links[1].inertia: must be a number (got the string 'small')" in text
    assert "points[0].position: must be a list of 2 numbers" in text
    assert "base.mass: must be a number" in text


def test_bad_names():
    d = humanoid_with(lambda d: (d["links"][0]["joint"].__setitem__("name", "left hip"), d.__setitem__("name", "")))
    text = error_text(d)
    assert "links[0].joint.name: must be a name" in text
    assert "name: must not be empty" in text


def test_wrong_format():
    d = humanoid_with(lambda d: d.__setitem__("format", "kipup-robot/2"))
    assert "format: must be 'kipup-robot/1'" in error_text(d)


@pytest.mark.parametrize("doc, message", [(None, "empty document"), ([1, 2], "must be a mapping"),
                                          ("robot", "must be a mapping")])
def test_not_a_mapping(doc, message: str):
    assert f"document: {message}" in error_text(doc)


def test_all_problems_reported_at_once():
    def mutate(d):
        d["links"][0]["mass"] = -1.0                                   # schema
        d["links"][1]["joint"]["actuator"]["peak_torque"] = math.nan   # non-finite
        d["links"][2]["parent"] = "shin"                               # unknown parent
        d["links"][3]["joint"]["limits"]["lower"] = 2.0                # lower >= upper
        d["points"][1]["link"] = "nowhere"                             # unknown link
        d["points"][2]["name"] = "toe"                                 # duplicate point
        d["links"][4]["colour"] = "red"                                # unknown field
    with pytest.raises(RobotFileError) as info:
        robot_from_dict(humanoid_with(mutate))
    err = info.value
    paths = [p.path for p in err.problems]
    expected = ["links[0].mass", "links[1].joint.actuator.peak_torque", "links[2].parent",
                "links[3].joint.limits.lower", "points[1].link", "points[2].name", "links[4].colour"]
    assert sorted(paths) == sorted(expected)
    lines = str(err).splitlines()
    assert len(lines) == len(expected)
    assert all(line == f"{p.path}: {p.message}" for line, p in zip(lines, err.problems))
    assert isinstance(err, ValueError)
    assert all(isinstance(p, Problem) for p in err.problems)


# ---------------------------------------------------------------------------------------
# YAML and files
# ---------------------------------------------------------------------------------------
def test_malformed_yaml_one_problem_with_line_and_column():
    text = "format: kipup-robot/1\nname: x\nbase: {name: torso, mass: 1.0\nlinks: []\n"
    with pytest.raises(RobotFileError) as info:
        load_robot(text)
    (problem,) = info.value.problems
    assert problem.path == "document"
    assert "invalid YAML at line 4, column 6" in problem.message


def test_yaml_duplicate_key_is_a_problem():
    text = bundled_robot_path("quadruped").read_text(encoding="utf-8").replace(
        "  mass: 8.4\n", "  mass: 8.4\n  mass: 9.0\n", 1)
    with pytest.raises(RobotFileError, match="duplicate key 'mass'"):
        load_robot(text)


def test_yaml_exponent_floats_and_unsafe_tags():
    data, problems = parse_yaml("a: 1e-3\nb: 2.5E+2\nc: 1_000\nd: '1e-3'\n")
    assert problems == [] and data == {"a": 0.001, "b": 250.0, "c": 1000, "d": "1e-3"}
    data, problems = parse_yaml("a: !!python/object/apply:os.getcwd []\n")
    assert data is None and len(problems) == 1 and "line 1" in problems[0].message


def test_control_character_is_a_problem():
    data, problems = parse_yaml("a: 1\nb: \x07\n")
    assert data is None and "line 2" in problems[0].message


def test_missing_file(tmp_path: Path):
    with pytest.raises(RobotFileError, match="no such file") as info:
        load_robot(tmp_path / "missing.yaml")
    assert info.value.problems[0].path == "file"
    assert read_yaml_file(tmp_path)[1][0].message.startswith("is a directory")


def test_failed_load_leaves_file_byte_identical(tmp_path: Path):
    path = tmp_path / "bad.yaml"
    text = bundled_robot_path("humanoid").read_text(encoding="utf-8").replace("mass: 1.8", "mass: -1.8")
    path.write_bytes(text.encode("utf-8"))
    before, stat = path.read_bytes(), path.stat()
    with pytest.raises(RobotFileError, match=r"links\[0\]\.mass"):
        load_robot(path)
    assert path.read_bytes() == before
    assert path.stat().st_mtime_ns == stat.st_mtime_ns
    assert sorted(os.listdir(tmp_path)) == ["bad.yaml"]


def test_save_is_atomic_and_replaces(tmp_path: Path):
    path = tmp_path / "r.yaml"
    path.write_text("old contents\n")
    robot = load_bundled("quadruped")
    save_robot(robot, path)
    assert sorted(os.listdir(tmp_path)) == ["r.yaml"]  # no temp file left behind
    assert load_robot(path) == robot
    assert path.read_text().startswith("# kipup robot file")


def test_save_refuses_invalid_robot_and_keeps_old_file(tmp_path: Path):
    path = tmp_path / "r.yaml"
    save_robot(load_bundled("humanoid"), path)
    before = path.read_bytes()
    robot = load_bundled("humanoid")
    bad = replace(robot, links=(replace(robot.links[0], mass=math.nan),) + robot.links[1:])
    with pytest.raises(RobotFileError, match=r"base\.mass"):
        save_robot(bad, path)
    assert path.read_bytes() == before
    assert sorted(os.listdir(tmp_path)) == ["r.yaml"]


def test_to_dict_rejects_sides_a_file_cannot_describe():
    robot = load_bundled("humanoid")
    odd = replace(robot, links=robot.links[:1] + (replace(robot.links[1], sides=(0.1,)),) + robot.links[2:])
    with pytest.raises(RobotFileError, match=r"links\[0\]"):
        robot_to_dict(odd)


# ---------------------------------------------------------------------------------------
# properties
# ---------------------------------------------------------------------------------------
_pos = st.floats(1e-3, 50.0, allow_nan=False)
_coord = st.floats(-1.0, 1.0, allow_nan=False)


@st.composite
def robot_docs(draw) -> dict:
    """Random valid robot documents: a base and a random tree of links, in random file order."""
    n = draw(st.integers(0, 6))
    links = []
    for i in range(n):
        parent = draw(st.sampled_from(["base"] + [f"l{k}" for k in range(i)]))
        parent_paired = parent != "base" and links[int(parent[1:])].get("pair") is not None
        peak = draw(_pos)
        lo = draw(st.floats(-3.0, 0.0))
        link = {"name": f"l{i}", "parent": parent, "mass": draw(_pos), "com": [draw(_coord), draw(_coord)],
                "inertia": draw(_pos),
                "joint": {"name": f"j{i}", "origin": [draw(_coord), draw(_coord)],
                          "limits": {"lower": lo, "upper": lo + draw(st.floats(0.01, 3.0)), "velocity": draw(_pos)},
                          "actuator": {"peak_torque": peak, "gear_ratio": draw(_pos),
                                       "stall_torque": peak + draw(st.floats(0.0, 10.0)),
                                       "no_load_speed": draw(_pos), "viscous_friction": draw(st.floats(0.0, 1.0))}}}
        if parent_paired or draw(st.booleans()):
            link["pair"] = {"lateral_offset": draw(st.floats(0.01, 0.5))}
        links.append(link)
    links = draw(st.permutations(links))
    names = ["base"] + [f"l{i}" for i in range(n)]
    points = [{"name": f"p{k}", "link": draw(st.sampled_from(names)), "position": [draw(_coord), draw(_coord)],
               "friction": draw(st.one_of(st.none(), st.floats(0.0, 2.0)))} for k in range(draw(st.integers(0, 3)))]
    return {"format": FORMAT, "name": "random", "gravity": 9.81,
            "base": {"name": "base", "mass": draw(_pos), "com": [0.0, 0.0], "inertia": draw(_pos)},
            "links": list(links), "points": points}


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(doc=robot_docs())
def test_random_robots_round_trip(doc: dict):
    assert validate_robot_dict(doc) == []
    robot = robot_from_dict(doc)
    assert robot_from_dict(robot_to_dict(robot)) == robot
    assert load_robot(robot_to_yaml(robot)) == robot
    seen = {robot.links[0].name}
    for joint in robot.joints:  # parent-first
        assert joint.parent in seen
        seen.add(joint.child)


_json = st.recursive(
    st.none() | st.booleans() | st.integers() | st.floats() | st.text(max_size=5),
    lambda children: st.lists(children, max_size=4) | st.dictionaries(st.text(max_size=8), children, max_size=4),
    max_leaves=20,
)


@settings(max_examples=150, deadline=None)
@given(doc=robot_docs(), path_choice=st.integers(0, 10_000), junk=_json)
def test_garbage_never_escapes_as_another_exception(doc: dict, path_choice: int, junk):
    """Replace one random node of a valid document by junk: only RobotFileError may come out."""
    nodes: list[tuple[object, object]] = []

    def walk(node):
        items = node.items() if isinstance(node, dict) else enumerate(node) if isinstance(node, list) else ()
        for key, value in items:
            nodes.append((node, key))
            walk(value)
    walk(doc)
    container, key = nodes[path_choice % len(nodes)]
    container[key] = junk  # type: ignore[index]
    problems = validate_robot_dict(doc)
    assert all(isinstance(p, Problem) and p.path for p in problems)
    try:
        robot_from_dict(doc)
    except RobotFileError:
        assert problems
