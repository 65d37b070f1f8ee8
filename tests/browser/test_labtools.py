"""The pixel judge of the browser tests fails on blank and flat canvases (no browser needed)."""
from __future__ import annotations

import io

import numpy as np
from PIL import Image

from labtools import image_stats, looks_drawn


def _png(rgb: np.ndarray) -> bytes:
    buf = io.BytesIO()
    Image.fromarray(rgb.astype(np.uint8)).save(buf, format="PNG")
    return buf.getvalue()


def test_blank_and_grey_canvases_are_not_drawn():
    blank = np.full((100, 160, 3), 245, dtype=np.uint8)
    assert not looks_drawn(image_stats(_png(blank)))
    grey_scene = blank.copy()
    grey_scene[60:, :] = 200  # a ground plane but no robot
    grey_scene[::10, :] = 120  # grid lines
    assert not looks_drawn(image_stats(_png(grey_scene)))


def test_a_coloured_robot_on_grey_is_drawn():
    img = np.full((100, 160, 3), 245, dtype=np.uint8)
    img[60:, :] = 200
    img[20:70, 70:80] = (217, 132, 59)  # an orange capsule
    assert looks_drawn(image_stats(_png(img)))
