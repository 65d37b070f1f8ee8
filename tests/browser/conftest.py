"""Fixtures for tests that open JupyterLab in headless Chromium.

Session fixtures start one JupyterLab server (free port on 127.0.0.1, no token or password,
private config/data/runtime folders, the notebook folder a temporary copy of ``tutorials/``)
and one headless Chromium (Debian's ``/usr/bin/chromium`` driven by Python playwright, software
WebGL through SwiftShader). The ``page`` fixture gives each test a fresh browser page that
records console errors: any error other than the two known harmless ones fails the test. A
screenshot of the page is saved to ``test-artifacts/browser/`` after every test, pass or fail.

Flags and pitfalls: ``/work/shared/notes/browser-testing.md`` (summarised in DEVELOPERS.md).

Chromium, playwright or JupyterLab not installed: the tests are skipped with the reason, except
when ``CI=true``, where the fixtures raise an error instead (CI must never pass by skipping).
Installed but failing to start: always an error. ``KIPUP_CHROMIUM`` overrides the browser path
(default ``/usr/bin/chromium``, what ``apt-get install chromium`` gives).
"""
from __future__ import annotations

import json
import os
import re
import shutil
import signal
import socket
import subprocess
import sys
import time
import urllib.error
import urllib.request
from dataclasses import dataclass, field
from http.cookiejar import CookieJar
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]
TUTORIALS = ROOT / "tutorials"
ARTIFACTS = ROOT / "test-artifacts" / "browser"

IN_CI = os.environ.get("CI", "").strip().lower() == "true"
CHROMIUM = os.environ.get("KIPUP_CHROMIUM", "/usr/bin/chromium")
# measured flags, see /work/shared/notes/browser-testing.md
CHROMIUM_ARGS = [
    "--no-sandbox",
    "--use-angle=swiftshader",
    "--enable-unsafe-swiftshader",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    "--no-first-run",
    "--disable-quic",
    "--disable-dev-shm-usage",
]
# The only console messages allowed on a page (matched by text; see the notes above):
# a pythreejs shadow-camera trait echoed back as a string, and a lumino version warning.
HARMLESS_CONSOLE = (
    re.compile(r"Error setting state: t\.on is not a function"),
    re.compile(r"Unsatisfied version .*@lumino/coreutils"),
)

SERVER_START_TIMEOUT = 90.0  # s, until /api/status answers
BROWSER_TIMEOUT_MS = 30_000  # default playwright timeout per action


def unavailable(reason: str):
    """A dependency is not installed: skip locally; in CI (CI=true) an error, never a skip."""
    if IN_CI:
        pytest.fail(f"browser tests cannot run in CI: {reason}", pytrace=False)
    pytest.skip(reason)


def broken(reason: str):
    """A dependency is installed but does not start: always an error."""
    pytest.fail(reason, pytrace=False)


def _free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


# ----------------------------------------------------------------------------
# JupyterLab server
# ----------------------------------------------------------------------------


@dataclass
class LabServer:
    """A running test JupyterLab server."""

    url: str  # http://127.0.0.1:PORT
    notebook_dir: Path  # the temporary copy of tutorials/ the server serves
    marker_dir: Path  # KIPUP_MARKER_DIR of the server (and so of its kernels)
    log: Path
    proc: subprocess.Popen = field(repr=False)

    def workspace_url(self, notebook: str, workspace: str) -> str:
        """URL opening ``notebook`` alone in a fresh workspace (``?reset`` drops restored tabs)."""
        return f"{self.url}/lab/workspaces/{workspace}/tree/{notebook}?reset"

    def api(self, method: str, path: str, timeout: float = 10.0):
        """Call the REST API; non-GET calls send the _xsrf cookie back as X-XSRFToken."""
        jar = CookieJar()
        opener = urllib.request.build_opener(urllib.request.HTTPCookieProcessor(jar))
        headers = {"Referer": f"{self.url}/lab"}
        if method != "GET":
            opener.open(f"{self.url}/lab", timeout=timeout).read()
            xsrf = next((c.value for c in jar if c.name == "_xsrf"), None)
            if xsrf:
                headers["X-XSRFToken"] = xsrf
        req = urllib.request.Request(f"{self.url}{path}", method=method, headers=headers)
        with opener.open(req, timeout=timeout) as resp:
            body = resp.read()
        return json.loads(body) if body else None

    def shutdown_sessions(self) -> None:
        """Delete every session (and so stop its kernel), so kernels do not pile up between tests."""
        for s in self.api("GET", "/api/sessions"):
            try:
                self.api("DELETE", f"/api/sessions/{s['id']}")
            except urllib.error.HTTPError:
                pass

    def log_tail(self, n: int = 40) -> str:
        try:
            return "\n".join(self.log.read_text(errors="replace").splitlines()[-n:])
        except OSError:
            return ""


def _write_user_settings(settings_dir: Path) -> None:
    """Lab user settings for the test server: no news or update checks (a toast could cover the page)."""
    settings = {
        "@jupyterlab/apputils-extension/notification.jupyterlab-settings": {
            "fetchNews": "false",
            "checkForUpdates": False,
        },
    }
    for rel, value in settings.items():
        path = settings_dir / rel
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_text(json.dumps(value))


def _stop(proc: subprocess.Popen, timeout: float = 15.0) -> None:
    """Stop a process started in its own session, then its group (kernels), bounded."""
    if proc.poll() is None:
        proc.send_signal(signal.SIGINT)  # jupyter stops its kernels on SIGINT (twice: no prompt)
        time.sleep(0.2)
        if proc.poll() is None:
            proc.send_signal(signal.SIGINT)
        try:
            proc.wait(timeout=timeout)
        except subprocess.TimeoutExpired:
            pass
    try:  # whatever is left of the group this server started (stray kernels)
        os.killpg(proc.pid, signal.SIGKILL)
    except (ProcessLookupError, PermissionError):
        pass
    try:
        proc.wait(timeout=5)
    except subprocess.TimeoutExpired:
        pass


@pytest.fixture(scope="session")
def lab_server(tmp_path_factory) -> LabServer:
    try:
        import jupyterlab  # noqa: F401
    except ImportError as err:
        unavailable(f"JupyterLab is not installed ({err}); pip install -e '.[test]'")

    base = tmp_path_factory.mktemp("lab")
    notebook_dir = base / "tutorials"
    shutil.copytree(TUTORIALS, notebook_dir, ignore=shutil.ignore_patterns(".ipynb_checkpoints"))
    marker_dir = base / "markers"
    marker_dir.mkdir()
    config_dir, data_dir, runtime_dir = base / "config", base / "data", base / "runtime"
    for d in (config_dir, data_dir, runtime_dir):
        d.mkdir()
    settings_dir = config_dir / "lab" / "user-settings"
    _write_user_settings(settings_dir)

    env = dict(os.environ)
    env.update(
        JUPYTER_CONFIG_DIR=str(config_dir),
        JUPYTER_DATA_DIR=str(data_dir),
        JUPYTER_RUNTIME_DIR=str(runtime_dir),
        IPYTHONDIR=str(base / "ipython"),
        KIPUP_MARKER_DIR=str(marker_dir),
        PYTHONUNBUFFERED="1",
    )
    # JUPYTER_PATH stays as it is: .ci/run may put a private python3 kernel spec on it.
    env.setdefault("OMP_NUM_THREADS", "1")  # 2-core machines: keep solver threads from fighting

    port = _free_port()
    ARTIFACTS.mkdir(parents=True, exist_ok=True)
    log = ARTIFACTS / "jupyter-server.log"
    cmd = [
        sys.executable, "-m", "jupyterlab",
        "--no-browser", f"--port={port}", "--port-retries=0",
        "--ServerApp.ip=127.0.0.1", "--ServerApp.token=", "--ServerApp.password=",
        "--allow-root", f"--notebook-dir={notebook_dir}",
        "--LabApp.news_url=None",
        f"--LabApp.user_settings_dir={settings_dir}",
        f"--LabApp.workspaces_dir={config_dir / 'lab' / 'workspaces'}",
    ]
    with open(log, "wb") as logf:
        proc = subprocess.Popen(cmd, env=env, cwd=str(base), stdout=logf, stderr=subprocess.STDOUT,
                                stdin=subprocess.DEVNULL, start_new_session=True)
    server = LabServer(url=f"http://127.0.0.1:{port}", notebook_dir=notebook_dir, marker_dir=marker_dir,
                       log=log, proc=proc)
    deadline = time.monotonic() + SERVER_START_TIMEOUT
    try:
        while True:
            if proc.poll() is not None:
                broken(f"JupyterLab exited with code {proc.returncode} on start:\n{server.log_tail()}")
            try:
                status = server.api("GET", "/api/status", timeout=2.0)
                if status is not None:
                    break
            except (urllib.error.URLError, ConnectionError, OSError, ValueError):
                pass
            if time.monotonic() > deadline:
                broken(f"JupyterLab did not answer /api/status within {SERVER_START_TIMEOUT:.0f} s:\n"
                            f"{server.log_tail()}")
            time.sleep(0.25)
        yield server
    finally:
        _stop(proc)


# ----------------------------------------------------------------------------
# Chromium
# ----------------------------------------------------------------------------


@pytest.fixture(scope="session")
def browser():
    try:
        from playwright.sync_api import Error as PlaywrightError, sync_playwright
    except ImportError as err:
        unavailable(f"python playwright is not installed ({err}); pip install -e '.[test]'")
    if not os.access(CHROMIUM, os.X_OK):
        unavailable(f"no Chromium at {CHROMIUM}: apt-get install -y chromium (never `playwright install`)")
    pw = sync_playwright().start()
    try:
        try:
            b = pw.chromium.launch(executable_path=CHROMIUM, headless=True, args=CHROMIUM_ARGS, timeout=60_000)
        except PlaywrightError as err:
            broken(f"Chromium at {CHROMIUM} does not start: {err}")
        try:
            yield b
        finally:
            b.close()
    finally:
        pw.stop()


@dataclass
class Console:
    """Console messages and uncaught exceptions of one page."""

    errors: list[str] = field(default_factory=list)  # console.error and uncaught page errors
    messages: list[str] = field(default_factory=list)  # everything, for the log

    def unexpected(self) -> list[str]:
        return [e for e in self.errors if not any(p.search(e) for p in HARMLESS_CONSOLE)]

    def assert_clean(self) -> None:
        bad = self.unexpected()
        assert not bad, "unexpected console errors in the page:\n  " + "\n  ".join(bad)


def artifact_name(nodeid_name: str) -> str:
    return re.sub(r"[^A-Za-z0-9_.-]+", "_", nodeid_name)


@pytest.fixture
def page(browser, lab_server, request):
    """A fresh page (1400x1000) in its own browser context. ``page.console`` holds its console
    errors; an unexpected one fails the test at teardown too. The page is screenshotted to
    ``test-artifacts/browser/<test>.png`` at the end, pass or fail, and its console saved to
    ``<test>.console.txt``. Sessions (kernels) are shut down afterwards."""
    context = browser.new_context(viewport={"width": 1400, "height": 1000})
    context.set_default_timeout(BROWSER_TIMEOUT_MS)
    pg = context.new_page()
    console = Console()

    def on_console(msg):
        text = f"[{msg.type}] {msg.text}"
        console.messages.append(text)
        if msg.type == "error":
            console.errors.append(msg.text)

    def on_pageerror(exc):
        text = f"uncaught: {exc}"
        console.messages.append(text)
        console.errors.append(text)

    pg.on("console", on_console)
    pg.on("pageerror", on_pageerror)
    pg.console = console  # type: ignore[attr-defined]
    name = artifact_name(request.node.name)
    ARTIFACTS.mkdir(parents=True, exist_ok=True)
    try:
        yield pg
    finally:
        try:
            pg.screenshot(path=str(ARTIFACTS / f"{name}.png"), timeout=15_000)
        except Exception as err:  # noqa: BLE001 - a screenshot must not hide the test's own result
            console.messages.append(f"(final screenshot failed: {err})")
        (ARTIFACTS / f"{name}.console.txt").write_text("\n".join(console.messages) + "\n")
        context.close()
        try:
            lab_server.shutdown_sessions()
        except Exception:  # noqa: BLE001
            pass
    console.assert_clean()
