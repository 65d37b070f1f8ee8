"""Benchmarks: ``kipup bench <subcommand>`` (also ``python -m kipup.core.bench <subcommand>``).

``kipup bench dynamics`` times kipup's compiled RNEA and ABA (the cached CasADi Functions
of :func:`kipup.core.compiled.functions_for`) against Pinocchio's ``pin.rnea`` / ``pin.aba``
on the same model, in the same run, for the bundled robots. Each row is the median over
repeats of the time per call (or per state), and the ratio kipup / Pinocchio:

* ``casadi call``: the SX Function called from Python with NumPy inputs (what kipup code
  pays for one evaluation, argument conversion included);
* ``casadi jit call``: the same, JIT-compiled with the system C compiler (only when one is
  found; compile time is printed separately);
* ``casadi map/N``: ``Function.map(N)`` over N states in one call, divided by N: the cost of
  the evaluation itself, with the Python call overhead spread over N states (and
  ``casadi jit map/N`` for the JIT variant);
* ``pinocchio``: ``pin.rnea`` / ``pin.aba`` called from Python with NumPy inputs.

Pinocchio is a test-only dependency; without it the kipup times are printed alone.
Timings are only comparable within one run on one machine.

Subcommands live in :data:`SUBCOMMANDS` (name -> (help, add_arguments, run)); a new one is
one entry there.
"""
from __future__ import annotations

import argparse
import math
import platform
import statistics
import sys
import time
from typing import Any, Callable

import numpy as np

from . import bench_optimizer as _bench_optimizer

DEFAULT_ROBOTS = ("humanoid", "quadruped")


# ----- timing -----------------------------------------------------------------------------
def time_per_call(fn: Callable[[], Any], repeats: int, target_s: float, divide: int = 1) -> float:
    """Median over ``repeats`` of the time (s) of one ``fn()`` divided by ``divide``.

    Each repeat calls ``fn`` ``number`` times in a loop, ``number`` chosen once so a repeat
    lasts about ``target_s``.
    """
    fn()  # warm up (first-call set-up, lazy compilation)
    t0 = time.perf_counter()
    fn()
    one = max(time.perf_counter() - t0, 1e-7)
    number = max(1, int(target_s / one))
    samples = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        for _ in range(number):
            fn()
        samples.append((time.perf_counter() - t0) / number)
    return statistics.median(samples) / divide


# ----- the Pinocchio model of a kipup robot -------------------------------------------------
def pinocchio_model(robot, pin) -> tuple[Any, np.ndarray]:
    """A Pinocchio model of ``robot`` and ``perm``: Pinocchio coordinate i is kipup's ``perm[i]``.

    Base: prismatic x, prismatic z (massless), revolute y carrying the base link; one revolute
    y joint per kipup joint at (origin_x, 0, origin_z); inertia (mass, (cx, 0, cz),
    diag(Ixx, I, Izz)) with arbitrary positive Ixx, Izz. Joints are added depth-first, as
    Pinocchio requires (tests/pinocchio_ref.py builds the same model for the tests).
    """
    model = pin.Model()
    model.gravity = pin.Motion(np.array([0.0, 0.0, -robot.gravity, 0.0, 0.0, 0.0]))
    eye = pin.SE3.Identity()

    def body(jid, link):
        inertia = pin.Inertia(link.mass, np.array([link.com[0], 0.0, link.com[1]]),
                              np.diag([0.37, link.inertia, 0.21]))
        model.appendBodyToJoint(jid, inertia, eye)

    jid = model.addJoint(0, pin.JointModelPX(), eye, "base_x")
    jid = model.addJoint(jid, pin.JointModelPZ(), eye, "base_z")
    jid = model.addJoint(jid, pin.JointModelRY(), eye, "base_pitch")
    body(jid, robot.links[0])
    joint_of = {robot.links[0].name: jid}
    children: dict[str, list[int]] = {link.name: [] for link in robot.links}
    for k, joint in enumerate(robot.joints):
        children[joint.parent].append(k)
    order: list[int] = []
    stack = list(reversed(children[robot.links[0].name]))
    while stack:
        k = stack.pop()
        order.append(k)
        stack.extend(reversed(children[robot.joints[k].child]))
    for k in order:
        joint = robot.joints[k]
        placement = pin.SE3(np.eye(3), np.array([joint.origin[0], 0.0, joint.origin[1]]))
        jid = model.addJoint(joint_of[joint.parent], pin.JointModelRY(), placement, joint.name)
        joint_of[joint.child] = jid
        body(jid, robot.links[k + 1])
    return model, np.array([0, 1, 2] + [3 + k for k in order])


# ----- kipup bench dynamics ---------------------------------------------------------------------
def _add_dynamics_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("--quick", action="store_true",
                   help="a fast smoke run: few repeats, N=100, no JIT unless --jit")
    p.add_argument("--robots", nargs="+", default=list(DEFAULT_ROBOTS), metavar="NAME",
                   help="bundled robot names (default: %(default)s)")
    p.add_argument("--repeats", type=int, default=None, help="repeats per timing (default 9, quick 3)")
    p.add_argument("--n-map", type=int, default=None, help="states per map call (default 1000, quick 100)")
    jit = p.add_mutually_exclusive_group()
    jit.add_argument("--jit", dest="jit", action="store_true", default=None,
                     help="also time the JIT-compiled Functions (default unless --quick)")
    jit.add_argument("--no-jit", dest="jit", action="store_false")


def _fmt_us(seconds: float | None) -> str:
    return "-" if seconds is None else f"{seconds * 1e6:10.3f}"


def _run_dynamics(args: argparse.Namespace) -> int:
    import casadi as ca

    from .compiled import functions_for, has_c_compiler
    from .robot_file import load_bundled

    repeats = args.repeats or (3 if args.quick else 9)
    n_map = args.n_map or (100 if args.quick else 1000)
    target = 0.004 if args.quick else 0.04
    want_jit = (not args.quick) if args.jit is None else args.jit
    jit = want_jit and has_c_compiler()
    try:
        import pinocchio as pin
    except ImportError:
        pin = None

    print("kipup bench dynamics")
    print(f"  python {platform.python_version()}, numpy {np.__version__}, casadi {ca.__version__}, "
          f"pinocchio {pin.__version__ if pin else 'not installed'}")
    print(f"  median of {repeats} repeats; times in microseconds per call (map rows: per state, N={n_map})")
    if pin is None:
        print("  pinocchio is not installed (a test-only dependency: pip install pin): kipup times only, no ratios")
    if want_jit and not jit:
        print("  no C compiler found: JIT rows skipped")
    elif not jit:
        print("  JIT rows skipped (--quick; pass --jit to include them)")

    rows: list[tuple[str, str, str, float, float | None]] = []  # robot, algo, variant, t, ratio
    notes: list[str] = []
    rng = np.random.default_rng(0)
    for name in args.robots:
        robot = load_bundled(name)
        n = robot.nv
        q = np.concatenate([rng.uniform(-0.5, 0.5, 2), rng.uniform(-math.pi, math.pi, n - 2)])
        qd = rng.uniform(-3.0, 3.0, n)
        qdd = rng.uniform(-10.0, 10.0, n)
        tau = np.concatenate([np.zeros(3), rng.uniform(-20.0, 20.0, n - 3)])
        Q, QD = np.tile(q[:, None], n_map), np.tile(qd[:, None], n_map)
        QDD, TAU = np.tile(qdd[:, None], n_map), np.tile(tau[:, None], n_map)
        label = f"{name} (nv={n})"

        fns = functions_for(robot)
        variants: list[tuple[str, Any, Any]] = [("casadi call", fns.rnea, fns.aba)]
        if jit:
            t0 = time.perf_counter()
            fj = functions_for(robot, jit=True)
            fj.rnea, fj.aba  # noqa: B018  (compiles both)
            notes.append(f"{name}: JIT compile of rnea + aba took {time.perf_counter() - t0:.2f} s")
            variants.append(("casadi jit call", fj.rnea, fj.aba))

        ref: dict[str, float] = {}
        if pin is not None:
            model, perm = pinocchio_model(robot, pin)
            data = model.createData()
            qp, qdp, qddp, taup = q[perm], qd[perm], qdd[perm], tau[perm]
            ref["rnea"] = time_per_call(lambda: pin.rnea(model, data, qp, qdp, qddp), repeats, target)
            ref["aba"] = time_per_call(lambda: pin.aba(model, data, qp, qdp, taup), repeats, target)
            # the two compute the same thing on this model (vectors back in kipup order)
            err_r = np.max(np.abs(fns.rnea(q, qd, qdd).full().ravel()[perm] - pin.rnea(model, data, qp, qdp, qddp)))
            err_a = np.max(np.abs(fns.aba(q, qd, tau).full().ravel()[perm] - pin.aba(model, data, qp, qdp, taup)))
            notes.append(f"{name}: kipup vs pinocchio at the benchmark state: "
                         f"max |diff| rnea {err_r:.1e}, aba {err_a:.1e}")

        for algo in ("rnea", "aba"):
            args3 = (q, qd, qdd) if algo == "rnea" else (q, qd, tau)
            batch = (Q, QD, QDD) if algo == "rnea" else (Q, QD, TAU)
            for variant, f_rnea, f_aba in variants:
                f = f_rnea if algo == "rnea" else f_aba
                t_call = time_per_call(lambda: f(*args3), repeats, target)
                fmap = f.map(n_map)
                t_map = time_per_call(lambda: fmap(*batch), repeats, target, divide=n_map)
                for v, t in ((variant, t_call), (variant.replace("call", "map/N"), t_map)):
                    rows.append((label, algo, v, t, t / ref[algo] if algo in ref else None))
            if algo in ref:
                rows.append((label, algo, "pinocchio", ref[algo], 1.0))

    print()
    header = f"{'robot':<18} {'algo':<5} {'implementation':<18} {'us/call':>10}  {'kipup/pinocchio':>15}"
    print(header)
    print("-" * len(header))
    for label, algo, variant, t, ratio in rows:
        r = "-" if ratio is None else f"{ratio:15.2f}"
        print(f"{label:<18} {algo:<5} {variant:<18} {_fmt_us(t)}  {r:>15}")
    if pin is not None:
        print()
        print("kipup / pinocchio per algorithm (best kipup variant per call, and per state):")
        for name in args.robots:
            label = next(row[0] for row in rows if row[0].startswith(f"{name} "))
            for algo in ("rnea", "aba"):
                mine = [row for row in rows if row[0] == label and row[1] == algo and row[2] != "pinocchio"]
                call = min((row for row in mine if "call" in row[2]), key=lambda row: row[3])
                per_state = min((row for row in mine if "map" in row[2]), key=lambda row: row[3])
                print(f"ratio {name:<10} {algo:<5} call {call[4]:8.2f} ({call[2]})   "
                      f"per-state {per_state[4]:8.2f} ({per_state[2]})")
        print("  (pinocchio rows include its own Python call overhead; map/N rows spread kipup's over N states)")
    if notes:
        print()
        for note in notes:
            print(f"  {note}")
    return 0


#: name -> (help, add_arguments(parser), run(args) -> exit status)
SUBCOMMANDS: dict[str, tuple[str, Callable[[argparse.ArgumentParser], None], Callable[[argparse.Namespace], int]]] = {
    "dynamics": ("compiled RNEA / ABA against Pinocchio", _add_dynamics_arguments, _run_dynamics),
    "optimizer": ("cold and warm trick solves per template", _bench_optimizer.add_arguments,
                  _bench_optimizer.run),
}


def build_parser() -> argparse.ArgumentParser:
    caution = ("Caution: simulate every trajectory first, and run it on hardware only under "
               "your lab's safety rules and local regulations.")
    parser = argparse.ArgumentParser(prog="kipup bench", description="kipup benchmarks", epilog=caution,
                                     formatter_class=argparse.RawDescriptionHelpFormatter)
    sub = parser.add_subparsers(dest="command", metavar="SUBCOMMAND", required=True)
    for name, (help_text, add_arguments, _) in SUBCOMMANDS.items():
        p = sub.add_parser(name, help=help_text, description=help_text)
        add_arguments(p)
    return parser


def main(argv: list[str] | None = None) -> int:
    """Run ``kipup bench <subcommand> ...``; returns the exit status."""
    args = build_parser().parse_args(sys.argv[1:] if argv is None else argv)
    return SUBCOMMANDS[args.command][2](args)


if __name__ == "__main__":
    sys.exit(main())
