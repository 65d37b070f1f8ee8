"""Offscreen pictures of a motion for an audience: videos, strobe stills and plots.

No browser and no display: everything is drawn with matplotlib's Agg renderer (``Figure`` plus
``FigureCanvasAgg``, never pyplot, so a notebook's backend is left alone). matplotlib, Pillow and
imageio-ffmpeg are imported inside the functions that need them (the ``render`` extra), so
``kipup.core`` stays importable without them.

* :func:`render_video` -- an MP4 (H.264, yuv420p) or a GIF of the motion, chosen by the suffix.
* :func:`render_strobe` -- a PNG or SVG still: the robot at ``n`` instants, fainter = earlier.
* :func:`render_plots` -- a PNG or SVG sheet of torques, speeds, contact forces and base motion
  against the robot's limits, on a shared time axis with the phases shaded.
* :func:`iter_frames`, :func:`render_frame`, :func:`frame_times` -- the video's frames as arrays.

Drawing conventions. The side view is the sagittal plane: world x to the right, z up, equal
aspect, seen from the robot's right side (-y), so the right limbs are near and the left limbs
far. Links are drawn as their capsules. A lumped left/right pair is drawn twice, once per entry
of ``Link.sides``: the near (right) side orange, the far (left) side a darker blue behind it,
centre links slate grey. Both projections are oblique: a point at lateral offset ``y`` (m, +y
left) is drawn at ``(x + a y, z + b y)`` with ``(a, b)`` from :data:`VIEWS`; in the side view
``b = 0`` and ``a`` is small, so the far limbs peek out just behind the near ones and every
z is exact; the three-quarter view also shows the floor and box tops. The centre of mass (COM)
and, in the side view, the contact points lie in the sagittal plane (y = 0); the three-quarter
view draws a contact point of a lumped pair at both feet, each with half the force. Contact
points light up while in contact; their arrows start at the point and show the force of the
ground on the robot at the scale printed in the bottom-right corner (chosen from the 95th
percentile of the motion's contact forces; the rare longer arrows are capped, and it says so).

Every output is written atomically: to a temporary file in the target's folder, then
``os.replace``-d over the target, so a failed or interrupted render leaves no half-written file.
An output path whose folder is missing or not writable raises ``OSError`` with a clear message
before anything is drawn; a motion that does not fit the robot raises ``ValueError``.
"""
from __future__ import annotations

import math
import os
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Iterator, Sequence

import numpy as np

from .atomic import atomic_write
from .kinematics import center_of_mass, link_poses
from .motion import Motion
from .robot import Robot
from .terrain import exact_height
from .trick import Terrain, Trick

__all__ = [
    "VIEWS",
    "VIDEO_SUFFIXES",
    "STILL_SUFFIXES",
    "frame_times",
    "iter_frames",
    "render_frame",
    "render_video",
    "render_strobe",
    "render_plots",
]

#: Oblique projection per view: a point at lateral offset y (m) is drawn at (x + a y, z + b y).
VIEWS: dict[str, tuple[float, float]] = {
    "side": (0.28, 0.0),
    "three_quarter": (0.62, 0.36),
}
VIDEO_SUFFIXES = (".mp4", ".gif")
STILL_SUFFIXES = (".png", ".svg")
FLOOR_HALF_WIDTH = 0.35  # m, lateral half width of the floor and boxes in the three-quarter view
GIF_MAX_FPS = 50.0       # GIF delays are in 1/100 s and players slow down delays under 2/100 s

# ----- colours ---------------------------------------------------------------------------------
SKY = "#f5f6f8"
INK = "#262b31"
MUTED = "#6b7280"
GROUND_FILL = "#e6e1d8"
GROUND_FRONT = "#d6cfc2"
GROUND_LINE = "#857d70"
BOX_FILL = "#cbbfae"
BOX_TOP = "#ddd3c4"
BOX_SIDE = "#b8ab98"
BOX_EDGE = "#7a7064"
TARGET = "#1f9d8b"
BAR_FILL = "#5b6470"
BAR_EDGE = "#2f353c"
# (fill, edge) per side role
LIMB_COLOURS = {
    "near": ("#ee8a3c", "#9a4d12"),    # right side, nearest the camera
    "centre": ("#6f7c8b", "#38414b"),
    "far": ("#3c6e9e", "#1f3c58"),     # left side, behind
}
JOINT_FILL = "#fbfbfb"
CONTACT_ON = "#ffd23f"
CONTACT_ON_EDGE = "#8a6a00"
CONTACT_OFF = "#ffffff"
CONTACT_OFF_EDGE = "#9097a0"
FORCE = "#d62846"
FORCE_EDGE = "#7d1024"
COM = "#7a3fa8"
GHOST = "#4f7fc0"
STANCE_BAND = "#dde2e8"
FLIGHT_BAND = "#cfe5f6"


# ----- small geometry -----------------------------------------------------------------------------
def _rot(theta: float) -> np.ndarray:
    """kipup's E(theta) = [[c, s], [-s, c]] acting on (x, z) column vectors."""
    c, s = math.cos(theta), math.sin(theta)
    return np.array([[c, s], [-s, c]])


def _to_world(pose: tuple, pts: np.ndarray) -> np.ndarray:
    x, z, th = (float(v) for v in pose)
    return np.array([x, z]) + np.asarray(pts, dtype=float) @ _rot(th).T


def _capsule_outline(a: np.ndarray, b: np.ndarray, r: float, n: int = 14) -> np.ndarray:
    """Counter-clockwise outline (2 n + 2, 2) of the capsule swept by radius r along a-b."""
    d = b - a
    phi = math.atan2(d[1], d[0]) if np.hypot(*d) > 1e-12 else 0.0
    ang_b = phi + np.linspace(-math.pi / 2, math.pi / 2, n + 1)
    ang_a = phi + np.linspace(math.pi / 2, 3 * math.pi / 2, n + 1)
    cb = b + r * np.c_[np.cos(ang_b), np.sin(ang_b)]
    ca = a + r * np.c_[np.cos(ang_a), np.sin(ang_a)]
    return np.vstack([cb, ca])


def _circle(c: Sequence[float], r: float, n: int = 24) -> np.ndarray:
    a = np.linspace(0.0, 2 * math.pi, n, endpoint=False)
    return np.c_[c[0] + r * np.cos(a), c[1] + r * np.sin(a)]


def _arrow_polygon(p: np.ndarray, v: np.ndarray, width: float) -> np.ndarray | None:
    """An arrow from p along v (both m), shaft ``width`` wide; None if v is too short to see."""
    length = float(np.hypot(*v))
    if length < 0.4 * width:
        return None
    u = v / length
    n = np.array([-u[1], u[0]])
    head_l = min(3.0 * width, 0.55 * length)
    head_w = 0.55 * width + 0.42 * head_l  # half width of the head
    base = p + u * (length - head_l)
    w = width / 2
    return np.array([p + n * w, base + n * w, base + n * head_w, p + v, base - n * head_w, base - n * w, p - n * w])


def _side_role(y: float) -> str:
    if y > 1e-9:
        return "far"
    if y < -1e-9:
        return "near"
    return "centre"


def _nice_floor(x: float) -> float:
    """The largest of 1, 2, 5 times a power of ten that is <= x (x > 0)."""
    e = math.floor(math.log10(x))
    for m in (5.0, 2.0, 1.0):
        if m * 10 ** e <= x * (1 + 1e-9):
            return m * 10 ** e
    return 10 ** e  # pragma: no cover


def _fmt_len(m: float) -> str:
    """A length for people: 20 cm, 5 mm, 1.5 m (3 significant digits)."""
    if m < 0.01:
        return f"{m * 1000:.3g} mm"
    return f"{m * 100:.3g} cm" if m < 1 else f"{m:.3g} m"


# ----- the robot as shapes ---------------------------------------------------------------------
@dataclass
class _Part:
    y: float            # lateral offset (m, +y left)
    role: str           # "near", "centre", "far"
    order: int          # drawing order within a side: link index
    kind: str           # "link" or "joint"
    poly: np.ndarray    # outline in the sagittal plane (m), before projection


class _Shapes:
    """Capsule outlines and joint dots of a robot at a configuration, in drawing order."""

    def __init__(self, robot: Robot):
        self.robot = robot
        self.links = []
        for i, link in enumerate(robot.links):
            if link.capsule is not None:
                cap = link.capsule
                self.links.append((i, np.array([cap.start, cap.end], dtype=float), float(cap.radius), link.sides))
        self.joint_r = {}
        for k in range(robot.nj):
            child = robot.links[k + 1]
            r = child.capsule.radius if child.capsule is not None else 0.03
            self.joint_r[k + 1] = 0.42 * r

    def parts(self, q: np.ndarray, joints: bool = True) -> list[_Part]:
        poses = link_poses(self.robot, np.asarray(q, dtype=float))
        out: list[_Part] = []
        for i, ends, r, sides in self.links:
            a, b = _to_world(poses[i], ends)
            poly = _capsule_outline(a, b, r)
            for y in sides:
                out.append(_Part(float(y), _side_role(y), i, "link", poly))
        if joints:
            for i, r in self.joint_r.items():
                c = (float(poses[i][0]), float(poses[i][1]))
                for y in self.robot.links[i].sides:
                    out.append(_Part(float(y), _side_role(y), i, "joint", _circle(c, r, 16)))
        # far side first; within one lateral offset the links (parents first) and then the joints
        out.sort(key=lambda p: (-p.y, p.kind == "joint", p.order))
        return out


def _project(poly: np.ndarray, y: float, view: tuple[float, float]) -> np.ndarray:
    return poly + np.array([view[0] * y, view[1] * y])


def _point_positions(robot: Robot, q: np.ndarray, names: Sequence[str]) -> np.ndarray:
    poses = link_poses(robot, np.asarray(q, dtype=float))
    out = []
    for name in names:
        p = robot.point(name)
        out.append(_to_world(poses[robot.link_index(p.link)], np.array([p.position]))[0])
    return np.array(out).reshape(-1, 2)


def _com(robot: Robot, q: np.ndarray) -> np.ndarray:
    return np.asarray(center_of_mass(robot, np.asarray(q, dtype=float)), dtype=float).reshape(-1)[:2]


# ----- inputs ---------------------------------------------------------------------------------
def _terrain_of(trick: Trick | Terrain | None) -> Terrain:
    if trick is None:
        return Terrain()
    if isinstance(trick, Terrain):
        return trick
    if isinstance(trick, Trick):
        return trick.terrain
    raise TypeError(f"trick must be a Trick, a Terrain or None; got {type(trick).__name__}")


def _view_of(view: str) -> tuple[float, float]:
    try:
        return VIEWS[view]
    except (KeyError, TypeError):
        raise ValueError(f"view must be one of {', '.join(map(repr, VIEWS))}; got {view!r}") from None


def _check_motion(motion: Motion, robot: Robot, what: str = "motion") -> None:
    if not isinstance(motion, Motion):
        raise TypeError(f"{what} must be a kipup Motion; got {type(motion).__name__}")
    try:
        motion.check_robot(robot, allow_other_name=(what != "motion"))
    except ValueError as exc:
        raise ValueError(f"cannot draw the {what}: {exc}") from None
    for name in ("q", "forces"):
        if not np.all(np.isfinite(getattr(motion, name))):
            raise ValueError(f"cannot draw the {what}: {name} holds NaN or infinite values (status {motion.status!r})")


def _check_output(path: str | os.PathLike[str], suffixes: Sequence[str]) -> Path:
    """The output path, after checking its suffix and that its folder can take a new file."""
    target = Path(os.fspath(path))
    suffix = target.suffix.lower()
    if suffix not in suffixes:
        raise ValueError(f"{target}: unknown output type {target.suffix or '(no suffix)'!r}; "
                         f"use one of {', '.join(suffixes)}")
    folder = target.parent if str(target.parent) else Path(".")
    if not folder.exists():
        raise FileNotFoundError(f"cannot write {target}: folder {folder} does not exist")
    if not folder.is_dir():
        raise NotADirectoryError(f"cannot write {target}: {folder} is not a folder")
    if target.is_dir():
        raise IsADirectoryError(f"cannot write {target}: it is a folder")
    if not os.access(folder, os.W_OK | os.X_OK):
        raise PermissionError(f"cannot write {target}: folder {folder} is not writable")
    if target.exists() and not os.access(target, os.W_OK):
        raise PermissionError(f"cannot write {target}: the file exists and is read-only")
    return target


# ----- time -----------------------------------------------------------------------------------------
def _fit_text(fig: Any, text: str, fontsize: float, max_px: float, *, max_lines: int = 3,
              min_scale: float = 0.7) -> tuple[str, float]:
    """``text`` laid out to be at most ``max_px`` wide in ``fig`` (display pixels): on one line at
    ``fontsize`` if it fits, else wrapped at spaces into at most ``max_lines`` lines, shrinking the
    font (down to ``min_scale`` of it) only when wrapping alone does not do; past that, as many lines
    as needed and, for a single word wider than the picture, a smaller font still. Returns the text
    with line breaks and the font size (pt)."""
    renderer = fig.canvas.get_renderer()
    probe = fig.text(0.0, 0.0, "", fontsize=fontsize)

    def width(s: str, fs: float) -> float:
        probe.set_text(s)
        probe.set_fontsize(fs)
        return float(probe.get_window_extent(renderer).width)

    def wrap(fs: float) -> list[str]:
        lines: list[str] = []
        for word in text.split(" "):
            if lines and width(lines[-1] + " " + word, fs) <= max_px:
                lines[-1] += " " + word
            else:
                lines.append(word)
        return lines

    try:
        fs = float(fontsize)
        while True:
            lines = wrap(fs)
            if len(lines) <= max_lines and all(width(s, fs) <= max_px for s in lines):
                return "\n".join(lines), fs
            if fs * 0.92 < min_scale * fontsize:
                break
            fs *= 0.92
        lines = wrap(fs)
        widest = max(width(s, fs) for s in lines)
        if widest > max_px:   # a word wider than the room: shrink until it fits
            fs *= max_px / widest
        return "\n".join(lines), fs
    finally:
        probe.remove()


def frame_times(motion: Motion, fps: float = 30.0, slow: float = 1.0) -> np.ndarray:
    """Motion times (s) of the video frames: ``t0 + i * slow / fps`` for every such time up to the
    end, plus the final instant if it is not on that grid.

    A video played at ``fps`` then runs at ``slow`` times real speed (0.25: quarter speed) and has
    ``floor(duration * fps / slow) + 1`` frames, one more when the end is off the grid.
    """
    fps, slow = float(fps), float(slow)
    if not (math.isfinite(fps) and fps > 0):
        raise ValueError(f"fps must be a positive number of frames per second; got {fps!r}")
    if not (math.isfinite(slow) and slow > 0):
        raise ValueError(f"slow must be a positive speed factor (0.25 = quarter speed); got {slow!r}")
    step = slow / fps
    n = int(math.floor(motion.duration / step + 1e-9))
    times = motion.t0 + step * np.arange(n + 1)
    if motion.tend - times[-1] > 1e-9 * max(1.0, motion.duration):
        times = np.append(times, motion.tend)
    return np.minimum(times, motion.tend)


def _speed_text(slow: float) -> str:
    return f"{slow:.3g}x"


# ----- the scene: everything that does not change from frame to frame ------------------------------
class _Scene:
    """Camera, scales and static drawing shared by the video frames and the strobe still."""

    def __init__(self, motion: Motion, robot: Robot, terrain: Terrain, view: str,
                 ghost: Motion | None, times: np.ndarray, offsets: np.ndarray | None = None):
        self.motion, self.robot, self.terrain, self.ghost = motion, robot, terrain, ghost
        self.view_name = view
        self.view = _view_of(view)
        self.times = times
        self.offsets = np.zeros(len(times)) if offsets is None else np.asarray(offsets, dtype=float)
        self.shapes = _Shapes(robot)
        self.q = motion.sample(times)["q"]
        self.com = np.array([_com(robot, q) for q in self.q]) + np.c_[self.offsets, np.zeros(len(times))]
        self.contacts = list(motion.contact_points)
        self.forces = motion.sample_forces(times) if self.contacts else np.zeros((len(times), 0, 2))
        self.contact_xz = (np.array([_point_positions(robot, q, self.contacts) for q in self.q])
                           if self.contacts else np.zeros((len(times), 0, 2)))
        self.contact_xz = self.contact_xz + self.offsets[:, None, None] * np.array([1.0, 0.0])
        # where each contact is drawn: in the sagittal plane in the side view; in the three-quarter
        # view at every lateral offset of its link (both feet of a lumped pair), sharing the force
        self.contact_sides = []
        for name in self.contacts:
            sides = robot.links[robot.link_index(robot.point(name).link)].sides
            self.contact_sides.append((0.0,) if not self.view[1] else tuple(float(y) for y in sides))
        self.in_contact = np.array([[c in motion.phase_at(t).contacts for c in self.contacts] for t in times],
                                   dtype=bool).reshape(len(times), len(self.contacts))
        if ghost is not None:
            self.ghost_q = ghost.sample(np.clip(times, ghost.t0, ghost.tend))["q"]
        # robot size and force scale
        first = self.shapes.parts(motion.q[0], joints=False)
        pts = np.vstack([p.poly for p in first])
        self.robot_size = float(max(np.ptp(pts[:, 0]), np.ptp(pts[:, 1]), 0.2))
        # force scale from a typical stance force (95th percentile over the knots), so that one
        # spike (e.g. at an impact knot) does not shrink every other arrow; longer arrows are clipped
        mags = np.hypot(motion.forces[..., 0], motion.forces[..., 1])
        mags = mags[mags > 1e-9]
        self.force_ref = float(np.percentile(mags, 95)) if mags.size else 0.0
        if self.force_ref > 0:
            self.force_scale = _nice_floor(0.4 * self.robot_size / self.force_ref)  # m per N
            self.force_clip = _nice_floor(2.0 * self.force_ref)  # N; longer arrows are drawn at this length
        else:
            self.force_scale = self.force_clip = 0.0
        self.arrow_width = 0.016 * self.robot_size
        self.limb_bounds()

    def arrow_vectors(self, f: np.ndarray) -> np.ndarray:
        """Drawn arrow vectors (m) of forces f (N, last axis (fx, fz)), clipped at ``force_clip``."""
        mag = np.hypot(f[..., 0], f[..., 1])[..., None]
        factor = np.where(mag > self.force_clip, self.force_clip / np.where(mag > 0, mag, 1.0), 1.0)
        return f * factor * self.force_scale

    # ----- bounds ---------------------------------------------------------------------------------
    def robot_polys(self, q: np.ndarray, dx: float = 0.0, joints: bool = True) -> list[tuple[_Part, np.ndarray]]:
        out = []
        for p in self.shapes.parts(q, joints=joints):
            out.append((p, _project(p.poly, p.y, self.view) + np.array([dx, 0.0])))
        return out

    def limb_bounds(self) -> None:
        pts = []
        for k, q in enumerate(self.q):
            pts.extend(poly for _, poly in self.robot_polys(q, self.offsets[k], joints=False))
        if self.ghost is not None:
            for k, q in enumerate(self.ghost_q):
                pts.extend(poly for _, poly in self.robot_polys(q, self.offsets[k], joints=False))
        for c, sides in enumerate(self.contact_sides):
            if self.force_scale > 0:
                for y in sides:
                    tips = self.contact_xz[:, c] + np.array(self.view) * y + \
                        self.arrow_vectors(self.forces[:, c] / len(sides))
                    pts.append(tips[np.isfinite(tips).all(axis=1)])
        allp = np.vstack(pts)
        self.robot_lo, self.robot_hi = allp.min(axis=0), allp.max(axis=0)

    def world_bounds(self) -> tuple[np.ndarray, np.ndarray]:
        """Box (lo, hi) in drawing coordinates that must be visible: robot over all frames, terrain
        features near it, the ground."""
        lo, hi = self.robot_lo.copy(), self.robot_hi.copy()
        t = self.terrain
        near_lo, near_hi = lo[0] - 0.6 * self.robot_size, hi[0] + 0.6 * self.robot_size
        extra = []
        for tg in t.targets:
            extra.append([tg.x - 0.05, tg.z - 0.05])
            extra.append([tg.x + 0.05, tg.z + 0.1])
        for bar in t.bars:
            for y in ((-FLOOR_HALF_WIDTH, FLOOR_HALF_WIDTH) if self.view[1] else (0.0,)):
                c = np.array([bar.x, bar.z]) + np.array(self.view) * y
                extra.append(c - bar.radius)
                extra.append(c + bar.radius)
        for box in t.boxes:
            x0, x1 = max(box.x_min, near_lo), min(box.x_max, near_hi)
            if x0 < x1:
                extra.append([x0, box.height])
                extra.append([x1, box.height])
        if self.offsets.any():  # strobe with spread: terrain features repeat at each offset
            extra = [[e[0] + o, e[1]] for e in extra for o in (self.offsets[0], self.offsets[-1])]
        if extra:
            e = np.array(extra)
            lo, hi = np.minimum(lo, e.min(axis=0)), np.maximum(hi, e.max(axis=0))
        lo[1] = min(lo[1], t.ground - self.view[1] * FLOOR_HALF_WIDTH)  # the floor's front edge
        return lo, hi

    def fit(self, lo: np.ndarray, hi: np.ndarray, aspect: float, pad: tuple[float, float, float, float]) -> None:
        """Camera limits containing [lo, hi] with paddings (left, right, bottom, top: fractions of
        the view), widened to ``aspect`` = width / height of the drawing area."""
        w, h = max(hi[0] - lo[0], 0.3), max(hi[1] - lo[1], 0.3)
        pl, pr, pb, pt = pad
        # the view must hold the content in its (1 - pl - pr) x (1 - pb - pt) middle
        vw, vh = w / (1 - pl - pr), h / (1 - pb - pt)
        if vw / vh < aspect:
            vw = vh * aspect
        else:
            vh = vw / aspect
        # content centred in the padded band horizontally; vertically, spare room goes 30 % below
        x0 = 0.5 * (lo[0] + hi[0]) - (pl + 0.5 * (1 - pl - pr)) * vw
        z0 = lo[1] - pb * vh - 0.3 * (vh * (1 - pb - pt) - h)
        ground = self.terrain.ground
        # keep at least a strip of soil below the ground line
        z0 = min(z0, ground - 0.06 * vh)
        self.xlim = (x0, x0 + vw)
        self.zlim = (z0, z0 + vh)

    # ----- static drawing ---------------------------------------------------------------------------
    def draw_ground(self, ax: Any) -> None:
        """The ground across the whole view (static: nothing is ever drawn behind it)."""
        from matplotlib.patches import Polygon

        a, b = self.view
        x0, x1 = self.xlim
        z0, _ = self.zlim
        W = FLOOR_HALF_WIDTH
        margin = 0.05 * (x1 - x0) + a * W
        xa, xb = x0 - margin, x1 + margin
        g = self.terrain.ground
        if b:  # three-quarter: a floor band from y = -W (front edge) to +W, and the soil in front
            floor = np.array([[xa - a * W, g - b * W], [xb - a * W, g - b * W], [xb + a * W, g + b * W],
                              [xa + a * W, g + b * W]])
            ax.add_patch(Polygon(floor, closed=True, facecolor=GROUND_FILL, edgecolor="none", zorder=1))
            ax.add_patch(Polygon([[xa, z0 - margin], [xb, z0 - margin], [xb, g - b * W], [xa, g - b * W]],
                                 closed=True, facecolor=GROUND_FRONT, edgecolor="none", zorder=1))
            ax.plot([xa, xb], [g - b * W, g - b * W], color=GROUND_LINE, lw=1.4, zorder=1.1, solid_capstyle="butt")
            ax.plot([xa, xb], [g + b * W, g + b * W], color=GROUND_LINE, lw=0.8, zorder=1.1, alpha=0.6)
            # faint lines across the floor every 0.5 m give depth and scale
            for xm in np.arange(math.floor(xa / 0.5) * 0.5, xb + 0.5, 0.5):
                ax.plot([xm - a * W, xm + a * W], [g - b * W, g + b * W], color=GROUND_LINE, lw=0.6,
                        alpha=0.22, zorder=1.05)
        else:
            ax.add_patch(Polygon([[xa, z0 - margin], [xb, z0 - margin], [xb, g], [xa, g]], closed=True,
                                 facecolor=GROUND_FILL, edgecolor="none", zorder=1))
            ax.plot([xa, xb], [g, g], color=GROUND_LINE, lw=1.6, zorder=1.1, solid_capstyle="butt")

    def terrain_objects(self, ax: Any, offsets: Sequence[float] = (0.0,), alphas: Sequence[float] = (1.0,),
                        animated: bool = False, target_offsets: Sequence[float] | None = None) -> list:
        """Boxes, bars and targets (at each horizontal offset, with its opacity); returns the artists.

        target_offsets: one offset per target to draw it once there, at full opacity."""
        from matplotlib.lines import Line2D
        from matplotlib.patches import Circle, Polygon

        a, b = self.view
        t = self.terrain
        W = FLOOR_HALF_WIDTH
        g = t.ground
        out: list = []

        def patch(p):
            p.set_animated(animated)
            ax.add_patch(p)
            out.append(p)

        def line(xs, zs, **kw):
            ln = Line2D(xs, zs, animated=animated, **kw)
            ax.add_line(ln)
            out.append(ln)

        for off, alpha in zip(offsets, alphas):
            for box in t.boxes:
                bx0, bx1, h = box.x_min + off, box.x_max + off, box.height
                if b:
                    front = [[bx0 - a * W, g - b * W], [bx1 - a * W, g - b * W], [bx1 - a * W, h - b * W],
                             [bx0 - a * W, h - b * W]]
                    top = [[bx0 - a * W, h - b * W], [bx1 - a * W, h - b * W], [bx1 + a * W, h + b * W],
                           [bx0 + a * W, h + b * W]]
                    side = [[bx1 - a * W, g - b * W], [bx1 + a * W, g + b * W], [bx1 + a * W, h + b * W],
                            [bx1 - a * W, h - b * W]]
                    for poly, fill in ((side, BOX_SIDE), (top, BOX_TOP), (front, BOX_FILL)):
                        patch(Polygon(poly, closed=True, facecolor=fill, edgecolor=BOX_EDGE, lw=1.0, alpha=alpha,
                                      zorder=2, joinstyle="round"))
                else:
                    patch(Polygon([[bx0, g], [bx1, g], [bx1, h], [bx0, h]], closed=True, facecolor=BOX_FILL,
                                  edgecolor=BOX_EDGE, lw=1.2, alpha=alpha, zorder=2, joinstyle="round"))
            for bar in t.bars:
                c = np.array([bar.x + off, bar.z])
                if b:
                    back, front = c + np.array([a, b]) * W, c - np.array([a, b]) * W
                    u = (back - front) / np.hypot(*(back - front))
                    n = np.array([-u[1], u[0]]) * bar.radius
                    patch(Polygon([front + n, back + n, back - n, front - n], closed=True, facecolor=BAR_FILL,
                                  edgecolor="none", alpha=alpha, zorder=2))
                    patch(Circle(back, bar.radius, facecolor=BAR_FILL, edgecolor=BAR_EDGE, lw=0.8, alpha=alpha,
                                 zorder=2))
                    patch(Circle(front, bar.radius, facecolor="#7d8692", edgecolor=BAR_EDGE, lw=1.0, alpha=alpha,
                                 zorder=2.1))
                else:
                    patch(Circle(c, bar.radius, facecolor=BAR_FILL, edgecolor=BAR_EDGE, lw=1.0, alpha=alpha,
                                 zorder=2))
        if target_offsets is None:
            placed = [(tg, off, alpha, off == offsets[-1]) for off, alpha in zip(offsets, alphas) for tg in t.targets]
        else:
            placed = [(tg, off, 1.0, True) for tg, off in zip(t.targets, target_offsets)]
        for tg, off, alpha, labelled in placed:
            s = 0.035
            x = tg.x + off
            patch(Circle((x, tg.z), s, facecolor="none", edgecolor=TARGET, lw=1.6, alpha=alpha, zorder=2.5))
            line([x - 1.6 * s, x + 1.6 * s], [tg.z, tg.z], color=TARGET, lw=1.2, alpha=alpha, zorder=2.5)
            line([x, x], [tg.z - 1.6 * s, tg.z + 1.6 * s], color=TARGET, lw=1.2, alpha=alpha, zorder=2.5)
            if labelled:
                txt = ax.text(x + 2.1 * s, tg.z + 1.2 * s, tg.name, color=TARGET, fontsize=self.font(0.85),
                              ha="left", va="bottom", zorder=2.5, animated=animated)
                out.append(txt)
        return out

    def font(self, rel: float = 1.0) -> float:
        """Font size (pt) relative to the body size of the picture."""
        return self.body_pt * rel

    # ----- the robot --------------------------------------------------------------------------------
    def draw_robot(self, ax: Any, q: np.ndarray, *, dx: float = 0.0, fade: float = 0.0, zorder: float = 5.0,
                   animated: bool = False) -> list:
        """Patches of the robot at q: capsules per side and joint dots. ``fade`` blends the colours
        towards the sky (0: full colour, 1: invisible) while staying opaque."""
        from matplotlib.colors import to_rgb
        from matplotlib.patches import Polygon

        sky = np.array(to_rgb(SKY))

        def blend(c: str) -> tuple:
            return tuple((1 - fade) * np.array(to_rgb(c)) + fade * sky)

        lw = self.edge_pt
        artists = []
        for part, poly in self.robot_polys(q, dx):
            fill, edge = LIMB_COLOURS[part.role]
            if part.kind == "joint":
                fill, lw_j = JOINT_FILL, 0.7 * lw
            else:
                lw_j = lw
            patch = Polygon(poly, closed=True, facecolor=blend(fill), edgecolor=blend(edge), lw=lw_j,
                            joinstyle="round", zorder=zorder, animated=animated)
            ax.add_patch(patch)
            artists.append(patch)
        return artists

    def draw_ghost(self, ax: Any, q: np.ndarray, *, dx: float = 0.0, animated: bool = False) -> list:
        """The ghost robot as one translucent silhouette (one compound path: overlaps fill once)."""
        from matplotlib.patches import PathPatch
        from matplotlib.path import Path as MPath

        polys = [poly for _, poly in self.robot_polys(q, dx, joints=False)]
        path = MPath.make_compound_path(*[MPath(np.vstack([p, p[:1]]), closed=True) for p in polys])
        patch = PathPatch(path, facecolor=GHOST, edgecolor="none", alpha=0.33, zorder=4, animated=animated)
        ax.add_patch(patch)
        return [patch]


# ----- video frames --------------------------------------------------------------------------------
class _FrameRenderer:
    """Draws the frames of a video, one time after the other, on one Agg canvas (static parts cached)."""

    def __init__(self, motion: Motion, robot: Robot, trick: Trick | Terrain | None, *, fps: float, slow: float,
                 view: str, ghost: Motion | None, size: tuple[int, int], times: np.ndarray | None = None,
                 ghost_label: str = "ghost"):
        from matplotlib.backends.backend_agg import FigureCanvasAgg
        from matplotlib.figure import Figure

        _check_motion(motion, robot)
        if ghost is not None:
            _check_motion(ghost, robot, "ghost")
        W, H = (int(v) for v in size)
        if W < 160 or H < 90:
            raise ValueError(f"size must be at least (160, 90) pixels; got {size!r}")
        self.size = (W, H)
        self.slow = float(slow)
        self.times = frame_times(motion, fps, slow) if times is None else np.asarray(times, dtype=float)
        step = self.slow / float(fps)
        self.time_digits = max(2, int(math.ceil(-math.log10(step) - 1e-9))) if step < 0.01 else 2
        terrain = _terrain_of(trick)
        self.trick_name = trick.name if isinstance(trick, Trick) else motion.trick_name
        self.scene = sc = _Scene(motion, robot, terrain, view, ghost, self.times)
        self.ghost_label = ghost_label

        self.dpi = 100.0
        fig = Figure(figsize=(W / self.dpi, H / self.dpi), dpi=self.dpi, facecolor=SKY)
        self.canvas = FigureCanvasAgg(fig)
        self.fig = fig
        self.bp = bp = max(10.5, 15.0 * H / 720.0)  # body text size, px (15 px at 720 p)
        self.strip = strip = max(0.1, 4.8 * bp / H)  # bottom strip: key, phase timeline, scales (fraction of H)
        ax = fig.add_axes((0.0, strip, 1.0, 1.0 - strip))
        ax.set_axis_off()
        ax.set_facecolor(SKY)
        self.ax = ax
        sc.body_pt = bp * 72.0 / self.dpi
        sc.edge_pt = max(0.8, 1.3 * H / 720.0)
        lo, hi = sc.world_bounds()
        aspect = W / (H * (1.0 - strip))
        sc.fit(lo, hi, aspect, pad=(0.06, 0.06, 0.03, 0.10))
        ax.set_xlim(*sc.xlim)
        ax.set_ylim(*sc.zlim)
        ax.set_aspect("equal", adjustable="datalim")
        ax.set_xlim(*sc.xlim)
        ax.set_ylim(*sc.zlim)
        sc.draw_ground(ax)
        self.objects = sc.terrain_objects(ax, animated=True)
        self._draw_static()
        self.canvas.draw()
        # apply the limits the equal aspect settled on (for later computations)
        sc.xlim, sc.zlim = ax.get_xlim(), ax.get_ylim()
        self.background = self.canvas.copy_from_bbox(fig.bbox)
        self.com_z0 = float(sc.com[0, 1] - exact_height(terrain, sc.com[0, 0]))

    # ----- static overlay -------------------------------------------------------------------------
    def _draw_static(self) -> None:
        from matplotlib.patches import Polygon

        sc, fig = self.scene, self.fig
        W, H = self.size
        f = sc.font
        # title (top right): trick and robot
        title = " · ".join(s for s in (self.trick_name, sc.robot.name) if s)
        # beside the clock (top left) when there is room, else on a row of its own beneath it;
        # wrapped or shrunk to the room either way
        m = sc.motion
        longest = max((p.name for p in m.phases), key=len, default="")
        probe = f"t = {m.tend:.{self.time_digits}f} s  ·  {longest}  ·  {_speed_text(self.slow)}"
        probe_text = fig.text(0.0, 0.0, probe, fontsize=f(1.45))
        clock_w = float(probe_text.get_window_extent(self.canvas.get_renderer()).width)
        probe_text.remove()
        room = 0.95 * W - clock_w - 1.5 * self.bp
        y = 0.955
        if room < 0.3 * W:
            room, y = 0.95 * W, 0.955 - 1.45 * 1.35 * self.bp / H
        title, fs = _fit_text(fig, title, f(1.0), room, max_lines=2)
        fig.text(0.975, y, title, ha="right", va="top", fontsize=fs, color=MUTED, multialignment="right")
        # the bottom strip, in pixels: key (left), phase timeline (middle), scales (right)
        sh = self.strip * H
        self.tl = tl = fig.add_axes((0.0, 0.0, 1.0, self.strip))
        tl.set_axis_off()
        tl.set_xlim(0, W)
        tl.set_ylim(0, sh)
        tl.add_patch(Polygon([[0, 0], [W, 0], [W, sh], [0, sh]], closed=True, facecolor="#ffffff", edgecolor="none"))
        tl.plot([0, W], [sh - 0.5, sh - 0.5], color="#d5d9df", lw=1.0)
        px = self.bp / 15.0  # one pixel at 720 p
        bp = self.bp
        rows = [sh * 0.72, sh * 0.5, sh * 0.28]
        # key: two columns
        key = [("right limbs", LIMB_COLOURS["near"][0], 1.0), ("left limbs", LIMB_COLOURS["far"][0], 1.0),
               ("contact in use", CONTACT_ON, 1.0), ("COM path", COM, 1.0)]
        if sc.ghost is not None:
            key.append((self.ghost_label, GHOST, 0.45))
        col_w = 8.0 * bp
        if W < 56 * bp:  # a small picture: the timeline needs the room more than the key
            key, col_w = [], 0.0
        for i, (label, colour, alpha) in enumerate(key):
            cx = 0.022 * W + (i // 3) * col_w
            cy = rows[i % 3]
            tl.plot([cx], [cy], marker="o", markersize=0.6 * f(1.0), markerfacecolor=colour, alpha=alpha,
                    markeredgecolor=INK, markeredgewidth=0.5, ls="none")
            tl.text(cx + 9 * px, cy, label, ha="left", va="center", fontsize=f(0.72), color=MUTED)
        # scales: a ruler and a sample force arrow, both at the world view's metres-per-pixel
        ppm = W / (sc.xlim[1] - sc.xlim[0])  # pixels per metre
        right = W - 0.022 * W
        label_x = right - 7.0 * bp
        room = 6.0 * bp
        ruler = _nice_floor(room / ppm)
        ruler_px = ruler * ppm
        y = rows[0]
        tl.plot([label_x - ruler_px - 6 * px, label_x - 6 * px], [y, y], color=INK, lw=1.6, solid_capstyle="butt")
        for xe in (label_x - ruler_px - 6 * px, label_x - 6 * px):
            tl.plot([xe, xe], [y - 4 * px, y + 4 * px], color=INK, lw=1.1)
        tl.text(label_x, y, _fmt_len(ruler), ha="left", va="center", fontsize=f(0.75), color=INK)
        if sc.force_scale > 0:
            fbar = _nice_floor(min(room / (sc.force_scale * ppm), sc.force_clip))
            length = fbar * sc.force_scale * ppm
            y = rows[1]
            poly = _arrow_polygon(np.array([label_x - 6 * px - length, y]), np.array([length, 0.0]), 4.0 * px)
            if poly is not None:
                tl.add_patch(Polygon(poly, closed=True, facecolor=FORCE, edgecolor=FORCE_EDGE, lw=0.6))
            tl.text(label_x, y, f"{fbar:g} N force", ha="left", va="center", fontsize=f(0.75), color=INK)
            clipped = np.hypot(sc.forces[..., 0], sc.forces[..., 1]) > sc.force_clip
            note = f"100 N = {_fmt_len(100.0 * sc.force_scale)}"
            if any(len(sides) > 1 for sides in sc.contact_sides):
                note = "left/right share each force; " + note
            if clipped.any():
                note += f"; capped at {sc.force_clip:g} N"
            tl.text(right, rows[2], note, ha="right", va="center", fontsize=f(0.68), color=MUTED)
        # the phase timeline
        m = sc.motion
        self.tl_x0 = 0.022 * W + 2 * col_w + 5.0 * bp
        self.tl_x1 = label_x - room - 9.0 * bp
        bar_lo, bar_hi = sh * 0.36, sh * 0.64
        self.tl_bar = (bar_lo, bar_hi)
        for ph in m.phases:
            a = self._tl_x(ph.start)
            b = self._tl_x(ph.end)
            colour = FLIGHT_BAND if not ph.contacts else STANCE_BAND
            tl.add_patch(Polygon([[a, bar_lo], [b, bar_lo], [b, bar_hi], [a, bar_hi]], closed=True, facecolor=colour,
                                 edgecolor="#ffffff", lw=1.5))
            if len(ph.name) * 0.6 * 0.75 * bp < b - a - 4 * px:  # only names that fit their segment
                tl.text((a + b) / 2, (bar_lo + bar_hi) / 2, ph.name, ha="center", va="center", fontsize=f(0.75),
                        color=INK)
        tl.text(self.tl_x0 - 8 * px, (bar_lo + bar_hi) / 2, f"{m.t0:.2f} s", ha="right", va="center",
                fontsize=f(0.72), color=MUTED)
        tl.text(self.tl_x1 + 8 * px, (bar_lo + bar_hi) / 2, f"{m.tend:.2f} s", ha="left", va="center",
                fontsize=f(0.72), color=MUTED)

    def _tl_x(self, t: float) -> float:
        m = self.scene.motion
        u = (t - m.t0) / m.duration if m.duration > 0 else 0.0
        return self.tl_x0 + (self.tl_x1 - self.tl_x0) * u

    # ----- one frame ---------------------------------------------------------------------------------
    def _make_dynamic(self) -> None:
        """Create once every artist that changes between frames; :meth:`frame` only updates them."""
        from matplotlib.lines import Line2D
        from matplotlib.patches import Circle, PathPatch, Polygon, Wedge
        from matplotlib.path import Path as MPath

        sc, ax, fig = self.scene, self.ax, self.fig
        dummy = np.zeros((3, 2))

        def patch(p, axes=None):
            p.set_animated(True)
            (axes or ax).add_patch(p)
            return p

        self.shadow = patch(Polygon(dummy, closed=True, facecolor="#000000", edgecolor="none"))
        for artist in self.objects:
            artist.set_animated(True)
        self.ghost_patch = None
        if sc.ghost is not None:
            self.ghost_patch = patch(PathPatch(MPath(dummy), facecolor=GHOST, edgecolor="none", alpha=0.33))
        self.parts = []
        lw = sc.edge_pt
        for part in sc.shapes.parts(sc.q[0]):
            fill, edge = LIMB_COLOURS[part.role]
            if part.kind == "joint":
                self.parts.append(patch(Polygon(dummy, closed=True, facecolor=JOINT_FILL, edgecolor=edge,
                                                lw=0.7 * lw, joinstyle="round")))
            else:
                self.parts.append(patch(Polygon(dummy, closed=True, facecolor=fill, edgecolor=edge, lw=lw,
                                                joinstyle="round")))
        self.trace = Line2D([], [], color=COM, lw=1.5 * lw, alpha=0.8, solid_capstyle="round",
                            solid_joinstyle="round", animated=True)
        ax.add_line(self.trace)
        r = 0.028 * sc.robot_size
        self.com_marks = [patch(Circle((0, 0), r, facecolor="#ffffff", edgecolor=COM, lw=1.2)),
                          patch(Wedge((0, 0), r, 0, 90, facecolor=COM, edgecolor="none")),
                          patch(Wedge((0, 0), r, 180, 270, facecolor=COM, edgecolor="none"))]
        rc = 0.016 * sc.robot_size
        self.dots = []    # per contact, per side: (halo, lit, unlit)
        self.arrows = []  # per contact, per side
        for sides in sc.contact_sides:
            self.dots.append([(patch(Circle((0, 0), 2.1 * rc, facecolor=CONTACT_ON, edgecolor="none", alpha=0.35)),
                               patch(Circle((0, 0), rc, facecolor=CONTACT_ON, edgecolor=CONTACT_ON_EDGE, lw=1.0)),
                               patch(Circle((0, 0), 0.7 * rc, facecolor=CONTACT_OFF, edgecolor=CONTACT_OFF_EDGE,
                                            lw=0.9))) for _ in sides])
            self.arrows.append([patch(Polygon(dummy, closed=True, facecolor=FORCE, edgecolor=FORCE_EDGE, lw=0.6,
                                              alpha=0.92)) for _ in sides])
        self.clock = fig.text(0.025, 0.955, "", ha="left", va="top", fontsize=sc.font(1.45), color=INK,
                              animated=True)
        px = self.bp / 15.0
        self.progress = patch(Polygon(dummy, closed=True, facecolor=INK, edgecolor="none", alpha=0.10), self.tl)
        self.cursor = Line2D([], [], color=INK, lw=2.0 * px, solid_capstyle="round", animated=True)
        self.tl.add_line(self.cursor)

    def frame(self, k: int) -> np.ndarray:
        """RGB image (H, W, 3) uint8 of frame k."""
        from matplotlib.path import Path as MPath

        sc, fig = self.scene, self.fig
        if not hasattr(self, "parts"):
            self._make_dynamic()
        t = float(self.times[k])
        order: list = []
        # a soft shadow on the terrain under the COM: behind the boxes when it lies on the ground
        cx, cz = sc.com[k]
        g = exact_height(sc.terrain, cx)
        lift = max(0.0, cz - g - self.com_z0)
        grow = 1.0 / (1.0 + 1.2 * lift)
        a, b = sc.view
        rx, ry = 0.3 * sc.robot_size * (0.6 + 0.4 * grow), 0.16 * sc.robot_size
        ang = np.linspace(0, 2 * math.pi, 40, endpoint=False)
        if b:
            shadow = np.c_[cx + rx * np.cos(ang) + a * ry * np.sin(ang), g + b * ry * np.sin(ang)]
        else:
            shadow = np.c_[cx + rx * np.cos(ang), g + 0.016 * sc.robot_size * np.sin(ang)]
        self.shadow.set_xy(shadow)
        self.shadow.set_alpha(0.06 + 0.1 * grow)
        if g > sc.terrain.ground + 1e-9:  # on a box top
            order += self.objects + [self.shadow]
        else:
            order += [self.shadow] + self.objects
        # ghost, then the robot
        if self.ghost_patch is not None:
            polys = [poly for _, poly in sc.robot_polys(sc.ghost_q[k], joints=False)]
            self.ghost_patch.set_path(MPath.make_compound_path(*[MPath(np.vstack([p, p[:1]]), closed=True)
                                                                 for p in polys]))
            order.append(self.ghost_patch)
        for artist, (_, poly) in zip(self.parts, sc.robot_polys(sc.q[k])):
            artist.set_xy(poly)
            order.append(artist)
        # COM path so far, and the COM
        self.trace.set_data(sc.com[: k + 1, 0], sc.com[: k + 1, 1])
        order.append(self.trace)
        for m in self.com_marks:
            m.set_center(tuple(sc.com[k]))
            order.append(m)
        # contact points (lit while in contact) and their forces
        depth = np.array(sc.view)
        arrows = []
        for c, sides in enumerate(sc.contact_sides):
            for i, y in enumerate(sides):
                p = sc.contact_xz[k, c] + depth * y
                halo, lit, off = self.dots[c][i]
                for d in (halo, lit, off):
                    d.set_center(tuple(p))
                order += [halo, lit] if sc.in_contact[k, c] else [off]
                if sc.force_scale > 0 and sc.in_contact[k, c]:
                    poly = _arrow_polygon(p, sc.arrow_vectors(sc.forces[k, c] / len(sides)), sc.arrow_width)
                    if poly is not None:
                        self.arrows[c][i].set_xy(poly)
                        arrows.append(self.arrows[c][i])
        order += arrows
        # time and phase (top left)
        phase = sc.motion.phase_at(t).name
        self.clock.set_text(f"t = {t:.{self.time_digits}f} s  ·  {phase}  ·  {_speed_text(self.slow)}")
        order.append(self.clock)
        # timeline progress and cursor
        x = self._tl_x(t)
        lo, hi = self.tl_bar
        px = self.bp / 15.0
        self.progress.set_xy([[self.tl_x0, lo], [x, lo], [x, hi], [self.tl_x0, hi]])
        self.cursor.set_data([x, x], [lo - 7 * px, hi + 7 * px])
        order += [self.progress, self.cursor]
        self.canvas.restore_region(self.background)
        for artist in order:
            fig.draw_artist(artist)
        return np.asarray(self.canvas.buffer_rgba())[:, :, :3].copy()

    def close(self) -> None:
        self.fig.clear()


def iter_frames(motion: Motion, robot: Robot, trick: Trick | Terrain | None = None, *, fps: float = 30.0,
                slow: float = 1.0, view: str = "side", ghost: Motion | None = None,
                size: tuple[int, int] = (1280, 720), ghost_label: str = "ghost") -> Iterator[np.ndarray]:
    """The frames of :func:`render_video` as RGB arrays ``(H, W, 3)`` uint8, at :func:`frame_times`."""
    r = _FrameRenderer(motion, robot, trick, fps=fps, slow=slow, view=view, ghost=ghost, size=size,
                       ghost_label=ghost_label)
    try:
        for k in range(len(r.times)):
            yield r.frame(k)
    finally:
        r.close()


def render_frame(motion: Motion, robot: Robot, trick: Trick | Terrain | None, time: float, *, fps: float = 30.0,
                 slow: float = 1.0, view: str = "side", ghost: Motion | None = None,
                 size: tuple[int, int] = (1280, 720), ghost_label: str = "ghost") -> np.ndarray:
    """One video frame at motion time ``time`` (s), with the camera of the whole video, as (H, W, 3) uint8."""
    if not (motion.t0 <= time <= motion.tend):
        raise ValueError(f"time must lie within [{motion.t0!r}, {motion.tend!r}] s; got {time!r}")
    times = frame_times(motion, fps, slow)
    r = _FrameRenderer(motion, robot, trick, fps=fps, slow=slow, view=view, ghost=ghost, size=size,
                       times=np.unique(np.append(times, time)), ghost_label=ghost_label)
    try:
        return r.frame(int(np.searchsorted(r.times, time)))
    finally:
        r.close()


# ----- files -------------------------------------------------------------------------------------
def _gif_durations(n: int, fps: float) -> list[int]:
    """Per-frame GIF delays (ms, multiples of 10) whose running sum follows i * 1000 / fps."""
    edges = [int(round(i * 100.0 / fps)) * 10 for i in range(n + 1)]
    return [max(10, b - a) for a, b in zip(edges[:-1], edges[1:])]


def render_video(motion: Motion, robot: Robot, trick: Trick | Terrain | None, path: str | os.PathLike[str], *,
                 fps: float = 30, slow: float = 1.0, view: str = "side", ghost: Motion | None = None,
                 size: tuple[int, int] = (1280, 720), ghost_label: str = "ghost",
                 progress: Any = None) -> Path:
    """Write a video of ``motion`` on ``robot`` in ``trick``'s terrain to ``path`` (``.mp4`` or ``.gif``).

    fps: frames per second of the file; slow: playback speed (0.25 = quarter speed), so the
    video has the frames of :func:`frame_times` and lasts ``duration / slow`` s. view: ``"side"``
    or ``"three_quarter"``. ghost: a second motion of the same robot (e.g. a simulation of this
    one) drawn as a translucent silhouette, labelled ``ghost_label``; it holds its end pose when it
    is shorter. size: (width, height) in pixels (MP4: rounded up to even numbers). trick: gives
    the terrain (a ``Terrain`` or None for flat ground at z = 0 also work). progress: optional
    callable ``progress(done, total)`` called after each frame.

    MP4 is H.264 in yuv420p (plays in browsers and slide software); GIF loops, at most 50 fps.
    The camera is fixed and frames the whole motion. Returns the path written. Raises
    ``ValueError`` for bad arguments or a motion that does not fit the robot, ``OSError`` when
    the path cannot be written (nothing is left behind in either case).
    """
    target = _check_output(path, VIDEO_SUFFIXES)
    suffix = target.suffix.lower()
    W, H = (int(v) for v in size)
    if suffix == ".mp4":
        W, H = W + W % 2, H + H % 2
    if suffix == ".gif" and float(fps) > GIF_MAX_FPS:
        raise ValueError(f"a GIF plays at most {GIF_MAX_FPS:g} frames per second; got fps = {fps!r} (use .mp4)")
    renderer = _FrameRenderer(motion, robot, trick, fps=fps, slow=slow, view=view, ghost=ghost, size=(W, H),
                              ghost_label=ghost_label)
    try:
        if suffix == ".gif":
            _write_gif(renderer, target, float(fps), progress)
        else:
            _write_mp4(renderer, target, float(fps), progress)
    finally:
        renderer.close()
    return target


def _write_gif(renderer: _FrameRenderer, target: Path, fps: float, progress: Any) -> None:
    from PIL import Image

    frames = []
    n = len(renderer.times)
    for k in range(n):
        img = Image.fromarray(renderer.frame(k))
        frames.append(img.quantize(colors=255, method=Image.Quantize.FASTOCTREE, dither=Image.Dither.NONE))
        if progress is not None:
            progress(k + 1, n)
    durations = _gif_durations(n, fps)

    def write(f) -> None:
        frames[0].save(f, format="GIF", save_all=True, append_images=frames[1:], duration=durations, loop=0,
                       optimize=False, disposal=1)

    atomic_write(target, write)


def _temp_path(target: Path, suffix: str) -> Path:
    """Create an empty ``.NAME.PID.RANDOM<suffix>`` next to ``target`` (mode from the umask, as a new file)."""
    for _ in range(100):
        tmp = target.parent / f".{target.name}.{os.getpid()}.{os.urandom(4).hex()}{suffix}"
        try:
            os.close(os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o666))
            return tmp
        except FileExistsError:
            continue
    raise OSError(f"could not create a temporary file in {target.parent}")  # pragma: no cover


def _write_mp4(renderer: _FrameRenderer, target: Path, fps: float, progress: Any) -> None:
    import imageio_ffmpeg

    W, H = renderer.size
    tmp = _temp_path(target, ".tmp.mp4")
    try:
        writer = imageio_ffmpeg.write_frames(
            str(tmp), (W, H), pix_fmt_in="rgb24", pix_fmt_out="yuv420p", fps=fps, codec="libx264",
            quality=None, macro_block_size=2, ffmpeg_log_level="error",
            output_params=["-crf", "20", "-preset", "medium", "-movflags", "+faststart", "-f", "mp4"])
        writer.send(None)
        n = len(renderer.times)
        try:
            for k in range(n):
                frame = renderer.frame(k)
                if frame.shape[:2] != (H, W):
                    raise RuntimeError(f"frame {k} is {frame.shape[1]}x{frame.shape[0]}, expected {W}x{H}")
                writer.send(np.ascontiguousarray(frame))
                if progress is not None:
                    progress(k + 1, n)
        finally:
            writer.close()
        with open(tmp, "rb") as f:
            os.fsync(f.fileno())
        os.replace(tmp, target)
    except BaseException:
        try:
            tmp.unlink()
        except FileNotFoundError:
            pass
        raise


def _save_figure(fig: Any, target: Path, dpi: float) -> None:
    fmt = target.suffix.lower().lstrip(".")

    def write(f) -> None:
        fig.savefig(f, format=fmt, dpi=dpi, facecolor=fig.get_facecolor(),
                    metadata={"Software": None} if fmt == "png" else {"Creator": None, "Date": None})

    atomic_write(target, write)


# ----- strobe still ----------------------------------------------------------------------------------
def render_strobe(motion: Motion, robot: Robot, trick: Trick | Terrain | None, path: str | os.PathLike[str], *,
                  n: int = 9, view: str = "side", spread: float | None = None, dpi: float = 150,
                  height: float = 5.0) -> Path:
    """Write a still of the robot at ``n`` instants evenly spaced over the motion (PNG or SVG by suffix).

    Earlier instants are fainter (opacity rising along the motion), the latest is drawn on top;
    the terrain and the COM path are drawn and each instant is labelled with its time. spread:
    horizontal shift (m) added per instant so that poses of a motion that stays in place do not
    pile up; None chooses it (no shift if the motion travels enough on its own or the terrain has
    boxes or bars, which a shift would misplace); the shift is stated in the picture. height:
    picture height (inches); the width follows the content. Returns the path written.
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    from matplotlib.patches import Circle, Wedge

    target = _check_output(path, STILL_SUFFIXES)
    _check_motion(motion, robot)
    n = int(n)
    if n < 1:
        raise ValueError(f"n must be at least 1 instant; got {n}")
    terrain = _terrain_of(trick)
    _view_of(view)
    times = np.linspace(motion.t0, motion.tend, n) if n > 1 else np.array([motion.t0])
    # choose the spread from the robot's width and the motion's own travel
    shapes = _Shapes(robot)
    q = motion.sample(times)["q"]
    widths, lefts, rights = [], [], []
    for qk in q:
        pts = np.vstack([p.poly for p in shapes.parts(qk, joints=False)])
        widths.append(np.ptp(pts[:, 0]))
        lefts.append(pts[:, 0].min())
        rights.append(pts[:, 0].max())
    if spread is None:
        travel = (q[-1, 0] - q[0, 0]) / max(n - 1, 1)
        want = 0.85 * float(np.median(widths))
        if terrain.boxes or terrain.bars or abs(travel) >= want or n < 2:
            spread = 0.0
        else:  # rightwards (time reads left to right) unless the motion clearly travels left; 5 cm steps
            sign = -1.0 if travel < -0.3 * want else 1.0
            spread = sign * max(0.05, round((want - sign * travel) / 0.05) * 0.05)
    spread = float(spread)
    offsets = spread * np.arange(n)
    # dense COM path, shifted continuously with the spread
    dense = np.linspace(motion.t0, motion.tend, max(200, 40 * n))
    dq = motion.sample(dense)["q"]
    com = np.array([_com(robot, qk) for qk in dq])
    if n > 1 and spread:
        com[:, 0] += spread * (dense - motion.t0) / (times[1] - times[0])

    sc = _Scene(motion, robot, terrain, view, None, times, offsets)
    lo, hi = sc.world_bounds()
    lo, hi = np.minimum(lo, com.min(axis=0)), np.maximum(hi, com.max(axis=0))
    content_aspect = (hi[0] - lo[0]) / max(hi[1] - lo[1], 1e-6)
    aspect = float(np.clip(content_aspect * 1.08, 1.0, 3.4))
    fig = Figure(figsize=(height * aspect, height), dpi=dpi, facecolor=SKY)
    FigureCanvasAgg(fig)
    ax = fig.add_axes((0.0, 0.0, 1.0, 1.0))
    ax.set_axis_off()
    sc.body_pt = 10.0 * height / 5.0
    sc.edge_pt = 0.9
    # title and note at the top left, wrapped (or shrunk) to the picture's width; the top padding
    # makes room for as many lines as they take
    title = " · ".join(s for s in (trick.name if isinstance(trick, Trick) else motion.trick_name, robot.name) if s)
    note = f"{n} instants, {motion.t0:.2f}–{motion.tend:.2f} s, fainter = earlier"
    if spread:
        note += (f"; each pose drawn {_fmt_len(abs(spread))} {'right' if spread > 0 else 'left'} of the one "
                 "before for clarity")
    w_px, h_px = height * aspect * dpi, height * dpi
    room = w_px * (1.0 - 2 * 0.015)
    title, title_fs = _fit_text(fig, title, sc.font(1.15), room, max_lines=2)
    note, note_fs = _fit_text(fig, note, sc.font(0.8), room, max_lines=3)
    title_h = ((title.count("\n") + 1) * 1.2 + 0.45) * title_fs / 72.0 * dpi / h_px   # fraction of the height
    text_h = 0.03 + title_h + ((note.count("\n") + 1) * 1.2) * note_fs / 72.0 * dpi / h_px
    sc.fit(lo, hi, aspect, pad=(0.04, 0.04, 0.10, max(0.12, text_h + 0.03)))
    ax.set_xlim(*sc.xlim)
    ax.set_ylim(*sc.zlim)
    ax.set_aspect("equal", adjustable="datalim")
    fades = np.linspace(0.78, 0.0, n) if n > 1 else np.array([0.0])
    if spread:
        # each target once, beside the instant that comes nearest to it
        names = robot.point_names
        near = []
        for tg in terrain.targets:
            d = [np.min(np.hypot(*(_point_positions(robot, qk, names) - [tg.x, tg.z]).T)) if names else 0.0
                 for qk in q]
            near.append(float(offsets[int(np.argmin(d))]))
        sc.draw_ground(ax)
        sc.terrain_objects(ax, offsets=offsets, alphas=0.25 + 0.75 * (1 - fades), target_offsets=near)
    else:
        sc.draw_ground(ax)
        sc.terrain_objects(ax)
    ax.plot(com[:, 0], com[:, 1], color=COM, lw=1.3, alpha=0.8, zorder=50, solid_capstyle="round")
    for k in range(n):
        sc.draw_robot(ax, q[k], dx=offsets[k], fade=float(fades[k]), zorder=10 + k)
        c = sc.com[k]
        r = 0.02 * sc.robot_size
        alpha = 1.0 - 0.7 * fades[k]
        ax.add_patch(Circle(c, r, facecolor="#ffffff", edgecolor=COM, lw=0.8, zorder=51, alpha=alpha))
        ax.add_patch(Wedge(c, r, 0, 90, facecolor=COM, edgecolor="none", zorder=51.1, alpha=alpha))
        ax.add_patch(Wedge(c, r, 180, 270, facecolor=COM, edgecolor="none", zorder=51.1, alpha=alpha))
    # time labels under the poses, where they do not collide
    z0, z1 = ax.get_ylim()
    label_z = terrain.ground - sc.view[1] * FLOOR_HALF_WIDTH - 0.035 * (z1 - z0)  # in front of the floor
    x_label = [float(sc.com[k, 0]) for k in range(n)]
    min_gap = 0.06 * (sc.xlim[1] - sc.xlim[0])
    placed: list[float] = []
    for k in [n - 1, 0] + list(range(1, n - 1)):  # the last and the first instant first
        if k < 0 or k >= n or any(abs(x_label[k] - x) < min_gap for x in placed):
            continue
        placed.append(x_label[k])
        ax.text(x_label[k], label_z, f"{times[k]:.2f} s", ha="center", va="top", fontsize=sc.font(0.85),
                color=INK if k == n - 1 else MUTED, zorder=60)
    fig.text(0.015, 0.97, title, ha="left", va="top", fontsize=title_fs, color=INK, zorder=60)
    fig.text(0.015, 0.97 - title_h, note, ha="left", va="top", fontsize=note_fs, color=MUTED, zorder=60)
    _save_figure(fig, target, dpi)
    return target


# ----- plots --------------------------------------------------------------------------------------
def _dense(motion: Motion, per_interval: int = 6) -> dict[str, np.ndarray]:
    """Dense samples phase by phase (the end of each phase from its last knot, so impacts show as jumps)."""
    t_parts, q_parts, qd_parts, tau_parts, f_parts = [], [], [], [], []
    for ph in motion.phases:
        m = (ph.last_knot - ph.first_knot) * per_interval
        ts = np.linspace(ph.start, ph.end, m + 1)[:-1]
        s = motion.sample(ts)
        t_parts += [ts, [motion.t[ph.last_knot]]]
        q_parts += [s["q"], motion.q[ph.last_knot][None]]
        qd_parts += [s["qd"], motion.qd[ph.last_knot][None]]
        tau_parts += [motion.sample_torques(ts), motion.tau[ph.last_knot][None]]
        f_parts += [motion.sample_forces(ts), motion.forces[ph.last_knot][None]]
    return {"t": np.concatenate(t_parts), "q": np.vstack(q_parts), "qd": np.vstack(qd_parts),
            "tau": np.vstack(tau_parts), "forces": np.concatenate(f_parts, axis=0)}


def render_plots(motion: Motion, robot: Robot, path: str | os.PathLike[str], *, dpi: float = 130) -> Path:
    """Write a sheet of plots of ``motion`` against ``robot``'s limits (PNG or SVG by suffix).

    Left column: each joint's torque (N m) with the peak torque +-limit (solid) and the
    torque-speed limit at the joint's current speed (dashed: ``stall (1 - |qd| / no_load)``,
    capped at the peak torque, on the side where torque and speed share a sign); then each
    contact point's normal force fz (N); then the base height (m). Right column: each joint's
    speed (rad/s) with its +-velocity limit; then each contact point's tangential force fx (N)
    with the friction bound +-mu fz (dashed); then the base pitch (rad). All panels share the
    time axis (s); phases are shaded (blue: flight) and named at the top. Returns the path.
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    target = _check_output(path, STILL_SUFFIXES)
    _check_motion(motion, robot)
    d = _dense(motion)
    t = d["t"]
    nj, nc = robot.nj, len(motion.contact_points)
    rows = nj + nc + 1
    fig_h = 1.32 * rows + 1.75  # inches: panels, then title, legend and phase names on top
    fig = Figure(figsize=(12.0, fig_h), dpi=dpi, facecolor="#ffffff")
    FigureCanvasAgg(fig)
    gs = fig.add_gridspec(rows, 2, hspace=0.14, wspace=0.2, left=0.085, right=0.985,
                          top=1 - 1.22 / fig_h, bottom=0.5 / fig_h)
    axes = np.empty((rows, 2), dtype=object)
    first = None
    for r in range(rows):
        for c in range(2):
            ax = fig.add_subplot(gs[r, c], sharex=first)
            first = first or ax
            axes[r, c] = ax
    line = dict(color="#1f4e79", lw=1.5)
    limit = dict(color="#c0392b", lw=1.0)
    env = dict(color="#c0392b", lw=1.0, ls=(0, (4, 2.5)))
    zero = dict(color="#999999", lw=0.6)
    for j, joint in enumerate(robot.joints):
        act = joint.actuator
        tau, qd = d["tau"][:, j], d["qd"][:, 3 + j]
        room = np.clip(act.stall_torque * (1.0 - np.abs(qd) / act.no_load_speed), 0.0, None)
        cap = np.minimum(room, act.peak_torque)
        upper = np.where(qd > 0, cap, act.peak_torque)
        lower = -np.where(qd < 0, cap, act.peak_torque)
        ax = axes[j, 0]
        ax.axhline(0, **zero)
        ax.axhline(act.peak_torque, **limit, label="peak torque ±limit")
        ax.axhline(-act.peak_torque, **limit)
        ax.plot(t, upper, **env, label="torque-speed limit at the current speed")
        ax.plot(t, lower, **env)
        ax.plot(t, tau, **line, label="torque")
        ax.set_ylabel(f"{joint.name}\ntorque (N m)")
        pk = act.peak_torque
        ax.set_ylim(-1.18 * max(pk, np.abs(tau).max()), 1.18 * max(pk, np.abs(tau).max()))
        ax = axes[j, 1]
        ax.axhline(0, **zero)
        ax.axhline(joint.velocity_limit, **limit, label="±velocity limit")
        ax.axhline(-joint.velocity_limit, **limit)
        ax.plot(t, qd, **line, label="speed")
        vl = max(joint.velocity_limit, np.abs(qd).max())
        ax.set_ylim(-1.15 * vl, 1.15 * vl)
        ax.set_ylabel(f"{joint.name}\nspeed (rad/s)")
    for c, name in enumerate(motion.contact_points):
        mu = robot.point(name).friction or 0.0
        fx, fz = d["forces"][:, c, 0], d["forces"][:, c, 1]
        ax = axes[nj + c, 0]
        ax.axhline(0, **zero)
        ax.plot(t, fz, **line, label="normal force fz")
        ax.set_ylabel(f"{name}\nnormal (N)")
        top = max(float(np.abs(fz).max()), 1.0)
        ax.set_ylim(-0.08 * top, 1.15 * top)
        ax = axes[nj + c, 1]
        ax.axhline(0, **zero)
        # the bound only where the point is in contact
        in_c = np.zeros(t.size, dtype=bool)
        for ph in motion.phases:
            if name in ph.contacts:
                in_c |= (t >= ph.start) & (t <= ph.end)
        bound = np.where(in_c, mu * fz, np.nan)
        ax.plot(t, bound, **env, label=f"friction bound ±mu fz (mu = {mu:g})")
        ax.plot(t, -bound, **env)
        ax.plot(t, fx, **line, label="tangential force fx")
        lim = max(float(np.nanmax(np.abs(bound), initial=0.0)), float(np.abs(fx).max()), 1.0)
        ax.set_ylim(-1.15 * lim, 1.15 * lim)
        ax.set_ylabel(f"{name}\ntangential (N)")
    ax = axes[-1, 0]
    ax.plot(t, d["q"][:, 1], **line, label="base height")
    ax.set_ylabel("base height\nz (m)")
    ax = axes[-1, 1]
    ax.plot(t, d["q"][:, 2], **line, label="base pitch")
    ax.set_ylabel("base pitch\n(rad)")
    for ax in axes.ravel():
        for ph in motion.phases:
            ax.axvspan(ph.start, ph.end, color=FLIGHT_BAND if not ph.contacts else "#f1f2f4", zorder=0, lw=0)
        for ph in motion.phases[1:]:
            ax.axvline(ph.start, color="#b8bec6", lw=0.8, zorder=0.5)
        ax.tick_params(labelsize=8, length=3)
        ax.yaxis.label.set_size(8.5)
        ax.margins(x=0)
        for s in ("top", "right"):
            ax.spines[s].set_visible(False)
        ax.set_facecolor("#ffffff")
    for ax in axes[:-1].ravel():
        ax.tick_params(labelbottom=False)
    for c in range(2):
        axes[-1, c].set_xlabel("t (s)", fontsize=9)
        top = axes[0, c]
        for ph in motion.phases:
            top.text(0.5 * (ph.start + ph.end), 1.04, ph.name, transform=top.get_xaxis_transform(), ha="center",
                     va="bottom", fontsize=8.5, color=INK)
    axes[0, 0].set_xlim(motion.t0, motion.tend)
    fig.text(0.085, 1 - 0.16 / fig_h,
             f"{motion.trick_name or 'motion'} on {robot.name} ({motion.status}), against the robot file's limits",
             ha="left", va="top", fontsize=12, color=INK)
    # legends: one per kind of panel, under the title
    handles = {}
    for ax in (axes[0, 0], axes[0, 1], axes[nj, 0] if nc else None, axes[nj, 1] if nc else None):
        if ax is None:
            continue
        for h, lab in zip(*ax.get_legend_handles_labels()):
            handles.setdefault(lab, h)
    order = ["torque", "speed", "normal force fz", "tangential force fx", "peak torque ±limit", "±velocity limit",
             "torque-speed limit at the current speed"] + [k for k in handles if k.startswith("friction bound")]
    labels = [k for k in order if k in handles]
    fig.legend([handles[k] for k in labels], labels, loc="upper left", ncol=4, fontsize=8.5, frameon=False,
               bbox_to_anchor=(0.08, 1 - 0.42 / fig_h), columnspacing=2.0, handlelength=2.6)
    _save_figure(fig, target, dpi)
    return target
