"""The bundled trick templates: each one is a valid trick file, the ``kipup templates`` command
lists and writes them, and each one solves from its default guess to a motion that does what
its description says.

The templates are invented demo tricks (core/data/tricks/*.yaml). The physical checks use the
robots' bundled geometry and plain kinematics; the solve test runs one IPOPT solve per template
(a few seconds each), so keep it to one solve per template.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from kipup.core import dynamics as dyn
from kipup.core.cli import main
from kipup.core.optimize import optimize
from kipup.core.robot_file import read_yaml_file
from kipup.core.templates import load_template, template_names, template_path
from kipup.core.trick_file import load_trick, validate_trick_dict
from motion_checks import assert_smooth_start

NAMES = template_names()
# Templates whose solve is tested elsewhere (one solve per template in the whole suite).
SOLVED_ELSEWHERE = {"backflip": "tests/test_optimizer.py::test_backflip_solves_without_violations"}


# ----- files -----------------------------------------------------------------------------------
def test_the_expected_templates_are_bundled():
    assert {"backflip", "box_jump", "reach_jump", "broad_jump", "quadruped_jump"} <= set(NAMES)
    assert NAMES == sorted(NAMES)


@pytest.mark.parametrize("name", NAMES)
def test_template_is_a_valid_trick_file(name):
    data, problems = read_yaml_file(template_path(name))
    assert problems == []
    trick, robot = load_template(name)
    assert validate_trick_dict(data, robot) == []
    assert trick.name == name
    assert trick.description, "every template says in one sentence what the motion is"
    assert trick.start_at_rest and trick.end_at_rest
    assert trick.landing_pose, "every template ends in a landing pose"
    assert trick.phases[0].contacts and trick.phases[-1].contacts
    assert any(not p.contacts for p in trick.phases), "every template has a flight phase"
    # no full-pose hard keyframes: they make the foot contacts linearly dependent in stance
    assert not any(k.hard for k in trick.keyframes)


def test_unknown_template_is_a_key_error():
    with pytest.raises(KeyError, match="no template named 'nope'"):
        template_path("nope")


# ----- kipup templates ---------------------------------------------------------------------------
def test_cli_lists_every_template(capsys):
    assert main(["templates"]) == 0
    lines = capsys.readouterr().out.splitlines()
    assert [line.split()[0] for line in lines] == NAMES
    for name, line in zip(NAMES, lines):
        _, robot = load_template(name)
        assert line.split()[1] == robot.name


@pytest.mark.parametrize("name", NAMES)
def test_cli_writes_a_template_that_loads_back_equal(name, tmp_path: Path, capsys):
    out = tmp_path / f"my_{name}.yaml"
    assert main(["templates", name, "-o", str(out)]) == 0
    assert capsys.readouterr().out.strip() == f"wrote {out}"
    written, robot = load_trick(out)
    original, robot0 = load_template(name)
    assert written == original
    assert robot.name == robot0.name
    assert main(["check", str(out)]) == 0


def test_cli_template_without_output_or_unknown_name(tmp_path: Path, capsys):
    assert main(["templates", "box_jump"]) == 2
    assert "give -o FILE" in capsys.readouterr().out
    assert main(["templates", "nope", "-o", str(tmp_path / "x.yaml")]) == 2
    assert "no template named 'nope'" in capsys.readouterr().out
    assert not (tmp_path / "x.yaml").exists()


# ----- solving -----------------------------------------------------------------------------------
def _phase_time(motion, trick, phase: str, fraction: float) -> float:
    span = motion.phases[trick.phase_index(phase)]
    return span.start + fraction * (span.end - span.start)


def check_box_jump(trick, robot, motion):
    """Both feet end on the box top, over the box, and the base is in the landing range."""
    box = trick.terrain.boxes[0]
    for point in ("toe", "heel"):
        x, z = np.asarray(dyn.point_position(robot, motion.q[-1], point), float).ravel()
        assert z == pytest.approx(box.height, abs=1e-4), point
        assert box.x_min < x < box.x_max, point
    lo, hi = trick.goals.landing_x
    assert lo - 1e-6 <= motion.q[-1, 0] <= hi + 1e-6


def check_reach_jump(trick, robot, motion):
    """The hand is within 1 cm of the target at the reach time (on the motion's own cubic)."""
    reach = trick.goals.reach[0]
    target = {t.name: t for t in trick.terrain.targets}[reach.target]
    t = _phase_time(motion, trick, reach.phase, reach.time)
    q = motion.sample(t)["q"]
    hand = np.asarray(dyn.point_position(robot, q, reach.point), float).ravel()
    assert np.hypot(hand[0] - target.x, hand[1] - target.z) < 0.01
    # and it is a jump: the reach happens in the air
    assert motion.metrics(robot).flight_time > 0.2
    assert_smooth_start(robot, motion)


def check_broad_jump(trick, robot, motion):
    """The base ends inside the landing range, ahead of where it started."""
    lo, hi = trick.goals.landing_x
    assert lo - 1e-6 <= motion.q[-1, 0] <= hi + 1e-6
    assert motion.q[-1, 0] - motion.q[0, 0] > 0.5
    assert_smooth_start(robot, motion)


def check_quadruped_jump(trick, robot, motion):
    """A real leap: more than 0.1 s in the air, all feet back on the ground at the end."""
    assert motion.metrics(robot).flight_time > 0.1
    for point in ("front_foot", "rear_foot"):
        z = np.asarray(dyn.point_position(robot, motion.q[-1], point), float).ravel()[1]
        assert z == pytest.approx(trick.terrain.ground, abs=1e-4), point


CHECKS = {
    "box_jump": check_box_jump,
    "reach_jump": check_reach_jump,
    "broad_jump": check_broad_jump,
    "quadruped_jump": check_quadruped_jump,
}


def test_every_template_has_a_solve_test():
    assert set(NAMES) == set(CHECKS) | set(SOLVED_ELSEWHERE)
    assert not set(CHECKS) & set(SOLVED_ELSEWHERE)


@pytest.mark.parametrize("name", sorted(CHECKS))
def test_template_solves_from_its_default_guess(name):
    trick, robot = load_template(name)
    motion, _ = optimize(trick, robot)
    assert motion.status in ("solved", "acceptable"), motion.status
    assert motion.report == [], motion.report_text()
    CHECKS[name](trick, robot, motion)
