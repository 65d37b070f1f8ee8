"""The outcome of a closed-loop simulation: recorded signals, tracking errors and a landing verdict.

Plain data with an exact JSON round trip (:meth:`SimResult.to_json` / :meth:`SimResult.from_json`,
format ``kipup-sim/1``). A NaN scalar (e.g. no touchdown, so no pitch error) is written as
``null``; the recorded arrays never hold NaN (the recording stops at the last finite state).

Arrays (float64, SI, radians), ``N`` recorded samples (one per simulation step):

* ``t (N,)`` s; ``q, qd (N, nq)`` the simulated state; ``q_plan (N, nq)`` the planned state at
  the same times as the controller used it (after a touchdown the landing phase replayed from the
  actual touchdown, over the actual feet; the final planned pose after the motion ends);
* ``tau (N, nj)`` N m, the joint torques applied (after the motor envelope, before friction);
* ``forces (N, n_points, 2)`` N, world-frame contact force ``(fx, fz)`` on every named point
  (``point_names``), zero when it does not touch.
"""
from __future__ import annotations

import json
import math
import os
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from .atomic import atomic_write

__all__ = ["SIM_FORMAT", "TrackingError", "LandingVerdict", "SimResult"]

SIM_FORMAT = "kipup-sim/1"
_ARRAYS = ("t", "q", "qd", "q_plan", "tau", "forces")


def _f(x: Any) -> float | None:
    """A float for JSON: NaN and infinities become None."""
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


def _nan(x: Any) -> float:
    return math.nan if x is None else float(x)


@dataclass
class TrackingError:
    """RMS and max |simulated - planned| of one coordinate over the planned motion (m or rad)."""

    name: str
    rms: float
    max: float


@dataclass
class LandingVerdict:
    """How the landing went.

    touched: points that touched after the flight, in the order they first touched.
    touchdown_time (s): first contact after the robot was airborne (NaN if it never left the ground
    or never came down); touchdown_time_error (s): against the planned touchdown.
    pitch_error_at_touchdown (rad): simulated base pitch at touchdown minus the planned pitch at
    the planned touchdown (NaN without a touchdown).
    other_contacts: points that touched but are not the planned contacts of that part (the first
    phase's before the flight, the last phase's after it): a knee, a hand, the head...
    stands_still: at the end of the simulation the COM speed is below 0.05 m/s, the base pitch
    rate below 0.1 rad/s and every landing contact point touches (gap < 3 mm).
    com_speed_end (m/s), pitch_rate_end (rad/s): the figures behind it.
    diverged: the state became non-finite or huge, or the robot fell (the reason says which);
    diverged_time (s): when (NaN if it did not).
    joint_limit_excess: joints whose simulated angle left its limits by more than 0.05 rad.
    """

    touched: list[str] = field(default_factory=list)
    touchdown_time: float = math.nan
    touchdown_time_error: float = math.nan
    pitch_error_at_touchdown: float = math.nan
    other_contacts: list[str] = field(default_factory=list)
    stands_still: bool = False
    com_speed_end: float = math.nan
    pitch_rate_end: float = math.nan
    diverged: bool = False
    diverged_time: float = math.nan
    reason: str = ""
    joint_limit_excess: list[str] = field(default_factory=list)

    @property
    def success(self) -> bool:
        """Landed on the planned contacts only and stands still, without diverging."""
        return (not self.diverged) and self.stands_still and not self.other_contacts

    def as_rows(self) -> list[list[str]]:
        """(item, value) rows for people."""

        def num(x: float, unit: str, fmt: str = ".3f") -> str:
            return "-" if not math.isfinite(x) else f"{x:{fmt}} {unit}".rstrip()

        return [
            ["success", "yes" if self.success else "no"],
            ["touched after flight", ", ".join(self.touched) or "-"],
            ["touchdown time", num(self.touchdown_time, "s")],
            ["touchdown time error", num(self.touchdown_time_error, "s", "+.3f")],
            ["pitch error at touchdown", num(self.pitch_error_at_touchdown, "rad", "+.3f")],
            ["other contacts", ", ".join(self.other_contacts) or "none"],
            ["stands still at end", "yes" if self.stands_still else "no"],
            ["COM speed at end", num(self.com_speed_end, "m/s", ".4f")],
            ["pitch rate at end", num(self.pitch_rate_end, "rad/s", ".4f")],
            ["diverged", (f"yes at t = {self.diverged_time:.3f} s ({self.reason})" if self.diverged else "no")],
            ["joint limits left", ", ".join(self.joint_limit_excess) or "none"],
        ]

    def to_dict(self) -> dict[str, Any]:
        return {"touched": list(self.touched), "touchdown_time": _f(self.touchdown_time),
                "touchdown_time_error": _f(self.touchdown_time_error),
                "pitch_error_at_touchdown": _f(self.pitch_error_at_touchdown),
                "other_contacts": list(self.other_contacts), "stands_still": bool(self.stands_still),
                "com_speed_end": _f(self.com_speed_end), "pitch_rate_end": _f(self.pitch_rate_end),
                "diverged": bool(self.diverged), "diverged_time": _f(self.diverged_time), "reason": self.reason,
                "joint_limit_excess": list(self.joint_limit_excess)}

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> "LandingVerdict":
        return cls(touched=list(d["touched"]), touchdown_time=_nan(d["touchdown_time"]),
                   touchdown_time_error=_nan(d["touchdown_time_error"]),
                   pitch_error_at_touchdown=_nan(d["pitch_error_at_touchdown"]),
                   other_contacts=list(d["other_contacts"]), stands_still=bool(d["stands_still"]),
                   com_speed_end=_nan(d["com_speed_end"]), pitch_rate_end=_nan(d["pitch_rate_end"]),
                   diverged=bool(d["diverged"]), diverged_time=_nan(d["diverged_time"]), reason=str(d["reason"]),
                   joint_limit_excess=list(d.get("joint_limit_excess", [])))


@dataclass(eq=False)
class SimResult:
    """Recorded signals of one closed-loop simulation (see the module docstring) and its verdict.

    ``settings`` records how it was run (rates in Hz, delay in s, gains, whether LQR and the
    balance controller were on, perturbations) as plain data.
    """

    robot_name: str
    trick_name: str
    coord_names: list[str]
    joint_names: list[str]
    point_names: list[str]
    t: np.ndarray
    q: np.ndarray
    qd: np.ndarray
    q_plan: np.ndarray
    tau: np.ndarray
    forces: np.ndarray
    errors: list[TrackingError]
    verdict: LandingVerdict
    settings: dict[str, Any] = field(default_factory=dict)

    def __post_init__(self) -> None:
        for name in _ARRAYS:
            setattr(self, name, np.asarray(getattr(self, name), dtype=np.float64))
        n, nq, nj, npts = self.t.size, len(self.coord_names), len(self.joint_names), len(self.point_names)
        shapes = {"q": (n, nq), "qd": (n, nq), "q_plan": (n, nq), "tau": (n, nj), "forces": (n, npts, 2)}
        for name, shape in shapes.items():
            a = getattr(self, name)
            if a.size == 0 and n == 0:
                setattr(self, name, a.reshape(shape))
            elif a.shape != shape:
                raise ValueError(f"{name} must have shape {shape}; got {a.shape}")

    def error(self, name: str) -> TrackingError:
        """The tracking error of coordinate ``name`` (base_x, base_pitch, a joint...)."""
        for e in self.errors:
            if e.name == name:
                return e
        raise KeyError(f"no coordinate {name!r}; coordinates: {', '.join(e.name for e in self.errors)}")

    def error_rows(self) -> list[list[str]]:
        rows = [["coordinate", "RMS error", "max error", "unit"]]
        for e in self.errors:
            unit = "m" if e.name in ("base_x", "base_z") else "rad"
            rows.append([e.name, f"{e.rms:.4f}", f"{e.max:.4f}", unit])
        return rows

    # ----- plain data -----------------------------------------------------------------------
    def to_dict(self) -> dict[str, Any]:
        d: dict[str, Any] = {
            "format": SIM_FORMAT, "robot_name": self.robot_name, "trick_name": self.trick_name,
            "coord_names": list(self.coord_names), "joint_names": list(self.joint_names),
            "point_names": list(self.point_names),
            "errors": [{"name": e.name, "rms": _f(e.rms), "max": _f(e.max)} for e in self.errors],
            "verdict": self.verdict.to_dict(), "settings": self.settings,
        }
        for name in _ARRAYS:
            d[name] = getattr(self, name).tolist()
        return d

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> "SimResult":
        if d.get("format") != SIM_FORMAT:
            raise ValueError(f"format: expected {SIM_FORMAT!r}, got {d.get('format')!r}")
        try:
            return cls(robot_name=d["robot_name"], trick_name=d["trick_name"], coord_names=list(d["coord_names"]),
                       joint_names=list(d["joint_names"]), point_names=list(d["point_names"]),
                       errors=[TrackingError(e["name"], _nan(e["rms"]), _nan(e["max"])) for e in d["errors"]],
                       verdict=LandingVerdict.from_dict(d["verdict"]), settings=dict(d.get("settings", {})),
                       **{name: d[name] for name in _ARRAYS})
        except KeyError as e:
            raise ValueError(f"simulation data: missing field {e.args[0]!r}") from None

    def to_json(self, path: str | os.PathLike[str]) -> None:
        """Write a ``kipup-sim/1`` JSON file atomically."""
        text = json.dumps(self.to_dict(), allow_nan=False)
        atomic_write(path, lambda f: f.write(text.encode("utf-8")))

    @classmethod
    def from_json(cls, path: str | os.PathLike[str]) -> "SimResult":
        with open(path, encoding="utf-8") as f:
            d = json.load(f)
        if not isinstance(d, dict):
            raise ValueError(f"{path}: not a kipup simulation file (expected a JSON object)")
        return cls.from_dict(d)

    def __eq__(self, other: object) -> bool:
        if not isinstance(other, SimResult):
            return NotImplemented
        same_arrays = all(np.array_equal(getattr(self, n), getattr(other, n)) for n in _ARRAYS)
        return same_arrays and self.to_dict() == other.to_dict()
