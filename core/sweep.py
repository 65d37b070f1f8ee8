"""Monte Carlo robustness of a motion: simulate it under sampled model and execution errors.

Each sample draws (seeded, :func:`draw_samples`; the same seed gives the same samples):

* per link: mass x U(1 - mass, 1 + mass), inertia x U(1 - inertia, 1 + inertia), COM + U(-com, com)
  in x and z (m, link frame);
* friction: every contact coefficient x U(friction);
* actuator strength: every joint's peak and stall torque x U(strength);
* timing: the reference reaches takeoff U(-timing, timing) s late (see ``timing_offset_s`` of
  :func:`kipup.core.tracking.simulate`);
* a push on the base at the planned takeoff: horizontal force U(-push, push) N for
  ``push_duration`` s.

It runs :func:`~kipup.core.tracking.simulate` for each sample, on a local process pool
(``concurrent.futures.ProcessPoolExecutor``) by default or on a Dask distributed cluster when given
a ``client``. A sample whose worker dies is reported as failed ("worker died") and the others
finish: on the process pool, the samples that were running when the pool broke are re-run one at a
time in a fresh pool, so only the culprit fails; on Dask the scheduler retries the task and reports
it killed after its allowed failures.

Results: :class:`SweepResult` with the success rate, per-sample outcomes, a table as rows and,
on request, a matplotlib figure saved to PNG (matplotlib is imported only then).
"""
from __future__ import annotations

import math
import os
from concurrent.futures import ProcessPoolExecutor, as_completed
from concurrent.futures.process import BrokenProcessPool
from dataclasses import asdict, dataclass, field, replace
from typing import Any, Sequence

import numpy as np

from .motion import Motion
from .robot import Robot
from .trick import Terrain

__all__ = ["SweepRanges", "Sample", "Outcome", "SweepResult", "draw_samples", "perturbed_robot", "run_sample",
           "run_sweep"]


@dataclass
class SweepRanges:
    """Half-widths (mass, inertia: fractions; com: m; timing: s; push: N) and ranges (friction,
    strength: scale factors (lo, hi)) of the sampled errors; see the module docstring."""

    mass: float = 0.10
    inertia: float = 0.20
    com: float = 0.01
    friction: tuple[float, float] = (0.7, 1.1)
    strength: tuple[float, float] = (0.85, 1.05)
    timing: float = 0.01
    push: float = 30.0
    push_duration: float = 0.05

    def __post_init__(self) -> None:
        for name in ("mass", "inertia", "com", "timing", "push", "push_duration"):
            v = getattr(self, name)
            if not (isinstance(v, (int, float)) and math.isfinite(v) and v >= 0):
                raise ValueError(f"ranges.{name} must be a finite number >= 0; got {v!r}")
        if self.mass >= 1 or self.inertia >= 1:
            raise ValueError("ranges.mass and ranges.inertia must be below 1 (a fraction of the nominal value)")
        for name in ("friction", "strength"):
            lo, hi = getattr(self, name)
            if not (math.isfinite(lo) and math.isfinite(hi) and 0 < lo <= hi):
                raise ValueError(f"ranges.{name} must be (lo, hi) with 0 < lo <= hi; got {(lo, hi)!r}")


@dataclass
class Sample:
    """One draw of errors (see the module docstring). ``crash`` makes the worker die (for tests)."""

    index: int
    mass_scale: list[float]
    inertia_scale: list[float]
    com_offset: list[tuple[float, float]]
    friction_scale: float = 1.0
    strength: float = 1.0
    timing_offset: float = 0.0
    push_force: float = 0.0
    crash: bool = False


@dataclass
class Outcome:
    """What one sample gave: the verdict's figures, or ``error`` (text) when it could not run."""

    index: int
    success: bool
    pitch_error: float = math.nan
    touchdown_time_error: float = math.nan
    com_speed_end: float = math.nan
    diverged: bool = False
    reason: str = ""
    other_contacts: list[str] = field(default_factory=list)
    error: str = ""


def draw_samples(robot: Robot, n: int, seed: int = 0, ranges: SweepRanges | None = None) -> list[Sample]:
    """``n`` seeded samples of errors for ``robot``."""
    if isinstance(n, bool) or not isinstance(n, int) or n < 0:
        raise ValueError(f"n must be a whole number >= 0; got {n!r}")
    r = ranges or SweepRanges()
    rng = np.random.default_rng(seed)
    nl = len(robot.links)
    out = []
    for i in range(n):
        out.append(Sample(
            index=i,
            mass_scale=rng.uniform(1 - r.mass, 1 + r.mass, nl).tolist(),
            inertia_scale=rng.uniform(1 - r.inertia, 1 + r.inertia, nl).tolist(),
            com_offset=[tuple(v) for v in rng.uniform(-r.com, r.com, (nl, 2)).tolist()],
            friction_scale=float(rng.uniform(*r.friction)),
            strength=float(rng.uniform(*r.strength)),
            timing_offset=float(rng.uniform(-r.timing, r.timing)),
            push_force=float(rng.uniform(-r.push, r.push)),
        ))
    return out


def perturbed_robot(robot: Robot, s: Sample) -> Robot:
    """``robot`` with the sample's inertial and actuator errors (same structure and names)."""
    links = tuple(replace(link, mass=link.mass * s.mass_scale[k], inertia=link.inertia * s.inertia_scale[k],
                          com=(link.com[0] + s.com_offset[k][0], link.com[1] + s.com_offset[k][1]))
                  for k, link in enumerate(robot.links))
    joints = tuple(replace(j, actuator=replace(j.actuator, peak_torque=j.actuator.peak_torque * s.strength,
                                                stall_torque=j.actuator.stall_torque * s.strength))
                   for j in robot.joints)
    return replace(robot, links=links, joints=joints)


# ----- the worker side ------------------------------------------------------------------------
_CACHE: dict[str, Any] = {}


def run_sample(job: dict[str, Any]) -> Outcome:
    """Run one sample (in a worker): ``job`` holds the motion, robot, terrain, sample, settings."""
    from .contact_sim import ContactModel
    from .lqr import flight_lqr
    from .tracking import Push, simulate

    s: Sample = job["sample"]
    if s.crash:
        os._exit(17)  # a worker that dies: the sweep must report this sample and finish the rest
    motion: Motion = job["motion"]
    robot: Robot = job["robot"]
    kwargs = dict(job.get("sim_kwargs") or {})
    if kwargs.get("lqr") is True:
        key = job["key"] + ":lqr"
        if key not in _CACHE:
            _CACHE[key] = flight_lqr(motion, robot, control_rate_hz=kwargs.get("control_rate_hz", 500.0))
        kwargs["lqr"] = _CACHE[key]
    flights = [p for p in motion.phases if not p.contacts]
    pushes = []
    if flights and s.push_force != 0.0:
        pushes.append(Push(time=flights[0].start, duration=job["push_duration"], force=(s.push_force, 0.0)))
    try:
        res = simulate(motion, robot, job["terrain"], sim_robot=perturbed_robot(robot, s), push=pushes,
                       contact=ContactModel(mu_scale=s.friction_scale), timing_offset_s=s.timing_offset, **kwargs)
    except Exception as exc:  # a bad sample must not stop the sweep
        return Outcome(s.index, False, error=f"{type(exc).__name__}: {exc}")
    v = res.verdict
    return Outcome(s.index, v.success, v.pitch_error_at_touchdown, v.touchdown_time_error, v.com_speed_end,
                   v.diverged, v.reason, list(v.other_contacts))


# ----- the caller side ------------------------------------------------------------------------
@dataclass
class SweepResult:
    """Outcomes of a sweep, in sample order, with the samples drawn."""

    samples: list[Sample]
    outcomes: list[Outcome]
    seed: int
    backend: str

    @property
    def n(self) -> int:
        return len(self.outcomes)

    @property
    def success_rate(self) -> float:
        """Fraction of samples that landed and stood still (0..1); NaN for an empty sweep."""
        return sum(o.success for o in self.outcomes) / self.n if self.n else math.nan

    def _finite(self, name: str) -> np.ndarray:
        a = np.array([getattr(o, name) for o in self.outcomes], dtype=float)
        return a[np.isfinite(a)]

    def summary_rows(self) -> list[list[str]]:
        """Success rate and the error distributions (median, 90th percentile of |x|, max |x|)."""
        rows = [["quantity", "value"],
                ["samples", str(self.n)],
                ["success rate", f"{100 * self.success_rate:.0f} %" if self.n else "-"],
                ["diverged or fell", str(sum(o.diverged for o in self.outcomes))],
                ["touched with another point", str(sum(bool(o.other_contacts) for o in self.outcomes))],
                ["could not run (worker died, error)", str(sum(bool(o.error) for o in self.outcomes))]]
        for name, label, unit in (("pitch_error", "|pitch error at touchdown|", "rad"),
                                  ("touchdown_time_error", "|touchdown time error|", "s"),
                                  ("com_speed_end", "COM speed at end", "m/s")):
            a = np.abs(self._finite(name))
            if a.size:
                rows.append([label, f"median {np.median(a):.3f}, p90 {np.percentile(a, 90):.3f}, "
                                    f"max {a.max():.3f} {unit}"])
            else:
                rows.append([label, "-"])
        return rows

    def rows(self) -> list[list[str]]:
        """One row per sample, the header first."""
        out = [["sample", "success", "pitch error rad", "touchdown error s", "note"]]
        for o in self.outcomes:
            note = o.error or o.reason or (", ".join(o.other_contacts) if o.other_contacts else "")
            out.append([str(o.index), "yes" if o.success else "no",
                        "-" if not math.isfinite(o.pitch_error) else f"{o.pitch_error:+.3f}",
                        "-" if not math.isfinite(o.touchdown_time_error) else f"{o.touchdown_time_error:+.3f}",
                        note])
        return out

    def plot(self, path: str | os.PathLike[str]) -> None:
        """Save a PNG: histograms of the touchdown pitch error (rad) and time error (s), success marked."""
        import matplotlib

        matplotlib.use("Agg")
        import matplotlib.pyplot as plt

        fig, axes = plt.subplots(1, 2, figsize=(9, 3.5))
        for ax, name, label in ((axes[0], "pitch_error", "pitch error at touchdown (rad)"),
                                (axes[1], "touchdown_time_error", "touchdown time error (s)")):
            ok = np.array([getattr(o, name) for o in self.outcomes if o.success], dtype=float)
            bad = np.array([getattr(o, name) for o in self.outcomes if not o.success], dtype=float)
            ax.hist([ok[np.isfinite(ok)], bad[np.isfinite(bad)]], bins=15, stacked=True,
                    label=["landed and stood", "failed"], color=["tab:green", "tab:red"])
            ax.set_xlabel(label)
            ax.set_ylabel("samples")
        axes[0].legend(fontsize=8)
        fig.suptitle(f"{self.n} samples, success {100 * self.success_rate:.0f} % (seed {self.seed})")
        fig.tight_layout()
        fig.savefig(path, dpi=100)
        plt.close(fig)


def _died(s: Sample, why: str) -> Outcome:
    return Outcome(s.index, False, error=why)


def _run_pool(jobs: list[dict], workers: int) -> dict[int, Outcome]:
    results: dict[int, Outcome] = {}
    pending = list(jobs)
    suspects: list[dict] = []
    while pending:
        with ProcessPoolExecutor(max_workers=workers) as pool:
            futures = {pool.submit(run_sample, j): j for j in pending}
            pending = []
            for fut in as_completed(futures):
                j = futures[fut]
                try:
                    results[j["sample"].index] = fut.result()
                except BrokenProcessPool:
                    suspects.append(j)
                except Exception as exc:  # pickling trouble and the like
                    results[j["sample"].index] = _died(j["sample"], f"{type(exc).__name__}: {exc}")
    for j in suspects:  # one at a time in a fresh pool: only the culprit dies
        with ProcessPoolExecutor(max_workers=1) as pool:
            try:
                results[j["sample"].index] = pool.submit(run_sample, j).result()
            except BrokenProcessPool:
                results[j["sample"].index] = _died(j["sample"], "worker died")
    return results


def _run_dask(jobs: list[dict], client: Any) -> dict[int, Outcome]:
    from distributed import as_completed as dask_completed

    futures = client.map(run_sample, jobs, pure=False)
    index = {f.key: j for f, j in zip(futures, jobs)}
    results: dict[int, Outcome] = {}
    for fut in dask_completed(futures):
        j = index[fut.key]
        try:
            results[j["sample"].index] = fut.result()
        except Exception as exc:  # KilledWorker when the worker died
            why = "worker died" if type(exc).__name__ == "KilledWorker" else f"{type(exc).__name__}: {exc}"
            results[j["sample"].index] = _died(j["sample"], why)
    return results


def run_sweep(motion: Motion, robot: Robot, terrain: Terrain, *, n: int = 50, seed: int = 0,
              ranges: SweepRanges | None = None, workers: int = 2, client: Any = None,
              samples: Sequence[Sample] | None = None, sim_kwargs: dict[str, Any] | None = None) -> SweepResult:
    """Simulate ``motion`` for ``n`` seeded samples of errors (or the given ``samples``).

    ``workers``: local processes (ignored with a Dask ``client``). ``sim_kwargs``: passed to
    :func:`~kipup.core.tracking.simulate` (e.g. ``{"lqr": True, "start_time": 0.4}``; ``lqr=True``
    builds the LQR once per worker process).
    """
    motion.check_robot(robot)
    if client is None and (isinstance(workers, bool) or not isinstance(workers, int) or workers < 1):
        raise ValueError(f"workers must be a whole number >= 1; got {workers!r}")
    ranges = ranges or SweepRanges()
    drawn = list(samples) if samples is not None else draw_samples(robot, n, seed, ranges)
    bad = {"sim_robot", "push", "contact", "timing_offset_s"} & set(sim_kwargs or {})
    if bad:
        raise ValueError(f"sim_kwargs must not set {sorted(bad)}: the sweep sets them per sample")
    clean = replace(robot)  # no cached CasADi functions to pickle
    key = f"{id(motion)}:{os.getpid()}:{seed}"
    jobs = [{"sample": s, "motion": motion, "robot": clean, "terrain": terrain, "sim_kwargs": dict(sim_kwargs or {}),
             "push_duration": ranges.push_duration, "key": key} for s in drawn]
    if not jobs:
        results: dict[int, Outcome] = {}
    elif client is not None:
        results = _run_dask(jobs, client)
    else:
        results = _run_pool(jobs, workers)
    outcomes = [results[s.index] for s in drawn]
    return SweepResult(samples=drawn, outcomes=outcomes, seed=seed, backend="dask" if client is not None else "process")


def sample_to_dict(s: Sample) -> dict[str, Any]:
    return asdict(s)
