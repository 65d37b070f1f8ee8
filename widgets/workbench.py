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
  shaded, a cursor at the playhead.

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
``kipup-pause``, ``kipup-stop``, ``kipup-scrubber``, ``kipup-message``, ``kipup-plots``.
"""
from __future__ import annotations

import json
import math
import os
import re
import statistics
import threading
import time
from collections import deque
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Callable, Sequence

import bqplot as bq
import ipywidgets as W
import numpy as np
import pythreejs as three

from kipup.core.decode import decode
from kipup.core.ik import point_positions, solve_ik
from kipup.core.kinematics import center_of_mass, link_poses
from kipup.core.motion import Motion, render_report
from kipup.core.robot import Robot
from kipup.core.solver import Progress, TrickSolver
from kipup.core.templates import load_template
from kipup.core.trick import Contact, Costs, Keyframe, Trick
from kipup.core.trick_file import TrickFileError, load_trick, save_trick

from .robot_view import (
    RobotView, build_link_meshes, default_pose, pitch_quaternion, planar_link_poses, robot_size, rot,
    to_three,
)

__all__ = ["Workbench", "MOTION_FILE", "SolveRecord"]

MOTION_FILE = "motion.json"   #: name of the motion file saved next to the trick file
DEBOUNCE = 0.3                #: s between the last edit and the start of a re-solve
STATUS_INTERVAL = 0.1         #: s, at most 10 status-line updates a second
PREVIEW_INTERVAL = 0.2        #: s, at most 5 live previews of intermediate iterates a second
PLAYHEAD_INTERVAL = 0.05      #: s, at most 20 playhead updates a second while scrubbing
DRAG_INTERVAL = 1.0 / 30.0    #: s, at most 30 drag updates a second
TICK_INTERVAL = 0.1           #: s, playback cursor estimate in the plots
CLIP_RATE = 60.0              #: Hz, samples of the playback clip
MIN_PHASE_DURATION = 0.05     #: s, shortest fixed phase a boundary drag leaves
COM_PATH_SAMPLES = 121
BASE_COORDS = ("base_x", "base_z", "base_pitch")

_GHOST_COLOR = "#2a9d8f"
_HANDLE_COLORS = {"joint": "#e76f51", "point": "#2a9d8f", "base": "#6d597a"}
_LIT_COLOR = "#ff2d20"
_UNLIT_COLOR = "#7f8c8d"
_FORCE_COLOR = "#d62828"
_COM_COLOR = "#8e44ad"
_PHASE_COLORS = {"stance": "#9ec5e8", "flight": "#f4d58d"}
_JOINT_COLORS = ["#1f77b4", "#ff7f0e", "#2ca02c", "#d62728", "#9467bd", "#8c564b", "#e377c2", "#17becf"]


# ---------------------------------------------------------------------------------------------
# small helpers
# ---------------------------------------------------------------------------------------------
class _Throttle:
    """Run a call at most once per ``interval`` s; with ``trailing`` the latest skipped call runs
    (in a timer thread) once the interval has passed, so the last value is never lost."""

    def __init__(self, interval: float, trailing: bool = True) -> None:
        self.interval = float(interval)
        self.trailing = trailing
        self._last = -math.inf
        self._pending: tuple | None = None
        self._timer: threading.Timer | None = None
        self._lock = threading.Lock()

    def __call__(self, fn: Callable, *args: Any) -> bool:
        with self._lock:
            now = time.perf_counter()
            wait = self._last + self.interval - now
            if wait <= 0 and self._timer is None:
                self._last = now
                run = True
            else:
                run = False
                if self.trailing:
                    self._pending = (fn, args)
                    if self._timer is None:
                        self._timer = threading.Timer(max(wait, 0.0), self._fire)
                        self._timer.daemon = True
                        self._timer.start()
        if run:
            fn(*args)
        return run

    def _fire(self) -> None:
        with self._lock:
            item, self._pending, self._timer = self._pending, None, None
            self._last = time.perf_counter()
        if item is not None:
            item[0](*item[1])

    def flush(self) -> None:
        """Run a pending call now, in the calling thread."""
        with self._lock:
            item, self._pending = self._pending, None
            if self._timer is not None:
                self._timer.cancel()
                self._timer = None
            self._last = time.perf_counter()
        if item is not None:
            item[0](*item[1])

    def cancel(self) -> None:
        with self._lock:
            self._pending = None
            if self._timer is not None:
                self._timer.cancel()
                self._timer = None


def _safe_name(name: str) -> str:
    """A three.js node name a track binding can find (letters, digits, _ and -)."""
    return re.sub(r"[^A-Za-z0-9_-]", "_", name)


def _wrap(a: float) -> float:
    return (a + math.pi) % (2.0 * math.pi) - math.pi


def _quat_y_to(direction: tuple[float, float]) -> tuple[float, float, float, float]:
    """three.js quaternion turning +y onto the three (x, y) direction (rotation about three +z)."""
    dx, dy = direction
    angle = math.atan2(-dx, dy)
    return (0.0, 0.0, math.sin(angle / 2.0), math.cos(angle / 2.0))


def _fmt(x: float, digits: int = 3) -> str:
    if x is None or not math.isfinite(x):
        return str(x)
    return f"{x:.{digits}g}"


@dataclass
class SolveRecord:
    """One background solve: which edit it served (``generation``), how it ended and how long it took."""

    generation: int
    status: str
    ipopt_status: str = ""
    iterations: int = 0
    solve_time: float = 0.0        # s, IPOPT
    build_time: float = 0.0        # s, building a new TrickSolver or IPOPT instance
    warm: bool = False
    rebuilt: bool = False
    accepted: bool = False         # the motion became the workbench's motion
    edit_to_motion: float | None = None  # s from the latest edit it includes to the motion on screen
    message: str = ""


@dataclass
class _Request:
    generation: int
    due: float
    t_edit: float
    warm: bool | None = None
    kind: str = "solve"            # or "build"


@dataclass
class Handle:
    """A drag handle of the ghost: ``kind`` 'joint' (turns ``target``), 'point' (IK for point
    ``target``) or 'base'; drawn on ``link`` at ``local`` (m, link frame)."""

    name: str
    kind: str
    link: str
    local: tuple[float, float]
    target: str | None
    mesh: Any = None


# ---------------------------------------------------------------------------------------------
# the workbench
# ---------------------------------------------------------------------------------------------
class Workbench:
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

    # ----- the 3D scene ----------------------------------------------------------------------
    def _build_scene(self) -> None:
        robot, scale = self.robot, self._scale
        self.view = RobotView(robot, self._rest_q, width=self._width, height=self._height)
        self.renderer, self.camera, self.orbit = self.view.renderer, self.view.camera, self.view.controls
        self.renderer.add_class("kipup-view3d")

        # side camera framing the trick's extent
        xs = [0.0]
        tr = self.trick.terrain
        xs += [b.x_min for b in tr.boxes] + [b.x_max for b in tr.boxes] + [t.x for t in tr.targets] + \
              [b.x for b in tr.bars]
        if self.trick.goals.landing_x:
            xs += list(self.trick.goals.landing_x)
        x_lo, x_hi = min(xs) - 0.5 * scale, max(xs) + 0.5 * scale
        # room for the robot standing on the highest box and for a jump of half its height
        z_hi = max([scale] + [b.height + scale for b in tr.boxes] + [t.z for t in tr.targets]) + 0.6 * scale
        fov = 40.0
        aspect = self._width / self._height
        half_v = math.tan(math.radians(fov) / 2.0)
        dist = max((x_hi - x_lo) / 2.0 / (half_v * aspect), (z_hi + 0.2) / 2.0 / half_v)
        cx, cy = (x_lo + x_hi) / 2.0, z_hi / 2.0
        self.camera.position = (cx, cy, dist)
        self.camera.quaternion = (0.0, 0.0, 0.0, 1.0)  # looking along -z: the identity for this camera
        self.camera.fov = fov
        self.camera.far = max(100.0, 4 * dist)
        self.orbit.target = (cx, cy, 0.0)
        self.camera.lookAt((cx, cy, 0.0))

        # static robot: the view's link groups + COM, contact markers, force arrows
        self._lit = three.MeshBasicMaterial(color=_LIT_COLOR)
        self._unlit = three.MeshStandardMaterial(color=_UNLIT_COLOR, roughness=0.8)
        marker_geo = three.SphereBufferGeometry(radius=0.02 * scale + 0.008, widthSegments=12, heightSegments=8)
        arrow_geo = three.CylinderBufferGeometry(radiusTop=0.0, radiusBottom=0.008 * scale + 0.006, height=1.0,
                                                 radialSegments=10)
        arrow_mat = three.MeshBasicMaterial(color=_FORCE_COLOR, transparent=True, opacity=0.85)
        self.contact_markers: dict[str, three.Mesh] = {}
        self.force_arrows: dict[str, three.Group] = {}
        for name in self._contact_capable:
            self.contact_markers[name] = three.Mesh(geometry=marker_geo, material=self._unlit,
                                                    name=f"contact:{name}")
            self.force_arrows[name] = three.Group(
                name=f"force:{name}", visible=False,
                children=[three.Mesh(geometry=arrow_geo, material=arrow_mat, position=(0.0, 0.5, 0.0))])
        self.static_root = three.Group(name="static", children=(
            *self.view.link_groups.values(), self.view.com_marker,
            *self.contact_markers.values(), *self.force_arrows.values()))

        # COM path (fixed number of samples, updated in place)
        self._com_path_attr = three.BufferAttribute(array=np.zeros((COM_PATH_SAMPLES, 3), dtype=np.float32),
                                                    normalized=False)
        self.com_path = three.Line(geometry=three.BufferGeometry(attributes={"position": self._com_path_attr}),
                                   material=three.LineBasicMaterial(color=_COM_COLOR), name="com-path",
                                   visible=False)

        # playback copy of the robot, animated by the clip
        self._player = build_link_meshes(robot, group_name=lambda n: f"kp_{_safe_name(n)}", scale=scale)
        self._player_com = three.Mesh(
            geometry=three.SphereBufferGeometry(radius=0.025 * scale + 0.01, widthSegments=16, heightSegments=12),
            material=three.MeshBasicMaterial(color=_COM_COLOR, depthTest=False, transparent=True, opacity=0.9),
            name="kp_com", renderOrder=10)
        self._player_lit: dict[str, three.Mesh] = {}
        self._player_arrows: dict[str, three.Group] = {}
        for name in self._contact_capable:
            self._player_lit[name] = three.Mesh(geometry=marker_geo, material=self._lit,
                                                name=f"kp_lit_{_safe_name(name)}", scale=(1e-4, 1e-4, 1e-4))
            self._player_arrows[name] = three.Group(
                name=f"kp_force_{_safe_name(name)}", scale=(1e-4, 1e-4, 1e-4),
                children=[three.Mesh(geometry=arrow_geo, material=arrow_mat, position=(0.0, 0.5, 0.0))])
        self.player_root = three.Group(name="kp_player", visible=False, children=(
            *self._player.groups.values(), self._player_com, *self._player_lit.values(),
            *self._player_arrows.values()))
        self._mixer = three.AnimationMixer(self.player_root)

        # ghost of the keyframe being edited, and its handles
        ghost_mat = three.MeshStandardMaterial(color=_GHOST_COLOR, transparent=True, opacity=0.35,
                                               depthWrite=False, roughness=0.7)
        self._ghost = build_link_meshes(robot, show_points=False, group_name=lambda n: f"ghost:{n}",
                                        material=lambda kind, side: ghost_mat, scale=scale)
        self.ghost_root = three.Group(name="ghost", visible=False, children=tuple(self._ghost.groups.values()))
        self.handles: dict[str, Handle] = {}
        self._handle_by_model: dict[str, str] = {}
        self._carriers: dict[str, three.Group] = {}
        r_handle = 0.014 * scale + 0.008
        handle_geo = three.SphereBufferGeometry(radius=r_handle, widthSegments=12, heightSegments=8)
        mats = {k: three.MeshBasicMaterial(color=c, depthTest=False, transparent=True, opacity=0.95)
                for k, c in _HANDLE_COLORS.items()}
        specs: list[Handle] = [Handle("base", "base", robot.links[0].name, tuple(robot.links[0].com), None)]
        joint_spots: dict[str, list[tuple[float, float]]] = {link.name: [] for link in robot.links}
        for joint in robot.joints:
            specs.append(Handle(f"joint:{joint.name}", "joint", joint.child, (0.0, 0.0), joint.name))
            joint_spots[joint.child].append((0.0, 0.0))
            joint_spots[joint.parent].append(tuple(joint.origin))
        for point in robot.points:
            if any(math.dist(point.position, s) < 0.015 for s in joint_spots[point.link]):
                continue  # on a joint: the joint handle is there
            specs.append(Handle(f"point:{point.name}", "point", point.link, tuple(point.position), point.name))
        by_link: dict[str, list] = {}
        for h in specs:
            h.mesh = three.Mesh(geometry=handle_geo, material=mats[h.kind], position=to_three(h.local),
                                name=f"handle:{h.name}", renderOrder=20)
            self.handles[h.name] = h
            self._handle_by_model[h.mesh.model_id] = h.name
            by_link.setdefault(h.link, []).append(h.mesh)
        for link in robot.links:
            self._carriers[link.name] = three.Group(name=f"handles:{link.name}",
                                                    children=tuple(by_link.get(link.name, [])))
        self.handles_root = three.Group(name="handles", visible=False, children=tuple(self._carriers.values()))

        self.drag_plane = three.Mesh(
            geometry=three.PlaneBufferGeometry(width=200.0, height=200.0),
            material=three.MeshBasicMaterial(color="#ffffff", transparent=True, opacity=0.0, depthWrite=False,
                                             side="DoubleSide"),
            name="drag-plane", visible=False)

        self.terrain_root = three.Group(name="terrain")
        self._rebuild_terrain()

        keep = [c for c in self.view.scene.children
                if c not in self.view.link_groups.values() and c is not self.view.com_marker]
        self.view.scene.children = tuple(keep) + (self.terrain_root, self.static_root, self.com_path,
                                                  self.player_root, self.ghost_root, self.handles_root,
                                                  self.drag_plane)

        self._pick_down = three.Picker(controlling=self.handles_root, event="mousedown")
        self._pick_move = three.Picker(controlling=self.drag_plane, event="mousemove")
        self._pick_up = three.Picker(controlling=self.drag_plane, event="mouseup")
        self.renderer.controls = [self.orbit, self._pick_down, self._pick_move, self._pick_up]
        self._pick_down.observe(self._picked_down, names="object")
        self._pick_move.observe(self._picked_move, names="point")
        self._pick_up.observe(self._picked_up, names="point")
        self.camera.observe(lambda _: self._publish_handles(), names=["position", "quaternion"])

    def _rebuild_terrain(self) -> None:
        tr, scale = self.trick.terrain, self._scale
        ground_y = float(tr.ground)
        self.view.ground.position = (0.0, ground_y - 0.001, 0.0)
        self.view.grid.position = (0.0, ground_y, 0.0)
        depth = 0.6 * scale + 0.2
        children = []
        box_mat = three.MeshStandardMaterial(color="#b08968", roughness=0.9)
        for b in tr.boxes:
            h = max(b.height - ground_y, 1e-3)
            children.append(three.Mesh(
                geometry=three.BoxBufferGeometry(width=b.x_max - b.x_min, height=h, depth=depth),
                material=box_mat, position=((b.x_min + b.x_max) / 2.0, ground_y + h / 2.0, 0.0),
                name=f"box:{b.name}"))
        target_mat = three.MeshBasicMaterial(color="#e63946")
        for t in tr.targets:
            children.append(three.Mesh(geometry=three.SphereBufferGeometry(radius=0.02 * scale + 0.01),
                                       material=target_mat, position=(t.x, t.z, 0.0), name=f"target:{t.name}"))
        bar_mat = three.MeshStandardMaterial(color="#495057", metalness=0.4, roughness=0.4)
        for b in tr.bars:
            children.append(three.Mesh(
                geometry=three.CylinderBufferGeometry(radiusTop=b.radius, radiusBottom=b.radius, height=depth,
                                                      radialSegments=16),
                material=bar_mat, position=(b.x, b.z, 0.0),
                quaternion=(math.sin(math.pi / 4), 0.0, 0.0, math.cos(math.pi / 4)), name=f"bar:{b.name}"))
        lx = self.trick.goals.landing_x
        if lx is not None and self.trick.phases:
            last = self.trick.phases[-1]
            surface = last.contacts[0].surface if last.contacts else "ground"
            try:
                zs = tr.surface_height(surface)
            except KeyError:
                zs = ground_y
            children.append(three.Mesh(
                geometry=three.BoxBufferGeometry(width=max(lx[1] - lx[0], 1e-3), height=0.004, depth=depth * 0.9),
                material=three.MeshBasicMaterial(color="#52b788", transparent=True, opacity=0.6),
                position=((lx[0] + lx[1]) / 2.0, zs + 0.003, 0.0), name="landing-range"))
        self.terrain_root.children = tuple(children)

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
                                      style={"description_width": "110px"}, layout=W.Layout(width="290px"))
            on = W.Checkbox(value=value > 0, indent=False, layout=W.Layout(width="30px"))
            slider.observe(lambda ch, n=name: self._weight_changed(n), names="value")
            on.observe(lambda ch, n=name: self._weight_changed(n), names="value")
            slider.add_class(f"kipup-weight-{name}")
            self.weight_sliders[name] = slider
            self.weight_on[name] = on
            rows.append(W.HBox([on, slider]))
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

        self.tabs = W.Tab(children=[solve_tab, key_tab, goals_tab, weights_tab, phase_tab])
        for i, title in enumerate(["Solve", "Keyframe", "Goals", "Weights", "Phase"]):
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
        header = W.HBox([W.HTML(f"<b>kipup workbench</b> &nbsp; trick <code>{self.trick.name}</code> on robot "
                                f"<code>{self.robot.name}</code>"), self.status],
                        layout=W.Layout(justify_content="space-between", width="100%"))
        playbar = W.HBox([self.play_button, self.pause_button, self.stop_button, self.speed, self.loop_box])
        # the view keeps its width; the controls wrap below it in a narrow window (never over it)
        left = W.VBox([self.renderer, playbar, self.scrubber],
                      layout=W.Layout(min_width=f"{self._width}px", flex="0 0 auto"))
        right = W.VBox([self.tabs, self.message], layout=W.Layout(width="340px", flex="0 0 auto",
                                                                  margin="0 0 0 10px"))
        timeline_bar = W.HBox([self._keyframe_mirror_widget(), self.add_key_button, self.remove_key_button])
        plots = W.VBox([W.HBox([self.joint_pick, self.contact_pick]),
                        W.HBox([self.fig_torque, self.fig_torque_speed, self.fig_speed]),
                        W.HBox([self.fig_force, self.fig_base, self.metrics_html])])
        plots.add_class("kipup-plots")
        self.widget = W.VBox([header, W.HBox([left, right], layout=W.Layout(flex_flow="row wrap")),
                              timeline_bar, self.timeline, plots,
                              self.state_json, self.handles_json])
        self.widget.add_class("kipup-workbench")
        self._publish_state()

    def _keyframe_mirror_widget(self) -> W.Widget:
        """The keyframe selector mirrored above the timeline (linked to the Keyframe tab's)."""
        mirror = W.Dropdown(options=self.keyframe_pick.options, description="keyframe")
        W.link((self.keyframe_pick, "options"), (mirror, "options"))
        W.link((self.keyframe_pick, "value"), (mirror, "value"))
        self._keyframe_mirror = mirror
        return mirror

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

    # ----- solving ---------------------------------------------------------------------------
    @property
    def auto_solve(self) -> bool:
        return bool(self.auto_toggle.value)

    @auto_solve.setter
    def auto_solve(self, value: bool) -> None:
        self.auto_toggle.value = bool(value)

    def _auto_changed(self, change: dict) -> None:
        if change["new"] and self._generation > self._solved_generation:
            self._submit(_Request(self._generation, time.perf_counter() + DEBOUNCE, self._t_edit))

    def _edited(self, what: str = "edit") -> None:
        """Record an edit of the trick; with auto re-solve on, (re)arm the debounced re-solve and
        cancel a running solve, which this edit supersedes."""
        now = time.perf_counter()
        with self._cv:
            self._generation += 1
            self._t_edit = now
            gen = self._generation
        if self.auto_solve:
            self._submit(_Request(gen, now + DEBOUNCE, now), supersede=True)
            self._set_status(f"{what}: re-solve in {DEBOUNCE * 1000:.0f} ms", busy=True)
        else:
            self._set_status(f"{what}: not solved yet (auto re-solve is off; press Solve)")

    def solve(self, warm: bool | None = None) -> None:
        """Start a solve now in the background (warm when there is a good solution, unless ``warm=False``)."""
        now = time.perf_counter()
        self._submit(_Request(self._generation, now, self._t_edit, warm=warm), supersede=True)
        self._set_status("solve requested", busy=True)

    def cancel(self) -> None:
        """Cancel a pending or running solve; the motion on screen stays."""
        with self._cv:
            self._request = None
            if self._cancel_event is not None:
                self._cancel_event.set()
            self._cv.notify_all()
        self._publish_state()

    def _submit(self, req: _Request, supersede: bool = False) -> None:
        with self._cv:
            if req.kind == "build" and (self._request is not None or self._running is not None):
                return
            self._request = req
            self._progress_event.clear()
            if supersede and self._cancel_event is not None and self._running is not None \
                    and self._running.kind == "solve":
                self._cancel_event.set()
            self._cv.notify_all()
        self._publish_state()

    def _pending(self) -> bool:
        with self._cv:
            return self._request is not None

    def busy(self) -> bool:
        with self._cv:
            return self._request is not None or self._running is not None

    def wait(self, timeout: float | None = 120.0) -> bool:
        """Block until no solve is pending or running; False if ``timeout`` (s) passed first."""
        with self._cv:
            return self._cv.wait_for(lambda: self._request is None and self._running is None, timeout)

    def wait_for_progress(self, timeout: float = 30.0) -> bool:
        """Block until the running solve has reported at least one iteration (False on timeout)."""
        return self._progress_event.wait(timeout)

    def _worker_loop(self) -> None:
        while True:
            with self._cv:
                while self._request is None and not self._closing:
                    self._cv.wait()
                if self._closing:
                    return
                while True:  # debounce: wait until the newest request is due
                    req = self._request
                    if req is None:
                        break
                    delay = req.due - time.perf_counter()
                    if delay <= 0:
                        break
                    self._cv.wait(delay)
                    if self._closing:
                        return
                if req is None:
                    continue
                self._request = None
                self._running = req
                self._cancel_event = threading.Event()
                cancel = self._cancel_event
                self._progress_event.clear()
            self._publish_state()
            try:
                with self._lock:
                    trick = self.trick.copy()
                    gen = self._generation
                if req.kind == "build":
                    self._run_build(trick)
                else:
                    self._run_solve(req, trick, gen, cancel)
            except Exception as exc:  # never let the thread die; say what happened
                rec = SolveRecord(req.generation, "error", message=f"{type(exc).__name__}: {exc}")
                self.solves.append(rec)
                self.last_failure = rec
                self._show_message(f"<b>The solve could not run</b>: {_html(str(exc))}<br>The last good motion "
                                   "is kept.")
                self._set_status(f"error: {type(exc).__name__}: {exc}", busy=False)
            finally:
                with self._cv:
                    self._running = None
                    self._cancel_event = None
                    self._cv.notify_all()
                self._phase_state = "idle"
                self._publish_state()
                if not self.busy():
                    self.status.remove_class("kipup-state-busy")
                    self.status.add_class("kipup-state-idle")

    def _solver_for(self, trick: Trick) -> tuple[TrickSolver, bool, np.ndarray | None]:
        """The solver for this trick's structure (built now if needed), whether it was rebuilt, and a
        starting point from the old solver when the decision vector has the same layout."""
        old = self.solver
        if old is not None and old.fits(trick) and old.robot is self.robot:
            return old, False, None
        self._phase_state = "building"
        self._set_status("building the problem (structure changed)" if old else "building the problem", busy=True)
        self._publish_state()
        new = TrickSolver(trick, self.robot)
        x0 = None
        if old is not None and old.last is not None and old.problem.x.n == new.problem.x.n and \
                [(p.N, [(c.point, c.hold_x) for c in p.contacts]) for p in old.problem.phases] == \
                [(p.N, [(c.point, c.hold_x) for c in p.contacts]) for p in new.problem.phases]:
            x0 = old.last.x
        self.solver = new
        return new, True, x0

    def _run_build(self, trick: Trick) -> None:
        solver, rebuilt, _ = self._solver_for(trick)
        solver.prepare(trick, warm=solver.last is not None)
        self._set_status(f"ready: problem built in {solver.build_time:.2f} s", busy=False)

    def _run_solve(self, req: _Request, trick: Trick, gen: int, cancel: threading.Event) -> None:
        t_start = time.perf_counter()
        solver, rebuilt, x0 = self._solver_for(trick)
        build = time.perf_counter() - t_start
        if cancel.is_set():
            self.solves.append(SolveRecord(gen, "cancelled", rebuilt=rebuilt, build_time=build,
                                           message="superseded before it started"))
            return
        warm = req.warm
        if warm is None:
            warm = solver.last is not None and solver.last.success
        warm = bool(warm and solver.last is not None)
        kind = "warm" if warm else ("cold, from the previous solution" if x0 is not None else "cold")
        self._phase_state = "solving"
        self._set_status(f"solving ({kind})", busy=True)
        self._publish_state()
        problem = solver.problem

        def on_progress(p: Progress) -> None:  # in the solver thread, holding the GIL: keep it short
            self._progress_event.set()
            self._status_throttle(self._progress_status, p, kind)
            self._preview_throttle(self._show_preview, problem, trick, p)

        outcome = solver.solve(trick, warm=warm, on_progress=on_progress, cancel=cancel,
                               time_limit=self.time_limit, x0=None if warm else x0)
        t_dec = time.perf_counter()
        try:
            motion = decode(problem, trick, outcome.x, outcome.status, outcome, report=True)
        except Exception as exc:  # an unusable iterate: keep everything, say why
            motion = None
            decode_error = f"{type(exc).__name__}: {exc}"
        else:
            decode_error = ""
        self.timings["decode_ms"] = (time.perf_counter() - t_dec) * 1e3
        self.timings["solve_s"] = outcome.solve_time
        self.timings["build_s"] = build + outcome.build_time
        rec = SolveRecord(gen, outcome.status, outcome.ipopt_status, outcome.iterations, outcome.solve_time,
                          build + outcome.build_time, outcome.warm, rebuilt)
        self.solves.append(rec)
        with self._lock:
            self._preview = None
        if outcome.success and motion is not None:
            with self._lock:
                self._show_new_motion(motion)
            now = time.perf_counter()
            rec.accepted = True
            rec.edit_to_motion = now - req.t_edit
            self.timings["edit_to_motion_s"] = rec.edit_to_motion
            self.timings["edit_to_motion_history"].append(rec.edit_to_motion)
            with self._cv:
                self._solved_generation = max(self._solved_generation, gen)
            report = render_report(motion.report, motion.phases) if motion.report else ""
            self.last_report = report
            self._show_message("" if not report else
                               f"<b>Solved</b>; between the knots the motion still crosses these limits:"
                               f"<pre>{_html(report)}</pre>")
            self._set_status(f"motion #{self.motion_count}: {outcome.status} in {outcome.solve_time:.2f} s "
                             f"({outcome.iterations} iterations, {kind}); edit to motion {rec.edit_to_motion:.2f} s",
                             busy=self.busy())
            if rebuilt and not self._pending():
                try:  # have the warm instance ready for the next edit
                    self._phase_state = "preparing"
                    solver.prepare(trick, warm=True)
                except Exception:  # noqa: BLE001 - only a head start
                    pass
            return
        # not accepted: the last good motion stays
        with self._lock:
            self._apply_playhead(self.playhead)
        if outcome.status == "cancelled":
            rec.message = "superseded by a newer edit" if self._pending() else "cancelled"
            self._set_status(f"solve cancelled after {outcome.iterations} iterations ({rec.message})",
                             busy=self.busy())
            return
        self.last_failure = rec
        kept = f"the last good motion (#{self.motion_count}) stays on screen" if self.motion is not None else \
            "there is no good motion yet"
        if motion is not None:
            report = render_report(motion.report, motion.phases)
        else:
            report = f"the solver's point could not be decoded ({decode_error})"
        rec.message = report
        self.last_report = report
        self._show_message(
            f"<b>The solve ended '{outcome.status}'</b> (IPOPT: {_html(outcome.ipopt_status)}) after "
            f"{outcome.iterations} iterations in {outcome.solve_time:.2f} s; {kept}, nothing was changed or "
            f"saved. What the failed attempt violates:<pre>{_html(report)}</pre>"
            "Undo the last edit, relax a goal or a limit, or give the solver more time.")
        self._set_status(f"solve ended '{outcome.status}' after {outcome.iterations} iterations; {kept}",
                         busy=self.busy())

    def _progress_status(self, p: Progress, kind: str) -> None:
        self.status.value = (f"<span style='font-family:monospace'>solving ({kind}) | iteration {p.iteration} | "
                             f"objective {_fmt(p.objective, 4)} | infeasibility {p.infeasibility:.1e} | "
                             f"{p.elapsed:.1f} s</span>")
        self._status_text = (f"solving ({kind}) | iteration {p.iteration} | objective {_fmt(p.objective, 4)} | "
                             f"infeasibility {p.infeasibility:.1e} | {p.elapsed:.1f} s")
        self.live = {"iteration": p.iteration, "objective": p.objective, "infeasibility": p.infeasibility,
                     "elapsed": p.elapsed}

    def _show_preview(self, problem: Any, trick: Trick, p: Progress) -> None:
        try:
            m = decode(problem, trick, p.x, "running", report=False)
        except Exception:  # noqa: BLE001 - an odd iterate: just skip this preview
            return
        with self._lock:
            self._preview = m
            self.previews_shown += 1
            if self._mode == "static":
                self._apply_playhead(min(self.playhead, m.tend))
            self._update_com_path(m)

    def _show_message(self, html: str) -> None:
        self.message.value = html

    # ----- a new motion on screen ------------------------------------------------------------
    def _show_new_motion(self, motion: Motion) -> None:
        t0 = time.perf_counter()
        self.motion = motion
        self.motion_count += 1
        self._refresh_time_range()
        self._update_com_path(motion)
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
        T = self.motion.tend if self.motion is not None else self.trick.nominal_duration
        self._programmatic += 1
        try:
            self.scrubber.max = max(T, 1e-3)
        finally:
            self._programmatic -= 1
        if self.scrubber.value > T:
            self._set_scrubber(T)
        self._px.min, self._px.max = 0.0, max(T, 1e-3)

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
        COM, lit contact markers and force arrows (scale tracks)."""
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
        clip = three.AnimationClip(name=f"{self.trick.name}-{self.motion_count}", duration=float(motion.duration),
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
        t = float(np.clip(t, m.t0, m.tend))
        self.playhead = t
        q = m.sample(t)["q"]
        if not np.all(np.isfinite(q)):
            return
        self.view.set_pose(q)
        pts = point_positions(self.robot, q, self._contact_capable)
        phase = m.phase_at(t)
        f = m.sample_forces(t) if m.contact_points else None
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
        t = self.playhead if t is None else t
        tn = self._to_nominal(t)
        self._tl_head.x = [tn, tn]

    def _to_nominal(self, t: float) -> float:
        """Motion time (s) -> trick time on the timeline (nominal durations), phase by phase."""
        m = self.motion
        starts = self._nominal_starts()
        if m is None or [p.name for p in m.phases] != [p.name for p in self.trick.phases]:
            return t
        span = m.phase_at(float(np.clip(t, m.t0, m.tend)))
        i = [p.name for p in m.phases].index(span.name)
        frac = 0.0 if span.duration <= 0 else (t - span.start) / span.duration
        return starts[i] + float(np.clip(frac, 0.0, 1.0)) * (starts[i + 1] - starts[i])

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
        if self.loop_box.value and m.duration > 0:
            t = t % m.duration
        return m.t0 + float(np.clip(t, 0.0, m.duration))

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
        self.ghost_root.visible = True
        self.handles_root.visible = True
        self._publish_handles()

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
        cam = np.asarray(self.camera.position, dtype=float)
        qx, qy, qz, qw = self.camera.quaternion
        R = np.array([[1 - 2 * (qy * qy + qz * qz), 2 * (qx * qy - qz * qw), 2 * (qx * qz + qy * qw)],
                      [2 * (qx * qy + qz * qw), 1 - 2 * (qx * qx + qz * qz), 2 * (qy * qz - qx * qw)],
                      [2 * (qx * qz - qy * qw), 2 * (qy * qz + qx * qw), 1 - 2 * (qx * qx + qy * qy)]])
        f = 1.0 / math.tan(math.radians(float(self.camera.fov)) / 2.0)
        w, h = float(self.renderer.width), float(self.renderer.height)
        aspect = w / h
        out = {}
        for name in self.handles:
            x, z = self.handle_position(name)
            pc = R.T @ (np.array([x, z, 0.0]) - cam)
            if pc[2] >= -1e-9:
                continue  # behind the camera
            ndc_x, ndc_y = f / aspect * pc[0] / -pc[2], f * pc[1] / -pc[2]
            out[name] = ((ndc_x + 1.0) / 2.0 * w, (1.0 - ndc_y) / 2.0 * h)
        return out

    def _publish_handles(self) -> None:
        if not hasattr(self, "handles_json"):
            return
        try:
            self.handles_json.value = json.dumps({k: [round(v[0], 1), round(v[1], 1)]
                                                  for k, v in self.handle_screen_positions().items()})
        except Exception:  # noqa: BLE001 - a helper for tests, never fatal
            self.handles_json.value = "{}"

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


# ---------------------------------------------------------------------------------------------
def _contact_mask_at(motion: Motion, times: np.ndarray) -> np.ndarray:
    """(len(times), len(contact_points)) bool: in contact at each time (the later phase at a boundary)."""
    out = np.zeros((len(times), len(motion.contact_points)), dtype=bool)
    for k, t in enumerate(times):
        ph = motion.phase_at(float(np.clip(t, motion.t0, motion.tend)))
        for c in ph.contacts:
            out[k, motion.contact_points.index(c)] = True
    return out


def _chain_coords(robot: Robot, link: str) -> list[str]:
    """Names of the joints between ``link`` and the base (the coordinates that move it relative to the base)."""
    out, current = [], link
    by_child = {j.child: j for j in robot.joints}
    while current in by_child:
        j = by_child[current]
        out.append(j.name)
        current = j.parent
    return out


def _link_direction(robot: Robot, link: str) -> np.ndarray:
    """A direction (link frame) along the link: to its first child joint, else to the farther end
    of its capsule, else to its first point, else down."""
    for joint in robot.joints:
        if joint.parent == link and math.hypot(*joint.origin) > 1e-6:
            return np.asarray(joint.origin, dtype=float)
    lk = robot.links[robot.link_index(link)]
    if lk.capsule is not None:
        ends = [np.asarray(lk.capsule.start, dtype=float), np.asarray(lk.capsule.end, dtype=float)]
        far = max(ends, key=lambda e: float(np.hypot(*e)))
        if float(np.hypot(*far)) > 1e-6:
            return far
    for p in robot.points:
        if p.link == link and math.hypot(*p.position) > 1e-6:
            return np.asarray(p.position, dtype=float)
    return np.array([0.0, -1.0])


def _html(text: str) -> str:
    return (str(text).replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;"))
