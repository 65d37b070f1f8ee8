"""Tutorial 2 in a real browser, then the workbench used with the mouse.

JupyterLab in headless Chromium runs ``tutorials/02_sketch_a_trick.ipynb`` through the Run menu
(the server sets ``KIPUP_MARKER_DIR``, so the last cell writes ``02.done``), then the test:

1. checks the workbench's 3D view is drawn (pixels);
2. drags the toe handle of the selected keyframe with the mouse (pythreejs pickers: mousedown on the
   handle, mousemove/mouseup on the sagittal plane), checks the ghost followed every move, the
   keyframe's pose changed and the warm re-solve brought a new motion;
3. drags a phase end marker on the bqplot timeline and waits for that re-solve;
4. presses Play and checks the robot moves on screen, then Pause;
5. presses Save and checks ``motion.json`` was written.

Latencies are measured *in the page* (event timestamps, a per-frame comparison of the canvas, a
MutationObserver on the workbench's published state) and written to
``test-artifacts/browser/timings.json``; they are printed, not asserted (tests do not time
things). Screenshots of every step: ``test-artifacts/browser/wb_*.png``.
"""
from __future__ import annotations

import json
import os
import re
import statistics
import time
from pathlib import Path


from labtools import (
    ARTIFACTS, canvas_changes_between, image_stats, install_probe, last_event_time, looks_drawn, open_notebook, probe_now,
    run_all_cells, wait_canvas_change_after, wait_canvas_drawn, wait_marker, wait_state,
)

NOTEBOOK = "02_sketch_a_trick.ipynb"
RUN_TIMEOUT_S = 300.0   # the tutorial runs in well under a minute here
SOLVE_TIMEOUT_MS = 180_000
STEP_TIMEOUT_MS = 5_000
HANDLE_RGB = {"point": (0x2A, 0x9D, 0x8F), "joint": (0xE7, 0x6F, 0x51), "base": (0x6D, 0x59, 0x7A)}
SUCCESS = ("solved", "acceptable")


def _state(root) -> dict:
    return json.loads(root.locator(".kipup-state").text_content())


def _handles(root) -> dict[str, list[float]]:
    return json.loads(root.locator(".kipup-handles").text_content())


def _foot_handle(handles: dict) -> str:
    """The toe handle if there is one, else the lowest point handle on screen (a foot)."""
    if "point:toe" in handles:
        return "point:toe"
    points = [k for k in handles if k.startswith("point:")]
    assert points, f"no point handles among {sorted(handles)}"
    return max(points, key=lambda k: handles[k][1])


def _shot(page, locator, name: str) -> Path:
    """Screenshot of the viewport with ``locator`` scrolled into view (the workbench is taller
    than the viewport, and an element screenshot of it would include what the notebook clips)."""
    locator.scroll_into_view_if_needed(timeout=10_000)
    path = ARTIFACTS / f"{name}.png"
    page.screenshot(path=str(path), timeout=15_000)
    return path


def _save_timings(timings: dict) -> None:
    """Write what was measured so far (also when a later step fails)."""
    (ARTIFACTS / "timings.json").write_text(json.dumps(timings, indent=2) + "\n")


def _timeline_bounds(page) -> list[dict]:
    """Centres (page px) of the phase end markers on the timeline: the upper of the two rows of
    draggable dots (phase ends at y = 0.55, keyframe diamonds at y = 0.28)."""
    dots = page.evaluate("""() => [...document.querySelectorAll('.kipup-timeline .dot')].map(d => {
        const r = d.getBoundingClientRect(); return {x: r.x + r.width / 2, y: r.y + r.height / 2}; })""")
    assert dots, "no draggable dots on the timeline"
    top = min(d["y"] for d in dots)
    return sorted((d for d in dots if abs(d["y"] - top) < 3), key=lambda d: d["x"])


def _color_near(png: bytes, x: float, y: float, rgb: tuple[int, int, int], r: int = 4, tol: int = 45) -> bool:
    import io

    import numpy as np
    from PIL import Image

    img = np.asarray(Image.open(io.BytesIO(png)).convert("RGB"), dtype=int)
    xi, yi = int(round(x)), int(round(y))
    patch = img[max(yi - r, 0):yi + r + 1, max(xi - r, 0):xi + r + 1]
    return bool((np.abs(patch - np.array(rgb)).max(axis=2) <= tol).any())


def test_workbench_with_the_mouse(page, lab_server):
    path = lab_server.notebook_dir / NOTEBOOK
    assert path.exists(), f"{NOTEBOOK} is missing from the tutorials"
    marker = lab_server.marker_dir / "02.done"
    marker.unlink(missing_ok=True)
    (ARTIFACTS / "timings.json").unlink(missing_ok=True)
    timings: dict = {"browser": "headless Chromium, SwiftShader WebGL", "cpus": os.cpu_count(),
                     "load_average_at_start": [round(x, 2) for x in os.getloadavg()]}

    # --- run the tutorial ------------------------------------------------------------------
    open_notebook(page, lab_server, NOTEBOOK, "workbench")
    t0 = time.monotonic()
    run_all_cells(page)
    wait_marker(page, marker, RUN_TIMEOUT_S)
    timings["notebook_run_s"] = round(time.monotonic() - t0, 2)
    print(f"tutorial 2 ran in the browser in {timings['notebook_run_s']} s")
    page.screenshot(path=str(ARTIFACTS / "wb_0_ran.png"))

    workbenches = page.locator(".kipup-workbench")
    assert workbenches.count() == 1, f"expected one workbench in the page, found {workbenches.count()}"
    root = workbenches.first
    root.scroll_into_view_if_needed()
    page.wait_for_function(
        "() => JSON.parse(document.querySelector('.kipup-workbench .kipup-state').textContent).state === 'idle'",
        timeout=60_000)
    state = _state(root)
    assert state["motions"] >= 2 and state["last_status"] in SUCCESS, state
    assert state["selected"] is not None, f"no keyframe selected, so no handles to drag: {state}"

    # --- 1. the 3D view is drawn -------------------------------------------------------------
    canvas = root.locator(".kipup-view3d canvas")
    stats = wait_canvas_drawn(canvas, ARTIFACTS / "wb_1_view.png")
    assert looks_drawn(stats), f"the workbench's 3D view looks blank: {stats}"
    _shot(page, canvas, "wb_1_workbench")

    # the Keyframe tab shows the selected keyframe's pose
    root.locator(".lm-TabBar-tab", has_text="Keyframe").click()
    kf_info = root.locator(".widget-html-content", has_text="(m, rad)")
    pose_before = kf_info.text_content()

    # --- 2. drag the toe handle ----------------------------------------------------------------
    handles = _handles(root)
    name = _foot_handle(handles)
    canvas.scroll_into_view_if_needed()
    box = canvas.bounding_box()
    hx, hy = box["x"] + handles[name][0], box["y"] + handles[name][1]
    top = page.evaluate("([x, y]) => { const e = document.elementFromPoint(x, y); return e && e.tagName; }",
                        [hx, hy])
    assert top == "CANVAS", f"handle {name} at ({hx:.0f}, {hy:.0f}) is covered by a {top} element"
    png = canvas.screenshot(path=str(ARTIFACTS / "wb_2_before_drag.png"))
    kind = name.split(":")[0]
    assert _color_near(png, handles[name][0], handles[name][1], HANDLE_RGB[kind]), \
        f"no {kind} handle drawn at the published position of {name} {handles[name]}"

    install_probe(page)
    g0, m0 = state["generation"], state["motions"]
    page.mouse.move(hx, hy)
    time.sleep(0.2)
    page.mouse.down()
    t_down = last_event_time(page, "mousedown")
    try:
        t_grab, _ = wait_state(page, f"s.dragging === {json.dumps(name)}", t_down, STEP_TIMEOUT_MS)
    except AssertionError as err:
        page.mouse.up()
        raise AssertionError(f"pressing on {name} at ({hx:.0f}, {hy:.0f}) did not grab it: {err}") from None
    timings["grab_ms"] = round(t_grab - t_down, 1)

    dx, dy, steps = 22.0, -32.0, 8  # forward and up on screen
    follow = []
    f0, tf0 = page.evaluate("() => window.__kp.frames"), probe_now(page)
    for k in range(1, steps + 1):
        page.mouse.move(hx + dx * k / steps, hy + dy * k / steps)
        t_move = last_event_time(page, "mousemove")
        t_drawn = wait_canvas_change_after(page, t_move, STEP_TIMEOUT_MS, f"mouse move {k} of the drag: the ghost "
                                           f"did not follow")
        follow.append(round(t_drawn - t_move, 1))
        time.sleep(0.15)  # let this step's updates settle before the next one is timed
    canvas.screenshot(path=str(ARTIFACTS / "wb_3_dragging.png"))
    page.mouse.up()
    t_up = last_event_time(page, "mouseup")
    f1, tf1 = page.evaluate("() => window.__kp.frames"), probe_now(page)
    # the canvas is compared once per animation frame: that rate is the resolution of the timings
    timings["probe_frames_per_s"] = round((f1 - f0) / ((tf1 - tf0) / 1000.0), 1)
    timings["drag_to_ghost_drawn_ms"] = follow
    timings["drag_to_ghost_drawn_ms_median"] = statistics.median(follow)
    timings["drag_to_ghost_drawn_ms_max"] = max(follow)
    _save_timings(timings)
    print(f"grab {timings['grab_ms']} ms; mouse move -> ghost drawn: median {statistics.median(follow)} ms, "
          f"max {max(follow)} ms ({follow}); canvas compared {timings['probe_frames_per_s']} times a second")

    t_edit, _ = wait_state(page, f"s.generation > {g0}", t_up, STEP_TIMEOUT_MS)
    t_new, _ = wait_state(page, f"s.motions > {m0}", t_up, SOLVE_TIMEOUT_MS)
    t_idle, st = wait_state(page, f"s.motions > {m0} && s.state === 'idle'", t_up, SOLVE_TIMEOUT_MS)
    assert st["last_status"] in SUCCESS and st["solved_generation"] == st["generation"], st
    timings["release_to_edit_seen_ms"] = round(t_edit - t_up, 1)
    timings["release_to_new_motion_ms"] = round(t_new - t_up, 1)
    status = root.locator(".kipup-status").text_content()
    m = re.search(r"motion #(\d+): (\w+) in ([\d.]+) s \((\d+) iterations, ([^)]*)\); edit to motion ([\d.]+) s",
                  status)
    assert m, f"status line after the re-solve: {status!r}"
    timings["drag_resolve"] = {"status": m.group(2), "solve_s": float(m.group(3)), "iterations": int(m.group(4)),
                               "kind": m.group(5), "python_edit_to_motion_s": float(m.group(6))}
    print(f"release -> new motion in the page {timings['release_to_new_motion_ms']} ms; status: {status}")
    _save_timings(timings)

    # the keyframe changed, and its toe handle is now near the drop point
    pose_after = kf_info.text_content()
    assert pose_after != pose_before, f"the keyframe's pose did not change: {pose_after}"
    new = _handles(root)[name]
    drop = (handles[name][0] + dx, handles[name][1] + dy)
    d_old = ((handles[name][0] - drop[0]) ** 2 + (handles[name][1] - drop[1]) ** 2) ** 0.5
    d_new = ((new[0] - drop[0]) ** 2 + (new[1] - drop[1]) ** 2) ** 0.5
    assert d_new < 0.5 * d_old, f"{name} at {new} after the drag; dropped at {drop} (started {handles[name]})"
    _shot(page, root.locator(".kipup-timeline"), "wb_4_resolved")

    # --- 3. move a phase end on the timeline ---------------------------------------------------
    state = _state(root)
    g1, m1 = state["generation"], state["motions"]
    bounds = _timeline_bounds(page)
    assert len(bounds) >= 2, f"phase end markers: {bounds}"
    b = bounds[0]
    page.mouse.move(b["x"], b["y"])
    page.mouse.down()
    for k in range(1, 6):
        page.mouse.move(b["x"] + 6.0 * k, b["y"])
        time.sleep(0.03)
    page.mouse.up()
    t_up2 = last_event_time(page, "mouseup")
    try:
        wait_state(page, f"s.generation > {g1}", t_up2, STEP_TIMEOUT_MS)
    except AssertionError as err:
        raise AssertionError(f"dragging the first phase end on the timeline made no edit: {err}") from None
    t_new2, _ = wait_state(page, f"s.motions > {m1}", t_up2, SOLVE_TIMEOUT_MS)
    _, st = wait_state(page, f"s.motions > {m1} && s.state === 'idle'", t_up2, SOLVE_TIMEOUT_MS)
    assert st["last_status"] in SUCCESS, st
    timings["boundary_release_to_new_motion_ms"] = round(t_new2 - t_up2, 1)
    moved = _timeline_bounds(page)[0]
    assert moved["x"] > b["x"] + 5, f"the phase end stayed at x = {moved['x']:.1f} px (was {b['x']:.1f})"
    print(f"phase end moved {moved['x'] - b['x']:.1f} px; release -> new motion "
          f"{timings['boundary_release_to_new_motion_ms']} ms; status: {root.locator('.kipup-status').text_content()}")
    _shot(page, root.locator(".kipup-timeline"), "wb_5_boundary_moved")
    _save_timings(timings)

    # --- 4. play -------------------------------------------------------------------------------
    # The first Play of a new motion builds its animation clip in the browser, which takes a
    # moment: wait (bounded) for the canvas to start changing, then count changes.
    canvas.scroll_into_view_if_needed()
    t_play = probe_now(page)
    root.locator("button.kipup-play").click()
    t_click = last_event_time(page, "mouseup")
    t_playing, _ = wait_state(page, "s.mode === 'playing'", t_play, STEP_TIMEOUT_MS)
    t_moving = wait_canvas_change_after(page, t_playing, 30_000, "Play (the robot does not move)")
    timings["play_click_to_playing_state_ms"] = round(t_playing - t_click, 1)
    timings["play_click_to_canvas_moving_ms"] = round(t_moving - t_click, 1)
    time.sleep(0.3)
    t_a = probe_now(page)
    a = canvas.screenshot(path=str(ARTIFACTS / "wb_6_playing_a.png"))
    time.sleep(0.4)
    b_png = canvas.screenshot(path=str(ARTIFACTS / "wb_6_playing_b.png"))
    time.sleep(1.0)
    t_b = probe_now(page)
    changes = canvas_changes_between(page, t_a, t_b)
    timings["playback_canvas_changes_per_s"] = round(changes / ((t_b - t_a) / 1000.0), 1)
    print(f"play: click -> canvas moving {timings['play_click_to_canvas_moving_ms']} ms, then "
          f"{timings['playback_canvas_changes_per_s']} canvas changes per second")
    _save_timings(timings)
    assert changes >= 3 and a != b_png, f"the robot does not move on screen while playing ({changes} changes)"
    assert looks_drawn(image_stats(b_png)), "the 3D view looks blank while playing"
    t_pause = probe_now(page)
    root.locator("button.kipup-pause").click()
    wait_state(page, "s.mode === 'paused'", t_pause, STEP_TIMEOUT_MS)

    # --- 5. save -------------------------------------------------------------------------------
    root.locator(".lm-TabBar-tab", has_text="Solve").click()
    t_save = time.time()
    root.locator("button.kipup-save").click()
    msg = root.locator(".kipup-message")
    page.wait_for_function("() => /Saved|Not saved/.test(document.querySelector('.kipup-workbench "
                           ".kipup-message').textContent)", timeout=STEP_TIMEOUT_MS)
    text = msg.text_content()
    saved = re.search(r"Saved (\S+) and motion\.json", text)
    assert saved, f"message after Save: {text!r}"
    motion_file = Path(saved.group(1)).parent / "motion.json"
    assert motion_file.exists() and motion_file.stat().st_mtime >= t_save - 1, f"{motion_file} was not written"
    _shot(page, msg, "wb_7_saved")

    page.evaluate("() => { window.__kp.running = false; }")
    timings["load_average_at_end"] = [round(x, 2) for x in os.getloadavg()]
    page.console.assert_clean()
    _save_timings(timings)
    print(json.dumps(timings, indent=2))
