"""The workbench's timeline (bqplot): phases as bands with draggable ends, keyframes as draggable
diamonds, the playhead.

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
                                     interactions={"hover": "tooltip"})
        self._tl_keys = bq.Scatter(x=[0.0], y=[0.28], scales=sc, marker="diamond", default_size=120,
                                   colors=["#c1121f"], enable_move=True, restrict_x=True, update_on_move=False,
                                   names=[""], display_names=True, selected_style={"fill": "#ffb703",
                                                                                   "stroke": "black"})
        self._tl_head = bq.Lines(x=[0.0, 0.0], y=[0.0, 1.0], scales=sc, colors=["#000000"], stroke_width=2)
        self.timeline = bq.Figure(
            marks=[self._tl_bands, self._tl_labels, self._tl_bounds, self._tl_keys, self._tl_head],
            axes=[bq.Axis(scale=self._tl_x, label="trick time (s), nominal durations", grid_lines="none")],
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

    def _refresh_timeline(self) -> None:
        with self._lock:
            phases = list(self.trick.phases)
            starts = self._nominal_starts()
            kfs = list(self.trick.keyframes)
            total = starts[-1]
            xs, ys, fills, mids, names = [], [], [], [], []
            for i, ph in enumerate(phases):
                a, b = starts[i], starts[i + 1]
                xs.append([a, a, b, b, a])
                ys.append([0.08, 0.92, 0.92, 0.08, 0.08])
                fills.append(_PHASE_COLORS["flight" if ph.in_flight else "stance"])
                mids.append((a + b) / 2.0)
                label = ph.name + (f" [{_fmt(ph.duration_min)}-{_fmt(ph.duration_max)} s]" if ph.free else "")
                names.append(label)
            kx = [self._keyframe_nominal_time(k) for k in kfs]
        with self.timeline.hold_sync():
            self._tl_x.min, self._tl_x.max = 0.0, max(total * 1.04, 0.1)
            with self._tl_bands.hold_sync():
                self._tl_bands.x, self._tl_bands.y = np.array(xs), np.array(ys)
                self._tl_bands.fill_colors = fills
                self._tl_bands.fill_opacities = [0.8] * len(fills)
                self._tl_bands.colors = ["#666666"] * len(fills)
            with self._tl_labels.hold_sync():
                self._tl_labels.x, self._tl_labels.y, self._tl_labels.text = mids, [0.78] * len(mids), names
            with self._tl_bounds.hold_sync():
                self._tl_bounds.x, self._tl_bounds.y = np.array(starts[1:]), np.full(len(phases), 0.55)
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
            self.move_boundary(int(content["index"]), float(content["point"]["x"]))
        except (KeyError, TypeError, ValueError):
            self._refresh_timeline()

    def _timeline_keyframe_dragged(self, _mark: Any, content: dict) -> None:
        try:
            i = int(content["index"])
            self.select_keyframe(i)
            self.move_keyframe(i, float(content["point"]["x"]))
        except (KeyError, TypeError, ValueError):
            self._refresh_timeline()

    def _timeline_keyframe_clicked(self, _mark: Any, content: dict) -> None:
        i = content.get("index")
        if i is not None:
            self.select_keyframe(int(i))
