"""Export of motions for a controller: round trips, metadata, gains, limits and file errors.

Synthetic motions are built on the bundled humanoid like tests/test_motion.py does: closed-form
cubics well inside the limits of core/data/robots/humanoid.yaml (hip peak torque 120 N m after
lumping, velocity limit 26 rad/s; knee range 0 .. 2.6 rad). One solved motion (the reach_jump
template) checks the export of a real optimizer result.

Outside source for the gain rule: the standard second-order closed loop of a PD-controlled
inertia (a control textbook), ``M s^2 + kd s + kp`` with natural frequency ``wn = sqrt(kp / M)``
and damping ratio ``zeta = kd / (2 sqrt(kp M))``, so ``kp = M wn^2`` and ``kd = 2 zeta wn M``.
"""
from __future__ import annotations

import hashlib
import json
import math
import os
from pathlib import Path

import numpy as np
import pytest

from kipup.core.cli import main
from kipup.core.dynamics import crba
from kipup.core.export import (
    EXPORT_CAUTION,
    EXPORT_FORMAT,
    ExportError,
    export_motion,
    import_export,
    robot_hash,
)
from kipup.core.motion import Motion, PhaseSpan
from kipup.core.robot_file import load_bundled, load_robot, robot_to_dict, save_robot

CAUTION = ("Simulate first; run on hardware only with reduced gains and torque limits, a harness or gantry, a clear "
           "area and an emergency stop, under your lab's safety rules and local regulations.")
RATE = 100.0  # Hz; the synthetic knots are 0.05 s apart (20 Hz)


@pytest.fixture(scope="module")
def robot():
    return load_bundled("humanoid")


CENTRE = {"hip": -0.3, "knee": 0.8, "ankle": 0.1, "shoulder": -0.5, "elbow": -0.8}


def synthetic(robot, *, tau_scale=5.0, edit=None) -> Motion:
    """Stance on toe and heel over [0, 0.3] s, flight over [0.3, 0.8] s; every coordinate a cubic in t."""
    grids = [np.linspace(0.0, 0.3, 7), np.linspace(0.3, 0.8, 11)]
    t = np.concatenate(grids)
    K, nq, nj = t.size, robot.nq, robot.nj
    rng = np.random.default_rng(3)
    c = rng.uniform(-0.3, 0.3, size=(4, nq))
    c[0, 3:] = [CENTRE[n] for n in robot.joint_names]
    c[0, 1] = 0.55
    q = c[0] + np.outer(t, c[1]) + np.outer(t ** 2, c[2]) + np.outer(t ** 3, c[3])
    qd = c[1] + np.outer(2 * t, c[2]) + np.outer(3 * t ** 2, c[3])
    qdd = 2 * c[2] + np.outer(6 * t, c[3])
    tau = tau_scale * np.cos(5 * t)[:, None] * np.linspace(0.5, 1.0, nj)
    forces = np.zeros((K, 2, 2))
    forces[:7, :, 1] = 80.0 + 10 * np.arange(7)[:, None]
    forces[:7, :, 0] = 5.0
    arrays = dict(t=t, q=q, qd=qd, qdd=qdd, tau=tau, forces=forces)
    if edit:
        edit(arrays)
    phases = [PhaseSpan("push", 0.0, 0.3, 0, 6, ["toe", "heel"]), PhaseSpan("flight", 0.3, 0.8, 7, 17, [])]
    return Motion(robot_name=robot.name, coord_names=list(robot.coord_names), joint_names=list(robot.joint_names),
                  contact_points=["toe", "heel"], phases=phases, status="solved", trick_name="synthetic", **arrays)


@pytest.fixture(scope="module")
def motion(robot):
    return synthetic(robot)


# ----------------------------------------------------------------------------------------
# round trips
# ----------------------------------------------------------------------------------------
@pytest.mark.parametrize("suffix", ["csv", "json", "npz"])
def test_round_trip_reproduces_the_dense_evaluation(robot, motion, tmp_path: Path, suffix):
    path = tmp_path / f"out.{suffix}"
    meta = export_motion(motion, robot, path, RATE)
    times, q, qd, tau, back = import_export(path)
    n = int(math.floor(0.8 * RATE + 1e-9)) + 1
    assert meta["n_samples"] == n == times.size
    assert np.array_equal(times, np.arange(n) / RATE)
    s = motion.sample(times)
    # q at the export rate equals motion.sample at those times (CSV too: floats are written by repr)
    np.testing.assert_allclose(q, s["q"], rtol=0, atol=1e-12)
    assert np.array_equal(q, s["q"]) and np.array_equal(qd, s["qd"])
    assert np.array_equal(tau, motion.sample_torques(times))
    assert np.array_equal(back["forces"], motion.sample_forces(times))
    # contact flags follow the phases, the later phase at the boundary t = 0.3 s
    expected = np.repeat((times < 0.3 - 1e-12)[:, None], 2, axis=1)
    assert np.array_equal(back["contact"], expected)
    for key in ("format", "joint_names", "coord_names", "robot_sha256", "gains", "caution", "columns"):
        assert back[key] == meta[key]


def test_csv_layout(robot, motion, tmp_path: Path):
    path = tmp_path / "out.csv"
    export_motion(motion, robot, path, RATE)
    lines = path.read_text(encoding="utf-8").splitlines()
    header = [line for line in lines if line.startswith("#")]
    assert f"# CAUTION: {CAUTION}" in header
    for line in header[2:]:  # one metadata key per JSON line
        assert len(json.loads(line[2:])) == 1
    columns = lines[len(header)].split(",")
    assert columns[:4] == ["time", "q_base_x", "q_base_z", "q_base_pitch"]
    assert "tau_knee" in columns and "qd_elbow" in columns and "fz_toe" in columns and columns[-1] == "contact_heel"
    assert len(lines) - len(header) - 1 == 81
    assert "nan" not in path.read_text().lower()


def test_metadata(robot, motion, tmp_path: Path):
    meta = export_motion(motion, robot, tmp_path / "out.json", RATE)
    assert meta["format"] == EXPORT_FORMAT and meta["caution"] == CAUTION == EXPORT_CAUTION
    assert meta["kipup_version"] == "0.1.0"
    assert meta["joint_names"] == list(robot.joint_names) and meta["coord_names"] == list(robot.coord_names)
    assert meta["units"]["q"]["base_x"] == "m" and meta["units"]["q"]["knee"] == "rad"
    assert meta["units"]["qd"]["hip"] == "rad/s" and meta["units"]["tau"] == "N m"
    assert meta["phases"] == [{"name": "push", "start": 0.0, "end": 0.3, "contacts": ["toe", "heel"]},
                              {"name": "flight", "start": 0.3, "end": 0.8, "contacts": []}]
    assert meta["contact_schedule"] == {"toe": [[0.0, 0.3]], "heel": [[0.0, 0.3]]}
    assert meta["per_side"] == {name: 0.5 for name in robot.joint_names}  # every humanoid joint is a pair
    assert meta["warnings"] == []
    # robot hash: sha256 of the canonical robot document, the same after a save/load round trip
    canonical = json.dumps(robot_to_dict(robot), sort_keys=True, separators=(",", ":"))
    assert meta["robot_sha256"] == hashlib.sha256(canonical.encode()).hexdigest() == robot_hash(robot)
    save_robot(robot, tmp_path / "copy.yaml")
    assert robot_hash(load_robot(tmp_path / "copy.yaml")) == meta["robot_sha256"]
    assert meta["peaks"]["hip"]["abs_tau"] <= robot.joints[0].actuator.peak_torque


def test_suggested_gains_follow_the_stated_rule(robot, motion, tmp_path: Path):
    meta = export_motion(motion, robot, tmp_path / "out.npz", RATE)
    q0 = motion.sample(motion.t0)["q"]
    M = np.asarray(crba(robot, q0))
    wn = 2 * math.pi * 10.0
    for j, name in enumerate(robot.joint_names):
        g = meta["gains"]["joints"][name]
        m_jj = M[3 + j, 3 + j]
        assert g["inertia"] == pytest.approx(m_jj, rel=1e-12)
        assert g["kp"] == pytest.approx(m_jj * wn ** 2, rel=1e-12)
        assert g["kd"] == pytest.approx(2 * 0.7 * wn * m_jj, rel=1e-12)
    # the closed loop M s^2 + kd s + kp has the stated natural frequency and damping ratio
    g = meta["gains"]["joints"]["knee"]
    assert math.sqrt(g["kp"] / g["inertia"]) == pytest.approx(wn)
    assert g["kd"] / (2 * math.sqrt(g["kp"] * g["inertia"])) == pytest.approx(0.7)


def test_gain_overrides(robot, motion, tmp_path: Path):
    meta = export_motion(motion, robot, tmp_path / "a.json", RATE, kp={"knee": 50.0}, kd=[1, 2, 3, 4, 5])
    joints = meta["gains"]["joints"]
    assert joints["knee"]["kp"] == 50.0 and joints["knee"]["kp_overridden"]
    assert not joints["hip"]["kp_overridden"] and joints["hip"]["kp"] > 0
    assert [joints[n]["kd"] for n in robot.joint_names] == [1, 2, 3, 4, 5]
    slow = export_motion(motion, robot, tmp_path / "b.json", RATE, bandwidth_hz=5.0)["gains"]["joints"]["hip"]
    assert slow["kp"] == pytest.approx(joints["hip"]["kp"] / 4)
    with pytest.raises(ExportError, match="unknown joints"):
        export_motion(motion, robot, tmp_path / "c.json", RATE, kp={"wrist": 1.0})
    with pytest.raises(ExportError, match=r"kd\['hip'\] must be a finite number >= 0"):
        export_motion(motion, robot, tmp_path / "c.json", RATE, kd={"hip": -1.0})
    assert not (tmp_path / "c.json").exists()


def test_format_from_suffix_or_fmt(robot, motion, tmp_path: Path):
    path = tmp_path / "trajectory.dat"
    export_motion(motion, robot, path, RATE, fmt="csv")
    assert path.read_text().startswith("# kipup motion export")
    assert import_export(path)[0].size == 81
    with pytest.raises(ExportError, match="cannot tell the format"):
        export_motion(motion, robot, tmp_path / "x.txt", RATE)
    with pytest.raises(ExportError, match="fmt must be one of"):
        export_motion(motion, robot, tmp_path / "x.csv", RATE, fmt="xlsx")


# ----------------------------------------------------------------------------------------
# refusals
# ----------------------------------------------------------------------------------------
@pytest.mark.parametrize("rate", [10.0, 19.0, 0.0, -5.0, float("nan"), "fast"])
def test_rate_below_the_knot_rate_or_invalid(robot, motion, tmp_path: Path, rate):
    with pytest.raises(ValueError, match="rate_hz"):
        export_motion(motion, robot, tmp_path / "out.csv", rate)
    assert list(tmp_path.iterdir()) == []
    export_motion(motion, robot, tmp_path / "ok.csv", 20.0)  # exactly the knot rate is fine


def test_unwritable_paths(robot, motion, tmp_path: Path):
    with pytest.raises(ExportError, match="does not exist"):
        export_motion(motion, robot, tmp_path / "missing" / "out.csv", RATE)
    blocker = tmp_path / "file.txt"
    blocker.write_text("x")
    with pytest.raises(ExportError, match="is a file, not a folder"):
        export_motion(motion, robot, blocker / "out.csv", RATE)
    with pytest.raises(ExportError, match="is a folder"):
        export_motion(motion, robot, tmp_path, RATE, fmt="csv")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["file.txt"]


@pytest.mark.skipif(os.geteuid() == 0, reason="root can write into a read-only folder")
def test_read_only_folder(robot, motion, tmp_path: Path):  # pragma: no cover - CI runs as root
    folder = tmp_path / "ro"
    folder.mkdir()
    folder.chmod(0o500)
    try:
        with pytest.raises(ExportError, match="cannot write"):
            export_motion(motion, robot, folder / "out.csv", RATE)
    finally:
        folder.chmod(0o700)


def test_torque_above_the_peak_is_refused_naming_joint_time_and_value(robot, tmp_path: Path):
    def spike(a):
        a["tau"][10, 0] = 150.0  # hip, at knot 10 (t = 0.45 s); the lumped hip's peak torque is 120 N m

    m = synthetic(robot, edit=spike)
    path = tmp_path / "out.csv"
    path.write_text("old contents")
    with pytest.raises(ExportError) as exc:
        export_motion(m, robot, path, RATE)
    msg = str(exc.value)
    assert "joint hip: |tau| = 150 N m at t = 0.45 s exceeds its peak torque 120 N m" in msg
    assert "allow_violations" in msg
    assert path.read_text() == "old contents"  # nothing written
    meta = export_motion(m, robot, path, RATE, allow_violations=True)
    assert len(meta["warnings"]) == 1 and "joint hip: |tau| = 150 N m" in meta["warnings"][0]
    assert import_export(path)[4]["warnings"] == meta["warnings"]


def test_speed_and_range_violations_are_refused(robot, tmp_path: Path):
    def fast(a):
        a["qd"][12, 3 + robot.joint_names.index("knee")] = 30.0  # limit 26 rad/s

    with pytest.raises(ExportError, match=r"joint knee: \|qd\| = 30 rad/s at t = 0.55 s exceeds its velocity limit 26"):
        export_motion(synthetic(robot, edit=fast), robot, tmp_path / "a.csv", RATE)

    def low(a):
        a["q"][:, 3 + robot.joint_names.index("knee")] -= 1.0  # the knee's range starts at 0 rad

    with pytest.raises(ExportError, match="joint knee: q = .* rad at t = .* s is below its lower limit 0 rad"):
        export_motion(synthetic(robot, edit=low), robot, tmp_path / "b.csv", RATE)
    assert list(tmp_path.iterdir()) == []


def test_nan_is_never_written(robot, tmp_path: Path):
    def nan(a):
        a["tau"][3, 2] = np.nan

    with pytest.raises(ExportError, match=r"tau\[3, 2\] is NaN"):
        export_motion(synthetic(robot, edit=nan), robot, tmp_path / "out.json", RATE, allow_violations=True)
    assert list(tmp_path.iterdir()) == []


def test_motion_for_another_robot_is_refused(motion, tmp_path: Path):
    with pytest.raises(ExportError, match="does not fit robot"):
        export_motion(motion, load_bundled("quadruped"), tmp_path / "out.csv", RATE)


def test_import_of_a_non_export_fails(tmp_path: Path):
    path = tmp_path / "other.json"
    path.write_text('{"format": "something"}')
    with pytest.raises(ExportError, match="not a kipup export"):
        import_export(path)
    (tmp_path / "x.csv").write_text("a,b\n1,2\n")
    with pytest.raises(ExportError, match="not a kipup export"):
        import_export(tmp_path / "x.csv")


# ----------------------------------------------------------------------------------------
# command line
# ----------------------------------------------------------------------------------------
def test_cli_export(robot, motion, tmp_path: Path, capsys):
    src = tmp_path / "motion.json"
    motion.to_json(src)
    out = tmp_path / "out.csv"
    assert main(["export", str(src), "--robot", "humanoid", "--rate", "100", "-o", str(out)]) == 0
    printed = capsys.readouterr().out
    assert f"wrote {out}: 81 samples at 100 Hz" in printed and CAUTION in printed and "kp" in printed
    assert np.array_equal(import_export(out)[1], motion.sample(np.arange(81) / RATE)["q"])
    robot_file = tmp_path / "tumbli.yaml"
    save_robot(robot, robot_file)
    npz = tmp_path / "out.bin"
    assert main(["export", str(src), "--robot", str(robot_file), "--rate", "200", "-o", str(npz),
                 "--format", "npz"]) == 0
    assert import_export(npz)[4]["rate_hz"] == 200.0
    capsys.readouterr()
    bad = tmp_path / "slow.csv"
    assert main(["export", str(src), "--robot", "humanoid", "--rate", "5", "-o", str(bad)]) == 2
    assert "rate_hz = 5 Hz is below the motion's knot rate" in capsys.readouterr().out
    assert not bad.exists()
    assert main(["export", str(src), "--robot", "nobody", "--rate", "100", "-o", str(bad)]) == 2
    assert "bundled robots: humanoid" in capsys.readouterr().out


# ----------------------------------------------------------------------------------------
# a solved trick
# ----------------------------------------------------------------------------------------
@pytest.fixture(scope="module")
def solved():
    from kipup.core.optimize import optimize
    from kipup.core.templates import load_template

    trick, robot = load_template("reach_jump")
    motion, _ = optimize(trick, robot)
    assert motion.status in ("solved", "acceptable")
    return motion, robot


def test_solved_motion_export_matches_its_dense_evaluation(solved, tmp_path: Path):
    motion, robot = solved
    times = motion.t0 + np.arange(int(math.floor(motion.duration * 500 + 1e-9)) + 1) / 500.0
    s = motion.sample(times)
    tau = motion.sample_torques(times)
    # which limits do the samples cross? (computed here independently of the exporter)
    crossing = set()
    for j, joint in enumerate(robot.joints):
        qj, vj = s["q"][:, 3 + j], s["qd"][:, 3 + j]
        tol = 1e-6  # torques; speeds and ranges use the between-knot tolerances of kipup.core.limits
        from kipup.core.limits import RANGE_TOL, SPEED_TOL
        if (np.abs(tau[:, j]) > joint.actuator.peak_torque * (1 + tol)).any() or \
                (np.abs(vj) > joint.velocity_limit * (1 + SPEED_TOL)).any() or \
                (qj < joint.lower - RANGE_TOL).any() or \
                (qj > joint.upper + RANGE_TOL).any():
            crossing.add(joint.name)
    if crossing:  # the optimizer bounds the knots (and speeds at midpoints); between knots the cubic may overshoot
        with pytest.raises(ExportError) as exc:
            export_motion(motion, robot, tmp_path / "refused.csv", 500)
        named = {line.split(":")[0].removeprefix("- joint ") for line in str(exc.value).splitlines()
                 if line.startswith("- joint ")}
        assert named == crossing
        assert not (tmp_path / "refused.csv").exists()
    for suffix in ("csv", "json", "npz"):
        path = tmp_path / f"reach.{suffix}"
        meta = export_motion(motion, robot, path, 500, allow_violations=True)
        assert bool(meta["warnings"]) == bool(crossing)
        t_back, q, qd, tau_back, back = import_export(path)
        assert np.array_equal(t_back, times)
        np.testing.assert_allclose(q, s["q"], rtol=0, atol=1e-12)
        assert np.array_equal(q, s["q"]) and np.array_equal(tau_back, tau)
        assert back["trick_name"] == "reach_jump" and back["rate_hz"] == 500.0
        assert [p["name"] for p in back["phases"]] == ["push", "flight", "landing"]
