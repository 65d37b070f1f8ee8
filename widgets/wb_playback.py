"""The motion on screen: the playback clip, the Python-posed playhead, play / pause / stop.

A mixin of :class:`kipup.widgets.workbench.Workbench`; it works on the workbench's attributes.
"""
from __future__ import annotations

import math
import threading
import time

import numpy as np
import pythreejs as three

from kipup.core.ik import point_positions
from kipup.core.kinematics import center_of_mass, link_poses
from kipup.core.motion import Motion
from .robot_view import pitch_quaternion, to_three
from .wb_common import TICK_INTERVAL, CLIP_RATE, COM_PATH_SAMPLES, _quat_y_to, _contact_mask_at


class PlaybackMixin:
    """The motion on screen and its playback."""

    # ----- a new motion on screen ------------------------------------------------------------
    def _show_new_motion(self, motion: Motion) -> None:
        t0 = time.perf_counter()
        self.motion = motion
        self.motion_count += 1
        self._motion_replaced(self.motion_count)   # an older simulation's ghost goes (wb_verify)
        self._refresh_time_range()
        self._update_com_path(motion)
        self._frame_for_motion(motion)
        t1 = time.perf_counter()
        self._build_clip(motion)
        t2 = time.perf_counter()
        self._refresh_plots()
        t3 = time.perf_counter()
        if self._drag is None:
            self._ghost_q = None
            self._refresh_ghost()
        self._apply_playhead(min(self.playhead, motion.tend))
        self.timings["clip_ms"] = (t2 - t1) * 1e3
        self.timings["plots_ms"] = (t3 - t2) * 1e3
        self.timings["show_ms"] = (time.perf_counter() - t0) * 1e3
        self._publish_state()

    def _refresh_time_range(self) -> None:
        T = self._view_end()   # the motion's end, or a shown simulation's if it runs on
        self._programmatic += 1
        try:
            self.scrubber.max = max(T, 1e-3)
        finally:
            self._programmatic -= 1
        if self.scrubber.value > T:
            self._set_scrubber(T)
        self._px.min, self._px.max = 0.0, max(T, 1e-3)
        self._set_time_ticks()
        self._refresh_timeline()   # the same range, the phases at their solved times

    def _update_com_path(self, motion: Motion) -> None:
        ts = np.linspace(motion.t0, motion.tend, COM_PATH_SAMPLES)
        qs = motion.sample(ts)["q"]
        pts = np.zeros((COM_PATH_SAMPLES, 3), dtype=np.float32)
        for k, q in enumerate(qs):
            c = np.asarray(center_of_mass(self.robot, q), dtype=float).reshape(-1)
            pts[k] = (c[0], c[1], 0.0)
        self._com_path_attr.array = pts
        self.com_path.visible = True

    def _build_clip(self, motion: Motion) -> None:
        """The playback clip: per link group a position and a quaternion track at CLIP_RATE, plus the
        COM, lit contact markers and force arrows (scale tracks); with a simulation shown, the sim
        ghost's tracks too, and the clip lasts until the simulation ends (the planned robot holds
        its last pose meanwhile)."""
        robot = self.robot
        n = max(2, int(math.ceil(motion.duration * CLIP_RATE)) + 1)
        times = np.linspace(0.0, motion.duration, n)
        qs = motion.sample(motion.t0 + times)["q"]
        forces = motion.sample_forces(motion.t0 + times) if motion.contact_points else None
        nl = len(robot.links)
        pos = np.zeros((nl, n, 3), dtype=np.float32)
        quat = np.zeros((nl, n, 4), dtype=np.float32)
        com = np.zeros((n, 3), dtype=np.float32)
        for k, q in enumerate(qs):
            for i, (x, z, th) in enumerate(link_poses(robot, q)):
                pos[i, k] = (x, z, 0.0)
                quat[i, k] = pitch_quaternion(float(th))
            c = np.asarray(center_of_mass(robot, q), dtype=float).reshape(-1)
            com[k] = (c[0], c[1], 0.0)
        tracks = []
        for i, link in enumerate(robot.links):
            gname = self._player.groups[link.name].name
            tracks.append(three.VectorKeyframeTrack(name=f"{gname}.position", times=times.astype(np.float32),
                                                    values=pos[i].reshape(-1)))
            tracks.append(three.QuaternionKeyframeTrack(name=f"{gname}.quaternion", times=times.astype(np.float32),
                                                        values=quat[i].reshape(-1)))
        tracks.append(three.VectorKeyframeTrack(name="kp_com.position", times=times.astype(np.float32),
                                                values=com.reshape(-1)))
        mask = _contact_mask_at(motion, motion.t0 + times)
        tiny = 1e-4
        for name in self._contact_capable:
            ppos = np.zeros((n, 3), dtype=np.float32)
            lit_scale = np.full((n, 3), tiny, dtype=np.float32)
            arrow_scale = np.full((n, 3), tiny, dtype=np.float32)
            arrow_quat = np.tile(np.array([0, 0, 0, 1], dtype=np.float32), (n, 1))
            c = motion.contact_points.index(name) if name in motion.contact_points else None
            for k, q in enumerate(qs):
                p = point_positions(robot, q, [name])[name]
                ppos[k] = (p[0], p[1], 0.0)
                if c is not None and mask[k, c]:
                    lit_scale[k] = 1.0
                    f = forces[k, c]
                    length = float(np.hypot(*f)) * self._force_scale()
                    if length > 1e-3:
                        arrow_scale[k] = (1.0, length, 1.0)
                        arrow_quat[k] = _quat_y_to((f[0], f[1]))
            lname, aname = self._player_lit[name].name, self._player_arrows[name].name
            tracks += [
                three.VectorKeyframeTrack(name=f"{lname}.position", times=times.astype(np.float32),
                                          values=ppos.reshape(-1)),
                three.VectorKeyframeTrack(name=f"{lname}.scale", times=times.astype(np.float32),
                                          values=lit_scale.reshape(-1)),
                three.VectorKeyframeTrack(name=f"{aname}.position", times=times.astype(np.float32),
                                          values=ppos.reshape(-1)),
                three.VectorKeyframeTrack(name=f"{aname}.scale", times=times.astype(np.float32),
                                          values=arrow_scale.reshape(-1)),
                three.QuaternionKeyframeTrack(name=f"{aname}.quaternion", times=times.astype(np.float32),
                                              values=arrow_quat.reshape(-1)),
            ]
        duration = float(motion.duration)
        sim_end = self._view_end() - motion.t0 if self.motion is motion else duration
        if sim_end > duration:
            duration = sim_end
        ns = max(2, int(math.ceil(duration * CLIP_RATE)) + 1)
        tracks += self._sim_tracks(motion, np.linspace(0.0, duration, ns)) if self.motion is motion else []
        clip = three.AnimationClip(name=f"{self.trick.name}-{self.motion_count}", duration=duration,
                                   tracks=tracks)
        action = three.AnimationAction(self._mixer, clip, self.player_root,
                                       loop="LoopRepeat" if self.loop_box.value else "LoopOnce",
                                       clampWhenFinished=True, timeScale=float(self.speed.value))
        action.observe(self._action_time_synced, names="time")
        old = self.action
        was_playing = self._mode == "playing"
        if old is not None:
            old.stop()
        self.clip, self.action = clip, action
        if was_playing:
            self._play_offset = 0.0
            self._play_started = time.perf_counter()
            action.play()
        elif self._mode == "paused":
            self.stop()

    def _force_scale(self) -> float:
        """m of arrow per N of contact force: the robot's weight is drawn 0.6 robot heights long."""
        return 0.6 * self._scale / (self.robot.total_mass * self.robot.gravity)

    # ----- playhead and playback -------------------------------------------------------------
    def _shown_motion(self) -> Motion | None:
        return self._preview if self._preview is not None else self.motion

    def set_playhead(self, t: float) -> None:
        """Move the playhead to ``t`` (s) now: robot, contact markers, arrows and plot cursors."""
        self._set_scrubber(t)
        if self._mode != "static":
            self.stop()
        with self._lock:
            self._apply_playhead(float(t))

    def _set_scrubber(self, t: float) -> None:
        """Show time ``t`` on the scrubber without it counting as the user scrubbing. The value is
        put on the slider's step grid: the browser's slider snaps a value that is not and sends the
        snapped value back (it would look like a scrub, which stops playback)."""
        step = float(self.scrubber.step)
        v = float(np.clip(round(float(t) / step) * step, self.scrubber.min, self.scrubber.max))
        now = time.perf_counter()
        self._scrub_sent.append((now, v))
        while self._scrub_sent and self._scrub_sent[0][0] < now - 3.0:
            self._scrub_sent.popleft()
        self._programmatic += 1
        try:
            self.scrubber.value = v
        finally:
            self._programmatic -= 1

    def _scrubbed(self, change: dict) -> None:
        if self._programmatic:
            return
        tol = 0.5 * float(self.scrubber.step) + 1e-9
        new = float(change["new"])
        if any(abs(new - v) <= tol for _, v in list(self._scrub_sent)):
            return  # the browser's slider echoing (snapped) a value Python set in the last 3 s
        self._scrub_sent.clear()
        if self._mode != "static":
            self.stop()
        self._playhead_throttle(self._apply_playhead_locked, float(change["new"]))

    def _apply_playhead_locked(self, t: float) -> None:
        with self._lock:
            self._apply_playhead(t)

    def _apply_playhead(self, t: float) -> None:
        m = self._shown_motion()
        self.playhead = float(t)
        if m is None:
            self.view.set_pose(self._rest_q)
            for name in self._contact_capable:
                self.contact_markers[name].material = self._unlit
                self.force_arrows[name].visible = False
            self._move_cursors(t)
            return
        t = float(np.clip(t, m.t0, self._view_end() if m is self.motion else m.tend))
        self.playhead = t
        tp = min(t, m.tend)   # past the planned end (a simulation runs on) the plan holds its last pose
        q = m.sample(tp)["q"]
        if not np.all(np.isfinite(q)):
            return
        self.view.set_pose(q)
        if m is self.motion:
            self._pose_sim_ghost(t)
        pts = point_positions(self.robot, q, self._contact_capable)
        phase = m.phase_at(tp)
        f = m.sample_forces(tp) if m.contact_points else None
        for name in self._contact_capable:
            marker, arrow = self.contact_markers[name], self.force_arrows[name]
            p = pts[name]
            marker.position = to_three(p)
            in_contact = name in phase.contacts
            marker.material = self._lit if in_contact else self._unlit
            if in_contact and f is not None:
                fx, fz = f[m.contact_points.index(name)]
                length = float(math.hypot(fx, fz)) * self._force_scale()
                if length > 1e-3:
                    with arrow.hold_sync():
                        arrow.position = to_three(p)
                        arrow.quaternion = _quat_y_to((float(fx), float(fz)))
                        arrow.scale = (1.0, length, 1.0)
                        arrow.visible = True
                    continue
            arrow.visible = False
        self._move_cursors(t)

    def _move_cursors(self, t: float) -> None:
        for c in self._cursors:
            c.x = [t, t]
        self._move_timeline_head(t)
        m = self.motion
        if m is not None and m.t0 <= t <= m.tend:
            j = self._joint_index()
            s = m.sample(t)
            tau = m.sample_torques(t)
            with self._m_ts_dot.hold_sync():
                self._m_ts_dot.x, self._m_ts_dot.y = [float(s["qd"][3 + j])], [float(tau[j])]

    def _move_timeline_head(self, t: float | None = None) -> None:
        """The timeline's cursor: the timeline's axis is the motion's time, like the scrubber's."""
        t = self.playhead if t is None else t
        self._tl_head.x = [float(t), float(t)]

    def play(self) -> None:
        """Play the motion in the browser from the playhead (AnimationAction, no kernel traffic per frame)."""
        if self.action is None:
            return
        with self.action.hold_sync():
            self.action.timeScale = float(self.speed.value)
            self.action.loop = "LoopRepeat" if self.loop_box.value else "LoopOnce"
            self.action.paused = False
            if self._mode == "static":
                self.action.time = float(self.playhead - (self.motion.t0 if self.motion else 0.0))
        self._play_offset = float(self.action.time)
        self._play_started = time.perf_counter()
        self.player_root.visible = True
        self.static_root.visible = False
        self._mode = "playing"
        self._update_ghost_visibility()
        self.action.play()
        self._start_ticker()
        self._publish_state()

    def pause(self) -> None:
        """Pause playback where it is (the browser reports the action's time back)."""
        if self.action is None or self._mode != "playing":
            return
        est = self._estimated_play_time()
        self.action.pause()
        self._ticker_stop.set()
        self._mode = "paused"
        self._set_scrubber(est)
        self.playhead = est
        self._move_cursors(est)
        self._publish_state()

    def stop(self) -> None:
        """Stop playback and show the Python-side robot at the playhead."""
        if self.action is not None and self._mode != "static":
            self.action.stop()
        self._ticker_stop.set()
        self._mode = "static"
        self._update_ghost_visibility()
        self.player_root.visible = False
        self.static_root.visible = True
        with self._lock:
            self._apply_playhead(self.playhead)
        self._publish_state()

    def _estimated_play_time(self) -> float:
        m = self.motion
        if m is None:
            return 0.0
        elapsed = (time.perf_counter() - self._play_started) * float(self.speed.value)
        t = self._play_offset + elapsed
        duration = self._view_end() - m.t0   # the clip's duration
        if self.loop_box.value and duration > 0:
            t = t % duration
        return m.t0 + float(np.clip(t, 0.0, duration))

    def _start_ticker(self) -> None:
        self._ticker_stop.set()
        if self._ticker is not None:
            self._ticker.join(timeout=1)
        self._ticker_stop = threading.Event()
        stop = self._ticker_stop

        def tick() -> None:
            while not stop.wait(TICK_INTERVAL):
                t = self._estimated_play_time()
                self._set_scrubber(t)
                self.playhead = t
                self._move_cursors(t)

        self._ticker = threading.Thread(target=tick, name="kipup-workbench-playhead", daemon=True)
        self._ticker.start()

    def _action_time_synced(self, change: dict) -> None:
        if self._mode == "paused" and self.motion is not None:
            t = self.motion.t0 + float(change["new"])
            self._set_scrubber(t)
            self.playhead = t
            self._move_cursors(t)

    def _speed_changed(self, change: dict) -> None:
        if self.action is not None:
            if self._mode == "playing":
                self._play_offset = self._estimated_play_time() - (self.motion.t0 if self.motion else 0.0)
                self._play_started = time.perf_counter()
            self.action.timeScale = float(change["new"])

    def _loop_changed(self, change: dict) -> None:
        if self.action is not None:
            self.action.loop = "LoopRepeat" if change["new"] else "LoopOnce"
