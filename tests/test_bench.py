"""Smoke test of ``kipup bench dynamics`` (not a timed test: only the table's shape is checked)."""
from __future__ import annotations

import math
import subprocess
import sys

import numpy as np
import pytest

from kipup.core import bench


def _ratio_rows(out: str) -> list[str]:
    return [line for line in out.splitlines() if line.startswith("ratio ")]


def test_bench_dynamics_quick_prints_finite_ratios(capsys):
    assert bench.main(["dynamics", "--quick"]) == 0
    out = capsys.readouterr().out
    rows = _ratio_rows(out)
    assert len(rows) == 4, out  # 2 robots x (rnea, aba)
    for robot in bench.DEFAULT_ROBOTS:
        for algo in ("rnea", "aba"):
            row = next(r for r in rows if r.split()[1:3] == [robot, algo])
            words = row.split()
            call, per_state = float(words[words.index("call") + 1]), float(words[words.index("per-state") + 1])
            assert math.isfinite(call) and call > 0.0, row
            assert math.isfinite(per_state) and per_state > 0.0, row
    # every table row has a finite positive time, and the Pinocchio rows a ratio of exactly 1
    table = [line for line in out.splitlines() if line.split()[:1] and line.split()[0] in bench.DEFAULT_ROBOTS]
    assert table
    for line in table:
        t = float(line.split()[-2])
        assert math.isfinite(t) and t > 0.0, line
        if "pinocchio" in line:
            assert line.split()[-1] == "1.00"
    assert "max |diff| rnea" in out


def test_bench_without_pinocchio(capsys, monkeypatch):
    monkeypatch.setitem(sys.modules, "pinocchio", None)  # makes `import pinocchio` raise ImportError
    assert bench.main(["dynamics", "--quick", "--robots", "quadruped", "--n-map", "10", "--repeats", "1"]) == 0
    out = capsys.readouterr().out
    assert "pinocchio is not installed" in out
    assert not _ratio_rows(out)
    assert "casadi call" in out and "casadi map/N" in out


def test_bench_pinocchio_model_matches_the_test_reference():
    """bench.py builds its own Pinocchio model (core must not import tests): it is the tests' model."""
    import pinocchio as pin
    from pinocchio_ref import PinocchioReference

    from kipup.core.robot_file import load_bundled

    rng = np.random.default_rng(0)
    for name in bench.DEFAULT_ROBOTS:
        robot = load_bundled(name)
        model, perm = bench.pinocchio_model(robot, pin)
        ref = PinocchioReference(robot)
        assert list(perm) == list(ref.perm)
        data = model.createData()
        for _ in range(3):
            q, qd, qdd = (rng.uniform(-2, 2, robot.nv) for _ in range(3))
            got = pin.rnea(model, data, q[perm], qd[perm], qdd[perm])
            np.testing.assert_allclose(got, ref.rnea(q, qd, qdd)[perm], rtol=0, atol=1e-12)


def test_bench_module_entry_point_and_subcommands():
    assert "dynamics" in bench.SUBCOMMANDS
    proc = subprocess.run([sys.executable, "-m", "kipup.core.bench", "--help"], capture_output=True, text=True,
                          timeout=120)
    assert proc.returncode == 0, proc.stderr
    assert "dynamics" in proc.stdout
    with pytest.raises(SystemExit):
        bench.main(["no-such-benchmark"])
