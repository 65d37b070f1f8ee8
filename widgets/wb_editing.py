"""Editing the trick from the workbench: keyframe selection and ghost, the timeline and control
edits, goals, weights and phases.

A mixin of :class:`kipup.widgets.workbench.Workbench`; it works on the workbench's attributes.
"""
from __future__ import annotations

import json
import math
import time
from typing import Any, Sequence

import numpy as np

from kipup.core.trick import Contact, Keyframe
from .robot_view import pitch_quaternion, planar_link_poses, rot, to_three
from .wb_common import MIN_PHASE_DURATION


class EditingMixin:
    """Keyframes, goals, weights and phases edited from the workbench."""

    # ----- keyframes: selection and the ghost ------------------------------------------------
    def _keyframe_options(self) -> list[tuple[str, int]]:
        return [(f"{k.name} ({k.phase or 'abs'} @ {k.time:g})", i) for i, k in enumerate(self.trick.keyframes)]

    def select_keyframe(self, which: int | str | None) -> None:
        """Edit keyframe ``which`` (index or name; None: none): show its ghost and handles."""
        if isinstance(which, str):
            which = [k.name for k in self.trick.keyframes].index(which)
        if which is not None and not 0 <= which < len(self.trick.keyframes):
            raise IndexError(f"no keyframe {which}")
        self.selected = which
        self._ghost_q = None
        self._programmatic += 1
        try:
            self.keyframe_pick.value = which
            self._tl_keys.selected = None if which is None else [which]
        finally:
            self._programmatic -= 1
        self._show_keyframe_fields()
        with self._lock:
            self._refresh_ghost()
        self._publish_state()

    def _keyframe_picked(self, change: dict) -> None:
        if not self._programmatic and change["new"] != self.selected:
            self.select_keyframe(change["new"])

    def _show_keyframe_fields(self) -> None:
        self._programmatic += 1
        try:
            if self.selected is None:
                self.kf_info.value = "no keyframe selected"
                return
            kf = self.trick.keyframes[self.selected]
            self.kf_weight.value = float(kf.weight)
            self.kf_time.max = 1.0 if kf.phase is not None else max(self.trick.nominal_duration, 1e-3)
            self.kf_time.value = float(kf.time)
            self.kf_time.description = "time (0-1)" if kf.phase else "time (s)"
            pose = ", ".join(f"{k} {v:.3f}" for k, v in kf.pose.items())
            self.kf_info.value = (f"phase <b>{kf.phase or '(absolute time)'}</b>, {'hard' if kf.hard else 'soft'}"
                                  f"<br><small>{pose} (m, rad)</small>")
        finally:
            self._programmatic -= 1

    def keyframe_time(self, kf: Keyframe | int) -> float:
        """The motion time (s) of a keyframe (the motion's phase spans; nominal before a motion exists)."""
        kf = self.trick.keyframes[kf] if isinstance(kf, int) else kf
        m = self.motion
        if m is not None and kf.phase is not None:
            try:
                span = m.phase(kf.phase)
                return span.start + float(kf.time) * span.duration
            except KeyError:
                pass
        if m is not None and kf.phase is None:
            return float(np.clip(kf.time, m.t0, m.tend))
        return self._keyframe_nominal_time(kf)

    def keyframe_q(self, index: int | None = None) -> np.ndarray:
        """Full coordinates of a keyframe's ghost: the motion at its time, overridden by its pose."""
        index = self.selected if index is None else index
        kf = self.trick.keyframes[index]
        m = self.motion
        if m is not None:
            q = m.sample(float(np.clip(self.keyframe_time(kf), m.t0, m.tend)))["q"].copy()
        else:
            q = self._rest_q.copy()
        for name, value in kf.pose.items():
            q[self.robot.coord_index(name)] = float(value)
        lo = np.asarray(self.robot.joint_lower)
        hi = np.asarray(self.robot.joint_upper)
        q[3:] = np.clip(q[3:], lo, hi)
        return q

    def _refresh_ghost(self) -> None:
        if self.selected is None or self.selected >= len(self.trick.keyframes):
            self.selected = None
            self.ghost_root.visible = False
            self.handles_root.visible = False
            self._publish_handles()
            return
        if self._ghost_q is None:
            self._ghost_q = self.keyframe_q(self.selected)
        self._draw_ghost(self._ghost_q)
        self._update_ghost_visibility()
        self._publish_handles()

    def keyframe_ghost_shown(self) -> bool:
        """Whether the keyframe's ghost and its handles are drawn: a keyframe is selected, the view
        is not playing and no simulated ghost is shown (three robots in one place cannot be told apart)."""
        return self.selected is not None and self._mode == "static" and self._shown_sim() is None

    def _update_ghost_visibility(self) -> None:
        show = self.keyframe_ghost_shown()
        self.ghost_root.visible = show
        self.handles_root.visible = show

    def _draw_ghost(self, q: np.ndarray) -> None:
        self._ghost.set_pose(self.robot, q)
        for link, (p, th) in zip(self.robot.links, planar_link_poses(self.robot, q)):
            carrier = self._carriers[link.name]
            with carrier.hold_sync():
                carrier.position = to_three(p)
                carrier.quaternion = pitch_quaternion(th)

    def handle_position(self, name: str) -> np.ndarray:
        """World position (x, z) (m) of a ghost handle (``base``, ``joint:NAME``, ``point:NAME``)."""
        h = self.handles[name]
        q = self._ghost_q if self._ghost_q is not None else self.keyframe_q()
        i = self.robot.link_index(h.link)
        p, th = planar_link_poses(self.robot, q)[i]
        return p + rot(th) @ np.asarray(h.local, dtype=float)

    def handle_screen_positions(self) -> dict[str, tuple[float, float]]:
        """Pixel positions (x right, y down, from the renderer's top-left corner) of the ghost's
        handles, from the camera as Python knows it (its position and quaternion as last synced
        from the browser, the field of view and the renderer size)."""
        if self.selected is None:
            return {}
        names = list(self.handles)
        px = self.screen_points([self.handle_position(n) for n in names])
        return {n: (float(p[0]), float(p[1])) for n, p in zip(names, px) if np.all(np.isfinite(p))}

    def screen_points(self, points_xz) -> np.ndarray:
        """Pixel positions (x right, y down, from the renderer's top-left corner) of world points
        (x, z) in the sagittal plane, from the camera as Python knows it (its position and quaternion
        as last synced from the browser, the field of view and the renderer size); NaN behind it."""
        cam = np.asarray(self.camera.position, dtype=float)
        qx, qy, qz, qw = self.camera.quaternion
        R = np.array([[1 - 2 * (qy * qy + qz * qz), 2 * (qx * qy - qz * qw), 2 * (qx * qz + qy * qw)],
                      [2 * (qx * qy + qz * qw), 1 - 2 * (qx * qx + qz * qz), 2 * (qy * qz - qx * qw)],
                      [2 * (qx * qz - qy * qw), 2 * (qy * qz + qx * qw), 1 - 2 * (qx * qx + qy * qy)]])
        f = 1.0 / math.tan(math.radians(float(self.camera.fov)) / 2.0)
        w, h = float(self.renderer.width), float(self.renderer.height)
        aspect = w / h
        out = []
        for x, z in np.asarray(points_xz, dtype=float).reshape(-1, 2):
            pc = R.T @ (np.array([x, z, 0.0]) - cam)
            if pc[2] >= -1e-9:
                out.append((math.nan, math.nan))  # behind the camera
                continue
            ndc_x, ndc_y = f / aspect * pc[0] / -pc[2], f * pc[1] / -pc[2]
            out.append(((ndc_x + 1.0) / 2.0 * w, (1.0 - ndc_y) / 2.0 * h))
        return np.array(out).reshape(-1, 2)

    def _publish_handles(self) -> None:
        if not hasattr(self, "handles_json"):
            return
        try:
            self.handles_json.value = json.dumps({k: [round(v[0], 1), round(v[1], 1)]
                                                  for k, v in self.handle_screen_positions().items()})
        except Exception:  # noqa: BLE001 - a helper for tests, never fatal
            self.handles_json.value = "{}"

    # ----- edits from the timeline and the controls -------------------------------------------
    def move_boundary(self, index: int, t: float) -> None:
        """Move the end of phase ``index`` to trick time ``t`` (s, nominal): that phase and the next
        one change durations (the later boundaries stay); durations are clamped (fixed phases to
        at least 0.05 s, free phases within their bounds, whose nominal value is what moves)."""
        with self._lock:
            phases = self.trick.phases
            starts = self._nominal_starts()
            if not 0 <= index < len(phases):
                raise IndexError(f"no phase boundary {index}")

            def bounds(ph: Any) -> tuple[float, float]:
                return (ph.duration_min, ph.duration_max) if ph.free else (MIN_PHASE_DURATION, math.inf)

            lo_a, hi_a = bounds(phases[index])
            t_lo, t_hi = starts[index] + lo_a, starts[index] + hi_a
            if index + 1 < len(phases):
                lo_b, hi_b = bounds(phases[index + 1])
                end_b = starts[index + 2]
                t_lo, t_hi = max(t_lo, end_b - hi_b), min(t_hi, end_b - lo_b)
            t_new = float(np.clip(t, t_lo, t_hi)) if t_lo <= t_hi else starts[index + 1]
            old = [p.duration for p in phases]
            phases[index].duration = t_new - starts[index]
            if index + 1 < len(phases):
                phases[index + 1].duration = starts[index + 2] - t_new
            changed = any(abs(a - p.duration) > 1e-12 for a, p in zip(old, phases))
        self._refresh_timeline()
        self._show_phase()
        if changed:
            self._edited(f"phase {phases[index].name!r} boundary moved")

    def move_keyframe(self, index: int, t: float) -> None:
        """Move keyframe ``index`` to trick time ``t`` (s, nominal): a keyframe of a phase keeps its
        phase and gets the fraction of it (clamped to 0..1); an absolute one gets the time."""
        with self._lock:
            kf = self.trick.keyframes[index]
            old = kf.time
            if kf.phase is not None:
                i = self.trick.phase_index(kf.phase)
                starts = self._nominal_starts()
                dur = starts[i + 1] - starts[i]
                kf.time = float(np.clip((t - starts[i]) / dur if dur > 0 else 0.0, 0.0, 1.0))
            else:
                kf.time = float(np.clip(t, 0.0, self.trick.nominal_duration))
            changed = abs(kf.time - old) > 1e-12
            if index == self.selected:
                self._ghost_q = None
        self._refresh_timeline()
        self._refresh_keyframe_options()
        if index == self.selected:
            self._show_keyframe_fields()
            with self._lock:
                self._refresh_ghost()
        if changed:
            self._edited(f"keyframe {kf.name!r} moved")

    def add_keyframe_at_playhead(self, name: str | None = None) -> int:
        """A soft keyframe at the playhead with the current motion's pose there (base pitch and every
        joint); selects and returns its index. Adding a keyframe changes the structure (rebuild)."""
        with self._lock:
            m = self.motion
            t = self.playhead
            if m is not None:
                span = m.phase_at(float(np.clip(t, m.t0, m.tend)))
                frac = float(np.clip((t - span.start) / span.duration if span.duration > 0 else 0.0, 0.0, 1.0))
                q = m.sample(float(np.clip(t, m.t0, m.tend)))["q"]
                phase = span.name
            else:
                starts = self._nominal_starts()
                i = max(0, min(len(self.trick.phases) - 1, int(np.searchsorted(starts, t, side="right")) - 1))
                phase = self.trick.phases[i].name
                dur = starts[i + 1] - starts[i]
                frac = float(np.clip((t - starts[i]) / dur if dur > 0 else 0.0, 0.0, 1.0))
                q = self._rest_q
            names = {k.name for k in self.trick.keyframes}
            if name is None:
                n = 1
                while f"key{n}" in names:
                    n += 1
                name = f"key{n}"
            elif name in names:
                raise ValueError(f"a keyframe named {name!r} exists")
            pose = {"base_pitch": float(q[2])}
            pose.update({j: float(q[3 + k]) for k, j in enumerate(self.robot.joint_names)})
            self.trick.keyframes.append(Keyframe(name=name, time=frac, pose=pose, phase=phase, hard=False,
                                                 weight=1.0))
            index = len(self.trick.keyframes) - 1
        self._refresh_keyframe_options()
        self.select_keyframe(index)
        self._refresh_timeline()
        self._edited(f"keyframe {name!r} added")
        return index

    def remove_selected_keyframe(self) -> None:
        """Remove the selected keyframe (a structure edit)."""
        if self.selected is None:
            return
        with self._lock:
            kf = self.trick.keyframes.pop(self.selected)
            self.selected = None
        self._refresh_keyframe_options()
        self.select_keyframe(0 if self.trick.keyframes else None)
        self._refresh_timeline()
        self._edited(f"keyframe {kf.name!r} removed")

    def _refresh_keyframe_options(self) -> None:
        self._programmatic += 1
        try:
            sel = self.selected
            self.keyframe_pick.options = self._keyframe_options()
            self.keyframe_pick.value = sel if sel is not None and sel < len(self.trick.keyframes) else None
        finally:
            self._programmatic -= 1

    def _kf_weight_changed(self, change: dict) -> None:
        if self._programmatic or self.selected is None:
            return
        with self._lock:
            self.trick.keyframes[self.selected].weight = float(change["new"])
        self._edited("keyframe weight")

    def _kf_time_changed(self, change: dict) -> None:
        if self._programmatic or self.selected is None:
            return
        kf = self.trick.keyframes[self.selected]
        if kf.phase is not None:
            starts = self._nominal_starts()
            i = self.trick.phase_index(kf.phase)
            self.move_keyframe(self.selected, starts[i] + float(change["new"]) * (starts[i + 1] - starts[i]))
        else:
            self.move_keyframe(self.selected, float(change["new"]))

    def set_weight(self, name: str, value: float) -> None:
        """Set cost weight ``name`` through its slider (0 switches the term off)."""
        if name not in self.weight_sliders:
            raise KeyError(f"no cost weight {name!r}; weights: {', '.join(self.weight_sliders)}")
        if value <= 0:
            self.weight_on[name].value = False
        else:
            self._programmatic += 1
            try:
                self.weight_on[name].value = True
            finally:
                self._programmatic -= 1
            if self.weight_sliders[name].value == value:
                self._weight_changed(name)
            self.weight_sliders[name].value = value

    def _weight_changed(self, name: str) -> None:
        if self._programmatic:
            return
        value = float(self.weight_sliders[name].value) if self.weight_on[name].value else 0.0
        with self._lock:
            if getattr(self.trick.costs, name) == value:
                return
            setattr(self.trick.costs, name, value)
        self._edited(f"weight {name} = {value:.3g}")

    def _rotation_changed(self, change: dict) -> None:
        if self._programmatic:
            return
        owner = change["owner"]
        self._programmatic += 1
        try:
            if owner is self.rotation_turns:
                self.rotation_deg.value = float(change["new"]) * 360.0
            elif owner is self.rotation_deg:
                self.rotation_turns.value = float(change["new"]) / 360.0
        finally:
            self._programmatic -= 1
        value = math.radians(self.rotation_deg.value) if self.rotation_on.value else None
        with self._lock:
            if self.trick.goals.rotation == value:
                return
            self.trick.goals.rotation = value
        self._edited("rotation goal")

    def _box_changed(self, name: str, height: float) -> None:
        if self._programmatic:
            return
        with self._lock:
            for b in self.trick.terrain.boxes:
                if b.name == name:
                    b.height = float(height)
            self._rebuild_terrain()
        self._edited(f"box {name!r} height")

    def _target_changed(self, name: str, axis: str, value: float) -> None:
        if self._programmatic:
            return
        with self._lock:
            for t in self.trick.terrain.targets:
                if t.name == name:
                    setattr(t, axis, float(value))
            self._rebuild_terrain()
        self._edited(f"target {name!r}")

    def _landing_changed(self, change: dict) -> None:
        if self._programmatic:
            return
        lo, hi = sorted((float(self.landing_min.value), float(self.landing_max.value)))
        value = (lo, hi) if self.landing_on.value else None
        with self._lock:
            if self.trick.goals.landing_x == value:
                return
            self.trick.goals.landing_x = value
            self._rebuild_terrain()
        self._edited("landing range")

    def set_goal(self, *, rotation_turns: float | None = None, box: tuple[str, float] | None = None,
                 landing_x: tuple[float, float] | None = None) -> None:
        """Set goal values through their input widgets (the same path as typing them)."""
        if rotation_turns is not None:
            self.rotation_on.value = True
            self.rotation_turns.value = float(rotation_turns)
        if box is not None:
            self.box_heights[box[0]].value = float(box[1])
        if landing_x is not None:
            self._programmatic += 1
            try:
                self.landing_on.value = True
                self.landing_min.value = float(landing_x[0])
            finally:
                self._programmatic -= 1
            self.landing_max.value = float(landing_x[1])
            if self.trick.goals.landing_x != tuple(sorted(map(float, landing_x))):
                self._landing_changed({"new": None})

    def _show_phase(self) -> None:
        name = self.phase_pick.value
        if name is None:
            return
        ph = self.trick.phase(name)
        self._programmatic += 1
        try:
            self.ph_duration.value = float(ph.duration)
            self.ph_free.value = ph.free
            self.ph_min.value = float(ph.duration_min if ph.duration_min is not None else ph.duration)
            self.ph_max.value = float(ph.duration_max if ph.duration_max is not None else ph.duration)
            self.ph_knots.value = int(ph.knots)
            self.ph_contacts.value = tuple(c.point for c in ph.contacts if c.point in self._contact_capable)
            self.ph_surface.value = ph.contacts[0].surface if ph.contacts else "ground"
        finally:
            self._programmatic -= 1

    def _phase_widget_changed(self, change: dict) -> None:
        if self._programmatic:
            return
        name = self.phase_pick.value
        with self._lock:
            ph = self.trick.phase(name)
            if self.ph_free.value:
                lo, hi = sorted((float(self.ph_min.value), float(self.ph_max.value)))
                ph.duration_min, ph.duration_max = lo, hi
                ph.duration = float(np.clip(self.ph_duration.value, lo, hi))
            else:
                ph.duration_min = ph.duration_max = None
                ph.duration = float(self.ph_duration.value)
            ph.knots = int(self.ph_knots.value)
            ph.contacts = [Contact(p, self.ph_surface.value) for p in self.ph_contacts.value]
        self._refresh_timeline()
        self._edited(f"phase {name!r}")

    def set_phase(self, name: str, *, knots: int | None = None, contacts: Sequence[str] | None = None,
                  surface: str | None = None, duration: float | None = None) -> None:
        """Edit a phase through the Phase tab's widgets (knots or contacts: a structure edit)."""
        self.phase_pick.value = name
        self._programmatic += 1
        try:
            if knots is not None:
                self.ph_knots.value = int(knots)
            if contacts is not None:
                self.ph_contacts.value = tuple(contacts)
            if surface is not None:
                self.ph_surface.value = surface
            if duration is not None:
                self.ph_duration.value = float(duration)
        finally:
            self._programmatic -= 1
        self._phase_widget_changed({"new": None})
