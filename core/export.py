"""Export a motion for a robot's controller: resampled at a fixed rate, as CSV, NPZ or JSON.

:func:`export_motion` samples the motion at ``rate_hz`` with the collocation scheme's own exact
dense evaluation (:meth:`~kipup.core.motion.Motion.sample` for q and qd,
:meth:`~kipup.core.motion.Motion.sample_torques` and
:meth:`~kipup.core.motion.Motion.sample_forces`), so the samples are the motion the optimizer
checked, not a re-interpolation. :func:`import_export` reads any of the three formats back.

Samples: ``t_k = t0 + k / rate_hz`` for ``k = 0 .. n-1`` with ``n = floor(duration * rate_hz) + 1``
(the last sample is at or before the motion's end). At a phase boundary the later phase is used
(post-impact velocities), as :meth:`Motion.sample` does.

Columns (SI units, radians): ``time`` (s); ``q_<coord>`` and ``qd_<coord>`` for every entry of
``Robot.coord_names`` (m, rad; m/s, rad/s); ``tau_<joint>`` (N m); ``fx_<point>``, ``fz_<point>``
(N, world frame, the force on the robot) and ``contact_<point>`` (1 in contact, 0 not) for every
contact point of the motion. For a lumped left/right pair the torque and gains are the pair's:
each of the two motors takes ``per_side`` (one half) of them (see the metadata).

Metadata (the ``meta`` dict; a ``#`` JSON-lines header in CSV): format ``kipup-export/1``, units,
joint order and coordinate names, the columns, rate and sample count, the robot's name and
``robot_sha256`` (:func:`robot_hash`), the phases and the contact schedule, suggested PD gains per
joint, the limits and the peaks of the samples, warnings, the kipup version and the safety
caution :data:`EXPORT_CAUTION`.

**Suggested PD gains** (:func:`suggested_gains`): from the joint's own entry of the joint-space
mass matrix at the nominal pose (the motion's first sample), ``M_jj`` (kg m^2, the inertia the
joint moves with every other coordinate held), a second-order loop of natural frequency
``wn = 2 pi 10 Hz`` and damping ratio ``zeta = 0.7``: ``kp = M_jj wn^2`` (N m/rad) and
``kd = 2 zeta wn M_jj`` (N m s/rad). Override them with ``kp``/``kd`` (a number for every joint, a
sequence in joint order or a ``{joint: value}`` dict) or with ``bandwidth_hz``/``damping_ratio``.
They are a starting point for a simulation, not values to run hardware with.

**Limits**: the export refuses (:class:`ExportError`, naming the joint, the time and the values,
nothing written) if any sample has ``|tau|`` above the actuator's peak torque, ``|qd|`` above the
joint's velocity limit or ``q`` outside its range, beyond a relative tolerance of
:data:`LIMIT_TOLERANCE` (the solver's numerical slack) for torques and the between-knot
tolerances of :mod:`kipup.core.limits` for speeds and ranges (the same the optimizer's constraint
report uses). With ``allow_violations=True`` it writes
the file and lists every violation under ``warnings`` in the metadata.

Files are written atomically (:mod:`kipup.core.atomic`); NaN or infinity is never written.
Floats are written exactly: CSV and JSON by the shortest repr that reads back to the same float64
(17 significant digits at most), NPZ natively.
"""
from __future__ import annotations

import hashlib
import io
import json
import math
import os
from pathlib import Path
from typing import Any, Mapping, Sequence

import numpy as np

from . import __version__ as _KIPUP_VERSION
from .limits import RANGE_TOL, SPEED_TOL
from .atomic import atomic_write
from .lumping import is_paired
from .motion import Motion
from .robot import Robot
from .robot_file import robot_to_dict

__all__ = [
    "EXPORT_FORMAT",
    "EXPORT_CAUTION",
    "EXPORT_FORMATS",
    "GAIN_BANDWIDTH_HZ",
    "GAIN_DAMPING_RATIO",
    "LIMIT_TOLERANCE",
    "ExportError",
    "robot_hash",
    "suggested_gains",
    "export_samples",
    "export_motion",
    "import_export",
]

EXPORT_FORMAT = "kipup-export/1"
EXPORT_CAUTION = ("Simulate first; run on hardware only with reduced gains and torque limits, a harness or gantry, "
                  "a clear area and an emergency stop, under your lab's safety rules and local regulations.")
EXPORT_FORMATS = ("csv", "npz", "json")
GAIN_BANDWIDTH_HZ = 10.0
GAIN_DAMPING_RATIO = 0.7
LIMIT_TOLERANCE = 1e-6
GAIN_RULE = ("kp = M_jj * wn^2, kd = 2 * zeta * wn * M_jj, with M_jj the joint's diagonal entry of the "
             "joint-space mass matrix (kg m^2) at the nominal pose (the first sample), wn = 2 pi bandwidth_hz")

_ARRAY_KEYS = ("time", "q", "qd", "tau", "forces", "contact")


class ExportError(ValueError):
    """An export was refused: bad arguments, a limit exceeded, NaN, or a path that cannot be written."""


# ---------------------------------------------------------------------------------------
# pieces
# ---------------------------------------------------------------------------------------
def robot_hash(robot: Robot) -> str:
    """SHA-256 (hex) of the robot's canonical document: ``robot_to_dict(robot)`` as JSON with sorted
    keys and separators ``(",", ":")``. Equal for a robot and the same robot loaded back from its file."""
    text = json.dumps(robot_to_dict(robot), sort_keys=True, separators=(",", ":"), allow_nan=False)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def _per_joint(value: Any, robot: Robot, what: str) -> dict[str, float]:
    """A gain override as {joint: value}: a number (all joints), a sequence (joint order) or a dict."""
    names = list(robot.joint_names)
    if value is None:
        return {}
    if isinstance(value, Mapping):
        unknown = [k for k in value if k not in names]
        if unknown:
            raise ExportError(f"{what}: unknown joints {unknown}; joints: {', '.join(names)}")
        out = {str(k): v for k, v in value.items()}
    elif isinstance(value, (int, float)) and not isinstance(value, bool):
        out = {n: value for n in names}
    else:
        seq = list(value)
        if len(seq) != len(names):
            raise ExportError(f"{what}: needs {len(names)} values (joints {', '.join(names)}), got {len(seq)}")
        out = dict(zip(names, seq))
    for k, v in out.items():
        try:
            f = float(v)
        except (TypeError, ValueError):
            raise ExportError(f"{what}[{k!r}] must be a number (got {v!r})") from None
        if not (math.isfinite(f) and f >= 0):
            raise ExportError(f"{what}[{k!r}] must be a finite number >= 0 (got {v!r})")
        out[k] = f
    return out


def suggested_gains(robot: Robot, q: Sequence[float], *, bandwidth_hz: float = GAIN_BANDWIDTH_HZ,
                    damping_ratio: float = GAIN_DAMPING_RATIO) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """``(kp, kd, M_jj)`` per joint at pose ``q``: ``kp = M_jj wn^2`` (N m/rad),
    ``kd = 2 zeta wn M_jj`` (N m s/rad), ``wn = 2 pi bandwidth_hz`` (rad/s), where ``M_jj``
    (kg m^2) is the joint's diagonal entry of the joint-space mass matrix (RBDA's CRBA) at ``q``."""
    from .dynamics import crba

    for name, v in (("bandwidth_hz", bandwidth_hz), ("damping_ratio", damping_ratio)):
        if not (isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v) and v > 0):
            raise ExportError(f"{name} must be a finite number > 0 (got {v!r})")
    M = np.asarray(crba(robot, np.asarray(q, dtype=float)), dtype=float)
    mjj = np.diag(M)[3:].copy()
    wn = 2.0 * math.pi * float(bandwidth_hz)
    return mjj * wn ** 2, 2.0 * float(damping_ratio) * wn * mjj, mjj


def _check_rate(motion: Motion, rate_hz: Any) -> float:
    if isinstance(rate_hz, bool) or not isinstance(rate_hz, (int, float, np.floating, np.integer)):
        raise ExportError(f"rate_hz must be a number (Hz), got {rate_hz!r}")
    rate = float(rate_hz)
    if not (math.isfinite(rate) and rate > 0):
        raise ExportError(f"rate_hz must be a finite number > 0 Hz, got {rate_hz!r}")
    steps = np.diff(motion.t)
    steps = steps[steps > 0]
    if steps.size:
        knot_rate = 1.0 / float(steps.min())
        if rate < knot_rate * (1.0 - 1e-9):
            raise ExportError(f"rate_hz = {rate:g} Hz is below the motion's knot rate ({knot_rate:.6g} Hz = 1 / the "
                              f"smallest knot spacing {float(steps.min()):.6g} s): resampling would skip knots; "
                              f"use rate_hz >= {math.ceil(knot_rate)}")
    return rate


def _sample_times(motion: Motion, rate: float) -> np.ndarray:
    n = int(math.floor(motion.duration * rate + 1e-9)) + 1
    times = motion.t0 + np.arange(n, dtype=float) / rate
    return np.minimum(times, motion.tend)


def _phase_index(motion: Motion, times: np.ndarray) -> np.ndarray:
    starts = np.array([p.start for p in motion.phases])
    return np.clip(np.searchsorted(starts, times, side="right") - 1, 0, len(motion.phases) - 1)


def _contact_schedule(motion: Motion) -> dict[str, list[list[float]]]:
    out: dict[str, list[list[float]]] = {c: [] for c in motion.contact_points}
    for ph in motion.phases:
        for c in ph.contacts:
            spans = out[c]
            if spans and abs(spans[-1][1] - ph.start) <= 1e-12:
                spans[-1][1] = float(ph.end)
            else:
                spans.append([float(ph.start), float(ph.end)])
    return out


def _units(robot: Robot) -> dict[str, Any]:
    lin = {"base_x", "base_z"}
    return {
        "time": "s",
        "q": {n: ("m" if n in lin else "rad") for n in robot.coord_names},
        "qd": {n: ("m/s" if n in lin else "rad/s") for n in robot.coord_names},
        "tau": "N m",
        "forces": "N (world frame, force on the robot: fx forward, fz up)",
        "contact": "1 in contact, 0 not",
        "kp": "N m/rad",
        "kd": "N m s/rad",
        "inertia": "kg m^2",
        "limits": {"lower": "rad", "upper": "rad", "velocity": "rad/s", "peak_torque": "N m"},
    }


def _columns(motion: Motion) -> list[str]:
    cols = ["time"] + [f"q_{n}" for n in motion.coord_names] + [f"qd_{n}" for n in motion.coord_names]
    cols += [f"tau_{n}" for n in motion.joint_names]
    for c in motion.contact_points:
        cols += [f"fx_{c}", f"fz_{c}"]
    cols += [f"contact_{c}" for c in motion.contact_points]
    return cols


def _violations(robot: Robot, times: np.ndarray, q: np.ndarray, qd: np.ndarray, tau: np.ndarray,
                tol: float) -> list[str]:
    out = []
    for j, joint in enumerate(robot.joints):
        checks = (
            ("|tau|", np.abs(tau[:, j]), joint.actuator.peak_torque, "N m", "peak torque"),
            ("|qd|", np.abs(qd[:, 3 + j]), joint.velocity_limit, "rad/s", "velocity limit"),
        )
        for label, values, limit, unit, word in checks:
            rel = tol if label == "|tau|" else max(tol, SPEED_TOL)
            bad = values > limit * (1.0 + rel)
            if bad.any():
                k = int(np.argmax(np.where(bad, values, -np.inf)))
                out.append(f"joint {joint.name}: {label} = {values[k]:.6g} {unit} at t = {times[k]:.6g} s exceeds its "
                           f"{word} {limit:.6g} {unit} ({int(bad.sum())} of {times.size} samples)")
        qj = q[:, 3 + j]
        lo_tol = max(tol * max(1.0, abs(joint.lower)), RANGE_TOL)
        up_tol = max(tol * max(1.0, abs(joint.upper)), RANGE_TOL)
        for bad, limit, word in ((qj < joint.lower - lo_tol, joint.lower, "below its lower limit"),
                                 (qj > joint.upper + up_tol, joint.upper, "above its upper limit")):
            if bad.any():
                excess = np.abs(qj - limit)
                k = int(np.argmax(np.where(bad, excess, -np.inf)))
                out.append(f"joint {joint.name}: q = {qj[k]:.6g} rad at t = {times[k]:.6g} s is {word} {limit:.6g} rad "
                           f"({int(bad.sum())} of {times.size} samples)")
    return out


def export_samples(motion: Motion, robot: Robot, rate_hz: float, *, kp: Any = None, kd: Any = None,
                   allow_violations: bool = False, bandwidth_hz: float = GAIN_BANDWIDTH_HZ,
                   damping_ratio: float = GAIN_DAMPING_RATIO,
                   tolerance: float = LIMIT_TOLERANCE) -> tuple[dict[str, np.ndarray], dict[str, Any]]:
    """The exported arrays and metadata, in memory (what :func:`export_motion` writes).

    Arrays: ``time (n,)``, ``q, qd (n, nq)``, ``tau (n, nj)``, ``forces (n, nc, 2)``,
    ``contact (n, nc)`` bool. Raises :class:`ExportError` (see :func:`export_motion`).
    """
    try:
        motion.check_robot(robot)
    except ValueError as exc:
        raise ExportError(str(exc)) from None
    try:
        motion.check_finite()
    except ValueError as exc:
        raise ExportError(str(exc).replace("the motion", "an export of the motion")) from None
    rate = _check_rate(motion, rate_hz)
    times = _sample_times(motion, rate)
    s = motion.sample(times)
    q, qd = s["q"], s["qd"]
    tau = motion.sample_torques(times)
    forces = motion.sample_forces(times)
    phase = _phase_index(motion, times)
    contact = np.zeros((times.size, len(motion.contact_points)), dtype=bool)
    for i, ph in enumerate(motion.phases):
        for c in ph.contacts:
            contact[phase == i, motion.contact_points.index(c)] = True
    for name, a in (("time", times), ("q", q), ("qd", qd), ("tau", tau), ("forces", forces)):
        bad = ~np.isfinite(a)
        if bad.any():
            idx = tuple(int(i) for i in np.argwhere(bad)[0])
            raise ExportError(f"sampled {name}[{', '.join(map(str, idx))}] is not finite; nothing written")

    violations = _violations(robot, times, q, qd, tau, float(tolerance))
    if violations and not allow_violations:
        raise ExportError("the motion exceeds the robot's limits; nothing written:\n- " + "\n- ".join(violations)
                          + "\n(pass allow_violations=True, or --allow-violations, to export anyway with a warning in "
                            "the metadata)")

    kp0, kd0, mjj = suggested_gains(robot, q[0], bandwidth_hz=bandwidth_hz, damping_ratio=damping_ratio)
    kp_over, kd_over = _per_joint(kp, robot, "kp"), _per_joint(kd, robot, "kd")
    gains = {}
    for j, name in enumerate(robot.joint_names):
        gains[name] = {"kp": kp_over.get(name, float(kp0[j])), "kd": kd_over.get(name, float(kd0[j])),
                       "inertia": float(mjj[j]), "kp_overridden": name in kp_over, "kd_overridden": name in kd_over}
    warnings = []
    if violations:
        warnings.append("LIMITS EXCEEDED (exported with allow_violations=True): " + "; ".join(violations))
    per_side = {j.name: (0.5 if is_paired(robot.links[k + 1]) else 1.0) for k, j in enumerate(robot.joints)}
    meta: dict[str, Any] = {
        "format": EXPORT_FORMAT,
        "caution": EXPORT_CAUTION,
        "kipup_version": _KIPUP_VERSION,
        "robot_name": robot.name,
        "robot_sha256": robot_hash(robot),
        "robot_sha256_rule": "sha256 of json.dumps(robot_to_dict(robot), sort_keys=True, separators=(',', ':'))",
        "trick_name": motion.trick_name,
        "motion_status": motion.status,
        "rate_hz": rate,
        "n_samples": int(times.size),
        "t0": motion.t0,
        "t_end": motion.tend,
        "sample_times": "t0 + k / rate_hz, k = 0 .. n_samples-1 (the last at or before t_end); the later phase "
                        "(post-impact) at a phase boundary",
        "units": _units(robot),
        "coord_names": list(robot.coord_names),
        "joint_names": list(robot.joint_names),
        "contact_points": list(motion.contact_points),
        "columns": _columns(motion),
        "phases": [{"name": p.name, "start": float(p.start), "end": float(p.end), "contacts": list(p.contacts)}
                   for p in motion.phases],
        "contact_schedule": _contact_schedule(motion),
        "gains": {"rule": GAIN_RULE, "bandwidth_hz": float(bandwidth_hz), "damping_ratio": float(damping_ratio),
                  "nominal_pose": "q at the first sample", "joints": gains,
                  "note": "a starting point for simulation; on hardware start lower"},
        "per_side": per_side,
        "per_side_note": "multiply tau, kp and kd by per_side for each motor: a lumped left/right pair (0.5) "
                         "splits them evenly between its two motors",
        "limits": {j.name: {"lower": j.lower, "upper": j.upper, "velocity": j.velocity_limit,
                            "peak_torque": j.actuator.peak_torque} for j in robot.joints},
        "limit_tolerance": float(tolerance),
        "peaks": {name: {"abs_tau": float(np.max(np.abs(tau[:, j]))), "abs_qd": float(np.max(np.abs(qd[:, 3 + j])))}
                  for j, name in enumerate(robot.joint_names)},
        "warnings": warnings,
    }
    arrays = {"time": times, "q": q, "qd": qd, "tau": tau, "forces": forces, "contact": contact}
    return arrays, meta


# ---------------------------------------------------------------------------------------
# writing
# ---------------------------------------------------------------------------------------
def _format_of(path: Path, fmt: str | None) -> str:
    if fmt is not None:
        f = str(fmt).lower().lstrip(".")
        if f not in EXPORT_FORMATS:
            raise ExportError(f"fmt must be one of {', '.join(EXPORT_FORMATS)} (got {fmt!r})")
        return f
    f = path.suffix.lower().lstrip(".")
    if f not in EXPORT_FORMATS:
        raise ExportError(f"cannot tell the format from the file name {path.name!r}: use a .csv, .npz or .json "
                          "suffix or give fmt")
    return f


def _csv_text(arrays: dict[str, np.ndarray], meta: dict[str, Any]) -> str:
    out = io.StringIO()
    out.write(f"# kipup motion export ({EXPORT_FORMAT}); metadata below as JSON lines, one key a line\n")
    out.write(f"# CAUTION: {EXPORT_CAUTION}\n")
    for k, v in meta.items():
        out.write("# " + json.dumps({k: v}, allow_nan=False) + "\n")
    out.write(",".join(meta["columns"]) + "\n")
    n = arrays["time"].size
    blocks = [arrays["time"][:, None], arrays["q"], arrays["qd"], arrays["tau"],
              arrays["forces"].reshape(n, -1)]
    table = np.hstack(blocks).tolist()
    flags = arrays["contact"].astype(int).tolist()
    for row, fl in zip(table, flags):
        out.write(",".join([repr(float(x)) for x in row] + [str(f) for f in fl]) + "\n")
    return out.getvalue()


def _json_text(arrays: dict[str, np.ndarray], meta: dict[str, Any]) -> str:
    doc = dict(meta)
    doc["data"] = {k: (arrays[k].astype(bool).tolist() if k == "contact" else arrays[k].tolist())
                   for k in _ARRAY_KEYS}
    return json.dumps(doc, allow_nan=False, indent=1) + "\n"


def export_motion(motion: Motion, robot: Robot, path: str | os.PathLike[str], rate_hz: float, *,
                  fmt: str | None = None, kp: Any = None, kd: Any = None, allow_violations: bool = False,
                  bandwidth_hz: float = GAIN_BANDWIDTH_HZ, damping_ratio: float = GAIN_DAMPING_RATIO,
                  tolerance: float = LIMIT_TOLERANCE) -> dict[str, Any]:
    """Write ``motion`` resampled at ``rate_hz`` (Hz) for ``robot`` to ``path``; returns the metadata.

    ``fmt``: ``"csv"``, ``"npz"`` or ``"json"`` (default: from the suffix). ``kp``/``kd``: gain
    overrides (number, sequence in joint order or ``{joint: value}``); ``bandwidth_hz`` and
    ``damping_ratio`` change the rule (see the module docstring).

    Raises :class:`ExportError` (a ``ValueError``), with nothing written, if: the motion does not
    fit the robot; ``rate_hz`` is not a positive number or is below the knot rate
    (``1 / smallest knot spacing``); a sample is NaN; a sample exceeds a limit (peak torque,
    velocity limit, joint range; unless ``allow_violations``, which writes and puts a warning in
    the metadata); the format is unknown; or ``path`` cannot be written (missing folder, a path
    under a file, no permission). The write is atomic: an existing file is replaced whole or kept.
    """
    target = Path(path)
    fmt = _format_of(target, fmt)
    arrays, meta = export_samples(motion, robot, rate_hz, kp=kp, kd=kd, allow_violations=allow_violations,
                                  bandwidth_hz=bandwidth_hz, damping_ratio=damping_ratio, tolerance=tolerance)
    folder = target.parent
    if target.is_dir():
        raise ExportError(f"cannot write {os.fspath(path)}: it is a folder")
    if not folder.is_dir():
        blocking = next((p for p in [folder, *folder.parents] if p.exists()), None)
        if blocking is not None and not blocking.is_dir():
            raise ExportError(f"cannot write {os.fspath(path)}: {os.fspath(blocking)} is a file, not a folder")
        raise ExportError(f"cannot write {os.fspath(path)}: the folder {os.fspath(folder)} does not exist")
    if fmt == "csv":
        data = _csv_text(arrays, meta).encode("utf-8")
        writer = lambda f: f.write(data)  # noqa: E731
    elif fmt == "json":
        data = _json_text(arrays, meta).encode("utf-8")
        writer = lambda f: f.write(data)  # noqa: E731
    else:
        text = json.dumps(meta, allow_nan=False)
        writer = lambda f: np.savez(f, meta=np.array(text), **arrays)  # noqa: E731
    try:
        atomic_write(target, writer)
    except OSError as exc:
        raise ExportError(f"cannot write {os.fspath(path)}: {exc.strerror or exc}") from None
    return meta


# ---------------------------------------------------------------------------------------
# reading
# ---------------------------------------------------------------------------------------
def _finish(meta: dict[str, Any], arrays: dict[str, Any], where: str) -> tuple:
    if meta.get("format") != EXPORT_FORMAT:
        raise ExportError(f"{where}: not a kipup export (format {meta.get('format')!r}, expected {EXPORT_FORMAT!r})")
    try:
        nq, nj, nc = len(meta["coord_names"]), len(meta["joint_names"]), len(meta["contact_points"])
    except (KeyError, TypeError):
        raise ExportError(f"{where}: the metadata lacks coord_names, joint_names or contact_points") from None
    time = np.asarray(arrays["time"], dtype=np.float64).reshape(-1)
    n = time.size
    shapes = {"q": (n, nq), "qd": (n, nq), "tau": (n, nj), "forces": (n, nc, 2), "contact": (n, nc)}
    out = {"time": time}
    for k, shape in shapes.items():
        a = np.asarray(arrays[k], dtype=bool if k == "contact" else np.float64)
        if a.size != math.prod(shape):
            raise ExportError(f"{where}: {k} has {a.size} values, expected shape {shape}")
        out[k] = a.reshape(shape)
    meta = dict(meta)
    meta["forces"], meta["contact"] = out["forces"], out["contact"]
    return out["time"], out["q"], out["qd"], out["tau"], meta


def _read_csv(text: str, where: str) -> tuple:
    meta: dict[str, Any] = {}
    lines = text.splitlines()
    i = 0
    while i < len(lines) and lines[i].startswith("#"):
        body = lines[i][1:].strip()
        if body.startswith("{"):
            try:
                meta.update(json.loads(body))
            except json.JSONDecodeError as exc:
                raise ExportError(f"{where}: line {i + 1}: bad metadata JSON ({exc.msg})") from None
        i += 1
    if i >= len(lines):
        raise ExportError(f"{where}: no column header after the metadata")
    header = lines[i].split(",")
    if header != meta.get("columns"):
        raise ExportError(f"{where}: line {i + 1}: the column header does not match the metadata's columns")
    rows = []
    for k, line in enumerate(lines[i + 1:], start=i + 2):
        if not line.strip():
            continue
        cells = line.split(",")
        if len(cells) != len(header):
            raise ExportError(f"{where}: line {k}: {len(cells)} values, expected {len(header)}")
        try:
            rows.append([float(c) for c in cells])
        except ValueError:
            raise ExportError(f"{where}: line {k}: not a number in {line[:60]!r}") from None
    table = np.array(rows, dtype=np.float64).reshape(len(rows), len(header))
    nq, nj, nc = len(meta["coord_names"]), len(meta["joint_names"]), len(meta["contact_points"])
    c = 0

    def take(m: int) -> np.ndarray:
        nonlocal c
        block = table[:, c:c + m]
        c += m
        return block

    arrays = {"time": take(1)[:, 0], "q": take(nq), "qd": take(nq), "tau": take(nj), "forces": take(2 * nc),
              "contact": take(nc) != 0}
    return _finish(meta, arrays, where)


def import_export(path: str | os.PathLike[str]) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, dict]:
    """Read an export (CSV, NPZ or JSON, told apart by content): ``(times, q, qd, tau, meta)``.

    ``times (n,)`` s, ``q, qd (n, nq)``, ``tau (n, nj)``; ``meta`` is the metadata dict plus
    ``meta["forces"] (n, nc, 2)`` N and ``meta["contact"] (n, nc)`` bool. Raises
    :class:`ExportError` for a file that is not a kipup export.
    """
    where = os.fspath(path)
    try:
        raw = Path(path).read_bytes()
    except OSError as exc:
        raise ExportError(f"cannot read {where}: {exc.strerror or exc}") from None
    if raw[:2] == b"PK":
        with np.load(io.BytesIO(raw), allow_pickle=False) as data:
            missing = [k for k in ("meta",) + _ARRAY_KEYS if k not in data.files]
            if missing:
                raise ExportError(f"{where}: not a kipup export (missing {missing})")
            meta = json.loads(str(data["meta"]))
            arrays = {k: data[k] for k in _ARRAY_KEYS}
        return _finish(meta, arrays, where)
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError:
        raise ExportError(f"{where}: not a kipup export (not UTF-8 text nor NPZ)") from None
    if text.lstrip().startswith("{"):
        try:
            doc = json.loads(text)
        except json.JSONDecodeError as exc:
            raise ExportError(f"{where}: invalid JSON at line {exc.lineno}: {exc.msg}") from None
        data = doc.pop("data", None) if isinstance(doc, dict) else None
        if not isinstance(data, dict) or any(k not in data for k in _ARRAY_KEYS):
            raise ExportError(f"{where}: not a kipup export (no data with {', '.join(_ARRAY_KEYS)})")
        return _finish(doc, data, where)
    if text.startswith("#"):
        return _read_csv(text, where)
    raise ExportError(f"{where}: not a kipup export (neither CSV with a # header, JSON nor NPZ)")
