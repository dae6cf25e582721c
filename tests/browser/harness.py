"""Harness of the browser layer: JupyterLab server, network guard, console log, screenshots.

Plain helpers (no fixtures), imported by the test modules
(``from .harness import ...``); the fixtures live in ``conftest.py``.
"""

from __future__ import annotations

import contextlib
import json
import os
import secrets
import shutil
import socket
import subprocess
import sys
import time
import urllib.error
import urllib.request
from collections.abc import Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any
from urllib.parse import urlsplit


ROOT = Path(__file__).resolve().parents[2]
TOUR = ROOT / "example_notebooks" / "greenhouse_tour.ipynb"
ENGINE_NOTEBOOK = ROOT / "example_notebooks" / "greenhouse_engine.ipynb"
#: rows of the Parquet file the engine notebook writes in the browser layer (10M in the bench)
ENGINE_ROWS = 300_000
ARTIFACTS = ROOT / "tests" / "artifacts"
CHROMIUM = Path("/usr/bin/chromium")

#: Required launch arguments (see issue "Proven in a real browser").  The host-resolver
#: rule is extra belt and braces: even traffic that never reaches Playwright's router
#: cannot resolve a name other than localhost.
CHROMIUM_ARGS = [
    "--no-sandbox",
    "--disable-gpu",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    "--no-first-run",
    "--disable-dev-shm-usage",  # containers often have a tiny /dev/shm
    "--host-resolver-rules=MAP * ~NOTFOUND, EXCLUDE localhost, EXCLUDE 127.0.0.1",
]

LOCAL_HOSTS = {"127.0.0.1", "localhost", "[::1]", "::1"}
VIEWPORT = {"width": 1200, "height": 800}

#: Console messages that are not errors of ours, each with the reason it is benign.
#: Keep this list short; every entry needs a written reason.
#: (Empty so far: the one error seen while building the layer, the debugger's "Could not
#: restore the debugger state", is avoided at the source; see ``_write_page_config``.)
BENIGN_CONSOLE: list[tuple[str, str]] = []


# --------------------------------------------------------------------------- network guard
@dataclass
class NetworkGuard:
    """Routes every request of a browser context; aborts and records non-local ones."""

    allow_file: bool = False
    allow_local: bool = True  # False for the standalone file: it may request nothing at all
    blocked: list[str] = field(default_factory=list)
    requests: list[str] = field(default_factory=list)

    def allowed(self, url: str) -> bool:
        parts = urlsplit(url)
        if parts.scheme in ("data", "blob", "about"):
            return True
        if parts.scheme == "file":
            return self.allow_file
        if parts.scheme in ("http", "https", "ws", "wss"):
            return self.allow_local and (parts.hostname or "") in LOCAL_HOSTS
        return False

    def route(self, route: Any) -> None:
        url = route.request.url
        self.requests.append(url)
        if self.allowed(url):
            route.continue_()
        else:
            self.blocked.append(url)
            route.abort("blockedbyclient")

    def on_websocket(self, ws: Any) -> None:
        # Playwright's router does not see WebSocket handshakes; a non-local one is
        # recorded here and fails the test (the host-resolver rule stops it connecting).
        self.requests.append(ws.url)
        if not self.allowed(ws.url):
            self.blocked.append(ws.url)

    def install(self, context: Any) -> None:
        context.route("**/*", self.route)

    def assert_clean(self) -> None:
        assert not self.blocked, f"requests outside 127.0.0.1 were attempted: {self.blocked}"


@dataclass
class ConsoleLog:
    """Console errors and uncaught page errors of one page."""

    errors: list[str] = field(default_factory=list)
    ignored: list[tuple[str, str]] = field(default_factory=list)

    def on_console(self, msg: Any) -> None:
        if msg.type != "error":
            return
        text = f"{msg.text} @ {msg.location.get('url', '')}"
        for needle, reason in BENIGN_CONSOLE:
            if needle in text:
                self.ignored.append((text, reason))
                return
        self.errors.append(text)

    def on_pageerror(self, exc: Any) -> None:
        self.errors.append(f"uncaught: {exc}")

    def attach(self, page: Any) -> None:
        page.on("console", self.on_console)
        page.on("pageerror", self.on_pageerror)

    def assert_clean(self) -> None:
        assert not self.errors, "console errors:\n" + "\n".join(self.errors)


# --------------------------------------------------------------------------- server
@dataclass
class LabServer:
    url: str
    token: str
    root: Path
    process: subprocess.Popen[bytes]
    log: Path

    def api(self, path: str) -> Any:
        req = urllib.request.Request(f"{self.url}{path}", headers={"Authorization": f"token {self.token}"})
        with urllib.request.urlopen(req, timeout=10) as resp:  # noqa: S310 - 127.0.0.1 only
            return json.loads(resp.read().decode("utf-8"))

    def notebook(self, name: str) -> dict[str, Any]:
        """The saved notebook as the server has it on disk (nbformat JSON)."""
        return json.loads((self.root / name).read_text(encoding="utf-8"))


def _free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def _write_lab_settings(settings_dir: Path) -> None:
    """User settings for the throwaway Lab: no news or update checks, every cell in the DOM."""
    files = {
        # No announcements feed and no update check (both would reach the internet).
        "@jupyterlab/apputils-extension/notification.jupyterlab-settings": {
            "fetchNews": "false",
            "checkForUpdates": False,
        },
        # Render every cell (no virtual scrolling), so locators see the whole notebook; start
        # the notebook's own kernel without asking.
        "@jupyterlab/notebook-extension/tracker.jupyterlab-settings": {
            "windowingMode": "none",
            "autoStartDefaultKernel": True,
        },
    }
    for rel, value in files.items():
        path = settings_dir / rel
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_text(json.dumps(value), encoding="utf-8")


def _write_page_config(config_dir: Path) -> None:
    """Lab page config: the debugger front end is off.

    The tests never debug, and the debugger's start-up probe logs a console error
    ("Could not restore the debugger state") whenever the kernel is slow to start;
    switching it off keeps the no-console-error check meaningful instead of
    allow-listing that message.
    """
    path = config_dir / "labconfig" / "page_config.json"
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(json.dumps({"disabledExtensions": {"@jupyterlab/debugger-extension": True}}), encoding="utf-8")


@contextlib.contextmanager
def start_lab_server(base: Path, log: Path) -> Iterator[LabServer]:
    """JupyterLab 4 on 127.0.0.1 (random free port) serving ``base/root`` with the tour notebook."""
    root = base / "root"
    root.mkdir(parents=True, exist_ok=True)
    shutil.copy(TOUR, root / TOUR.name)
    shutil.copy(ENGINE_NOTEBOOK, root / ENGINE_NOTEBOOK.name)
    settings = base / "settings"
    _write_lab_settings(settings)
    _write_page_config(base / "config")
    # A token from the test environment (NBEDA_TEST_TOKEN) or a fresh random one; handed
    # to the server through its environment so it never shows in a process listing.
    token = os.environ.get("NBEDA_TEST_TOKEN") or secrets.token_hex(24)
    env = dict(os.environ)
    env.update(
        JUPYTER_TOKEN=token,
        JUPYTER_CONFIG_DIR=str(base / "config"),
        JUPYTER_RUNTIME_DIR=str(base / "runtime"),
        JUPYTER_DATA_DIR=str(base / "data"),  # no user-level kernels or lab extensions
        JUPYTERLAB_SETTINGS_DIR=str(settings),
        JUPYTERLAB_WORKSPACES_DIR=str(base / "workspaces"),
        IPYTHONDIR=str(base / "ipython"),
        # The kernel spec runs `python`: make it this interpreter (where nbeda is installed).
        PATH=str(Path(sys.executable).parent) + os.pathsep + env.get("PATH", ""),
        PYTHONUNBUFFERED="1",
        NBEDA_DEMO_ROWS=str(ENGINE_ROWS),  # the engine notebook's file size (kernels inherit it)
    )
    env.pop("JUPYTER_PATH", None)
    last_error = ""
    for _attempt in range(3):  # a free port may be taken between probing and binding
        port = _free_port()
        cmd = [
            sys.executable,
            "-m",
            "jupyterlab",
            "--ServerApp.open_browser=False",
            "--ServerApp.ip=127.0.0.1",
            f"--ServerApp.port={port}",
            "--ServerApp.port_retries=0",
            f"--ServerApp.root_dir={root}",
            "--ServerApp.allow_remote_access=False",
            "--LabApp.news_url=None",
            "--LabApp.check_for_updates_class=jupyterlab.NeverCheckForUpdate",
            "--LabApp.extension_manager=readonly",
        ]
        if hasattr(os, "geteuid") and os.geteuid() == 0:
            cmd.append("--ServerApp.allow_root=True")  # CI runs as root in a throwaway machine
        fh = log.open("wb")
        proc = subprocess.Popen(cmd, cwd=root, env=env, stdout=fh, stderr=subprocess.STDOUT)
        server = LabServer(url=f"http://127.0.0.1:{port}", token=token, root=root, process=proc, log=log)
        deadline = time.monotonic() + 90
        while time.monotonic() < deadline and proc.poll() is None:
            try:
                server.api("/api/status")
                break
            except (urllib.error.URLError, ConnectionError, TimeoutError, OSError) as exc:
                last_error = str(exc)
                time.sleep(0.25)
        else:
            proc.kill()
            proc.wait(timeout=10)
            fh.close()
            last_error = log.read_text(errors="replace")[-3000:]
            continue
        try:
            yield server
        finally:
            proc.terminate()
            try:
                proc.wait(timeout=15)
            except subprocess.TimeoutExpired:
                proc.kill()
                proc.wait(timeout=10)
            fh.close()
        return
    raise RuntimeError(f"JupyterLab did not start on 127.0.0.1; last output:\n{last_error}")


@dataclass
class Session:
    """One browser context + page with its network guard and console log."""

    context: Any
    page: Any
    guard: NetworkGuard
    console: ConsoleLog
    saved: dict[str, Any] = field(default_factory=dict)  # e.g. the notebook as saved after the run

    def close(self) -> None:
        self.context.close()


def open_session(
    browser: Any,
    *,
    origin: str | None = None,
    allow_file: bool = False,
    allow_local: bool = True,
    javascript: bool = True,
) -> Session:
    """A fresh context + page behind a :class:`NetworkGuard`.

    ``origin``: grant clipboard read/write there (the Copy button test reads it back).
    """
    context = browser.new_context(
        viewport=VIEWPORT,
        device_scale_factor=1,
        service_workers="block",  # their requests would bypass the router
        java_script_enabled=javascript,
    )
    if origin:
        context.grant_permissions(["clipboard-read", "clipboard-write"], origin=origin)
    guard = NetworkGuard(allow_file=allow_file, allow_local=allow_local)
    guard.install(context)
    page = context.new_page()
    page.on("websocket", guard.on_websocket)
    console = ConsoleLog()
    console.attach(page)
    page.set_default_timeout(30_000)
    return Session(context=context, page=page, guard=guard, console=console)



def save_doc_screenshot(page: Any, element: Any, path: Path, *, max_height: int = VIEWPORT["height"]) -> None:
    """A viewport-sized PNG of ``element`` scrolled to the top of the view (for the README).

    At most 1200×800 px: what a person sees on opening the tab, not the whole scroll.
    """
    element.evaluate("e => e.scrollIntoView({block: 'start'})")
    page.wait_for_timeout(150)
    box = element.bounding_box()
    if box is None:
        return
    bottom = VIEWPORT["height"]
    area = page.locator(".jp-NotebookPanel:not(.lm-mod-hidden) .jp-WindowedPanel-outer, .jp-NotebookPanel-notebook")
    if area.count():  # inside Lab: stop above the status bar
        outer = area.first.bounding_box()
        if outer:
            bottom = min(bottom, outer["y"] + outer["height"])
    x = max(box["x"] - 8, 0)
    y = max(box["y"] - 8, 0)
    width = min(box["width"] + 16, VIEWPORT["width"] - x)
    height = min(box["height"] + 16, max_height - y, bottom - y)
    page.screenshot(path=str(path), clip={"x": x, "y": y, "width": width, "height": height})


def save_area_screenshot(page: Any, anchor: Any, frame: Any, path: Path, *, block: str = "center") -> None:
    """Scroll ``anchor`` into view and capture the visible part of ``frame`` around it.

    Used for charts (a chart in the middle of the picture, with its tab around it).
    """
    anchor.evaluate(f"e => e.scrollIntoView({{block: '{block}'}})")
    page.wait_for_timeout(150)
    box = frame.bounding_box()
    if box is None:
        return
    top, bottom = 0.0, float(VIEWPORT["height"])
    area = page.locator(".jp-NotebookPanel:not(.lm-mod-hidden) .jp-WindowedPanel-outer, .jp-NotebookPanel-notebook")
    if area.count():
        outer = area.first.bounding_box()
        if outer:
            top, bottom = max(top, outer["y"]), min(bottom, outer["y"] + outer["height"])
    x = max(box["x"] - 8, 0)
    y = max(box["y"] - 8, top)
    width = min(box["width"] + 16, VIEWPORT["width"] - x)
    height = min(box["y"] + box["height"] + 8, bottom) - y
    if width > 0 and height > 0:
        page.screenshot(path=str(path), clip={"x": x, "y": y, "width": width, "height": height})


#: The screenshots the README shows: artifact name -> docs/screenshots name.
DOC_SCREENSHOTS = {
    "lab-spread.png": "lab-spread.png",
    "chart-shape.png": "shape-chart.png",
    "chart-gaps.png": "gaps-chart.png",
    "chart-links.png": "links-chart.png",
    "tab-segments.png": "segments.png",
    "code-cell.png": "code-cell.png",
    "standalone-spread.png": "standalone-report.png",
    "engine-tab-spread.png": "engine-spread.png",
}
