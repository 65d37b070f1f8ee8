"""Solving a trick with IPOPT: cold and warm solves, progress events, cancel and time limit.

A :class:`TrickSolver` keeps one built :class:`~kipup.core.transcription.TrickProblem`
and two IPOPT instances over it: a cold one (from the keyframe guess) and a warm one
(from the previous solution, primal and dual), built on first use. ``solve(trick)`` with a
trick of the same structure re-solves without a rebuild; a different structure rebuilds.

CasADi releases the GIL while IPOPT runs (measured: see DEVELOPERS.md), so a solve can run
in a thread and keep a notebook kernel responsive; the progress callback takes the GIL for
as long as it runs, so keep it short.
"""
from __future__ import annotations

import threading
import time
from dataclasses import dataclass
from typing import Any, Callable

import casadi as ca
import numpy as np

from .derivatives import structured_derivatives
from .guess import initial_guess
from .jit import CompileCache
from .robot import Robot
from .transcription import TrickProblem, structure_key
from .trick import Trick

# MUMPS_NOTE: the approximate minimum fill ordering (AMF, MUMPS ICNTL(7) = 2) halves the
# symbolic analysis that every solve starts with (backflip: 48 ms against 97 ms with the
# automatic choice) and factorizes faster: measured over the five templates in one run, warm
# re-solves 0.27-0.42 s against 0.32-0.60 s, cold 1.2-1.8 s against 1.5-2.6 s, same iterations.
# Cold solves: monotone barrier from mu = 0.01, and the inertia-free curvature test
# (neg_curv_test_tol > 0): instead of refactorizing the KKT matrix until its inertia is right,
# IPOPT checks the curvature along the step it got. Measured over the five templates (cold, from
# the keyframe guess, same optima): 236 iterations and 7.2 s against 254 and 10.1 s with mu = 0.1
# and the inertia test; the backflip's 114 factorizations for 73 iterations had 40 for inertia.
COLD_OPTIONS = {
    "ipopt.mu_strategy": "monotone",
    "ipopt.mu_init": 0.01,
    "ipopt.neg_curv_test_tol": 1e-8,
    "ipopt.linear_solver": "mumps",
    "ipopt.mumps_pivot_order": 2,  # AMF; see MUMPS_NOTE
}
# Warm solves start from the previous primal-dual solution. Measured on the bundled templates:
# IPOPT clips warm-start multipliers to warm_start_mult_init_max (default 1e6), and
# the solutions of these NLPs carried multipliers up to ~1e9 (on the rest constraints of the last
# knot, dependent until end-at-rest stopped fixing the base acceleration; now up to ~3e5), so the
# clipped start had a dual infeasibility of ~1e6 and took 100-400 iterations to re-solve an
# unchanged trick; unclipped, and with the barrier started near its final value (1e-8), the
# benchmark edits take 7-13 iterations.
WARM_OPTIONS = {
    "ipopt.mu_strategy": "monotone",
    "ipopt.mu_init": 1e-8,
    "ipopt.warm_start_init_point": "yes",
    "ipopt.warm_start_mult_init_max": 1e20,
    "ipopt.warm_start_bound_push": 1e-8,
    "ipopt.warm_start_bound_frac": 1e-8,
    "ipopt.warm_start_slack_bound_push": 1e-8,
    "ipopt.warm_start_slack_bound_frac": 1e-8,
    "ipopt.warm_start_mult_bound_push": 1e-8,
    "ipopt.linear_solver": "mumps",
    "ipopt.mumps_pivot_order": 2,
}

# A warm start needs the multipliers of a KKT point. After a solve that IPOPT did not call
# optimal (a feasible point kept after Error_In_Step_Computation etc., status 'acceptable' here;
# box_jump and reach_jump ended cold solves so before the end-at-rest fix) the next
# solve starts from its primal point only, with the cold options: measured, that reached the
# true optimum (objective 8.36 against 22.3 on box_jump, 2.33 against 12.8 on reach_jump) in
# 25-126 iterations, where the former warm options took 44-349 and stayed at 22 on box_jump.
OPTIMAL = ("Solve_Succeeded", "Solved_To_Acceptable_Level")
WARM_ITER_CAP = 150  # iterations after which a warm solve counts as stalled and restarts cold
FEASIBLE_TOL = 1e-6  # max scaled constraint violation of a point that counts as feasible
NEAR_SOLVED = ("Error_In_Step_Computation", "Restoration_Failed", "Infeasible_Problem_Detected")

STATUS = {
    "Solve_Succeeded": "solved",
    "Solved_To_Acceptable_Level": "acceptable",
    "Infeasible_Problem_Detected": "infeasible",
    "Maximum_Iterations_Exceeded": "max_iter",
    "Maximum_WallTime_Exceeded": "time_limit",
    "Maximum_CpuTime_Exceeded": "time_limit",
    "User_Requested_Stop": "cancelled",
}


@dataclass
class Progress:
    """One IPOPT iteration: objective, constraint violation (max, scaled units), elapsed s."""

    iteration: int
    objective: float
    infeasibility: float
    elapsed: float
    x: np.ndarray  # scaled decision vector; decode with TrickSolver.problem.unpack


@dataclass
class SolveOutcome:
    """Raw result of one solve: status word, scaled x, multipliers, timings (s)."""

    status: str
    ipopt_status: str
    iterations: int
    objective: float
    x: np.ndarray
    lam_x: np.ndarray
    lam_g: np.ndarray
    solve_time: float
    build_time: float
    warm: bool
    max_violation: float
    restarted: bool = False  # a warm solve that stalled was restarted with the cold settings

    @property
    def success(self) -> bool:
        return self.status in ("solved", "acceptable")


class _Iterations(ca.Callback):
    """IPOPT iteration callback forwarding to the solver's current listener."""

    def __init__(self, owner: "TrickSolver", nx: int, ng: int, npar: int) -> None:
        ca.Callback.__init__(self)
        self.owner = owner
        self.sizes = {"x": (nx, 1), "f": (1, 1), "g": (ng, 1), "lam_x": (nx, 1), "lam_g": (ng, 1),
                      "lam_p": (npar, 1)}
        self.construct("kipup_iterations", {})

    def get_n_in(self) -> int:
        return ca.nlpsol_n_out()

    def get_n_out(self) -> int:
        return 1

    def get_name_in(self, i: int) -> str:
        return ca.nlpsol_out(i)

    def get_name_out(self, i: int) -> str:
        return "ret"

    def get_sparsity_in(self, i: int) -> ca.Sparsity:
        return ca.Sparsity.dense(*self.sizes[ca.nlpsol_out(i)])

    # CasADi's copy-free interface: the inputs arrive as memoryviews over IPOPT's own vectors
    # instead of six freshly allocated DMs. Measured on the backflip (65 iterations): the DM
    # interface cost 0.1-0.45 s of a 2.1 s cold solve, about 4 ms an iteration.
    def has_eval_buffer(self) -> bool:
        return True

    def eval_buffer(self, arg: tuple, res: tuple) -> int:
        x, f, g = (np.frombuffer(arg[i], dtype=np.float64) for i in range(3))
        stop = self.owner._on_iteration(x, float(f[0]), g)
        np.frombuffer(res[0], dtype=np.float64)[0] = 1.0 if stop else 0.0
        return 0

    def eval(self, arg: list) -> list:
        x, f, g = (np.asarray(a, dtype=np.float64).ravel() for a in arg[:3])
        return [1 if self.owner._on_iteration(x, float(f[0]), g) else 0]


class TrickSolver:
    """Builds the NLP of a trick once and solves it, cold or warm, as often as asked."""

    def __init__(self, trick: Trick, robot: Robot, max_iter: int | None = None,
                 compile: str | None = None) -> None:
        """compile: "auto" (default: compiled per-knot derivatives from the cache, a background
        compile on a miss), "wait" or "never"; see :mod:`kipup.core.jit`."""
        self.robot = robot
        self.compiled = CompileCache(mode=compile)
        t0 = time.perf_counter()
        self.problem = TrickProblem(trick, robot)
        self._max_iter = max_iter
        self._solvers: dict[str, ca.Function] = {}
        self._callback = _Iterations(self, self.problem.x.n, int(self.problem.nlp["g"].numel()),
                                     self.problem.p.n)
        self._listener: Callable[[Progress], Any] | None = None
        self._cancel: threading.Event | None = None
        self._deadline = np.inf
        self._started = 0.0
        self._iter = 0
        self._stopped_for: str | None = None
        self._iter_cap: int | None = None
        self._derivatives: dict[str, ca.Function] | None = None
        self._bounds: tuple | None = None
        self.last: SolveOutcome | None = None
        self.build_time = time.perf_counter() - t0

    # --- structure --------------------------------------------------------------
    def fits(self, trick: Trick) -> bool:
        """True if ``trick`` has this solver's structure (a re-solve needs no rebuild)."""
        return structure_key(trick, self.robot) == self.problem.key

    def _solver(self, kind: str, trick: Trick) -> ca.Function:
        if kind not in self._solvers:
            opts = dict(COLD_OPTIONS if kind == "cold" else WARM_OPTIONS)
            opts.update({
                "ipopt.max_iter": int(self._max_iter or trick.solver.max_iter),
                "ipopt.tol": float(trick.solver.tol),
                "ipopt.print_level": int(trick.solver.print_level),
                "print_time": False,
                "ipopt.sb": "yes",
                "iteration_callback": self._callback,
                "error_on_fail": False,
            })
            t0 = time.perf_counter()
            opts.update(self._shared_derivatives())
            self._solvers[kind] = ca.nlpsol(f"kipup_{kind}", "ipopt", self.problem.nlp, opts)
            self.build_time += time.perf_counter() - t0
        return self._solvers[kind]

    def _shared_derivatives(self) -> dict[str, ca.Function]:
        """Gradient, constraint Jacobian and Lagrangian Hessian of the NLP, built once from its
        structure (:mod:`kipup.core.derivatives`), with compiled per-knot functions where the
        cache has them, and shared by both IPOPT instances."""
        if self._derivatives is None:
            self._derivatives = structured_derivatives(self.problem, self.compiled)
        return self._derivatives

    def prepare(self, trick: Trick, warm: bool = True) -> None:
        """Build the IPOPT instances now (cold, and warm if asked) instead of at first solve."""
        self._solver("cold", trick)
        if warm:
            self._solver("warm", trick)

    # --- solving ----------------------------------------------------------------
    def solve(self, trick: Trick, warm: bool | None = None,
              on_progress: Callable[[Progress], Any] | None = None,
              cancel: threading.Event | None = None, time_limit: float | None = None,
              x0: np.ndarray | None = None) -> SolveOutcome:
        """Solve ``trick`` (same structure as this solver).

        warm: start from the last solution (default: when there is a successful one). A warm
        solve still unconverged after ``WARM_ITER_CAP`` iterations (or failed) restarts from the
        last solution's primal point with the cold settings (``outcome.restarted``; iterations and
        times add up; the time limit covers both).
        on_progress: called after every IPOPT iteration with a :class:`Progress`.
        cancel: setting this event stops the solve at the next iteration (status 'cancelled').
        time_limit: wall-clock seconds (default ``trick.solver.time_limit``), status 'time_limit'.
        """
        if not self.fits(trick):
            raise ValueError("this trick's structure differs from the solver's: build a new TrickSolver")
        if warm is None:
            warm = self.last is not None and self.last.success
        warm = bool(warm and self.last is not None)
        limit = float(trick.solver.time_limit if time_limit is None else time_limit)
        if not (warm and self.last.ipopt_status in OPTIMAL):  # cold, or from a non-KKT point
            return self._attempt(trick, warm, on_progress, cancel, limit, x0, None)
        first = self._attempt(trick, True, on_progress, cancel, limit, None, WARM_ITER_CAP)
        if first.success or first.status in ("cancelled", "time_limit"):
            return first
        # A warm start that stalls (the edit moved the active set far) is restarted from the same
        # primal point with the cold barrier settings, which recover where the warm ones creep.
        left = limit - first.solve_time
        if left <= 0:
            return first
        again = self._attempt(trick, False, on_progress, cancel, left, self.last.x, None)
        again.iterations += first.iterations
        again.solve_time += first.solve_time
        again.build_time += first.build_time
        again.restarted = True
        return again

    def _attempt(self, trick: Trick, warm: bool, on_progress: Callable[[Progress], Any] | None,
                 cancel: threading.Event | None, limit: float, x0: np.ndarray | None,
                 iter_cap: int | None) -> SolveOutcome:
        prob = self.problem
        t_build0 = self.build_time
        exact = warm and self.last.ipopt_status in OPTIMAL  # primal-dual warm start
        S = self._solver("warm" if exact else "cold", trick)
        lbx, ubx, lbg, ubg = prob.bounds(trick)
        self._bounds = (lbg, ubg)
        p = prob.parameters(trick)
        args: dict[str, Any] = dict(p=p, lbx=lbx, ubx=ubx, lbg=lbg, ubg=ubg)
        if exact:
            args.update(x0=np.clip(self.last.x, lbx, ubx), lam_x0=self.last.lam_x, lam_g0=self.last.lam_g)
        elif warm:  # from a point that is not a KKT point: its primal values only, cold options
            args["x0"] = np.clip(self.last.x, lbx, ubx)
        else:
            guess = initial_guess(prob, trick) if x0 is None else np.asarray(x0, float)
            args["x0"] = np.clip(guess, lbx, ubx)
        self._listener, self._cancel = on_progress, cancel
        self._started = time.perf_counter()
        self._deadline = self._started + float(limit)
        self._iter, self._stopped_for = 0, None
        self._iter_cap = iter_cap
        try:
            sol = S(**args)
            ipopt_status = S.stats().get("return_status", "unknown")
            iterations = int(S.stats().get("iter_count", self._iter))
        except RuntimeError as exc:  # IPOPT or CasADi failure: report, never raise
            sol, ipopt_status, iterations = None, f"error: {exc}", self._iter
        finally:
            self._listener, self._cancel = None, None
        elapsed = time.perf_counter() - self._started
        if sol is None:
            x = args["x0"]
            outcome = SolveOutcome("failed", ipopt_status, iterations, float("nan"), x,
                                   np.zeros_like(x), np.zeros(len(lbg)), elapsed,
                                   self.build_time - t_build0, warm, float("inf"))
            return outcome
        status = STATUS.get(ipopt_status, "failed")
        if status == "cancelled" and self._stopped_for:
            status = self._stopped_for
        x = np.asarray(sol["x"]).ravel()
        g = np.asarray(sol["g"]).ravel()
        viol = float(np.max(np.maximum(lbg - g, 0) + np.maximum(g - ubg, 0), initial=0.0))
        outcome = SolveOutcome(status, ipopt_status, iterations, float(sol["f"]), x,
                               np.asarray(sol["lam_x"]).ravel(), np.asarray(sol["lam_g"]).ravel(),
                               elapsed, self.build_time - t_build0, warm, viol)
        if (status in ("failed", "infeasible") and viol <= FEASIBLE_TOL
                and ipopt_status in NEAR_SOLVED and np.all(np.isfinite(x))):
            outcome.status = "acceptable"  # a point that violates nothing, though not proven optimal
        if not np.all(np.isfinite(x)):
            outcome.status = "failed"
        if outcome.success:
            self.last = outcome
        return outcome

    def _on_iteration(self, x: np.ndarray, f: float, g: np.ndarray) -> bool:
        """Called by IPOPT (through CasADi) once per iteration with the current scaled decision
        vector, objective and constraint values (views of IPOPT's memory, valid during the call
        only); True asks it to stop."""
        self._iter += 1
        now = time.perf_counter()
        if self._cancel is not None and self._cancel.is_set():
            self._stopped_for = "cancelled"
            return True
        if now > self._deadline:
            self._stopped_for = "time_limit"
            return True
        if self._iter_cap is not None and self._iter > self._iter_cap:
            self._stopped_for = "max_iter"
            return True
        if self._listener is not None:
            lbg, ubg = self._bounds
            inf = float(np.max(np.maximum(lbg - g, 0) + np.maximum(g - ubg, 0), initial=0.0))
            self._listener(Progress(self._iter, f, inf, now - self._started, x.copy()))
        return False
