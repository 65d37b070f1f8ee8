"""Terrain height as a smooth function of x, for keeping free points above ground and boxes.

The exact terrain is the ground plus flat-topped boxes. The optimizer needs a smooth
height, so each box's sides are blended with logistic steps of width ``edge`` (m): the
smooth height is within 1e-4 of the exact one farther than ``9 * edge`` from a box side.
Works on floats and CasADi symbols.
"""
from __future__ import annotations

import math
from typing import Any

from .spatial import is_symbolic
from .trick import Terrain

EDGE = 0.004


def _logistic(u: Any) -> Any:
    if is_symbolic(u):
        import casadi as ca

        return 0.5 * (1.0 + ca.tanh(0.5 * u))
    return 0.5 * (1.0 + math.tanh(0.5 * u))


def smooth_height(terrain: Terrain, x: Any, edge: float = EDGE) -> Any:
    """Smoothed terrain height (m) at horizontal position x (m)."""
    h = terrain.ground
    for box in terrain.boxes:
        rise = box.height - terrain.ground
        h = h + rise * _logistic((x - box.x_min) / edge) * _logistic((box.x_max - x) / edge)
    return h


def exact_height(terrain: Terrain, x: float) -> float:
    """Exact terrain height (m) at x: the highest box top over x, or the ground."""
    h = terrain.ground
    for box in terrain.boxes:
        if box.x_min <= x <= box.x_max:
            h = max(h, box.height)
    return h
