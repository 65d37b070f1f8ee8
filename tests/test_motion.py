"""Motion: dense evaluation of the collocation scheme, metrics, files and robot checks.

Motions here are synthetic, built in the tests from closed-form trajectories on the bundled
humanoid's coordinates. Expected values are computed by hand in the comments beside them; the
humanoid's limits (hip: peak 120 N m, stall 132 N m, no-load 28 rad/s, velocity limit 26 rad/s;
knee: peak 120 N m; friction toe/heel 0.8, hand 0.6) come from ``core/data/robots/humanoid.yaml``.
"""
from __future__ import annotations

import json
import math
import os
import re

import numpy as np
import pytest

from kipup.core import motion as motion_mod
from kipup.core.dynamics import center_of_mass
from kipup.core.motion import (
    MOTION_CAUTION,
    MOTION_FORMAT,
    Impulse,
    Motion,
    PhaseSpan,
    Violation,
    render_report,
)
from kipup.core.robot_file import load_bundled


@pytest.fixture(scope="module")
def robot():
    return load_bundled("humanoid")


def build(robot, grids, q, qd, qdd, *, contacts=None, tau=None, forces=None, points=(), **kw):
    """A Motion on ``robot`` with phases on the knot-time ``grids`` (one array per phase).

    q, qd, qdd, tau: functions of the (K,) knot times returning (K, n) arrays, or arrays.
    forces: (K, len(points), 2) array or None (zeros).
    """
    contacts = contacts or [[] for _ in grids]
    t = np.concatenate(grids)
    K = t.size
    phases, first = [], 0
    for i, g in enumerate(grids):
        phases.append(PhaseSpan(f"p{i}", float(g[0]), float(g[-1]), first, first + len(g) - 1, list(contacts[i])))
        first += len(g)

    def ev(f, n):
        if f is None:
            return np.zeros((K, n))
        return np.asarray(f(t) if callable(f) else f, dtype=float)

    kw.setdefault("status", "solved")
    return Motion(robot_name=robot.name, coord_names=list(robot.coord_names), joint_names=list(robot.joint_names),
                  contact_points=list(points), t=t, q=ev(q, robot.nq), qd=ev(qd, robot.nq), qdd=ev(qdd, robot.nq),
                  tau=ev(tau, robot.nj), forces=np.zeros((K, len(points), 2)) if forces is None else forces,
                  phases=phases, **kw)


def two_grids():
    """A uniform phase on [0, 0.3] and a non-uniform one on [0.3, 0.8] (the boundary twice)."""
    return [np.linspace(0.0, 0.3, 5), np.array([0.3, 0.35, 0.47, 0.5, 0.66, 0.8])]


# ----- dense evaluation ----------------------------------------------------------------------
def cubic(robot, seed=0):
    rng = np.random.default_rng(seed)
    c = rng.normal(size=(4, robot.nq))  # q(t) = c0 + c1 t + c2 t^2 + c3 t^3 per coordinate
    q = lambda t: c[0] + np.outer(t, c[1]) + np.outer(t ** 2, c[2]) + np.outer(t ** 3, c[3])  # noqa: E731
    qd = lambda t: c[1] + np.outer(2 * t, c[2]) + np.outer(3 * t ** 2, c[3])  # noqa: E731
    qdd = lambda t: 2 * c[2] + np.outer(6 * t, c[3])  # noqa: E731
    return q, qd, qdd


def test_sample_reproduces_a_cubic_exactly(robot):
    # A cubic has linear qdd, which the scheme integrates exactly (core/transcription.py docstring),
    # so the dense evaluation must give the polynomial at any time, not only at the knots.
    q, qd, qdd = cubic(robot)
    m = build(robot, two_grids(), q, qd, qdd)
    times = np.concatenate([np.random.default_rng(1).uniform(0.0, 0.8, 200), [0.0, 0.3, 0.8, 0.123456]])
    s = m.sample(times)
    for key, f in (("q", q), ("qd", qd), ("qdd", qdd)):
        assert s[key].shape == (times.size, robot.nq)
        np.testing.assert_allclose(s[key], f(times), rtol=1e-12, atol=1e-12, err_msg=key)


def test_sample_agrees_with_the_transcription_defects(robot):
    # Knots built by integrating random qdd with the defect equations of core/transcription.py:
    #   qd[k+1] = qd[k] + h/2 (qdd[k] + qdd[k+1]),  q[k+1] = q[k] + h qd[k] + h^2/6 (2 qdd[k] + qdd[k+1])
    # so the evaluated cubic of interval k must arrive at knot k+1 (checked from the left).
    rng = np.random.default_rng(2)
    t = np.sort(np.r_[0.0, rng.uniform(0.0, 0.6, 9), 0.6])
    K = t.size
    qdd = rng.normal(size=(K, robot.nq)) * 5
    q, qd = np.zeros((K, robot.nq)), np.zeros((K, robot.nq))
    q[0], qd[0] = rng.normal(size=robot.nq), rng.normal(size=robot.nq)
    for k in range(K - 1):
        h = t[k + 1] - t[k]
        qd[k + 1] = qd[k] + h / 2 * (qdd[k] + qdd[k + 1])
        q[k + 1] = q[k] + h * qd[k] + h ** 2 / 6 * (2 * qdd[k] + qdd[k + 1])
    m = build(robot, [t], q, qd, qdd)
    left = m.sample(t[1:] - 1e-9)
    np.testing.assert_allclose(left["q"], q[1:], atol=1e-7)
    np.testing.assert_allclose(left["qd"], qd[1:], atol=1e-7)
    end = m.sample(t[-1])  # the final time is on the last interval, at s = h
    np.testing.assert_allclose(end["q"], q[-1], rtol=0, atol=1e-12)
    np.testing.assert_allclose(end["qd"], qd[-1], rtol=0, atol=1e-12)
    at = m.sample(t[:-1])  # a knot time gives that knot exactly
    assert np.array_equal(at["q"], q[:-1]) and np.array_equal(at["qd"], qd[:-1]) and np.array_equal(at["qdd"], qdd[:-1])


def test_sine_converges_at_the_expected_orders(robot):
    # Taylor's theorem on one interval (third derivative taken as (qdd[k+1] - qdd[k]) / h) gives
    # errors O(h^4) in q, O(h^3) in qd and O(h^2) in qdd (linear interpolation) for smooth data.
    w, phi = 7.0, np.linspace(0.1, 1.3, robot.nq)
    q = lambda t: np.sin(w * t[:, None] + phi)  # noqa: E731
    qd = lambda t: w * np.cos(w * t[:, None] + phi)  # noqa: E731
    qdd = lambda t: -w ** 2 * np.sin(w * t[:, None] + phi)  # noqa: E731
    dense = np.linspace(0.0, 1.0, 4001)
    errors = []
    for n in (8, 16, 32, 64):
        m = build(robot, [np.linspace(0.0, 1.0, n + 1)], q, qd, qdd)
        s = m.sample(dense)
        errors.append([np.abs(s["q"] - q(dense)).max(), np.abs(s["qd"] - qd(dense)).max(),
                       np.abs(s["qdd"] - qdd(dense)).max()])
    errors = np.array(errors)
    orders = np.log2(errors[:-1] / errors[1:])
    for col, expected in enumerate((4.0, 3.0, 2.0)):
        assert orders[-1, col] == pytest.approx(expected, abs=0.25), (col, orders[:, col])


def test_phase_boundary_uses_the_later_phase(robot):
    q, qd, qdd = cubic(robot, seed=3)
    grids = two_grids()
    m = build(robot, grids, q, qd, qdd, tau=lambda t: np.outer(t, np.arange(1, robot.nj + 1)))
    b = m.phases[1].first_knot
    m.qd[b] += 1.5  # an impact: the post-impact copy of the boundary knot has other velocities
    m.tau[b] += 10.0
    at = m.sample(0.3)
    assert np.array_equal(at["qd"], m.qd[b])
    before = m.sample(0.3 - 1e-9)
    np.testing.assert_allclose(before["qd"], m.qd[b - 1], atol=1e-7)
    assert np.array_equal(m.sample_torques(0.3), m.tau[b])
    assert m.phase_at(0.3).name == "p1" and m.phase_at(0.2999).name == "p0"


def test_sample_torques_linear_within_a_phase(robot):
    grids = two_grids()
    rng = np.random.default_rng(4)
    K = sum(len(g) for g in grids)
    tau = rng.normal(size=(K, robot.nj)) * 50
    m = build(robot, grids, None, None, None, tau=tau)
    t = m.t
    for k in range(K - 1):
        if t[k + 1] == t[k]:
            continue
        mid = t[k] + 0.25 * (t[k + 1] - t[k])
        np.testing.assert_allclose(m.sample_torques(mid), 0.75 * tau[k] + 0.25 * tau[k + 1], rtol=1e-12, atol=1e-12)
    assert m.sample_torques(np.array([0.1, 0.2])).shape == (2, robot.nj)


def test_scalar_time_gives_one_row(robot):
    m = build(robot, two_grids(), *cubic(robot))
    s = m.sample(0.5)
    assert s["q"].shape == (robot.nq,) and s["qd"].shape == (robot.nq,)
    assert m.sample_torques(0.5).shape == (robot.nj,)


@pytest.mark.parametrize("bad", [-1e-6, 0.8 + 1e-6, float("nan"), 5.0])
def test_out_of_range_times_raise(robot, bad):
    m = build(robot, two_grids(), *cubic(robot))
    with pytest.raises(ValueError, match=r"\[0\.0, 0\.8\] s"):
        m.sample(np.array([0.1, bad, 0.2]))
    with pytest.raises(ValueError, match=r"\[0\.0, 0\.8\] s"):
        m.sample_torques(bad)


def test_two_dimensional_times_raise(robot):
    m = build(robot, two_grids(), *cubic(robot))
    with pytest.raises(ValueError, match="1-D"):
        m.sample(np.zeros((2, 2)))


# ----- construction checks -----------------------------------------------------------------
def test_construction_rejects_inconsistent_data(robot):
    m = build(robot, two_grids(), *cubic(robot), contacts=[["toe"], []], points=["toe"])
    base = m.to_dict()

    def variant(**changes):
        d = json.loads(json.dumps(base))
        d.update(changes)
        return d

    with pytest.raises(ValueError, match="q must have shape"):
        Motion.from_dict(variant(q=np.zeros((m.K, robot.nq + 1)).tolist()))
    phases = json.loads(json.dumps(base["phases"]))
    phases[1]["first_knot"] = 4
    with pytest.raises(ValueError, match="first_knot must be 5"):
        Motion.from_dict(variant(phases=phases))
    forces = np.zeros((m.K, 1, 2))
    forces[7, 0, 1] = 10.0  # knot 7 is in the flight phase
    with pytest.raises(ValueError, match=r"forces\[7, 0\].*not in contact"):
        Motion.from_dict(variant(forces=forces.tolist()))
    t = m.t.copy()
    t[2], t[3] = t[3], t[2]
    with pytest.raises(ValueError, match="non-decreasing"):
        Motion.from_dict(variant(t=t.tolist()))
    with pytest.raises(ValueError, match="status"):
        Motion.from_dict(variant(status="done"))
    with pytest.raises(ValueError, match="format"):
        Motion.from_dict(variant(format="kipup-motion/0"))


# ----- files ----------------------------------------------------------------------------------
def rich_motion(robot):
    """Random data with awkward floats, contacts, an impact, impulses and a report."""
    rng = np.random.default_rng(5)
    grids = [np.linspace(0.0, 0.25, 4), np.linspace(0.25, 0.6, 5), np.linspace(0.6, 0.9, 4)]
    K = sum(len(g) for g in grids)
    q = rng.normal(size=(K, robot.nq))
    q[0, :6] = [1 / 3, 0.1, 1e-300, 5e-324, -0.0, 1e300]
    points = ["toe", "heel", "hand"]
    contacts = [["toe", "heel"], [], ["toe", "hand"]]
    forces = np.zeros((K, 3, 2))
    forces[0:4, 0] = rng.normal(size=(4, 2)) * 100
    forces[0:4, 1] = rng.normal(size=(4, 2)) * 100
    forces[9:13, 0] = rng.normal(size=(4, 2)) * 100
    forces[9:13, 2] = rng.normal(size=(4, 2)) * 100
    return build(robot, grids, q, rng.normal(size=(K, robot.nq)), rng.normal(size=(K, robot.nq)),
                 tau=rng.normal(size=(K, robot.nj)) * 30, forces=forces, points=points, contacts=contacts,
                 impulses=[Impulse(0.6, "p2", "toe", (0.1, 12.345678901234567)),
                           Impulse(0.6, "p2", "hand", (-2 / 3, 7.0))],
                 status="acceptable", iterations=123, solve_time=4.56789, objective=1 / 7, trick_name="box hop",
                 report=[Violation("torque", "knee", 0.21, 132.4, 120.0),
                         Violation("friction", "toe", 0.7, 50.0, 40.0, "custom text")])


def assert_same(a: Motion, b: Motion):
    for name in ("t", "q", "qd", "qdd", "tau", "forces"):
        x, y = getattr(a, name), getattr(b, name)
        assert y.dtype == np.float64 and x.shape == y.shape and np.array_equal(x, y), name
    assert a == b


def test_json_round_trip_is_exact(robot, tmp_path):
    m = rich_motion(robot)
    path = tmp_path / "hop.motion.json"
    m.to_json(path)
    raw = json.loads(path.read_text(encoding="utf-8"))
    assert raw["format"] == MOTION_FORMAT == "kipup-motion/1"
    assert raw["caution"] == MOTION_CAUTION
    assert "safety rules" in raw["caution"]
    back = Motion.from_json(path)
    assert_same(m, back)
    assert back.impulses[0].impulse == (0.1, 12.345678901234567)
    assert back.q[0, 3] == 5e-324 and math.copysign(1.0, back.q[0, 4]) == -1.0
    assert [p.name for p in os.scandir(tmp_path)] == ["hop.motion.json"]  # no temp file left


def test_npz_round_trip_is_exact(robot, tmp_path):
    m = rich_motion(robot)
    path = tmp_path / "hop"  # written at exactly this path, no ".npz" appended
    m.to_npz(path)
    assert [p.name for p in os.scandir(tmp_path)] == ["hop"]
    with np.load(path, allow_pickle=False) as data:
        assert np.array_equal(data["q"], m.q) and data["q"].dtype == np.float64  # arrays stored natively
        meta = json.loads(str(data["meta"]))
    assert meta["format"] == MOTION_FORMAT and meta["caution"] == MOTION_CAUTION
    assert_same(m, Motion.from_npz(path))


def test_dict_round_trip(robot):
    m = rich_motion(robot)
    d = m.to_dict()
    json.dumps(d, allow_nan=False)  # plain data
    assert_same(m, Motion.from_dict(d))
    other = Motion.from_dict(d)
    other.q[3, 4] += 1e-15
    assert other != m


@pytest.mark.parametrize("field,where", [
    ("q", lambda m: m.q.__setitem__((5, 3), np.nan)),
    ("qd", lambda m: m.qd.__setitem__((0, 0), np.nan)),
    ("qdd", lambda m: m.qdd.__setitem__((12, 7), np.inf)),
    ("tau", lambda m: m.tau.__setitem__((2, 1), np.nan)),
    ("forces", lambda m: m.forces.__setitem__((1, 0, 1), np.nan)),
    ("t", lambda m: m.t.__setitem__(12, np.nan)),
    ("objective", lambda m: setattr(m, "objective", float("nan"))),
    ("impulses[1].impulse[0]", lambda m: setattr(m.impulses[1], "impulse", (float("nan"), 1.0))),
    ("report[0].amount", lambda m: setattr(m.report[0], "amount", float("nan"))),
])
@pytest.mark.parametrize("fmt", ["json", "npz"])
def test_nan_is_refused_and_nothing_written(robot, tmp_path, field, where, fmt):
    m = rich_motion(robot)
    where(m)
    write = m.to_json if fmt == "json" else m.to_npz
    fresh = tmp_path / f"fresh.{fmt}"
    with pytest.raises(ValueError, match="^" + re.escape(field) + r"(\[| is)"):
        write(fresh)
    assert not fresh.exists()
    old = tmp_path / f"old.{fmt}"
    old.write_bytes(b"previous contents")
    with pytest.raises(ValueError, match="refusing to write"):
        write(old)
    assert old.read_bytes() == b"previous contents"
    assert sorted(p.name for p in os.scandir(tmp_path)) == [f"old.{fmt}"]


@pytest.mark.parametrize("fmt", ["json", "npz"])
def test_failed_replace_leaves_the_old_file(robot, tmp_path, monkeypatch, fmt):
    m = rich_motion(robot)
    old = tmp_path / f"old.{fmt}"
    old.write_bytes(b"previous contents")

    def broken(src, dst):
        raise OSError("disk full")

    monkeypatch.setattr(motion_mod.os, "replace", broken)
    with pytest.raises(OSError, match="disk full"):
        (m.to_json if fmt == "json" else m.to_npz)(old)
    assert old.read_bytes() == b"previous contents"
    assert [p.name for p in os.scandir(tmp_path)] == [f"old.{fmt}"]


# ----- metrics --------------------------------------------------------------------------------
def test_metrics_constant_torque_and_speed(robot):
    # Stance 0.2 s on the toe, then 0.3 s of flight; T = 0.5 s. Hip: tau = 30 N m, qd = 14 rad/s
    # (same sign): work = energy = 30 * 14 * 0.5 = 210 J, power 420 W, envelope ratio
    # 30 / (132 (1 - 14/28)) = 30/66. Knee: tau = 20, qd = -10 (opposite signs): positive work 0,
    # energy 20 * 10 * 0.5 = 100 J, ratio 20/120. Pitch -4 rad/s: total rotation -2 rad.
    grids = [np.linspace(0.0, 0.2, 5), np.linspace(0.2, 0.5, 7)]
    ih, ik = robot.coord_index("hip"), robot.coord_index("knee")
    qd_const = np.zeros(robot.nq)
    qd_const[[2, ih, ik]] = [-4.0, 14.0, -10.0]
    tau_const = np.zeros(robot.nj)
    tau_const[[0, 1]] = [30.0, 20.0]
    K = 12
    forces = np.zeros((K, 1, 2))
    forces[:5, 0] = [0.0, 200.0]
    m = build(robot, grids, lambda t: np.outer(t, qd_const), lambda t: np.tile(qd_const, (t.size, 1)), None,
              tau=lambda t: np.tile(tau_const, (t.size, 1)), forces=forces, points=["toe"],
              contacts=[["toe"], []])
    mm = m.metrics(robot)
    hip, knee, ankle = mm.joint("hip"), mm.joint("knee"), mm.joint("ankle")
    assert hip.positive_work == pytest.approx(210.0, rel=1e-12)
    assert hip.energy == pytest.approx(210.0, rel=1e-12)
    assert hip.peak_power == pytest.approx(420.0)
    assert hip.peak_torque == 30.0 and hip.torque_limit == 120.0
    assert hip.peak_speed == pytest.approx(14.0) and hip.speed_limit == 26.0
    assert hip.envelope_ratio == pytest.approx(30.0 / 66.0)
    assert knee.positive_work == 0.0
    assert knee.energy == pytest.approx(100.0, rel=1e-12)
    assert knee.envelope_ratio == pytest.approx(20.0 / 120.0)
    assert ankle.energy == 0.0 and ankle.envelope_ratio == 0.0
    assert mm.total_positive_work == pytest.approx(210.0) and mm.total_energy == pytest.approx(310.0)
    assert mm.flight_time == pytest.approx(0.3)
    assert mm.duration == pytest.approx(0.5)
    assert mm.total_rotation == pytest.approx(-2.0)
    assert mm.min_normal_force == 200.0 and mm.friction_margin == pytest.approx(0.8)
    rows = mm.as_rows()
    assert rows[0][0] == "joint" and [r[0] for r in rows[1:]] == list(robot.joint_names)
    assert rows[1][6] == "210"  # hip positive work, J
    table = mm.as_table()
    assert "hip" in table and "210" in table and "flight time" in table


def test_envelope_beyond_no_load_speed_is_infinite(robot):
    # hip no-load speed 28 rad/s: any torque in the direction of a 30 rad/s motion is impossible.
    qd = np.zeros(robot.nq)
    qd[robot.coord_index("hip")] = 30.0
    tau = np.zeros(robot.nj)
    tau[0] = 1.0
    m = build(robot, [np.linspace(0, 0.1, 3)], None, lambda t: np.tile(qd, (t.size, 1)), None,
              tau=lambda t: np.tile(tau, (t.size, 1)))
    assert m.metrics(robot).joint("hip").envelope_ratio == math.inf


def test_peak_speed_between_knots(robot):
    # One interval, h = 0.2 s, qd0 = 0, qdd from +10 to -10 rad/s^2: qd(s) = 10 s - 50 s^2 is 0 at
    # both knots and peaks at s = 0.1 s with 10 * 0.1 - 50 * 0.01 = 0.5 rad/s.
    ik = robot.coord_index("knee")
    qdd = np.zeros((2, robot.nq))
    qdd[:, ik] = [10.0, -10.0]
    m = build(robot, [np.array([0.0, 0.2])], None, None, qdd)
    knee = m.metrics(robot).joint("knee")
    assert knee.peak_speed == pytest.approx(0.5, rel=1e-12)
    assert knee.peak_speed_time == pytest.approx(0.1, rel=1e-12)


def test_apex_height_of_the_com(robot):
    # Fixed joints and pitch: the COM moves with the base, so its height is base_z plus the
    # COM height at the base origin (translation invariance); base_z = 0.9 + 2 t - 4.905 t^2 on
    # knots 0, 0.05 .. 0.4: the highest knot is t = 0.2 s (true apex 2/9.81 = 0.2039 s).
    pose = np.zeros(robot.nq)
    pose[robot.coord_index("knee")] = 0.4
    pose[robot.coord_index("hip")] = -0.3
    offset = float(center_of_mass(robot, pose)[1])
    z = lambda t: 0.9 + 2 * t - 4.905 * t ** 2  # noqa: E731

    def q(t):
        out = np.tile(pose, (t.size, 1))
        out[:, 1] = z(t)
        return out

    m = build(robot, [np.linspace(0.0, 0.4, 9)], q, None, None)
    mm = m.metrics(robot)
    assert mm.apex_time == pytest.approx(0.2)
    assert mm.apex_com_height == pytest.approx(z(0.2) + offset, abs=1e-12)
    assert mm.flight_time == pytest.approx(0.4) and mm.friction_margin is None and mm.min_normal_force is None


def test_friction_margin_and_min_normal_force(robot):
    # margin (mu fz - |fx|) / fz per stance knot; mu toe = heel = 0.8, hand = 0.6.
    # stance (toe, heel): toe (30,100) -> 0.5, (-35,50) -> 0.1, (0,80) -> 0.8;
    #                     heel (0,20) -> 0.8, (2,10) -> 0.6, (-4,40) -> 0.7
    # flight: no contacts (zero forces, not counted)
    # landing (toe, hand): toe (0,300) -> 0.8, (100,200) -> 0.3, (6,60) -> 0.7;
    #                      hand (20,100) -> 0.4, (55,100) -> 0.05, (0,30) -> 0.6
    # worst: 0.05 at the hand, t = 0.6 s (with the toe's mu 0.8 it would be 0.25 and the toe's
    # 0.1 would win); min normal force 10 N (heel, t = 0.1 s).
    grids = [np.linspace(0.0, 0.2, 3), np.linspace(0.2, 0.5, 3), np.linspace(0.5, 0.7, 3)]
    points = ["toe", "heel", "hand"]
    f = np.zeros((9, 3, 2))
    f[0:3, 0] = [(30, 100), (-35, 50), (0, 80)]
    f[0:3, 1] = [(0, 20), (2, 10), (-4, 40)]
    f[6:9, 0] = [(0, 300), (100, 200), (6, 60)]
    f[6:9, 2] = [(20, 100), (55, 100), (0, 30)]
    m = build(robot, grids, None, None, None, forces=f, points=points,
              contacts=[["toe", "heel"], [], ["toe", "hand"]])
    mm = m.metrics(robot)
    assert mm.friction_margin == pytest.approx(0.05)
    assert (mm.friction_margin_point, mm.friction_margin_time) == ("hand", 0.6)
    assert mm.min_normal_force == 10.0
    assert (mm.min_normal_force_point, mm.min_normal_force_time) == ("heel", 0.1)
    assert mm.flight_time == pytest.approx(0.3)


def test_sliding_without_normal_force_has_minus_infinite_margin(robot):
    f = np.zeros((3, 1, 2))
    f[:, 0] = [(0, 50), (5, 0), (0, 0)]
    m = build(robot, [np.linspace(0, 0.2, 3)], None, None, None, forces=f, points=["toe"], contacts=[["toe"]])
    mm = m.metrics(robot)
    assert mm.friction_margin == -math.inf and mm.friction_margin_time == 0.1
    assert mm.min_normal_force == 0.0



def test_friction_margin_leaves_out_unloaded_knots(robot):
    # A push whose last knot is a liftoff: the solver leaves noise there (fz = -3e-7 N with
    # fx = 1e-6 N, as in the solved backflip), whose ratio (mu fz - |fx|) / fz is -inf or huge.
    # Loaded knots: (10, 100) -> 0.8 - 0.1 = 0.7 and (20, 50) -> 0.8 - 0.4 = 0.4 (toe mu 0.8).
    # The default min_load is 1 % of the humanoid's weight (19.7 kg * 9.81 m/s^2 -> 1.93 N).
    f = np.zeros((4, 1, 2))
    f[:, 0] = [(10, 100), (20, 50), (1e-6, 2e-7), (1e-6, -3e-7)]
    m = build(robot, [np.linspace(0, 0.3, 4)], None, None, None, forces=f, points=["toe"], contacts=[["toe"]])
    mm = m.metrics(robot)
    assert mm.min_load == pytest.approx(0.01 * robot.total_mass * robot.gravity)
    assert mm.friction_margin == pytest.approx(0.4) and mm.friction_margin_time == pytest.approx(0.1)
    assert mm.unloaded_knots == 2
    text = dict(mm.summary_rows())["friction margin"]
    assert text.startswith("0.400 (toe, t = 0.1 s") and "2 unloaded knots" in text and "inf" not in text
    # with no threshold the liftoff knot's noise decides, as before
    assert m.metrics(robot, min_load=0.0).friction_margin == -math.inf
    # an explicit threshold above every load: nothing is loaded, the margin says so in words
    none = m.metrics(robot, min_load=500.0)
    assert none.friction_margin is None and none.unloaded_knots == 4
    assert dict(none.summary_rows())["friction margin"] == "n/a (no load)"
    with pytest.raises(ValueError, match="min_load"):
        m.metrics(robot, min_load=-1.0)

# ----- robot checks --------------------------------------------------------------------------
def test_a_motion_from_another_robot_is_rejected(robot):
    m = build(robot, two_grids(), *cubic(robot))
    other = load_bundled("quadruped")
    with pytest.raises(ValueError, match=r"does not fit robot 'skitter'.*coordinates"):
        m.check_robot(other)
    with pytest.raises(ValueError, match="does not fit robot"):
        m.metrics(other)
    m.check_robot(robot)  # its own robot is fine


def test_robot_checks_name_order_and_points(robot):
    m = build(robot, two_grids(), *cubic(robot))
    d = m.to_dict()
    d["robot_name"] = "someone_else"
    renamed = Motion.from_dict(d)
    with pytest.raises(ValueError, match="made for robot 'someone_else'"):
        renamed.check_robot(robot)
    renamed.check_robot(robot, allow_other_name=True)
    d = m.to_dict()
    d["joint_names"] = ["knee", "hip", "ankle", "shoulder", "elbow"]
    d["coord_names"] = ["base_x", "base_z", "base_pitch"] + d["joint_names"]
    with pytest.raises(ValueError, match="coordinates are"):
        Motion.from_dict(d).check_robot(robot)
    head = build(robot, [np.linspace(0, 0.2, 3)], None, None, None, points=["head"], contacts=[["head"]])
    with pytest.raises(ValueError, match="no friction"):
        head.check_robot(robot)
    nowhere = build(robot, [np.linspace(0, 0.2, 3)], None, None, None, points=["tail"], contacts=[["tail"]])
    with pytest.raises(ValueError, match=r"\['tail'\] are not points"):
        nowhere.check_robot(robot)


# ----- report --------------------------------------------------------------------------------
def test_report_text(robot):
    v = Violation("torque", "knee", 0.21, 132.0, 120.0)
    assert v.text() == "knee torque 132 N m exceeds its 120 N m limit at t = 0.21 s"
    low = Violation("normal_force", "toe", 0.5, -3.25, 0.0)
    assert low.text() == "toe normal force -3.25 N is below its 0 N minimum at t = 0.5 s"
    assert Violation("speed", "hip", 1.2345, 27.5, 26.0).text() == \
        "hip speed 27.5 rad/s exceeds its 26 rad/s limit at t = 1.234 s"
    assert Violation("torque", "hip", 0.1, 1.0, 0.5, "my own words").text() == "my own words"
    m = build(robot, two_grids(), *cubic(robot), report=[v, low])
    text = m.report_text()
    assert text.splitlines() == [
        "2 limit violations:",
        "- knee torque 132 N m exceeds its 120 N m limit at t = 0.21 s (phase 'p0')",
        "- toe normal force -3.25 N is below its 0 N minimum at t = 0.5 s (phase 'p1')",
    ]
    assert render_report([]) == "No limit violations."
