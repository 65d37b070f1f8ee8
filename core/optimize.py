"""One call from a trick to a motion: build (or reuse) the solver, solve, decode."""
from __future__ import annotations

import threading
from typing import Any, Callable

from .decode import decode
from .motion import Motion
from .robot import Robot
from .solver import Progress, TrickSolver
from .trick import Trick


def optimize(trick: Trick, robot: Robot, solver: TrickSolver | None = None,
             on_progress: Callable[[Progress], Any] | None = None,
             cancel: threading.Event | None = None, time_limit: float | None = None,
             warm: bool | None = None) -> tuple[Motion, TrickSolver]:
    """Solve ``trick``; reuses ``solver`` when the structure matches, else builds one.

    Returns the motion (whatever the status: check ``motion.status`` and ``motion.report``)
    and the solver to pass back for a warm re-solve after an edit.
    """
    if solver is None or not solver.fits(trick) or solver.robot is not robot:
        solver = TrickSolver(trick, robot)
    outcome = solver.solve(trick, warm=warm, on_progress=on_progress, cancel=cancel, time_limit=time_limit)
    motion = decode(solver.problem, trick, outcome.x, outcome.status, outcome)
    return motion, solver
