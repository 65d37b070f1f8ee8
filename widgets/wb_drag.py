"""Dragging the ghost's handles: the pickers' callbacks, joint / base / point (IK) drags.

A mixin of :class:`kipup.widgets.workbench.Workbench`; it works on the workbench's attributes.
"""
from __future__ import annotations

import math
import statistics
import time
from typing import Sequence

import numpy as np
import pythreejs as three

from kipup.core.ik import point_positions, solve_ik
from kipup.core.trick import Keyframe
from .robot_view import planar_link_poses, rot, to_three
from .wb_common import _wrap, _chain_coords, _link_direction


class DragMixin:
    """Dragging the ghost's handles."""

    # ----- dragging --------------------------------------------------------------------------
    def _picked_down(self, change: dict) -> None:
        if self._programmatic:
            return
        obj = change["new"]
        if obj is None:
            if self._drag is not None:  # a click that missed every handle ends a dangling drag
                self._on_handle_up()
            return
        name = self._handle_by_model.get(getattr(obj, "model_id", None))
        self._programmatic += 1
        try:
            self._pick_down.object = None  # so the same handle picked again is a change again
        finally:
            self._programmatic -= 1
        if name is not None:
            self._on_handle_down(name)

    def _picked_move(self, change: dict) -> None:
        if self._drag is None or self._pick_move.object is None:
            return  # a move that missed the plane (it is pickable only while a handle is held)
        self._drag_throttle(self._on_drag, list(change["new"]))

    def _picked_up(self, change: dict) -> None:
        if self._programmatic or self._drag is None:
            return
        self._drag_throttle(self._on_drag, list(change["new"]))
        self._on_handle_up()
        self._programmatic += 1
        try:
            self._pick_up.point = [0.0, 0.0, -1e6]  # so the next release at the same spot is a change
        finally:
            self._programmatic -= 1

    def _stance_contacts(self, kf: Keyframe) -> list[str]:
        """Points in contact at the keyframe's phase (the phase holding it for an absolute time)."""
        if kf.phase is not None:
            return [c.point for c in self.trick.phase(kf.phase).contacts]
        starts = self._nominal_starts()
        for i, ph in enumerate(self.trick.phases):
            if starts[i] <= kf.time <= starts[i + 1]:
                return [c.point for c in ph.contacts]
        return []

    def _on_handle_down(self, name: str) -> None:
        """A handle was grabbed (the mousedown Picker's object): remember it, hold the camera still."""
        if self.selected is None or name not in self.handles:
            return
        with self._drag_lock:
            kf = self.trick.keyframes[self.selected]
            q = self._ghost_q.copy() if self._ghost_q is not None else self.keyframe_q()
            stance = self._stance_contacts(kf)
            h = self.handles[name]
            held_names = [p for p in stance if not (h.kind == "point" and p == h.target)]
            held = point_positions(self.robot, q, held_names) if held_names else {}
            self._drag = {"handle": h, "q": q, "q_start": q.copy(), "held": held, "stance": bool(stance),
                          "moves": 0}
        self.orbit.enabled = False
        self.drag_plane.visible = True
        self._publish_state()

    def _on_drag(self, point: Sequence[float]) -> None:
        """The drag point moved (three.js coordinates from the mousemove Picker on the sagittal plane):
        update the ghost. Joint handle: turn the joint so its child points at the drag point; base
        handle: move (or pitch) the base; point handle: IK, holding stance feet."""
        t0 = time.perf_counter()
        with self._drag_lock:
            d = self._drag
            if d is None:
                return
            x, z = float(point[0]), float(point[1])
            if not (math.isfinite(x) and math.isfinite(z)):
                return
            q = self._drag_pose(d, np.array([x, z]))
            d["q"] = q
            d["moves"] += 1
            self._ghost_q = q
            with self._lock:
                self._draw_ghost(q)
        ms = (time.perf_counter() - t0) * 1e3
        self._drag_samples.append(ms)
        self.timings["drag_ms"] = ms
        self.timings["drag_count"] = self.timings.get("drag_count", 0) + 1
        self.timings["drag_ms_median"] = statistics.median(self._drag_samples)
        self.timings["drag_ms_max"] = max(self._drag_samples)

    def _drag_pose(self, d: dict, target: np.ndarray) -> np.ndarray:
        robot, h, q = self.robot, d["handle"], d["q"].copy()
        held = d["held"]
        weights = {k: 10.0 for k in held}
        if h.kind == "joint":
            k = robot.joint_names.index(h.target)
            joint = robot.joints[k]
            poses = planar_link_poses(robot, q)
            p, th = poses[k + 1]
            direction = rot(th) @ _link_direction(robot, joint.child)
            want = target - p
            if float(np.hypot(*want)) < 0.01:
                return q
            # a kipup angle turns clockwise on screen: the joint changes by minus the screen angle
            delta = -_wrap(math.atan2(want[1], want[0]) - math.atan2(direction[1], direction[0]))
            q[3 + k] = float(np.clip(q[3 + k] + delta, joint.lower, joint.upper))
            return q
        if h.kind == "base":
            base = robot.links[0].name
            if self.base_mode.value == "pitch":
                p0 = q[:2]
                up = rot(q[2]) @ np.asarray(h.local, dtype=float)
                want = target - p0
                if float(np.hypot(*want)) < 0.01 or float(np.hypot(*up)) < 1e-9:
                    return q
                q[2] = q[2] - _wrap(math.atan2(want[1], want[0]) - math.atan2(up[1], up[0]))
                if held:
                    origin = {(base, (0.0, 0.0)): tuple(d["q"][:2])}
                    q = solve_ik(robot, q, {**origin, **held}, fixed=("base_pitch",),
                                 weights={**weights, **{k: 1.0 for k in origin}})
                return q
            offset = rot(q[2]) @ np.asarray(h.local, dtype=float)
            if not held:
                q[0], q[1] = target - offset
                return q
            return solve_ik(robot, q, {(base, tuple(h.local)): tuple(target), **held}, weights=weights)
        # a point handle: first only the joints between the point and the base (the arm for a hand),
        # then, if the point cannot get there so, the whole body (stance: feet held) or, in flight,
        # the base pitch when the point sits on the base itself
        targets = {h.target: tuple(target), **held}
        chain = _chain_coords(robot, h.link)
        q1 = q
        if chain:
            q1 = solve_ik(robot, q, targets, fixed=[c for c in robot.coord_names if c not in chain],
                          weights=weights)
            if float(np.hypot(*(point_positions(robot, q1, [h.target])[h.target] - target))) < 0.005:
                return q1
        if d["stance"]:
            return solve_ik(robot, q1, targets, weights=weights)
        if not chain:
            return solve_ik(robot, q1, targets, fixed=("base_x", "base_z"), weights=weights)
        return q1

    def _on_handle_up(self) -> None:
        """The handle was released: write the ghost's pose into the keyframe (an edit)."""
        self._drag_throttle.flush()
        with self._drag_lock:
            d, self._drag = self._drag, None
        self.orbit.enabled = True
        self.drag_plane.visible = False
        if d is None or self.selected is None:
            self._publish_state()
            return
        q, q0 = d["q"], d["q_start"]
        if d["moves"] == 0 or np.allclose(q, q0, atol=1e-9):
            self._publish_state()
            return
        with self._lock:
            kf = self.trick.keyframes[self.selected]
            stance = d["stance"]
            for i, name in enumerate(self.robot.coord_names):
                changed = abs(q[i] - q0[i]) > 1e-6
                if name in kf.pose:
                    kf.pose[name] = float(q[i])
                elif changed and not (stance and name in ("base_x", "base_z")):
                    kf.pose[name] = float(q[i])  # a new coordinate: a structure edit (rebuild)
            self._ghost_q = q.copy()
        self._show_keyframe_fields()
        self._publish_handles()
        self._edited(f"keyframe {kf.name!r} posed")

    def drag(self, handle: str, to: Sequence[float], steps: int = 5) -> None:
        """Drag a handle of the selected keyframe's ghost to world ``to = (x, z)`` (m) through the same
        methods the browser's pickers call: down, ``steps`` moves, up."""
        start = self.handle_position(handle)
        self._on_handle_down(handle)
        for s in range(1, steps + 1):
            p = start + (np.asarray(to, dtype=float) - start) * s / steps
            self._on_drag(to_three(p))
        self._on_handle_up()
