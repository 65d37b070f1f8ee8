"""Every notebook in tutorials/ runs top to bottom without an error.

Each notebook is executed with nbclient (kernel ``python3``, 600 s per cell) in a temporary copy
of the tutorials folder, so running the tests never changes the checkout. The executed notebook
is saved under ``test-artifacts/tutorials/`` for inspection.
"""
from __future__ import annotations

import shutil
from pathlib import Path

import nbformat
import pytest
from nbclient import NotebookClient

ROOT = Path(__file__).resolve().parents[1]
TUTORIALS = ROOT / "tutorials"
ARTIFACTS = ROOT / "test-artifacts" / "tutorials"
NOTEBOOKS = sorted(TUTORIALS.glob("*.ipynb"))


def test_there_are_tutorials():
    assert NOTEBOOKS, f"no notebooks in {TUTORIALS}"


@pytest.mark.parametrize("notebook", NOTEBOOKS, ids=[p.name for p in NOTEBOOKS])
def test_tutorial_runs(notebook: Path, tmp_path: Path):
    work = tmp_path / "tutorials"
    shutil.copytree(TUTORIALS, work, ignore=shutil.ignore_patterns(".ipynb_checkpoints"))
    path = work / notebook.name
    nb = nbformat.read(path, as_version=4)
    client = NotebookClient(
        nb,
        timeout=600,
        kernel_name="python3",
        allow_errors=False,
        resources={"metadata": {"path": str(work)}},
    )
    try:
        client.execute()  # raises CellExecutionError on the first failing cell
    finally:
        ARTIFACTS.mkdir(parents=True, exist_ok=True)
        nbformat.write(nb, ARTIFACTS / notebook.name)
    code_cells = [c for c in nb.cells if c.cell_type == "code"]
    assert code_cells, "a tutorial without code"
    assert all(c.get("execution_count") for c in code_cells), "some code cell did not run"
    errors = [o for c in code_cells for o in c.get("outputs", []) if o.get("output_type") == "error"]
    assert not errors
