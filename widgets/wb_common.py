"""Constants and small helpers shared by the workbench's modules."""
from __future__ import annotations

import json
import math
import re
import threading
import time
from dataclasses import dataclass
from typing import Any, Callable

import numpy as np
import pythreejs as three

from kipup.core.motion import Motion
from kipup.core.robot import Robot
from kipup.core.solver import TrickSolver

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


class BackgroundTask:
    """A job the workbench runs in a thread of its own (a recording, a simulation, a sweep).

    ``kind``: 'record', 'simulate' or 'sweep'. ``state``: 'running', 'done' or 'failed'.
    ``result``: what the job returned (a Path, a SimResult, a SweepResult); ``error``: what went
    wrong, in words ('' when it did not fail). :meth:`wait` blocks until it has ended.
    """

    def __init__(self, kind: str, describe: str) -> None:
        self.kind = kind
        self.describe = describe        # e.g. "recording box_jump.mp4"
        self.state = "running"
        self.result: Any = None
        self.error = ""
        self.started = time.perf_counter()
        self.elapsed: float | None = None  # s, once ended
        self._done = threading.Event()

    @property
    def done(self) -> bool:
        return self._done.is_set()

    @property
    def ok(self) -> bool:
        return self.state == "done"

    def wait(self, timeout: float | None = 300.0) -> bool:
        """Block until the job has ended; False if ``timeout`` (s) passed first."""
        return self._done.wait(timeout)

    def _finish(self, result: Any = None, error: str = "") -> None:
        self.result, self.error = result, error
        self.state = "failed" if error else "done"
        self.elapsed = time.perf_counter() - self.started

    def __repr__(self) -> str:
        return f"<BackgroundTask {self.kind} {self.state}: {self.describe}{' - ' + self.error if self.error else ''}>"


def run_in_thread(task: BackgroundTask, work: Callable[[], Any], on_done: Callable[[BackgroundTask], None],
                  name: str) -> threading.Thread:
    """Run ``work()`` in a daemon thread; record its result or error (in words) on ``task``, call
    ``on_done(task)`` (in that thread; an error there is recorded too, never raised), then wake
    :meth:`BackgroundTask.wait`."""

    def body() -> None:
        try:
            result = work()
        except Exception as exc:  # noqa: BLE001 - shown to the user in words
            task._finish(error=f"{type(exc).__name__}: {exc}")
        else:
            task._finish(result)
        try:
            on_done(task)   # the widgets show the outcome before anyone waiting is woken
        except Exception as exc:  # noqa: BLE001 - never kill the thread silently
            task.error = task.error or f"showing the result failed: {type(exc).__name__}: {exc}"
            task.state = "failed"
        finally:
            task._done.set()

    t = threading.Thread(target=body, name=name, daemon=True)
    t.start()
    return t
