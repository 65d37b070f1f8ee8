"""Tutorial 1 in a real browser: JupyterLab in headless Chromium runs every cell through the Run
menu, and each pythreejs 3D view is actually drawn (pixels, not just widget models).

Screenshots: ``test-artifacts/browser/tour_*.png`` (look at them when changing the 3D view).
"""
from __future__ import annotations

import time

from labtools import (
    ARTIFACTS, assert_ran_cleanly, code_cells, looks_drawn, open_notebook, run_all_cells, save_notebook,
    wait_canvas_drawn, wait_cell_executed,
)

NOTEBOOK = "01_robot_tour.ipynb"
RUN_TIMEOUT_S = 180.0  # the tour runs in about 20 s here


def test_tour_runs_and_draws_the_robots(page, lab_server):
    path = lab_server.notebook_dir / NOTEBOOK
    _, code = code_cells(path)
    open_notebook(page, lab_server, NOTEBOOK, "tour")
    page.screenshot(path=str(ARTIFACTS / "tour_0_opened.png"))

    t0 = time.monotonic()
    run_all_cells(page)
    wait_cell_executed(page, code[-1], len(code), RUN_TIMEOUT_S)
    print(f"tutorial 1 ran in the browser in {time.monotonic() - t0:.1f} s")
    page.screenshot(path=str(ARTIFACTS / "tour_1_ran.png"))
    assert_ran_cleanly(save_notebook(page, path))

    # tutorial 1 shows three views: the humanoid with sliders, the flight replay, the quadruped
    # (a view that fails to render has no canvas)
    canvases = page.locator(".jupyter-threejs canvas")
    assert canvases.count() == 3, f"expected 3 pythreejs canvases, found {canvases.count()}"
    for i in range(3):
        stats = wait_canvas_drawn(canvases.nth(i), ARTIFACTS / f"tour_canvas_{i}.png")
        print(f"canvas {i}: {stats}")
        assert looks_drawn(stats), f"3D view {i} looks blank: {stats}"

    page.console.assert_clean()
