"""Background solving for the workbench: debounced requests, one worker thread, warm re-solves.

A mixin of :class:`kipup.widgets.workbench.Workbench`; it works on the workbench's attributes.
"""
from __future__ import annotations

import re
import threading
import time
from typing import Any

import numpy as np

from kipup.core.decode import decode
from kipup.core.motion import render_report
from kipup.core.solver import Progress, TrickSolver
from kipup.core.trick import Trick
from .wb_common import DEBOUNCE, _fmt, SolveRecord, _Request, _html


class SolvingMixin:
    """Solve requests and the solver thread."""

    # ----- solving ---------------------------------------------------------------------------
    @property
    def auto_solve(self) -> bool:
        return bool(self.auto_toggle.value)

    @auto_solve.setter
    def auto_solve(self, value: bool) -> None:
        self.auto_toggle.value = bool(value)

    def _auto_changed(self, change: dict) -> None:
        if change["new"] and self._generation > self._solved_generation:
            self._submit(_Request(self._generation, time.perf_counter() + DEBOUNCE, self._t_edit))

    def _edited(self, what: str = "edit") -> None:
        """Record an edit of the trick; with auto re-solve on, (re)arm the debounced re-solve and
        cancel a running solve, which this edit supersedes."""
        now = time.perf_counter()
        with self._cv:
            self._generation += 1
            self._t_edit = now
            gen = self._generation
        if self.auto_solve:
            self._submit(_Request(gen, now + DEBOUNCE, now), supersede=True)
            self._set_status(f"{what}: re-solve in {DEBOUNCE * 1000:.0f} ms", busy=True)
        else:
            self._set_status(f"{what}: not solved yet (auto re-solve is off; press Solve)")

    def solve(self, warm: bool | None = None) -> None:
        """Start a solve now in the background (warm when there is a good solution, unless ``warm=False``)."""
        now = time.perf_counter()
        self._submit(_Request(self._generation, now, self._t_edit, warm=warm), supersede=True)
        self._set_status("solve requested", busy=True)

    def cancel(self) -> None:
        """Cancel a pending or running solve; the motion on screen stays."""
        with self._cv:
            self._request = None
            if self._cancel_event is not None:
                self._cancel_event.set()
            self._cv.notify_all()
        self._publish_state()

    def _submit(self, req: _Request, supersede: bool = False) -> None:
        with self._cv:
            if req.kind == "build" and (self._request is not None or self._running is not None):
                return
            self._request = req
            self._progress_event.clear()
            if supersede and self._cancel_event is not None and self._running is not None \
                    and self._running.kind == "solve":
                self._cancel_event.set()
            self._cv.notify_all()
        self._publish_state()

    def _pending(self) -> bool:
        with self._cv:
            return self._request is not None

    def busy(self) -> bool:
        with self._cv:
            return self._request is not None or self._running is not None

    def wait(self, timeout: float | None = 120.0) -> bool:
        """Block until no solve is pending or running; False if ``timeout`` (s) passed first."""
        with self._cv:
            return self._cv.wait_for(lambda: self._request is None and self._running is None, timeout)

    def wait_for_progress(self, timeout: float = 30.0) -> bool:
        """Block until the running solve has reported at least one iteration (False on timeout)."""
        return self._progress_event.wait(timeout)

    def _worker_loop(self) -> None:
        while True:
            with self._cv:
                while self._request is None and not self._closing:
                    self._cv.wait()
                if self._closing:
                    return
                while True:  # debounce: wait until the newest request is due
                    req = self._request
                    if req is None:
                        break
                    delay = req.due - time.perf_counter()
                    if delay <= 0:
                        break
                    self._cv.wait(delay)
                    if self._closing:
                        return
                if req is None:
                    continue
                self._request = None
                self._running = req
                self._cancel_event = threading.Event()
                cancel = self._cancel_event
                self._progress_event.clear()
            self._publish_state()
            try:
                with self._lock:
                    trick = self.trick.copy()
                    gen = self._generation
                if req.kind == "build":
                    self._run_build(trick)
                else:
                    self._run_solve(req, trick, gen, cancel)
            except Exception as exc:  # never let the thread die; say what happened
                rec = SolveRecord(req.generation, "error", message=f"{type(exc).__name__}: {exc}")
                self.solves.append(rec)
                self.last_failure = rec
                self._show_message(f"<b>The solve could not run</b>: {_html(str(exc))}<br>The last good motion "
                                   "is kept.")
                self._set_status(f"error: {type(exc).__name__}: {exc}", busy=False)
            finally:
                with self._cv:
                    self._running = None
                    self._cancel_event = None
                    self._cv.notify_all()
                self._phase_state = "idle"
                self._publish_state()
                if not self.busy():
                    self.status.remove_class("kipup-state-busy")
                    self.status.add_class("kipup-state-idle")

    def _solver_for(self, trick: Trick) -> tuple[TrickSolver, bool, np.ndarray | None]:
        """The solver for this trick's structure (built now if needed), whether it was rebuilt, and a
        starting point from the old solver when the decision vector has the same layout."""
        old = self.solver
        if old is not None and old.fits(trick) and old.robot is self.robot:
            return old, False, None
        self._phase_state = "building"
        self._set_status("building the problem (structure changed)" if old else "building the problem", busy=True)
        self._publish_state()
        new = TrickSolver(trick, self.robot)
        x0 = None
        if old is not None and old.last is not None and old.problem.x.n == new.problem.x.n and \
                [(p.N, [(c.point, c.hold_x) for c in p.contacts]) for p in old.problem.phases] == \
                [(p.N, [(c.point, c.hold_x) for c in p.contacts]) for p in new.problem.phases]:
            x0 = old.last.x
        self.solver = new
        return new, True, x0

    def _run_build(self, trick: Trick) -> None:
        solver, rebuilt, _ = self._solver_for(trick)
        solver.prepare(trick, warm=solver.last is not None)
        self._set_status(f"ready: problem built in {solver.build_time:.2f} s", busy=False)

    def _run_solve(self, req: _Request, trick: Trick, gen: int, cancel: threading.Event) -> None:
        t_start = time.perf_counter()
        solver, rebuilt, x0 = self._solver_for(trick)
        build = time.perf_counter() - t_start
        if cancel.is_set():
            self.solves.append(SolveRecord(gen, "cancelled", rebuilt=rebuilt, build_time=build,
                                           message="superseded before it started"))
            return
        warm = req.warm
        if warm is None:
            warm = solver.last is not None and solver.last.success
        warm = bool(warm and solver.last is not None)
        kind = "warm" if warm else ("cold, from the previous solution" if x0 is not None else "cold")
        self._phase_state = "solving"
        self._set_status(f"solving ({kind})", busy=True)
        self._publish_state()
        problem = solver.problem

        def on_progress(p: Progress) -> None:  # in the solver thread, holding the GIL: keep it short
            self._progress_event.set()
            self._status_throttle(self._progress_status, p, kind)
            self._preview_throttle(self._show_preview, problem, trick, p)

        outcome = solver.solve(trick, warm=warm, on_progress=on_progress, cancel=cancel,
                               time_limit=self.time_limit, x0=None if warm else x0)
        t_dec = time.perf_counter()
        try:
            motion = decode(problem, trick, outcome.x, outcome.status, outcome, report=True)
        except Exception as exc:  # an unusable iterate: keep everything, say why
            motion = None
            decode_error = f"{type(exc).__name__}: {exc}"
        else:
            decode_error = ""
        self.timings["decode_ms"] = (time.perf_counter() - t_dec) * 1e3
        self.timings["solve_s"] = outcome.solve_time
        self.timings["build_s"] = build + outcome.build_time
        rec = SolveRecord(gen, outcome.status, outcome.ipopt_status, outcome.iterations, outcome.solve_time,
                          build + outcome.build_time, outcome.warm, rebuilt)
        self.solves.append(rec)
        with self._lock:
            self._preview = None
        if outcome.success and motion is not None:
            with self._lock:
                self._show_new_motion(motion)
            now = time.perf_counter()
            rec.accepted = True
            rec.edit_to_motion = now - req.t_edit
            self.timings["edit_to_motion_s"] = rec.edit_to_motion
            self.timings["edit_to_motion_history"].append(rec.edit_to_motion)
            with self._cv:
                self._solved_generation = max(self._solved_generation, gen)
            report = render_report(motion.report, motion.phases) if motion.report else ""
            self.last_report = report
            self._show_message("" if not report else
                               f"<b>Solved</b>; between the knots the motion still crosses these limits:"
                               f"<pre>{_html(report)}</pre>")
            self._set_status(f"motion #{self.motion_count}: {outcome.status} in {outcome.solve_time:.2f} s "
                             f"({outcome.iterations} iterations, {kind}); edit to motion {rec.edit_to_motion:.2f} s",
                             busy=self.busy())
            if rebuilt and not self._pending():
                try:  # have the warm instance ready for the next edit
                    self._phase_state = "preparing"
                    solver.prepare(trick, warm=True)
                except Exception:  # noqa: BLE001 - only a head start
                    pass
            return
        # not accepted: the last good motion stays
        with self._lock:
            self._apply_playhead(self.playhead)
        if outcome.status == "cancelled":
            rec.message = "superseded by a newer edit" if self._pending() else "cancelled"
            self._set_status(f"solve cancelled after {outcome.iterations} iterations ({rec.message})",
                             busy=self.busy())
            return
        self.last_failure = rec
        kept = f"the last good motion (#{self.motion_count}) stays on screen" if self.motion is not None else \
            "there is no good motion yet"
        if motion is not None:
            report = render_report(motion.report, motion.phases)
        else:
            report = f"the solver's point could not be decoded ({decode_error})"
        rec.message = report
        self.last_report = report
        self._show_message(
            f"<b>The solve ended '{outcome.status}'</b> (IPOPT: {_html(outcome.ipopt_status)}) after "
            f"{outcome.iterations} iterations in {outcome.solve_time:.2f} s; {kept}, nothing was changed or "
            f"saved. What the failed attempt violates:<pre>{_html(report)}</pre>"
            "Undo the last edit, relax a goal or a limit, or give the solver more time.")
        self._set_status(f"solve ended '{outcome.status}' after {outcome.iterations} iterations; {kept}",
                         busy=self.busy())

    def _progress_status(self, p: Progress, kind: str) -> None:
        self.status.value = (f"<span style='font-family:monospace'>solving ({kind}) | iteration {p.iteration} | "
                             f"objective {_fmt(p.objective, 4)} | infeasibility {p.infeasibility:.1e} | "
                             f"{p.elapsed:.1f} s</span>")
        self._status_text = (f"solving ({kind}) | iteration {p.iteration} | objective {_fmt(p.objective, 4)} | "
                             f"infeasibility {p.infeasibility:.1e} | {p.elapsed:.1f} s")
        self.live = {"iteration": p.iteration, "objective": p.objective, "infeasibility": p.infeasibility,
                     "elapsed": p.elapsed}

    def _show_preview(self, problem: Any, trick: Trick, p: Progress) -> None:
        try:
            m = decode(problem, trick, p.x, "running", report=False)
        except Exception:  # noqa: BLE001 - an odd iterate: just skip this preview
            return
        with self._lock:
            self._preview = m
            self.previews_shown += 1
            if self._mode == "static":
                self._apply_playhead(min(self.playhead, m.tend))
            self._update_com_path(m)

    def _show_message(self, html: str) -> None:
        self.message.value = html
