"""Checks of optimized motions shared by several test files (not a test file itself)."""
from __future__ import annotations

import numpy as np


def assert_smooth_start(robot, motion) -> None:
    """The push starts from the standing torques: the first knot-to-knot torque step is under a
    tenth of each joint's peak torque. Measured with the knees bent at the start: at most 0.04
    (backflip) and 0.015 (broad and reach jumps). From straight knees, the leg's singular pose,
    the optimizer dropped the body with a one-knot pulse instead: 0.78 of the backflip hip's peak
    torque (its knee from rest to 9 rad/s within one knot), 0.16 on the box jump."""
    step = np.abs(motion.tau[1] - motion.tau[0]) / np.asarray(robot.peak_torque)
    assert step.max() < 0.1, dict(zip(robot.joint_names, step.round(3)))
