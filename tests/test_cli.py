"""The ``kipup`` command line: ``check`` exit codes and output, help texts, ``bench`` delegation."""
from __future__ import annotations

import subprocess
import sys
import types
from pathlib import Path

import pytest
import yaml

from kipup.core import cli
from kipup.core.cli import HARDWARE_CAUTION, main
from kipup.core.robot_file import bundled_robot_path

HUMANOID = str(bundled_robot_path("humanoid"))
QUADRUPED = str(bundled_robot_path("quadruped"))


def write(tmp_path: Path, name: str, data) -> str:
    path = tmp_path / name
    path.write_text(data if isinstance(data, str) else yaml.safe_dump(data, sort_keys=False), encoding="utf-8")
    return str(path)


def bad_humanoid(tmp_path: Path) -> str:
    d = yaml.safe_load(Path(HUMANOID).read_text(encoding="utf-8"))
    d["links"][3]["joint"]["actuator"]["peak_torque"] = -5.0
    d["points"][2]["link"] = "nowhere"
    d["links"][1]["parent"] = "shin"
    return write(tmp_path, "bad.yaml", d)


def test_check_ok(capsys):
    assert main(["check", HUMANOID]) == 0
    assert capsys.readouterr().out == f"{HUMANOID}: ok (robot tumbli, 6 links, nq=8)\n"


def test_check_two_ok_files(capsys):
    assert main(["check", HUMANOID, QUADRUPED]) == 0
    out = capsys.readouterr().out.splitlines()
    assert out == [f"{HUMANOID}: ok (robot tumbli, 6 links, nq=8)", f"{QUADRUPED}: ok (robot skitter, 5 links, nq=7)"]


def test_check_lists_every_problem(tmp_path: Path, capsys):
    bad = bad_humanoid(tmp_path)
    assert main(["check", bad]) == 2
    out = capsys.readouterr().out.splitlines()
    assert len(out) == 3
    assert all(line.startswith(f"{bad}: ") for line in out)
    text = "\n".join(out)
    assert f"{bad}: links[3].joint.actuator.peak_torque: must be > 0" in text
    assert f"{bad}: points[2].link: unknown link 'nowhere'" in text
    assert f"{bad}: links[1].parent: unknown link 'shin'" in text


def test_check_mixed_files(tmp_path: Path, capsys):
    bad = bad_humanoid(tmp_path)
    assert main(["check", HUMANOID, bad, QUADRUPED]) == 2
    out = capsys.readouterr().out
    assert f"{HUMANOID}: ok" in out and f"{QUADRUPED}: ok" in out and f"{bad}: links[3]" in out


def test_check_missing_file(tmp_path: Path, capsys):
    missing = str(tmp_path / "nope.yaml")
    assert main(["check", missing]) == 2
    assert capsys.readouterr().out == f"{missing}: file: no such file: {missing}\n"


def test_check_unknown_and_missing_format(tmp_path: Path, capsys):
    unknown = write(tmp_path, "t.yaml", {"format": "kipup-dance/9", "name": "x"})
    missing = write(tmp_path, "m.yaml", {"name": "x"})
    assert main(["check", unknown, missing]) == 2
    out = capsys.readouterr().out.splitlines()
    assert out[0].startswith(f"{unknown}: format: unknown format 'kipup-dance/9'")
    assert "kipup-robot/1" in out[0]
    assert out[1].startswith(f"{missing}: format: required field is missing")


def test_check_not_a_mapping(tmp_path: Path, capsys):
    path = write(tmp_path, "l.yaml", "- 1\n- 2\n")
    assert main(["check", path]) == 2
    assert capsys.readouterr().out.startswith(f"{path}: document: must be a mapping")


def test_check_malformed_yaml(tmp_path: Path, capsys):
    path = write(tmp_path, "broken.yaml", "format: kipup-robot/1\nname: [x\n")
    assert main(["check", path]) == 2
    (line,) = capsys.readouterr().out.splitlines()
    assert line.startswith(f"{path}: document: invalid YAML at line 3")


def test_check_dispatches_on_format(monkeypatch, tmp_path: Path, capsys):
    """A new format only needs an entry in FORMATS."""
    seen = []

    def check_trick(data):
        seen.append(data)
        return [], "trick demo"
    monkeypatch.setitem(cli.FORMATS, "kipup-trick/1", check_trick)
    path = write(tmp_path, "trick.yaml", {"format": "kipup-trick/1", "robot": "humanoid"})
    assert main(["check", path]) == 0
    assert seen == [{"format": "kipup-trick/1", "robot": "humanoid"}]
    assert capsys.readouterr().out == f"{path}: ok (trick demo)\n"


@pytest.mark.parametrize("argv", [["--help"], ["check", "--help"]])
def test_help_ends_with_hardware_caution(argv, capsys):
    assert main(argv) == 0
    lines = [line for line in capsys.readouterr().out.splitlines() if line.strip()]
    assert lines[-1] == HARDWARE_CAUTION
    assert "simulate" in HARDWARE_CAUTION and "safety rules" in HARDWARE_CAUTION and "regulations" in HARDWARE_CAUTION


def test_usage_errors_exit_2(capsys):
    assert main([]) == 2
    assert main(["check"]) == 2
    assert main(["frobnicate"]) == 2


def test_bench_is_delegated_with_the_rest_of_argv(monkeypatch):
    calls = []
    fake = types.ModuleType("kipup.core.bench")
    fake.main = lambda argv: calls.append(list(argv)) or 3  # type: ignore[attr-defined]
    monkeypatch.setitem(sys.modules, "kipup.core.bench", fake)
    assert main(["bench", "--quick", "dynamics", "-n", "5"]) == 3
    assert main(["bench", "--help"]) == 3
    assert calls == [["--quick", "dynamics", "-n", "5"], ["--help"]]


def test_bench_missing_module_is_a_clean_error(monkeypatch, capsys):
    monkeypatch.setitem(sys.modules, "kipup.core.bench", None)  # makes the import fail
    assert main(["bench"]) == 2
    assert "kipup bench: not available" in capsys.readouterr().err


def test_python_dash_m_subprocess(tmp_path: Path):
    """``python -m kipup.core check``; check must not import the bench module."""
    ok = subprocess.run([sys.executable, "-m", "kipup.core", "check", HUMANOID],
                        capture_output=True, text=True, timeout=120)
    assert ok.returncode == 0, ok.stderr
    assert ok.stdout.strip() == f"{HUMANOID}: ok (robot tumbli, 6 links, nq=8)"
    bad = subprocess.run([sys.executable, "-m", "kipup.core", "check", bad_humanoid(tmp_path)],
                         capture_output=True, text=True, timeout=120)
    assert bad.returncode == 2
    assert "links[3].joint.actuator.peak_torque" in bad.stdout
    assert "Traceback" not in bad.stdout + bad.stderr
    probe = subprocess.run(
        [sys.executable, "-c",
         "import sys; from kipup.core.cli import main; rc = main(['check', sys.argv[1]]); "
         "print(rc, 'kipup.core.bench' in sys.modules)", HUMANOID],
        capture_output=True, text=True, timeout=120)
    assert probe.stdout.splitlines()[-1] == "0 False", probe.stderr
