"""The trick optimizer checked against the laws of mechanics and its own contracts.

Outside sources: Newton's and Euler's laws for a free body (the COM of a body in free flight
accelerates at g, its angular momentum about the COM is constant: any mechanics textbook, e.g.
Featherstone, Rigid Body Dynamics Algorithms, 2008, sec. 2.13); Coulomb friction and a rigid
inelastic impact (the same book, ch. 11). Trade figures for a backflip: common practice, no
published source.
"""
from __future__ import annotations

import threading
import time

import numpy as np
import pytest

from kipup.core import dynamics as dyn
from kipup.core.cli import main as cli_main
from kipup.core.decode import decode
from kipup.core.optimize import optimize
from kipup.core.robot_file import load_bundled
from kipup.core.solver import TrickSolver
from kipup.core.templates import load_template
from kipup.core.transcription import TrickProblem, TrickSpecError
from kipup.core.trick import Box, Contact, Goals, Keyframe, Phase, Terrain, Trick
from motion_checks import assert_smooth_start

G = 9.81


@pytest.fixture(scope="module")
def backflip():
    trick, robot = load_template("backflip")
    solver = TrickSolver(trick, robot)
    outcome = solver.solve(trick)
    motion = decode(solver.problem, trick, outcome.x, outcome.status, outcome)
    return trick, robot, solver, outcome, motion


def small_jump(robot_name: str = "humanoid") -> Trick:
    """A small invented vertical jump with few knots, for quick solver tests."""
    stand = dict(base_x=0.0, base_pitch=0.0, hip=0.0, knee=0.0, ankle=0.0, shoulder=0.0, elbow=0.0)
    crouch = dict(base_pitch=0.3, hip=-1.0, knee=1.4, ankle=-0.4, shoulder=0.0, elbow=-0.3)
    def feet():
        return [Contact("toe"), Contact("heel")]
    return Trick(
        name="small_jump", robot=robot_name,
        phases=[Phase("push", feet(), 0.3, knots=12), Phase("flight", [], 0.25, knots=10),
                Phase("landing", feet(), 0.25, knots=8)],
        keyframes=[Keyframe("start", 0.0, stand, phase="push", weight=100.0),
                   Keyframe("crouch", 0.5, crouch, phase="push")],
        landing_pose=dict(base_pitch=0.0, hip=0.0, knee=0.0, ankle=0.0, shoulder=0.0, elbow=0.0),
    )


# ----- the backflip template ---------------------------------------------------------------
def test_backflip_solves_without_violations(backflip):
    _, _, _, outcome, motion = backflip
    assert outcome.status in ("solved", "acceptable"), outcome.ipopt_status
    assert motion.report == []


def test_backflip_starts_without_a_torque_pulse(backflip):
    _, robot, _, _, motion = backflip
    assert_smooth_start(robot, motion)


def test_backflip_turns_exactly_one_backward_turn(backflip):
    _, _, _, _, motion = backflip
    assert motion.q[-1, 2] - motion.q[0, 2] == pytest.approx(-2 * np.pi, abs=1e-6)


def test_backflip_template_uses_trade_figures(backflip):
    # common practice, no published source: about 0.8 s sampled at 0.01 s, stance ~35 %
    trick = backflip[0]
    push, flight = trick.phases[0], trick.phases[1]
    airborne = push.duration + flight.duration
    assert airborne == pytest.approx(0.8, abs=0.05)
    assert push.duration / push.knots == pytest.approx(0.01)
    assert flight.duration / flight.knots == pytest.approx(0.01)
    assert push.duration / airborne == pytest.approx(0.35, abs=0.03)


def _flight_knots(motion):
    span = next(p for p in motion.phases if not p.contacts)
    return span, np.arange(span.first_knot, span.last_knot + 1)


def test_flight_com_accelerates_at_g(backflip):
    # Newton: with no contact the COM acceleration is gravity alone.
    _, robot, _, _, motion = backflip
    span, ks = _flight_knots(motion)
    for k in ks:
        q, qd, qdd = motion.q[k], motion.qd[k], motion.qdd[k]
        # COM acceleration = sum m_i a_ci / M, from generalized momentum rate: rnea base rows
        force = dyn.rnea(robot, q, qd, qdd, gravity=False)[:2]  # total rate of linear momentum
        assert force / robot.total_mass == pytest.approx([0.0, -G], abs=1e-5)
    # between knots the sampled COM follows one parabola with curvature -g
    times = np.linspace(span.start, span.end, 200)[1:-1]
    s = motion.sample(times)
    com = np.array([dyn.center_of_mass(robot, q) for q in s["q"]])
    fit = np.polyfit(times, com[:, 1], 2)
    assert 2 * fit[0] == pytest.approx(-G, rel=5e-3)  # collocation accuracy between knots: 0.5 %
    assert np.abs(np.polyval(fit, times) - com[:, 1]).max() < 1e-3  # m
    assert np.abs(np.polyval(np.polyfit(times, com[:, 0], 1), times) - com[:, 0]).max() < 1e-3


def test_flight_angular_momentum_is_constant(backflip):
    # Euler: no external moment about the COM in flight. Exact at knots (the equations of
    # motion hold there); along the motion to the collocation accuracy at 0.01 s knots, stated
    # as 5 % (measured 0.5-3 % on the backflip's local optima).
    _, robot, _, _, motion = backflip
    span, ks = _flight_knots(motion)
    k_knots = np.array([dyn.centroidal_momentum(robot, motion.q[k], motion.qd[k])[0] for k in ks])
    times = np.linspace(span.start, span.end, 300)[1:-1]
    s = motion.sample(times)
    k_dense = np.array([dyn.centroidal_momentum(robot, q, qd)[0] for q, qd in zip(s["q"], s["qd"])])
    ref = np.abs(k_knots).mean()
    assert ref > 1.0  # a backflip needs angular momentum (kg m^2/s)
    assert np.ptp(k_knots) / ref < 0.05
    assert np.ptp(k_dense) / ref < 0.05


def test_stance_forces_are_unilateral_and_inside_the_friction_cone(backflip):
    _, robot, _, _, motion = backflip
    for span in motion.phases:
        for point in span.contacts:
            c = motion.contact_points.index(point)
            mu = robot.point(point).friction
            f = motion.forces[span.first_knot:span.last_knot + 1, c, :]
            tol = 1e-3  # N: the solver's constraint tolerance (1e-6) times the weight scale m g
            assert (f[:, 1] >= -tol).all()
            assert (np.abs(f[:, 0]) <= mu * f[:, 1] + tol).all()


def test_touchdown_impulse_is_compressive_and_stops_the_feet(backflip):
    _, robot, _, _, motion = backflip
    assert motion.impulses, "the landing phase starts with an impact"
    total_z = 0.0
    for imp in motion.impulses:
        ix, iz = imp.impulse
        mu = robot.point(imp.point).friction
        assert iz >= -1e-4 and abs(ix) <= mu * iz + 1e-4  # N s, constraint tolerance times m
        total_z += iz
    assert total_z > 1.0  # N s: the robot lands with real downward speed
    landing = next(p for p in motion.phases if p.name == "landing")
    k = landing.first_knot
    for point in landing.contacts:
        v = dyn.point_velocity(robot, motion.q[k], motion.qd[k], point)
        assert np.abs(v).max() < 1e-5
    # and the impulse law: M (qd+ - qd-) = sum J^T P
    M = dyn.crba(robot, motion.q[k])
    lhs = M @ (motion.qd[k] - motion.qd[k - 1])
    rhs = sum(dyn.point_jacobian(robot, motion.q[k], imp.point).T @ np.array(imp.impulse)
              for imp in motion.impulses)
    assert lhs == pytest.approx(rhs, abs=1e-4)


def test_resimulating_torques_and_forces_reproduces_the_motion(backflip):
    """Forward dynamics at 1 kHz (RK4) with the optimal torques, the stance points held.

    The plan claims that its torques, with the stance points held where they are, produce its
    motion. So each window of 0.1 s (from knots 0, 5, 10, 15 of every phase) is integrated from the
    planned state with the planned joint torques (linear between knots) and the contact as a
    constraint: ``M qdd + h = S^T tau + J^T f``, ``J qdd + Jd qd = -2 a J qd - a^2 e`` (Baumgarte
    stabilisation, a = 20 1/s; J. Baumgarte, 1972, from memory), solved jointly for qdd and f.
    Stated tolerance: 1 cm and 0.05 rad after 0.1 s (measured: at most 3 mm and 0.022 rad).
    (Applying the planned forces as given external forces instead is unstable in open loop: an
    unloaded foot then drifts freely, 0.9 rad after 0.1 s. The forces at single knots are not
    compared: the position-level contact leaves a knot's acceleration along the contact free, and
    the backflip's first knot carries a force the constraint does not need: 43 N against 94 N.)
    """
    _, robot, solver, _, motion = backflip
    dt, alpha, nq = 1e-3, 20.0, robot.nq
    for span, layout in zip(motion.phases, solver.problem.phases):
        ks = np.arange(span.first_knot, span.last_knot + 1)
        tt = motion.t[ks]
        # the rows the transcription holds: x and z, or z only for a second point on a held link
        held = [(row.point, [0, 1] if row.hold_x else [1]) for row in layout.contacts]
        for k0 in (0, 5, 10, 15):
            if k0 >= len(ks) - 1:
                continue
            q, qd = motion.q[ks[k0]].copy(), motion.qd[ks[k0]].copy()
            anchors = {p: np.asarray(dyn.point_position(robot, q, p)).ravel() for p, _ in held}

            def solve(t, q, qd):
                tau = np.array([np.interp(t, tt, motion.tau[ks, j]) for j in range(robot.nj)])
                M = np.asarray(dyn.crba(robot, q))
                rhs = np.r_[np.zeros(3), tau] - np.asarray(dyn.rnea(robot, q, qd, np.zeros(nq))).ravel()
                if not held:
                    return np.linalg.solve(M, rhs)
                J = np.vstack([np.asarray(dyn.point_jacobian(robot, q, p))[rows] for p, rows in held])
                jd = np.concatenate([np.asarray(dyn.point_jdot_qdot(robot, q, qd, p)).ravel()[rows]
                                     for p, rows in held])
                e = np.concatenate([(np.asarray(dyn.point_position(robot, q, p)).ravel() - anchors[p])[rows]
                                    for p, rows in held])
                m = J.shape[0]
                kkt = np.block([[M, -J.T], [J, np.zeros((m, m))]])
                sol = np.linalg.solve(kkt, np.r_[rhs, -jd - 2 * alpha * (J @ qd) - alpha ** 2 * e])
                return sol[:nq]  # qdd (the contact forces are sol[nq:])

            t = tt[k0]
            t_end = min(span.end, t + 0.1)
            while t < t_end - 1e-12:
                h = min(dt, t_end - t)
                k1v, k1a = qd, solve(t, q, qd)
                k2v, k2a = qd + h / 2 * k1a, solve(t + h / 2, q + h / 2 * k1v, qd + h / 2 * k1a)
                k3v, k3a = qd + h / 2 * k2a, solve(t + h / 2, q + h / 2 * k2v, qd + h / 2 * k2a)
                k4v, k4a = qd + h * k3a, solve(t + h, q + h * k3v, qd + h * k3a)
                q = q + h / 6 * (k1v + 2 * k2v + 2 * k3v + k4v)
                qd = qd + h / 6 * (k1a + 2 * k2a + 2 * k3a + k4a)
                t += h
            planned_q = motion.sample([t_end])["q"][0]
            assert np.abs(q[:2] - planned_q[:2]).max() < 0.01, (span.name, k0)
            assert np.abs(q[2:nq] - planned_q[2:nq]).max() < 0.05, (span.name, k0)


def test_feet_and_hands_stay_above_the_terrain(backflip):
    trick, robot, _, _, motion = backflip
    from kipup.core.terrain import exact_height
    for span in motion.phases:
        for k in range(span.first_knot, span.last_knot + 1):
            for name in robot.point_names:
                if name in span.contacts:
                    continue
                p = dyn.point_position(robot, motion.q[k], name)
                # the optimizer keeps points above a smoothed terrain whose box sides are
                # blended over a few millimetres
                assert p[1] >= exact_height(trick.terrain, p[0]) - 0.02, (name, motion.t[k])


# ----- re-solving ---------------------------------------------------------------------------
def test_warm_resolve_after_value_edits_needs_no_rebuild(backflip):
    trick, robot, solver, cold, _ = backflip
    problem = solver.problem
    edited = trick.copy()
    edited.keyframes[2].pose["hip"] += 0.1  # nudge the tuck keyframe by 0.1 rad
    assert solver.fits(edited)
    out = solver.solve(edited)
    assert solver.problem is problem
    assert out.warm and out.status in ("solved", "acceptable")
    # how much the warm start saves is a speed figure: see `kipup bench optimizer`
    doubled = trick.copy()
    doubled.costs.effort *= 2.0
    out2 = solver.solve(doubled)
    assert out2.warm and out2.status in ("solved", "acceptable")
    moved = trick.copy()
    moved.phases[1].knots += 2  # a structural edit
    assert not solver.fits(moved)


def test_keyframe_value_changes_the_motion():
    trick, robot = small_jump(), load_bundled("humanoid")
    m1, solver = optimize(trick, robot)
    assert m1.status in ("solved", "acceptable")
    edited = trick.copy()
    edited.keyframes[1].pose["knee"] = 1.8
    m2, solver2 = optimize(edited, robot, solver=solver)
    assert solver2 is solver
    k = m2.phases[0].first_knot + 6  # the crouch keyframe sits at half the push phase
    assert m2.q[k, robot.coord_index("knee")] > m1.q[k, robot.coord_index("knee")] + 0.05


def test_solve_releases_the_gil_for_a_responsive_kernel():
    trick, robot = small_jump(), load_bundled("humanoid")
    solver = TrickSolver(trick, robot)
    solver.prepare(trick, warm=False)
    done = threading.Event()
    gaps = []

    def run():
        solver.solve(trick)
        done.set()

    th = threading.Thread(target=run)
    last = time.perf_counter()
    th.start()
    while not done.is_set():
        time.sleep(0.005)
        now = time.perf_counter()
        gaps.append(now - last)
        last = now
    th.join()
    assert len(gaps) > 10
    assert max(gaps) < 0.5  # s; measured ~0.05 s on an idle 2-core machine


def test_cancel_and_time_limit_stop_a_solve():
    trick, robot = small_jump(), load_bundled("humanoid")
    solver = TrickSolver(trick, robot)
    cancel = threading.Event()

    def progress(p):
        if p.iteration == 3:
            cancel.set()

    out = solver.solve(trick, on_progress=progress, cancel=cancel)
    assert out.status == "cancelled" and out.iterations <= 5
    out = solver.solve(trick, time_limit=1e-3, warm=False)
    assert out.status == "time_limit"


def test_progress_events_carry_a_decodable_motion():
    trick, robot = small_jump(), load_bundled("humanoid")
    solver = TrickSolver(trick, robot)
    seen = []
    solver.solve(trick, on_progress=seen.append)
    assert [p.iteration for p in seen] == list(range(1, len(seen) + 1))
    mid = decode(solver.problem, trick, seen[len(seen) // 2].x, "running", report=False)
    assert mid.q.shape == (sum(p.knots + 1 for p in trick.phases), robot.nq)
    assert seen[-1].infeasibility < 1e-5 < seen[0].infeasibility
    # each event owns its copy of the iterate (the callback reads IPOPT's memory in place)
    assert not np.array_equal(seen[0].x, seen[-1].x)
    assert not np.shares_memory(seen[0].x, seen[-1].x)


# ----- bad input and infeasible problems ----------------------------------------------------
def test_unknown_contact_point_names_the_field():
    trick = small_jump()
    trick.phases[2].contacts[0].point = "tail"
    with pytest.raises(TrickSpecError, match=r"phases\[2\]\.contacts\[0\]\.point"):
        TrickProblem(trick, load_bundled("humanoid"))


def test_unknown_keyframe_coordinate_names_the_field():
    trick = small_jump()
    trick.keyframes[1].pose["wrist"] = 0.1
    with pytest.raises(TrickSpecError, match=r"keyframes\[1\]\.pose\.wrist"):
        TrickProblem(trick, load_bundled("humanoid"))


def infeasible_jump() -> Trick:
    """Two full backward turns in 0.25 s of flight: beyond any actuator."""
    trick = small_jump()
    trick.goals = Goals(rotation=-4 * np.pi)
    trick.landing_pose["base_pitch"] = -4 * np.pi
    trick.solver.max_iter = 150
    return trick


def test_infeasible_trick_reports_instead_of_raising():
    trick, robot = infeasible_jump(), load_bundled("humanoid")
    motion, _ = optimize(trick, robot)
    assert motion.status not in ("solved", "acceptable")
    assert motion.report, "a failed solve names what it could not satisfy"
    assert all(v.text() for v in motion.report)


def test_cli_solve_writes_nothing_for_an_infeasible_trick(tmp_path):
    from kipup.core.trick_file import save_trick

    path = tmp_path / "bad.yaml"
    save_trick(infeasible_jump(), path)
    out = tmp_path / "out"
    out.mkdir()
    (out / "motion.json").write_text("previous result\n")
    rc = cli_main(["solve", str(path), "-o", str(out), "-q"])
    assert rc == 1
    assert (out / "motion.json").read_text() == "previous result\n"
    assert not (out / "motion.npz").exists()


def test_cli_solve_rejects_an_invalid_trick_file(tmp_path, capsys):
    path = tmp_path / "broken.yaml"
    path.write_text("format: kipup-trick/1\nname: x\nrobot: humanoid\nphases: []\n")
    assert cli_main(["solve", str(path), "-o", str(tmp_path / "o"), "-q"]) == 2
    assert "phases" in capsys.readouterr().out
    assert not (tmp_path / "o").exists()


def test_cli_solve_writes_motion_files(tmp_path, capsys):
    from kipup.core.motion import Motion
    from kipup.core.trick_file import save_trick

    path = tmp_path / "jump.yaml"
    save_trick(small_jump(), path)
    rc = cli_main(["solve", str(path), "-o", str(tmp_path / "out"), "-q"])
    text = capsys.readouterr().out
    assert rc == 0, text
    assert "status" in text and ("solved" in text or "acceptable" in text) and "Caution" in text
    m = Motion.from_json(tmp_path / "out" / "motion.json")
    m2 = Motion.from_npz(tmp_path / "out" / "motion.npz")
    assert np.array_equal(m.q, m2.q) and m.status in ("solved", "acceptable")


# ----- free fall between the knots ---------------------------------------------------------------
def _brick_flight(bump: float = 0.0) -> tuple:
    """A single rigid body thrown at (1.0, 3.0) m/s: one flight phase whose base follows the
    free-fall parabola exactly (laws of mechanics: constant horizontal speed, vertical acceleration
    -g), with ``bump`` m added to the height at the middle knot."""
    from kipup.core.motion import Motion, PhaseSpan
    from kipup.core.robot import Link, Point, Robot

    body = Link("brick", 2.0, (0.0, 0.0), 0.03)
    robot = Robot("brick", (body,), (), (Point("corner", "brick", (0.1, -0.05), 0.5),))
    t = np.linspace(0.0, 0.5, 11)
    q = np.c_[1.0 * t, 1.0 + 3.0 * t - 0.5 * robot.gravity * t ** 2, 0.2 * t]
    q[5, 1] += bump
    qd = np.c_[np.full_like(t, 1.0), 3.0 - robot.gravity * t, np.full_like(t, 0.2)]
    qdd = np.tile([0.0, -robot.gravity, 0.0], (t.size, 1))
    motion = Motion(robot_name="brick", coord_names=list(robot.coord_names), joint_names=[],
                    contact_points=["corner"], t=t, q=q, qd=qd, qdd=qdd, tau=np.zeros((t.size, 0)),
                    forces=np.zeros((t.size, 1, 2)), phases=[PhaseSpan("air", 0.0, 0.5, 0, 10, [])],
                    status="solved", trick_name="throw")
    return robot, motion


def test_flight_deviation_is_zero_on_a_parabola_and_measures_a_bump():
    from kipup.core.decode import flight_deviation

    robot, motion = _brick_flight()
    dev, _ = flight_deviation(robot, motion, motion.phases[0])
    assert dev < 1e-12
    robot, motion = _brick_flight(bump=0.05)
    dev, at = flight_deviation(robot, motion, motion.phases[0])
    assert dev == pytest.approx(0.05, abs=1e-12) and at == pytest.approx(0.25)


def test_too_coarse_flight_is_reported_with_advice():
    """The box jump with its flight on 24 knots (about 21 ms apart) for a fast tuck: the knot
    equations hold but the COM leaves the free-fall parabola by decimetres between them (measured
    0.34 m), which the report must say, naming the phase and the remedy; on 40 knots (the template)
    the report is empty (tests/test_templates.py)."""
    import dataclasses

    trick, robot = load_template("box_jump")
    coarse = dataclasses.replace(trick, phases=[dataclasses.replace(p, knots=24) if p.name == "flight" else p
                                                for p in trick.phases],
                                 solver=dataclasses.replace(trick.solver, time_limit=300.0))
    motion, _ = optimize(coarse, robot)
    found = [v for v in motion.report if v.kind == "free_fall"]
    assert found, motion.report_text()
    v = found[0]
    assert v.name == "flight" and v.amount > 0.02 and v.limit == 0.02
    assert "flight phase 'flight'" in v.text() and "more knots" in v.text()


def test_a_stalled_warm_solve_restarts_cold_from_the_last_solution(monkeypatch):
    """A warm re-solve that has not converged after WARM_ITER_CAP iterations starts again from the
    last solution with the cold settings; the outcome says so and counts both attempts."""
    import dataclasses

    import kipup.core.solver as solver_mod

    trick, robot = load_template("quadruped_jump")
    solver = TrickSolver(trick, robot)
    first = solver.solve(trick)
    assert first.success and not first.restarted
    edited = dataclasses.replace(trick, costs=dataclasses.replace(trick.costs, effort=trick.costs.effort * 3))
    plain = TrickSolver(trick, robot)
    plain.solve(trick)
    warm = plain.solve(edited)
    assert warm.success and warm.warm and not warm.restarted and warm.iterations > 2
    monkeypatch.setattr(solver_mod, "WARM_ITER_CAP", 2)
    out = solver.solve(edited)
    assert out.restarted and out.success, out.status
    assert out.iterations > 3  # the 3 warm iterations plus the cold ones
    assert out.objective == pytest.approx(warm.objective, rel=1e-4)  # the same optimum
