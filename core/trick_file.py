"""Trick files (``format: kipup-trick/1``): load, validate and save.

A trick file is the YAML form of :meth:`kipup.core.trick.Trick.to_dict`, SI units and
radians, world frame (x forward, z up, angles about +y)::

    format: kipup-trick/1
    name: box_hop
    description: an invented demo hop onto a box
    robot: humanoid                   # a bundled robot name, or a robot file path relative
                                      # to this file's folder (e.g. ../robots/mine.yaml)
    terrain:
      ground: 0.0                     # m
      boxes: [{name: step, x_min: 0.4, x_max: 0.9, height: 0.2}]     # m
      targets: [{name: mark, x: 0.3, z: 1.4}]                         # m
      bars: [{name: rod, x: 0.2, z: 0.5, radius: 0.02}]              # m, always kept clear
    phases:                           # in time order; the first and the last need contacts
      - name: push
        contacts: [{point: toe, surface: ground}, {point: heel}]    # surface: ground or a box
        duration: 0.4                 # s, nominal; free if both bounds are given
        duration_min: 0.2
        duration_max: 0.6
        knots: 20                     # intervals of the phase's time grid
      - {name: flight, contacts: [], duration: 0.3}
      - {name: land, contacts: [{point: toe, surface: step}], duration: 0.4}
    keyframes:                        # poses by coordinate name (Robot.coord_names)
      - {name: crouch, phase: push, time: 0.5, pose: {knee: 1.2}, hard: false, weight: 1.0}
      - {name: top, time: 0.55, pose: {base_pitch: -0.3}}   # no phase: time in s
    goals:
      rotation: null                  # total base pitch change, rad (-2 pi: one backflip)
      landing_x: [0.5, 0.8]           # m, range of the final base x
      reach: [{point: hand, target: mark, phase: flight, time: 0.5, hard: true}]
    costs: {effort: 1.0, keyframes: 10.0}    # weights, >= 0
    landing_pose: {knee: 0.3}
    start_at_rest: true
    end_at_rest: true
    solver: {max_iter: 500, tol: 1.0e-6, time_limit: 60.0, print_level: 0}

Every field the :class:`~kipup.core.trick.Trick` dataclasses give a default may be left out.

:func:`validate_trick_dict` reports every problem at once, each with a field path such as
``phases[2].contacts[0].point`` or ``keyframes[1].pose.knee``: JSON-schema problems (schema in
``schema/trick.schema.json``, Draft 2020-12; unknown keys are errors) and the rules the schema
can't express (names against the robot and the terrain, times, durations, NaN/infinity, hard
keyframes that contradict each other, the joint limits or the rotation goal).

Times: a keyframe with a ``phase`` has ``time`` as a fraction 0..1 of that phase; one without
has an absolute time (s), located with the phases' nominal durations. Two hard keyframes are
at the same instant when they land on the same nominal time (so fraction 1 of a phase is
fraction 0 of the next one).

Loading raises :class:`TrickFileError` listing the problems and never modifies the file.
"""
from __future__ import annotations

import copy
import difflib
import json
import math
import numbers
import os
import re
from dataclasses import fields
from functools import lru_cache
from importlib import resources
from pathlib import Path
from typing import Any, Iterable

import jsonschema
import yaml

from .atomic import atomic_write_text
from .robot import Robot
from .robot_file import (
    DOCUMENT,
    Problem,
    RobotFileError,
    _checked_validator,
    _Dumper,
    _FlowMap,
    _FlowSeq,
    _describe,
    _join,
    _type_message,
    bundled_robot_names,
    load_bundled,
    load_robot,
    parse_yaml,
    read_yaml_file,
)
from .trick import TRICK_FORMAT, Keyframe, Phase, Reach, Trick

__all__ = [
    "TRICK_FORMAT",
    "SAFETY_CAUTION",
    "TrickFileError",
    "trick_schema",
    "validate_trick_dict",
    "resolve_robot",
    "trick_from_dict",
    "trick_from_text",
    "load_trick",
    "trick_to_dict",
    "trick_to_yaml",
    "save_trick",
    "check_trick",
    "trick_summary",
]

SAFETY_CAUTION = ("Trajectories from this file must be simulated first and run on hardware only under "
                  "your lab's safety rules and local regulations.")

_HEADER = ("# kipup trick file (kipup-trick/1). SI units, radians; x forward, z up, angles about +y.\n"
           f"# {SAFETY_CAUTION}\n")

#: Top-level keys in the order a saved file lists them (also the order problems are reported in).
KEY_ORDER = ("format", "name", "description", "robot", "terrain", "phases", "keyframes", "goals", "costs",
             "landing_pose", "start_at_rest", "end_at_rest", "solver")

_DEFAULT_DURATION = {f.name: f.default for f in fields(Phase)}["duration"]
_DEFAULT_HARD = {f.name: f.default for f in fields(Keyframe)}["hard"]
_DEFAULT_REACH_TIME = {f.name: f.default for f in fields(Reach)}["time"]

_KEYFRAME_ORDER = ("name", "phase", "time", "pose", "hard", "weight")

_TIME_TOL = 1e-9   # s: two nominal times closer than this are the same instant
_VALUE_TOL = 1e-9  # m or rad: two keyframe values closer than this agree


# ---------------------------------------------------------------------------------------
# problems
# ---------------------------------------------------------------------------------------
class TrickFileError(ValueError):
    """A trick file or dict could not be read; ``problems`` lists every problem found."""

    def __init__(self, problems: Iterable[Problem]):
        self.problems: tuple[Problem, ...] = tuple(problems)
        super().__init__("\n".join(str(p) for p in self.problems))

    def __str__(self) -> str:
        return "\n".join(str(p) for p in self.problems)


def _format_path(parts: Iterable[Any]) -> str:
    out = DOCUMENT
    for part in parts:
        out = _join(out, part)
    return out


def _path_key(path: str) -> tuple:
    tokens = re.findall(r"\[\d+\]|[^.\[\]]+", path)
    if not tokens:
        return ()
    head = tokens[0]
    rank = KEY_ORDER.index(head) if head in KEY_ORDER else (-1 if head in (DOCUMENT, "file") else len(KEY_ORDER))
    rest = tuple((0, int(t[1:-1]), "") if t.startswith("[") else (1, 0, t) for t in tokens[1:])
    return ((rank,),) + rest


def _sorted(problems: Iterable[Problem]) -> list[Problem]:
    unique = list(dict.fromkeys(problems))
    unique.sort(key=lambda p: _path_key(p.path))  # stable: per field, schema problems first
    return unique


def _hint(name: Any, choices: Iterable[str]) -> str:
    close = difflib.get_close_matches(str(name), list(choices), n=1)
    return f" (did you mean {close[0]!r}?)" if close else ""


def _listing(names: Iterable[str]) -> str:
    names = list(names)
    return ", ".join(names) if names else "(none)"


# ---------------------------------------------------------------------------------------
# schema
# ---------------------------------------------------------------------------------------
@lru_cache(maxsize=1)
def trick_schema() -> dict:
    """The JSON schema (Draft 2020-12) of a trick file, as a dict."""
    text = resources.files("kipup.core").joinpath("schema", "trick.schema.json").read_text(encoding="utf-8")
    return json.loads(text)


@lru_cache(maxsize=1)
def _validator() -> jsonschema.Draft202012Validator:
    return _checked_validator(trick_schema())


def _schema_problems(data: Any) -> list[Problem]:
    out: list[Problem] = []
    for err in _validator().iter_errors(data):
        path = _format_path(err.absolute_path)
        kind, value, inst = err.validator, err.validator_value, err.instance
        if "propertyNames" in err.schema_path:
            out.append(Problem(path, f"coordinate names must be non-empty strings (got {_describe(inst)})"))
        elif kind == "required":
            missing = [k for k in value if isinstance(inst, dict) and k not in inst]
            for key in missing:
                out.append(Problem(_join(path, key), f"required field {key!r} is missing"))
        elif kind == "additionalProperties":
            allowed = list(err.schema.get("properties", {}))
            for extra in sorted((k for k in inst if k not in allowed), key=str):
                hint = _hint(extra, allowed)
                out.append(Problem(_join(path, extra), f"unknown field {extra!r}"
                                   + (hint if hint else f"; allowed fields: {', '.join(allowed)}")))
        elif kind == "type":
            out.append(Problem(path, _type_message(value, inst)))
        elif kind == "exclusiveMinimum" and value == 0:
            out.append(Problem(path, f"must be positive (got {inst!r})"))
        elif kind == "exclusiveMinimum":
            out.append(Problem(path, f"must be > {value} (got {inst!r})"))
        elif kind == "minimum" and value == 0:
            out.append(Problem(path, f"must not be negative (got {inst!r})"))
        elif kind == "minimum":
            out.append(Problem(path, f"must be at least {value} (got {inst!r})"))
        elif kind == "maximum":
            out.append(Problem(path, f"must be at most {value} (got {inst!r})"))
        elif kind == "minItems" and path == "phases":
            out.append(Problem(path, "empty: a trick needs at least one phase"))
        elif kind in ("minItems", "maxItems"):
            out.append(Problem(path, f"must be a list of 2 numbers [min, max] (got {len(inst)} items)"))
        elif kind == "const":
            hint = " (that is a robot file, not a trick file)" if inst == "kipup-robot/1" else ""
            out.append(Problem(path, f"must be {value!r} (got {_describe(inst)}){hint}"))
        elif kind == "minLength":
            out.append(Problem(path, "must not be empty"))
        else:
            out.append(Problem(path, err.message))
    return out


# ---------------------------------------------------------------------------------------
# semantic checks
# ---------------------------------------------------------------------------------------
def _is_number(x: Any) -> bool:
    return isinstance(x, numbers.Real) and not isinstance(x, bool)


def _finite(x: Any) -> float | None:
    """x as a float if it is a finite real number (not a bool), else None."""
    if not _is_number(x):
        return None
    try:
        f = float(x)
    except (OverflowError, ValueError):
        return None
    return f if math.isfinite(f) else None


def _nonfinite_problems(data: Any, path: str, out: list[Problem], seen: set[int]) -> None:
    if isinstance(data, (dict, list)):
        if id(data) in seen:  # YAML aliases can share (or loop) nodes
            return
        seen.add(id(data))
        items = data.items() if isinstance(data, dict) else enumerate(data)
        for key, value in items:
            _nonfinite_problems(value, _join(path, key), out, seen)
    elif _is_number(data) and _finite(data) is None:
        try:
            value = float(data)
        except OverflowError:
            out.append(Problem(path, "is too large to be a number"))
            return
        if math.isnan(value):
            out.append(Problem(path, "must be a finite number, not NaN"))
        else:
            out.append(Problem(path, f"must be a finite number (got {'-' if data < 0 else ''}infinity)"))


def _get(d: Any, key: str, default: Any = None) -> Any:
    return d.get(key, default) if isinstance(d, dict) else default


def _items(d: Any, key: str) -> list[tuple[int, dict]]:
    """(index, entry) for the mapping entries of the list ``d[key]`` (anything else is skipped)."""
    value = _get(d, key)
    if not isinstance(value, list):
        return []
    return [(i, v) for i, v in enumerate(value) if isinstance(v, dict)]


def _name(d: Any) -> str | None:
    n = _get(d, "name")
    return n if isinstance(n, str) else None


def _duplicates(entries: list[tuple[int, dict]], prefix: str, what: str, out: list[Problem]) -> dict[str, int]:
    """Report repeated names; returns name -> index of its first entry."""
    first: dict[str, int] = {}
    for i, entry in entries:
        name = _name(entry)
        if name is None:
            continue
        if name in first:
            out.append(Problem(f"{prefix}[{i}].name",
                               f"duplicate {what} name {name!r} (also {prefix}[{first[name]}].name)"))
        else:
            first[name] = i
    return first


def _fmt(x: float) -> str:
    return f"{x:g}"


def _pose_problems(pose: Any, path: str, robot: Robot | None, out: list[Problem]) -> None:
    if robot is None or not isinstance(pose, dict):
        return
    valid = robot.coord_names
    for coord in pose:
        if isinstance(coord, str) and coord and coord not in valid:
            out.append(Problem(_join(path, coord),
                               f"unknown coordinate {coord!r}{_hint(coord, valid)}; coordinates of robot "
                               f"{robot.name!r}: {_listing(valid)}"))


def _point_problem(point: Any, path: str, robot: Robot | None, out: list[Problem], *, contact: bool) -> None:
    if robot is None or not isinstance(point, str) or not point:
        return
    names = robot.point_names
    if point not in names:
        out.append(Problem(path, f"unknown point {point!r}{_hint(point, names)}; points of robot "
                                 f"{robot.name!r}: {_listing(names)}"))
    elif contact and robot.point(point).friction is None:
        usable = [p.name for p in robot.points if p.friction is not None]
        out.append(Problem(path, f"point {point!r} of robot {robot.name!r} has no friction coefficient, so it "
                                 f"can't be a contact; contact points: {_listing(usable)}"))


def _semantic_problems(data: dict, robot: Robot | None) -> list[Problem]:
    out: list[Problem] = []

    # --- terrain -----------------------------------------------------------------------
    terrain = _get(data, "terrain")
    ground = _finite(_get(terrain, "ground", 0.0))
    boxes = _items(terrain, "boxes")
    box_at = _duplicates(boxes, "terrain.boxes", "box", out)
    target_at = _duplicates(_items(terrain, "targets"), "terrain.targets", "target", out)
    _duplicates(_items(terrain, "bars"), "terrain.bars", "bar", out)
    for i, box in boxes:
        p = f"terrain.boxes[{i}]"
        if _name(box) == "ground":
            out.append(Problem(f"{p}.name", "'ground' is the name of the ground surface; give the box another name"))
        lo, hi, h = _finite(_get(box, "x_min")), _finite(_get(box, "x_max")), _finite(_get(box, "height"))
        if lo is not None and hi is not None and lo >= hi:
            out.append(Problem(f"{p}.x_min", f"x_min ({_fmt(lo)} m) must be below x_max ({_fmt(hi)} m)"))
        if h is not None and ground is not None and h <= ground:
            out.append(Problem(f"{p}.height", f"the box top ({_fmt(h)} m) must be above the ground "
                                              f"({_fmt(ground)} m)"))
    surfaces = ["ground"] + [n for n in box_at if n != "ground"]

    # --- phases --------------------------------------------------------------------------
    phases_raw = _get(data, "phases")
    phases = _items(data, "phases")
    phase_at = _duplicates(phases, "phases", "phase", out)
    phase_names = list(phase_at)
    durations: list[float | None] = []
    for i, ph in phases:
        p = f"phases[{i}]"
        contacts = _get(ph, "contacts", [])
        seen_points: dict[str, int] = {}
        for j, c in (enumerate(contacts) if isinstance(contacts, list) else []):
            if not isinstance(c, dict):
                continue
            cp = f"{p}.contacts[{j}]"
            point, surface = _get(c, "point"), _get(c, "surface", "ground")
            _point_problem(point, f"{cp}.point", robot, out, contact=True)
            if isinstance(point, str):
                if point in seen_points:
                    out.append(Problem(f"{cp}.point", f"point {point!r} is already a contact of this phase "
                                                      f"({p}.contacts[{seen_points[point]}])"))
                else:
                    seen_points[point] = j
            if isinstance(surface, str) and surface and surface not in surfaces:
                out.append(Problem(f"{cp}.surface", f"unknown surface {surface!r}{_hint(surface, surfaces)}; "
                                                    f"surfaces: {_listing(surfaces)} (ground or a box name)"))
        d = _finite(_get(ph, "duration", _DEFAULT_DURATION))
        dmin, dmax = _get(ph, "duration_min"), _get(ph, "duration_max")
        fmin, fmax = _finite(dmin), _finite(dmax)
        if dmin is not None and dmax is None:
            out.append(Problem(f"{p}.duration_min", "duration_min is given without duration_max: give both "
                                                    "bounds for a free duration, or neither for a fixed one"))
        elif dmax is not None and dmin is None:
            out.append(Problem(f"{p}.duration_max", "duration_max is given without duration_min: give both "
                                                    "bounds for a free duration, or neither for a fixed one"))
        elif fmin is not None and fmax is not None and fmin > 0 and fmax > 0:
            if fmin > fmax:
                out.append(Problem(f"{p}.duration_min", f"duration_min ({_fmt(fmin)} s) is above duration_max "
                                                        f"({_fmt(fmax)} s)"))
            elif d is not None and d > 0 and not fmin <= d <= fmax:
                out.append(Problem(f"{p}.duration", f"the nominal duration ({_fmt(d)} s) is outside "
                                                     f"[duration_min, duration_max] = [{_fmt(fmin)}, {_fmt(fmax)}] s"))
        durations.append(d if d is not None and d > 0 else None)
    if isinstance(phases_raw, list) and phases_raw and len(phases) == len(phases_raw):
        n = len(phases)
        first, last = phases[0][1], phases[-1][1]
        if isinstance(_get(first, "contacts", []), list) and not _get(first, "contacts", []):
            out.append(Problem("phases[0].contacts",
                               f"the first phase ({_name(first)!r}) has no contacts: a trick starts on the "
                               "ground, so give it at least one contact"))
        if isinstance(_get(last, "contacts", []), list) and not _get(last, "contacts", []):
            out.append(Problem(f"phases[{n - 1}].contacts",
                               f"the last phase ({_name(last)!r}) has no contacts: a trick must end in a "
                               "landing stance, so give it at least one contact"))

    # nominal timeline (only when every phase has a usable duration)
    all_phases = isinstance(phases_raw, list) and bool(phases) and len(phases) == len(phases_raw)
    n_phases = len(phases) if all_phases else 0
    starts: list[float] | None = None
    horizon: float | None = None
    if all_phases and all(d is not None for d in durations):
        starts, t = [], 0.0
        for d in durations:
            starts.append(t)
            t += d  # type: ignore[operator]
        horizon = t

    def instant(k: int, frac: float) -> tuple[int, float]:
        """Canonical (phase index, fraction): fraction 1 of a phase is fraction 0 of the next."""
        if frac >= 1.0 - _TIME_TOL and k + 1 < n_phases:
            return k + 1, 0.0
        return k, frac

    def at_absolute(t: float) -> tuple[int, float]:
        """The (phase index, fraction) of an absolute time inside the nominal horizon."""
        assert starts is not None and horizon is not None
        ds = [float(d) for d in durations if d is not None]
        k = 0
        while k + 1 < n_phases and t > starts[k] + ds[k]:
            k += 1
        return instant(k, min(max((t - starts[k]) / ds[k], 0.0), 1.0))

    # --- keyframes -----------------------------------------------------------------------
    keyframes = _items(data, "keyframes")
    _duplicates(keyframes, "keyframes", "keyframe", out)
    # hard keyframes with a known instant: (index, keyframe, (phase index, fraction), description)
    instants: list[tuple[int, dict, tuple[int, float], str]] = []
    for i, kf in keyframes:
        p = f"keyframes[{i}]"
        phase, time = _get(kf, "phase"), _finite(_get(kf, "time"))
        when: tuple[int, float] | None = None
        where = ""
        if phase is not None:
            if isinstance(phase, str) and phase and phase not in phase_at:
                out.append(Problem(f"{p}.phase", f"unknown phase {phase!r}{_hint(phase, phase_names)}; "
                                                 f"phases: {_listing(phase_names)}"))
            if time is not None and not 0.0 <= time <= 1.0:
                out.append(Problem(f"{p}.time", f"with phase {phase!r} given, time is a fraction of that phase "
                                                f"and must be in [0, 1] (got {_fmt(time)})"))
            elif time is not None and all_phases and phase in phase_at:
                when, where = instant(phase_at[phase], time), f"fraction {_fmt(time)} of phase {phase!r}"
        elif time is not None and horizon is not None:
            if not 0.0 <= time <= horizon:
                out.append(Problem(f"{p}.time", f"absolute time {_fmt(time)} s is outside the horizon "
                                                f"[0, {_fmt(horizon)}] s (the phases' nominal durations add up "
                                                f"to {_fmt(horizon)} s); give a phase to use a fraction"))
            else:
                when, where = at_absolute(time), f"t = {_fmt(time)} s"
        pose = _get(kf, "pose")
        _pose_problems(pose, f"{p}.pose", robot, out)
        hard = _get(kf, "hard", _DEFAULT_HARD)
        if hard is True and isinstance(pose, dict):
            if robot is not None:
                for coord, value in pose.items():
                    v = _finite(value)
                    if v is None or coord not in robot.joint_names:
                        continue
                    joint = robot.joints[robot.joint_names.index(coord)]
                    if not joint.lower - _VALUE_TOL <= v <= joint.upper + _VALUE_TOL:
                        out.append(Problem(_join(f"{p}.pose", coord),
                                           f"hard keyframe {_name(kf)!r} sets joint {coord!r} to {_fmt(v)} rad, "
                                           f"outside its position limits [{_fmt(joint.lower)}, "
                                           f"{_fmt(joint.upper)}] rad (robot {robot.name!r})"))
            if when is not None:
                instants.append((i, kf, when, where))

    def same(a: tuple[int, float], b: tuple[int, float]) -> bool:
        return a[0] == b[0] and abs(a[1] - b[1]) <= _TIME_TOL

    # contradictory hard keyframes at the same instant
    for a in range(len(instants)):
        j, kf_j, when_j, where_j = instants[a]
        for coord, value in _get(kf_j, "pose").items():
            vj = _finite(value)
            if vj is None:
                continue
            for b in range(a):
                i, kf_i, when_i, where_i = instants[b]
                vi = _finite(_get(kf_i, "pose").get(coord))
                if vi is not None and same(when_i, when_j) and abs(vi - vj) > _VALUE_TOL:
                    out.append(Problem(_join(f"keyframes[{j}].pose", coord),
                                       f"contradicts hard keyframe {_name(kf_i)!r} (keyframes[{i}]) at the same "
                                       f"instant ({where_j}{'' if where_i == where_j else f', and {where_i} there'}"
                                       f"): {coord} = {_fmt(vj)} here but {_fmt(vi)} there"))
                    break

    # --- goals -----------------------------------------------------------------------------
    goals = _get(data, "goals")
    lx = _get(goals, "landing_x")
    if isinstance(lx, list) and len(lx) == 2:
        lo, hi = _finite(lx[0]), _finite(lx[1])
        if lo is not None and hi is not None and lo > hi:
            out.append(Problem("goals.landing_x", f"the range [min, max] = [{_fmt(lo)}, {_fmt(hi)}] m has "
                                                  "min above max"))
    target_names = list(target_at)
    for i, r in _items(goals, "reach"):
        p = f"goals.reach[{i}]"
        _point_problem(_get(r, "point"), f"{p}.point", robot, out, contact=False)
        target, phase = _get(r, "target"), _get(r, "phase")
        if isinstance(target, str) and target and target not in target_at:
            out.append(Problem(f"{p}.target", f"unknown target {target!r}{_hint(target, target_names)}; "
                                              f"terrain targets: {_listing(target_names)}"))
        if isinstance(phase, str) and phase and phase not in phase_at:
            out.append(Problem(f"{p}.phase", f"unknown phase {phase!r}{_hint(phase, phase_names)}; "
                                             f"phases: {_listing(phase_names)}"))
        time = _finite(_get(r, "time", _DEFAULT_REACH_TIME))
        if time is not None and not 0.0 <= time <= 1.0:
            out.append(Problem(f"{p}.time", f"time is a fraction of phase {phase!r} and must be in [0, 1] "
                                            f"(got {_fmt(time)})"))

    # hard base_pitch at the start and at the end against the rotation goal
    rotation = _finite(_get(goals, "rotation"))
    if rotation is not None and n_phases:
        def pitch_at(when: tuple[int, float]) -> tuple[int, dict, float] | None:
            for i, kf, when_i, _ in instants:
                v = _finite(_get(kf, "pose").get("base_pitch"))
                if v is not None and same(when_i, when):
                    return i, kf, v
            return None

        first_pitch, last_pitch = pitch_at((0, 0.0)), pitch_at((n_phases - 1, 1.0))
        if first_pitch is not None and last_pitch is not None \
                and abs((last_pitch[2] - first_pitch[2]) - rotation) > _VALUE_TOL:
            a, b = first_pitch, last_pitch
            out.append(Problem("goals.rotation",
                               f"contradicts the hard keyframes {_name(a[1])!r} (keyframes[{a[0]}]) and "
                               f"{_name(b[1])!r} (keyframes[{b[0]}]): they pin base_pitch to {_fmt(a[2])} rad "
                               f"at the start and {_fmt(b[2])} rad at the end, a change of "
                               f"{_fmt(b[2] - a[2])} rad, but rotation asks for {_fmt(rotation)} rad"))

    # --- landing pose ------------------------------------------------------------------------
    _pose_problems(_get(data, "landing_pose"), "landing_pose", robot, out)
    return out


def validate_trick_dict(data: Any, robot: Robot | None) -> list[Problem]:
    """Every problem in a trick document (the parsed YAML), or ``[]`` if it is a valid trick file.

    ``robot`` is the robot the ``robot`` field names (see :func:`resolve_robot`); with None the
    checks against the robot (coordinate and point names, friction, joint limits) are skipped
    and an unresolvable ``robot`` field is *not* reported (the caller does that). Never raises.
    """
    if data is None:
        return [Problem(DOCUMENT, f"empty document; expected a mapping with format: {TRICK_FORMAT}, name, "
                                  "robot and phases")]
    try:
        nonfinite: list[Problem] = []
        _nonfinite_problems(data, DOCUMENT, nonfinite, set())
        bad = {p.path for p in nonfinite}
        schema = [p for p in _schema_problems(data) if p.path not in bad]
        semantic = _semantic_problems(data, robot) if isinstance(data, dict) else []
        return _sorted(schema + nonfinite + semantic)
    except RecursionError:
        return [Problem(DOCUMENT, "the document is nested too deeply")]


# ---------------------------------------------------------------------------------------
# the robot field
# ---------------------------------------------------------------------------------------
def _looks_like_path(ref: str) -> bool:
    return "/" in ref or "\\" in ref or ref.lower().endswith((".yaml", ".yml"))


def resolve_robot(ref: Any, base_dir: str | os.PathLike[str] | None = None) -> tuple[Robot | None, list[Problem]]:
    """The robot a trick's ``robot`` field names: ``(robot, [])`` or ``(None, problems at 'robot')``.

    A value with a path separator or a ``.yaml``/``.yml`` ending is a robot file path, relative to
    ``base_dir`` (the trick file's folder; default: the current folder). Any other value is a
    bundled robot name (:func:`~kipup.core.robot_file.bundled_robot_names`), or failing that a
    file of that name in ``base_dir``. Never raises for bad input.
    """
    if not isinstance(ref, str) or not ref:
        return None, []  # the schema reports it
    folder = Path(base_dir) if base_dir is not None else Path.cwd()
    candidate = folder / ref
    bundled = bundled_robot_names()
    if not _looks_like_path(ref):
        if ref in bundled:
            try:
                return load_bundled(ref), []
            except (RobotFileError, ValueError) as exc:
                return None, [Problem("robot", f"bundled robot {ref!r} could not be loaded: {exc}")]
        if not candidate.is_file():
            return None, [Problem("robot", f"unknown robot {ref!r}{_hint(ref, bundled)}: not a bundled robot "
                                           f"(bundled robots: {_listing(bundled)}) and no file {str(candidate)!r}")]
    elif not candidate.exists():
        rel = "the trick file's folder" if base_dir is not None else "the current folder"
        return None, [Problem("robot", f"robot file not found: {ref!r} (looked for {str(candidate)!r}; a relative "
                                       f"path is relative to {rel})")]
    try:
        return load_robot(candidate), []
    except RobotFileError as exc:
        return None, [Problem("robot", f"robot file {ref!r} has a problem: {p.path}: {p.message}")
                      for p in exc.problems]


# ---------------------------------------------------------------------------------------
# dict <-> Trick
# ---------------------------------------------------------------------------------------
def _to_float(x: Any) -> Any:
    return float(x) if _is_number(x) else x


def _to_int(x: Any) -> Any:
    return int(x) if _is_number(x) and float(x).is_integer() else x


def _normalized(data: dict) -> dict:
    """A copy with floats where the dataclasses hold floats and ints where they hold ints."""
    d = copy.deepcopy(data)

    def floats(m: Any, *keys: str) -> None:
        if isinstance(m, dict):
            for k in keys:
                if k in m and m[k] is not None:
                    m[k] = _to_float(m[k])

    def pose(m: Any) -> Any:
        return {k: _to_float(v) for k, v in m.items()} if isinstance(m, dict) else m

    for ph in d.get("phases") or []:
        floats(ph, "duration", "duration_min", "duration_max")
        if "knots" in ph:
            ph["knots"] = _to_int(ph["knots"])
    terrain = d.get("terrain") or {}
    floats(terrain, "ground")
    for b in terrain.get("boxes") or []:
        floats(b, "x_min", "x_max", "height")
    for t in terrain.get("targets") or []:
        floats(t, "x", "z")
    for b in terrain.get("bars") or []:
        floats(b, "x", "z", "radius")
    for kf in d.get("keyframes") or []:
        floats(kf, "time", "weight")
        kf["pose"] = pose(kf.get("pose"))
    goals = d.get("goals") or {}
    floats(goals, "rotation")
    if isinstance(goals.get("landing_x"), list):
        goals["landing_x"] = [_to_float(x) for x in goals["landing_x"]]
    for r in goals.get("reach") or []:
        floats(r, "time")
    costs = d.get("costs") or {}
    floats(costs, *costs.keys())
    solver = d.get("solver") or {}
    floats(solver, "tol", "time_limit")
    for k in ("max_iter", "print_level"):
        if k in solver:
            solver[k] = _to_int(solver[k])
    if "landing_pose" in d:
        d["landing_pose"] = pose(d["landing_pose"])
    return d


def _check_data(data: Any, base_dir: str | os.PathLike[str] | None) -> tuple[list[Problem], Robot | None]:
    robot, robot_problems = resolve_robot(_get(data, "robot"), base_dir)
    return _sorted(validate_trick_dict(data, robot) + robot_problems), robot


def trick_from_dict(data: Any, base_dir: str | os.PathLike[str] | None = None) -> tuple[Trick, Robot]:
    """Validate a parsed trick document and build ``(trick, robot)``.

    ``base_dir`` is the folder a relative ``robot`` path is resolved against (default: the
    current folder). Raises :class:`TrickFileError` listing every problem.
    """
    problems, robot = _check_data(data, base_dir)
    if problems:
        raise TrickFileError(problems)
    assert robot is not None
    try:
        return Trick.from_dict(_normalized(data)), robot
    except Exception as exc:  # a rule validate_trick_dict missed: still no traceback from inside
        raise TrickFileError([Problem(DOCUMENT, f"cannot build the trick: {exc}")]) from None


def trick_from_text(text: str, base_dir: str | os.PathLike[str] | None = None) -> tuple[Trick, Robot]:
    """Parse, validate and build ``(trick, robot)`` from trick file text (see :func:`trick_from_dict`)."""
    data, problems = parse_yaml(text)
    if problems:
        raise TrickFileError(problems)
    return trick_from_dict(data, base_dir)


def load_trick(path: str | os.PathLike[str]) -> tuple[Trick, Robot]:
    """Load a trick file and the robot it names: ``(trick, robot)``.

    A relative ``robot`` path is resolved against the trick file's folder. Raises
    :class:`TrickFileError` listing every problem (an unreadable file or a YAML syntax error
    is one problem, with its line and column). Never writes to the file.
    """
    data, problems = read_yaml_file(path)
    if problems:
        raise TrickFileError(problems)
    return trick_from_dict(data, Path(os.path.abspath(os.fspath(path))).parent)


def _plain(value: Any) -> Any:
    """Plain Python containers and scalars (NumPy scalars become int/float, tuples lists)."""
    if isinstance(value, dict):
        return {k: _plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    if isinstance(value, bool) or value is None or isinstance(value, str):
        return value
    if isinstance(value, numbers.Integral):
        return int(value)
    if isinstance(value, numbers.Real):
        return float(value)
    return value


def trick_to_dict(trick: Trick) -> dict[str, Any]:
    """The trick file document of ``trick``: keys in :data:`KEY_ORDER`, unset optional fields left out.

    ``trick_from_dict(trick_to_dict(t))[0] == t``.
    """
    raw = _plain(trick.to_dict())
    for ph in raw["phases"]:
        for k in ("duration_min", "duration_max"):
            if ph.get(k) is None:
                ph.pop(k, None)
    for n, kf in enumerate(raw["keyframes"]):
        if kf.get("phase") is None:
            kf.pop("phase", None)
        raw["keyframes"][n] = {k: kf[k] for k in _KEYFRAME_ORDER if k in kf} | kf
    for k in ("rotation", "landing_x"):
        if raw["goals"].get(k) is None:
            raw["goals"].pop(k, None)
    if not raw.get("description"):
        raw.pop("description", None)
    out = {k: raw[k] for k in KEY_ORDER if k in raw}
    out.update({k: v for k, v in raw.items() if k not in out})
    return out


def _styled(data: dict) -> dict:
    """Small things on one line: contacts, poses, terrain items, reach goals, landing_x."""
    d = copy.deepcopy(data)
    flow = lambda items: _FlowSeq(_FlowMap(x) for x in items)  # noqa: E731
    terrain = d.get("terrain", {})
    for key in ("boxes", "targets", "bars"):
        if key in terrain:
            terrain[key] = flow(terrain[key])
    for ph in d.get("phases", []):
        ph["contacts"] = flow(ph.get("contacts", []))
    for kf in d.get("keyframes", []):
        kf["pose"] = _FlowMap(kf["pose"])
    goals = d.get("goals", {})
    if "landing_x" in goals:
        goals["landing_x"] = _FlowSeq(goals["landing_x"])
    if "reach" in goals:
        goals["reach"] = flow(goals["reach"])
    if "landing_pose" in d:
        d["landing_pose"] = _FlowMap(d["landing_pose"])
    return d


def trick_to_yaml(trick: Trick) -> str:
    """The trick file text of ``trick`` (header comment with the safety caution, then the document).

    Checks the document without a robot (schema, names, times); raises :class:`TrickFileError`.
    """
    data = trick_to_dict(trick)
    problems = validate_trick_dict(data, None)
    if problems:
        raise TrickFileError(problems)
    body = yaml.dump(_styled(data), Dumper=_Dumper, sort_keys=False, allow_unicode=True, width=110,
                     default_flow_style=False)
    return _HEADER + body


def save_trick(trick: Trick, path: str | os.PathLike[str], *, check_robot: bool = True) -> None:
    """Write ``trick`` as a trick file at ``path`` atomically (temp file in the same folder + os.replace).

    Refuses (:class:`TrickFileError`, nothing written) if the file would not load back. With
    ``check_robot`` (default) that includes the robot: its ``robot`` field is resolved against
    the target folder and every name checked against it.
    """
    text = trick_to_yaml(trick)
    target = Path(path)
    folder = Path(os.path.abspath(os.fspath(target))).parent
    if check_robot:
        problems, _ = _check_data(trick_to_dict(trick), folder)
        if problems:
            raise TrickFileError(problems)
    atomic_write_text(target, text)


# ---------------------------------------------------------------------------------------
# kipup check
# ---------------------------------------------------------------------------------------
def trick_summary(trick: Trick, robot: Robot) -> str:
    """One line for ``kipup check``: ``trick NAME, robot R, P phases, K knots total``."""
    n = len(trick.phases)
    knots = sum(int(p.knots) for p in trick.phases)
    return f"trick {trick.name}, robot {robot.name}, {n} phase{'s' if n != 1 else ''}, {knots} knots total"


def check_trick(data: Any, base_dir: str | os.PathLike[str] | None = None) -> tuple[list[Problem], str]:
    """The ``kipup check`` checker of ``kipup-trick/1`` documents: ``(problems, summary)``. Never raises."""
    try:
        trick, robot = trick_from_dict(data, base_dir)
    except TrickFileError as exc:
        return list(exc.problems), ""
    return [], trick_summary(trick, robot)
