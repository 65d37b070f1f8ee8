"""Tutorial 6 in a real browser, then the workbench's Record and Verify tabs used with the mouse.

JupyterLab in headless Chromium runs ``tutorials/06_recording.ipynb`` through the Run menu (the
server sets ``KIPUP_MARKER_DIR``, so the last cell writes ``06.done`` with the trick file's path),
then the test:

1. opens the workbench's **Record** tab, leaves the defaults (MP4, real time, next to the trick
   file) and clicks *Record*; checks the file appears on disk, the tab names it, and the inline
   video holds that recording (the browser decodes it: its frame size is the recorder's
   960 x 540 px and its length the motion's duration at real time);
2. opens the **Verify** tab and clicks *Simulate*; checks the verdict appears in words (success,
   landing, pitch error at touchdown, the tracking error of every joint of the robot) and that
   the violet simulated ghost is drawn in the 3D view: the scrubber is dragged to where the
   simulated robot has parted from the plan, and the view with the ghost shown (its checkbox) is
   compared with the view with it hidden;
3. sets the Robustness sweep to a few samples and clicks *Robustness*; checks the summary names
   that many samples, a success rate, no sample that could not run, and the pitch error quantiles.

How long each click took to show its result is measured and written to
``test-artifacts/browser/record_verify_timings.json`` (printed, not asserted). Screenshots:
``test-artifacts/browser/rv_*.png``.
"""
from __future__ import annotations

import io
import json
import os
import re
import time
from pathlib import Path

import numpy as np

from labtools import ARTIFACTS, looks_drawn, open_notebook, run_all_cells, wait_canvas_drawn, wait_marker

NOTEBOOK = "06_recording.ipynb"
MARKER = "06.done"
RUN_TIMEOUT_S = 300.0     # the tutorial runs in about 40 s here
RESULT_TIMEOUT_MS = 180_000
RECORD_SIZE = (960, 540)  # kipup.widgets.wb_record.RECORD_SIZE, the default frame size of a recording
SWEEP_SAMPLES = 4         # a short sweep: two rounds of the two worker processes
JOINTS = ("hip", "knee", "ankle", "shoulder", "elbow")  # the bundled humanoid's joints (core/data/robots)


def _shot(page, locator, name: str) -> Path:
    """Screenshot of the viewport with ``locator`` scrolled into view."""
    locator.scroll_into_view_if_needed(timeout=10_000)
    path = ARTIFACTS / f"{name}.png"
    page.screenshot(path=str(path), timeout=15_000)
    return path


def _find_workbench(page, timeout_s: float = 30.0):
    """The one workbench of the page. JupyterLab renders long notebooks in windows, so the cell
    holding it may be out of the page: scroll the notebook through until it is there."""
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        found = page.evaluate("""() => {
            if (document.querySelector('.kipup-workbench')) return true;
            const outer = document.querySelector('.jp-Notebook .jp-WindowedPanel-outer') ||
                          document.querySelector('.jp-Notebook');
            if (outer) {
                outer.scrollTop = outer.scrollTop + outer.clientHeight * 0.8 >= outer.scrollHeight - outer.clientHeight
                    ? 0 : outer.scrollTop + outer.clientHeight * 0.8;
            }
            return false;
        }""")
        if found:
            break
        time.sleep(0.3)
    workbenches = page.locator(".kipup-workbench")
    assert workbenches.count() == 1, f"expected one workbench in the page, found {workbenches.count()}"
    root = workbenches.first
    root.scroll_into_view_if_needed(timeout=10_000)
    return root


def violet_gain(shown: bytes, hidden: bytes, tol: float = 60.0) -> tuple[int, int]:
    """Compare two screenshots of the 3D view at the same instant, the simulated ghost shown and
    hidden: (number of pixels that differ by more than 20 in some channel, how many more pixels are
    the ghost's violet, within ``tol``, with it than without). The ghost is a violet wireframe
    (kipup.widgets.wb_verify.SIM_GHOST_COLOR #7b2cbf) drawn over everything, so its lines keep their
    colour over the orange robot as over the sky; a translucent violet would not (over orange it
    turns brown, which is what made plan and simulation hard to tell apart)."""
    from PIL import Image

    a = np.asarray(Image.open(io.BytesIO(shown)).convert("RGB"), dtype=float)
    b = np.asarray(Image.open(io.BytesIO(hidden)).convert("RGB"), dtype=float)
    assert a.shape == b.shape, (a.shape, b.shape)
    changed = int((np.abs(a - b).max(axis=2) > 20).sum())
    violet = np.array([0x7B, 0x2C, 0xBF], dtype=float)

    def count(img: np.ndarray) -> int:
        return int((np.linalg.norm(img - violet, axis=-1) < tol).sum())

    return changed, count(a) - count(b)


def test_violet_gain_judge():
    """The ghost judge on synthetic pictures: violet lines over the background and over an orange
    limb are counted; a translucent violet over orange (brown) is not, nor the robot drawn in
    another place (what a moving playhead would give), nor identical pictures."""
    from PIL import Image, ImageDraw

    def png(draw_fn) -> bytes:
        img = Image.new("RGB", (120, 80), (0xF4, 0xF6, 0xF8))
        d = ImageDraw.Draw(img)
        draw_fn(d)
        buf = io.BytesIO()
        img.save(buf, format="PNG")
        return buf.getvalue()

    violet, orange = (0x7B, 0x2C, 0xBF), (0xEE, 0x8A, 0x3C)
    robot = lambda d: d.rectangle([20, 10, 40, 70], fill=orange)  # noqa: E731
    hidden = png(robot)
    wire = png(lambda d: (robot(d), d.line([30, 10, 30, 70], fill=violet), d.line([50, 10, 50, 70], fill=violet)))
    n, gain = violet_gain(wire, hidden)
    assert n == 2 * 61 and gain == 2 * 61, (n, gain)
    brown = tuple(int(round(0.45 * c + 0.55 * o)) for c, o in zip(violet, orange))
    muddy = png(lambda d: (robot(d), d.rectangle([30, 10, 40, 70], fill=brown)))
    n, gain = violet_gain(muddy, hidden)
    assert n > 0 and gain == 0, (n, gain)
    moved = png(lambda d: d.rectangle([60, 10, 80, 70], fill=orange))
    n, gain = violet_gain(moved, hidden)
    assert n > 0 and gain == 0, (n, gain)
    assert violet_gain(hidden, hidden) == (0, 0)


def test_record_and_simulate_with_the_mouse(page, lab_server):
    path = lab_server.notebook_dir / NOTEBOOK
    assert path.exists(), f"{NOTEBOOK} is missing from the tutorials"
    marker = lab_server.marker_dir / MARKER
    marker.unlink(missing_ok=True)
    timings: dict = {"cpus": os.cpu_count(), "load_average_at_start": [round(x, 2) for x in os.getloadavg()]}
    out = ARTIFACTS / "record_verify_timings.json"
    out.unlink(missing_ok=True)

    # --- run the tutorial ------------------------------------------------------------------
    open_notebook(page, lab_server, NOTEBOOK, "record-verify")
    t0 = time.monotonic()
    run_all_cells(page)
    wait_marker(page, marker, RUN_TIMEOUT_S)
    timings["notebook_run_s"] = round(time.monotonic() - t0, 2)
    info = json.loads(marker.read_text())
    folder = Path(info["trick_file"]).parent
    target = folder / "reach_jump.mp4"   # the default: MP4 at real time, named after the trick
    assert not target.exists(), f"{target} exists before Record was clicked"

    root = _find_workbench(page)
    page.wait_for_function(
        "() => JSON.parse(document.querySelector('.kipup-workbench .kipup-state').textContent).state === 'idle'",
        timeout=60_000)
    canvas = root.locator(".kipup-view3d canvas")
    stats = wait_canvas_drawn(canvas, ARTIFACTS / "rv_0_view.png")
    assert looks_drawn(stats), f"the workbench's 3D view looks blank: {stats}"

    # --- 1. Record -----------------------------------------------------------------------------
    root.locator(".lm-TabBar-tab", has_text="Record").click()
    button = root.locator("button.kipup-record")
    button.scroll_into_view_if_needed()
    _shot(page, button, "rv_1_record_tab")
    status = root.locator(".kipup-record-status")
    # the tab already shows what the notebook recorded (its last recording may have the same
    # name), so mark that caption and wait for a new caption element (it replaces the old one only
    # after success) or for a failure
    page.evaluate("() => document.querySelectorAll('.kipup-workbench .kipup-record-path')"
                  ".forEach(c => { c.dataset.kipupOld = '1'; })")
    t_click = time.time()
    button.click()
    page.wait_for_function(
        "() => { const w = document.querySelector('.kipup-workbench');"
        " const c = w.querySelector('.kipup-record-path:not([data-kipup-old])');"
        " return (c && /reach_jump\\.mp4/.test(c.textContent)) ||"
        " /Recording failed|Not recorded/.test(w.querySelector('.kipup-record-status').textContent); }",
        timeout=RESULT_TIMEOUT_MS)
    timings["record_click_to_shown_s"] = round(time.time() - t_click, 2)
    text = status.text_content()
    assert re.search(r"recorded in [\d.]+ s", text), f"Record tab after the click: {text!r}"
    assert target.is_file() and target.stat().st_mtime >= t_click - 1, f"{target} was not written"
    assert target.stat().st_size > 10_000, f"{target} is only {target.stat().st_size} bytes"
    leftovers = [p.name for p in folder.iterdir() if p.name.endswith(".tmp.mp4")]
    assert not leftovers, f"temporary files left beside the recording: {leftovers}"
    caption = root.locator(".kipup-record-path").text_content()
    assert caption.startswith("motion #1, MP4 video") and ":" in caption, f"caption under the recording: {caption!r}"
    shown = Path(caption.split(":", 1)[1].strip())
    assert shown.is_absolute(), f"the caption names {shown}, not an absolute path"
    assert shown == target.resolve(), f"the caption names {shown}, the recording is {target}"

    video = root.locator("video.kipup-record-view")
    assert video.count() == 1, "no inline video in the Record tab"
    video.scroll_into_view_if_needed()
    page.wait_for_function("() => { const v = document.querySelector('.kipup-workbench video.kipup-record-view');"
                           " return v && v.readyState >= 2 && v.videoWidth > 0; }", timeout=30_000)
    meta = video.evaluate("v => ({w: v.videoWidth, h: v.videoHeight, duration: v.duration, "
                          "shown: v.getBoundingClientRect().width, error: v.error && v.error.code})")
    timings["video"] = meta
    assert (meta["w"], meta["h"]) == RECORD_SIZE and meta["error"] is None, meta
    assert meta["shown"] > 200, f"the inline video is only {meta['shown']} px wide"
    # real time: as long as the motion, give or take a frame (the end instant is a frame of its own)
    assert abs(meta["duration"] - info["duration"]) < 0.1, f"video {meta}, motion {info['duration']:.3f} s"
    _shot(page, video, "rv_2_recorded")

    # --- 2. Simulate ---------------------------------------------------------------------------
    root.locator(".lm-TabBar-tab", has_text="Verify").click()
    sim = root.locator("button.kipup-simulate")
    verdict = root.locator(".kipup-verdict")
    assert "not simulated yet" in verdict.text_content()
    t_click = time.time()
    sim.click()
    page.wait_for_function(
        "() => /in closed loop|could not run/.test("
        "document.querySelector('.kipup-workbench .kipup-verdict').textContent)",
        timeout=RESULT_TIMEOUT_MS)
    timings["simulate_click_to_verdict_s"] = round(time.time() - t_click, 2)
    text = verdict.text_content()
    assert "motion #1 in closed loop" in text, f"verdict: {text!r}"
    for words in ("success", "landed on its feet", "pitch error at touchdown", "largest tracking error per joint",
                  "Simulated from t = 0.000 s"):
        assert words in text, f"{words!r} is missing from the verdict: {text!r}"
    assert re.search(r"success\s*(yes|no)", text), f"no yes/no after 'success': {text!r}"
    for joint in JOINTS:
        assert re.search(rf"{joint}\s*\d+\.\d{{3}}\s*\d+\.\d{{3}}", text), f"no error row for {joint}: {text!r}"
    page.wait_for_function("() => /simulated motion #1 in/.test("
                           "document.querySelector('.kipup-workbench .kipup-status').textContent)", timeout=10_000)
    _shot(page, verdict, "rv_4_verdict")

    # scrub to 60 % of the way (about the planned touchdown), where the simulated robot has parted
    # from the plan, then compare the view with the ghost shown and hidden (its checkbox)
    scrub = root.locator(".kipup-scrubber")
    handle, track = scrub.locator(".noUi-handle"), scrub.locator(".noUi-target")
    handle.scroll_into_view_if_needed()
    hb, tb = handle.bounding_box(), track.bounding_box()
    x0, y0 = hb["x"] + hb["width"] / 2, hb["y"] + hb["height"] / 2
    x1 = tb["x"] + tb["width"] * 0.6
    page.mouse.move(x0, y0)
    page.mouse.down()
    for k in range(1, 6):
        page.mouse.move(x0 + (x1 - x0) * k / 5, y0)
        time.sleep(0.05)
    page.mouse.up()
    page.wait_for_function("() => parseFloat(document.querySelector('.kipup-workbench .kipup-scrubber "
                           ".widget-readout').textContent) > 0.3", timeout=10_000)
    playhead = float(scrub.locator(".widget-readout").text_content())
    timings["playhead_s"] = playhead
    canvas.scroll_into_view_if_needed()
    time.sleep(1.0)   # the posed robots reach the browser in a few messages
    shown = canvas.screenshot(path=str(ARTIFACTS / "rv_5_ghost_shown.png"))
    _shot(page, canvas, "rv_5_simulated")
    checkbox = root.locator(".widget-checkbox", has_text="show the simulated ghost").locator("input")
    checkbox.click()
    time.sleep(1.0)
    hidden = canvas.screenshot(path=str(ARTIFACTS / "rv_6_ghost_hidden.png"))
    checkbox.click()   # leave it shown
    n, gain = violet_gain(shown, hidden)
    timings["ghost_pixels_changed_and_violet_gain"] = [n, gain]
    timings["load_average_at_end"] = [round(x, 2) for x in os.getloadavg()]
    out.write_text(json.dumps(timings, indent=2) + "\n")
    print(json.dumps(timings, indent=2))
    assert n > 300 and gain > 150, (f"no violet simulated ghost at t = {playhead} s: {n} pixels change when it "
                                    f"is hidden, {gain} more violet pixels with it")

    # --- 3. Robustness ---------------------------------------------------------------------------
    # a short sweep: its samples run in worker processes started from the kernel's thread
    samples = root.locator(".kipup-sweep-samples input")
    samples.scroll_into_view_if_needed()
    samples.fill(str(SWEEP_SAMPLES))
    samples.press("Enter")
    summary = root.locator(".kipup-sweep")
    t_click = time.time()
    root.locator("button.kipup-robustness").click()
    page.wait_for_function(
        "() => /samples in|could not run/.test(document.querySelector('.kipup-workbench .kipup-sweep').textContent)",
        timeout=RESULT_TIMEOUT_MS)
    timings["robustness_click_to_summary_s"] = round(time.time() - t_click, 2)
    text = summary.text_content()
    assert f"{SWEEP_SAMPLES} samples in" in text, f"sweep summary: {text!r}"
    rate = re.search(r"success rate\s*(\d+) %", text)
    assert rate and 0 <= int(rate.group(1)) <= 100, f"no success rate in the sweep summary: {text!r}"
    failed = re.search(r"could not run \(worker died, error\)\s*(\d+)", text)
    assert failed and failed.group(1) == "0", f"sweep samples could not run: {text!r}"
    assert re.search(r"\|pitch error at touchdown\|\s*median \d", text), f"no pitch error quantiles: {text!r}"
    _shot(page, summary, "rv_7_robustness")
    timings["load_average_at_end"] = [round(x, 2) for x in os.getloadavg()]
    out.write_text(json.dumps(timings, indent=2) + "\n")
    print(f"robustness: {text}")
    page.console.assert_clean()
