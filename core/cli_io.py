"""``kipup import-urdf`` and ``kipup export``: robots in from URDF, motions out to a controller."""
from __future__ import annotations

import argparse
import os
from pathlib import Path

from .export import EXPORT_CAUTION, EXPORT_FORMATS, GAIN_BANDWIDTH_HZ, GAIN_DAMPING_RATIO

__all__ = ["add_parsers", "cmd_import_urdf", "cmd_export", "load_robot_arg"]


def _parse_point(text: str) -> tuple:
    """``NAME,LINK,X,Z[,FRICTION]`` -> (name, link, (x, z), friction)."""
    parts = [p.strip() for p in text.split(",")]
    if len(parts) not in (4, 5):
        raise argparse.ArgumentTypeError(f"--point {text!r}: expected NAME,LINK,X,Z or NAME,LINK,X,Z,FRICTION")
    try:
        x, z = float(parts[2]), float(parts[3])
        mu = float(parts[4]) if len(parts) == 5 else None
    except ValueError:
        raise argparse.ArgumentTypeError(f"--point {text!r}: X, Z and FRICTION must be numbers") from None
    return (parts[0], parts[1], (x, z), mu)


def cmd_import_urdf(args: argparse.Namespace) -> int:
    from .robot_file import RobotFileError, save_robot
    from .urdf_import import import_urdf

    try:
        robot, notes = import_urdf(Path(args.urdf), plane=args.plane, base_link=args.base,
                                   pairs={} if args.no_pairs else None, points=args.point or None)
    except RobotFileError as exc:  # URDFError is one
        for p in exc.problems:
            print(f"{args.urdf}: {p.path}: {p.message}")
        return 2
    except ValueError as exc:
        print(f"{args.urdf}: {exc}")
        return 2
    print(f"imported robot {robot.name!r}: {len(robot.links)} links, {robot.nj} joints "
          f"({', '.join(robot.joint_names) or 'none'}), total mass {robot.total_mass:.6g} kg")
    if notes:
        print("approximations:")
        for n in notes:
            print(f"- {n}")
    try:
        save_robot(robot, args.output)
    except RobotFileError as exc:
        for p in exc.problems:
            print(f"{args.output}: {p.path}: {p.message}")
        return 2
    except OSError as exc:
        print(f"{args.output}: cannot write: {exc.strerror or exc}")
        return 2
    print(f"wrote {args.output}")
    return 0


def load_robot_arg(text: str):
    """A robot from a robot file path or a bundled robot's name (``humanoid``, ``quadruped``...)."""
    from .robot_file import bundled_robot_names, load_bundled, load_robot

    if text in bundled_robot_names() and not os.path.exists(text):
        return load_bundled(text)
    if os.path.exists(text) or text.endswith((".yaml", ".yml")):
        return load_robot(Path(text))
    raise ValueError(f"no robot file {text!r} and no bundled robot of that name; bundled robots: "
                     f"{', '.join(bundled_robot_names())}")


def cmd_export(args: argparse.Namespace) -> int:
    import json

    from .export import ExportError, export_motion
    from .motion import Motion
    from .robot_file import RobotFileError

    try:
        robot = load_robot_arg(args.robot)
    except RobotFileError as exc:
        for p in exc.problems:
            print(f"{args.robot}: {p.path}: {p.message}")
        return 2
    except ValueError as exc:
        print(f"--robot: {exc}")
        return 2
    try:
        if str(args.motion).lower().endswith(".npz"):
            motion = Motion.from_npz(args.motion)
        else:
            motion = Motion.from_json(args.motion)
    except FileNotFoundError:
        print(f"{args.motion}: no such file")
        return 2
    except (OSError, ValueError, KeyError, TypeError) as exc:  # json.JSONDecodeError is a ValueError
        what = f"invalid JSON at line {exc.lineno}: {exc.msg}" if isinstance(exc, json.JSONDecodeError) else str(exc)
        print(f"{args.motion}: not a kipup motion file: {what}")
        return 2
    try:
        meta = export_motion(motion, robot, args.output, args.rate, fmt=args.format,
                             allow_violations=args.allow_violations, bandwidth_hz=args.bandwidth,
                             damping_ratio=args.damping)
    except ExportError as exc:
        print(f"{args.output}: {exc}")
        return 2
    print(f"wrote {args.output}: {meta['n_samples']} samples at {meta['rate_hz']:g} Hz of "
          f"{motion.trick_name or 'motion'}"
          f" on robot {robot.name} (sha256 {meta['robot_sha256'][:12]}...)")
    print("suggested PD gains (" + meta["gains"]["rule"].split(", with")[0] + f", wn = 2 pi {args.bandwidth:g} Hz, "
          f"zeta = {args.damping:g}):")
    for name, g in meta["gains"]["joints"].items():
        print(f"  {name:<14} kp {g['kp']:10.4g} N m/rad   kd {g['kd']:9.4g} N m s/rad")
    for w in meta["warnings"]:
        print(f"WARNING: {w}")
    print(f"Caution: {EXPORT_CAUTION}")
    return 0


def add_parsers(sub, fmt, epilog: str) -> None:
    imp = sub.add_parser(
        "import-urdf", formatter_class=fmt, epilog=epilog,
        help="import a URDF file as a kipup robot file",
        description="Import FILE.urdf as a kipup robot file: pitch joints (axis +-y) become joints, fixed and "
                    "roll/yaw joints are merged, mirrored _l/_r limbs are lumped. Prints every approximation "
                    "made and writes ROBOT.yaml atomically. Exit 0 on success, 2 on a problem (naming the "
                    "element and its line).")
    imp.add_argument("urdf", metavar="FILE.urdf")
    imp.add_argument("-o", "--output", required=True, metavar="ROBOT.yaml")
    imp.add_argument("--base", default=None, metavar="LINK", help="the floating base link (default: the root)")
    imp.add_argument("--plane", default="xz", choices=["xz", "yz"],
                     help="the URDF plane that is the sagittal plane (default xz: x forward, z up)")
    imp.add_argument("--no-pairs", action="store_true", help="do not lump mirrored left/right limbs")
    imp.add_argument("--point", action="append", type=_parse_point, metavar="NAME,LINK,X,Z[,FRICTION]",
                     help="add a named point on a URDF link (m, link frame); repeatable")
    imp.set_defaults(func=cmd_import_urdf)

    exp = sub.add_parser(
        "export", formatter_class=fmt, epilog=epilog + "\n" + EXPORT_CAUTION,
        help="resample a motion for a controller (CSV, NPZ or JSON)",
        description="Resample MOTION.json (written by kipup solve) at --rate Hz with the scheme's exact dense "
                    "evaluation and write time, q, qd, tau, contact forces and flags with metadata (units, joint "
                    "order, robot hash, phases, suggested PD gains, the safety caution). Refuses, writing nothing, "
                    "if a sample exceeds the robot's limits (unless --allow-violations). Exit 0 on success, 2 on "
                    "a problem.")
    exp.add_argument("motion", metavar="MOTION.json")
    exp.add_argument("--robot", required=True, metavar="ROBOT", help="robot file (.yaml) or bundled robot name")
    exp.add_argument("--rate", type=float, required=True, metavar="HZ", help="sample rate (Hz)")
    exp.add_argument("-o", "--output", required=True, metavar="OUT")
    exp.add_argument("--format", choices=EXPORT_FORMATS, default=None, help="default: from the suffix of OUT")
    exp.add_argument("--allow-violations", action="store_true",
                     help="write even if a sample exceeds a limit (a warning goes into the metadata)")
    exp.add_argument("--bandwidth", type=float, default=GAIN_BANDWIDTH_HZ, metavar="HZ",
                     help=f"PD gain rule: closed-loop natural frequency (default {GAIN_BANDWIDTH_HZ:g} Hz)")
    exp.add_argument("--damping", type=float, default=GAIN_DAMPING_RATIO, metavar="ZETA",
                     help=f"PD gain rule: damping ratio (default {GAIN_DAMPING_RATIO:g})")
    exp.set_defaults(func=cmd_export)
