"""A trick: what the user sketches and the optimizer turns into a motion. Plain data.

Units: SI, angles in rad, world frame (x forward, z up). Coordinates are named as in
``Robot.coord_names``: ``base_x``, ``base_z``, ``base_pitch`` and the joint names.

Structure (changing it rebuilds the optimization problem): the robot, the terrain's
surfaces, the phases (their contacts, knot counts, and whether each duration is free),
which keyframes exist, which coordinates each sets and whether it is hard, which goals exist.
Values (changing them re-solves without a rebuild): cost weights, keyframe values and times,
goal values, fixed durations and duration bounds.
"""
from __future__ import annotations

import copy
from dataclasses import asdict, dataclass, field, fields
from typing import Any

TRICK_FORMAT = "kipup-trick/1"


@dataclass
class Box:
    """A raised rectangle standing on the ground, from x_min to x_max (m), top at ``height`` (m, world z)."""

    name: str
    x_min: float
    x_max: float
    height: float


@dataclass
class Target:
    """A named point in the sagittal plane (m), e.g. an overhead mark to touch."""

    name: str
    x: float
    z: float


@dataclass
class Bar:
    """An obstacle to clear: a round bar seen end-on, centre (x, z) and radius (m)."""

    name: str
    x: float
    z: float
    radius: float = 0.02


@dataclass
class Terrain:
    """Ground height (m) plus boxes, targets and bars."""

    ground: float = 0.0
    boxes: list[Box] = field(default_factory=list)
    targets: list[Target] = field(default_factory=list)
    bars: list[Bar] = field(default_factory=list)

    def surface_names(self) -> list[str]:
        return ["ground"] + [b.name for b in self.boxes]

    def surface_height(self, name: str) -> float:
        if name == "ground":
            return self.ground
        for b in self.boxes:
            if b.name == name:
                return b.height
        raise KeyError(f"no surface named {name!r}; surfaces: {', '.join(self.surface_names())}")


@dataclass
class Contact:
    """A robot point touching a surface ('ground' or a box name) during a phase."""

    point: str
    surface: str = "ground"


@dataclass
class Phase:
    """One contact mode. ``duration`` (s) is fixed unless both bounds are given (then free).

    ``knots`` is the number of intervals of the phase's time grid.
    """

    name: str
    contacts: list[Contact] = field(default_factory=list)
    duration: float = 0.3
    duration_min: float | None = None
    duration_max: float | None = None
    knots: int = 20

    @property
    def free(self) -> bool:
        return self.duration_min is not None and self.duration_max is not None

    @property
    def in_flight(self) -> bool:
        return not self.contacts


@dataclass
class Keyframe:
    """A pose for some or all coordinates at a time.

    ``phase`` given: ``time`` is a fraction 0..1 of that phase (moves with its boundaries).
    ``phase`` None: ``time`` is absolute (s), located with the phases' nominal durations.
    Hard keyframes are constraints; soft ones are tracked with ``weight`` (times the
    ``keyframes`` cost weight).
    """

    name: str
    time: float
    pose: dict[str, float]
    phase: str | None = None
    hard: bool = False
    weight: float = 1.0


@dataclass
class Reach:
    """A named robot point reaching a terrain target at a fraction ``time`` of ``phase``."""

    point: str
    target: str
    phase: str
    time: float = 0.5
    hard: bool = True


@dataclass
class Goals:
    """rotation: total base pitch change over the trick (rad; -2*pi is one backward turn).

    landing_x: (min, max) range for the base x at the end (m). reach: point-to-target goals.
    Bars in the terrain are always kept clear.
    """

    rotation: float | None = None
    landing_x: tuple[float, float] | None = None
    reach: list[Reach] = field(default_factory=list)


@dataclass
class Costs:
    """Cost weights (dimensionless multipliers of terms normalised per second of motion)."""

    effort: float = 1.0
    work: float = 0.0
    torque_rate: float = 0.0
    keyframes: float = 10.0
    landing_pose: float = 10.0
    force_smoothness: float = 0.0

    @staticmethod
    def names() -> list[str]:
        return [f.name for f in fields(Costs)]


@dataclass
class SolverSettings:
    max_iter: int = 500
    tol: float = 1e-8
    time_limit: float = 60.0
    print_level: int = 0


@dataclass
class Trick:
    """Everything that defines a trick. ``robot`` is a path (relative to the trick file) or a bundled name."""

    name: str
    robot: str
    phases: list[Phase]
    terrain: Terrain = field(default_factory=Terrain)
    keyframes: list[Keyframe] = field(default_factory=list)
    goals: Goals = field(default_factory=Goals)
    costs: Costs = field(default_factory=Costs)
    solver: SolverSettings = field(default_factory=SolverSettings)
    landing_pose: dict[str, float] = field(default_factory=dict)
    start_at_rest: bool = True
    end_at_rest: bool = True
    description: str = ""

    def copy(self) -> "Trick":
        return copy.deepcopy(self)

    def phase(self, name: str) -> Phase:
        for p in self.phases:
            if p.name == name:
                return p
        raise KeyError(f"trick {self.name!r} has no phase {name!r}")

    def phase_index(self, name: str) -> int:
        return [p.name for p in self.phases].index(name)

    @property
    def nominal_duration(self) -> float:
        return float(sum(p.duration for p in self.phases))

    def to_dict(self) -> dict[str, Any]:
        data = {"format": TRICK_FORMAT}
        data.update(asdict(self))
        if data["goals"]["landing_x"] is not None:
            data["goals"]["landing_x"] = list(data["goals"]["landing_x"])
        return data

    @staticmethod
    def from_dict(data: dict[str, Any]) -> "Trick":
        """Build from a dict shaped like :meth:`to_dict` (not validated: see trick_file)."""
        d = dict(data)
        d.pop("format", None)
        terrain = d.get("terrain") or {}
        goals = d.get("goals") or {}
        lx = goals.get("landing_x")
        return Trick(
            name=d["name"],
            robot=d["robot"],
            description=d.get("description", ""),
            phases=[Phase(**{**p, "contacts": [Contact(**c) for c in p.get("contacts", [])]})
                    for p in d["phases"]],
            terrain=Terrain(
                ground=terrain.get("ground", 0.0),
                boxes=[Box(**b) for b in terrain.get("boxes", [])],
                targets=[Target(**t) for t in terrain.get("targets", [])],
                bars=[Bar(**b) for b in terrain.get("bars", [])],
            ),
            keyframes=[Keyframe(**k) for k in d.get("keyframes", [])],
            goals=Goals(rotation=goals.get("rotation"),
                        landing_x=tuple(lx) if lx is not None else None,
                        reach=[Reach(**r) for r in goals.get("reach", [])]),
            costs=Costs(**(d.get("costs") or {})),
            solver=SolverSettings(**(d.get("solver") or {})),
            landing_pose=dict(d.get("landing_pose") or {}),
            start_at_rest=d.get("start_at_rest", True),
            end_at_rest=d.get("end_at_rest", True),
        )
