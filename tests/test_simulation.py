"""Closed-loop verification: contact simulation, tracking, TV-LQR, balance, sweeps, CLI.

Outside sources named per test: free fall and Coulomb sliding (any mechanics textbook, e.g.
Meriam & Kraige, *Engineering Mechanics: Dynamics*); the inelastic (zero-restitution) impact of
Moreau's sweeping process (J. J. Moreau, "Unilateral contact and dry friction in finite freedom
dynamics", 1988); statics of a standing body (sum of forces zero); the finite-horizon discrete
LQR and its stationary limit, the discrete algebraic Riccati equation (SciPy
``scipy.linalg.solve_discrete_are``); the zero-order-hold discretization of a double integrator
(Franklin, Powell & Workman, *Digital Control of Dynamic Systems*, ch. 4).
"""
from __future__ import annotations

import math
import os

import numpy as np
import pytest
import scipy.linalg

from kipup.core import dynamics as dyn
from kipup.core.balance import static_contact_forces
from kipup.core.cli import HARDWARE_CAUTION, build_parser, main as cli_main
from kipup.core.contact_sim import ContactModel, ContactSim
from kipup.core.lqr import discretize, flight_lqr, tvlqr
from kipup.core.motion import Motion, PhaseSpan
from kipup.core.optimize import optimize
from kipup.core.robot import Link, Point, Robot
from kipup.core.sim_result import SimResult
from kipup.core.sweep import draw_samples, run_sweep
from kipup.core.templates import load_template
from kipup.core.trick import Box, Terrain
from kipup.core.tracking import Gains, simulate

G = 9.81
os.environ.setdefault("OMP_NUM_THREADS", "1")


# ----- fixtures ------------------------------------------------------------------------------------
@pytest.fixture(scope="module")
def solved():
    """Solved template motions, each solved once for the whole module on first use."""
    cache: dict[str, tuple] = {}

    def get(name: str):
        if name not in cache:
            trick, robot = load_template(name)
            motion, _ = optimize(trick, robot)
            assert motion.status in ("solved", "acceptable"), motion.status
            cache[name] = (trick, robot, motion)
        return cache[name]

    return get


def takeoff(motion: Motion) -> float:
    return [p for p in motion.phases if not p.contacts][0].start


def brick(mu: float = 0.5) -> Robot:
    """A single rigid body (0.4 m x 0.1 m, 2 kg) with two corner points at its bottom."""
    body = Link("brick", 2.0, (0.0, 0.0), 2.0 * (0.4 ** 2 + 0.1 ** 2) / 12.0)
    return Robot("brick", (body,), (), (Point("left", "brick", (-0.2, -0.05), mu),
                                        Point("right", "brick", (0.2, -0.05), mu)))


def standing_motion(robot: Robot) -> Motion:
    """The humanoid standing straight on toe and heel for 0.2 s, torques and forces from statics."""
    q = np.zeros(robot.nq)
    q[1] = 0.55  # feet 0.55 m below the hips
    f, tau = static_contact_forces(robot, q, ["toe", "heel"])
    K = 3
    return Motion(robot_name=robot.name, coord_names=list(robot.coord_names), joint_names=list(robot.joint_names),
                  contact_points=["toe", "heel"], t=np.linspace(0, 0.2, K), q=np.tile(q, (K, 1)),
                  qd=np.zeros((K, robot.nq)), qdd=np.zeros((K, robot.nq)), tau=np.tile(tau, (K, 1)),
                  forces=np.tile(f, (K, 1, 1)), phases=[PhaseSpan("stand", 0.0, 0.2, 0, K - 1, ["toe", "heel"])],
                  status="solved", trick_name="stand")


# ----- the contact model -----------------------------------------------------------------------------
def test_dropped_body_stops_on_impact_and_comes_to_rest():
    """Free fall reaches sqrt(2 g h) (textbook); the impact is inelastic (Moreau: zero restitution, the
    normal velocity of the touching points is zero right after it); then the body rests."""
    robot, dt = brick(), 1e-3
    sim = ContactSim(robot, Terrain(), dt)
    h = 0.2
    q, qd = np.array([0.0, 0.05 + h, 0.0]), np.zeros(3)
    vz_before = None
    first = None
    for k in range(1000):
        res = sim.step(q, qd, np.zeros(3))
        if res.contacts and vz_before is None:
            vz_before, first = qd[1], k
            # Stewart-Trinkle: this step closes the remaining gap exactly, without passing it
            assert res.q[1] == pytest.approx(0.05, abs=1e-9)
        if first is not None and k == first + 1:
            assert abs(res.qd[1]) < 1e-6  # and from then on the corners have no normal velocity
        q, qd = res.q, res.qd
    assert vz_before == pytest.approx(-math.sqrt(2 * G * h), rel=0.02)
    assert np.max(np.abs(qd)) < 1e-6
    assert q[1] == pytest.approx(0.05, abs=1e-4)


def test_tilted_drop_settles_flat_on_both_corners():
    robot, dt = brick(), 1e-3
    sim = ContactSim(robot, Terrain(), dt)
    q, qd = np.array([0.0, 0.3, 0.3]), np.zeros(3)
    for _ in range(2000):
        res = sim.step(q, qd, np.zeros(3))
        q, qd = res.q, res.qd
    assert abs(q[2]) < 1e-3 and np.max(np.abs(qd)) < 1e-4
    assert {c.point for c in res.contacts} == {"left", "right"}
    # statics: the two corners carry the weight, no net tangential force (sum of forces zero)
    fz = sum(c.impulse[1] for c in res.contacts) / dt
    fx = sum(c.impulse[0] for c in res.contacts) / dt
    assert fz == pytest.approx(2.0 * G, rel=1e-3) and abs(fx) < 1e-6


def test_sliding_body_stops_after_coulomb_distance():
    """A body sliding at v0 on ground with friction mu stops after v0^2 / (2 mu g) (Coulomb, textbook)."""
    mu, v0, dt = 0.4, 1.0, 1e-3
    robot = brick(mu)
    sim = ContactSim(robot, Terrain(), dt)
    q, qd = np.array([0.0, 0.05, 0.0]), np.array([v0, 0.0, 0.0])
    for _ in range(1000):
        res = sim.step(q, qd, np.zeros(3))
        q, qd = res.q, res.qd
    assert abs(qd[0]) < 1e-9
    assert q[0] == pytest.approx(v0 ** 2 / (2 * mu * G), rel=0.02)


def test_box_side_stops_a_point():
    """A frictionless body sliding into a box's front side (a face of the exact terrain) is stopped
    there: its corner never passes the side, and the inelastic impact takes out its forward speed."""
    terrain = Terrain(boxes=[Box("box", 0.5, 1.0, 0.3)])
    robot = brick(0.5)
    sim = ContactSim(robot, terrain, 1e-3, ContactModel(mu_scale=0.0))
    q, qd = np.array([0.0, 0.05, 0.0]), np.array([1.0, 0.0, 0.0])
    furthest, hit = -1.0, False
    for _ in range(600):
        res = sim.step(q, qd, np.zeros(3))
        q, qd = res.q, res.qd
        furthest = max(furthest, float(np.asarray(dyn.point_position(robot, q, "right")).reshape(-1)[0]))
        hit = hit or any(c.face == "box:front" for c in res.contacts)
    assert hit and furthest < 0.5 + 1e-3
    assert qd[0] < 0.2


def test_free_flight_keeps_momentum_to_first_order(solved):
    """In flight, linear momentum changes only by gravity and the angular momentum about the COM is
    constant (Newton-Euler); semi-implicit Euler keeps both to O(dt): the drift is reported."""
    trick, robot, motion = solved("reach_jump")
    q = motion.sample(takeoff(motion) + 0.05)
    sim = ContactSim(robot, Terrain(ground=-5.0), 1e-3)
    x, v = q["q"].copy(), q["qd"].copy()
    h0 = np.asarray(dyn.centroidal_momentum(robot, x, v)).reshape(-1)
    for _ in range(300):
        res = sim.step(x, v, np.zeros(robot.nq))
        x, v = res.q, res.qd
    h1 = np.asarray(dyn.centroidal_momentum(robot, x, v)).reshape(-1)
    m = robot.total_mass
    # measured drift over 0.3 s at dt = 1 ms: about 0.3 % of px, well under 1 %
    assert h1[1] == pytest.approx(h0[1], abs=0.01 * max(1.0, abs(h0[1])))
    assert h1[2] == pytest.approx(h0[2] - m * G * 0.3, abs=0.01 * m * G * 0.3)
    assert abs(h1[0] - h0[0]) < 0.02 * max(1.0, abs(h0[0]))


# ----- LQR -----------------------------------------------------------------------------------------
def test_zoh_of_double_integrator_matches_the_textbook():
    """Exact ZOH: A_d = [[1, T], [0, 1]], B_d = [[T^2/2], [T]] (Franklin, Powell & Workman)."""
    T = 0.01
    Ad, Bd = discretize(np.array([[0.0, 1.0], [0.0, 0.0]]), np.array([[0.0], [1.0]]), T)
    np.testing.assert_allclose(Ad, [[1, T], [0, 1]], atol=1e-14)
    np.testing.assert_allclose(Bd, [[T * T / 2], [T]], atol=1e-14)


def test_tvlqr_long_horizon_equals_scipy_dare():
    """The backward Riccati recursion converges to the DARE solution (SciPy solve_discrete_are)."""
    T = 0.01
    A, B = np.array([[1, T], [0, 1]]), np.array([[T * T / 2], [T]])
    Q, R = np.diag([1.0, 0.1]), np.array([[0.01]])
    K, P = tvlqr([A] * 3000, [B] * 3000, Q, R, np.zeros((2, 2)))
    P_inf = scipy.linalg.solve_discrete_are(A, B, Q, R)
    K_inf = np.linalg.solve(R + B.T @ P_inf @ B, B.T @ P_inf @ A)
    np.testing.assert_allclose(P[0], P_inf, rtol=1e-8)
    np.testing.assert_allclose(K[0], K_inf, rtol=1e-8)


def test_tvlqr_time_varying_equals_batch_least_squares():
    """For time-varying (A_k, B_k) the first gain equals the batch solution: stack the states as a
    linear function of x0 and all inputs and minimise the quadratic cost directly (numpy lstsq)."""
    rng = np.random.default_rng(3)
    N, n, m = 6, 3, 2
    A = [np.eye(n) + 0.1 * rng.standard_normal((n, n)) for _ in range(N)]
    B = [0.1 * rng.standard_normal((n, m)) for _ in range(N)]
    Q, R, Qf = np.diag([1.0, 2.0, 0.5]), np.diag([0.3, 0.1]), np.diag([5.0, 1.0, 2.0])
    K, _ = tvlqr(A, B, Q, R, Qf)
    # x_k = Phi_k x0 + sum_j Gam_kj u_j
    Phi, Gam = [np.eye(n)], [np.zeros((n, N * m))]
    for k in range(N):
        Phi.append(A[k] @ Phi[-1])
        g = A[k] @ Gam[-1]
        g[:, k * m:(k + 1) * m] += B[k]
        Gam.append(g)
    for x0 in np.eye(n):
        rows, rhs = [], []
        for k in range(N + 1):
            W = scipy.linalg.sqrtm(Qf if k == N else Q).real
            rows.append(W @ Gam[k])
            rhs.append(-W @ Phi[k] @ x0)
        Rs = scipy.linalg.sqrtm(R).real
        for k in range(N):
            row = np.zeros((m, N * m))
            row[:, k * m:(k + 1) * m] = Rs
            rows.append(row)
            rhs.append(np.zeros(m))
        u, *_ = np.linalg.lstsq(np.vstack(rows), np.concatenate(rhs), rcond=None)
        np.testing.assert_allclose(u[:m], -K[0] @ x0, atol=1e-10)


def test_lqr_reduces_landing_pitch_error_against_pd(solved):
    """Fixed takeoff errors (pitch rate, forward speed): TV-LQR lands with a smaller pitch error."""
    trick, robot, motion = solved("reach_jump")
    lqr = flight_lqr(motion, robot)
    cases = {"pitch rate +0.6": [0, 0, 0.6, 0, 0, 0, 0, 0], "pitch rate -0.6": [0, 0, -0.6, 0, 0, 0, 0, 0],
             "vx +0.3, pitch rate -0.4": [0.3, 0, -0.4, 0, 0, 0, 0, 0]}
    for name, offset in cases.items():
        errs = []
        for controller in (None, lqr):
            r = simulate(motion, robot, trick.terrain, start_time=takeoff(motion), start_qd_offset=offset,
                         lqr=controller, duration_after=0.0, balance=False)
            errs.append(abs(r.verdict.pitch_error_at_touchdown))
        pd_err, lqr_err = errs
        assert lqr_err < 0.7 * pd_err, (name, pd_err, lqr_err)


# ----- tracking and landing ----------------------------------------------------------------------------
def test_flight_from_planned_takeoff_reproduces_the_plan(solved):
    """Nominal model, no perturbation: from the planned takeoff state the simulated flight follows the
    plan within 2 cm (base x, z) and 0.05 rad (pitch) until touchdown."""
    trick, robot, motion = solved("reach_jump")
    r = simulate(motion, robot, trick.terrain, start_time=takeoff(motion), duration_after=0.0,
                 control_rate_hz=1000.0)
    flight = r.t < r.verdict.touchdown_time
    err = np.abs(r.q[flight] - r.q_plan[flight])
    assert err[:, 0].max() < 0.02 and err[:, 1].max() < 0.02 and err[:, 2].max() < 0.05
    assert abs(r.verdict.touchdown_time_error) < 0.01


@pytest.mark.parametrize("name", ["reach_jump", "box_jump", "backflip"])
def test_push_phase_tracks_the_plan_up_to_takeoff(solved, name):
    """From rest, joint PD + feedforward follows the planned push up to the planned takeoff within
    1 cm (base position) and 0.1 rad (pitch and joints); measured at most 2.5 mm and 0.069 rad.
    (Before the liftoff force was fixed at zero, the last push knots carried force peaks that no
    torque-limited robot reproduces, and this held only up to 50 ms before takeoff.)"""
    trick, robot, motion = solved(name)
    r = simulate(motion, robot, trick.terrain, duration_after=0.0)
    push = r.t < takeoff(motion)
    err = np.abs(r.q[push] - r.q_plan[push])
    assert err[:, :2].max() < 0.01 and err[:, 2:].max() < 0.1


@pytest.mark.parametrize("name", ["backflip", "reach_jump", "broad_jump", "box_jump"])
def test_template_lands_and_stands_still(solved, name):
    """From the planned takeoff, nominal model: the robot lands on its feet only and stands still
    one second after the (shifted) end of the landing phase."""
    trick, robot, motion = solved(name)
    r = simulate(motion, robot, trick.terrain, start_time=takeoff(motion), duration_after=1.0)
    v = r.verdict
    assert not v.diverged, v.reason
    assert set(v.touched) <= set(motion.phases[-1].contacts) and not v.other_contacts
    assert v.stands_still and v.success
    assert abs(v.pitch_error_at_touchdown) < 0.1


@pytest.mark.parametrize("name", ["backflip", "reach_jump", "broad_jump", "box_jump", "quadruped_jump"])
def test_whole_template_lands_and_stands_with_flight_lqr(solved, name):
    """The whole motion from rest, nominal model: PD tracking of the push, TV-LQR in flight, the
    stance QP after touchdown. The robot lands on its feet only and stands still one second after
    the (shifted) end of the landing phase."""
    trick, robot, motion = solved(name)
    r = simulate(motion, robot, trick.terrain, lqr=True, duration_after=1.0)
    v = r.verdict
    assert not v.diverged, v.reason
    assert set(v.touched) <= set(motion.phases[-1].contacts) and not v.other_contacts, v.touched
    assert v.stands_still and v.success
    assert abs(v.pitch_error_at_touchdown) < 0.1, v.pitch_error_at_touchdown
    assert abs(v.touchdown_time_error) < 0.03, v.touchdown_time_error


def test_balance_statics_of_a_standing_robot():
    """Standing still under the balance controller: total normal force = m g and no net tangential
    force (statics), and the statics helper gives the same."""
    trick, robot = load_template("reach_jump")
    motion = standing_motion(robot)
    r = simulate(motion, robot, Terrain(), duration_after=0.8)
    assert r.verdict.success
    tail = r.t > r.t[-1] - 0.1
    fz = r.forces[tail, :, 1].sum(axis=1).mean()
    fx = r.forces[tail, :, 0].sum(axis=1).mean()
    assert fz == pytest.approx(robot.total_mass * G, rel=5e-3)
    assert abs(fx) < 0.5
    f, _ = static_contact_forces(robot, motion.q[0], ["toe", "heel"])
    assert f[:, 1].sum() == pytest.approx(robot.total_mass * G, rel=1e-9) and abs(f[:, 0].sum()) < 1e-9


def test_result_json_round_trip(tmp_path):
    trick, robot = load_template("reach_jump")
    r = simulate(standing_motion(robot), robot, Terrain(), duration_after=0.05)
    path = tmp_path / "sim.json"
    r.to_json(path)
    back = SimResult.from_json(path)
    assert back == r and back.verdict.stands_still == r.verdict.stands_still


# ----- bad input and blow-ups --------------------------------------------------------------------------
def test_bad_input_names_the_field():
    trick, robot = load_template("reach_jump")
    motion = standing_motion(robot)
    terrain = Terrain()
    with pytest.raises(ValueError, match=r"gains.kp\[0\] \(hip\)"):
        simulate(motion, robot, terrain, gains=Gains([-1.0] * robot.nj, [1.0] * robot.nj))
    with pytest.raises(ValueError, match=r"gains.kd\[2\] \(ankle\)"):
        simulate(motion, robot, terrain, gains={"kp": [1.0] * 5, "kd": [1.0, 1.0, math.nan, 1.0, 1.0]})
    with pytest.raises(ValueError, match="gains.kp must have one value per joint"):
        simulate(motion, robot, terrain, gains={"kp": [1.0, 2.0], "kd": [1.0] * 5})
    with pytest.raises(ValueError, match="control_rate_hz"):
        simulate(motion, robot, terrain, control_rate_hz=300.0)
    with pytest.raises(ValueError, match="delay_s"):
        simulate(motion, robot, terrain, delay_s=-0.01)
    _, quadruped = load_template("quadruped_jump")
    with pytest.raises(ValueError, match="does not fit robot"):
        simulate(motion, quadruped, terrain)
    with pytest.raises(ValueError, match="sim_robot"):
        simulate(motion, robot, terrain, sim_robot=quadruped)


def test_absurd_gains_diverge_with_a_time_and_the_loop_ends():
    """Huge gains on motors with huge limits blow the sampled loop up: verdict 'diverged' with the time."""
    from dataclasses import replace

    trick, robot = load_template("reach_jump")
    strong = replace(robot, joints=tuple(replace(j, actuator=replace(j.actuator, peak_torque=1e9, stall_torque=1e9,
                                                                   no_load_speed=1e9)) for j in robot.joints))
    motion = standing_motion(robot)
    motion.q[:, 3] += 0.05  # a small initial error to excite it
    r = simulate(motion, robot, Terrain(), sim_robot=strong, balance=False, duration_after=1.0,
                 gains={"kp": [1e7] * 5, "kd": [1e5] * 5})
    v = r.verdict
    assert v.diverged and math.isfinite(v.diverged_time) and v.diverged_time < 1.2
    assert not v.success and np.all(np.isfinite(r.q))


# ----- sweeps ------------------------------------------------------------------------------------------------
def test_samples_are_seeded():
    _, robot = load_template("reach_jump")
    a, b, c = draw_samples(robot, 4, seed=5), draw_samples(robot, 4, seed=5), draw_samples(robot, 4, seed=6)
    assert a == b and a != c


@pytest.fixture(scope="module")
def sweep_case(solved):
    trick, robot, motion = solved("reach_jump")
    samples = draw_samples(robot, 3, seed=2)
    samples[1].crash = True
    kwargs = {"start_time": takeoff(motion), "duration_after": 0.3}
    return trick, robot, motion, samples, kwargs


def test_process_pool_sweep_survives_a_dying_worker(sweep_case, tmp_path):
    trick, robot, motion, samples, kwargs = sweep_case
    res = run_sweep(motion, robot, trick.terrain, samples=samples, workers=2, sim_kwargs=kwargs)
    assert [o.index for o in res.outcomes] == [0, 1, 2]
    assert res.outcomes[1].error == "worker died" and not res.outcomes[1].success
    assert not res.outcomes[0].error and not res.outcomes[2].error
    assert math.isfinite(res.outcomes[0].pitch_error) and math.isfinite(res.outcomes[2].pitch_error)
    again = run_sweep(motion, robot, trick.terrain, samples=[samples[0]], workers=1, sim_kwargs=kwargs)
    assert again.outcomes[0].pitch_error == res.outcomes[0].pitch_error  # reproducible
    res.plot(tmp_path / "sweep.png")
    assert (tmp_path / "sweep.png").stat().st_size > 1000
    assert res.summary_rows()[0] == ["quantity", "value"]


def test_dask_sweep_survives_a_dying_worker(sweep_case):
    dask = pytest.importorskip("dask")
    distributed = pytest.importorskip("distributed")
    trick, robot, motion, samples, kwargs = sweep_case
    with dask.config.set({"distributed.scheduler.allowed-failures": 0}):
        with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                      dashboard_address=None) as cluster, distributed.Client(cluster) as client:
            res = run_sweep(motion, robot, trick.terrain, samples=samples, client=client, sim_kwargs=kwargs)
    assert res.backend == "dask"
    assert res.outcomes[1].error == "worker died"
    assert not res.outcomes[0].error and not res.outcomes[2].error


# ----- CLI ---------------------------------------------------------------------------------------------------
def test_cli_simulate_and_help(solved, tmp_path, capsys):
    trick, robot, motion = solved("reach_jump")
    from kipup.core.trick_file import save_trick

    mpath, tpath, out = tmp_path / "motion.json", tmp_path / "trick.yaml", tmp_path / "sim.json"
    motion.to_json(mpath)
    save_trick(trick, tpath)
    rc = cli_main(["simulate", str(mpath), "--trick", str(tpath), "--from-takeoff", "--after", "0.5",
                   "-o", str(out)])
    text = capsys.readouterr().out
    assert rc in (0, 1) and "touchdown time" in text and out.is_file()
    assert cli_main(["simulate", str(mpath), "--trick", str(tpath), "--kp", "-3"]) == 2
    for cmd in ("simulate", "sweep"):
        with pytest.raises(SystemExit):
            build_parser().parse_args([cmd, "--help"])
        assert capsys.readouterr().out.rstrip().endswith(HARDWARE_CAUTION)
