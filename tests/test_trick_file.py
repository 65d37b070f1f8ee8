"""Trick files: loading, validation (every problem with its field path), saving and ``kipup check``.

The valid trick is an invented demo hop of the bundled humanoid onto a box; the expected
names, joint limits and point frictions come from ``core/data/robots/humanoid.yaml``.
"""
from __future__ import annotations

import json
import math
import os
from dataclasses import fields
from pathlib import Path

import jsonschema
import numpy as np
import pytest
import yaml

from kipup.core import cli
from kipup.core.robot_file import Problem, bundled_robot_path, load_bundled
from kipup.core.trick import (
    TRICK_FORMAT,
    Bar,
    Box,
    Contact,
    Costs,
    Goals,
    Keyframe,
    Phase,
    Reach,
    SolverSettings,
    Target,
    Terrain,
    Trick,
)
from kipup.core.trick_file import (
    KEY_ORDER,
    SAFETY_CAUTION,
    TrickFileError,
    check_trick,
    load_trick,
    resolve_robot,
    save_trick,
    trick_from_text,
    trick_schema,
    trick_to_yaml,
    validate_trick_dict,
)

VALID_YAML = """\
# An invented demo: a hop from the ground onto a box.
format: kipup-trick/1
name: box_hop
description: an invented demo hop onto a box
robot: humanoid
terrain:
  ground: 0.0
  boxes: [{name: step, x_min: 0.4, x_max: 0.9, height: 0.2}]
  targets: [{name: mark, x: 0.3, z: 1.4}]
  bars: [{name: rod, x: 0.2, z: 0.9}]
phases:
  - name: push
    contacts: [{point: toe}, {point: heel, surface: ground}]
    duration: 0.4
    duration_min: 0.2
    duration_max: 0.6
    knots: 12
  - {name: flight, contacts: [], duration: 0.3, knots: 10}
  - {name: land, contacts: [{point: toe, surface: step}], duration: 0.4, knots: 8}
keyframes:
  - {name: crouch, phase: push, time: 0.5, pose: {knee: 1.2, hip: -0.8}}
  - {name: tuck, time: 0.55, pose: {base_pitch: -0.3}, hard: true}
goals:
  landing_x: [0.5, 0.8]
  reach: [{point: hand, target: mark, phase: flight}]
costs: {effort: 1.0, keyframes: 10.0}
landing_pose: {knee: 0.3}
"""
HORIZON = 1.1  # s: 0.4 + 0.3 + 0.4


def valid() -> dict:
    return yaml.safe_load(VALID_YAML)


def write(folder: Path, data, name: str = "hop.trick.yaml") -> Path:
    path = folder / name
    text = data if isinstance(data, str) else yaml.safe_dump(data, sort_keys=False)
    path.write_text(text, encoding="utf-8")
    return path


def problems_of(data, folder: Path) -> list[Problem]:
    path = write(folder, data)
    with pytest.raises(TrickFileError) as info:
        load_trick(path)
    return list(info.value.problems)


@pytest.fixture(scope="module")
def humanoid():
    return load_bundled("humanoid")


def full_trick() -> Trick:
    """A trick using every field, built in Python (values chosen to be awkward for YAML)."""
    return Trick(
        name="yes",  # a YAML 1.1 boolean word: must come back as a string
        robot="humanoid",
        description="every field set\nover two lines: with a colon",
        phases=[
            Phase("crouch", [Contact("toe"), Contact("heel")], duration=0.35, duration_min=0.2, duration_max=0.5,
                  knots=15),
            Phase("air", [], duration=0.45, knots=18),
            Phase("touch", [Contact("toe", "step")], duration=1e-1, knots=7),
        ],
        terrain=Terrain(ground=-0.05, boxes=[Box("step", 0.5, 1.2, 0.15)], targets=[Target("mark", 0.2, 1.3)],
                        bars=[Bar("rod", 0.4, 0.6, 0.03)]),
        keyframes=[
            Keyframe("low", 1.0, {"knee": 1.4, "hip": -1.1}, phase="crouch", hard=True),
            Keyframe("flip", 0.6, {"base_pitch": -math.pi}, weight=2.5),
            Keyframe("open", 0.0, {"knee": 0.2}, phase="touch", weight=0.0),
        ],
        goals=Goals(rotation=-2 * math.pi, landing_x=(0.6, 1.0),
                    reach=[Reach("hand", "mark", "air", time=0.25, hard=False)]),
        costs=Costs(effort=0.5, work=0.1, torque_rate=1e-3, keyframes=20.0, landing_pose=3.0, force_smoothness=0.2),
        solver=SolverSettings(max_iter=80, tol=1e-8, time_limit=12.5, print_level=5),
        landing_pose={"knee": 0.4, "hip": -0.3},
        start_at_rest=False,
        end_at_rest=True,
    )


# ----------------------------------------------------------------------------- valid files
def test_valid_trick_loads(tmp_path: Path, humanoid):
    trick, robot = load_trick(write(tmp_path, VALID_YAML))
    assert robot == humanoid
    assert trick.name == "box_hop" and trick.robot == "humanoid"
    assert [p.name for p in trick.phases] == ["push", "flight", "land"]
    assert trick.phases[0].contacts == [Contact("toe", "ground"), Contact("heel", "ground")]
    assert trick.phases[0].free and not trick.phases[1].free and trick.phases[1].in_flight
    assert trick.phases[2].contacts == [Contact("toe", "step")]
    assert trick.terrain.boxes == [Box("step", 0.4, 0.9, 0.2)] and trick.terrain.bars == [Bar("rod", 0.2, 0.9)]
    assert trick.keyframes[0] == Keyframe("crouch", 0.5, {"knee": 1.2, "hip": -0.8}, phase="push")
    assert trick.keyframes[1].hard and trick.keyframes[1].phase is None
    assert trick.goals.landing_x == (0.5, 0.8) and trick.goals.rotation is None
    assert trick.goals.reach == [Reach("hand", "mark", "flight")]
    assert trick.costs == Costs(effort=1.0, keyframes=10.0)
    assert trick.solver == SolverSettings()
    assert trick.nominal_duration == pytest.approx(HORIZON)
    assert validate_trick_dict(valid(), robot) == []
    assert validate_trick_dict(valid(), None) == []


def test_numbers_get_the_dataclass_types(tmp_path: Path):
    d = valid()
    d["phases"][0]["duration"] = 0  # int in YAML ...
    d["phases"][0].pop("duration_min")
    d["phases"][0].pop("duration_max")
    d["phases"][0]["duration"] = 1
    d["phases"][0]["knots"] = 12.0
    d["keyframes"][0]["time"] = 1
    trick, _ = load_trick(write(tmp_path, d))
    assert type(trick.phases[0].duration) is float and type(trick.phases[0].knots) is int
    assert type(trick.keyframes[0].time) is float and type(trick.keyframes[0].pose["knee"]) is float


def test_trick_from_text(tmp_path: Path):
    trick, robot = trick_from_text(VALID_YAML)
    assert trick == load_trick(write(tmp_path, VALID_YAML))[0] and robot.name == "tumbli"


def test_round_trip_of_a_loaded_file(tmp_path: Path):
    trick, _ = load_trick(write(tmp_path, VALID_YAML))
    out = tmp_path / "saved.trick.yaml"
    save_trick(trick, out)
    again, _ = load_trick(out)
    assert again == trick


def test_round_trip_of_every_field(tmp_path: Path):
    trick = full_trick()
    path = tmp_path / "full.trick.yaml"
    save_trick(trick, path)
    again, robot = load_trick(path)
    assert again == trick
    assert again.name == "yes" and again.goals.landing_x == (0.6, 1.0)
    assert again.goals.rotation == -2 * math.pi  # exact, not rounded
    # and once more: saving what was loaded gives the same text
    path2 = tmp_path / "again.trick.yaml"
    save_trick(again, path2)
    assert path2.read_text(encoding="utf-8") == path.read_text(encoding="utf-8")


def test_saved_file_has_caution_header_and_readable_key_order(tmp_path: Path):
    path = tmp_path / "full.trick.yaml"
    save_trick(full_trick(), path)
    text = path.read_text(encoding="utf-8")
    lines = text.splitlines()
    assert lines[0].startswith("# ")
    assert ("# Trajectories from this file must be simulated first and run on hardware only under your "
            "lab's safety rules and local regulations.") in lines[:3]
    assert SAFETY_CAUTION in text
    assert text == trick_to_yaml(full_trick())
    top = [line.split(":")[0] for line in lines if line and not line.startswith(("#", " ", "-"))]
    assert top == ["format", "name", "description", "robot", "terrain", "phases", "keyframes", "goals", "costs",
                   "landing_pose", "start_at_rest", "end_at_rest", "solver"]
    assert top == [k for k in KEY_ORDER if k in top]
    assert lines[len([x for x in lines if x.startswith("#")])] == f"format: {TRICK_FORMAT}"


def test_saved_file_leaves_out_unset_optional_fields(tmp_path: Path):
    trick, _ = load_trick(write(tmp_path, VALID_YAML))
    out = tmp_path / "saved.trick.yaml"
    save_trick(trick, out)
    text = out.read_text(encoding="utf-8")
    assert "null" not in text and "description: an invented demo hop onto a box" in text
    saved = yaml.safe_load(text)
    assert "phase" not in saved["keyframes"][1] and "duration_min" not in saved["phases"][1]
    assert "rotation" not in saved["goals"]


def test_save_writes_numpy_numbers_as_plain_yaml(tmp_path: Path):
    trick = full_trick()
    trick.phases[0].duration = np.float64(0.3)
    trick.keyframes[0].pose["knee"] = np.float32(1.25)
    trick.phases[1].knots = np.int64(9)
    path = tmp_path / "np.trick.yaml"
    save_trick(trick, path)
    assert "numpy" not in path.read_text(encoding="utf-8")
    again, _ = load_trick(path)
    assert again.phases[0].duration == 0.3 and again.keyframes[0].pose["knee"] == 1.25
    assert again.phases[1].knots == 9


def test_save_is_atomic_and_refuses_invalid_tricks(tmp_path: Path):
    path = tmp_path / "t.trick.yaml"
    save_trick(full_trick(), path)
    before = path.read_bytes()
    bad = full_trick()
    bad.phases[0].contacts = [Contact("paw")]
    with pytest.raises(TrickFileError) as info:
        save_trick(bad, path)
    assert "phases[0].contacts[0].point" in str(info.value)
    bad = full_trick()
    bad.phases[1].knots = 0  # caught without the robot too
    with pytest.raises(TrickFileError, match=r"phases\[1\]\.knots"):
        save_trick(bad, path, check_robot=False)
    assert path.read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["t.trick.yaml"]  # no temp files left behind


def test_save_checks_the_robot_path_from_the_target_folder(tmp_path: Path):
    robots = tmp_path / "robots"
    robots.mkdir()
    (robots / "mine.yaml").write_bytes(bundled_robot_path("humanoid").read_bytes())
    trick = full_trick()
    trick.robot = "robots/mine.yaml"
    save_trick(trick, tmp_path / "ok.trick.yaml")  # resolves from tmp_path
    sub = tmp_path / "sub"
    sub.mkdir()
    with pytest.raises(TrickFileError, match="robot: robot file not found"):
        save_trick(trick, sub / "lost.trick.yaml")  # would not load back from sub/
    assert not (sub / "lost.trick.yaml").exists()


# ----------------------------------------------------------------------------- the robot field
def test_relative_robot_path_is_relative_to_the_trick_file(tmp_path: Path, monkeypatch, humanoid):
    (tmp_path / "robots").mkdir()
    (tmp_path / "tricks").mkdir()
    (tmp_path / "elsewhere" / "deeper").mkdir(parents=True)  # ../robots does not exist from here
    (tmp_path / "robots" / "mine.yaml").write_bytes(bundled_robot_path("humanoid").read_bytes())
    d = valid()
    d["robot"] = "../robots/mine.yaml"
    path = write(tmp_path / "tricks", d)
    monkeypatch.chdir(tmp_path / "elsewhere" / "deeper")
    trick, robot = load_trick(path)
    assert trick.robot == "../robots/mine.yaml" and robot == humanoid
    # trick_from_text resolves against base_dir (default: the current folder)
    assert trick_from_text(path.read_text(encoding="utf-8"), base_dir=tmp_path / "tricks")[1] == humanoid
    with pytest.raises(TrickFileError, match="robot file not found"):
        trick_from_text(path.read_text(encoding="utf-8"))


@pytest.mark.parametrize("ref, fragment", [
    ("humanoidd", "unknown robot 'humanoidd' (did you mean 'humanoid'?)"),
    ("nobody", "bundled robots: humanoid, quadruped"),
    ("robots/missing.yaml", "robot file not found: 'robots/missing.yaml'"),
    ("missing.yml", "robot file not found"),
])
def test_unknown_robot(tmp_path: Path, ref, fragment):
    d = valid()
    d["robot"] = ref
    problems = problems_of(d, tmp_path)
    assert [p.path for p in problems] == ["robot"]
    assert fragment in problems[0].message


def test_invalid_robot_file_is_reported_at_robot(tmp_path: Path):
    r = yaml.safe_load(bundled_robot_path("humanoid").read_text(encoding="utf-8"))
    r["links"][0]["mass"] = -1.0
    write(tmp_path, r, "broken_robot.yaml")
    d = valid()
    d["robot"] = "broken_robot.yaml"
    problems = problems_of(d, tmp_path)
    assert problems and all(p.path == "robot" for p in problems)
    assert "links[0].mass" in problems[0].message and "broken_robot.yaml" in problems[0].message


def test_resolve_robot_never_raises(tmp_path: Path):
    (tmp_path / "adir.yaml").mkdir()
    for ref in ["adir.yaml", "", None, 3, "a\nb", "../../../../nowhere/x.yaml"]:
        robot, problems = resolve_robot(ref, tmp_path)
        assert robot is None
        assert all(isinstance(p, Problem) for p in problems)
    assert resolve_robot("humanoid", tmp_path)[0].name == "tumbli"


# ----------------------------------------------------------------------------- one bad input each
def _set(*keys_and_value):
    *keys, value = keys_and_value

    def mutate(d):
        node = d
        for k in keys[:-1]:
            node = node[k]
        node[keys[-1]] = value
    return mutate


def _del(*keys):
    def mutate(d):
        node = d
        for k in keys[:-1]:
            node = node[k]
        del node[keys[-1]]
    return mutate


def _chain(*mutations):
    def mutate(d):
        for m in mutations:
            m(d)
    return mutate


def _hard(name, phase, time, pose):
    def mutate(d):
        kf = {"name": name, "time": time, "pose": pose, "hard": True}
        if phase is not None:
            kf["phase"] = phase
        d["keyframes"].append(kf)
    return mutate


# (id, mutation, the field path, fragments of the message)
BAD = [
    # schema: unknown keys (named in the message), missing/mistyped fields, format
    ("unknown-top-key", _set("phasess", []), "phasess", ["unknown field 'phasess'", "did you mean 'phases'"]),
    ("unknown-nested-key", _set("phases", 2, "contacts", 0, "pointt", "toe"), "phases[2].contacts[0].pointt",
     ["unknown field 'pointt'"]),
    ("unknown-cost", _set("costs", "efort", 1.0), "costs.efort", ["unknown field 'efort'", "'effort'"]),
    ("unknown-key-no-hint", _set("solver", {"zzz": 1}), "solver.zzz", ["unknown field 'zzz'", "max_iter"]),
    ("missing-phase-name", _del("phases", 2, "name"), "phases[2].name", ["required", "missing"]),
    ("missing-robot", _del("robot"), "robot", ["missing"]),
    ("missing-keyframe-pose", _del("keyframes", 0, "pose"), "keyframes[0].pose", ["missing"]),
    ("knots-type", _set("phases", 0, "knots", "many"), "phases[0].knots", ["an integer", "'many'"]),
    ("pose-value-type", _set("keyframes", 0, "pose", "knee", "bent"), "keyframes[0].pose.knee", ["a number"]),
    ("hard-type", _set("keyframes", 0, "hard", "yes please"), "keyframes[0].hard", ["true or false"]),
    ("wrong-format", _set("format", "kipup-robot/1"), "format", ["'kipup-trick/1'", "robot file"]),
    ("landing-x-length", _set("goals", "landing_x", [0.5]), "goals.landing_x", ["2 numbers"]),
    # names against the robot
    ("unknown-coordinate", _set("keyframes", 0, "pose", "kne", 1.0), "keyframes[0].pose.kne",
     ["unknown coordinate 'kne'", "did you mean 'knee'", "base_x, base_z, base_pitch, hip, knee, ankle"]),
    ("unknown-landing-coordinate", _set("landing_pose", "wrist", 0.1), "landing_pose.wrist",
     ["unknown coordinate 'wrist'", "shoulder, elbow"]),
    ("unknown-contact-point", _set("phases", 2, "contacts", 0, "point", "paw"), "phases[2].contacts[0].point",
     ["unknown point 'paw'", "toe, heel, knee, hip, hand, head"]),
    ("contact-without-friction", _set("phases", 2, "contacts", 0, "point", "head"), "phases[2].contacts[0].point",
     ["'head'", "no friction coefficient", "toe, heel, knee, hand"]),
    ("duplicate-contact", _set("phases", 0, "contacts", 1, "point", "toe"), "phases[0].contacts[1].point",
     ["'toe' is already a contact"]),
    ("unknown-reach-point", _set("goals", "reach", 0, "point", "nose"), "goals.reach[0].point",
     ["unknown point 'nose'"]),
    # names against the trick
    ("unknown-surface", _set("phases", 2, "contacts", 0, "surface", "roof"), "phases[2].contacts[0].surface",
     ["unknown surface 'roof'", "ground, step"]),
    ("unknown-keyframe-phase", _set("keyframes", 0, "phase", "jump"), "keyframes[0].phase",
     ["unknown phase 'jump'", "push, flight, land"]),
    ("unknown-reach-phase", _set("goals", "reach", 0, "phase", "flite"), "goals.reach[0].phase",
     ["unknown phase 'flite'", "did you mean 'flight'"]),
    ("unknown-reach-target", _set("goals", "reach", 0, "target", "spot"), "goals.reach[0].target",
     ["unknown target 'spot'", "mark"]),
    ("duplicate-phase", _set("phases", 2, "name", "push"), "phases[2].name", ["duplicate phase name 'push'"]),
    ("duplicate-keyframe", _set("keyframes", 1, "name", "crouch"), "keyframes[1].name", ["duplicate keyframe"]),
    ("duplicate-box", _set("terrain", "boxes", [{"name": "step", "x_min": 0.4, "x_max": 0.9, "height": 0.2},
                                                 {"name": "step", "x_min": 1.0, "x_max": 1.5, "height": 0.3}]),
     "terrain.boxes[1].name", ["duplicate box name 'step'"]),
    ("duplicate-target", _set("terrain", "targets", [{"name": "mark", "x": 0, "z": 1},
                                                     {"name": "mark", "x": 1, "z": 1}]),
     "terrain.targets[1].name", ["duplicate target"]),
    ("duplicate-bar", _set("terrain", "bars", [{"name": "rod", "x": 0, "z": 1}, {"name": "rod", "x": 1, "z": 1}]),
     "terrain.bars[1].name", ["duplicate bar"]),
    ("box-named-ground", _chain(_set("terrain", "boxes", 0, "name", "ground"),
                                _set("phases", 2, "contacts", 0, "surface", "ground")),
     "terrain.boxes[0].name", ["'ground'"]),
    # terrain geometry
    ("box-x-order", _set("terrain", "boxes", 0, "x_min", 0.9), "terrain.boxes[0].x_min",
     ["x_min (0.9 m) must be below x_max (0.9 m)"]),
    ("box-below-ground", _set("terrain", "boxes", 0, "height", -0.1), "terrain.boxes[0].height",
     ["above the ground (0 m)"]),
    ("box-at-ground", _set("terrain", "ground", 0.2), "terrain.boxes[0].height", ["above the ground (0.2 m)"]),
    ("bar-radius", _set("terrain", "bars", 0, "radius", 0.0), "terrain.bars[0].radius", ["positive"]),
    # times
    ("fraction-above-1", _set("keyframes", 0, "time", 1.5), "keyframes[0].time", ["[0, 1]", "1.5"]),
    ("fraction-below-0", _set("keyframes", 0, "time", -0.1), "keyframes[0].time", ["[0, 1]"]),
    ("absolute-after-horizon", _set("keyframes", 1, "time", 1.2), "keyframes[1].time",
     ["outside the horizon", "[0, 1.1] s"]),
    ("absolute-negative", _set("keyframes", 1, "time", -0.01), "keyframes[1].time", ["outside the horizon"]),
    ("reach-fraction", _set("goals", "reach", 0, "time", 1.01), "goals.reach[0].time", ["[0, 1]"]),
    # durations and knots
    ("zero-duration", _set("phases", 1, "duration", 0), "phases[1].duration", ["positive"]),
    ("negative-duration", _set("phases", 1, "duration", -0.3), "phases[1].duration", ["positive", "-0.3"]),
    ("negative-duration-min", _set("phases", 0, "duration_min", -0.1), "phases[0].duration_min", ["positive"]),
    ("min-above-max", _set("phases", 0, "duration_min", 0.7), "phases[0].duration_min",
     ["0.7 s", "above duration_max (0.6 s)"]),
    ("nominal-outside-bounds", _set("phases", 0, "duration", 0.65), "phases[0].duration",
     ["0.65 s", "outside", "[0.2, 0.6]"]),
    ("only-min", _set("phases", 1, "duration_min", 0.1), "phases[1].duration_min", ["without duration_max"]),
    ("only-max", _del("phases", 0, "duration_min"), "phases[0].duration_max", ["without duration_min"]),
    ("zero-knots", _set("phases", 0, "knots", 0), "phases[0].knots", ["at least 1"]),
    # the phase list
    ("no-phases", _chain(_set("phases", []), _set("keyframes", []), _set("goals", "reach", [])), "phases",
     ["empty"]),
    ("first-phase-flight", _set("phases", 0, "contacts", []), "phases[0].contacts",
     ["first phase ('push') has no contacts", "starts on the ground"]),
    ("last-phase-flight", _del("phases", 2, "contacts"), "phases[2].contacts",
     ["last phase ('land') has no contacts", "landing stance"]),
    # NaN and infinity, negative weights
    ("nan-pose", _set("keyframes", 0, "pose", "knee", float("nan")), "keyframes[0].pose.knee", ["NaN"]),
    ("inf-ground", _set("terrain", "ground", float("inf")), "terrain.ground", ["finite", "infinity"]),
    ("nan-duration", _set("phases", 1, "duration", float("nan")), "phases[1].duration", ["NaN"]),
    ("negative-cost", _set("costs", "effort", -1.0), "costs.effort", ["negative"]),
    ("negative-keyframe-weight", _set("keyframes", 0, "weight", -0.5), "keyframes[0].weight", ["negative"]),
    ("landing-x-order", _set("goals", "landing_x", [0.8, 0.5]), "goals.landing_x", ["min above max"]),
    ("solver-max-iter", _set("solver", {"max_iter": 0}), "solver.max_iter", ["at least 1"]),
    # contradictory hard constraints
    ("hard-conflict-same-fraction", _chain(_hard("a", "flight", 0.5, {"knee": 1.0}),
                                           _hard("b", "flight", 0.5, {"knee": 1.1, "hip": 0.0})),
     "keyframes[3].pose.knee", ["contradicts hard keyframe 'a' (keyframes[2])", "knee = 1.1 here but 1 there"]),
    ("hard-conflict-phase-boundary", _chain(_hard("a", "push", 1.0, {"ankle": 0.1}),
                                            _hard("b", "flight", 0.0, {"ankle": 0.2})),
     "keyframes[3].pose.ankle", ["contradicts hard keyframe 'a'"]),
    ("hard-conflict-absolute-vs-fraction", _chain(_hard("a", None, 0.55, {"hip": -0.5}),
                                                  _hard("b", "flight", 0.5, {"hip": -0.6})),
     "keyframes[3].pose.hip", ["contradicts hard keyframe 'a'", "t = 0.55 s"]),
    ("hard-conflict-absolute", _hard("b", None, 0.55, {"base_pitch": 0.3}), "keyframes[2].pose.base_pitch",
     ["contradicts hard keyframe 'tuck' (keyframes[1])"]),
    ("hard-above-joint-limit", _hard("bend", "land", 0.5, {"knee": 3.0}), "keyframes[2].pose.knee",
     ["joint 'knee'", "3 rad", "[0, 2.6] rad"]),
    ("hard-below-joint-limit", _hard("reach_up", "flight", 0.2, {"shoulder": -3.2}), "keyframes[2].pose.shoulder",
     ["joint 'shoulder'", "[-3.1, 1] rad"]),
    ("hard-pitch-vs-rotation", _chain(_set("goals", "rotation", -2 * math.pi),
                                      _hard("start", "push", 0.0, {"base_pitch": 0.0}),
                                      _hard("end", None, HORIZON, {"base_pitch": 0.0})),
     "goals.rotation", ["'start' (keyframes[2])", "'end' (keyframes[3])", "-6.28319 rad"]),
]


@pytest.mark.parametrize("mutate, path, fragments", [b[1:] for b in BAD], ids=[b[0] for b in BAD])
def test_bad_input_is_reported_at_its_field(tmp_path: Path, humanoid, mutate, path, fragments):
    d = valid()
    mutate(d)
    problems = problems_of(d, tmp_path)
    at = [p for p in problems if p.path == path]
    assert at, f"no problem at {path}; got:\n" + "\n".join(map(str, problems))
    assert [p.path for p in problems] == [path], "expected exactly one problem:\n" + "\n".join(map(str, problems))
    for fragment in fragments:
        assert fragment in at[0].message
    # the same from the dict, and the path is in the exception text
    assert validate_trick_dict(d, humanoid) == problems
    with pytest.raises(TrickFileError) as info:
        load_trick(write(tmp_path, d))
    assert f"{path}: " in str(info.value)


@pytest.mark.parametrize("mutate", [
    _chain(_hard("a", "flight", 0.5, {"knee": 1.0}), _hard("b", "flight", 0.5, {"knee": 1.0, "hip": 0.1})),
    _chain(_hard("a", "flight", 0.5, {"knee": 1.0}), _hard("b", "flight", 0.6, {"knee": 1.1})),
    _chain(_set("keyframes", 1, "hard", False), _set("keyframes", 0, "pose", "base_pitch", 0.3),
           _set("keyframes", 0, "phase", "flight"), _set("keyframes", 0, "time", 0.5)),  # soft: no conflict
    _set("keyframes", 0, "pose", "knee", 3.0),  # soft keyframe outside the limits: only a cost
    _hard("edge", "land", 1.0, {"knee": 2.6, "elbow": -2.5}),  # exactly at the limits
    _chain(_set("goals", "rotation", -2 * math.pi), _hard("start", "push", 0.0, {"base_pitch": 0.0}),
           _hard("end", "land", 1.0, {"base_pitch": -2 * math.pi})),
    _chain(_set("goals", "rotation", -2 * math.pi), _hard("start", "push", 0.0, {"base_pitch": 0.0})),
    _set("keyframes", 1, "time", HORIZON),  # the horizon's end is inside
], ids=["same-values", "different-times", "soft", "soft-outside-limits", "at-limits", "rotation-ok",
        "rotation-one-end", "time-at-end"])
def test_consistent_constraints_are_accepted(tmp_path: Path, mutate):
    d = valid()
    mutate(d)
    load_trick(write(tmp_path, d))


def test_coordinate_names_must_be_strings(tmp_path: Path):
    d = valid()
    d["landing_pose"] = {1: 0.2, "knee": 0.3}
    problems = problems_of(d, tmp_path)
    assert [p.path for p in problems] == ["landing_pose"]
    assert "coordinate names must be non-empty strings (got 1)" in problems[0].message


def test_every_problem_is_reported_at_once(tmp_path: Path):
    d = valid()
    d["phases"][0]["contacts"] = []                   # first phase in flight
    d["phases"][2]["contacts"][0]["point"] = "paw"    # unknown point
    d["phases"][1]["knots"] = 0                       # knots < 1
    d["keyframes"][0]["pose"]["kne"] = 1.0            # unknown coordinate
    d["keyframes"][1]["time"] = 9.0                   # outside the horizon
    d["costs"]["effort"] = -2.0                       # negative weight
    d["terrain"]["colour"] = "grey"                   # unknown key
    d["robot_x"] = 1                                  # unknown key
    problems = problems_of(d, tmp_path)
    paths = [p.path for p in problems]
    # in the order of a saved file; unknown top-level keys last
    assert paths == ["terrain.colour", "phases[0].contacts", "phases[1].knots", "phases[2].contacts[0].point",
                     "keyframes[0].pose.kne", "keyframes[1].time", "costs.effort", "robot_x"]
    with pytest.raises(TrickFileError) as info:
        load_trick(write(tmp_path, d))
    assert str(info.value).splitlines() == [f"{p.path}: {p.message}" for p in problems]


def test_error_type():
    err = TrickFileError([Problem("phases[0].knots", "must be at least 1 (got 0)"), Problem("robot", "x")])
    assert isinstance(err, ValueError)
    assert str(err) == "phases[0].knots: must be at least 1 (got 0)\nrobot: x"
    assert err.problems[1] == Problem("robot", "x")


# ----------------------------------------------------------------------------- never a traceback
def test_malformed_yaml_is_one_problem_with_line_and_column(tmp_path: Path):
    path = write(tmp_path, "format: kipup-trick/1\nname: hop\nphases: [\n  {name: a,\n")
    with pytest.raises(TrickFileError) as info:
        load_trick(path)
    (problem,) = info.value.problems
    assert problem.path == "document" and "invalid YAML at line" in problem.message and "column" in problem.message


def test_duplicate_keys_are_a_yaml_problem(tmp_path: Path):
    with pytest.raises(TrickFileError, match="duplicate key 'name'"):
        load_trick(write(tmp_path, VALID_YAML + "name: again\n"))


def test_nan_written_in_yaml(tmp_path: Path):
    text = VALID_YAML.replace("pose: {knee: 1.2, hip: -0.8}", "pose: {knee: .nan, hip: -.inf}")
    with pytest.raises(TrickFileError) as info:
        load_trick(write(tmp_path, text))
    assert [p.path for p in info.value.problems] == ["keyframes[0].pose.hip", "keyframes[0].pose.knee"]


@pytest.mark.parametrize("text", [
    "", "42\n", "- a\n- b\n", "format: kipup-trick/1\n", "format: kipup-trick/1\nphases: {a: 1}\n",
    "format: kipup-trick/1\nname: x\nrobot: humanoid\nphases: [1, null, [2]]\nkeyframes: [3]\n",
    "format: kipup-trick/1\nname: x\nrobot: humanoid\nphases: [{name: a, contacts: [toe]}]\n",
    "format: kipup-trick/1\nname: x\nrobot: [humanoid]\nphases: []\nlanding_pose: {1: 2, null: 3}\n",
    "format: kipup-trick/1\nname: x\nrobot: humanoid\nphases: [{name: a, contacts: [{point: toe}]}]\n"
    "keyframes: [{name: k, time: 0.1, pose: [knee]}]\ngoals: {reach: [{}], landing_x: [a, b]}\nterrain: 3\n",
    "a: &x [*x]\n",  # an alias cycle
    "format: kipup-trick/1\nname: x\nrobot: humanoid\nknots: 1e999\nphases: [{name: a, knots: 1e400}]\n",
    "\x00",
], ids=lambda t: repr(t[:30]))
def test_odd_documents_give_problems_not_tracebacks(tmp_path: Path, text):
    path = write(tmp_path, text)
    with pytest.raises(TrickFileError) as info:
        load_trick(path)
    assert info.value.problems and all(isinstance(p, Problem) and p.message for p in info.value.problems)
    assert "Traceback" not in str(info.value)


def test_unreadable_files(tmp_path: Path):
    with pytest.raises(TrickFileError, match="file: no such file"):
        load_trick(tmp_path / "nope.trick.yaml")
    with pytest.raises(TrickFileError, match="file: is a directory"):
        load_trick(tmp_path)


@pytest.mark.parametrize("bad", [False, True])
def test_loading_never_modifies_the_file(tmp_path: Path, bad):
    d = valid()
    if bad:
        d["phases"][0]["knots"] = 0
    path = write(tmp_path, d)
    os.utime(path, ns=(1_000_000_000, 1_000_000_000))
    before, stat = path.read_bytes(), path.stat()
    if bad:
        with pytest.raises(TrickFileError):
            load_trick(path)
    else:
        load_trick(path)
    after = path.stat()
    assert path.read_bytes() == before and after.st_mtime_ns == stat.st_mtime_ns and after.st_mode == stat.st_mode
    assert sorted(p.name for p in tmp_path.iterdir()) == [path.name]


# ----------------------------------------------------------------------------- the schema
def test_schema_is_valid_draft_2020_12_and_closed():
    schema = trick_schema()
    assert schema["$schema"] == "https://json-schema.org/draft/2020-12/schema"
    jsonschema.Draft202012Validator.check_schema(schema)

    def objects(node):
        if isinstance(node, dict):
            if node.get("type") == "object" and "properties" in node:
                yield node
            for v in node.values():
                yield from objects(v)
        elif isinstance(node, list):
            for v in node:
                yield from objects(v)
    closed = list(objects(schema))
    assert len(closed) >= 12 and all(o.get("additionalProperties") is False for o in closed)
    path = Path(__file__).parents[1] / "core" / "schema" / "trick.schema.json"
    assert json.loads(path.read_text(encoding="utf-8")) == schema


def test_schema_fields_match_the_dataclasses():
    """The schema must follow kipup.core.trick: same fields, required exactly where there is no default."""
    s = trick_schema()
    defs = s["$defs"]
    pairs = [(s, Trick), (defs["phase"], Phase), (defs["contact"], Contact), (defs["keyframe"], Keyframe),
             (defs["reach"], Reach), (defs["goals"], Goals), (defs["costs"], Costs), (defs["solver"], SolverSettings),
             (defs["terrain"], Terrain), (defs["box"], Box), (defs["target"], Target), (defs["bar"], Bar)]
    from dataclasses import MISSING
    for schema, cls in pairs:
        names = {f.name for f in fields(cls)}
        required = {f.name for f in fields(cls) if f.default is MISSING and f.default_factory is MISSING}
        extra = {"format"} if cls is Trick else set()
        assert set(schema["properties"]) == names | extra, cls.__name__
        assert set(schema.get("required", [])) == required | extra, cls.__name__


def test_a_written_dict_validates_against_the_schema_alone():
    data = full_trick().to_dict()
    jsonschema.Draft202012Validator(trick_schema()).validate(data)
    assert validate_trick_dict(data, load_bundled("humanoid")) == []


# ----------------------------------------------------------------------------- kipup check
def test_check_ok(tmp_path: Path, capsys):
    path = write(tmp_path, VALID_YAML)
    assert cli.main(["check", str(path)]) == 0
    assert capsys.readouterr().out == f"{path}: ok (trick box_hop, robot tumbli, 3 phases, 30 knots total)\n"


def test_check_lists_problems_and_exits_2(tmp_path: Path, capsys):
    d = valid()
    d["phases"][2]["contacts"][0]["point"] = "paw"
    d["keyframes"][0]["pose"]["kne"] = 1.0
    bad = write(tmp_path, d, "bad.trick.yaml")
    good = write(tmp_path, VALID_YAML, "good.trick.yaml")
    assert cli.main(["check", str(good), str(bad)]) == 2
    out = capsys.readouterr().out.splitlines()
    assert out[0] == f"{good}: ok (trick box_hop, robot tumbli, 3 phases, 30 knots total)"
    assert out[1].startswith(f"{bad}: phases[2].contacts[0].point: unknown point 'paw'")
    assert out[2].startswith(f"{bad}: keyframes[0].pose.kne: unknown coordinate 'kne'")
    assert len(out) == 3


def test_check_malformed_trick_yaml(tmp_path: Path, capsys):
    path = write(tmp_path, "format: kipup-trick/1\nphases: [\n")
    assert cli.main(["check", str(path)]) == 2
    (line,) = capsys.readouterr().out.splitlines()
    assert line.startswith(f"{path}: document: invalid YAML at line")


def test_check_dispatch_knows_tricks():
    assert cli.FORMATS[TRICK_FORMAT] is check_trick
    problems, summary = check_trick(valid())
    assert problems == [] and summary == "trick box_hop, robot tumbli, 3 phases, 30 knots total"
    d = valid()
    d["phases"] = d["phases"][:1]
    d["keyframes"], d["goals"]["reach"] = [], []
    assert check_trick(d) == ([], "trick box_hop, robot tumbli, 1 phase, 12 knots total")


def test_a_huge_integer_is_a_problem_not_a_traceback():
    from kipup.core.trick_file import validate_trick_dict

    data = {"format": "kipup-trick/1", "name": "x", "robot": "humanoid",
            "phases": [{"name": "p", "contacts": [{"point": "toe"}], "duration": 10 ** 400}]}
    problems = validate_trick_dict(data, None)
    assert any(p.path == "phases[0].duration" and "too large" in p.message for p in problems)
