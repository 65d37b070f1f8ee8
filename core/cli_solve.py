"""``kipup solve`` and ``kipup templates``: the optimizer on the command line."""
from __future__ import annotations

import argparse
import os
import tempfile
from pathlib import Path

from .motion import Motion

CAUTION = ("Caution: an optimized motion is open-loop and made on a simplified model. Simulate it in "
           "closed loop first; on hardware start with reduced torque limits and PD gains, a harness or "
           "gantry, a clear area and an emergency stop, and follow your lab's safety rules and local "
           "regulations.")


def write_outputs(motion: Motion, outdir: str | Path) -> list[Path]:
    """Write OUTDIR/motion.json and OUTDIR/motion.npz; old files stay until both new ones are complete."""
    outdir = Path(outdir)
    outdir.mkdir(parents=True, exist_ok=True)
    staged = []
    with tempfile.TemporaryDirectory(dir=outdir, prefix=".kipup-") as tmp:
        js, nz = Path(tmp) / "motion.json", Path(tmp) / "motion.npz"
        motion.to_json(js)  # refuses NaN before anything is replaced
        motion.to_npz(nz)
        for src in (js, nz):
            dst = outdir / src.name
            os.replace(src, dst)
            staged.append(dst)
    return staged


def load_trick_or_report(path: str):
    """(trick, robot) from a trick file, or None after printing every problem (``FILE: path: message``)."""
    from .trick_file import TrickFileError, load_trick

    try:
        return load_trick(path)
    except TrickFileError as exc:
        for p in exc.problems:
            print(f"{path}: {p.path}: {p.message}")
    except OSError as exc:
        print(f"{path}: cannot read: {exc}")
    return None


def cmd_solve(args: argparse.Namespace) -> int:
    from tqdm import tqdm

    from .optimize import optimize

    loaded = load_trick_or_report(args.trick)
    if loaded is None:
        return 2
    trick, robot = loaded
    if args.max_iter:
        trick.solver.max_iter = args.max_iter
    bar = tqdm(total=trick.solver.max_iter, desc=f"solving {trick.name}", unit="it",
               disable=args.quiet, leave=False)

    def progress(p) -> None:
        bar.update(1)
        bar.set_postfix(obj=f"{p.objective:.4g}", infeas=f"{p.infeasibility:.1e}", refresh=False)

    try:
        motion, solver = optimize(trick, robot, on_progress=progress, time_limit=args.time_limit)
    except ValueError as exc:
        bar.close()
        print(f"{args.trick}: {exc}")
        return 2
    bar.close()
    m = motion.metrics(robot)
    rows = [("status", motion.status), ("iterations", str(motion.iterations)),
            ("build time", f"{solver.build_time:.2f} s"), ("solve time", f"{motion.solve_time:.2f} s"),
            ("objective", f"{motion.objective:.6g}"), ("duration", f"{motion.t[-1] - motion.t[0]:.3f} s"),
            ("flight time", f"{m.flight_time:.3f} s"), ("total rotation", f"{m.total_rotation:.4f} rad"),
            ("apex COM height", f"{m.apex_com_height:.3f} m")]
    for j in m.joints:
        rows.append((f"peak torque {j.name}", f"{j.peak_torque:.1f} / {j.torque_limit:.1f} N m"))
    width = max(len(k) for k, _ in rows)
    for k, v in rows:
        print(f"{k:<{width}}  {v}")
    if not motion.report and motion.status in ("solved", "acceptable"):
        written = write_outputs(motion, args.output)
        print("wrote " + ", ".join(str(p) for p in written))
        print(CAUTION)
        return 0
    print(f"no motion written: the solve ended with status {motion.status!r}")
    for v in motion.report[:20]:
        print("  " + v.text())
    return 1


def cmd_templates(args: argparse.Namespace) -> int:
    from .templates import load_template, template_names, write_template

    if args.name is None:
        for name in template_names():
            trick, robot = load_template(name)
            first = trick.description.split(". ")[0] if trick.description else ""
            print(f"{name:<14} {robot.name:<10} {first}")
        return 0
    try:
        if args.output is None:
            print(f"kipup templates {args.name}: give -o FILE to write it")
            return 2
        path = write_template(args.name, args.output)
    except KeyError as exc:
        print(str(exc).strip("'\""))
        return 2
    print(f"wrote {path}")
    return 0


def add_parsers(sub, fmt, epilog: str) -> None:
    solve = sub.add_parser("solve", formatter_class=fmt, epilog=epilog + "\n" + CAUTION,
                           help="optimize a trick file into a motion",
                           description="Optimize TRICK.yaml with IPOPT and write OUTDIR/motion.json and "
                                       "OUTDIR/motion.npz. Exit 0 when solved, 1 when the solve failed or "
                                       "is infeasible (with the constraint report), 2 on invalid input.")
    solve.add_argument("trick", metavar="TRICK.yaml")
    solve.add_argument("-o", "--output", default="out", metavar="OUTDIR")
    solve.add_argument("--max-iter", type=int, default=None)
    solve.add_argument("--time-limit", type=float, default=None, help="seconds")
    solve.add_argument("-q", "--quiet", action="store_true", help="no progress bar")
    solve.set_defaults(func=cmd_solve)
    tpl = sub.add_parser("templates", formatter_class=fmt, epilog=epilog,
                         help="list the bundled trick templates or write one",
                         description="Without NAME: list the templates. With NAME -o FILE: write it.")
    tpl.add_argument("name", nargs="?", metavar="NAME")
    tpl.add_argument("-o", "--output", metavar="FILE")
    tpl.set_defaults(func=cmd_templates)
