"""Robot files (``format: kipup-robot/1``): load, validate and save.

A robot file is a YAML document, SI units and radians throughout::

    format: kipup-robot/1
    name: sprig
    description: an invented demo robot
    gravity: 9.81                      # m/s^2, along -z (optional, default 9.81)
    base:                              # the floating base link
      name: torso
      mass: 8.0                        # kg
      com: [0.0, 0.15]                 # m, link frame (x, z)
      inertia: 0.12                    # kg m^2 about the COM, y axis
      capsule: {start: [0, 0], end: [0, 0.35], radius: 0.08}   # optional, m
    links:                             # any order; the loader sorts them parent-first
      - name: thigh
        parent: torso
        pair: {lateral_offset: 0.08}   # optional left/right pair: values are PER SIDE
        mass: 1.2
        com: [0.0, -0.12]
        inertia: 0.01
        capsule: {start: [0, 0], end: [0, -0.3], radius: 0.04}
        joint:                         # the revolute joint moving this link
          name: hip
          origin: [0.0, 0.0]           # m, parent link frame
          limits: {lower: -2.6, upper: 0.6, velocity: 14.0}    # rad, rad/s
          actuator: {peak_torque: 40.0, gear_ratio: 9.0, stall_torque: 45.0,
                     no_load_speed: 22.0, viscous_friction: 0.05}  # N m, -, N m, rad/s, N m s/rad
    points:                            # named points; friction: null if never a contact
      - {name: toe, link: thigh, position: [0.12, -0.04], friction: 0.8}

Frames and sign conventions are those of :mod:`kipup.core.robot`: x forward, z up, every
angle about +y, a positive angle turns the child's +z towards +x. Paired links are lumped
into one sagittal link by :func:`kipup.core.lumping.lump_pair`.

Links (and so joints and the entries of ``q``) keep their file order, except that a link
listed before its parent is moved after it (a stable topological sort).

:func:`validate_robot_dict` reports every problem at once: JSON-schema problems (schema in
``schema/robot.schema.json``, Draft 2020-12) and the rules the schema can't express (names,
the tree, NaN/infinity, limits). Loading raises :class:`RobotFileError` listing them; it
never modifies the file. The YAML reader also accepts ``1e-3`` as a float (YAML 1.2) and
rejects duplicate keys.
"""
from __future__ import annotations

import ast
import difflib
import heapq
import json
import math
import os
import re
from dataclasses import dataclass
from functools import lru_cache
from importlib import resources
from pathlib import Path
from typing import Any, Iterable

import jsonschema
import yaml

from .atomic import atomic_write_text
from .lumping import is_paired, lump_pair, unlump_pair
from .robot import BASE_COORDS, Actuator, Capsule, Joint, Link, Point, Robot

__all__ = [
    "FORMAT",
    "Problem",
    "RobotFileError",
    "parse_yaml",
    "read_yaml_file",
    "validate_robot_dict",
    "robot_from_dict",
    "robot_to_dict",
    "load_robot",
    "save_robot",
    "robot_to_yaml",
    "robot_schema",
    "bundled_robot_names",
    "bundled_robot_path",
    "load_bundled",
]

FORMAT = "kipup-robot/1"
DOCUMENT = "document"  # the path of a problem about the whole document

_DATA_PACKAGE = "kipup.core.data"


# ---------------------------------------------------------------------------------------
# problems
# ---------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Problem:
    """One problem in a document: ``path`` names the field (``links[3].joint.actuator.peak_torque``)."""

    path: str
    message: str

    def __str__(self) -> str:
        return f"{self.path}: {self.message}"


class RobotFileError(ValueError):
    """A robot file or dict could not be read; ``problems`` lists every problem found."""

    def __init__(self, problems: Iterable[Problem]):
        self.problems: tuple[Problem, ...] = tuple(problems)
        super().__init__("\n".join(str(p) for p in self.problems))

    def __str__(self) -> str:
        return "\n".join(str(p) for p in self.problems)


def _format_path(parts: Iterable[Any]) -> str:
    out = ""
    for part in parts:
        if isinstance(part, int) and not isinstance(part, bool):
            out += f"[{part}]"
        else:
            out += f".{part}" if out else str(part)
    return out or DOCUMENT


def _join(path: str, key: Any) -> str:
    """``path`` extended by a mapping key (``a.b``) or a list index (``a[3]``); shared with trick files."""
    if isinstance(key, int) and not isinstance(key, bool):
        return f"{path}[{key}]"
    return f"{key}" if path in ("", DOCUMENT) else f"{path}.{key}"


# ---------------------------------------------------------------------------------------
# YAML
# ---------------------------------------------------------------------------------------
class _Loader(yaml.SafeLoader):
    """Safe YAML loader that rejects duplicate keys and reads ``1e-3`` as a float (YAML 1.2)."""

    def construct_mapping(self, node: yaml.Node, deep: bool = False) -> dict:  # type: ignore[override]
        if isinstance(node, yaml.MappingNode):
            seen: dict[Any, yaml.Mark] = {}
            for key_node, _ in node.value:
                if key_node.tag == "tag:yaml.org,2002:merge" or not isinstance(key_node, yaml.ScalarNode):
                    continue
                key = self.construct_object(key_node, deep=deep)
                try:
                    first = seen.get(key)
                except TypeError:  # unhashable: SafeConstructor reports it
                    continue
                if first is not None:
                    raise yaml.constructor.ConstructorError(
                        "while constructing a mapping", node.start_mark,
                        f"found duplicate key {key!r} (first given at line {first.line + 1})",
                        key_node.start_mark)
                seen[key] = key_node.start_mark
        return super().construct_mapping(node, deep=deep)


_Loader.add_implicit_resolver(
    "tag:yaml.org,2002:float",
    re.compile(r"^[-+]?(?:[0-9][0-9_]*)(?:\.[0-9_]*)?[eE][-+]?[0-9]+$"),
    list("-+0123456789"),
)


def _yaml_error_problem(exc: Exception, text: str | None = None) -> Problem:
    mark = getattr(exc, "problem_mark", None)
    if isinstance(exc, yaml.MarkedYAMLError) and mark is not None:
        what = exc.problem or "syntax error"
        if exc.context:
            what = f"{what} ({exc.context}"
            ctx = exc.context_mark
            what += f" at line {ctx.line + 1}, column {ctx.column + 1})" if ctx is not None else ")"
        return Problem(DOCUMENT, f"invalid YAML at line {mark.line + 1}, column {mark.column + 1}: {what}")
    if isinstance(exc, yaml.reader.ReaderError):
        char = exc.character if isinstance(exc.character, int) else ord(str(exc.character)[:1] or "\0")
        where = f"position {exc.position}"
        if text is not None and isinstance(exc.position, int):
            line = text.count("\n", 0, exc.position) + 1
            column = exc.position - (text.rfind("\n", 0, exc.position) + 1) + 1
            where = f"line {line}, column {column}"
        return Problem(DOCUMENT, f"invalid YAML at {where}: unacceptable character #x{char:04x} "
                                 "(control characters are not allowed)")
    if isinstance(exc, RecursionError):
        return Problem(DOCUMENT, "invalid YAML: the document is nested too deeply")
    return Problem(DOCUMENT, f"invalid YAML: {exc}")


def parse_yaml(text: str) -> tuple[Any, list[Problem]]:
    """Parse one YAML document. Returns ``(data, [])`` or ``(None, [problem])`` on a syntax error.

    The problem names the line and column (1-based). Never raises for bad input.
    """
    try:
        return yaml.load(text, Loader=_Loader), []  # noqa: S506 (a SafeLoader subclass)
    except Exception as exc:  # yaml errors, RecursionError on absurd nesting, ...
        return None, [_yaml_error_problem(exc, text)]


def _read_text(path: str | os.PathLike[str]) -> str:
    """Read a UTF-8 file (a leading BOM is allowed); raises RobotFileError if it can't be read."""
    try:
        data = Path(path).read_bytes()
    except FileNotFoundError:
        raise RobotFileError([Problem("file", f"no such file: {os.fspath(path)}")]) from None
    except IsADirectoryError:
        raise RobotFileError([Problem("file", f"is a directory, not a file: {os.fspath(path)}")]) from None
    except OSError as exc:
        raise RobotFileError([Problem("file", f"cannot read {os.fspath(path)}: {exc.strerror or exc}")]) from None
    try:
        return data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise RobotFileError([Problem("file", f"not UTF-8 text (byte {exc.start}): {os.fspath(path)}")]) from None


def read_yaml_file(path: str | os.PathLike[str]) -> tuple[Any, list[Problem]]:
    """Read and parse a YAML file: ``(data, [])``, or ``(None, [problem])`` if it can't be read or parsed.

    For any kipup document (robot, later tricks). Never raises for bad input; never writes.
    """
    try:
        text = _read_text(path)
    except RobotFileError as exc:
        return None, list(exc.problems)
    return parse_yaml(text)


# ---------------------------------------------------------------------------------------
# validation
# ---------------------------------------------------------------------------------------
@lru_cache(maxsize=1)
def _schema_text() -> str:
    return resources.files("kipup.core").joinpath("schema", "robot.schema.json").read_text(encoding="utf-8")


def robot_schema() -> dict:
    """The JSON schema (Draft 2020-12) of a robot file, as a fresh dict."""
    return json.loads(_schema_text())


def _checked_validator(schema: dict) -> jsonschema.Draft202012Validator:
    """A Draft 2020-12 validator of ``schema``, after checking the schema itself (shared with trick files)."""
    jsonschema.Draft202012Validator.check_schema(schema)
    return jsonschema.Draft202012Validator(schema)


@lru_cache(maxsize=1)
def _validator() -> jsonschema.Draft202012Validator:
    return _checked_validator(robot_schema())


_TYPE_WORDS = {
    "number": "a number", "integer": "an integer", "string": "a string", "object": "a mapping",
    "array": "a list", "null": "null", "boolean": "true or false",
}


def _describe(value: Any) -> str:
    """How a problem message names a wrong value: ``the string 'x'``, ``a list of 3``, ``null``..."""
    if value is None:
        return "null"
    if isinstance(value, bool):
        return f"{str(value).lower()} (a boolean)"
    if isinstance(value, str):
        return f"the string {value!r}"
    if isinstance(value, dict):
        return "a mapping"
    if isinstance(value, list):
        return f"a list of {len(value)}"
    if isinstance(value, (int, float)):
        return repr(value)
    return f"{type(value).__name__} {value!r}"


def _type_message(expected: Any, instance: Any) -> str:
    """The message of a schema ``type`` error: ``must be a number or null (got the string 'x')``."""
    types = expected if isinstance(expected, list) else [expected]
    want = " or ".join(_TYPE_WORDS.get(t, t) for t in types)
    return f"must be {want} (got {_describe(instance)})"


def _schema_problems(data: Any) -> list[Problem]:
    problems: list[Problem] = []
    for err in _validator().iter_errors(data):
        path = _format_path(err.absolute_path)
        kind, value, inst = err.validator, err.validator_value, err.instance
        if kind == "required":
            m = re.match(r"^(.*) is a required property$", err.message)
            try:
                key = ast.literal_eval(m.group(1)) if m else None
            except (ValueError, SyntaxError):
                key = None
            if key is None:
                problems.append(Problem(path, err.message))
            else:
                problems.append(Problem(_join(path, key), "required field is missing"))
        elif kind == "additionalProperties":
            allowed = list(err.schema.get("properties", {}))
            for extra in sorted((k for k in inst if k not in allowed), key=str):
                hint = difflib.get_close_matches(str(extra), allowed, n=1)
                msg = "unknown field" + (f" (did you mean {hint[0]!r}?)" if hint else
                                         f"; allowed: {', '.join(allowed)}")
                problems.append(Problem(_join(path, extra), msg))
        elif kind == "type":
            problems.append(Problem(path, _type_message(value, inst)))
        elif kind == "exclusiveMinimum":
            problems.append(Problem(path, f"must be > {value} (got {inst!r})"))
        elif kind == "minimum":
            problems.append(Problem(path, f"must be >= {value} (got {inst!r})"))
        elif kind in ("minItems", "maxItems"):
            problems.append(Problem(path, f"must be a list of 2 numbers [x, z] (got {len(inst)} items)"))
        elif kind == "const":
            problems.append(Problem(path, f"must be {value!r} (got {_describe(inst)})"))
        elif kind == "pattern":
            problems.append(Problem(path, "must be a name of letters, digits and underscores, not starting "
                                          f"with a digit (got {inst!r})"))
        elif kind == "minLength":
            problems.append(Problem(path, "must not be empty"))
        else:
            problems.append(Problem(path, err.message))
    return problems


def _is_number(x: Any) -> bool:
    return isinstance(x, (int, float)) and not isinstance(x, bool)


def _finite(x: Any) -> float | None:
    """x as a float if it is a finite real number (not a bool), else None."""
    if not _is_number(x):
        return None
    try:
        f = float(x)
    except OverflowError:
        return None
    return f if math.isfinite(f) else None


def _nonfinite_problems(data: Any, path: str, out: list[Problem], seen: set[int]) -> None:
    if isinstance(data, (dict, list)):
        if id(data) in seen:  # YAML aliases can make cycles
            return
        seen.add(id(data))
        items = data.items() if isinstance(data, dict) else enumerate(data)
        for key, value in items:
            _nonfinite_problems(value, _join(path, key), out, seen)
    elif _is_number(data) and _finite(data) is None:
        if isinstance(data, float) and math.isnan(data):
            out.append(Problem(path, "must be a number, not NaN"))
        elif isinstance(data, int):
            out.append(Problem(path, "is too large to be a number"))
        else:
            out.append(Problem(path, f"must be finite (got {'-' if data < 0 else ''}infinity)"))


def _get(d: Any, key: str) -> Any:
    return d.get(key) if isinstance(d, dict) else None


def _semantic_problems(data: Any) -> list[Problem]:
    out: list[Problem] = []
    if not isinstance(data, dict):
        return out
    base = data.get("base")
    links = data.get("links") if isinstance(data.get("links"), list) else []
    points = data.get("points") if isinstance(data.get("points"), list) else []

    # --- names -----------------------------------------------------------------------
    base_name = _get(base, "name") if isinstance(_get(base, "name"), str) else None
    link_at: dict[str, str] = {}  # link name -> path of its first definition
    if base_name is not None:
        link_at[base_name] = "base.name"
    joint_at: dict[str, str] = {}
    for i, link in enumerate(links):
        name = _get(link, "name")
        if isinstance(name, str):
            if name in link_at:
                out.append(Problem(f"links[{i}].name", f"duplicate link name {name!r} (also {link_at[name]})"))
            else:
                link_at[name] = f"links[{i}].name"
        jname = _get(_get(link, "joint"), "name")
        if isinstance(jname, str):
            jpath = f"links[{i}].joint.name"
            if jname in BASE_COORDS:
                out.append(Problem(jpath, f"joint name {jname!r} is reserved for a base coordinate "
                                          f"({', '.join(BASE_COORDS)})"))
            elif jname in joint_at:
                out.append(Problem(jpath, f"duplicate joint name {jname!r} (also {joint_at[jname]})"))
            else:
                joint_at[jname] = jpath
    point_at: dict[str, str] = {}
    for i, point in enumerate(points):
        name = _get(point, "name")
        if isinstance(name, str):
            if name in point_at:
                out.append(Problem(f"points[{i}].name", f"duplicate point name {name!r} (also {point_at[name]})"))
            else:
                point_at[name] = f"points[{i}].name"
    known = ", ".join(link_at) or "(none)"
    # Without a usable base name or links list, "unknown link" would only echo other problems.
    check_refs = base_name is not None and ("links" not in data or isinstance(data.get("links"), list))

    # --- the tree ----------------------------------------------------------------------
    parent_of: dict[str, str] = {}  # first definition of each link name only
    index_of: dict[str, int] = {}
    paired: dict[str, bool] = {}
    if base_name is not None:
        paired[base_name] = False
    for i, link in enumerate(links):
        name, parent = _get(link, "name"), _get(link, "parent")
        if not isinstance(name, str) or link_at.get(name) != f"links[{i}].name":
            continue
        index_of[name] = i
        paired[name] = _get(link, "pair") is not None
        if not isinstance(parent, str):
            continue
        if parent == name:
            out.append(Problem(f"links[{i}].parent", f"link {name!r} cannot be its own parent (a loop)"))
        elif parent not in link_at:
            if check_refs:
                out.append(Problem(f"links[{i}].parent", f"unknown link {parent!r}; links: {known}"))
        else:
            parent_of[name] = parent
    reported: set[str] = set()
    for start in parent_of:
        chain, node = [], start
        while node in parent_of and node not in chain:
            chain.append(node)
            node = parent_of[node]
        if node in chain and node not in reported:  # a loop: node -> ... -> node
            loop = chain[chain.index(node):]
            text = " -> ".join(loop + [loop[0]])
            for member in loop:
                reported.add(member)
                out.append(Problem(f"links[{index_of[member]}].parent",
                                   f"link {member!r} never reaches the base {base_name!r}: loop {text}"))
    for name, parent in parent_of.items():
        if paired.get(parent) and not paired.get(name):
            out.append(Problem(f"links[{index_of[name]}].pair",
                               f"required: link {name!r} hangs from the left/right pair {parent!r}, so it must "
                               f"be a pair too (add pair: {{lateral_offset: ...}})"))

    # --- joints ------------------------------------------------------------------------
    for i, link in enumerate(links):
        joint = _get(link, "joint")
        limits, act = _get(joint, "limits"), _get(joint, "actuator")
        lo, up = _finite(_get(limits, "lower")), _finite(_get(limits, "upper"))
        if lo is not None and up is not None and lo >= up:
            out.append(Problem(f"links[{i}].joint.limits.lower",
                               f"lower limit ({lo} rad) must be below the upper limit ({up} rad)"))
        peak, stall = _finite(_get(act, "peak_torque")), _finite(_get(act, "stall_torque"))
        if peak is not None and stall is not None and peak > 0 and stall < peak:
            out.append(Problem(f"links[{i}].joint.actuator.stall_torque",
                               f"stall torque ({stall} N m) is below the peak torque ({peak} N m): the motor "
                               "could never reach its peak; use stall_torque >= peak_torque"))

    # --- points ------------------------------------------------------------------------
    for i, point in enumerate(points):
        on = _get(point, "link")
        if check_refs and isinstance(on, str) and on not in link_at:
            out.append(Problem(f"points[{i}].link", f"unknown link {on!r}; links: {known}"))
    return out


def _path_key(path: str) -> tuple:
    parts: list[tuple[int, Any]] = []
    for tok in re.findall(r"[^.\[\]]+|\[\d+\]", path):
        parts.append((0, int(tok[1:-1])) if tok.startswith("[") else (1, tok))
    return tuple(parts)


def validate_robot_dict(data: Any) -> list[Problem]:
    """Every problem in a robot document (the parsed YAML), or ``[]`` if it is a valid robot file.

    Checks the JSON schema and the rules it can't express: unique link/joint/point names,
    known parents, no loops, points on known links, finite numbers, ``lower < upper``,
    ``stall_torque >= peak_torque``, and that a link hanging from a pair is a pair. Never raises.
    """
    if data is None:
        return [Problem(DOCUMENT, "empty document; expected a mapping with format, name, base, links, points")]
    try:
        nonfinite: list[Problem] = []
        _nonfinite_problems(data, DOCUMENT, nonfinite, set())
        bad = {p.path for p in nonfinite}
        schema = [p for p in _schema_problems(data) if p.path not in bad]
        problems = schema + nonfinite + _semantic_problems(data)
    except RecursionError:
        return [Problem(DOCUMENT, "the document is nested too deeply")]
    unique = list(dict.fromkeys(problems))
    unique.sort(key=lambda p: _path_key(p.path))  # stable: document-ish order, schema first per field
    return unique


# ---------------------------------------------------------------------------------------
# dict <-> Robot
# ---------------------------------------------------------------------------------------
def _vec(v: Any) -> tuple[float, float]:
    return (float(v[0]), float(v[1]))


def _capsule(d: Any) -> Capsule | None:
    if d is None:
        return None
    return Capsule(start=_vec(d["start"]), end=_vec(d["end"]), radius=float(d["radius"]))


def _parent_first(links: list[dict], base_name: str) -> list[dict]:
    """Stable topological sort: file order, except a link listed before its parent moves after it."""
    children: dict[str, list[int]] = {}
    for i, link in enumerate(links):
        children.setdefault(link["parent"], []).append(i)
    ready = list(children.get(base_name, []))
    heapq.heapify(ready)
    placed: set[int] = set(ready)  # never queue a link twice, even with duplicate names
    order: list[dict] = []
    while ready:
        i = heapq.heappop(ready)
        order.append(links[i])
        for c in children.get(links[i]["name"], []):
            if c not in placed:
                placed.add(c)
                heapq.heappush(ready, c)
    if len(order) != len(links):  # validate_robot_dict reports the cause; never drop links silently
        lost = [f"links[{i}].parent" for i in range(len(links)) if i not in placed]
        raise RobotFileError([Problem(path, "link never reaches the base") for path in lost])
    return order


def robot_from_dict(data: dict) -> Robot:
    """Build a :class:`Robot` from a parsed robot document, lumping left/right pairs.

    Raises :class:`RobotFileError` listing every problem if the document is invalid.
    """
    problems = validate_robot_dict(data)
    if problems:
        raise RobotFileError(problems)
    try:
        b = data["base"]
        base = Link(name=b["name"], mass=float(b["mass"]), com=_vec(b["com"]), inertia=float(b["inertia"]),
                    capsule=_capsule(b.get("capsule")), sides=(0.0,))
        links, joints = [base], []
        for d in _parent_first(list(data.get("links") or []), base.name):
            j, lim, a = d["joint"], d["joint"]["limits"], d["joint"]["actuator"]
            link = Link(name=d["name"], mass=float(d["mass"]), com=_vec(d["com"]), inertia=float(d["inertia"]),
                        capsule=_capsule(d.get("capsule")), sides=(0.0,))
            actuator = Actuator(peak_torque=float(a["peak_torque"]), gear_ratio=float(a["gear_ratio"]),
                                stall_torque=float(a["stall_torque"]), no_load_speed=float(a["no_load_speed"]),
                                viscous_friction=float(a.get("viscous_friction", 0.0)))
            joint = Joint(name=j["name"], parent=d["parent"], child=d["name"], origin=_vec(j["origin"]),
                          lower=float(lim["lower"]), upper=float(lim["upper"]),
                          velocity_limit=float(lim["velocity"]), actuator=actuator)
            if d.get("pair") is not None:
                link, joint = lump_pair(link, joint, float(d["pair"]["lateral_offset"]))
            links.append(link)
            joints.append(joint)
        points = tuple(
            Point(name=p["name"], link=p["link"], position=_vec(p["position"]),
                  friction=None if p.get("friction") is None else float(p["friction"]))
            for p in (data.get("points") or []))
        return Robot(name=data["name"], links=tuple(links), joints=tuple(joints), points=points,
                     gravity=float(data.get("gravity", 9.81)), description=data.get("description", ""))
    except RobotFileError:
        raise
    except Exception as exc:  # a rule validate_robot_dict missed: still no traceback from inside
        raise RobotFileError([Problem(DOCUMENT, f"cannot build the robot: {exc}")]) from None


def _capsule_dict(c: Capsule | None) -> dict | None:
    if c is None:
        return None
    return {"start": list(_vec(c.start)), "end": list(_vec(c.end)), "radius": float(c.radius)}


def robot_to_dict(robot: Robot) -> dict:
    """The robot file document of ``robot``: paired links get their PER-SIDE values back.

    ``robot_from_dict(robot_to_dict(r)) == r`` for any robot read from a file. Raises
    :class:`RobotFileError` for a robot a file can't describe (e.g. sides other than
    ``(0.0,)`` or ``(+w, -w)``).
    """
    problems: list[Problem] = []
    base = robot.links[0]
    if tuple(base.sides) != (0.0,):
        problems.append(Problem("base", f"the base must be a centre link, sides=(0.0,) (got {tuple(base.sides)})"))
    b: dict[str, Any] = {"name": base.name, "mass": float(base.mass), "com": list(_vec(base.com)),
                         "inertia": float(base.inertia)}
    if base.capsule is not None:
        b["capsule"] = _capsule_dict(base.capsule)
    links = []
    for k, (link, joint) in enumerate(zip(robot.links[1:], robot.joints)):
        pair = None
        if is_paired(link):
            link, joint, w = unlump_pair(link, joint)
            pair = {"lateral_offset": w}
        elif tuple(link.sides) != (0.0,):
            problems.append(Problem(f"links[{k}]", f"link {link.name!r}: sides must be (0.0,) or (+w, -w) "
                                                   f"(got {tuple(link.sides)})"))
        d: dict[str, Any] = {"name": link.name, "parent": joint.parent}
        if pair is not None:
            d["pair"] = pair
        d.update(mass=float(link.mass), com=list(_vec(link.com)), inertia=float(link.inertia))
        if link.capsule is not None:
            d["capsule"] = _capsule_dict(link.capsule)
        a = joint.actuator
        d["joint"] = {
            "name": joint.name,
            "origin": list(_vec(joint.origin)),
            "limits": {"lower": float(joint.lower), "upper": float(joint.upper),
                       "velocity": float(joint.velocity_limit)},
            "actuator": {"peak_torque": float(a.peak_torque), "gear_ratio": float(a.gear_ratio),
                         "stall_torque": float(a.stall_torque), "no_load_speed": float(a.no_load_speed),
                         "viscous_friction": float(a.viscous_friction)},
        }
        links.append(d)
    if problems:
        raise RobotFileError(problems)
    points = []
    for p in robot.points:
        points.append({"name": p.name, "link": p.link, "position": list(_vec(p.position)),
                       "friction": None if p.friction is None else float(p.friction)})
    out: dict[str, Any] = {"format": FORMAT, "name": robot.name}
    if robot.description:
        out["description"] = robot.description
    out.update(gravity=float(robot.gravity), base=b, links=links, points=points)
    return out


# ---------------------------------------------------------------------------------------
# files
# ---------------------------------------------------------------------------------------
def load_robot(source: str | os.PathLike[str]) -> Robot:
    """Load a robot file. ``source`` is a path (``os.PathLike`` or a one-line ``str``) or YAML text.

    A ``str`` containing a newline is taken as the YAML text itself. Raises
    :class:`RobotFileError` listing every problem (including an unreadable file or a YAML
    syntax error with its line and column). Never writes to the file.
    """
    if isinstance(source, str) and "\n" in source:
        text = source
    else:
        text = _read_text(source)
    data, problems = parse_yaml(text)
    if problems:
        raise RobotFileError(problems)
    return robot_from_dict(data)


class _FlowMap(dict):
    """A mapping the YAML dumper writes in flow style (``{a: 1, b: 2}``); shared with trick files."""


class _FlowSeq(list):
    """A list the YAML dumper writes in flow style (``[1, 2]``); shared with trick files."""


class _Dumper(yaml.SafeDumper):
    """The safe YAML dumper of kipup files, writing :class:`_FlowMap` and :class:`_FlowSeq` in flow style."""


_Dumper.add_representer(_FlowMap, lambda d, v: d.represent_mapping("tag:yaml.org,2002:map", v, flow_style=True))
_Dumper.add_representer(_FlowSeq, lambda d, v: d.represent_sequence("tag:yaml.org,2002:seq", v, flow_style=True))

_FLOW_KEYS = {"capsule", "pair", "limits", "actuator", "com", "origin", "start", "end", "position"}


def _styled(value: Any, key: Any = None, in_points: bool = False) -> Any:
    if isinstance(value, dict):
        inner = {k: _styled(v, k) for k, v in value.items()}
        return _FlowMap(inner) if (key in _FLOW_KEYS or in_points) else inner
    if isinstance(value, list):
        items = [_styled(v, in_points=(key == "points")) for v in value]
        return _FlowSeq(items) if key in _FLOW_KEYS else items
    return value


_HEADER = ("# kipup robot file. SI units, radians; x forward, z up, angles about +y\n"
           "# (a positive angle turns the child's +z towards +x). Paired links give PER-SIDE values.\n")


def robot_to_yaml(robot: Robot) -> str:
    """The robot file text of ``robot`` (per-side values for pairs), validated before it is returned."""
    data = robot_to_dict(robot)
    problems = validate_robot_dict(data)
    if problems:
        raise RobotFileError(problems)
    body = yaml.dump(_styled(data), Dumper=_Dumper, sort_keys=False, allow_unicode=True, width=120,
                     default_flow_style=False)
    return _HEADER + body


def save_robot(robot: Robot, path: str | os.PathLike[str]) -> None:
    """Write ``robot`` as a robot file at ``path`` atomically (temp file in the same folder + os.replace).

    Refuses (RobotFileError, nothing written) if the robot would not load back.
    """
    atomic_write_text(path, robot_to_yaml(robot))


# ---------------------------------------------------------------------------------------
# bundled demo robots
# ---------------------------------------------------------------------------------------
def _robots_dir() -> Any:
    return resources.files(_DATA_PACKAGE).joinpath("robots")


def bundled_robot_names() -> list[str]:
    """Names of the invented demo robots shipped with kipup (``humanoid``, ``quadruped``...)."""
    return sorted(p.name[: -len(".yaml")] for p in _robots_dir().iterdir() if p.name.endswith(".yaml"))


def bundled_robot_path(name: str) -> Path:
    """Filesystem path of a bundled robot file; ValueError naming the choices if unknown."""
    names = bundled_robot_names()
    if name not in names:
        raise ValueError(f"no bundled robot {name!r}; bundled robots: {', '.join(names)}")
    return Path(str(_robots_dir().joinpath(f"{name}.yaml")))


def load_bundled(name: str) -> Robot:
    """Load a bundled demo robot by name (see :func:`bundled_robot_names`)."""
    names = bundled_robot_names()
    if name not in names:
        raise ValueError(f"no bundled robot {name!r}; bundled robots: {', '.join(names)}")
    text = _robots_dir().joinpath(f"{name}.yaml").read_text(encoding="utf-8")
    data, problems = parse_yaml(text)
    if problems:
        raise RobotFileError(problems)
    return robot_from_dict(data)
