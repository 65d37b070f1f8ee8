"""The kipup workbench: sketch a trick by dragging poses, re-solve in the background, play it back.

``Workbench(trick, robot, path=None)`` (or :meth:`Workbench.from_template`,
:meth:`Workbench.from_file`) is displayed in a notebook cell. Layout, top to bottom:

* **header**: trick and robot names, the status line (solver progress, at most 10 updates a second).
* **3D view** (pythreejs, side camera, OrbitControls) with the playback bar and the playhead
  scrubber beneath it; on the right a tab stack of controls: *Solve* (Solve, Cancel, auto
  re-solve, time limit, Save), *Keyframe* (the keyframe being edited, its weight and time, the
  base handle mode), *Goals* (rotation in turns and degrees, box heights, target x/z, landing
  range), *Weights* (one log slider per cost weight), *Phase* (duration, bounds, knots, contacts);
  beneath them the message area (the constraint report of a failed solve, in words).
* **timeline** (bqplot): phases as coloured bands whose end markers drag in time, keyframes as
  draggable diamonds, the playhead; add a keyframe at the playhead / remove the selected one.
* **plots** (bqplot): torque of one joint against its +-peak limit and the torque-speed envelope,
  the same joint in the torque-speed plane, its speed against the limit, contact forces (normal,
  tangential, +-mu fz) of one contact point, base height and pitch, and the motion's metrics; phases
  shaded, a cursor at the playhead. Cells of a grid (two a row in a 1000 px notebook, at most
  three); each plot's key is drawn beneath it (never over the data) and its axes tick on round
  1-2-2.5-5 steps fitted to the data (``wb_plots.nice_ticks``).

3D scene: the robot at the playhead (a :class:`~kipup.widgets.robot_view.RobotView`), contact
points lit while in contact with their force arrows, the COM and its path, the terrain (ground,
boxes, targets, bars, the landing range), a translucent *ghost* of the keyframe being edited with
drag handles on its joints, named points and base. Playback runs in the browser: a three.js
``AnimationClip`` (a position and a quaternion track per link, sampled at 60 Hz) drives a second
copy of the robot through an ``AnimationMixer``; Python only starts, pauses and stops it.

Dragging a handle: a ``Picker(event='mousedown')`` on the handles reports which one was grabbed
(:meth:`Workbench._on_handle_down`), switches OrbitControls off and makes an invisible plane at the
sagittal plane pickable; a ``Picker(event='mousemove')`` on that plane reports the drag point
(:meth:`Workbench._on_drag`, at most 30 a second), which turns the joint, moves or pitches the
base, or runs inverse kinematics (:func:`kipup.core.ik.solve_ik`) for a point, holding stance feet;
``mouseup`` (:meth:`Workbench._on_handle_up`) writes the pose into the keyframe and, with auto
re-solve on, starts a warm re-solve 300 ms later. Headless code and tests call those methods.

Solving runs in one background thread: an edit (re)arms a 300 ms debounce and cancels a running
solve, which the newer edit supersedes (it ends 'cancelled'); an edit that changes the trick's
structure (knots, contacts, which keyframes or goals exist) builds a new
:class:`~kipup.core.solver.TrickSolver` in that thread. Intermediate iterates are drawn on the
robot at most 5 times a second. A failed or infeasible solve never replaces the last good motion:
the status line and the message area say what went wrong (:func:`kipup.core.motion.render_report`).

For browser tests the DOM carries classes: ``kipup-workbench`` (root), ``kipup-view3d`` (the
renderer; its ``canvas`` inside), ``kipup-status`` (status line, plus ``kipup-state-idle`` /
``kipup-state-busy``), ``kipup-state`` (hidden JSON: state, motions, generation...),
``kipup-handles`` (hidden JSON: handle name -> [x, y] pixel position in the renderer),
``kipup-timeline``, ``kipup-solve``, ``kipup-cancel``, ``kipup-auto``, ``kipup-play``,
``kipup-pause``, ``kipup-stop``, ``kipup-scrubber``, ``kipup-message``, ``kipup-plots``
(``kipup-plot-cell`` per plot, ``kipup-key`` its key, ``kipup-metrics``), ``kipup-tabs`` (the tab
stack, one row of titles) inside ``kipup-right`` (the controls column).

Code layout: this module holds :class:`Workbench` (construction, state, saving); each of its
jobs lives in a mixin module of its own: ``wb_scene`` (3D scene, terrain), ``wb_timeline``,
``wb_plots``, ``wb_controls`` (widgets and layout), ``wb_solving`` (the solver thread),
``wb_playback`` (clip, playhead, play/pause), ``wb_editing`` (keyframes, goals, weights, phases),
``wb_drag`` (handle drags); ``wb_common`` has the constants and small helpers.
"""
from __future__ import annotations

import json
import os
import threading
import time
from collections import deque
from pathlib import Path
from typing import Any

import numpy as np

from kipup.core.motion import Motion
from kipup.core.robot import Robot
from kipup.core.solver import TrickSolver
from kipup.core.templates import load_template
from kipup.core.trick import Trick
from kipup.core.trick_file import TrickFileError, load_trick, save_trick
from .robot_view import default_pose, robot_size
from .wb_common import (
    MOTION_FILE, STATUS_INTERVAL, PREVIEW_INTERVAL, PLAYHEAD_INTERVAL, DRAG_INTERVAL, _Throttle, SolveRecord,
    _Request, _html,
)
from .wb_scene import SceneMixin
from .wb_timeline import TimelineMixin
from .wb_plots import PlotsMixin
from .wb_controls import ControlsMixin
from .wb_solving import SolvingMixin
from .wb_playback import PlaybackMixin
from .wb_editing import EditingMixin
from .wb_drag import DragMixin
from .wb_record import RecordMixin
from .wb_verify import VerifyMixin

__all__ = ["Workbench", "MOTION_FILE", "SolveRecord"]


class Workbench(SceneMixin, TimelineMixin, PlotsMixin, ControlsMixin, SolvingMixin, PlaybackMixin,
                EditingMixin, DragMixin, RecordMixin, VerifyMixin):
    """An interactive editor for one trick on one robot (see the module docstring).

    trick, robot: what to edit (the trick is edited in place). path: the trick file that
    :meth:`save` writes (and the folder of ``motion.json``). motion: a motion to show at start
    (e.g. loaded from ``motion.json``). auto_solve: re-solve after every edit (the "auto re-solve"
    toggle). solve_now: start a solve at once when there is no motion. time_limit: wall-clock
    limit of each solve (s; default the trick's). width, height: 3D view size (px).

    Attributes of interest: ``trick``, ``robot``, ``motion`` (last good Motion or None),
    ``solver`` (the TrickSolver), ``solves`` (list of :class:`SolveRecord`), ``timings`` (dict of
    measured times), ``widget`` (the root ipywidget), ``clip``/``action`` (playback), ``figures``.
    """

    # ----- construction ----------------------------------------------------------------------
    def __init__(self, trick: Trick, robot: Robot, path: str | os.PathLike | None = None, *,
                 motion: Motion | None = None, auto_solve: bool = True, solve_now: bool = True,
                 time_limit: float | None = None, width: int = 560, height: int = 400) -> None:
        self.trick = trick
        self.robot = robot
        self.path = Path(path) if path is not None else None
        self.motion: Motion | None = None
        self.solver: TrickSolver | None = None
        self.time_limit = time_limit
        self.solves: list[SolveRecord] = []
        self.motion_count = 0
        self.last_failure: SolveRecord | None = None
        self.last_report = ""
        self.timings: dict[str, Any] = {"drag_ms": None, "drag_ms_median": None, "drag_ms_max": None,
                                        "drag_count": 0, "edit_to_motion_s": None, "edit_to_motion_history": [],
                                        "solve_s": None, "build_s": None, "decode_ms": None, "clip_ms": None,
                                        "plots_ms": None, "show_ms": None}
        self._drag_samples: deque[float] = deque(maxlen=500)
        self._width, self._height = int(width), int(height)
        self._auto_initial = bool(auto_solve)

        self._lock = threading.RLock()          # trick and scene state
        self._cv = threading.Condition()        # solve requests
        self._request: _Request | None = None
        self._running: _Request | None = None
        self._cancel_event: threading.Event | None = None
        self._generation = 0
        self._solved_generation = 0
        self._t_edit = time.perf_counter()
        self._closing = False
        self._phase_state = "idle"
        self._preview: Motion | None = None
        self._progress_event = threading.Event()   # set by the first iteration of each solve
        self.live: dict = {}                        # the latest iteration's figures
        self.previews_shown = 0
        self._mode = "static"                  # static | playing | paused
        self._play_started = 0.0
        self._play_offset = 0.0
        self._ticker: threading.Thread | None = None
        self._ticker_stop = threading.Event()
        self._programmatic = 0                 # > 0 while Python sets widget values itself
        self.selected: int | None = None       # index of the keyframe being edited
        self._ghost_q: np.ndarray | None = None
        self._drag: dict | None = None
        self._drag_lock = threading.RLock()
        self._drag_throttle = _Throttle(DRAG_INTERVAL)
        self._playhead_throttle = _Throttle(PLAYHEAD_INTERVAL)
        self._status_throttle = _Throttle(STATUS_INTERVAL, trailing=False)
        self._preview_throttle = _Throttle(PREVIEW_INTERVAL, trailing=False)
        self.playhead = 0.0
        self._scrub_sent: deque[tuple[float, float]] = deque()  # (time, value) Python put on the scrubber
        self.clip = None
        self.action = None
        self._scale = robot_size(robot)
        self._rest_q = default_pose(robot)
        self._contact_capable = [p.name for p in robot.points if p.friction is not None]

        self._build_scene()
        self._build_timeline()
        self._build_plots()
        self._build_controls()
        self._assemble()

        self._worker = threading.Thread(target=self._worker_loop, name="kipup-workbench-solver", daemon=True)
        self._worker.start()

        if motion is not None:
            motion.check_robot(robot, allow_other_name=True)
            with self._lock:
                self._show_new_motion(motion)
        else:
            self._refresh_time_range()
            self._apply_playhead(0.0)
        if self.trick.keyframes:
            self.select_keyframe(0)
        self._set_status(f"ready: trick {trick.name!r} on robot {robot.name!r}" +
                         ("" if motion is None else " (motion loaded)"))
        if motion is None and solve_now:
            self.solve()
        elif motion is not None and auto_solve:
            self._submit(_Request(self._generation, time.perf_counter(), time.perf_counter(), kind="build"))

    @classmethod
    def from_template(cls, name: str, **kwargs: Any) -> "Workbench":
        """A workbench on a copy of the bundled template ``name`` (no file: pass a path to :meth:`save`)."""
        trick, robot = load_template(name)
        return cls(trick, robot, None, **kwargs)

    @classmethod
    def from_file(cls, path: str | os.PathLike, **kwargs: Any) -> "Workbench":
        """Load a trick file and, if present and made for it, the ``motion.json`` next to it."""
        path = Path(path)
        trick, robot = load_trick(path)
        motion = None
        mpath = path.parent / MOTION_FILE
        if mpath.is_file():
            try:
                m = Motion.from_json(mpath)
                m.check_robot(robot, allow_other_name=True)
                if m.trick_name == trick.name:
                    motion = m
            except (ValueError, OSError):
                motion = None
        kwargs.setdefault("motion", motion)
        return cls(trick, robot, path, **kwargs)

    def _repr_mimebundle_(self, **kwargs: Any):
        return self.widget._repr_mimebundle_(**kwargs)

    def close(self) -> None:
        """Stop the solver thread and playback, and close the widgets."""
        with self._cv:
            self._closing = True
            if self._cancel_event is not None:
                self._cancel_event.set()
            self._cv.notify_all()
        self._ticker_stop.set()
        for t in (self._drag_throttle, self._playhead_throttle):
            t.cancel()
        self._worker.join(timeout=10)
        self.widget.close()

    # ----- status and state ------------------------------------------------------------------
    def _set_status(self, text: str, busy: bool | None = None) -> None:
        self.status.value = f"<span style='font-family:monospace'>{text}</span>"
        self._status_text = text
        if busy is not None:
            self.status.remove_class("kipup-state-busy" if not busy else "kipup-state-idle")
            self.status.add_class("kipup-state-busy" if busy else "kipup-state-idle")
        self._publish_state()

    @property
    def status_text(self) -> str:
        """The status line as plain text."""
        return getattr(self, "_status_text", "")

    def _publish_state(self) -> None:
        if not hasattr(self, "state_json"):
            return
        with self._cv:
            state = ("solving" if self._running is not None and self._running.kind == "solve" else
                     "building" if self._running is not None else "waiting" if self._request is not None else
                     "idle")
            gen, solved = self._generation, self._solved_generation
        last = self.solves[-1].status if self.solves else None
        data = {"state": state, "phase": self._phase_state, "motions": self.motion_count, "solves": len(self.solves),
                "last_status": last, "generation": gen, "solved_generation": solved,
                "dragging": self._drag["handle"].name if self._drag else None,
                "selected": self.trick.keyframes[self.selected].name if self.selected is not None
                and self.selected < len(self.trick.keyframes) else None, "mode": self._mode}
        self.state_json.value = json.dumps(data)

    def state(self) -> dict:
        """The machine-readable state published in the ``kipup-state`` element, as a dict."""
        self._publish_state()
        return json.loads(self.state_json.value)

    # ----- keeping work ----------------------------------------------------------------------
    def _save_clicked(self) -> None:
        try:
            path = self.save(self.path_box.value or None)
        except (ValueError, OSError, TrickFileError) as exc:
            self._show_message(f"<b>Not saved</b>: {_html(str(exc))}")
            return
        self._show_message(f"Saved {_html(str(path))} and {MOTION_FILE} next to it.")

    def save(self, path: str | os.PathLike | None = None) -> Path:
        """Write the trick to ``path`` (default: the workbench's file) atomically, and the last good
        motion as ``motion.json`` next to it; returns the trick file's path. Nothing is written if
        the trick would not load back (``TrickFileError``)."""
        target = Path(path) if path is not None else self.path
        if target is None:
            raise ValueError("no file to save to: pass a path (e.g. save('my_trick.yaml'))")
        with self._lock:
            trick = self.trick.copy()
            motion = self.motion
        save_trick(trick, target)
        if motion is not None:
            motion.to_json(target.parent / MOTION_FILE)
        self.path = target
        self._programmatic += 1
        try:
            self.path_box.value = str(target)
        finally:
            self._programmatic -= 1
        return target

    # ----- playback data for tests and exporters ---------------------------------------------
    def clip_summary(self) -> dict:
        """The clip's duration (s) and, per track name, (number of keys, values per key)."""
        if self.clip is None:
            return {}
        out = {"duration": self.clip.duration, "tracks": {}}
        for tr in self.clip.tracks:
            times = np.asarray(tr.times)
            values = np.asarray(tr.values)
            out["tracks"][tr.name] = (int(times.size), int(values.size // max(times.size, 1)))
        return out
