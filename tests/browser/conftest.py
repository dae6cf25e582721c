"""Browser test layer: JupyterLab 4 driven in Debian's Chromium with the network blocked.

One JupyterLab server and one Chromium are shared by the whole layer (session
fixtures).  Every request a page makes goes through :class:`NetworkGuard`: a
request to anything but 127.0.0.1/localhost (or a ``data:``/``blob:`` URL, and
``file:`` for the standalone report) is aborted and recorded, and the test that
made it fails.  Chromium is Debian's (``/usr/bin/chromium``; ``.ci/browser-setup.sh``
installs it) — Playwright never downloads a browser here.

Run: ``python -m pytest -q -m browser tests/browser``.
Screenshots land in ``tests/artifacts/`` (git-ignored).
"""

from __future__ import annotations

import os
import shutil
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest
from .harness import ARTIFACTS, CHROMIUM, CHROMIUM_ARGS, DOC_SCREENSHOTS, ROOT, LabServer, start_lab_server


@pytest.fixture(scope="session")
def artifacts() -> Path:
    ARTIFACTS.mkdir(parents=True, exist_ok=True)
    return ARTIFACTS


@pytest.fixture(scope="session")
def lab_server(tmp_path_factory: pytest.TempPathFactory, artifacts: Path) -> Iterator[LabServer]:
    """One JupyterLab for the whole layer."""
    try:
        with start_lab_server(tmp_path_factory.mktemp("lab"), artifacts / "jupyterlab.log") as server:
            yield server
    except RuntimeError as exc:
        pytest.fail(str(exc))


# --------------------------------------------------------------------------- browser
@pytest.fixture(scope="session")
def browser() -> Iterator[Any]:
    """Debian's headless Chromium through Playwright (never a downloaded browser)."""
    if not CHROMIUM.exists():
        pytest.fail(f"{CHROMIUM} is missing: run `sh .ci/browser-setup.sh` (apt-get install chromium)")
    from playwright.sync_api import sync_playwright

    with sync_playwright() as pw:
        b = pw.chromium.launch(executable_path=str(CHROMIUM), headless=True, args=CHROMIUM_ARGS)
        try:
            yield b
        finally:
            b.close()


@pytest.fixture(scope="session", autouse=True)
def _update_doc_screenshots(artifacts: Path) -> Iterator[None]:
    """With ``NBEDA_UPDATE_SCREENSHOTS=1``, copy the README's screenshots after the run."""
    yield
    if os.environ.get("NBEDA_UPDATE_SCREENSHOTS") != "1":
        return
    docs = ROOT / "docs" / "screenshots"
    docs.mkdir(parents=True, exist_ok=True)
    for src, dst in DOC_SCREENSHOTS.items():
        if (artifacts / src).exists():
            shutil.copy(artifacts / src, docs / dst)
