"""Verification from the workbench: the Verify tab, the simulated ghost and the robustness sweep.

:meth:`VerifyMixin.simulate` runs :func:`kipup.core.tracking.simulate` on the motion on screen in a
thread of its own. The simulated robot is then drawn as a violet wireframe over the planned robot
(the *sim ghost*; the keyframe's ghost is hidden meanwhile): a Python-posed copy at the playhead
while paused, and a copy animated by the same ``AnimationClip`` as the planned robot during
playback (position and quaternion tracks named ``ks_LINK``), so both play under one playhead.
Past the planned end the planned robot holds its last pose while the simulation goes on (its
``duration_after``, 1 s by default). The verdict is written in words beside it.
:meth:`VerifyMixin.robustness` runs a short Monte Carlo sweep (:func:`kipup.core.sweep.run_sweep`,
a process pool) and shows its summary table.

A simulation belongs to the motion it was run on: a new motion hides its ghost and marks the
verdict as out of date.

A mixin of :class:`kipup.widgets.workbench.Workbench`; it works on the workbench's attributes.
"""
from __future__ import annotations

import math
from typing import Any

import ipywidgets as W
import numpy as np
import pythreejs as three

from kipup.core.kinematics import link_poses
from kipup.core.motion import Motion
from kipup.core.sim_result import SimResult
from kipup.core.sweep import SweepResult
from kipup.core.robot import Robot

from .robot_view import build_link_meshes, pitch_quaternion
from .wb_common import BackgroundTask, _html, _safe_name, run_in_thread

SIM_GHOST_COLOR = "#7b2cbf"     #: the simulated robot: a violet wireframe drawn over everything
SIM_GHOST_SEGMENTS = (4, 1)     #: its capsules' lathe segments (around, per end cap): a sparse cage
SWEEP_SAMPLES = 8               #: default number of samples of the Robustness sweep
SIM_STARTS = [("from the start", "start"), ("from takeoff", "takeoff")]


def sim_q_at(sim: SimResult, motion: Motion, times: np.ndarray) -> np.ndarray:
    """Simulated coordinates at motion times ``times`` (s), linear between the recorded steps:
    the planned state before the simulation starts (it starts from the plan), the last recorded
    state after it ends (e.g. after a fall)."""
    times = np.atleast_1d(np.asarray(times, dtype=float))
    out = np.empty((times.size, sim.q.shape[1]))
    for c in range(sim.q.shape[1]):
        out[:, c] = np.interp(times, sim.t, sim.q[:, c])
    before = times < sim.t[0]
    if np.any(before):
        out[before] = motion.sample(np.clip(times[before], motion.t0, motion.tend))["q"]
    return out


def takeoff_time(motion: Motion) -> float:
    """Start of the first flight phase (s); ValueError when the motion has no flight."""
    for ph in motion.phases:
        if not ph.contacts:
            return float(ph.start)
    raise ValueError("start: this motion has no flight phase, so there is no takeoff to start from")


def verdict_html(sim: SimResult, motion: Motion) -> str:
    """The landing verdict of ``sim`` in words: landed on its feet, pitch error at touchdown,
    standing still after the planned end, the largest tracking error of every joint."""
    v = sim.verdict
    feet = list(motion.phases[-1].contacts)
    after = float(sim.settings.get("duration_after", math.nan))
    yes_no = lambda b: "yes" if b else "no"  # noqa: E731
    if not v.touched:
        landed = "no: it never touched down after the flight" if any(not p.contacts for p in motion.phases) \
            else "no flight in this motion"
    elif v.other_contacts:
        landed = f"no: touched {', '.join(v.touched)}; {', '.join(v.other_contacts)} " \
                 f"{'is' if len(v.other_contacts) == 1 else 'are'} not among the landing contacts " \
                 f"({', '.join(feet) or 'none'})"
    else:
        landed = f"yes: touched {', '.join(v.touched)}"
    if math.isfinite(v.pitch_error_at_touchdown):
        pitch = f"{v.pitch_error_at_touchdown:+.3f} rad ({math.degrees(v.pitch_error_at_touchdown):+.1f} deg)"
    else:
        pitch = "n/a (no touchdown)"
    if v.diverged:
        still = f"no: it fell or diverged at t = {v.diverged_time:.3f} s ({_html(v.reason)})"
    else:
        still = (f"{yes_no(v.stands_still)} (COM speed {v.com_speed_end:.3f} m/s, pitch rate "
                 f"{v.pitch_rate_end:.3f} rad/s at the end)")
    rows = [("success", f"<b>{yes_no(v.success)}</b>"), ("landed on its feet", _html(landed)),
            ("pitch error at touchdown", pitch),
            (f"standing still {after:g} s after the planned end" if math.isfinite(after) else "standing still",
             still)]
    if math.isfinite(v.touchdown_time_error):
        rows.insert(3, ("touchdown time error", f"{v.touchdown_time_error:+.3f} s"))
    if v.joint_limit_excess:
        rows.append(("joint limits left", _html(", ".join(v.joint_limit_excess))))
    head = "".join(f"<tr><td>{a}</td><td>{b}</td></tr>" for a, b in rows)
    joints = [e for e in sim.errors if e.name in sim.joint_names]
    errs = "".join(f"<tr><td>{_html(e.name)}</td><td>{e.max:.3f}</td><td>{e.rms:.3f}</td></tr>" for e in joints)
    base = ", ".join(f"{e.name} {e.max:.3f} {'m' if e.name in ('base_x', 'base_z') else 'rad'}"
                     for e in sim.errors if e.name not in sim.joint_names)
    start = float(sim.settings.get("start_time", sim.t[0] if sim.t.size else 0.0))
    return (f"<div class='kipup-wrap'><table class='kipup-table'>{head}</table>"
            f"<b>largest tracking error per joint</b> (simulated - planned, rad)"
            f"<table class='kipup-table'><tr><th>joint</th><th>max</th><th>RMS</th></tr>{errs}</table>"
            f"<small>base: {base}. Simulated from t = {start:.3f} s, feedforward + joint PD"
            f"{', LQR in flight' if sim.settings.get('lqr') else ''}"
            f"{', balance QP after touchdown' if sim.settings.get('balance') else ''}.</small></div>")


def sweep_html(sweep: SweepResult) -> str:
    """The summary table of a sweep (success rate, error quantiles), as HTML."""
    rows = sweep.summary_rows()
    body = "".join(f"<tr><td>{_html(a)}</td><td>{_html(b)}</td></tr>" for a, b in rows[1:])
    return (f"<div class='kipup-wrap'><table class='kipup-table'>{body}</table>"
            f"<small>seed {sweep.seed}, {sweep.backend} pool; model and execution errors drawn by "
            f"kipup.core.sweep</small></div>")


class VerifyMixin:
    """The Verify tab: Simulate with its ghost and verdict, Robustness with its summary."""

    # ----- scene objects (called from _build_scene) -------------------------------------------
    def _build_sim_meshes(self) -> None:
        # A wireframe, not a translucent body: a translucent violet over the orange plan mixes into
        # brown where the two coincide, while lines drawn over the plan (no depth test, drawn last)
        # keep both readable: the solid robot is the plan, the violet cage the simulation.
        mat = three.MeshBasicMaterial(color=SIM_GHOST_COLOR, wireframe=True, depthTest=False, depthWrite=False)
        self._sim_material = mat
        seg, arc = SIM_GHOST_SEGMENTS
        self._sim_static = build_link_meshes(self.robot, show_points=False, group_name=lambda n: f"sim:{n}",
                                             material=lambda kind, side: mat, scale=self._scale,
                                             segments=seg, arc_segments=arc)
        self.sim_root = three.Group(name="sim-ghost", visible=False,
                                    children=tuple(self._sim_static.groups.values()))
        self._sim_player = build_link_meshes(self.robot, show_points=False,
                                             group_name=lambda n: f"ks_{_safe_name(n)}",
                                             material=lambda kind, side: mat, scale=self._scale,
                                             segments=seg, arc_segments=arc)
        for mesh in self._sim_static.capsules + self._sim_player.capsules:
            mesh.renderOrder = 15   # after the robots and the terrain
        self.sim_player_root = three.Group(name="ks_sim", visible=False,
                                           children=tuple(self._sim_player.groups.values()))
        self.sim: SimResult | None = None
        self.sim_motion: Motion | None = None     # the motion ``sim`` was run on
        self.sweep: SweepResult | None = None
        self.sweep_motion: Motion | None = None
        self.sim_task: BackgroundTask | None = None
        self.sweep_task: BackgroundTask | None = None

    # ----- the tab -----------------------------------------------------------------------------
    def _build_verify_tab(self) -> W.Widget:
        self.sim_start = W.ToggleButtons(options=SIM_STARTS, value="start", description="simulate",
                                         style={"button_width": "130px", "description_width": "60px"})
        self.sim_button = W.Button(description="Simulate", icon="cogs", button_style="info")
        self.sim_button.add_class("kipup-simulate")
        self.sim_ghost_box = W.Checkbox(value=True, description="show the simulated ghost", indent=False)
        self.sim_ghost_box.observe(lambda _: self._sim_visibility_changed(), names="value")
        self.verdict = W.HTML(value="<i>not simulated yet</i>")
        self.verdict.add_class("kipup-verdict")
        self.sweep_n = W.BoundedIntText(value=SWEEP_SAMPLES, min=2, max=500, description="samples",
                                        style={"description_width": "60px"}, layout=W.Layout(width="140px"))
        self.sweep_n.add_class("kipup-sweep-samples")
        self.sweep_button = W.Button(description="Robustness", icon="random")
        self.sweep_button.add_class("kipup-robustness")
        self.sweep_summary = W.HTML(value="")
        self.sweep_summary.add_class("kipup-sweep")
        self.sim_button.on_click(lambda _: self._verify_clicked(self.simulate))
        self.sweep_button.on_click(lambda _: self._verify_clicked(
            lambda **kw: self.robustness(n=int(self.sweep_n.value), **kw)))
        note = W.HTML("<small>violet cage: the simulated robot; solid: the plan. The keyframe's ghost and "
                      "handles are hidden while the simulated ghost is shown.</small>")
        note.add_class("kipup-wrap")
        return W.VBox([self.sim_start, W.HBox([self.sim_button, self.sim_ghost_box]), note, self.verdict,
                       W.HTML("<b>Robustness</b>: a short sweep over model and execution errors"),
                       W.HBox([self.sweep_n, self.sweep_button]), self.sweep_summary])

    def _verify_clicked(self, action: Any) -> None:
        try:
            action(start=self.sim_start.value)
        except (ValueError, RuntimeError) as exc:
            self._show_message(f"<b>Not started</b>: {_html(str(exc))}")

    def _sim_kwargs(self, motion: Motion, start: str, duration_after: float) -> dict[str, Any]:
        if start not in ("start", "takeoff"):
            raise ValueError(f"start must be 'start' or 'takeoff'; got {start!r}")
        kw: dict[str, Any] = {"duration_after": float(duration_after)}
        if any(not p.contacts for p in motion.phases):
            kw["lqr"] = True  # the best flight controller there is: TV-LQR around the plan
        if start == "takeoff":
            kw["start_time"] = takeoff_time(motion)
        return kw

    # ----- simulate -----------------------------------------------------------------------------
    def simulate(self, start: str = "start", duration_after: float = 1.0) -> BackgroundTask:
        """Simulate the motion on screen in closed loop in the background
        (:func:`kipup.core.tracking.simulate` on the trick's terrain), then draw the simulated
        robot as a ghost in the same playback clip and write the verdict.

        start: 'start' (from the motion's first instant) or 'takeoff' (from the planned state at
        the start of the first flight). duration_after (s): how long to keep simulating after the
        planned end. Returns the :class:`BackgroundTask` (its ``result`` is the SimResult).
        Raises ``ValueError`` at once when there is no motion or an argument is bad.
        """
        motion = self.motion
        if motion is None:
            raise ValueError("there is no motion to simulate yet: solve the trick first")
        if self.sim_task is not None and not self.sim_task.done:
            raise RuntimeError("a simulation is running; wait for it to finish")
        kw = self._sim_kwargs(motion, start, duration_after)
        with self._lock:
            terrain = self.trick.copy().terrain
            name = self.trick.name
        robot, count = self.robot, self.motion_count
        task = BackgroundTask("simulate", f"simulating motion #{count} " +
                              ("from takeoff" if start == "takeoff" else "from the start"))
        self.sim_task = task
        self.sim_button.disabled = True
        self.verdict.value = f"<i>{_html(task.describe)} ...</i>"
        if not self.busy():
            self._set_status(task.describe, busy=False)

        def work() -> SimResult:
            from kipup.core.tracking import simulate

            return simulate(motion, robot, terrain, trick_name=name, **kw)

        run_in_thread(task, work, lambda t: self._sim_done(t, motion, count), "kipup-workbench-simulate")
        return task

    def _sim_done(self, task: BackgroundTask, motion: Motion, count: int) -> None:
        self.sim_button.disabled = False
        if not task.ok:
            self.verdict.value = f"<b>The simulation could not run</b>: {_html(task.error)}"
            if not self.busy():
                self._set_status(f"simulation failed: {task.error}", busy=False)
            return
        sim: SimResult = task.result
        with self._lock:
            if motion is not self.motion:   # a newer motion arrived meanwhile: keep the verdict, no ghost
                self.sim, self.sim_motion = sim, motion
                self.verdict.value = self._stale_note(count) + verdict_html(sim, motion)
                return
            self.sim, self.sim_motion = sim, motion
            self.verdict.value = f"<b>motion #{count}</b> in closed loop:" + verdict_html(sim, motion)
            self._refresh_time_range()
            self._build_clip(motion)
            self._sim_visibility_changed()
            self._apply_playhead(self.playhead)
        if not self.busy():
            v = sim.verdict
            self._set_status(f"simulated motion #{count} in {task.elapsed:.1f} s: "
                             f"{'landed and stood' if v.success else 'did not land cleanly'}", busy=False)

    @staticmethod
    def _stale_note(count: int) -> str:
        return (f"<b>for motion #{count}, which is no longer on screen</b> (simulate again for the "
                "current one):")

    def current_sim(self) -> SimResult | None:
        """The simulation of the motion on screen, or None (none yet, or it was of an older motion)."""
        return self.sim if self.sim is not None and self.sim_motion is self.motion else None

    def _shown_sim(self) -> SimResult | None:
        sim = self.current_sim()
        return sim if sim is not None and self.sim_ghost_box.value else None

    def clear_simulation(self) -> None:
        """Forget the simulation: hide its ghost, take its tracks out of the clip."""
        with self._lock:
            had = self.sim is not None
            self.sim = self.sim_motion = None
            self.verdict.value = "<i>not simulated yet</i>"
            self.sim_root.visible = self.sim_player_root.visible = False
            self._update_ghost_visibility()
            if had and self.motion is not None:
                self._refresh_time_range()
                self._build_clip(self.motion)
                self._apply_playhead(self.playhead)

    def _sim_visibility_changed(self) -> None:
        show = self._shown_sim() is not None
        self.sim_root.visible = show
        self.sim_player_root.visible = show
        self._update_ghost_visibility()
        if self.motion is not None and self.sim is not None and self.sim_motion is self.motion:
            # the clip carries the ghost's tracks only while it is shown
            names = {tr.name for tr in self.clip.tracks} if self.clip is not None else set()
            has = any(n.startswith("ks_") for n in names)
            if has != show:
                self._refresh_time_range()   # the view runs on to the simulation's end, or not
                self._build_clip(self.motion)

    def _motion_replaced(self, count: int) -> None:
        """A new motion is on screen: an older simulation's ghost goes, its verdict says so."""
        if self.sim is not None and self.sim_motion is not self.motion:
            self.sim_root.visible = self.sim_player_root.visible = False
            self._update_ghost_visibility()
            if not self.verdict.value.startswith("<b>for motion"):
                self.verdict.value = self._stale_note(count) + self.verdict.value.split(":", 1)[-1]
        if self.sweep is not None and self.sweep_motion is not self.motion and \
                not self.sweep_summary.value.startswith("<b>for motion"):
            self.sweep_summary.value = "<b>for an older motion</b>: " + self.sweep_summary.value

    def _view_end(self) -> float:
        """The last instant (s) the view shows: the motion's end, or later while a simulation shown
        with it runs on."""
        m = self.motion
        if m is None:
            return self.trick.nominal_duration
        sim = self._shown_sim()
        return max(m.tend, float(sim.t[-1])) if sim is not None and sim.t.size else m.tend

    def _pose_sim_ghost(self, t: float) -> None:
        sim = self._shown_sim()
        if sim is None or self.motion is None or not sim.t.size:
            return
        q = sim_q_at(sim, self.motion, np.array([t]))[0]
        if np.all(np.isfinite(q)):
            self._sim_static.set_pose(self.robot, q)

    def _sim_tracks(self, motion: Motion, times: np.ndarray) -> list:
        """Position and quaternion tracks of the animated sim ghost at clip times ``times`` (s from
        the motion's start); [] when no simulation is shown."""
        sim = self._shown_sim()
        if sim is None or not sim.t.size:
            return []
        robot: Robot = self.robot
        qs = sim_q_at(sim, motion, motion.t0 + times)
        nl, n = len(robot.links), len(times)
        pos = np.zeros((nl, n, 3), dtype=np.float32)
        quat = np.zeros((nl, n, 4), dtype=np.float32)
        for k, q in enumerate(qs):
            for i, (x, z, th) in enumerate(link_poses(robot, q)):
                pos[i, k] = (x, z, 0.0)
                quat[i, k] = pitch_quaternion(float(th))
        tt = times.astype(np.float32)
        tracks = []
        for i, link in enumerate(robot.links):
            g = self._sim_player.groups[link.name].name
            tracks.append(three.VectorKeyframeTrack(name=f"{g}.position", times=tt, values=pos[i].reshape(-1)))
            tracks.append(three.QuaternionKeyframeTrack(name=f"{g}.quaternion", times=tt,
                                                        values=quat[i].reshape(-1)))
        return tracks

    # ----- robustness --------------------------------------------------------------------------
    def robustness(self, n: int = SWEEP_SAMPLES, start: str = "start", duration_after: float = 1.0, *,
                   seed: int = 0, workers: int = 2) -> BackgroundTask:
        """Run a short Monte Carlo sweep (:func:`kipup.core.sweep.run_sweep`, ``n`` samples of model
        and execution errors, ``workers`` processes) of the motion on screen in the background and
        show its summary (success rate, error quantiles). ``start``/``duration_after`` as in
        :meth:`simulate`. Returns the :class:`BackgroundTask` (its ``result`` is the SweepResult)."""
        motion = self.motion
        if motion is None:
            raise ValueError("there is no motion to sweep yet: solve the trick first")
        if isinstance(n, bool) or not isinstance(n, int) or n < 1:
            raise ValueError(f"n must be a whole number of samples >= 1; got {n!r}")
        if self.sweep_task is not None and not self.sweep_task.done:
            raise RuntimeError("a robustness sweep is running; wait for it to finish")
        kw = self._sim_kwargs(motion, start, duration_after)
        with self._lock:
            terrain = self.trick.copy().terrain
        robot, count = self.robot, self.motion_count
        task = BackgroundTask("sweep", f"robustness sweep of motion #{count}: {n} samples on {workers} processes")
        self.sweep_task = task
        self.sweep_button.disabled = True
        self.sweep_summary.value = f"<i>{_html(task.describe)} ...</i>"
        if not self.busy():
            self._set_status(task.describe, busy=False)

        def work() -> SweepResult:
            from kipup.core.sweep import run_sweep

            return run_sweep(motion, robot, terrain, n=n, seed=seed, workers=workers, sim_kwargs=kw)

        run_in_thread(task, work, lambda t: self._sweep_done(t, motion, count), "kipup-workbench-sweep")
        return task

    def _sweep_done(self, task: BackgroundTask, motion: Motion, count: int) -> None:
        self.sweep_button.disabled = False
        if not task.ok:
            self.sweep_summary.value = f"<b>The sweep could not run</b>: {_html(task.error)}"
            return
        self.sweep, self.sweep_motion = task.result, motion
        head = f"<b>motion #{count}</b>, {task.result.n} samples in {task.elapsed:.1f} s:"
        if motion is not self.motion:
            head = "<b>for an older motion</b>: " + head
        self.sweep_summary.value = head + sweep_html(task.result)
        if not self.busy():
            self._set_status(f"robustness of motion #{count}: success {100 * task.result.success_rate:.0f} % "
                             f"of {task.result.n} samples", busy=False)
