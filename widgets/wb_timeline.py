"""The workbench's timeline (bqplot): phases as bands with draggable ends, keyframes as draggable
diamonds, the playhead.

The axis is the motion's time, the same as the playhead scrubber's and the plots': phases are drawn
at their solved times (a free phase lasts what the solver chose; a fixed one what the trick says,
so a dragged end stays where it was dropped until the re-solve arrives), and while a simulation is
shown that runs on past the plan, a grey band covers the extra time. Before the first motion the
phases' planned durations are drawn.

A mixin of :class:`kipup.widgets.workbench.Workbench`; it works on the workbench's attributes.
"""
from __future__ import annotations

import time
from typing import Any

import bqplot as bq
import ipywidgets as W
import numpy as np

from kipup.core.trick import Keyframe
from .wb_common import _PHASE_COLORS, _fmt

_SIM_BAND_COLOR = "#d9d9de"   # the time a shown simulation runs on past the plan


class TimelineMixin:
    """The timeline figure and its drags."""

    # ----- timeline --------------------------------------------------------------------------
    def _build_timeline(self) -> None:
        self._tl_x = bq.LinearScale(min=0.0, max=1.0)
        self._tl_y = bq.LinearScale(min=0.0, max=1.0)
        sc = {"x": self._tl_x, "y": self._tl_y}
        self._tl_bands = bq.Lines(x=[[0, 0]], y=[[0, 0]], scales=sc, fill="inside", stroke_width=1,
                                  colors=["#666666"], fill_opacities=[0.8])
        self._tl_labels = bq.Label(x=[0.0], y=[0.78], text=[""], scales=sc, align="middle", default_size=12,
                                   colors=["#333333"])
        self._tl_bounds = bq.Scatter(x=[0.0], y=[0.55], scales=sc, marker="rectangle", default_size=220,
                                     colors=["#343a40"], enable_move=True, restrict_x=True, update_on_move=False,
                                     interactions={"hover": "tooltip"}, apply_clip=False)
        self._tl_keys = bq.Scatter(x=[0.0], y=[0.28], scales=sc, marker="diamond", default_size=120,
                                   colors=["#c1121f"], enable_move=True, restrict_x=True, update_on_move=False,
                                   names=[""], display_names=True, selected_style={"fill": "#ffb703",
                                                                                   "stroke": "black"},
                                   apply_clip=False)
        self._tl_head = bq.Lines(x=[0.0, 0.0], y=[0.0, 1.0], scales=sc, colors=["#000000"], stroke_width=2,
                                 apply_clip=False)
        self._tl_axis = bq.Axis(scale=self._tl_x, label="time (s)", grid_lines="none")
        self.timeline = bq.Figure(
            marks=[self._tl_bands, self._tl_labels, self._tl_bounds, self._tl_keys, self._tl_head],
            axes=[self._tl_axis],
            fig_margin={"top": 6, "bottom": 40, "left": 30, "right": 30}, min_aspect_ratio=0.01,
            layout=W.Layout(width="100%", height="150px"), title="")
        self.timeline.add_class("kipup-timeline")
        self._tl_bounds.on_drag_end(self._timeline_boundary_dragged)
        self._tl_keys.on_drag_end(self._timeline_keyframe_dragged)
        self._tl_keys.on_element_click(self._timeline_keyframe_clicked)
        self._refresh_timeline()

    def _nominal_starts(self) -> list[float]:
        out, t = [], 0.0
        for ph in self.trick.phases:
            out.append(t)
            t += float(ph.duration)
        out.append(t)
        return out

    def _keyframe_nominal_time(self, kf: Keyframe) -> float:
        starts = self._nominal_starts()
        if kf.phase is not None:
            i = self.trick.phase_index(kf.phase)
            return starts[i] + float(kf.time) * float(self.trick.phases[i].duration)
        return float(kf.time)

    def _timeline_spans(self) -> list[tuple[float, float]]:
        """(start, end) of each phase on the timeline, in motion time (s): free phases as solved,
        fixed ones as the trick has them (equal once solved), from the motion's start; the
        planned durations from 0 before there is a motion (or when its phases are not the trick's)."""
        m = self.motion
        phases = self.trick.phases
        if m is None or [p.name for p in m.phases] != [p.name for p in phases]:
            starts = self._nominal_starts()
            return list(zip(starts[:-1], starts[1:]))
        out, t = [], float(m.t0)
        for ph, span in zip(phases, m.phases):
            d = float(span.duration) if ph.free else float(ph.duration)
            out.append((t, t + d))
            t += d
        return out

    def timeline_range(self) -> tuple[float, float]:
        """The time range (s) of the timeline's axis: the scrubber's (the motion, extended to a shown
        simulation's end), or longer while an edited fixed phase waits for its re-solve."""
        spans = self._timeline_spans()
        t0 = float(self.motion.t0) if self.motion is not None else 0.0
        return t0, max(self._view_end(), spans[-1][1] if spans else 0.0, t0 + 1e-3)

    def _timeline_to_nominal(self, index: int, t: float) -> float:
        """A time on the timeline inside (or beyond) phase ``index``'s span -> trick time with
        planned durations, at the same fraction of the phase."""
        a, b = self._timeline_spans()[index]
        starts = self._nominal_starts()
        frac = (t - a) / (b - a) if b > a else 0.0
        return starts[index] + frac * (starts[index + 1] - starts[index])

    def _refresh_timeline(self) -> None:
        with self._lock:
            phases = list(self.trick.phases)
            spans = self._timeline_spans()
            kfs = list(self.trick.keyframes)
            t_lo, t_hi = self.timeline_range()
            solved = self.motion is not None and [p.name for p in self.motion.phases] == [p.name for p in phases]
            xs, ys, fills, mids, names = [], [], [], [], []
            for ph, (a, b) in zip(phases, spans):
                xs.append([a, a, b, b, a])
                ys.append([0.08, 0.92, 0.92, 0.08, 0.08])
                fills.append(_PHASE_COLORS["flight" if ph.in_flight else "stance"])
                mids.append((a + b) / 2.0)
                label = ph.name
                if ph.free:
                    label += (f" {b - a:.2f} s" if solved else "") + \
                        f" [{_fmt(ph.duration_min)}-{_fmt(ph.duration_max)}]"
                names.append(label)
            end = spans[-1][1] if spans else t_lo
            sim_on = solved and t_hi > end + 1e-6 and self._shown_sim() is not None
            if sim_on:
                xs.append([end, end, t_hi, t_hi, end])
                ys.append([0.08, 0.92, 0.92, 0.08, 0.08])
                fills.append(_SIM_BAND_COLOR)
                mids.append((end + t_hi) / 2.0)
                names.append("simulation runs on")
            kx = [spans[self.trick.phase_index(k.phase)][0] + float(k.time) * (
                spans[self.trick.phase_index(k.phase)][1] - spans[self.trick.phase_index(k.phase)][0])
                  if k.phase is not None else float(k.time) for k in kfs]
        with self.timeline.hold_sync():
            self._tl_x.min, self._tl_x.max = t_lo, t_hi
            self._tl_axis.label = ("time (s): phases as solved" if solved else
                                   "time (s): planned durations (not solved yet)")
            with self._tl_bands.hold_sync():
                self._tl_bands.x, self._tl_bands.y = np.array(xs), np.array(ys)
                self._tl_bands.fill_colors = fills
                self._tl_bands.fill_opacities = [0.8] * len(fills)
                self._tl_bands.colors = ["#666666"] * len(fills)
            with self._tl_labels.hold_sync():
                self._tl_labels.x, self._tl_labels.y, self._tl_labels.text = mids, [0.78] * len(mids), names
            with self._tl_bounds.hold_sync():
                self._tl_bounds.x = np.array([b for _, b in spans])
                self._tl_bounds.y = np.full(len(phases), 0.55)
            with self._tl_keys.hold_sync():
                self._programmatic += 1
                try:
                    self._tl_keys.x = np.array(kx) if kx else np.zeros(0)
                    self._tl_keys.y = np.full(len(kx), 0.28)
                    self._tl_keys.names = [k.name for k in kfs]
                    self._tl_keys.selected = None if self.selected is None else [self.selected]
                finally:
                    self._programmatic -= 1
        self._move_timeline_head()

    def _timeline_boundary_dragged(self, _mark: Any, content: dict) -> None:
        try:
            i, x = int(content["index"]), float(content["point"]["x"])
            # the end moves by as much as it was dragged on the timeline
            end = self._timeline_spans()[i][1]
            self.move_boundary(i, self._nominal_starts()[i + 1] + (x - end))
        except (KeyError, TypeError, ValueError):
            self._refresh_timeline()

    def _timeline_keyframe_dragged(self, _mark: Any, content: dict) -> None:
        try:
            i, x = int(content["index"]), float(content["point"]["x"])
            self.select_keyframe(i)
            kf = self.trick.keyframes[i]
            if kf.phase is not None and self.motion is not None:
                x = self._timeline_to_nominal(self.trick.phase_index(kf.phase), x)
            self.move_keyframe(i, x)
        except (KeyError, TypeError, ValueError):
            self._refresh_timeline()

    def _timeline_keyframe_clicked(self, _mark: Any, content: dict) -> None:
        i = content.get("index")
        if i is not None:
            self.select_keyframe(int(i))
