"""The engine notebook in JupyterLab: ``%eda <file.parquet>`` opens the widget with the data in DuckDB.

What a person would check: the notebook (which writes the greenhouse demo to Parquet,
300,000 rows here) runs top to bottom; the widget's header names the engine; every
tab, once clicked, shows its tables with rows and the table saying how each number
was computed (exact, approximate or sample-based); nothing is fetched from outside
127.0.0.1 and the console stays clean.  Expected header: computed here from the
same file the notebook wrote.
"""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest

from nbeda.sections import SECTIONS, TITLES

from .harness import ENGINE_NOTEBOOK, ENGINE_ROWS, LabServer, Session, open_session, save_doc_screenshot
from .test_browser_notebook import _menu, _visible_panel, _wait_kernel_idle, _wait_run_finished

pytestmark = pytest.mark.browser

RUN_TIMEOUT_MS = 420_000
TAB_TIMEOUT_MS = 180_000


@pytest.fixture(scope="module")
def engine_nb(browser: Any, lab_server: LabServer, artifacts: Path) -> Iterator[Session]:
    s = open_session(browser, origin=lab_server.url)
    page = s.page
    # A workspace of its own: the tour's layout (the default workspace) never reopens this notebook.
    page.goto(f"{lab_server.url}/lab/workspaces/engine/tree/{ENGINE_NOTEBOOK.name}?token={lab_server.token}")
    page.wait_for_selector(".jp-Notebook .jp-Cell", timeout=120_000)
    _wait_kernel_idle(page, timeout=120_000)
    page.locator(".jp-Notebook").first.click(position={"x": 5, "y": 5})
    page.keyboard.press("Escape")
    _menu(page, "Run", "Run All Cells")
    _wait_run_finished(page, timeout=RUN_TIMEOUT_MS)
    page.screenshot(path=str(artifacts / "engine-notebook-after-run.png"))
    try:
        yield s
    finally:
        s.close()


def _widget(page: Any) -> Any:
    return page.locator(".nbeda-live").first


def test_cells_run_and_header_names_the_engine(engine_nb: Session, lab_server: LabServer, monkeypatch: Any) -> None:
    page = engine_nb.page
    errors = page.locator(".jp-OutputArea-output[data-mime-type='application/vnd.jupyter.stderr']").filter(
        has_text="Traceback")
    assert errors.count() == 0, errors.first.inner_text()[:2000]
    widget = _widget(page)
    widget.wait_for(timeout=60_000)
    header = widget.locator(".nb-header").first.inner_text().strip()
    import nbeda

    path = lab_server.root / f"greenhouse_{ENGINE_ROWS}.parquet"
    assert path.exists()
    monkeypatch.chdir(lab_server.root)  # the notebook opened the file by its relative name
    expected = nbeda.source(path.name, by="site", target="yield_kg").header_text()
    assert header == expected
    assert f"{ENGINE_ROWS:,} rows × 15 columns" in header and "engine duckdb" in header


@pytest.mark.parametrize("name", SECTIONS)
def test_every_tab_shows_tables_and_how_numbers_were_computed(engine_nb: Session, artifacts: Path, name: str) -> None:
    page = engine_nb.page
    blocked, errors = len(engine_nb.guard.blocked), len(engine_nb.console.errors)
    widget = _widget(page)
    tab = widget.locator(".lm-TabBar-tab").filter(has_text=TITLES[name]).first
    tab.click()
    panel = _visible_panel(widget)
    panel.locator(".nb-codepanel, .nb-status.nb-error, .nb-status.nb-unavailable").first.wait_for(
        timeout=TAB_TIMEOUT_MS)
    save_doc_screenshot(page, widget, artifacts / f"engine-tab-{name}.png")
    status = panel.locator(".nb-status")
    assert status.count() == 0, f"{TITLES[name]}: {status.first.inner_text()[:800]}"
    tables = panel.locator("table.nb-table")
    assert tables.count() >= 2
    heading = panel.locator("h4", has_text="How each number was computed")
    assert heading.count() == 1, panel.locator("h4").all_inner_texts()
    how = heading.first.locator("xpath=following-sibling::div[1]//table").inner_text()
    if name != "segments":  # 300,000 rows > the 100,000-row sample: some numbers are sample-based
        assert "sample (" in how
    if name in ("spread", "roles", "shape", "gaps", "segments"):
        assert "exact (all rows, by the engine)" in how
    code = panel.locator(".nb-codepanel").first.inner_text()
    assert "ibis" in code
    assert not engine_nb.guard.blocked[blocked:], engine_nb.guard.blocked[blocked:]
    assert not engine_nb.console.errors[errors:], engine_nb.console.errors[errors:]
