"""``kipup bench optimizer``: cold build and solve, and warm re-solves after small edits, per template.

Measured in one run on this machine: for each template the NLP build time, the cold solve
(time and IPOPT iterations), and warm re-solves after nudging one keyframe by 0.1 rad and after
doubling the effort weight, each the median of ``--repeats`` runs, with the warm/cold ratio.
Targets (issue text): backflip cold build + solve <= 3 s, warm re-solve <= 0.5 s.
"""
from __future__ import annotations

import argparse
import statistics
import time

TARGET_COLD = 3.0
TARGET_WARM = 0.5


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("--templates", nargs="+", default=None, metavar="NAME", help="default: all")
    p.add_argument("--repeats", type=int, default=1, help="runs per figure, median reported (issue: 5)")
    p.add_argument("--quick", action="store_true", help="backflip only, one repeat")


def _nudged(trick):
    edited = trick.copy()
    for kf in edited.keyframes:
        joints = [n for n in kf.pose if not n.startswith("base_")]
        if joints and kf.name != "start":
            kf.pose[joints[0]] += 0.1
            return edited, f"{kf.name}.{joints[0]} + 0.1 rad"
    return edited, "no keyframe"


def run(args: argparse.Namespace) -> int:
    from .solver import TrickSolver
    from .templates import load_template, template_names

    names = ["backflip"] if args.quick else (args.templates or template_names())
    reps = 1 if args.quick else max(1, args.repeats)
    rows = []
    for name in names:
        trick, robot = load_template(name)
        builds, colds, iters, warm_k, warm_w, iters_k, iters_w, status = [], [], [], [], [], [], [], []
        for _ in range(reps):
            t0 = time.perf_counter()
            solver = TrickSolver(trick, robot)
            solver.prepare(trick, warm=False)
            builds.append(time.perf_counter() - t0)
            out = solver.solve(trick)
            colds.append(out.solve_time)
            iters.append(out.iterations)
            status.append(out.status)
            solver.prepare(trick, warm=True)  # build the warm instance outside the timing
            edited, what = _nudged(trick)
            for case, times, its in ((edited, warm_k, iters_k), (None, warm_w, iters_w)):
                if case is None:
                    case = trick.copy()
                    case.costs.effort *= 2.0
                solver.last = out  # every warm solve starts from the same cold solution
                w = solver.solve(case, warm=True)
                times.append(w.solve_time)
                its.append(w.iterations)
                status.append(w.status)
        med = statistics.median
        rows.append((name, med(builds), med(colds), med(iters), med(warm_k), med(iters_k),
                     med(warm_w), med(iters_w), ",".join(sorted(set(status)))))
    head = ("template", "build s", "cold s", "it", "warm(kf) s", "it", "warm(w) s", "it",
            "warm/cold", "statuses")
    print("  ".join(f"{h:>10}" for h in head))
    for r in rows:
        ratio = max(r[4], r[6]) / r[2] if r[2] > 0 else float("nan")
        print(f"{r[0]:>10}  {r[1]:10.2f}  {r[2]:10.2f}  {r[3]:10.0f}  {r[4]:10.3f}  {r[5]:10.0f}  "
              f"{r[6]:10.3f}  {r[7]:10.0f}  {ratio:10.3f}  {r[8]:>10}")
    for r in rows:
        if r[0] == "backflip":
            cold = r[1] + r[2]
            warm = max(r[4], r[6])
            print(f"backflip cold build+solve {cold:.2f} s: {cold / TARGET_COLD:.2f} x the {TARGET_COLD} s target; "
                  f"warm re-solve {warm:.3f} s: {warm / TARGET_WARM:.2f} x the {TARGET_WARM} s target")
    print(f"(median of {reps}; warm(kf): one keyframe nudged by 0.1 rad; warm(w): effort weight doubled)")
    return 0
