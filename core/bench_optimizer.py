"""``kipup bench optimizer``: cold build and solve, and warm re-solves after small edits, per template.

Measured in one run on this machine: for each template the NLP build time, the cold solve
(time and IPOPT iterations), and warm re-solves after nudging one keyframe by 0.1 rad and after
doubling the effort weight, each the median of ``--repeats`` runs, with the warm/cold ratio.
Targets (issue text): backflip cold build + solve <= 3 s, warm re-solve <= 0.5 s.

Each template is measured twice: with the per-knot derivative functions on CasADi's SX virtual
machine (``sx``: a machine without a C compiler, or the first build of a structure) and with
them compiled (``c``: loaded from the compile cache, filled once before the timing; the compile
time is printed beside it). See :mod:`kipup.core.jit`.
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
    p.add_argument("--no-baseline", action="store_true",
                   help="skip the same-run baseline (the previous method on the backflip)")
    p.add_argument("--derivatives", choices=("sx", "c", "both"), default="both",
                   help="per-knot derivative functions: SX, compiled, or both rows (default)")


def _nudged(trick):
    edited = trick.copy()
    for kf in edited.keyframes:
        joints = [n for n in kf.pose if not n.startswith("base_")]
        if joints and kf.name != "start":
            kf.pose[joints[0]] += 0.1
            return edited, f"{kf.name}.{joints[0]} + 0.1 rad"
    return edited, "no keyframe"


BASELINE_OPTIONS = {"ipopt.mu_strategy": "monotone", "ipopt.mu_init": 0.1, "ipopt.linear_solver": "mumps"}


def _baseline(template: tuple) -> tuple[float, float, int]:
    """Build and cold-solve ``template`` the way kipup did before the structured derivatives and
    the present IPOPT options (median of 1): a same-run reference against machine speed."""
    import casadi as ca
    import numpy as np

    from .derivatives import whole_graph_derivatives
    from .guess import initial_guess
    from .transcription import TrickProblem

    trick, robot = template
    t0 = time.perf_counter()
    prob = TrickProblem(trick, robot)
    opts = dict(BASELINE_OPTIONS, **{"ipopt.print_level": 0, "ipopt.sb": "yes", "print_time": False,
                                     "ipopt.max_iter": int(trick.solver.max_iter), "error_on_fail": False,
                                     "ipopt.tol": float(trick.solver.tol)})
    opts.update(whole_graph_derivatives(prob))
    solver = ca.nlpsol("baseline", "ipopt", prob.nlp, opts)
    build = time.perf_counter() - t0
    lbx, ubx, lbg, ubg = prob.bounds(trick)
    x0 = np.clip(initial_guess(prob, trick), lbx, ubx)
    t0 = time.perf_counter()
    solver(x0=x0, p=prob.parameters(trick), lbx=lbx, ubx=ubx, lbg=lbg, ubg=ubg)
    return build, time.perf_counter() - t0, int(solver.stats().get("iter_count", -1))


def run(args: argparse.Namespace) -> int:
    from .jit import CompileCache
    from .solver import TrickSolver
    from .templates import load_template, template_names

    names = ["backflip"] if args.quick else (args.templates or template_names())
    reps = 1 if args.quick else max(1, args.repeats)
    variants = {"sx": ["sx"], "c": ["c"], "both": ["sx", "c"]}[getattr(args, "derivatives", "both")]
    if "c" in variants and CompileCache().compiler is None:
        print("no C compiler found: compiled rows skipped")
        variants = [v for v in variants if v != "c"] or ["sx"]
    rows, notes = [], []
    for name, variant in ((n, v) for n in names for v in variants):
        trick, robot = load_template(name)
        mode = "never" if variant == "sx" else "auto"
        if variant == "c":  # fill the compile cache outside the timing
            t0 = time.perf_counter()
            probe = TrickSolver(trick, robot, compile="wait")
            probe._shared_derivatives()
            state = "compiled" if probe.compiled.compiled_now else "found in the cache"
            notes.append(f"{name}: per-knot derivatives {state} in {time.perf_counter() - t0:.1f} s "
                         f"({probe.compiled.directory})" + (f"; {probe.compiled.error}" if probe.compiled.error else ""))
        builds, colds, iters, warm_k, warm_w, iters_k, iters_w, status = [], [], [], [], [], [], [], []
        for _ in range(reps):
            t0 = time.perf_counter()
            solver = TrickSolver(trick, robot, compile=mode)
            solver.prepare(trick, warm=False)
            builds.append(time.perf_counter() - t0)
            if variant == "c" and not solver.compiled.loaded:
                status.append("not-compiled")
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
        rows.append((f"{name} {variant}", med(builds), med(colds), med(iters), med(warm_k), med(iters_k),
                     med(warm_w), med(iters_w), ",".join(sorted(set(status)))))
    head = ("template derivs", "build s", "cold s", "it", "warm(kf) s", "it", "warm(w) s", "it",
            "warm/cold", "statuses")
    print(f"{head[0]:>20}  " + "  ".join(f"{h:>10}" for h in head[1:]))
    for r in rows:
        ratio = max(r[4], r[6]) / r[2] if r[2] > 0 else float("nan")
        print(f"{r[0]:>20}  {r[1]:10.2f}  {r[2]:10.2f}  {r[3]:10.0f}  {r[4]:10.3f}  {r[5]:10.0f}  "
              f"{r[6]:10.3f}  {r[7]:10.0f}  {ratio:10.3f}  {r[8]:>10}")
    for r in rows:
        if r[0].startswith("backflip "):
            cold = r[1] + r[2]
            warm = max(r[4], r[6])
            print(f"{r[0]}: cold build+solve {cold:.2f} s: {cold / TARGET_COLD:.2f} x the {TARGET_COLD} s target; "
                  f"warm re-solve {warm:.3f} s: {warm / TARGET_WARM:.2f} x the {TARGET_WARM} s target")
    if "backflip" in names and not getattr(args, "no_baseline", False):
        base = _baseline(load_template("backflip"))
        print(f"baseline, same run (the previous method: whole-graph derivatives expanded to SX, "
              f"mu 0.1 with the inertia test, automatic MUMPS ordering): backflip build {base[0]:.2f} s "
              f"+ cold {base[1]:.2f} s ({base[2]} iterations) = {base[0] + base[1]:.2f} s")
        for r in rows:
            if r[0].startswith("backflip "):
                print(f"  {r[0]} against the baseline: build {r[1] / base[0]:.2f}x, cold solve "
                      f"{r[2] / base[1]:.2f}x, build + solve {(r[1] + r[2]) / (base[0] + base[1]):.2f}x")
    for note in notes:
        print(note)
    print(f"(median of {reps}; derivs: per-knot derivative functions on the SX VM or compiled; warm(kf): one keyframe nudged by 0.1 rad; warm(w): effort weight doubled)")
    return 0
