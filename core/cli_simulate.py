"""``kipup simulate`` and ``kipup sweep``: closed-loop verification of a motion on the command line."""
from __future__ import annotations

import argparse
import math

CAUTION = ("Caution: a simulation is a model, not the robot. Passing here is necessary, not sufficient: on "
           "hardware start with reduced torque limits and PD gains, a harness or gantry, a clear area and an "
           "emergency stop, and follow your lab's safety rules and local regulations.")


def _floats(text: str) -> list[float]:
    try:
        values = [float(v) for v in text.split(",") if v.strip()]
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected numbers separated by commas, got {text!r}") from None
    if not values:
        raise argparse.ArgumentTypeError("expected at least one number")
    return values


def _load(args: argparse.Namespace):
    from .motion import Motion
    from .cli_solve import load_trick_or_report

    loaded = load_trick_or_report(args.trick)
    if loaded is None:
        return None
    trick, robot = loaded
    try:
        motion = Motion.from_json(args.motion)
    except (OSError, ValueError) as exc:
        print(f"{args.motion}: {exc}")
        return None
    return trick, robot, motion


def _sim_kwargs(args: argparse.Namespace, robot, motion) -> dict:
    kw: dict = {"rate_hz": args.rate, "control_rate_hz": args.control_rate, "delay_s": args.delay,
                "duration_after": args.after, "lqr": True if args.lqr else None}
    if args.from_takeoff:
        flights = [p for p in motion.phases if not p.contacts]
        if not flights:
            raise ValueError("--from-takeoff: the motion has no flight phase")
        kw["start_time"] = flights[0].start
    if args.kp is not None or args.kd is not None:
        from .tracking import default_gains

        base = default_gains(robot, motion.q[::4], args.control_rate)
        kw["gains"] = {"kp": args.kp if args.kp is not None else list(base.kp),
                       "kd": args.kd if args.kd is not None else list(base.kd)}
    return kw


def _table(rows: list[list[str]]) -> str:
    widths = [max(len(r[c]) for r in rows) for c in range(len(rows[0]))]
    return "\n".join("  ".join(cell.ljust(w) for cell, w in zip(r, widths)).rstrip() for r in rows)


def cmd_simulate(args: argparse.Namespace) -> int:
    from .tracking import simulate

    loaded = _load(args)
    if loaded is None:
        return 2
    trick, robot, motion = loaded
    try:
        res = simulate(motion, robot, trick.terrain, trick_name=trick.name, **_sim_kwargs(args, robot, motion))
    except ValueError as exc:
        print(f"kipup simulate: {exc}")
        return 2
    print(f"{trick.name} on {robot.name}: closed-loop simulation, {res.t.size} steps at {args.rate:g} Hz")
    print(_table([["verdict", ""]] + res.verdict.as_rows()))
    print()
    print(_table(res.error_rows()))
    if args.output:
        res.to_json(args.output)
        print(f"wrote {args.output}")
    print(CAUTION)
    return 0 if res.verdict.success else 1


def cmd_sweep(args: argparse.Namespace) -> int:
    from .sweep import run_sweep

    loaded = _load(args)
    if loaded is None:
        return 2
    trick, robot, motion = loaded
    try:
        kw = _sim_kwargs(args, robot, motion)
        res = run_sweep(motion, robot, trick.terrain, n=args.n, seed=args.seed, workers=args.workers, sim_kwargs=kw)
    except ValueError as exc:
        print(f"kipup sweep: {exc}")
        return 2
    print(f"{trick.name} on {robot.name}: {res.n} samples (seed {args.seed}, {args.workers} workers)")
    print(_table(res.summary_rows()))
    if args.plot:
        res.plot(args.plot)
        print(f"wrote {args.plot}")
    print(CAUTION)
    return 0 if res.n and not math.isnan(res.success_rate) else 1


def _common(p: argparse.ArgumentParser) -> None:
    p.add_argument("motion", metavar="MOTION.json", help="a kipup-motion/1 file (kipup solve writes one)")
    p.add_argument("--trick", required=True, metavar="TRICK.yaml", help="the trick file: its robot and terrain")
    p.add_argument("--kp", type=_floats, default=None, help="joint P gains, N m/rad: one value or one per joint")
    p.add_argument("--kd", type=_floats, default=None, help="joint D gains, N m s/rad: one value or one per joint")
    p.add_argument("--delay", type=float, default=0.0, help="control delay, s (default 0)")
    p.add_argument("--rate", type=float, default=1000.0, help="simulation rate, Hz (default 1000)")
    p.add_argument("--control-rate", type=float, default=500.0, help="controller rate, Hz (default 500)")
    p.add_argument("--after", type=float, default=1.0, help="balance time after the motion, s (default 1)")
    p.add_argument("--lqr", action="store_true", help="time-varying LQR in flight instead of joint PD")
    p.add_argument("--from-takeoff", action="store_true",
                   help="start at the planned takeoff state instead of the motion's start")


def add_parsers(sub, fmt, epilog: str) -> None:
    sim = sub.add_parser("simulate", formatter_class=fmt, epilog=CAUTION + "\n" + epilog,
                         help="simulate a motion in closed loop and judge the landing",
                         description="Simulate MOTION.json on the trick's terrain with rigid contacts, "
                                     "feedforward + joint PD (or TV-LQR in flight), a stance QP after "
                                     "touchdown, and print the landing verdict and tracking errors. Exit 0 "
                                     "when it lands and stands still, 1 when not, 2 on invalid input.")
    _common(sim)
    sim.add_argument("-o", "--output", default=None, metavar="SIM.json", help="write the result (kipup-sim/1)")
    sim.set_defaults(func=cmd_simulate)
    sw = sub.add_parser("sweep", formatter_class=fmt, epilog=CAUTION + "\n" + epilog,
                        help="Monte Carlo robustness of a motion under model and execution errors",
                        description="Simulate MOTION.json for N seeded samples of errors (masses, inertias, "
                                    "COMs, friction, actuator strength, timing, a push at takeoff) and print "
                                    "the success rate and error distributions. Exit 0 when it ran, 2 on "
                                    "invalid input.")
    _common(sw)
    sw.add_argument("-n", type=int, default=50, help="number of samples (default 50)")
    sw.add_argument("--seed", type=int, default=0, help="random seed (default 0)")
    sw.add_argument("--workers", type=int, default=2, help="local worker processes (default 2)")
    sw.add_argument("--plot", default=None, metavar="SWEEP.png", help="save the histograms to a PNG")
    sw.set_defaults(func=cmd_sweep)
