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


class PlotsMixin:
    """The plot figures and their data."""

    # ----- plots -----------------------------------------------------------------------------
    def _phase_band_mark(self) -> bq.Lines:
        return bq.Lines(x=[[0, 0]], y=[[0, 0]], scales={"x": self._px, "y": self._unit}, fill="inside",
                        stroke_width=0, colors=["#ffffff"], fill_opacities=[0.35])

    def _cursor_mark(self) -> bq.Lines:
        return bq.Lines(x=[0.0, 0.0], y=[0.0, 1.0], scales={"x": self._px, "y": self._unit}, colors=["#000000"],
                        stroke_width=1.5)

    def _figure(self, title: str, marks: list, axes: list, **kw: Any) -> bq.Figure:
        fig = bq.Figure(marks=marks, axes=axes, title=title, title_style={"font-size": "13px"},
                        fig_margin={"top": 30, "bottom": 40, "left": 55, "right": 55}, min_aspect_ratio=0.01,
                        layout=W.Layout(width="33%", height="240px"), legend_location="top-right", **kw)
        return fig

    def _build_plots(self) -> None:
        self._px = bq.LinearScale(min=0.0, max=1.0)
        self._unit = bq.LinearScale(min=0.0, max=1.0)
        t_axis = lambda: bq.Axis(scale=self._px, label="t (s)", grid_lines="none")  # noqa: E731
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
        self._m_tau = bq.Lines(x=[0.0], y=[0.0], scales=s, colors=["#1d3557"], labels=["torque"], display_legend=True)
        self._m_tau_peak = bq.Lines(x=[[0.0, 0.0]], y=[[0.0, 0.0]], scales=s, colors=["#e63946", "#e63946"], line_style="dashed",
                                    labels=["+peak", "-peak"])
        self._m_tau_env = bq.Lines(x=[[0.0, 0.0]], y=[[0.0, 0.0]], scales=s, colors=["#f4a261", "#f4a261"], line_style="dotted",
                                   labels=["envelope", "envelope"], stroke_width=2.5)
        self.fig_torque = self._figure("torque (N m)", framed([self._m_tau, self._m_tau_peak, self._m_tau_env]),
                                       [t_axis(), bq.Axis(scale=y_tau, side="left", label="N m")])
        # torque-speed plane
        x_qd, y_tau2 = bq.LinearScale(), bq.LinearScale()
        s2 = {"x": x_qd, "y": y_tau2}
        self._m_ts_path = bq.Lines(x=[0.0], y=[0.0], scales=s2, colors=["#1d3557"])
        self._m_ts_env = bq.Lines(x=[0.0], y=[0.0], scales=s2, colors=["#f4a261"], stroke_width=2.5,
                                  line_style="dashed")
        self._m_ts_dot = bq.Scatter(x=[0.0], y=[0.0], scales=s2, colors=["#000000"], default_size=40)
        self.fig_torque_speed = self._figure(
            "torque-speed plane", [self._m_ts_env, self._m_ts_path, self._m_ts_dot],
            [bq.Axis(scale=x_qd, label="speed (rad/s)", grid_lines="none"),
             bq.Axis(scale=y_tau2, side="left", label="torque (N m)")])
        # joint speed vs limit
        y_qd = bq.LinearScale()
        s3 = {"x": self._px, "y": y_qd}
        self._m_qd = bq.Lines(x=[0.0], y=[0.0], scales=s3, colors=["#2a9d8f"])
        self._m_qd_lim = bq.Lines(x=[[0.0, 0.0]], y=[[0.0, 0.0]], scales=s3, colors=["#e63946", "#e63946"], line_style="dashed")
        self.fig_speed = self._figure("joint speed (rad/s)", framed([self._m_qd, self._m_qd_lim]),
                                      [t_axis(), bq.Axis(scale=y_qd, side="left", label="rad/s")])
        # contact forces
        y_f = bq.LinearScale()
        s4 = {"x": self._px, "y": y_f}
        self._m_force = bq.Lines(x=[[0.0, 0.0]], y=[[0.0, 0.0]], scales=s4, colors=["#1d3557", "#2a9d8f"],
                                 labels=["normal fz", "tangential fx"], display_legend=True)
        self._m_force_cone = bq.Lines(x=[[0.0, 0.0]], y=[[0.0, 0.0]], scales=s4, colors=["#e63946", "#e63946"],
                                      line_style="dashed", labels=["+mu fz", "-mu fz"])
        self.fig_force = self._figure("contact force (N)", framed([self._m_force, self._m_force_cone]),
                                      [t_axis(), bq.Axis(scale=y_f, side="left", label="N")])
        # base height and pitch
        y_z, y_p = bq.LinearScale(), bq.LinearScale()
        self._m_base_z = bq.Lines(x=[0.0], y=[0.0], scales={"x": self._px, "y": y_z}, colors=["#1d3557"],
                                  labels=["base z (m)"], display_legend=True)
        self._m_base_p = bq.Lines(x=[0.0], y=[0.0], scales={"x": self._px, "y": y_p}, colors=["#e76f51"],
                                  labels=["pitch (rad)"], display_legend=True)
        self.fig_base = self._figure("base height and pitch", framed([self._m_base_z, self._m_base_p]),
                                     [t_axis(), bq.Axis(scale=y_z, side="left", label="z (m)"),
                                      bq.Axis(scale=y_p, side="right", label="pitch (rad)")])
        self.metrics_html = W.HTML(layout=W.Layout(width="33%", height="240px", overflow="auto"))
        self.metrics_html.add_class("kipup-metrics")
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
        # speed
        vl = joint.velocity_limit
        self.fig_speed.title = f"speed of {joint.name} (rad/s)"
        with self._m_qd.hold_sync():
            self._m_qd.x, self._m_qd.y = ts, dense["qd"][:, 3 + j]
        with self._m_qd_lim.hold_sync():
            self._m_qd_lim.x, self._m_qd_lim.y = np.array([ends, ends]), np.array([[vl, vl], [-vl, -vl]])
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
        # base
        with self._m_base_z.hold_sync():
            self._m_base_z.x, self._m_base_z.y = ts, dense["q"][:, 1]
        with self._m_base_p.hold_sync():
            self._m_base_p.x, self._m_base_p.y = ts, dense["q"][:, 2]
        # metrics
        try:
            met = m.metrics(robot, allow_other_name=True)
            rows = "".join(f"<tr><td>{_html(a)}</td><td>{_html(b)}</td></tr>" for a, b in met.summary_rows())
            jt = "".join(f"<tr><td>{jm.name}</td><td>{jm.torque_ratio:.2f}</td><td>{jm.speed_ratio:.2f}</td>"
                         f"<td>{jm.envelope_ratio:.2f}</td></tr>" for jm in met.joints)
            self.metrics = met
            self.metrics_html.value = (f"<b>motion #{self.motion_count}</b> ({m.status})<table>{rows}</table>"
                                       "<table><tr><th>joint</th><th>torque/limit</th><th>speed/limit</th>"
                                       f"<th>envelope</th></tr>{jt}</table>")
        except ValueError as exc:
            self.metrics_html.value = f"metrics unavailable: {_html(str(exc))}"
        self.timings["plots_ms"] = (time.perf_counter() - t0) * 1e3
