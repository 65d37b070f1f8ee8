"""The workbench's control widgets (tabs, playback bar, status, message) and the page layout.

A mixin of :class:`kipup.widgets.workbench.Workbench`; it works on the workbench's attributes.
"""
from __future__ import annotations

import math
import re
import time

import ipywidgets as W

from kipup.core.trick import Costs, Keyframe
from .robot_view import rot
from .wb_common import MIN_PHASE_DURATION
from .wb_plots import PLOT_MIN_WIDTH


TAB_TITLES = ["Solve", "Keyframe", "Goals", "Weights", "Phase", "Record", "Verify"]
#: width of the controls column (px): with the 560 px view it fits a notebook about 1000 px wide
CONTROLS_WIDTH = 390
#: scoped to the workbench: the tab bar is one compact row of titles that share the column's width
#: (never cut, never wrapped); text in the controls column is set at 1.4 lines (not ipywidgets'
#: 28 px rows); the plot keys, the metrics table; text in the message and verdict areas wraps
#: between words
WORKBENCH_CSS = """<style>
.kipup-workbench .kipup-tabs .lm-TabBar-content { flex-wrap: nowrap !important; }
.kipup-workbench .kipup-tabs .lm-TabBar-tab { flex: 1 1 auto !important; min-width: 0 !important;
  max-width: none !important; padding: 0 5px !important; font-size: 12px; justify-content: center; }
.kipup-workbench .kipup-tabs .lm-TabBar-tabLabel { overflow: visible; text-overflow: clip; text-align: center; }
.kipup-workbench .kipup-status { text-align: right; }
.kipup-workbench .kipup-right .widget-html-content { line-height: 1.4; padding: 2px 0; }
.kipup-workbench .kipup-key { font-size: 11px; text-align: center; color: #333; line-height: 16px; }
.kipup-workbench .kipup-metrics-body { font-size: 12px; line-height: 1.35; padding: 4px 8px; }
.kipup-workbench .kipup-metrics table { border-collapse: collapse; margin: 4px 0 6px 0; }
.kipup-workbench .kipup-metrics th, .kipup-workbench .kipup-metrics td { padding: 1px 8px 1px 0;
  text-align: left; vertical-align: top; font-weight: normal; }
.kipup-workbench .kipup-summary th { white-space: nowrap; color: #555; }
.kipup-workbench .kipup-ratios tr:first-child th { color: #555; font-size: 11px; border-bottom: 1px solid #ccc; }
.kipup-workbench .kipup-ratios td { text-align: right; font-family: monospace; }
.kipup-workbench .kipup-over { color: #c1121f; font-weight: bold; }
.kipup-workbench .kipup-near { color: #d97706; }
.kipup-workbench .kipup-note { font-size: 11px; color: #666; }
.kipup-workbench .kipup-wrap, .kipup-workbench .kipup-message { overflow-wrap: break-word; word-break: normal; }
.kipup-workbench .kipup-message pre { white-space: pre-wrap; word-break: normal; }
</style>"""


class ControlsMixin:
    """The control widgets and the layout."""

    # ----- controls --------------------------------------------------------------------------
    def _build_controls(self) -> None:
        tr = self.trick
        # Solve tab
        self.solve_button = W.Button(description="Solve", button_style="primary", icon="play-circle")
        self.cancel_button = W.Button(description="Cancel", button_style="warning", icon="stop-circle")
        self.auto_toggle = W.ToggleButton(value=self._auto_initial, description="auto re-solve", icon="refresh")
        self.time_limit_box = W.BoundedFloatText(value=float(self.time_limit or tr.solver.time_limit), min=0.5,
                                                 max=3600.0, description="time limit (s)",
                                                 style={"description_width": "initial"})
        self.path_box = W.Text(value=str(self.path or ""), placeholder="trick file path (.yaml)",
                               description="file", layout=W.Layout(width="100%"))
        self.save_button = W.Button(description="Save", icon="save")
        self.solve_button.add_class("kipup-solve")
        self.cancel_button.add_class("kipup-cancel")
        self.auto_toggle.add_class("kipup-auto")
        self.save_button.add_class("kipup-save")
        self.solve_button.on_click(lambda _: self.solve())
        self.cancel_button.on_click(lambda _: self.cancel())
        self.save_button.on_click(lambda _: self._save_clicked())
        self.time_limit_box.observe(lambda ch: setattr(self, "time_limit", float(ch["new"])), names="value")
        self.auto_toggle.observe(self._auto_changed, names="value")
        solve_tab = W.VBox([W.HBox([self.solve_button, self.cancel_button]), self.auto_toggle, self.time_limit_box,
                            self.path_box, self.save_button])

        # Keyframe tab
        self.keyframe_pick = W.Dropdown(options=self._keyframe_options(), description="keyframe")
        self.keyframe_pick.add_class("kipup-keyframe")
        self.keyframe_pick.observe(self._keyframe_picked, names="value")
        self.kf_weight = W.BoundedFloatText(value=1.0, min=0.0, max=1e6, description="weight")
        self.kf_time = W.BoundedFloatText(value=0.0, min=0.0, max=1e3, step=0.05, description="time")
        self.kf_info = W.HTML()
        self.base_mode = W.ToggleButtons(options=["move", "pitch"], value="move", description="base handle",
                                         style={"button_width": "70px"})
        self.kf_weight.observe(self._kf_weight_changed, names="value")
        self.kf_time.observe(self._kf_time_changed, names="value")
        self.add_key_button = W.Button(description="+ keyframe at playhead", layout=W.Layout(width="200px"))
        self.remove_key_button = W.Button(description="- remove keyframe", layout=W.Layout(width="170px"))
        self.add_key_button.add_class("kipup-add-keyframe")
        self.remove_key_button.add_class("kipup-remove-keyframe")
        self.add_key_button.on_click(lambda _: self.add_keyframe_at_playhead())
        self.remove_key_button.on_click(lambda _: self.remove_selected_keyframe())
        key_tab = W.VBox([self.keyframe_pick, self.kf_weight, self.kf_time, self.base_mode, self.kf_info])

        # Goals tab
        rot = tr.goals.rotation
        self.rotation_on = W.Checkbox(value=rot is not None, description="rotation goal", indent=False)
        self.rotation_turns = W.FloatText(value=(rot or 0.0) / (2 * math.pi), step=0.05, description="turns")
        self.rotation_deg = W.FloatText(value=math.degrees(rot or 0.0), step=5.0, description="deg")
        self.rotation_on.observe(self._rotation_changed, names="value")
        self.rotation_turns.observe(self._rotation_changed, names="value")
        self.rotation_deg.observe(self._rotation_changed, names="value")
        self.box_heights: dict[str, W.FloatText] = {}
        for b in tr.terrain.boxes:
            w = W.BoundedFloatText(value=b.height, min=0.0, max=10.0, step=0.02, description=f"{b.name} h (m)",
                                   style={"description_width": "initial"})
            w.observe(lambda ch, name=b.name: self._box_changed(name, ch["new"]), names="value")
            self.box_heights[b.name] = w
        self.target_inputs: dict[str, tuple[W.FloatText, W.FloatText]] = {}
        for t in tr.terrain.targets:
            wx = W.FloatText(value=t.x, step=0.02, description=f"{t.name} x (m)", style={"description_width": "initial"})
            wz = W.FloatText(value=t.z, step=0.02, description=f"{t.name} z (m)", style={"description_width": "initial"})
            wx.observe(lambda ch, name=t.name: self._target_changed(name, "x", ch["new"]), names="value")
            wz.observe(lambda ch, name=t.name: self._target_changed(name, "z", ch["new"]), names="value")
            self.target_inputs[t.name] = (wx, wz)
        lx = tr.goals.landing_x
        self.landing_on = W.Checkbox(value=lx is not None, description="landing range", indent=False)
        self.landing_min = W.FloatText(value=(lx or (0.0, 0.0))[0], step=0.02, description="x min (m)")
        self.landing_max = W.FloatText(value=(lx or (0.0, 0.0))[1], step=0.02, description="x max (m)")
        for w in (self.landing_on, self.landing_min, self.landing_max):
            w.observe(self._landing_changed, names="value")
        goals_tab = W.VBox([self.rotation_on, W.HBox([self.rotation_turns]), W.HBox([self.rotation_deg]),
                            *self.box_heights.values(),
                            *[w for pair in self.target_inputs.values() for w in pair],
                            self.landing_on, self.landing_min, self.landing_max])

        # Weights tab: one log slider per Costs field (a weight of 0 is "off")
        self.weight_sliders: dict[str, W.FloatLogSlider] = {}
        self.weight_on: dict[str, W.Checkbox] = {}
        rows = []
        for name in Costs.names():
            value = float(getattr(tr.costs, name))
            slider = W.FloatLogSlider(value=value if value > 0 else 1.0, base=10, min=-3, max=3, step=0.05,
                                      description=name, continuous_update=False, readout_format=".3g",
                                      style={"description_width": "125px"},
                                      layout=W.Layout(width="auto", flex="1 1 auto", min_width="0"))
            on = W.Checkbox(value=value > 0, indent=False, layout=W.Layout(width="30px"))
            slider.observe(lambda ch, n=name: self._weight_changed(n), names="value")
            on.observe(lambda ch, n=name: self._weight_changed(n), names="value")
            slider.add_class(f"kipup-weight-{name}")
            self.weight_sliders[name] = slider
            self.weight_on[name] = on
            rows.append(W.HBox([on, slider], layout=W.Layout(width="100%")))
        weights_tab = W.VBox(rows)

        # Phase tab
        self.phase_pick = W.Dropdown(options=[p.name for p in tr.phases], description="phase")
        self.ph_duration = W.BoundedFloatText(min=MIN_PHASE_DURATION, max=100.0, step=0.02, description="duration (s)",
                                              style={"description_width": "initial"})
        self.ph_free = W.Checkbox(description="free duration", indent=False)
        self.ph_min = W.BoundedFloatText(min=0.0, max=100.0, step=0.02, description="min (s)")
        self.ph_max = W.BoundedFloatText(min=0.0, max=100.0, step=0.02, description="max (s)")
        self.ph_knots = W.BoundedIntText(min=1, max=400, description="knots")
        self.ph_contacts = W.SelectMultiple(options=self._contact_capable, description="contacts", rows=4)
        self.ph_surface = W.Dropdown(options=tr.terrain.surface_names(), description="surface")
        self.phase_pick.observe(lambda _: self._show_phase(), names="value")
        for w in (self.ph_duration, self.ph_free, self.ph_min, self.ph_max, self.ph_knots, self.ph_contacts,
                  self.ph_surface):
            w.observe(self._phase_widget_changed, names="value")
        phase_tab = W.VBox([self.phase_pick, self.ph_duration, self.ph_free, self.ph_min, self.ph_max,
                            self.ph_knots, self.ph_contacts, self.ph_surface])
        self._show_phase()

        record_tab = self._build_record_tab()    # wb_record
        verify_tab = self._build_verify_tab()    # wb_verify
        self.tabs = W.Tab(children=[solve_tab, key_tab, goals_tab, weights_tab, phase_tab, record_tab, verify_tab])
        self.tabs.add_class("kipup-tabs")
        for i, title in enumerate(TAB_TITLES):
            self.tabs.set_title(i, title)

        # playback
        self.play_button = W.Button(description="Play", icon="play", layout=W.Layout(width="80px"))
        self.pause_button = W.Button(description="Pause", icon="pause", layout=W.Layout(width="80px"))
        self.stop_button = W.Button(description="Stop", icon="stop", layout=W.Layout(width="80px"))
        self.speed = W.FloatLogSlider(value=1.0, base=10, min=-1.5, max=0.5, step=0.05, description="speed",
                                      readout_format=".2f", layout=W.Layout(width="220px"))
        self.loop_box = W.Checkbox(value=True, description="loop", indent=False, layout=W.Layout(width="70px"))
        for b, cls in ((self.play_button, "kipup-play"), (self.pause_button, "kipup-pause"),
                       (self.stop_button, "kipup-stop")):
            b.add_class(cls)
        self.play_button.on_click(lambda _: self.play())
        self.pause_button.on_click(lambda _: self.pause())
        self.stop_button.on_click(lambda _: self.stop())
        self.speed.observe(self._speed_changed, names="value")
        self.loop_box.observe(self._loop_changed, names="value")
        self.scrubber = W.FloatSlider(value=0.0, min=0.0, max=1.0, step=0.001, description="t (s)",
                                      readout_format=".3f", continuous_update=True,
                                      layout=W.Layout(width=f"{self._width}px"))
        self.scrubber.add_class("kipup-scrubber")
        self.scrubber.observe(self._scrubbed, names="value")

        # status and messages
        self.status = W.HTML(value="")
        self.status.add_class("kipup-status")
        self.status.add_class("kipup-state-idle")
        self.message = W.HTML(value="", layout=W.Layout(max_height="220px", overflow="auto"))
        self.message.add_class("kipup-message")
        self.state_json = W.HTML(value="{}", layout=W.Layout(display="none"))
        self.state_json.add_class("kipup-state")
        self.handles_json = W.HTML(value="{}", layout=W.Layout(display="none"))
        self.handles_json.add_class("kipup-handles")

    def _assemble(self) -> None:
        title = W.HTML(f"<b>kipup workbench</b> &nbsp; trick <code>{self.trick.name}</code> on robot "
                       f"<code>{self.robot.name}</code>", layout=W.Layout(flex="0 0 auto", margin="0 16px 0 0"))
        self.status.layout = W.Layout(flex="1 1 0%", min_width="0")
        header = W.HBox([title, self.status], layout=W.Layout(justify_content="space-between", width="100%",
                                                              align_items="flex-start"))
        playbar = W.HBox([self.play_button, self.pause_button, self.stop_button, self.speed, self.loop_box])
        # the view keeps its width; the controls wrap below it in a narrow window (never over it)
        left = W.VBox([self.renderer, playbar, self.scrubber],
                      layout=W.Layout(min_width=f"{self._width}px", flex="0 0 auto"))
        right = W.VBox([self.tabs, self.message], layout=W.Layout(width=f"{CONTROLS_WIDTH}px", flex="0 0 auto",
                                                                  margin="0 0 0 10px"))
        right.add_class("kipup-right")
        timeline_bar = W.HBox([self._keyframe_mirror_widget(), self.add_key_button, self.remove_key_button])
        # plot cells in a grid: as many a row as fit at PLOT_MIN_WIDTH px, at most three
        grid = W.GridBox(self._plot_cells, layout=W.Layout(
            width="100%", grid_gap="6px 14px",
            grid_template_columns=f"repeat(auto-fill, minmax(max({PLOT_MIN_WIDTH}px, calc(33.3% - 14px)), 1fr))"))
        plots = W.VBox([W.HBox([self.joint_pick, self.contact_pick]), grid])
        plots.add_class("kipup-plots")
        style = W.HTML(WORKBENCH_CSS, layout=W.Layout(display="none"))
        self.widget = W.VBox([header, W.HBox([left, right], layout=W.Layout(flex_flow="row wrap")),
                              timeline_bar, self.timeline, plots,
                              self.state_json, self.handles_json, style])
        self.widget.add_class("kipup-workbench")
        self._publish_state()

    def _keyframe_mirror_widget(self) -> W.Widget:
        """The keyframe selector mirrored above the timeline (linked to the Keyframe tab's)."""
        mirror = W.Dropdown(options=self.keyframe_pick.options, description="keyframe")
        W.link((self.keyframe_pick, "options"), (mirror, "options"))
        W.link((self.keyframe_pick, "value"), (mirror, "value"))
        self._keyframe_mirror = mirror
        return mirror
