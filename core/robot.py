"""Planar (sagittal-plane) floating-base robot model: constants only.

Frames and conventions (used everywhere in kipup):

* The sagittal plane is the world x-z plane; x points forward, z up. Gravity is
  ``(0, -g)`` in (x, z).
* Every angle is a rotation about the +y axis (right-hand rule, y points to the
  robot's left). A positive angle turns +z towards +x, so a positive base pitch
  tips the head forwards and a backflip is a *negative* pitch of -2*pi.
* A body-fixed vector ``(x_b, z_b)`` of a frame at angle ``theta`` has world
  coordinates ``E(theta) @ (x_b, z_b)`` with ``E = [[c, s], [-s, c]]``.
* Generalized coordinates ``q = (x, z, pitch, q_1 .. q_n)``: base position (m) and
  pitch (rad) in the world frame, then one angle (rad) per revolute joint, in the
  order of ``Robot.joints``. Velocities ``qd`` are the time derivatives of ``q``.

A robot file describes each side of a left/right pair of limbs once; the loader
lumps the pair into one sagittal limb (see :mod:`kipup.core.lumping`). The
``Robot`` holds the lumped constants and each link's lateral offsets for drawing.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from functools import cached_property

Vec2 = tuple[float, float]

BASE_COORDS = ("base_x", "base_z", "base_pitch")


@dataclass(frozen=True)
class Capsule:
    """Drawing and collision shape: a segment ``start``-``end`` (link frame, m) swept by ``radius`` (m)."""

    start: Vec2
    end: Vec2
    radius: float

    @property
    def length(self) -> float:
        return ((self.end[0] - self.start[0]) ** 2 + (self.end[1] - self.start[1]) ** 2) ** 0.5


@dataclass(frozen=True)
class Link:
    """A rigid body.

    mass (kg); com (m) in the link frame; inertia (kg m^2) about the COM and the y axis;
    sides: lateral offsets (m, +y is left) at which the link is drawn in 3D, ``(0.0,)`` for a
    centre link, ``(+w, -w)`` for a lumped left/right pair.
    """

    name: str
    mass: float
    com: Vec2
    inertia: float
    capsule: Capsule | None = None
    sides: tuple[float, ...] = (0.0,)


@dataclass(frozen=True)
class Actuator:
    """Joint actuator, all values at the joint side of the gearbox.

    peak_torque (N m): absolute torque limit. gear_ratio (motor turns per joint turn).
    stall_torque (N m) and no_load_speed (rad/s): the motor's torque-speed line,
    ``|tau| <= stall_torque * (1 - |qd| / no_load_speed)`` when torque and speed share a sign.
    viscous_friction (N m s/rad): joint friction torque ``-b * qd``.
    """

    peak_torque: float
    gear_ratio: float
    stall_torque: float
    no_load_speed: float
    viscous_friction: float = 0.0


@dataclass(frozen=True)
class Joint:
    """A revolute joint about y, moving ``child`` relative to ``parent``.

    origin (m): joint position in the parent link frame; at zero angle the child frame is
    parallel to the parent frame. lower/upper (rad): position limits. velocity_limit (rad/s).
    """

    name: str
    parent: str
    child: str
    origin: Vec2
    lower: float
    upper: float
    velocity_limit: float
    actuator: Actuator


@dataclass(frozen=True)
class Point:
    """A named point (toe, heel, hand, head...) fixed on ``link`` at ``position`` (m, link frame).

    friction: Coulomb coefficient when the point is used as a contact, or None if it never is.
    """

    name: str
    link: str
    position: Vec2
    friction: float | None = None


@dataclass(frozen=True)
class Robot:
    """Constants of a planar floating-base kinematic tree.

    ``links[0]`` is the floating base; ``joints[k]`` moves ``links[k + 1]``; links are in
    topological order (a parent before its children). Gravity (m/s^2) acts along -z.
    """

    name: str
    links: tuple[Link, ...]
    joints: tuple[Joint, ...]
    points: tuple[Point, ...] = ()
    gravity: float = 9.81
    description: str = ""

    def __post_init__(self) -> None:
        if len(self.joints) != len(self.links) - 1:
            raise ValueError("a robot needs exactly one joint per link after the base")
        for k, joint in enumerate(self.joints):
            if joint.child != self.links[k + 1].name:
                raise ValueError(f"joints[{k}] ({joint.name}) must move links[{k + 1}]")
            if joint.parent not in self.link_names[: k + 1]:
                raise ValueError(f"joints[{k}] ({joint.name}): parent {joint.parent!r} must come earlier")

    # ----- sizes and names -------------------------------------------------
    @property
    def nq(self) -> int:
        """Number of generalized coordinates (3 base + one per joint)."""
        return 3 + len(self.joints)

    @property
    def nv(self) -> int:
        return self.nq

    @property
    def nj(self) -> int:
        """Number of actuated joints."""
        return len(self.joints)

    @cached_property
    def link_names(self) -> tuple[str, ...]:
        return tuple(link.name for link in self.links)

    @cached_property
    def joint_names(self) -> tuple[str, ...]:
        return tuple(j.name for j in self.joints)

    @cached_property
    def coord_names(self) -> tuple[str, ...]:
        """Names of the entries of q: base_x, base_z, base_pitch, then the joint names."""
        return BASE_COORDS + self.joint_names

    @cached_property
    def point_names(self) -> tuple[str, ...]:
        return tuple(p.name for p in self.points)

    def link_index(self, name: str) -> int:
        return self.link_names.index(name)

    def point(self, name: str) -> Point:
        for p in self.points:
            if p.name == name:
                return p
        raise KeyError(f"robot {self.name!r} has no point {name!r}; points: {', '.join(self.point_names)}")

    def coord_index(self, name: str) -> int:
        try:
            return self.coord_names.index(name)
        except ValueError:
            raise KeyError(
                f"robot {self.name!r} has no coordinate {name!r}; coordinates: {', '.join(self.coord_names)}"
            ) from None

    @cached_property
    def total_mass(self) -> float:
        return float(sum(link.mass for link in self.links))

    # ----- the tree as the algorithms see it ------------------------------
    @cached_property
    def tree(self) -> "Tree":
        return Tree.of(self)

    # ----- limits as arrays (length nj) ------------------------------------
    @cached_property
    def joint_lower(self) -> tuple[float, ...]:
        return tuple(j.lower for j in self.joints)

    @cached_property
    def joint_upper(self) -> tuple[float, ...]:
        return tuple(j.upper for j in self.joints)

    @cached_property
    def velocity_limit(self) -> tuple[float, ...]:
        return tuple(j.velocity_limit for j in self.joints)

    @cached_property
    def peak_torque(self) -> tuple[float, ...]:
        return tuple(j.actuator.peak_torque for j in self.joints)


@dataclass(frozen=True)
class Tree:
    """The robot as Featherstone's algorithms number it.

    Bodies ``i = 0 .. nv-1``, one per velocity coordinate: body 0 moves along world x
    (prismatic, massless), body 1 along z (prismatic, massless), body 2 is the floating base
    (revolute about y), body ``3 + k`` is moved by ``joints[k]``. ``parent[i]`` is lambda(i)
    (-1 for the world); ``kind[i]`` is 'px', 'pz' or 'ry'; ``origin[i]`` the joint position in
    the parent body frame (m); ``mass``, ``com``, ``inertia`` the body constants (kg, m, kg m^2).
    ``body_of_link[name]`` maps a link name to its body index.
    """

    parent: tuple[int, ...]
    kind: tuple[str, ...]
    origin: tuple[Vec2, ...]
    mass: tuple[float, ...]
    com: tuple[Vec2, ...]
    inertia: tuple[float, ...]
    body_of_link: dict = field(default_factory=dict)

    @staticmethod
    def of(robot: Robot) -> "Tree":
        base = robot.links[0]
        parent = [-1, 0, 1]
        kind = ["px", "pz", "ry"]
        origin: list[Vec2] = [(0.0, 0.0)] * 3
        mass = [0.0, 0.0, base.mass]
        com: list[Vec2] = [(0.0, 0.0), (0.0, 0.0), tuple(base.com)]
        inertia = [0.0, 0.0, base.inertia]
        body_of_link = {base.name: 2}
        for k, joint in enumerate(robot.joints):
            link = robot.links[k + 1]
            parent.append(body_of_link[joint.parent])
            kind.append("ry")
            origin.append(tuple(joint.origin))
            mass.append(link.mass)
            com.append(tuple(link.com))
            inertia.append(link.inertia)
            body_of_link[link.name] = 3 + k
        return Tree(tuple(parent), tuple(kind), tuple(origin), tuple(mass), tuple(com), tuple(inertia),
                    body_of_link)

    @property
    def nb(self) -> int:
        return len(self.parent)

    def ancestors(self, i: int) -> list[int]:
        """Bodies from i up to the root, i included (the support set kappa(i) reversed)."""
        out = []
        while i >= 0:
            out.append(i)
            i = self.parent[i]
        return out
