"""A small pythreejs 3D view of a planar robot.

Coordinate mapping (kipup world -> three.js world), a proper rotation (det = +1)::

    three.x =  kipup.x      (forward)
    three.y =  kipup.z      (up; three.js is y-up)
    three.z = -kipup.y      (kipup +y points to the robot's left; three +z points to its right)

kipup angles turn about kipup +y, which is three -z. A kipup pitch ``theta`` is therefore a
three.js rotation by ``-theta`` about three +z, quaternion ``(x, y, z, w) = (0, 0, -sin(theta/2),
cos(theta/2))``. ``tests/test_robot_view.py`` checks numerically that a body point lands where
kipup's ``p + E(theta) @ body`` puts it.

The default camera looks from the robot's right side (three +z) so that forward (+x) runs to the
right of the screen and up is up: a backflip (negative pitch) turns anticlockwise on screen.

Link poses come from :func:`planar_link_poses`, a tiny forward kinematics written here so the view
depends on nothing but :mod:`kipup.core.robot`.
"""
from __future__ import annotations

import math
from collections.abc import Sequence

import ipywidgets
import numpy as np
import pythreejs as three

from kipup.core.robot import Robot
from kipup.core.kinematics import center_of_mass, link_poses

__all__ = [
    "RobotView",
    "LinkMeshes",
    "build_link_meshes",
    "robot_size",
    "side_color",
    "planar_link_poses",
    "planar_center_of_mass",
    "default_pose",
    "to_three",
    "pitch_quaternion",
    "rot",
]

# ----------------------------------------------------------------------------
# kipup frame helpers
# ----------------------------------------------------------------------------


def rot(theta: float) -> np.ndarray:
    """kipup's ``E(theta) = [[c, s], [-s, c]]`` acting on (x, z)."""
    c, s = math.cos(theta), math.sin(theta)
    return np.array([[c, s], [-s, c]])


def to_three(p_xz: Sequence[float], y: float = 0.0) -> tuple[float, float, float]:
    """A kipup point or vector ``(x, z)`` at lateral offset ``y`` (m, +y left) in three.js coordinates."""
    return (float(p_xz[0]), float(p_xz[1]), float(-y))


def pitch_quaternion(theta: float) -> tuple[float, float, float, float]:
    """three.js quaternion ``(x, y, z, w)`` of a kipup rotation by ``theta`` (rad) about kipup +y."""
    return (0.0, 0.0, -math.sin(theta / 2.0), math.cos(theta / 2.0))


def _z_quaternion(angle: float) -> tuple[float, float, float, float]:
    """three.js quaternion of a rotation by ``angle`` about three +z."""
    return (0.0, 0.0, math.sin(angle / 2.0), math.cos(angle / 2.0))


def planar_link_poses(robot: Robot, q: Sequence[float]) -> list[tuple[np.ndarray, float]]:
    """World pose ``(position (2,), angle)`` of every link frame, in the order of ``robot.links``
    (from :func:`kipup.core.kinematics.link_poses`)."""
    q = np.asarray(q, dtype=float)
    if q.shape != (robot.nq,):
        raise ValueError(f"q must have length {robot.nq} for robot {robot.name!r}, got shape {q.shape}")
    return [(np.array([x, z], dtype=float), float(th)) for x, z, th in link_poses(robot, q)]


def planar_center_of_mass(robot: Robot, q: Sequence[float]) -> np.ndarray:
    """Whole-robot centre of mass ``(x, z)`` (m) in the world frame."""
    return np.asarray(center_of_mass(robot, np.asarray(q, dtype=float)), dtype=float)


def _lowest_capsule_z(robot: Robot, q: Sequence[float]) -> float | None:
    lowest = None
    for link, (p, th) in zip(robot.links, planar_link_poses(robot, q)):
        cap = link.capsule
        if cap is None:
            continue
        for end in (cap.start, cap.end):
            z = float((p + rot(th) @ np.asarray(end, dtype=float))[1]) - cap.radius
            lowest = z if lowest is None else min(lowest, z)
    for point in robot.points:
        p, th = planar_link_poses(robot, q)[robot.link_index(point.link)]
        z = float((p + rot(th) @ np.asarray(point.position, dtype=float))[1])
        lowest = z if lowest is None else min(lowest, z)
    return lowest


def default_pose(robot: Robot) -> np.ndarray:
    """All joints at zero, base upright, lifted so the lowest capsule or point just touches z = 0."""
    q = np.zeros(robot.nq)
    lowest = _lowest_capsule_z(robot, q)
    if lowest is not None:
        q[1] = -lowest
    return q


def _capsule_profile(length: float, radius: float, arc_segments: int = 8) -> list[tuple[float, float]]:
    """(radius, height) profile of a capsule along +y centred at the origin, for a LatheGeometry."""
    half = length / 2.0
    pts: list[tuple[float, float]] = []
    for i in range(arc_segments + 1):  # bottom cap, from the pole to the equator
        a = -math.pi / 2 + (math.pi / 2) * i / arc_segments
        pts.append((radius * math.cos(a), -half + radius * math.sin(a)))
    for i in range(arc_segments + 1):  # top cap, from the equator to the pole
        a = (math.pi / 2) * i / arc_segments
        pts.append((radius * math.cos(a), half + radius * math.sin(a)))
    pts[0] = (0.0, pts[0][1])
    pts[-1] = (0.0, pts[-1][1])
    return pts


# ----------------------------------------------------------------------------
# the widget
# ----------------------------------------------------------------------------

_CENTRE_COLOR = "#8a94a6"
_LEFT_COLOR = "#4f7cc4"   # +y side (robot's left, far from the default camera)
_RIGHT_COLOR = "#d9843b"  # -y side (robot's right, facing the default camera)
_CONTACT_COLOR = "#c0392b"
_POINT_COLOR = "#f1c40f"
_COM_COLOR = "#8e44ad"


def side_color(side: float) -> str:
    """Colour of a capsule drawn at lateral offset ``side`` (m): left blue, right orange, centre grey."""
    if side > 1e-9:
        return _LEFT_COLOR
    if side < -1e-9:
        return _RIGHT_COLOR
    return _CENTRE_COLOR


def robot_size(robot: Robot) -> float:
    """A length scale (m): height of the robot in its default pose, at least 0.2 m."""
    q = default_pose(robot)
    highest = 0.0
    for link, (p, th) in zip(robot.links, planar_link_poses(robot, q)):
        if link.capsule is None:
            continue
        for end in (link.capsule.start, link.capsule.end):
            highest = max(highest, float((p + rot(th) @ np.asarray(end, dtype=float))[1]) + link.capsule.radius)
    return max(highest, 0.2)


class LinkMeshes:
    """The meshes of one drawing of a robot: a ``pythreejs.Group`` per link (``groups``, by link
    name) holding a lathed capsule per lateral offset in ``link.sides`` (``capsules``) and a small
    sphere per named point at the same offsets (``points``, by point name)."""

    def __init__(self, groups: dict, capsules: list, points: dict) -> None:
        self.groups: dict[str, three.Group] = groups
        self.capsules: list[three.Mesh] = capsules
        self.points: dict[str, list[three.Mesh]] = points

    def set_pose(self, robot: Robot, q: Sequence[float]) -> None:
        """Move the groups to configuration ``q`` (one message per group; no geometry is rebuilt)."""
        for link, (p, th) in zip(robot.links, planar_link_poses(robot, q)):
            group = self.groups[link.name]
            with group.hold_sync():
                group.position = to_three(p)
                group.quaternion = pitch_quaternion(th)


def build_link_meshes(robot: Robot, *, show_points: bool = True, group_name=None, material=None,
                      scale: float | None = None, segments: int = 16, arc_segments: int = 8) -> LinkMeshes:
    """Build the capsule and point meshes of ``robot`` in link frames (see :class:`LinkMeshes`).

    group_name(link_name) -> str names each group (default ``link:NAME``); material(kind, side) ->
    a pythreejs material, ``kind`` being "capsule", "contact_point" or "point" and ``side`` the
    lateral offset (m); default: opaque standard materials in the view's colours. ``scale``: the
    robot's length scale (m, default :func:`robot_size`), which sizes the point spheres.
    segments / arc_segments: the capsules' lathe segments around their axis and per end cap
    (coarse ones make a readable wireframe).
    """
    scale = robot_size(robot) if scale is None else scale
    group_name = group_name or (lambda name: f"link:{name}")
    cache: dict[str, three.MeshStandardMaterial] = {}

    def default_material(kind: str, side: float) -> three.MeshStandardMaterial:
        color = {"capsule": side_color(side), "contact_point": _CONTACT_COLOR}.get(kind, _POINT_COLOR)
        if color not in cache:
            cache[color] = three.MeshStandardMaterial(color=color, roughness=0.6, metalness=0.1)
        return cache[color]

    material = material or default_material
    groups: dict[str, three.Group] = {}
    capsules: list[three.Mesh] = []
    point_meshes: dict[str, list[three.Mesh]] = {}
    point_radius = 0.012 * scale + 0.005
    point_geometry = three.SphereBufferGeometry(radius=point_radius, widthSegments=12, heightSegments=8)
    points_by_link: dict[str, list] = {}
    for point in robot.points:
        points_by_link.setdefault(point.link, []).append(point)

    for link in robot.links:
        group = three.Group(name=group_name(link.name))
        children = []
        cap = link.capsule
        if cap is not None:
            geometry = three.LatheBufferGeometry(points=_capsule_profile(cap.length, cap.radius, arc_segments),
                                                 segments=int(segments))
            mid = ((cap.start[0] + cap.end[0]) / 2.0, (cap.start[1] + cap.end[1]) / 2.0)
            dx, dz = cap.end[0] - cap.start[0], cap.end[1] - cap.start[1]
            # the lathe axis is local three +y; turn it (about three +z) onto (dx, dz)
            angle = math.atan2(-dx, dz) if cap.length > 0 else 0.0
            for side in link.sides:
                mesh = three.Mesh(
                    geometry=geometry,
                    material=material("capsule", side),
                    position=to_three(mid, side),
                    quaternion=_z_quaternion(angle),
                    name=f"capsule:{link.name}:{side:+.3f}",
                )
                children.append(mesh)
                capsules.append(mesh)
        if show_points:
            for point in points_by_link.get(link.name, []):
                kind = "contact_point" if point.friction is not None else "point"
                meshes = []
                for side in link.sides:
                    mesh = three.Mesh(
                        geometry=point_geometry,
                        material=material(kind, side),
                        position=to_three(point.position, side),
                        name=f"point:{point.name}:{side:+.3f}",
                    )
                    meshes.append(mesh)
                children.extend(meshes)
                point_meshes[point.name] = meshes
        group.children = tuple(children)
        groups[link.name] = group
    return LinkMeshes(groups, capsules, point_meshes)


class RobotView(ipywidgets.VBox):
    """3D view of ``robot`` at configuration ``q`` (default: :func:`default_pose`).

    Each link is a ``pythreejs.Group`` holding one capsule mesh (a lathed capsule: cylinder and
    two half-spheres in one geometry) per lateral offset in ``link.sides``, plus a small sphere for
    every named point on it at the same offsets. The COM is a purple sphere drawn on top of the
    bodies. :meth:`set_pose` only moves the link groups and the COM marker; no geometry is rebuilt.

    Attributes: ``renderer``, ``scene``, ``camera``, ``controls`` (OrbitControls),
    ``link_groups`` (link name -> Group), ``capsule_meshes`` (list of Mesh),
    ``point_meshes`` (point name -> list of Mesh), ``com_marker`` (Mesh), ``ground`` (Mesh),
    ``grid`` (GridHelper). The meshes come from :func:`build_link_meshes`, which other views reuse.
    """

    def __init__(
        self,
        robot: Robot,
        q: Sequence[float] | None = None,
        *,
        width: int = 640,
        height: int = 400,
        show_points: bool = True,
        show_com: bool = True,
        background: str = "#f5f6f8",
    ) -> None:
        self.robot = robot
        q0 = default_pose(robot) if q is None else np.array(q, dtype=float)
        if q0.shape != (robot.nq,):
            raise ValueError(f"q must have length {robot.nq} for robot {robot.name!r}, got shape {q0.shape}")

        scale = robot_size(robot)
        meshes = build_link_meshes(robot, show_points=show_points, scale=scale)
        self.link_groups: dict[str, three.Group] = meshes.groups
        self.capsule_meshes: list[three.Mesh] = meshes.capsules
        self.point_meshes: dict[str, list[three.Mesh]] = meshes.points
        self._meshes = meshes

        self.com_marker = three.Mesh(
            geometry=three.SphereBufferGeometry(radius=0.025 * scale + 0.01, widthSegments=16, heightSegments=12),
            material=three.MeshBasicMaterial(color=_COM_COLOR, depthTest=False, transparent=True, opacity=0.9),
            name="com",
            visible=show_com,
            renderOrder=10,
        )

        ground_size = max(4.0, 6.0 * scale)
        ground = three.Mesh(
            geometry=three.PlaneBufferGeometry(width=ground_size, height=ground_size),
            material=three.MeshStandardMaterial(color="#dfe3e8", roughness=1.0, metalness=0.0),
            quaternion=(-math.sin(math.pi / 4), 0.0, 0.0, math.cos(math.pi / 4)),  # lie in three x-z
            position=(0.0, -0.001, 0.0),
            name="ground",
        )
        grid = three.GridHelper(
            size=ground_size, divisions=int(round(ground_size / 0.25)),
            colorCenterLine="#7f8c8d", colorGrid="#b8c0c8", name="grid",
        )

        self.ground, self.grid = ground, grid
        self._q = q0.copy()
        self._apply_pose(q0)

        com = planar_center_of_mass(robot, q0)
        target = (float(com[0]), float(max(com[1], 0.5 * scale)), 0.0)
        distance = 1.9 * scale + 0.4
        self.camera = three.PerspectiveCamera(
            position=(target[0] + 0.35 * distance, target[1] + 0.25 * distance, distance),
            up=(0.0, 1.0, 0.0), fov=40, aspect=width / height, near=0.01, far=100.0,
        )
        self.controls = three.OrbitControls(controlling=self.camera, target=target)
        self.camera.lookAt(target)

        self.scene = three.Scene(
            children=[
                ground, grid, *self.link_groups.values(), self.com_marker,
                three.AmbientLight(color="#ffffff", intensity=0.55),
                three.DirectionalLight(color="#ffffff", intensity=0.7, position=(3.0, 6.0, 4.0)),
                self.camera,
            ],
            background=background,
        )
        self.renderer = three.Renderer(
            camera=self.camera, scene=self.scene, controls=[self.controls],
            width=width, height=height, antialias=True,
        )
        super().__init__(children=[self.renderer])

    # ------------------------------------------------------------------
    @property
    def q(self) -> np.ndarray:
        """The configuration currently shown (a copy)."""
        return self._q.copy()

    def set_pose(self, q: Sequence[float]) -> None:
        """Show configuration ``q`` = (x, z, pitch, joint angles...) (m, rad).

        Moves the link groups and the COM marker; each group sends one message to the browser.
        Call it at a bounded rate (e.g. 30 Hz) when animating from Python.
        """
        q = np.array(q, dtype=float)
        if q.shape != (self.robot.nq,):
            raise ValueError(f"q must have length {self.robot.nq} for robot {self.robot.name!r}, got shape {q.shape}")
        self._apply_pose(q)
        self._q = q

    def _apply_pose(self, q: np.ndarray) -> None:
        self._meshes.set_pose(self.robot, q)
        self.com_marker.position = to_three(planar_center_of_mass(self.robot, q))

    # ------------------------------------------------------------------
    @staticmethod
    def _side_color(side: float) -> str:
        return side_color(side)

    @staticmethod
    def _robot_size(robot: Robot) -> float:
        return robot_size(robot)
