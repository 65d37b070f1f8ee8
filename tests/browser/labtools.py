"""Helpers for driving JupyterLab notebooks and judging canvases in the browser tests.

Every wait here is bounded: a helper raises (TimeoutError or AssertionError) instead of hanging.
"""
from __future__ import annotations

import io
import json
import time
from pathlib import Path

import numpy as np

ARTIFACTS = Path(__file__).resolve().parents[2] / "test-artifacts" / "browser"


def open_notebook(page, server, notebook: str, workspace: str, timeout_ms: int = 90_000) -> None:
    """Open ``notebook`` (path relative to the server's notebook folder) alone in a fresh workspace
    and wait until it is shown and its kernel is idle."""
    page.goto(server.workspace_url(notebook, workspace), timeout=timeout_ms)
    page.wait_for_selector(".jp-Notebook .jp-Cell", timeout=timeout_ms)
    wait_kernel_ready(page, server, notebook, timeout_ms / 1000)


def wait_kernel_ready(page, server, notebook: str, timeout_s: float = 90.0) -> str:
    """Wait until the notebook's kernel runs, the page is connected to it and it is idle; return
    the kernel id.

    The page's kernel indicator says "idle" for a moment *before* the kernel has started, and a
    Run All issued then is lost: the server's view (a session for the notebook whose kernel has
    a connection and is idle) is checked first, then the indicator."""
    deadline = time.monotonic() + timeout_s
    state = None
    while time.monotonic() < deadline:
        for s in server.api("GET", "/api/sessions"):
            if s.get("path") == notebook and s.get("kernel"):
                k = server.api("GET", f"/api/kernels/{s['kernel']['id']}")
                state = (k.get("connections"), k.get("execution_state"))
                if k.get("connections", 0) >= 1 and k.get("execution_state") == "idle":
                    status = page.locator(".jp-Notebook-ExecutionIndicator").get_attribute("data-status")
                    if status == "idle":
                        return s["kernel"]["id"]
        time.sleep(0.25)
    raise TimeoutError(f"the kernel of {notebook} was not ready within {timeout_s:.0f} s "
                       f"(connections, state: {state})")


def menu(page, top: str, item: str) -> None:
    """Click menu bar entry ``top`` then the item labelled exactly ``item``."""
    page.locator(".lm-MenuBar-itemLabel").get_by_text(top, exact=True).click()
    page.locator(".lm-Menu-itemLabel").get_by_text(item, exact=True).click()


def run_all_cells(page, timeout_s: float = 20.0) -> None:
    """Run > Run All Cells, and check that the run started (a cell prompt turns to ``[*]`` or to
    a number, or the kernel goes busy) within ``timeout_s``."""
    menu(page, "Run", "Run All Cells")
    page.wait_for_function(
        """() => [...document.querySelectorAll('.jp-Notebook .jp-InputPrompt')]
                    .some(p => /\\[(\\*|\\d+)\\]/.test(p.textContent))
                 || document.querySelector('.jp-Notebook-ExecutionIndicator[data-status="busy"]') !== null""",
        timeout=timeout_s * 1000,
    )


def code_cells(path: Path) -> tuple[int, list[int]]:
    """(number of cells, indices of the code cells) of the notebook file at ``path``."""
    nb = json.loads(path.read_text())
    return len(nb["cells"]), [i for i, c in enumerate(nb["cells"]) if c["cell_type"] == "code"]


_PROMPT_JS = """(idx) => {
    const cell = document.querySelector(`.jp-Notebook .jp-Cell[data-windowed-list-index="${idx}"]`);
    if (!cell) {
        const outer = document.querySelector('.jp-Notebook .jp-WindowedPanel-outer');
        if (outer) outer.scrollTop = outer.scrollHeight;
        return null;
    }
    const p = cell.querySelector('.jp-InputPrompt');
    return p ? p.textContent.trim() : '';
}"""

_STDERR_JS = """() => [...document.querySelectorAll(
    '.jp-Notebook .jp-OutputArea-output[data-mime-type="application/vnd.jupyter.stderr"]')]
    .map(e => e.textContent).join('\\n---\\n')"""

IDLE_STOP_S = 5.0  # kernel idle this long before the end: the run stopped (a cell raised)


def wait_run_finished(page, done, what: str, timeout_s: float) -> None:
    """Poll ``done()`` until it is true. Fails fast when the run has stopped early: Run All stops
    at the first cell that raises, and the kernel then stays idle (between queued cells of a
    running notebook it is busy all the time)."""
    deadline = time.monotonic() + timeout_s
    idle_since = None
    while time.monotonic() < deadline:
        if done():
            return
        status = page.locator(".jp-Notebook-ExecutionIndicator").get_attribute("data-status")
        if status == "idle":
            idle_since = idle_since or time.monotonic()
            if time.monotonic() - idle_since > IDLE_STOP_S:
                if done():
                    return
                stderr = page.evaluate(_STDERR_JS)
                raise AssertionError(f"the run stopped before {what}: kernel idle for {IDLE_STOP_S:.0f} s; "
                                     f"stderr/error outputs in the page:\n{stderr[-3000:]}")
        else:
            idle_since = None
        time.sleep(0.25)
    raise TimeoutError(f"no {what} within {timeout_s:.0f} s")


def wait_cell_executed(page, index: int, count: int, timeout_s: float) -> None:
    """Wait until cell ``index`` (position in the notebook) shows input prompt ``[count]:``.

    JupyterLab renders a long notebook in windows: a cell far from the viewport may not be in the
    page, so the notebook is scrolled to its end while waiting (Run All ends there anyway)."""
    prompt = f"[{count}]:"
    wait_run_finished(page, lambda: page.evaluate(_PROMPT_JS, index) == prompt,
                      f"prompt {prompt} on cell {index}", timeout_s)


def wait_marker(page, marker: Path, timeout_s: float) -> None:
    """Wait for the marker file a notebook's last cell writes."""
    wait_run_finished(page, marker.exists, f"marker file {marker.name}", timeout_s)


def save_notebook(page, path: Path, timeout_s: float = 30.0) -> dict:
    """File > Save Notebook; wait for the file on disk to change and return its JSON."""
    before = path.stat().st_mtime_ns
    menu(page, "File", "Save Notebook")
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        if path.stat().st_mtime_ns != before:
            try:
                return json.loads(path.read_text())
            except json.JSONDecodeError:  # caught mid-write
                pass
        time.sleep(0.2)
    raise TimeoutError(f"{path.name} was not saved within {timeout_s:.0f} s")


def assert_ran_cleanly(nb: dict) -> None:
    """Every code cell of a saved notebook ran, in order from 1, and none has an error output."""
    cells = [c for c in nb["cells"] if c["cell_type"] == "code"]
    counts = [c.get("execution_count") for c in cells]
    assert counts == list(range(1, len(cells) + 1)), f"execution counts {counts}"
    errors = [(i, o.get("ename"), o.get("evalue")) for i, c in enumerate(cells)
              for o in c.get("outputs", []) if o.get("output_type") == "error"]
    assert not errors, f"error outputs in code cells: {errors}"


# ----------------------------------------------------------------------------
# pixels
# ----------------------------------------------------------------------------


def image_stats(png: bytes) -> dict:
    """Pixel statistics of a PNG: ``std`` (standard deviation of the grey level, 0-255) and
    ``colored`` (fraction of pixels with HSV saturation > 0.35 and value > 0.15: the robot's
    coloured capsules and points; background, ground and grid are grey)."""
    from PIL import Image

    img = np.asarray(Image.open(io.BytesIO(png)).convert("RGB"), dtype=float) / 255.0
    grey = img @ np.array([0.299, 0.587, 0.114])
    mx, mn = img.max(axis=2), img.min(axis=2)
    sat = np.where(mx > 0, (mx - mn) / np.maximum(mx, 1e-9), 0.0)
    colored = (sat > 0.35) & (mx > 0.15)
    return {"std": float(grey.std() * 255.0), "colored": float(colored.mean()),
            "width": int(img.shape[1]), "height": int(img.shape[0])}


def looks_drawn(stats: dict, min_std: float = 8.0, min_colored: float = 0.005) -> bool:
    """A canvas shows a scene (not blank, not a flat colour) with some of the robot's colours."""
    return stats["std"] >= min_std and stats["colored"] >= min_colored


def wait_canvas_drawn(locator, path: Path, timeout_s: float = 20.0) -> dict:
    """Scroll the canvas into view and screenshot it (to ``path``) until it looks drawn; return the
    pixel statistics of the last screenshot, which the caller asserts on."""
    locator.scroll_into_view_if_needed(timeout=10_000)
    deadline = time.monotonic() + timeout_s
    while True:
        png = locator.screenshot(path=str(path), timeout=10_000)
        stats = image_stats(png)
        if looks_drawn(stats) or time.monotonic() > deadline:
            return stats
        time.sleep(0.5)


# ----------------------------------------------------------------------------
# in-page probe: when does the canvas change, when do events and state updates arrive
# ----------------------------------------------------------------------------

PROBE_JS = """(rootSel) => {
    const root = document.querySelector(rootSel);
    if (!root) throw new Error('no ' + rootSel);
    const P = window.__kp = {changes: [], events: [], states: [], statuses: [], frames: 0, running: true};
    // Canvas changes: every animation frame, copy the WebGL canvas (what is on screen) at half
    // size into a 2D canvas and compare with the previous copy.
    const off = document.createElement('canvas');
    let g = null, prev = null;
    function frame() {
        if (!P.running) return;
        const c = root.querySelector('.kipup-view3d canvas');
        if (c && c.width > 0) {
            const w = Math.ceil(c.width / 2), h = Math.ceil(c.height / 2);
            if (off.width !== w || off.height !== h || g === null) {
                off.width = w; off.height = h; g = off.getContext('2d', {willReadFrequently: true}); prev = null;
            }
            g.drawImage(c, 0, 0, w, h);
            const d = g.getImageData(0, 0, w, h).data;
            P.frames += 1;
            if (prev !== null) {
                let diff = 0;
                for (let k = 0; k < d.length; k += 4) {
                    if (d[k] !== prev[k] || d[k + 1] !== prev[k + 1] || d[k + 2] !== prev[k + 2]) diff++;
                }
                if (diff > 0) P.changes.push([performance.now(), diff]);
            }
            prev = d;
        }
        requestAnimationFrame(frame);
    }
    requestAnimationFrame(frame);
    for (const type of ['mousedown', 'mousemove', 'mouseup']) {
        window.addEventListener(type, e => P.events.push([type, e.timeStamp, e.clientX, e.clientY]), true);
    }
    const watch = (sel, list) => {
        const el = root.querySelector(sel);
        if (!el) throw new Error('no ' + sel);
        list.push([performance.now(), el.textContent]);
        new MutationObserver(() => list.push([performance.now(), el.textContent]))
            .observe(el, {subtree: true, childList: true, characterData: true});
    };
    watch('.kipup-state', P.states);
    watch('.kipup-status', P.statuses);
    return true;
}"""


def install_probe(page, root_selector: str = ".kipup-workbench") -> None:
    page.evaluate(PROBE_JS, root_selector)


def probe_now(page) -> float:
    """The page's clock (performance.now(), ms)."""
    return float(page.evaluate("() => performance.now()"))


def last_event_time(page, kind: str) -> float:
    return float(page.evaluate("(k) => { const e = window.__kp.events.filter(e => e[0] === k); "
                               "return e.length ? e[e.length - 1][1] : -1; }", kind))


def wait_canvas_change_after(page, t_ms: float, timeout_ms: float, what: str = "event") -> float:
    """Time (page clock, ms) of the first canvas change after ``t_ms``; AssertionError on timeout."""
    from playwright.sync_api import TimeoutError as PlaywrightTimeout

    try:
        handle = page.wait_for_function(
            "(t) => { const c = window.__kp.changes.find(c => c[0] > t); return c ? c[0] : null; }",
            arg=t_ms, timeout=timeout_ms, polling=20)
    except PlaywrightTimeout:
        raise AssertionError(f"the 3D view did not change within {timeout_ms / 1000:.0f} s after the {what}") from None
    return float(handle.json_value())


def wait_state(page, predicate_js: str, after_ms: float, timeout_ms: float) -> tuple[float, dict]:
    """First published workbench state after ``after_ms`` (page clock) for which the JS expression
    ``predicate_js`` (of ``s``, the parsed state) is true: (page time, state)."""
    from playwright.sync_api import TimeoutError as PlaywrightTimeout

    try:
        handle = page.wait_for_function(
            f"""(t) => {{
                for (const [when, text] of window.__kp.states) {{
                    if (when < t) continue;
                    let s; try {{ s = JSON.parse(text); }} catch (e) {{ continue; }}
                    if ({predicate_js}) return [when, text];
                }}
                return null;
            }}""",
            arg=after_ms, timeout=timeout_ms, polling=50)
    except PlaywrightTimeout:
        last = page.evaluate("() => { const s = window.__kp.states; return s.length ? s[s.length - 1][1] : ''; }")
        status = page.evaluate("() => { const s = window.__kp.statuses; return s.length ? s[s.length - 1][1] : ''; }")
        raise AssertionError(f"no workbench state with {predicate_js} within {timeout_ms / 1000:.0f} s; "
                             f"last state {last}; status line {status!r}") from None
    when, text = handle.json_value()
    return float(when), json.loads(text)


def canvas_changes_between(page, t0: float, t1: float) -> int:
    return int(page.evaluate("([a, b]) => window.__kp.changes.filter(c => c[0] > a && c[0] <= b).length",
                             [t0, t1]))
