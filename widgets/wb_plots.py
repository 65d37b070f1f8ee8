"""The workbench's plots (bqplot): torque, torque-speed plane, speed, contact force, base, metrics.

A mixin of :class:`kipup.widgets.workbench.Workbench`; it works on the workbench's attributes.
"""
from __future__ import annotations

import time
from typing import Any

import bqplot as bq
import ipywidgets as W
import numpy as np

from .wb_common import _PHASE_COLORS, _html

#: plot cells: at least this wide (px), at most three a row; two a row in a 750-1100 px notebook
PLOT_MIN_WIDTH = 360
PLOT_HEIGHT = "230px"
_DASH = {"solid": "", "dashed": "6,3", "dotted": "2,2"}


def line_key(items: list[tuple[str, str, str]]) -> str:
    """HTML key for a plot: one short line sample (colour, 'solid'/'dashed'/'dotted', or 'dot' for
    a marker) and its label per item. Drawn beneath the figure, so it never covers the data."""
    parts = []
    for color, style, label in items:
        if style == "dot":
            mark = f"<circle cx='9' cy='5' r='3.5' fill='{color}'/>"
        else:
            dash = f" stroke-dasharray='{_DASH[style]}'" if _DASH[style] else ""
            mark = f"<line x1='0' y1='5' x2='18' y2='5' stroke='{color}' stroke-width='2.5'{dash}/>"
        parts.append(f"<span style='white-space:nowrap; margin:0 6px'><svg width='18' height='10' "
                     f"style='vertical-align:middle'>{mark}</svg> {_html(label)}</span>")
    return "<div class='kipup-key'>" + " ".join(parts) + "</div>"


def nice_ticks(lo: float, hi: float, n: int = 7, pad: float = 0.0) -> tuple[float, float, np.ndarray, str]:
    """Axis bounds and at most ``n`` tick values on a 1-2-2.5-5 step over [lo, hi].

    pad: with pad > 0 the range is widened by that share of its span and the bounds rounded out
    to whole steps (so a limit line never sits on the frame), picking the step that wastes the
    least room; with 0 the bounds stay lo, hi and the finest step with at most n ticks inside is
    used. Returns (lo, hi, ticks, d3 tick format)."""
    lo, hi = float(lo), float(hi)
    if not (np.isfinite(lo) and np.isfinite(hi)):
        lo, hi = 0.0, 1.0
    if hi - lo < 1e-9 * max(1.0, abs(lo), abs(hi)):
        half = max(abs(lo) * 0.1, 1e-3)
        lo, hi = lo - half, hi + half
    span = hi - lo
    if pad > 0:
        lo, hi = lo - pad * span, hi + pad * span
    mag0 = 10.0 ** np.floor(np.log10((hi - lo) / max(n - 1, 1)))
    best = None
    for mag in (mag0 / 10.0, mag0, mag0 * 10.0):
        for m in (1.0, 2.0, 2.5, 5.0):
            step = m * mag
            a = np.floor(lo / step + 1e-9) * step if pad > 0 else lo
            b = np.ceil(hi / step - 1e-9) * step if pad > 0 else hi
            first = np.ceil(a / step - 1e-9) * step
            k = int(np.floor((b - first) / step + 1e-9)) + 1
            if k > n or k < 2:
                continue
            key = (b - a, -step) if pad > 0 else (step,)
            if best is None or key < best[-1]:
                best = (a, b, step, first, k, m, key)
    if best is None:   # cannot happen for n >= 3; keep the plain range
        return lo, hi, np.array([lo, hi]), ".3g"
    a, b, step, first, k, m, _ = best
    ticks = np.round(first + step * np.arange(k), 12) + 0.0
    decimals = max(0, int(-np.floor(np.log10(step) + 1e-9)) + (1 if m == 2.5 else 0))
    return float(np.round(a, 12)), float(np.round(b, 12)), ticks, f".{decimals}f"


def ratio_cell(x: float) -> str:
    """A limit ratio for the metrics table: red from 1 (at or past the limit), orange from 0.9."""
    text = f"{x:.2f}" if np.isfinite(x) else "inf"
    if not np.isfinite(x) or round(x, 2) >= 1.0:   # as shown: a solver's 0.999 is "at the limit" too
        return f"<td class='kipup-over'>{text}</td>"
    if x >= 0.9:
        return f"<td class='kipup-near'>{text}</td>"
    return f"<td>{text}</td>"


class PlotsMixin:
    """The plot figures and their data."""

    # ----- plots -----------------------------------------------------------------------------
    def _phase_band_mark(self) -> bq.Lines:
        return bq.Lines(x=[[0, 0]], y=[[0, 0]], scales={"x": self._px, "y": self._unit}, fill="inside",
                        stroke_width=0, colors=["#ffffff"], fill_opacities=[0.35])

    def _cursor_mark(self) -> bq.Lines:
        return bq.Lines(x=[0.0, 0.0], y=[0.0, 1.0], scales={"x": self._px, "y": self._unit}, colors=["#000000"],
                        stroke_width=1.5)

    def _figure(self, title: str, marks: list, axes: list, right_axis: bool = False, **kw: Any) -> bq.Figure:
        fig = bq.Figure(marks=marks, axes=axes, title=title, title_style={"font-size": "13px"},
                        fig_margin={"top": 28, "bottom": 40, "left": 58, "right": 58 if right_axis else 18},
                        min_aspect_ratio=0.01, max_aspect_ratio=100.0,
                        layout=W.Layout(width="100%", height=PLOT_HEIGHT), **kw)
        return fig

    @staticmethod
    def _axis(scale: bq.Scale, label: str, side: str = "bottom", **kw: Any) -> bq.Axis:
        """An axis with few enough ticks that their labels never touch (5-6 on a 420 px plot)."""
        orient = "vertical" if side in ("left", "right") else "horizontal"
        return bq.Axis(scale=scale, label=label, side=side, orientation=orient,
                       grid_lines="solid" if side == "left" else "none", grid_color="#e6e6e6",
                       label_offset="44px" if orient == "vertical" else "30px", **kw)

    def _fit_axis(self, axis: bq.Axis, *values: Any, n: int = 8) -> None:
        """Set ``axis``'s scale to round bounds around every finite value given (a 3 % margin, so
        limit lines stay off the frame) with at most ``n`` ticks on a 1-2-5 step."""
        flat = np.concatenate([np.asarray(v, dtype=float).ravel() for v in values]) if values else np.zeros(0)
        flat = flat[np.isfinite(flat)]
        lo, hi = (float(flat.min()), float(flat.max())) if flat.size else (0.0, 1.0)
        lo, hi, ticks, fmt = nice_ticks(lo, hi, n, pad=0.03)
        with axis.scale.hold_sync():
            axis.scale.min, axis.scale.max = lo, hi
        with axis.hold_sync():
            axis.tick_values, axis.tick_format = ticks, fmt

    def _set_time_ticks(self) -> None:
        """Ticks of the plots' time axes (at most 7, on a 1-2-5 step) for the current time range."""
        if not getattr(self, "_t_axes", None):
            return
        _, _, ticks, fmt = nice_ticks(float(self._px.min), float(self._px.max), 7)
        for axis in self._t_axes:
            with axis.hold_sync():
                axis.tick_values, axis.tick_format = ticks, fmt

    @staticmethod
    def _cell(fig: W.Widget, key: str) -> W.VBox:
        box = W.VBox([fig, W.HTML(key, layout=W.Layout(margin="-8px 0 0 0"))],
                     layout=W.Layout(width="100%", min_width="0", align_items="stretch"))
        box.add_class("kipup-plot-cell")
        return box

    def _build_plots(self) -> None:
        self._px = bq.LinearScale(min=0.0, max=1.0)
        self._unit = bq.LinearScale(min=0.0, max=1.0)
        self._t_axes: list[bq.Axis] = []

        def t_axis() -> bq.Axis:
            axis = self._axis(self._px, "t (s)")
            self._t_axes.append(axis)
            return axis

        self._bands: list[bq.Lines] = []
        self._cursors: list[bq.Lines] = []

        def framed(marks: list) -> list:
            band, cursor = self._phase_band_mark(), self._cursor_mark()
            self._bands.append(band)
            self._cursors.append(cursor)
            return [band, *marks, cursor]

        # torque of one joint with +-peak and the torque-speed envelope
        y_tau = bq.LinearScale()
        s = {"x": self._px, "y": y_tau}
        self._m_tau = bq.Lines(x=[0.0], y=[0.0], scales=s, colors=["#1d3557"], stroke_width=2)
        self._m_tau_peak = bq.Lines(x=[[0.0, 0.0]], y=[[0.0, 0.0]], scales=s, colors=["#e63946", "#e63946"], line_style="dashed")
        self._m_tau_env = bq.Lines(x=[[0.0, 0.0]], y=[[0.0, 0.0]], scales=s, colors=["#f4a261", "#f4a261"],
                                   stroke_width=2, opacities=[0.9, 0.9])
        self.fig_torque = self._figure("torque (N m)", framed([self._m_tau_env, self._m_tau_peak, self._m_tau]),
                                       [t_axis(), self._axis(y_tau, "torque (N m)", "left")])
        self._ax_tau = self.fig_torque.axes[1]
        # torque-speed plane
        x_qd, y_tau2 = bq.LinearScale(), bq.LinearScale()
        s2 = {"x": x_qd, "y": y_tau2}
        self._m_ts_path = bq.Lines(x=[0.0], y=[0.0], scales=s2, colors=["#1d3557"], stroke_width=2)
        self._m_ts_env = bq.Lines(x=[0.0], y=[0.0], scales=s2, colors=["#f4a261"], stroke_width=2)
        self._m_ts_dot = bq.Scatter(x=[0.0], y=[0.0], scales=s2, colors=["#000000"], default_size=40)
        self.fig_torque_speed = self._figure(
            "torque-speed plane", [self._m_ts_env, self._m_ts_path, self._m_ts_dot],
            [self._axis(x_qd, "speed (rad/s)"), self._axis(y_tau2, "torque (N m)", "left")])
        self._ax_ts_x, self._ax_ts_y = self.fig_torque_speed.axes
        # joint speed vs limit
        y_qd = bq.LinearScale()
        s3 = {"x": self._px, "y": y_qd}
        self._m_qd = bq.Lines(x=[0.0], y=[0.0], scales=s3, colors=["#2a9d8f"], stroke_width=2)
        self._m_qd_lim = bq.Lines(x=[[0.0, 0.0]], y=[[0.0, 0.0]], scales=s3, colors=["#e63946", "#e63946"], line_style="dashed")
        self.fig_speed = self._figure("joint speed (rad/s)", framed([self._m_qd, self._m_qd_lim]),
                                      [t_axis(), self._axis(y_qd, "speed (rad/s)", "left")])
        self._ax_qd = self.fig_speed.axes[1]
        # contact forces
        y_f = bq.LinearScale()
        s4 = {"x": self._px, "y": y_f}
        self._m_force = bq.Lines(x=[[0.0, 0.0]], y=[[0.0, 0.0]], scales=s4, colors=["#1d3557", "#2a9d8f"],
                                 stroke_width=2)
        self._m_force_cone = bq.Lines(x=[[0.0, 0.0]], y=[[0.0, 0.0]], scales=s4, colors=["#e63946", "#e63946"],
                                      line_style="dashed")
        self.fig_force = self._figure("contact force (N)", framed([self._m_force_cone, self._m_force]),
                                      [t_axis(), self._axis(y_f, "force (N)", "left")])
        self._ax_f = self.fig_force.axes[1]
        # base height and pitch
        y_z, y_p = bq.LinearScale(), bq.LinearScale()
        self._m_base_z = bq.Lines(x=[0.0], y=[0.0], scales={"x": self._px, "y": y_z}, colors=["#1d3557"],
                                  stroke_width=2)
        self._m_base_p = bq.Lines(x=[0.0], y=[0.0], scales={"x": self._px, "y": y_p}, colors=["#e76f51"],
                                  stroke_width=2)
        self.fig_base = self._figure("base height and pitch", framed([self._m_base_z, self._m_base_p]),
                                     [t_axis(), self._axis(y_z, "base z (m)", "left", color="#1d3557",
                                                           label_color="#1d3557"),
                                      self._axis(y_p, "pitch (rad)", "right", color="#e76f51",
                                                 label_color="#e76f51")], right_axis=True)
        self._ax_z, self._ax_p = self.fig_base.axes[1:]
        self._set_time_ticks()
        # as tall as its table (the grid row grows to fit it): no scrolling to find a figure
        self.metrics_html = W.HTML(layout=W.Layout(width="100%", min_width="0"))
        self.metrics_html.add_class("kipup-metrics")
        self._plot_cells = [
            self._cell(self.fig_torque, line_key([("#1d3557", "solid", "torque"), ("#e63946", "dashed", "\u00b1peak"),
                                                  ("#f4a261", "solid", "motor torque-speed limit")])),
            self._cell(self.fig_torque_speed, line_key([("#1d3557", "solid", "operating path"),
                                                        ("#f4a261", "solid", "motor torque-speed limit"),
                                                        ("#000000", "dot", "now")])),
            self._cell(self.fig_speed, line_key([("#2a9d8f", "solid", "speed"), ("#e63946", "dashed", "\u00b1limit")])),
            self._cell(self.fig_force, line_key([("#1d3557", "solid", "normal fz"), ("#2a9d8f", "solid", "tangential fx"),
                                                 ("#e63946", "dashed", "\u00b1mu fz (friction cone)")])),
            self._cell(self.fig_base, line_key([("#1d3557", "solid", "base z (left, m)"),
                                                ("#e76f51", "solid", "pitch (right, rad)")])),
            self.metrics_html,
        ]
        self.figures = {"torque": self.fig_torque, "torque_speed": self.fig_torque_speed, "speed": self.fig_speed,
                        "force": self.fig_force, "base": self.fig_base}
        self.joint_pick = W.Dropdown(options=list(self.robot.joint_names), description="joint",
                                     layout=W.Layout(width="220px"))
        self.contact_pick = W.Dropdown(options=list(self._contact_capable), description="contact",
                                       layout=W.Layout(width="220px"))
        self.joint_pick.observe(lambda _: self._refresh_plots(), names="value")
        self.contact_pick.observe(lambda _: self._refresh_plots(), names="value")

    # ----- plots -----------------------------------------------------------------------------
    def _joint_index(self) -> int:
        return self.robot.joint_names.index(self.joint_pick.value)

    def _refresh_plots(self) -> None:
        m = self.motion
        if m is None:
            return
        t0 = time.perf_counter()
        robot = self.robot
        j = self._joint_index()
        joint = robot.joints[j]
        act = joint.actuator
        t = m.t
        ts = np.linspace(m.t0, m.tend, 400)
        dense = m.sample(ts)
        qd_knots = m.qd[:, 3 + j]
        tau = m.tau[:, j]
        peak = act.peak_torque
        room = np.clip(act.stall_torque * (1.0 - np.abs(qd_knots) / act.no_load_speed), 0.0, None)
        upper = np.where(qd_knots > 0, np.minimum(peak, room), peak)
        lower = np.where(qd_knots < 0, -np.minimum(peak, room), -peak)
        ends = [m.t0, m.tend]
        bx, by, fills = [], [], []
        for ph in m.phases:
            bx.append([ph.start, ph.start, ph.end, ph.end, ph.start])
            by.append([0.0, 1.0, 1.0, 0.0, 0.0])
            fills.append(_PHASE_COLORS["flight" if not ph.contacts else "stance"])
        for band in self._bands:
            with band.hold_sync():
                band.x, band.y = np.array(bx), np.array(by)
                band.fill_colors = fills
                band.fill_opacities = [0.35] * len(fills)
                band.colors = ["#ffffff"] * len(fills)
        self.fig_torque.title = f"torque of {joint.name} (N m)"
        with self._m_tau.hold_sync():
            self._m_tau.x, self._m_tau.y = t, tau
        with self._m_tau_peak.hold_sync():
            self._m_tau_peak.x = np.array([ends, ends])
            self._m_tau_peak.y = np.array([[peak, peak], [-peak, -peak]])
        with self._m_tau_env.hold_sync():
            self._m_tau_env.x, self._m_tau_env.y = np.array([t, t]), np.array([upper, lower])
        self._fit_axis(self._ax_tau, tau, [peak, -peak])
        # torque-speed plane: the operating path and the envelope polygon
        vmax = max(act.no_load_speed, float(np.max(np.abs(qd_knots))) * 1.05)
        v = np.linspace(0.0, vmax, 60)
        lim = np.minimum(peak, np.clip(act.stall_torque * (1.0 - v / act.no_load_speed), 0.0, None))
        ex = np.concatenate([v, v[::-1], -v, -v[::-1], v[:1]])
        ey = np.concatenate([lim, np.full_like(v, -peak)[::-1], -lim, np.full_like(v, peak)[::-1], lim[:1]])
        self.fig_torque_speed.title = f"{joint.name}: torque vs speed"
        with self._m_ts_env.hold_sync():
            self._m_ts_env.x, self._m_ts_env.y = ex, ey
        with self._m_ts_path.hold_sync():
            self._m_ts_path.x, self._m_ts_path.y = qd_knots, tau
        self._fit_axis(self._ax_ts_x, ex, qd_knots)
        self._fit_axis(self._ax_ts_y, ey, tau)
        # speed
        vl = joint.velocity_limit
        self.fig_speed.title = f"speed of {joint.name} (rad/s)"
        with self._m_qd.hold_sync():
            self._m_qd.x, self._m_qd.y = ts, dense["qd"][:, 3 + j]
        with self._m_qd_lim.hold_sync():
            self._m_qd_lim.x, self._m_qd_lim.y = np.array([ends, ends]), np.array([[vl, vl], [-vl, -vl]])
        self._fit_axis(self._ax_qd, dense["qd"][:, 3 + j], [vl, -vl])
        # contact force of one point
        name = self.contact_pick.value
        if name in m.contact_points:
            c = m.contact_points.index(name)
            fx, fz = m.forces[:, c, 0], m.forces[:, c, 1]
        else:
            fx = fz = np.zeros_like(t)
        mu = self.robot.point(name).friction if name else 0.0
        self.fig_force.title = f"contact force at {name} (N)"
        with self._m_force.hold_sync():
            self._m_force.x, self._m_force.y = np.array([t, t]), np.array([fz, fx])
        with self._m_force_cone.hold_sync():
            self._m_force_cone.x, self._m_force_cone.y = np.array([t, t]), np.array([mu * fz, -mu * fz])
        self._fit_axis(self._ax_f, fz, fx, mu * fz, -mu * fz, [0.0])
        # base
        with self._m_base_z.hold_sync():
            self._m_base_z.x, self._m_base_z.y = ts, dense["q"][:, 1]
        with self._m_base_p.hold_sync():
            self._m_base_p.x, self._m_base_p.y = ts, dense["q"][:, 2]
        self._fit_axis(self._ax_z, dense["q"][:, 1])
        self._fit_axis(self._ax_p, dense["q"][:, 2])
        # metrics
        try:
            met = m.metrics(robot, allow_other_name=True)
            rows = "".join(f"<tr><th>{_html(a)}</th><td>{_html(b)}</td></tr>" for a, b in met.summary_rows())
            jt = "".join(f"<tr><th>{_html(jm.name)}</th>{ratio_cell(jm.torque_ratio)}{ratio_cell(jm.speed_ratio)}"
                         f"{ratio_cell(jm.envelope_ratio)}</tr>" for jm in met.joints)
            self.metrics = met
            self.metrics_html.value = (
                f"<div class='kipup-metrics-body'><b>motion #{self.motion_count}</b> ({_html(m.status)})"
                f"<table class='kipup-summary'>{rows}</table>"
                "<table class='kipup-ratios'><tr><th>joint</th><th>peak torque / limit</th>"
                f"<th>peak speed / limit</th><th>torque-speed envelope</th></tr>{jt}</table>"
                "<div class='kipup-note'>ratios: 1 or more is at or past the limit. Friction margin: "
                "(mu fz - |fx|) / fz at the loaded stance knots, 0 is on the edge of the friction cone."
                "</div></div>")
        except ValueError as exc:
            self.metrics_html.value = f"metrics unavailable: {_html(str(exc))}"
        self.timings["plots_ms"] = (time.perf_counter() - t0) * 1e3
