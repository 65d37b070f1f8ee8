"""Import a URDF file (Unified Robot Description Format, the XML robot description standard) as
a kipup robot.

:func:`import_urdf` returns the :class:`~kipup.core.robot.Robot` and a list of the
approximations made, in words. The robot is built through a robot-file document
(:func:`~kipup.core.robot_file.robot_from_dict`), so it always passes
:func:`~kipup.core.robot_file.validate_robot_dict` and :func:`~kipup.core.robot_file.save_robot`
can write it.

Parsing is safe: ``defusedxml`` with DTDs forbidden, so a document with a ``<!DOCTYPE>`` or an
``<!ENTITY>`` is rejected (no entity expansion, no external references). Malformed XML is
reported with its line and column; every other problem names the element and its line,
e.g. ``<joint name="knee"> (line 14)``. Problems are raised together as :class:`URDFError`
(a :class:`~kipup.core.robot_file.RobotFileError`, so a ``ValueError``).

The mapping, in the URDF's own frames (``plane="xz"``: the sagittal plane is the URDF x-z plane,
x forward, z up, y lateral to the left; ``plane="yz"``: URDF +y is forward and URDF -x is the
robot's left):

* The URDF's root link is the floating base. ``base_link`` picks another link, reached from
  the root through fixed joints (the links above it are merged into it) or through one floating
  joint below a massless root (the root is ignored). A massless root whose only joint is
  floating (a ``world`` link) is skipped on its own.
* A ``revolute`` or ``continuous`` joint whose axis, expressed in the frame of the kipup link it
  hangs from (so after the joint origin's rotation and any merged fixed joints), is +y or -y
  becomes a kipup joint. kipup angles turn about +y, so an axis of -y flips the sign of the angle
  and of the limits (reported). A joint origin may rotate the child frame about y (a pure pitch,
  or rpy = 0); the child's data are then expressed in a frame parallel to the parent's at zero
  angle. More generally any origin rotation is accepted as long as the axis ends up along +-y.
* A ``fixed`` joint merges the child's mass, COM and inertia into the parent (parallel-axis
  theorem; reported).
* A ``revolute``/``continuous`` joint whose axis is perpendicular to y (a roll or yaw joint) is
  dropped: locked at zero and treated as fixed (reported ``dropped lateral joint X``); pitch joints
  below it stay joints. An axis neither along nor perpendicular to y is an error naming the joint.
* ``prismatic``, ``planar`` and other ``floating`` joints are errors (unsupported).
* Inertia: the ``<inertial>`` origin gives the COM; its rpy rotates the inertia tensor into the
  link frame, ``I' = R I R^T``, and kipup keeps ``Iyy' = e_y^T R I R^T e_y``, the inertia about the
  pitch axis (reported ``inertia projected onto the pitch axis`` when the rotation mixes in other
  axes). A link that carries a kipup joint (or the base) must end up with positive mass and
  inertia, else the error ``link L has no <inertial>: kipup needs mass, COM and inertia``.
* Left/right pairs: ``pairs`` maps a kipup link name to ``(left_urdf_link, right_urdf_link)``
  (exactly those pairs are lumped; ``pairs={}`` lumps none). With ``pairs=None`` mirrored chains
  are found by their names (``*_l``/``*_r``, ``*_left``/``*_right``, ``left_*``/``right_*``,
  ``l_*``/``r_*``) when the two sides hang from the same kipup link (or from a pair), sit at
  lateral offsets of opposite sign, and their masses agree within 1 %. A pair is lumped by the
  rule of :mod:`kipup.core.lumping` (the robot document gives per-side values and
  ``pair.lateral_offset``; loading doubles mass, inertia and torques and sets
  ``sides = (+w, -w)``). Each lump is reported.
* Limits: ``<limit lower upper velocity effort>``; ``effort`` is the peak torque (N m). The URDF
  has no torque-speed line, so unless ``actuators`` gives them: stall torque = peak torque,
  no-load speed = 1.5 x the velocity limit, gear ratio from a ``<transmission>``'s
  ``<mechanicalReduction>`` or 1, viscous friction from ``<dynamics damping>`` or 0 (reported).
  A continuous joint gets the range +-2 pi rad (reported). A missing ``<limit>`` (or a missing
  effort/velocity) is an error naming the joint.
* Capsules: from the first ``<collision>`` cylinder, capsule, sphere or box of the link (or of a
  link merged into it), else from its ``<visual>`` primitives; a link with mesh-only (or no)
  geometry gets a capsule from its joint to its farthest child joint (or to its COM), with the
  radius of a cylinder of its mass at the density of water (reported).
* Points: ``points=[("toe", "foot_l", (x, z), friction), ...]`` (position in that URDF link's frame,
  sagittal coordinates; friction optional) plus, for each leaf link, a point named after it at the
  tip of its capsule (reported; no friction coefficient, so not a contact until one is set).

Names are made valid kipup names (letters, digits, underscores) and unique; renames are reported.
"""
from __future__ import annotations

import math
import os
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Iterable, Sequence

import numpy as np
from defusedxml import DTDForbidden, EntitiesForbidden, ExternalReferenceForbidden
from defusedxml.ElementTree import ParseError as _ParseError
from defusedxml.ElementTree import XMLParser as _DefusedParser

from .robot import BASE_COORDS, Robot
from .robot_file import FORMAT, Problem, RobotFileError, robot_from_dict, validate_robot_dict

__all__ = ["URDFError", "import_urdf", "urdf_to_robot_dict", "PLANES"]

#: Sagittal planes: the rotation W taking URDF coordinates to kipup (x forward, y left, z up).
PLANES: dict[str, np.ndarray] = {
    "xz": np.eye(3),
    "yz": np.array([[0.0, 1.0, 0.0], [-1.0, 0.0, 0.0], [0.0, 0.0, 1.0]]),
}

CONTINUOUS_RANGE = 2.0 * math.pi  # rad, either way, for a continuous joint
NO_LOAD_FACTOR = 1.5  # no-load speed = NO_LOAD_FACTOR * velocity limit unless given
WATER_DENSITY = 1000.0  # kg/m^3, for capsule radius guesses
MIN_RADIUS = 0.01  # m
PAIR_MASS_TOL = 0.01  # relative
AXIS_TOL = 1e-6

_NAME_RE = re.compile(r"^[A-Za-z_][A-Za-z0-9_]*$")
_SIDE_PATTERNS = (  # (regex, side); the stem is group 1
    (re.compile(r"^(.+?)_(?:l|left)$", re.IGNORECASE), "l"),
    (re.compile(r"^(.+?)_(?:r|right)$", re.IGNORECASE), "r"),
    (re.compile(r"^(?:l|left)_(.+)$", re.IGNORECASE), "l"),
    (re.compile(r"^(?:r|right)_(.+)$", re.IGNORECASE), "r"),
)
_ACTUATOR_FIELDS = ("peak_torque", "gear_ratio", "stall_torque", "no_load_speed", "viscous_friction")


class URDFError(RobotFileError):
    """A URDF document could not be imported; ``problems`` names each element (and its line)."""


# ---------------------------------------------------------------------------------------
# XML
# ---------------------------------------------------------------------------------------
class _LineBuilder:
    """ElementTree target that remembers the line each element starts on."""

    def __init__(self) -> None:
        import xml.etree.ElementTree as ET

        self._tb = ET.TreeBuilder()
        self.expat: Any = None
        self.lines: dict[int, int] = {}

    def start(self, tag: str, attrs: dict) -> Any:
        el = self._tb.start(tag, attrs)
        if self.expat is not None:
            self.lines[id(el)] = int(self.expat.CurrentLineNumber)
        return el

    def end(self, tag: str) -> Any:
        return self._tb.end(tag)

    def data(self, text: str) -> None:
        self._tb.data(text)

    def close(self) -> Any:
        return self._tb.close()


def _read_source(source: str | os.PathLike[str] | bytes) -> tuple[bytes, str]:
    """(document bytes, label for messages): a path, or the XML text itself."""
    if isinstance(source, bytes):
        return source, "<text>"
    if isinstance(source, str) and source.lstrip().startswith("<"):
        return source.encode("utf-8"), "<text>"
    path = Path(source)
    try:
        return path.read_bytes(), str(path)
    except FileNotFoundError:
        raise URDFError([Problem("file", f"no such file: {os.fspath(source)}")]) from None
    except IsADirectoryError:
        raise URDFError([Problem("file", f"is a directory, not a file: {os.fspath(source)}")]) from None
    except OSError as exc:
        raise URDFError([Problem("file", f"cannot read {os.fspath(source)}: {exc.strerror or exc}")]) from None


def _parse_xml(data: bytes) -> tuple[Any, dict[int, int]]:
    builder = _LineBuilder()
    parser = _DefusedParser(target=builder, forbid_dtd=True, forbid_entities=True, forbid_external=True)
    builder.expat = parser.parser
    try:
        parser.feed(data)
        root = parser.close()
    except DTDForbidden:
        line = int(parser.parser.CurrentLineNumber)
        raise URDFError([Problem("document", f"line {line}: a <!DOCTYPE> declaration is not allowed (DTDs and "
                                             "entities are refused for safety; remove it)")]) from None
    except EntitiesForbidden as exc:
        raise URDFError([Problem("document", f"entity declaration {exc.name!r} is not allowed (entities are "
                                             "refused for safety)")]) from None
    except ExternalReferenceForbidden:
        raise URDFError([Problem("document", "external entity references are not allowed")]) from None
    except _ParseError as exc:
        line, col = getattr(exc, "position", (None, None))
        msg = str(exc).split(":")[0] if str(exc) else "syntax error"
        raise URDFError([Problem("document", f"invalid XML at line {line}, column {(col or 0) + 1}: {msg}")]) from None
    return root, builder.lines


# ---------------------------------------------------------------------------------------
# small maths
# ---------------------------------------------------------------------------------------
def _rpy(r: float, p: float, y: float) -> np.ndarray:
    """URDF fixed-axis roll-pitch-yaw: R = Rz(yaw) Ry(pitch) Rx(roll)."""
    cr, sr, cp, sp, cy, sy = math.cos(r), math.sin(r), math.cos(p), math.sin(p), math.cos(y), math.sin(y)
    rx = np.array([[1, 0, 0], [0, cr, -sr], [0, sr, cr]])
    ry = np.array([[cp, 0, sp], [0, 1, 0], [-sp, 0, cp]])
    rz = np.array([[cy, -sy, 0], [sy, cy, 0], [0, 0, 1]])
    return rz @ ry @ rx


def _is_pitch_rotation(R: np.ndarray) -> bool:
    return abs(R[1, 1] - 1.0) < 1e-12


def _xz(v: np.ndarray) -> tuple[float, float]:
    return (_clean(v[0]), _clean(v[2]))


def _clean(x: float) -> float:
    """A float with rounding dust (|x| < 1e-15) and negative zero set to 0.0."""
    x = float(x)
    return 0.0 if abs(x) < 1e-15 else x


# ---------------------------------------------------------------------------------------
# the URDF as parsed
# ---------------------------------------------------------------------------------------
@dataclass
class _Shape:
    kind: str  # cylinder, capsule, sphere, box, mesh, unknown
    A: np.ndarray  # columns: the shape's own x, y, z axes (URDF local axes) in the link frame, kipup axes
    p: np.ndarray  # the shape's centre in the link frame
    radius: float = 0.0
    length: float = 0.0
    size: tuple[float, float, float] = (0.0, 0.0, 0.0)
    source: str = "collision"


@dataclass
class _Inertial:
    mass: float
    com: np.ndarray  # link frame
    tensor: np.ndarray  # about the COM, link-frame axes
    R: np.ndarray  # rotation of the inertial frame in the link frame


@dataclass
class _ULink:
    name: str
    where: str
    inertial: _Inertial | None
    shapes: list[_Shape]


@dataclass
class _UJoint:
    name: str
    where: str
    type: str
    parent: str
    child: str
    R: np.ndarray
    p: np.ndarray
    axis: np.ndarray
    limit: dict[str, float] | None
    damping: float
    friction: float
    mimic: str | None
    index: int


class _Reader:
    """Reads the elements of a <robot>, collecting problems."""

    def __init__(self, lines: dict[int, int], W: np.ndarray):
        self.lines = lines
        self.W = W
        self.problems: list[Problem] = []

    def where(self, el: Any) -> str:
        name = el.get("name")
        tag = f'<{el.tag} name="{name}">' if name is not None else f"<{el.tag}>"
        line = self.lines.get(id(el))
        return f"{tag} (line {line})" if line else tag

    def bad(self, el: Any, message: str) -> None:
        self.problems.append(Problem(self.where(el), message))

    def floats(self, el: Any, attr: str, n: int, default: Sequence[float] | None, owner: Any) -> np.ndarray | None:
        text = el.get(attr) if el is not None else None
        if text is None:
            if default is None:
                self.bad(owner, f"<{el.tag}> needs attribute {attr!r}" if el is not None else f"missing {attr!r}")
                return None
            return np.array(default, dtype=float)
        try:
            vals = [float(t) for t in text.split()]
        except ValueError:
            vals = []
        if len(vals) != n or not all(math.isfinite(v) for v in vals):
            what = "a number" if n == 1 else f"{n} numbers"
            self.bad(owner, f"<{el.tag} {attr}=\"{text}\">: must be {what}")
            return None
        return np.array(vals, dtype=float)

    def number(self, el: Any, attr: str, owner: Any, default: float | None = None) -> float | None:
        v = self.floats(el, attr, 1, None if default is None else [default], owner)
        return None if v is None else float(v[0])

    def origin(self, el: Any, owner: Any) -> tuple[np.ndarray, np.ndarray, bool]:
        """(R, p, rotated) of an <origin> child of ``el`` in kipup axes (identity if absent)."""
        o = el.find("origin") if el is not None else None
        if o is None:
            return np.eye(3), np.zeros(3), False
        xyz = self.floats(o, "xyz", 3, (0, 0, 0), owner)
        rpy = self.floats(o, "rpy", 3, (0, 0, 0), owner)
        if xyz is None or rpy is None:
            return np.eye(3), np.zeros(3), False
        R = _rpy(*rpy)
        return self.W @ R @ self.W.T, self.W @ xyz, bool(np.any(rpy != 0.0))

    # ----- links -------------------------------------------------------------------------
    def link(self, el: Any) -> _ULink:
        inertial = None
        ie = el.find("inertial")
        if ie is not None:
            R, p, _ = self.origin(ie, el)
            me = ie.find("mass")
            mass = self.number(me, "value", el) if me is not None else None
            if me is None:
                self.bad(el, "<inertial> has no <mass value=...>")
            te = ie.find("inertia")
            tensor = None
            if te is None:
                self.bad(el, "<inertial> has no <inertia ixx=... iyy=... izz=...>")
            else:
                vals = {k: self.number(te, k, el, 0.0 if k in ("ixy", "ixz", "iyz") else None)
                        for k in ("ixx", "ixy", "ixz", "iyy", "iyz", "izz")}
                if all(v is not None for v in vals.values()):
                    I = np.array([[vals["ixx"], vals["ixy"], vals["ixz"]],
                                  [vals["ixy"], vals["iyy"], vals["iyz"]],
                                  [vals["ixz"], vals["iyz"], vals["izz"]]], dtype=float)
                    # the tensor is given in the inertial frame (URDF axes): into kipup axes, then
                    # rotate by the inertial origin's rotation (already in kipup axes)
                    tensor = R @ (self.W @ I @ self.W.T) @ R.T
            if mass is not None and mass < 0:
                self.bad(el, f"<mass value=\"{mass}\">: must be >= 0 kg")
                mass = None
            if mass is not None and tensor is not None:
                inertial = _Inertial(mass=mass, com=p, tensor=tensor, R=R)
        shapes = []
        for tag in ("collision", "visual"):
            for ce in el.findall(tag):
                s = self.shape(ce, el, tag)
                if s is not None:
                    shapes.append(s)
        return _ULink(name=el.get("name"), where=self.where(el), inertial=inertial, shapes=shapes)

    def shape(self, ce: Any, link_el: Any, source: str) -> _Shape | None:
        R, p, _ = self.origin(ce, link_el)
        g = ce.find("geometry")
        if g is None or len(g) == 0:
            return None
        ge = g[0]
        kind = ge.tag
        if kind in ("cylinder", "capsule"):
            r, L = self.number(ge, "radius", link_el), self.number(ge, "length", link_el)
            if r is None or L is None:
                return None
            return _Shape(kind, R @ self.W, p, radius=r, length=L, source=source)
        if kind == "sphere":
            r = self.number(ge, "radius", link_el)
            return None if r is None else _Shape(kind, R @ self.W, p, radius=r, source=source)
        if kind == "box":
            s = self.floats(ge, "size", 3, None, link_el)
            return None if s is None else _Shape(kind, R @ self.W, p, size=tuple(float(v) for v in s), source=source)
        return _Shape("mesh" if kind == "mesh" else "unknown", R @ self.W, p, source=source)

    # ----- joints ------------------------------------------------------------------------
    def joint(self, el: Any, index: int) -> _UJoint | None:
        name, jtype = el.get("name"), el.get("type")
        ok = True
        if not name:
            self.bad(el, "a <joint> needs a name")
            ok = False
        if jtype is None:
            self.bad(el, "needs a type (revolute, continuous, prismatic, fixed, floating or planar)")
            ok = False
        pe, ce = el.find("parent"), el.find("child")
        parent = pe.get("link") if pe is not None else None
        child = ce.get("link") if ce is not None else None
        if not parent:
            self.bad(el, "needs <parent link=...>")
            ok = False
        if not child:
            self.bad(el, "needs <child link=...>")
            ok = False
        R, p, _ = self.origin(el, el)
        ae = el.find("axis")
        axis = self.floats(ae, "xyz", 3, (1, 0, 0), el) if ae is not None else np.array([1.0, 0.0, 0.0])
        if axis is None:
            ok = False
        elif jtype in ("revolute", "continuous", "prismatic"):
            n = float(np.linalg.norm(axis))
            if n < 1e-12:
                self.bad(el, "<axis xyz=\"0 0 0\">: the axis must not be zero")
                ok = False
            else:
                axis = self.W @ (axis / n)
        limit = None
        le = el.find("limit")
        if le is not None:
            limit = {}
            for k in ("lower", "upper", "effort", "velocity"):
                if le.get(k) is not None:
                    v = self.number(le, k, el)
                    if v is None:
                        ok = False
                    else:
                        limit[k] = v
        de = el.find("dynamics")
        damping = friction = 0.0
        if de is not None:
            damping = self.number(de, "damping", el, 0.0) or 0.0
            friction = self.number(de, "friction", el, 0.0) or 0.0
        me = el.find("mimic")
        mimic = me.get("joint") if me is not None else None
        if not ok:
            return None
        return _UJoint(name=name, where=self.where(el), type=jtype, parent=parent, child=child, R=R, p=p,
                       axis=axis, limit=limit, damping=damping, friction=friction, mimic=mimic, index=index)


# ---------------------------------------------------------------------------------------
# kipup bodies
# ---------------------------------------------------------------------------------------
@dataclass
class _Part:
    link: str
    R: np.ndarray  # the URDF link frame in the body frame
    p: np.ndarray
    via: str = ""  # how it got merged ("", "fixed joint J", "dropped lateral joint J", ...)


@dataclass
class _Body:
    key: str  # the URDF link defining it (the child of its joint, or the base)
    parent: "_Body | None" = None
    joint: _UJoint | None = None
    sign: float = 1.0
    origin: np.ndarray = field(default_factory=lambda: np.zeros(3))  # in the parent body frame
    parts: list[_Part] = field(default_factory=list)
    children: list["_Body"] = field(default_factory=list)
    y_abs: float = 0.0  # lateral position of the frame origin (m) at q = 0
    # filled in later
    mass: float = 0.0
    com: np.ndarray = field(default_factory=lambda: np.zeros(3))
    iyy: float = 0.0
    capsule: dict | None = None
    name: str = ""
    jname: str = ""
    side: str = ""  # "l"/"r" when in a pair
    mate: "_Body | None" = None


def _side_of(name: str) -> tuple[str, str] | None:
    for rx, side in _SIDE_PATTERNS:
        m = rx.match(name)
        if m:
            return m.group(1), side
    return None


def _valid_name(raw: str, fallback: str) -> str:
    s = re.sub(r"[^A-Za-z0-9_]", "_", raw or "")
    if not s:
        s = fallback
    if not re.match(r"^[A-Za-z_]", s):
        s = "_" + s
    return s


def _fmt(x: float) -> str:
    return f"{x:.6g}"


def _vec_text(v: Iterable[float]) -> str:
    return "(" + ", ".join(_fmt(float(a)) for a in v) + ")"


# ---------------------------------------------------------------------------------------
# the importer
# ---------------------------------------------------------------------------------------
class _Importer:
    def __init__(self, root: Any, lines: dict[int, int], label: str, plane: str):
        self.label = label
        self.notes: list[str] = []
        self.reader = _Reader(lines, PLANES[plane])
        self.root_el = root
        self.links: dict[str, _ULink] = {}
        self.joints: list[_UJoint] = []
        self.link_el: dict[str, Any] = {}

    @property
    def problems(self) -> list[Problem]:
        return self.reader.problems

    def fail_if_problems(self) -> None:
        if self.problems:
            raise URDFError(self.problems)

    def note(self, text: str) -> None:
        self.notes.append(text)

    # ----- reading -----------------------------------------------------------------------
    def read(self) -> None:
        r, rd = self.root_el, self.reader
        if r.tag != "robot":
            raise URDFError([Problem(rd.where(r), "the root element must be <robot> (is this a URDF file?)")])
        for el in r.iter():
            if isinstance(el.tag, str) and el.tag.startswith("{"):
                uri = el.tag[1:].split("}")[0]
                if "xacro" in uri:
                    raise URDFError([Problem(rd.where(el), "xacro macros must be expanded first "
                                                           "(run xacro on the file, then import the result)")])
        self.name = r.get("name") or ""
        seen: dict[str, str] = {}
        for el in r.findall("link"):
            name = el.get("name")
            if not name:
                rd.bad(el, "a <link> needs a name")
                continue
            if name in seen:
                rd.bad(el, f"duplicate link name {name!r} (also {seen[name]})")
                continue
            seen[name] = rd.where(el)
            self.link_el[name] = el
            self.links[name] = rd.link(el)
        jseen: dict[str, str] = {}
        for i, el in enumerate(r.findall("joint")):
            j = rd.joint(el, i)
            if j is None:
                continue
            if j.name in jseen:
                rd.bad(el, f"duplicate joint name {j.name!r} (also {jseen[j.name]})")
                continue
            jseen[j.name] = j.where
            self.joints.append(j)
        if not self.links:
            rd.problems.append(Problem(rd.where(r), "the robot has no <link>"))
        self.gear: dict[str, float] = {}
        for el in r.findall("transmission"):
            je = el.find("joint")
            red = el.find("actuator/mechanicalReduction")
            if red is None:
                red = el.find("mechanicalReduction")
            if je is None or red is None or not je.get("name"):
                continue
            try:
                g = float((red.text or "").strip())
            except ValueError:
                rd.bad(el, f"<mechanicalReduction>{red.text}</mechanicalReduction>: must be a number")
                continue
            if not (math.isfinite(g) and g != 0):
                rd.bad(el, f"<mechanicalReduction>{red.text}</mechanicalReduction>: must be a non-zero number")
                continue
            self.gear[je.get("name")] = abs(g)
        self.fail_if_problems()

    # ----- the tree ----------------------------------------------------------------------
    def tree(self) -> None:
        rd = self.reader
        self.parent_joint: dict[str, _UJoint] = {}
        self.child_joints: dict[str, list[_UJoint]] = {n: [] for n in self.links}
        for j in self.joints:
            for role, link in (("parent", j.parent), ("child", j.child)):
                if link not in self.links:
                    rd.problems.append(Problem(j.where, f"{role} link {link!r} is not defined (no <link name="
                                                        f"\"{link}\">)"))
            if j.parent == j.child:
                rd.problems.append(Problem(j.where, f"link {j.child!r} cannot be its own parent"))
                continue
            if j.child in self.parent_joint:
                other = self.parent_joint[j.child]
                rd.problems.append(Problem(j.where, f"link {j.child!r} has two parents: {other.parent!r} (joint "
                                                    f"{other.name!r}) and {j.parent!r}; a URDF is a tree"))
                continue
            if j.child in self.links and j.parent in self.links:
                self.parent_joint[j.child] = j
                self.child_joints[j.parent].append(j)
        self.fail_if_problems()
        roots = [n for n in self.links if n not in self.parent_joint]
        if not roots:
            raise URDFError([Problem(rd.where(self.root_el), "every link has a parent: the joints form a loop")])
        if len(roots) > 1:
            raise URDFError([Problem(self.links[n].where, "link has no parent joint: the URDF must be one tree, "
                                                          f"but {len(roots)} links have no parent "
                                                          f"({', '.join(roots)})") for n in roots[1:]])
        self.root = roots[0]
        reach, stack = set(), [self.root]
        while stack:
            n = stack.pop()
            reach.add(n)
            stack.extend(j.child for j in self.child_joints[n])
        lost = [n for n in self.links if n not in reach]
        if lost:
            raise URDFError([Problem(self.links[n].where, f"link never reaches the root {self.root!r} "
                                                          "(its joints form a loop)") for n in lost])

    # ----- joints as kipup sees them -------------------------------------------------
    def classify(self, j: _UJoint, R_child: np.ndarray) -> tuple[str, float]:
        """("fixed" | "pitch" | "lateral", sign) for joint ``j`` whose child frame is R_child in the body."""
        if j.type == "fixed":
            return "fixed", 1.0
        if j.type in ("revolute", "continuous"):
            a = R_child @ j.axis
            if abs(abs(a[1]) - 1.0) < AXIS_TOL:
                return "pitch", 1.0 if a[1] > 0 else -1.0
            if abs(a[1]) < AXIS_TOL:
                return "lateral", 1.0
            raise URDFError([Problem(j.where, f"unsupported axis: in the frame of the link it hangs from, its axis is "
                                              f"{_vec_text(a)}, neither along y (a pitch joint) nor perpendicular to "
                                              "y (a roll or yaw joint, which would be dropped); kipup needs pitch "
                                              "axes along +-y (check <axis> and the <origin rpy>)")])
        if j.type == "prismatic":
            raise URDFError([Problem(j.where, "prismatic joints are not supported (kipup models revolute joints "
                                              "about y only)")])
        if j.type in ("floating", "planar"):
            raise URDFError([Problem(j.where, f"{j.type} joints are supported only between a massless root link "
                                              "and the base (use --base / base_link)")])
        raise URDFError([Problem(j.where, f"unknown joint type {j.type!r} (revolute, continuous, prismatic, fixed, "
                                          "floating or planar)")])

    def _mass_above(self, link: str, below: str) -> float:
        """Total URDF mass of ``link`` and all its descendants except the subtree at ``below``."""
        total, stack = 0.0, [link]
        while stack:
            n = stack.pop()
            inert = self.links[n].inertial
            total += inert.mass if inert else 0.0
            stack.extend(j.child for j in self.child_joints[n] if j.child != below)
        return total

    def build_bodies(self, base_link: str | None) -> None:
        rd = self.reader
        base = base_link
        if base is None:
            base = self.root
            kids = self.child_joints[self.root]
            root_mass = self.links[self.root].inertial.mass if self.links[self.root].inertial else 0.0
            if root_mass == 0.0 and len(kids) == 1 and kids[0].type == "floating":
                base = kids[0].child
                self.note(f"ignored the massless root link {self.root!r} and its floating joint "
                          f"{kids[0].name!r}: {base!r} is the floating base")
        elif base not in self.links:
            raise URDFError([Problem("base_link", f"no link {base!r} in the URDF; links: {', '.join(self.links)}")])
        self.base = _Body(key=base)
        self.bodies: list[_Body] = [self.base]
        self.body_of: dict[str, tuple[_Body, np.ndarray, np.ndarray]] = {}
        self._visit(base, self.base, np.eye(3), np.zeros(3), "", skip=None)
        # links above the chosen base: merged across fixed joints, cut at a floating joint
        cur, R, p = base, np.eye(3), np.zeros(3)
        while cur in self.parent_joint:
            j = self.parent_joint[cur]
            if j.type == "fixed":
                # the parent frame in the base frame: inverse of (j.R, j.p) composed with (R, p)
                Rp = R @ j.R.T
                pp = p - Rp @ j.p
                self.note(f"fixed joint {j.name!r} above the base: link {j.parent!r} merged into the base {base!r}")
                self._visit(j.parent, self.base, Rp, pp, f"fixed joint {j.name!r} (above the base)", skip=cur)
                cur, R, p = j.parent, Rp, pp
            elif j.type == "floating":
                above = self._mass_above(j.parent, cur)
                if above > 0.0:
                    raise URDFError([Problem(j.where, f"the links above the base {base!r} across this floating joint "
                                                      f"have mass ({_fmt(above)} kg); kipup can ignore only massless "
                                                      "links there")])
                self.note(f"ignored the massless links above the base {base!r} (floating joint {j.name!r})")
                break
            else:
                raise URDFError([Problem(j.where, f"base_link {base!r}: this {j.type} joint lies between the base and "
                                                  f"the root {self.root!r}; kipup can re-root only across fixed "
                                                  "joints (or one floating joint)")])

    def _visit(self, link: str, body: _Body, R: np.ndarray, p: np.ndarray, via: str, skip: str | None) -> None:
        body.parts.append(_Part(link, R, p, via))
        self.body_of[link] = (body, R, p)
        for j in self.child_joints[link]:
            if j.child == skip:
                continue
            Rc, pc = R @ j.R, R @ j.p + p
            kind, sign = self.classify(j, Rc)
            if kind == "fixed":
                self._visit(j.child, body, Rc, pc, f"fixed joint {j.name!r}", None)
            elif kind == "lateral":
                a = Rc @ j.axis
                self.note(f"dropped lateral joint {j.name!r} (axis {_vec_text(a)} in the frame of the link it hangs "
                          f"from, a roll/yaw joint): locked at zero, link {j.child!r} merged into {body.key!r} "
                          "(parallel-axis theorem)")
                self._visit(j.child, body, Rc, pc, f"dropped lateral joint {j.name!r}", None)
            else:
                child = _Body(key=j.child, parent=body, joint=j, sign=sign, origin=pc, y_abs=body.y_abs + float(pc[1]))
                body.children.append(child)
                self.bodies.append(child)
                self._visit(j.child, child, Rc, np.zeros(3), "", None)

    # ----- mass properties ---------------------------------------------------------------
    def mass_properties(self) -> None:
        problems = []
        for b in self.bodies:
            ms, cs, iyys = [], [], []
            for part in b.parts:
                ul = self.links[part.link]
                inert = ul.inertial
                if part.via.startswith("fixed joint") and (inert is not None and inert.mass > 0):
                    self.note(f"{part.via}: link {part.link!r} ({_fmt(inert.mass)} kg) merged into {b.key!r} "
                              "(parallel-axis theorem)")
                if inert is None or inert.mass == 0.0:
                    continue
                Rfull = part.R @ inert.R
                I = part.R @ inert.tensor @ part.R.T
                if not _is_pitch_rotation(Rfull):
                    self.note(f"link {part.link!r}: inertia projected onto the pitch axis, Iyy' = e_y^T R I R^T e_y "
                              f"= {_fmt(I[1, 1])} kg m^2 (its inertial frame is rotated off the y axis)")
                scale = max(float(np.trace(I)), 1e-300)
                if abs(I[0, 1]) > 1e-9 * scale or abs(I[1, 2]) > 1e-9 * scale:
                    self.note(f"link {part.link!r}: products of inertia with y (Ixy, Iyz) ignored by the planar model")
                ms.append(inert.mass)
                cs.append(part.R @ inert.com + part.p)
                iyys.append(float(I[1, 1]))
            ul = self.links[b.key]
            if not ms:
                if ul.inertial is None:
                    problems.append(Problem(ul.where, f"link {b.key!r} has no <inertial>: kipup needs mass, COM and "
                                                      "inertia"))
                else:
                    problems.append(Problem(ul.where, f"link {b.key!r} has zero mass: kipup needs mass, COM and "
                                                      "inertia"))
                continue
            M = float(sum(ms))
            C = sum(m * c for m, c in zip(ms, cs)) / M
            iyy = sum(i + m * ((c[0] - C[0]) ** 2 + (c[2] - C[2]) ** 2) for m, c, i in zip(ms, cs, iyys))
            b.mass, b.com, b.iyy = M, C, float(iyy)
            if not b.iyy > 0.0:
                problems.append(Problem(ul.where, f"link {b.key!r}: its inertia about the pitch axis is "
                                                  f"{_fmt(b.iyy)} kg m^2; kipup needs a positive inertia"))
        if problems:
            raise URDFError(problems)

    # ----- pairs -------------------------------------------------------------------------
    def find_pairs(self, pairs: dict | None) -> list[tuple[str, _Body, _Body]]:
        """[(kipup name or '', left body, right body)] in parent-first order."""
        by_key = {b.key: b for b in self.bodies}
        found: list[tuple[str, _Body, _Body]] = []
        if pairs is not None:
            problems = []
            for kname, value in pairs.items():
                where = f"pairs[{kname!r}]"
                try:
                    left, right = value
                except (TypeError, ValueError):
                    problems.append(Problem(where, "must be (left_urdf_link, right_urdf_link)"))
                    continue
                ok = True
                for side, ln in (("left", left), ("right", right)):
                    if ln not in self.links:
                        problems.append(Problem(where, f"{side} link {ln!r} is not a link of the URDF"))
                        ok = False
                    elif ln not in by_key:
                        if ln in self.body_of:
                            owner = self.body_of[ln][0].key
                            problems.append(Problem(where, f"{side} link {ln!r} is merged into {owner!r} (fixed or "
                                                           f"dropped joint); name {owner!r} instead"))
                        else:
                            problems.append(Problem(where, f"{side} link {ln!r} is not part of the imported tree"))
                        ok = False
                if ok and left == right:
                    problems.append(Problem(where, "left and right must be different links"))
                    ok = False
                if ok:
                    L, R = by_key[left], by_key[right]
                    if L is self.base or R is self.base:
                        problems.append(Problem(where, "the floating base cannot be part of a pair"))
                        continue
                    if not L.y_abs - R.y_abs > 0.0:
                        problems.append(Problem(where, f"the left link {left!r} (y = {_fmt(L.y_abs)} m) must lie "
                                                       f"to the left of the right link {right!r} "
                                                       f"(y = {_fmt(R.y_abs)} m)"))
                        continue
                    found.append((str(kname), L, R))
            if problems:
                raise URDFError(problems)
            order = {id(b): i for i, b in enumerate(self.bodies)}
            found.sort(key=lambda t: order[id(t[1])])
            self._check_pairs(found, strict=True)
            return found
        # auto-detect
        candidates: dict[tuple[str, int | None], dict[str, _Body]] = {}
        for b in self.bodies[1:]:
            s = _side_of(b.key)
            if s is None:
                continue
            candidates.setdefault((s[0].lower(), None), {}).setdefault(s[1], b)
        for (stem, _), sides in candidates.items():
            if "l" not in sides or "r" not in sides:
                continue
            L, R = sides["l"], sides["r"]
            why = ""
            if not (L.y_abs > 0.0 > R.y_abs):
                why = (f"their lateral offsets (y = {_fmt(L.y_abs)} and {_fmt(R.y_abs)} m) are not left (+) and "
                       "right (-)")
            elif abs(L.mass - R.mass) > PAIR_MASS_TOL * max(L.mass, R.mass):
                why = f"their masses differ by more than 1 % ({_fmt(L.mass)} and {_fmt(R.mass)} kg)"
            if why:
                self.note(f"links {L.key!r} and {R.key!r} look like a left/right pair but were not lumped: {why}")
                continue
            found.append(("", L, R))
        order = {id(b): i for i, b in enumerate(self.bodies)}
        found.sort(key=lambda t: order[id(t[1])])
        return self._check_pairs(found, strict=False)

    def _check_pairs(self, found: list, strict: bool) -> list:
        """Keep pairs whose sides hang from one link (or from a kept pair) and whose children are pairs too."""
        while True:
            mate = {}
            for _, L, R in found:
                mate[id(L)], mate[id(R)] = R, L
            bad = None
            for item in found:
                _, L, R = item
                same_parent = L.parent is R.parent
                parents_paired = mate.get(id(L.parent)) is R.parent and L.parent is not None
                if not (same_parent or parents_paired):
                    bad = (item, f"links {L.key!r} and {R.key!r} hang from {L.parent.key!r} and {R.parent.key!r}, "
                                 "which are not one link or a left/right pair")
                    break
                for kid in L.children + R.children:
                    if id(kid) not in mate:
                        bad = (item, f"link {kid.key!r} hangs from the pair ({L.key!r}, {R.key!r}) but has no "
                                     "mirror partner: a link below a pair must be a pair too")
                        break
                if bad:
                    break
            if bad is None:
                return found
            item, why = bad
            if strict:
                raise URDFError([Problem(f"pairs[{item[0]!r}]", why)])
            self.note(f"links {item[1].key!r} and {item[2].key!r} not lumped: {why}")
            found = [f for f in found if f is not item]

    # ----- geometry ----------------------------------------------------------------------
    def capsule(self, b: _Body) -> None:
        def from_shape(part: _Part, s: _Shape) -> dict:
            R, p = part.R @ s.A, part.R @ s.p + part.p
            if s.kind in ("cylinder", "capsule"):
                a = R[:, 2]
                half = s.length / 2.0 if s.kind == "capsule" else max(s.length / 2.0 - s.radius, 0.0)
                start, end, radius = p - half * a, p + half * a, s.radius
            elif s.kind == "sphere":
                start = end = p
                radius = s.radius
            else:  # box: along its longest side, radius half its smallest
                sizes = np.array(s.size)
                i = int(np.argmax(sizes))
                radius = 0.5 * float(np.min(np.delete(sizes, i)))
                half = max(sizes[i] / 2.0 - radius, 0.0)
                a = R[:, i]
                start, end = p - half * a, p + half * a
            # put the end that is farther from the joint last
            if np.hypot(start[0], start[2]) > np.hypot(end[0], end[2]):
                start, end = end, start
            return {"start": list(_xz(start)), "end": list(_xz(end)), "radius": float(radius)}

        has_mesh = False
        for source in ("collision", "visual"):
            for part in b.parts:
                for s in self.links[part.link].shapes:
                    if s.source != source:
                        continue
                    if s.kind in ("mesh", "unknown"):
                        has_mesh = True
                        continue
                    if s.kind in ("cylinder", "capsule", "sphere") and s.radius <= 0 or \
                            s.kind == "box" and min(s.size) <= 0:
                        continue
                    b.capsule = from_shape(part, s)
                    if s.kind not in ("cylinder", "capsule") or source != "collision" or part.link != b.key:
                        self.note(f"link {b.key!r}: capsule from the {source} {s.kind} of link {part.link!r}"
                                  + (" (along its longest side, radius half its smallest)" if s.kind == "box" else ""))
                    return
        # a guess: from the joint to the farthest child joint, or to the COM
        ends = [c.origin for c in b.children]
        if ends:
            tip = max(ends, key=lambda v: math.hypot(v[0], v[2]))
            towards = "its farthest child joint"
        else:
            tip = b.com
            towards = "its COM"
        L = math.hypot(tip[0], tip[2])
        if L > 1e-3:
            r = math.sqrt(b.mass / (WATER_DENSITY * math.pi * L))
            r = min(max(r, MIN_RADIUS), max(0.5 * L, MIN_RADIUS))
            b.capsule = {"start": [0.0, 0.0], "end": list(_xz(tip)), "radius": r}
        else:
            r = max((3.0 * b.mass / (4.0 * math.pi * WATER_DENSITY)) ** (1.0 / 3.0), MIN_RADIUS)
            b.capsule = {"start": list(_xz(b.com)), "end": list(_xz(b.com)), "radius": r}
            towards = "nowhere (a sphere at its COM)"
        what = "mesh-only geometry" if has_mesh else "no collision or visual geometry"
        self.note(f"link {b.key!r}: {what}; capsule guessed from its joint to {towards}, radius {_fmt(r)} m "
                  "(a cylinder of its mass at the density of water)")


def _tip(capsule: dict) -> tuple[float, float]:
    s, e, r = np.array(capsule["start"]), np.array(capsule["end"]), capsule["radius"]
    d = e - s
    n = float(np.hypot(*d))
    if n > 1e-12:
        return (float(e[0] + r * d[0] / n), float(e[1] + r * d[1] / n))
    n = float(np.hypot(*e))
    if n > 1e-12:
        return (float(e[0] + r * e[0] / n), float(e[1] + r * e[1] / n))
    return (float(e[0]), float(e[1]))


def _plain(value: Any) -> Any:
    """``value`` with NumPy scalars turned into Python floats (the document is plain data)."""
    if isinstance(value, dict):
        return {k: _plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    if isinstance(value, (np.floating, np.integer)):
        return float(value)
    return value


def urdf_to_robot_dict(path_or_text: str | os.PathLike[str] | bytes, *, plane: str = "xz",
                       pairs: dict | None = None, base_link: str | None = None,
                       points: Sequence[Sequence[Any]] | None = None,
                       actuators: dict[str, dict[str, float]] | None = None) -> tuple[dict, list[str]]:
    """The robot-file document (``kipup-robot/1``, per-side values for pairs) of a URDF, and the notes.

    Same arguments as :func:`import_urdf`; the document passes
    :func:`~kipup.core.robot_file.validate_robot_dict`.
    """
    if plane not in PLANES:
        raise ValueError(f"plane must be one of {', '.join(PLANES)} (the URDF plane that is the sagittal plane); "
                         f"got {plane!r}")
    data, label = _read_source(path_or_text)
    root, lines = _parse_xml(data)
    imp = _Importer(root, lines, label, plane)
    imp.read()
    imp.tree()
    imp.build_bodies(base_link)
    imp.mass_properties()
    found = imp.find_pairs(pairs)
    bodies = imp.bodies
    note = imp.note

    # ----- pairs: per-side values --------------------------------------------------------
    in_pair: dict[int, tuple[str, _Body, _Body]] = {}
    for item in found:
        in_pair[id(item[1])] = item
        in_pair[id(item[2])] = item
        item[1].side, item[2].side, item[1].mate, item[2].mate = "l", "r", item[2], item[1]

    # ----- joints: limits and actuators -------------------------------------------------
    problems: list[Problem] = []
    actuators = dict(actuators or {})
    unknown = [k for k in actuators if k not in {j.name for j in imp.joints}]
    if unknown:
        problems.extend(Problem(f"actuators[{k!r}]", "not a joint of the URDF") for k in unknown)
    for k, v in actuators.items():
        if not isinstance(v, dict):
            problems.append(Problem(f"actuators[{k!r}]", "must be a mapping of actuator fields"))
            continue
        for f in v:
            if f not in _ACTUATOR_FIELDS:
                problems.append(Problem(f"actuators[{k!r}].{f}",
                                        f"unknown field; fields: {', '.join(_ACTUATOR_FIELDS)}"))

    def joint_values(b: _Body) -> dict | None:
        j = b.joint
        lim = j.limit
        if lim is None:
            problems.append(Problem(j.where, f"joint {j.name!r} has no <limit>: kipup needs its effort (peak torque) "
                                             "and velocity limit" + ("" if j.type == "continuous" else
                                                                     " and its lower/upper range")))
            return None
        missing = [k for k in ("effort", "velocity") if k not in lim]
        if j.type == "revolute":
            missing += [k for k in ("lower", "upper") if k not in lim]
        if missing:
            problems.append(Problem(j.where, f"joint {j.name!r}: <limit> has no {', '.join(missing)} (kipup needs "
                                             "lower, upper (rad), effort (N m) and velocity (rad/s))"))
            return None
        for k in ("effort", "velocity"):
            if not lim[k] > 0:
                problems.append(Problem(j.where, f"joint {j.name!r}: <limit {k}=\"{_fmt(lim[k])}\"> must be > 0"))
                return None
        if j.type == "continuous":
            lo, up = -CONTINUOUS_RANGE, CONTINUOUS_RANGE
            note(f"continuous joint {j.name!r}: no position limits in the URDF, using +-{_fmt(CONTINUOUS_RANGE)} rad")
        else:
            lo, up = lim["lower"], lim["upper"]
            if not lo < up:
                problems.append(Problem(j.where, f"joint {j.name!r}: <limit lower=\"{_fmt(lo)}\" upper=\"{_fmt(up)}\">"
                                                 " must have lower < upper"))
                return None
        if b.sign < 0:
            lo, up = -up + 0.0, -lo + 0.0  # + 0.0: no negative zero
            note(f"joint {j.name!r}: axis -y, so the kipup angle is minus the URDF angle (limits become "
                 f"[{_fmt(lo)}, {_fmt(up)}] rad)")
        if j.mimic:
            note(f"joint {j.name!r} mimics {j.mimic!r} in the URDF; kipup treats it as an independent joint")
        if j.friction:
            note(f"joint {j.name!r}: Coulomb friction <dynamics friction=\"{_fmt(j.friction)}\"> ignored")
        over = actuators.get(j.name, {})
        act = {"peak_torque": float(over.get("peak_torque", lim["effort"]))}
        act["gear_ratio"] = float(over.get("gear_ratio", imp.gear.get(j.name, 1.0)))
        act["stall_torque"] = float(over.get("stall_torque", act["peak_torque"]))
        act["no_load_speed"] = float(over.get("no_load_speed", NO_LOAD_FACTOR * lim["velocity"]))
        act["viscous_friction"] = float(over.get("viscous_friction", j.damping))
        defaults = [f for f in ("stall_torque", "no_load_speed") if f not in over]
        if "gear_ratio" not in over and j.name not in imp.gear:
            defaults.append("gear_ratio")
        return {"lower": float(lo), "upper": float(up), "velocity": float(lim["velocity"]), "actuator": act,
                "defaults": defaults}

    jvals: dict[int, dict] = {}
    for b in bodies[1:]:
        v = joint_values(b)
        if v is not None:
            jvals[id(b)] = v
    if problems:
        raise URDFError(problems)
    defaulted = [b.joint.name for b in bodies[1:] if jvals[id(b)]["defaults"]]
    if defaulted:
        note("actuators: the URDF has no torque-speed line, so stall torque = peak torque (<limit effort>), "
             f"no-load speed = {NO_LOAD_FACTOR} x the velocity limit and gear ratio 1 (unless a <transmission> "
             f"gives one) for joints {', '.join(defaulted)}; pass actuators={{joint: {{...}}}} to set them")
    damped = [b.joint.name for b in bodies[1:] if b.joint.damping]
    if damped:
        note(f"viscous friction from <dynamics damping> for joints {', '.join(damped)}")

    # ----- names -------------------------------------------------------------------------
    used_links: set[str] = set()
    used_joints: set[str] = set(BASE_COORDS)

    def unique(raw: str, used: set[str], what: str, fallback: str) -> str:
        name = _valid_name(raw, fallback)
        base, k = name, 2
        while name in used:
            name = f"{base}_{k}"
            k += 1
        used.add(name)
        if name != raw:
            note(f"{what} {raw!r} is called {name!r} in kipup (names are letters, digits and underscores, unique)")
        return name

    for b in bodies:
        if b.side == "r":
            continue
        if b.side == "l":
            kname = in_pair[id(b)][0]
            if not kname:
                kname = _side_of(b.key)[0]
            b.name = unique(kname, used_links, f"the pair ({b.key}, {b.mate.key})", "link")
            b.mate.name = b.name
            s = _side_of(b.joint.name)
            raw_j = s[0] if s else b.joint.name
            b.jname = unique(raw_j, used_joints, f"the joint pair ({b.joint.name}, {b.mate.joint.name})", "joint")
            b.mate.jname = b.jname
        else:
            b.name = unique(b.key, used_links, "link", "link")
            if b.joint is not None:
                b.jname = unique(b.joint.name, used_joints, "joint", "joint")
    for b in bodies:
        if b.side == "" and b.joint is not None and abs(b.y_abs) > 1e-9:
            note(f"link {b.key!r} sits at y = {_fmt(b.y_abs)} m with no mirror partner; kept as a sagittal link "
                 "drawn at y = 0")

    # ----- capsules ----------------------------------------------------------------------
    for b in bodies:
        if b.side != "r":
            imp.capsule(b)

    # ----- the document -------------------------------------------------------------------
    def side_values(b: _Body) -> dict:
        """Per-side mass, com, inertia, origin (and notes) of a centre link or a pair."""
        if not b.side:
            return {"mass": b.mass, "com": list(_xz(b.com)), "inertia": b.iyy,
                    "origin": list(_xz(b.origin)) if b.joint else None}
        L, R = b, b.mate
        M = L.mass + R.mass
        C = (L.mass * L.com + R.mass * R.com) / M
        iyy = sum(s.iyy + s.mass * ((s.com[0] - C[0]) ** 2 + (s.com[2] - C[2]) ** 2) for s in (L, R))
        origin = 0.5 * (L.origin + R.origin)
        w = 0.5 * (L.y_abs - R.y_abs)
        msgs = [f"lumped left/right pair ({L.key}, {R.key}) into link {b.name!r}: mass {_fmt(M)} kg, inertia "
                f"{_fmt(iyy)} kg m^2, torques doubled, drawn at y = +-{_fmt(w)} m"]
        if abs(L.y_abs + R.y_abs) > 1e-9:
            msgs.append(f"pair {b.name!r}: the sides sit at y = {_fmt(L.y_abs)} and {_fmt(R.y_abs)} m, not mirror "
                        f"images; using +-{_fmt(w)} m")
        if np.hypot(L.origin[0] - R.origin[0], L.origin[2] - R.origin[2]) > 1e-9:
            msgs.append(f"pair {b.name!r}: joint origins differ between the sides; using their mean")
        if abs(L.mass - R.mass) > 1e-12 * M or np.hypot(L.com[0] - R.com[0], L.com[2] - R.com[2]) > 1e-9:
            msgs.append(f"pair {b.name!r}: the sides differ in mass or COM; using the combined values split evenly")
        for m in msgs:
            note(m)
        return {"mass": M / 2.0, "com": list(_xz(C)), "inertia": iyy / 2.0, "origin": list(_xz(origin)),
                "lateral_offset": w}

    def joint_doc(b: _Body, origin: list) -> dict:
        v = jvals[id(b)]
        if b.side == "l":
            r = jvals[id(b.mate)]
            lo, up = max(v["lower"], r["lower"]), min(v["upper"], r["upper"])
            vel = min(v["velocity"], r["velocity"])
            act = {k: min(v["actuator"][k], r["actuator"][k]) for k in _ACTUATOR_FIELDS}
            if (lo, up, vel) != (v["lower"], v["upper"], v["velocity"]) or \
                    (lo, up, vel) != (r["lower"], r["upper"], r["velocity"]) or act != v["actuator"] or \
                    act != r["actuator"]:
                note(f"joint pair {b.jname!r}: limits or actuators differ between {b.joint.name!r} and "
                     f"{b.mate.joint.name!r}; using the tighter of each")
        else:
            lo, up, vel, act = v["lower"], v["upper"], v["velocity"], dict(v["actuator"])
        return {"name": b.jname, "origin": origin, "limits": {"lower": lo, "upper": up, "velocity": vel},
                "actuator": act}

    base = bodies[0]
    bv = side_values(base)
    doc_base = {"name": base.name, "mass": bv["mass"], "com": bv["com"], "inertia": bv["inertia"],
                "capsule": base.capsule}
    doc_links = []
    for b in bodies[1:]:
        if b.side == "r":
            continue
        v = side_values(b)
        d: dict[str, Any] = {"name": b.name, "parent": b.parent.name}
        if b.side == "l":
            d["pair"] = {"lateral_offset": v["lateral_offset"]}
        d.update(mass=v["mass"], com=v["com"], inertia=v["inertia"], capsule=b.capsule)
        d["joint"] = joint_doc(b, v["origin"])
        doc_links.append(d)

    # ----- points ------------------------------------------------------------------------
    doc_points: list[dict] = []
    pnames: set[str] = set()
    kipup_links = {b.name: b for b in bodies}
    problems = []
    for i, spec in enumerate(points or []):
        where = f"points[{i}]"
        try:
            pname, link, pos = spec[0], spec[1], spec[2]
            mu = spec[3] if len(spec) > 3 else None
            x, z = float(pos[0]), float(pos[1])
        except (TypeError, ValueError, IndexError):
            problems.append(Problem(where, "must be (name, link, (x, z)) or (name, link, (x, z), friction)"))
            continue
        if not isinstance(pname, str) or not _NAME_RE.match(pname):
            problems.append(Problem(where, f"point name {pname!r} must be letters, digits and underscores"))
            continue
        if pname in pnames:
            problems.append(Problem(where, f"duplicate point name {pname!r}"))
            continue
        if not (math.isfinite(x) and math.isfinite(z)):
            problems.append(Problem(where, "position must be finite"))
            continue
        if mu is not None and not (isinstance(mu, (int, float)) and math.isfinite(mu) and mu >= 0):
            problems.append(Problem(where, f"friction must be a number >= 0 or None (got {mu!r})"))
            continue
        if link in imp.body_of:
            body, R, p = imp.body_of[link]
            target = body.mate if body.side == "r" else body
            pb = R @ np.array([x, 0.0, z]) + p
            position = list(_xz(pb))
            on = target.name
        elif link in kipup_links:
            on, position = link, [x, z]
        else:
            problems.append(Problem(where, f"unknown link {link!r} (neither a URDF link in the imported tree nor a "
                                           "kipup link)"))
            continue
        pnames.add(pname)
        doc_points.append({"name": pname, "link": on, "position": position,
                           "friction": None if mu is None else float(mu)})
    if problems:
        raise URDFError(problems)
    for b in bodies:
        if b.side == "r" or b.children:
            continue
        if b.name in pnames:
            note(f"no point added at the end of leaf link {b.name!r}: a point of that name is given")
            continue
        tip = _tip(b.capsule)
        pnames.add(b.name)
        doc_points.append({"name": b.name, "link": b.name, "position": [_clean(tip[0]), _clean(tip[1])],
                           "friction": None})
        note(f"added point {b.name!r} at the tip of leaf link {b.name!r}, {_vec_text(tip)} m in its frame "
             "(no friction coefficient: give one to use it as a contact)")

    if not imp.name:
        note("the <robot> has no name; calling it 'imported'")
    doc: dict[str, Any] = {
        "format": FORMAT,
        "name": imp.name or "imported",
        "description": f"Imported from a URDF file ({Path(label).name}) by kipup; see the import notes.",
        "gravity": 9.81,
        "base": doc_base,
        "links": doc_links,
        "points": doc_points,
    }
    doc = _plain(doc)
    check = validate_robot_dict(doc)
    if check:
        raise URDFError([Problem(f"imported robot: {p.path}", p.message) for p in check])
    return doc, list(dict.fromkeys(imp.notes))


def import_urdf(path_or_text: str | os.PathLike[str] | bytes, *, plane: str = "xz", pairs: dict | None = None,
                base_link: str | None = None, points: Sequence[Sequence[Any]] | None = None,
                actuators: dict[str, dict[str, float]] | None = None) -> tuple[Robot, list[str]]:
    """Import a URDF as a kipup :class:`~kipup.core.robot.Robot`; returns ``(robot, approximations)``.

    ``path_or_text``: a file path, or the XML text itself (a string starting with ``<``) or bytes.
    ``plane``: ``"xz"`` (default; URDF x forward, z up) or ``"yz"`` (URDF y forward).
    ``pairs``: ``{kipup_link: (left_urdf_link, right_urdf_link)}`` to lump exactly those pairs;
    ``None`` detects mirrored ``_l``/``_r`` (``left_``/``right_``...) chains; ``{}`` lumps none.
    ``base_link``: the floating base (default: the URDF's root). ``points``: extra named points
    ``(name, urdf_link, (x, z), friction)`` with the position (m) in that link's frame (sagittal
    coordinates) and friction optional. ``actuators``: ``{urdf_joint: {field: value}}``, per side,
    overriding ``peak_torque``, ``gear_ratio``, ``stall_torque``, ``no_load_speed``,
    ``viscous_friction``.

    The approximations list says in words every choice the URDF did not determine (see the module
    docstring). Raises :class:`URDFError` naming each bad element (with its line), and nothing is
    written anywhere. The robot passes ``validate_robot_dict(robot_to_dict(robot))``.
    """
    doc, notes = urdf_to_robot_dict(path_or_text, plane=plane, pairs=pairs, base_link=base_link, points=points,
                                    actuators=actuators)
    return robot_from_dict(doc), notes
