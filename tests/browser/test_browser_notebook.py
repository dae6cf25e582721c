"""The tour notebook in JupyterLab 4, in Debian's Chromium, with the network blocked.

What a person would check by hand: the notebook runs top to bottom; the report
widget shows seven tabs; every tab, once clicked, shows its tables (with rows) and
its charts drawn at a non-zero size; the Copy button puts exactly the tab's code
on the clipboard; ``%eda df --code spread`` puts exactly that code in a new cell
below; the saved notebook keeps a static HTML copy of the report for readers
without a kernel; and the page logs no console error and asks nothing of the
internet.  The expected code is computed in this test process from the same demo
data (``nbeda.demo.greenhouse()``), so the browser must show what the library
produces, character for character.
"""

from __future__ import annotations

import json
import time
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest
from .harness import TOUR, LabServer, Session, open_session, save_area_screenshot, save_doc_screenshot

import nbeda
from nbeda.report import Report
from nbeda.sections import SECTIONS, TITLES

pytestmark = pytest.mark.browser

NOTEBOOK = TOUR.name
RUN_TIMEOUT_MS = 420_000  # the whole tour on a busy 2-core machine (about 25 s when idle)
TAB_TIMEOUT_MS = 180_000  # one tab's first computation


@pytest.fixture(scope="module")
def expected() -> dict[str, Any]:
    """Reports built here, the way the tour's cells build them (same data, same options)."""
    df = nbeda.demo.greenhouse()
    return {
        "widget": Report(df, by="site", target="yield_kg", frame_name="df"),
        "plain": df.eda.report(frame_name="df"),
    }


def _prompts(page: Any) -> list[str]:
    return [t.strip() for t in page.locator(".jp-Notebook .jp-CodeCell .jp-InputPrompt").all_inner_texts()]


def _wait_kernel_idle(page: Any, timeout: int) -> None:
    page.wait_for_function(
        """() => {
            const bar = document.querySelector('.jp-NotebookPanel:not(.lm-mod-hidden) .jp-NotebookPanel-toolbar');
            const name = bar && bar.querySelector('.jp-KernelName');
            const ind = bar && bar.querySelector('.jp-Notebook-ExecutionIndicator');
            return !!name && name.innerText.includes('Python') && !!ind && ind.dataset.status === 'idle';
        }""",
        timeout=timeout,
    )


def _wait_run_finished(page: Any, timeout: int) -> None:
    """Every queued cell has run (or the run stopped at an error): no ``[*]`` prompt left."""
    page.wait_for_function(
        """() => {
            const ps = [...document.querySelectorAll('.jp-Notebook .jp-CodeCell .jp-InputPrompt')];
            if (!ps.length || !/\\[\\d+\\]/.test(ps[0].innerText)) return false;
            if (ps.some(p => p.innerText.includes('*'))) return false;
            const ind = document.querySelector('.jp-NotebookPanel:not(.lm-mod-hidden) .jp-Notebook-ExecutionIndicator');
            return !!ind && ind.dataset.status === 'idle';
        }""",
        timeout=timeout,
    )


def _menu(page: Any, menu: str, item: str) -> None:
    page.locator(".lm-MenuBar-itemLabel").get_by_text(menu, exact=True).click()
    page.locator(".lm-Menu-itemLabel").get_by_text(item, exact=True).click()


def save_and_read(page: Any, lab_server: LabServer, predicate: Any = None, timeout: float = 180) -> dict[str, Any]:
    """Save the notebook from the Lab menu; the notebook as written to disk.

    Waits until the file on disk changed and satisfies ``predicate``.
    """
    path = lab_server.root / NOTEBOOK
    before = path.stat().st_mtime_ns
    _menu(page, "File", "Save Notebook")
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if path.stat().st_mtime_ns != before:
            try:
                nb = json.loads(path.read_text(encoding="utf-8"))
            except json.JSONDecodeError:  # caught mid-write
                page.wait_for_timeout(200)
                continue
            if predicate is None or predicate(nb):
                return nb
        # Not time.sleep: Playwright's sync API runs the request router only while we are
        # inside one of its calls, so sleeping would stall the save request itself.
        page.wait_for_timeout(300)
    page.screenshot(path=str(lab_server.log.parent / "save-failed.png"))
    raise AssertionError(f"the notebook was not saved (as expected) within {timeout} s")


@pytest.fixture(scope="module")
def tour(browser: Any, lab_server: LabServer, artifacts: Path) -> Iterator[Session]:
    """The tour notebook opened in Lab, every cell run from the Run menu, then saved."""
    s = open_session(browser, origin=lab_server.url)
    page = s.page
    page.goto(f"{lab_server.url}/lab/tree/{NOTEBOOK}?token={lab_server.token}")
    page.wait_for_selector(".jp-Notebook .jp-Cell", timeout=120_000)
    _wait_kernel_idle(page, timeout=120_000)
    # More room for the report (and the screenshots): hide the file browser.
    page.locator(".jp-Notebook").first.click(position={"x": 5, "y": 5})
    page.keyboard.press("Escape")
    page.keyboard.press("Control+b")
    n_cells = page.locator(".jp-Notebook .jp-Cell").count()
    _menu(page, "Run", "Run All Cells")
    _wait_run_finished(page, timeout=RUN_TIMEOUT_MS)
    # The tour's `%eda df --code spread` adds a cell below itself; let it land before saving.
    try:
        page.wait_for_function(
            "n => document.querySelectorAll('.jp-Notebook .jp-Cell').length > n", arg=n_cells, timeout=30_000
        )
    except Exception:  # asserted by test_code_magic_puts_exact_code_in_new_cell_below
        pass
    s.saved = save_and_read(page, lab_server)
    page.screenshot(path=str(artifacts / "notebook-after-run.png"))
    try:
        yield s
    finally:
        page.screenshot(path=str(artifacts / "notebook-at-end.png"))
        s.close()


@pytest.fixture(autouse=True)
def _each_test_stays_offline_and_error_free(tour: Session) -> Iterator[None]:
    """Blame the test that made an outside request or logged a console error."""
    blocked, errors = len(tour.guard.blocked), len(tour.console.errors)
    yield
    assert not tour.guard.blocked[blocked:], f"requests outside 127.0.0.1: {tour.guard.blocked[blocked:]}"
    assert not tour.console.errors[errors:], "console errors:\n" + "\n".join(tour.console.errors[errors:])


def _widget(page: Any) -> Any:
    return page.locator(".nbeda-live").first


def _visible_panel(widget: Any) -> Any:
    return widget.locator(".widget-tab-contents > .widget-box:not(.lm-mod-hidden)").first


# ------------------------------------------------------------------------- tests
def test_every_cell_runs_without_error(tour: Session) -> None:
    nb = tour.saved
    cells = [c for c in nb["cells"] if c["cell_type"] == "code"]
    failures = [
        f"{''.join(c['source'])[:60]!r}: {o.get('ename')}: {o.get('evalue')}"
        for c in cells
        for o in c.get("outputs", [])
        if o.get("output_type") == "error"
    ]
    assert not failures, "cells failed:\n" + "\n".join(failures)
    # Cells of the tour itself (a `--code` cell adds a cell of its own below, not run).
    tour_sources = {"".join(c["source"]) for c in json.loads(TOUR.read_text(encoding="utf-8"))["cells"]}
    not_run = [
        "".join(c["source"])[:60]
        for c in cells
        if c.get("execution_count") is None and "".join(c["source"]) in tour_sources
    ]
    assert not not_run, f"cells not run: {not_run}"
    assert len(cells) >= len([c for c in json.loads(TOUR.read_text(encoding="utf-8"))["cells"] if c["cell_type"] == "code"])


def test_widget_shows_header_and_seven_tabs(tour: Session, expected: dict[str, Any]) -> None:
    widget = _widget(tour.page)
    widget.wait_for(timeout=60_000)
    labels = [t.strip() for t in widget.locator(".lm-TabBar-tab .lm-TabBar-tabLabel").all_inner_texts()]
    assert labels == [TITLES[n] for n in SECTIONS] == [
        "Roles",
        "Spread",
        "Shape",
        "Gaps",
        "Extremes",
        "Links",
        "Segments",
    ]
    header = widget.locator(".nb-header").first.inner_text()
    assert header.strip() == expected["widget"].header_text()
    assert "5,000 rows × 15 columns" in header


@pytest.mark.parametrize("name", SECTIONS)
def test_tab_shows_tables_charts_and_copies_its_code(
    tour: Session, expected: dict[str, Any], artifacts: Path, name: str
) -> None:
    page = tour.page
    widget = _widget(page)
    tab = widget.locator(".lm-TabBar-tab").filter(has_text=TITLES[name]).first
    tab.click()
    assert "lm-mod-current" in (tab.get_attribute("class") or "")
    panel = _visible_panel(widget)
    # Computed on first opening: wait for the code panel, or for a status box that is final.
    panel.locator(".nb-codepanel, .nb-status.nb-error, .nb-status.nb-unavailable").first.wait_for(
        timeout=TAB_TIMEOUT_MS
    )
    save_doc_screenshot(page, widget, artifacts / f"tab-{name}.png")
    page.screenshot(path=str(artifacts / f"lab-{name}.png"))  # the whole Lab window
    status = panel.locator(".nb-status")
    assert status.count() == 0, f"{TITLES[name]} tab shows a status box: {status.first.inner_text()[:500]}"

    # Tables: at least one, each with rows.
    tables = panel.locator("table.nb-table")
    assert tables.count() >= 1, f"{TITLES[name]}: no table"
    for i in range(tables.count()):
        rows = tables.nth(i).locator("tbody tr").count()
        assert rows >= 1, f"{TITLES[name]}: table {i} has no rows"
    # The section's main table (``.table``) is on show: same header, same number of rows
    # (the display caps a table at 500 rows).
    shown_tables = panel.locator("table.nb-table").evaluate_all(
        """ts => ts.map(t => ({
            head: [...t.querySelectorAll('thead th')].map(th => th.textContent),
            rows: t.querySelectorAll('tbody tr').length,
        }))"""
    )
    table = expected["widget"].section(name).table
    head = [str(table.index.name or "")] + [str(c) for c in table.columns]
    matching = [t for t in shown_tables if t["head"] == head]
    assert matching, f"{TITLES[name]}: no table with header {head}; shown: {[t['head'] for t in shown_tables]}"
    assert any(t["rows"] == min(len(table), 500) for t in matching), (len(table), matching)

    # Charts: at least one SVG, each drawn with a non-zero size, none replaced by a failure note.
    charts = panel.locator(".nb-chart svg")
    assert charts.count() >= 1, f"{TITLES[name]}: no chart"
    for i in range(charts.count()):
        charts.nth(i).scroll_into_view_if_needed()
        box = charts.nth(i).bounding_box()
        assert box is not None and box["width"] > 0 and box["height"] > 0, f"{TITLES[name]} chart {i}: {box}"
    assert panel.locator(".nb-chart .nb-flag").count() == 0, panel.locator(".nb-chart .nb-flag").first.inner_text()
    save_area_screenshot(page, charts.first, widget, artifacts / f"chart-{name}.png")

    # Code panel: the code shown is the library's code; Copy puts exactly it on the clipboard.
    want = expected["widget"].code(name)
    code_panel = panel.locator(f".nb-codepanel[data-tab='{name}']")
    assert code_panel.count() == 1
    shown = code_panel.locator("pre.nb-code").evaluate("e => e.textContent")
    assert shown == want
    page.evaluate("navigator.clipboard.writeText('')")
    copy = code_panel.locator("button.nb-copy")
    copy.click()
    page.wait_for_function("b => b.textContent === 'Copied'", arg=copy.element_handle(), timeout=10_000)
    assert page.evaluate("navigator.clipboard.readText()") == want


def _clipboard_soon(page: Any, want: str, timeout_ms: int = 5_000) -> str:
    """The clipboard text, polled until it equals ``want`` (copying is asynchronous)."""
    got = ""
    for _ in range(max(timeout_ms // 100, 1)):
        got = page.evaluate("navigator.clipboard.readText()")
        if got == want:
            break
        page.wait_for_timeout(100)
    return str(got)


def test_copy_falls_back_without_clipboard_permission(tour: Session, expected: dict[str, Any]) -> None:
    """The Copy button still copies when the clipboard API refuses (no permission, e.g. over
    plain http on another host): simulated by making ``navigator.clipboard.writeText``
    reject, so the button's ``execCommand('copy')`` fallback must do the work."""
    page = tour.page
    widget = _widget(page)
    widget.locator(".lm-TabBar-tab").filter(has_text="Spread").first.click()
    code_panel = _visible_panel(widget).locator(".nb-codepanel[data-tab='spread']")
    code_panel.wait_for(timeout=TAB_TIMEOUT_MS)
    page.evaluate("navigator.clipboard.writeText('')")
    page.evaluate(
        "() => { navigator.clipboard.writeText = () => Promise.reject(new DOMException('refused', 'NotAllowedError')); }"
    )
    try:
        copy = code_panel.locator("button.nb-copy")
        copy.click()
        page.wait_for_function("b => b.textContent !== 'Copy'", arg=copy.element_handle(), timeout=10_000)
        assert copy.text_content() == "Copied"
    finally:
        page.evaluate("() => { delete navigator.clipboard.writeText; }")  # back to the real method
    assert page.evaluate("navigator.clipboard.readText()") == expected["widget"].code("spread")


def test_insert_below_inserts_or_copies_instead(tour: Session, expected: dict[str, Any]) -> None:
    """"Insert below" needs the notebook application; JupyterLab does not expose it to
    output HTML unless started with exposeAppInBrowser, so here it must degrade: the
    code goes to the clipboard instead, the button says how to paste it, and the
    ``%eda df --code`` hint is emphasised — no error, no stray cell."""
    page = tour.page
    widget = _widget(page)
    widget.locator(".lm-TabBar-tab").filter(has_text="Roles").first.click()
    code_panel = _visible_panel(widget).locator(".nb-codepanel[data-tab='roles']")
    code_panel.wait_for(timeout=TAB_TIMEOUT_MS)
    n_cells = page.locator(".jp-Notebook .jp-Cell").count()
    page.evaluate("navigator.clipboard.writeText('')")
    button = code_panel.locator("button.nb-insert")
    button.click()
    page.wait_for_function("b => b.textContent !== 'Insert below'", arg=button.element_handle(), timeout=10_000)
    text = button.text_content()
    if text == "Inserted":
        assert page.locator(".jp-Notebook .jp-Cell").count() == n_cells + 1
    else:
        assert (text or "").startswith("Copied instead"), text
        assert _clipboard_soon(page, expected["widget"].code("roles")) == expected["widget"].code("roles")
        assert "nb-hint-strong" in (code_panel.locator(".nb-hint").get_attribute("class") or "")
        assert "%eda df --code roles" in code_panel.locator(".nb-hint").inner_text()
        assert page.locator(".jp-Notebook .jp-Cell").count() == n_cells


def test_code_magic_puts_exact_code_in_new_cell_below(
    tour: Session, lab_server: LabServer, expected: dict[str, Any], artifacts: Path
) -> None:
    page = tour.page
    magic = "%eda df --code spread"
    last = page.locator(".jp-Notebook .jp-Cell").last
    last.locator(".jp-InputPrompt").first.click()
    page.keyboard.press("Escape")
    page.keyboard.press("b")  # new code cell below, selected in command mode
    page.keyboard.press("Enter")  # edit it
    page.keyboard.type(magic)
    n_cells = page.locator(".jp-Notebook .jp-Cell").count()
    page.keyboard.press("Shift+Enter")
    # The kernel's set_next_input adds one more cell right below the magic's cell.
    page.wait_for_function(
        "n => document.querySelectorAll('.jp-Notebook .jp-Cell').length > n", arg=n_cells, timeout=120_000
    )
    _wait_run_finished(page, timeout=120_000)
    magic_cell = page.locator(".jp-Notebook .jp-Cell").nth(n_cells - 1)
    save_area_screenshot(page, magic_cell, page.locator(".jp-Notebook").first, artifacts / "code-cell.png", block="start")
    want = expected["plain"].code("spread")

    def has_it(nb: dict[str, Any]) -> bool:
        sources = ["".join(c["source"]) for c in nb["cells"]]
        return magic in sources[-3:] and len(sources) >= 2

    nb = save_and_read(page, lab_server, has_it)
    sources = ["".join(c["source"]) for c in nb["cells"]]
    at = len(sources) - 1 - sources[::-1].index(magic)
    assert at + 1 < len(sources), "no cell below the magic"
    below = nb["cells"][at + 1]
    assert below["cell_type"] == "code"
    assert "".join(below["source"]) == want
    assert "import nbeda" not in want and "from nbeda" not in want  # plain pandas only
    # The tour's own `%eda df --code spread` cell (run by Run All) got the same code below it.
    first = sources.index(magic)
    assert sources[first + 1] == want


def _run_new_cell(page: Any, source: str) -> int:
    """Add a code cell at the end, type ``source``, run it; the new cell's index."""
    last = page.locator(".jp-Notebook .jp-Cell").last
    last.locator(".jp-InputPrompt").first.click()
    page.keyboard.press("Escape")
    page.keyboard.press("b")
    page.keyboard.press("Enter")
    page.keyboard.type(source)
    index = page.locator(".jp-Notebook .jp-Cell").count() - 1
    page.keyboard.press("Shift+Enter")
    return index


def test_interactive_charts_draw_offline(tour: Session, artifacts: Path) -> None:
    """Issue 8 item 5: ``--charts interactive`` draws Vega charts in the widget with the
    network blocked (the Vega bundle is inline in each chart's frame)."""
    page = tour.page
    index = _run_new_cell(page, "%eda df --charts interactive --tab spread")
    cell = page.locator(".jp-Notebook .jp-Cell").nth(index)
    widget = cell.locator(".nbeda-live").first
    widget.wait_for(timeout=TAB_TIMEOUT_MS)
    panel = _visible_panel(widget)
    panel.locator(".nb-codepanel[data-tab='spread']").wait_for(timeout=TAB_TIMEOUT_MS)
    frames = panel.locator("iframe.nb-iframe")
    assert frames.count() >= 1, "no interactive chart frame"
    assert panel.locator(".nb-chart > svg").count() == 0  # not the static drawing
    for i in range(frames.count()):
        frames.nth(i).scroll_into_view_if_needed()
        inner = frames.nth(i).content_frame
        drawn = inner.locator(".vega-embed canvas, .vega-embed svg.marks").first
        drawn.wait_for(timeout=60_000)
        box = drawn.bounding_box()
        assert box is not None and box["width"] > 0 and box["height"] > 0, box
        outer = frames.nth(i).bounding_box()
        assert outer is not None and outer["height"] >= box["height"] * 0.5  # the frame sized itself
    save_area_screenshot(page, frames.first, widget, artifacts / "interactive-spread.png")


def test_saved_notebook_keeps_static_report(tour: Session) -> None:
    """Issue 8 item 2: the widget's output also carries HTML that shows without a kernel."""
    nb = tour.saved
    outs = [
        o
        for c in nb["cells"]
        if c["cell_type"] == "code" and "".join(c["source"]).startswith("%eda df --by site")
        for o in c.get("outputs", [])
        if o.get("output_type") == "display_data"
    ]
    assert outs, "the %eda cell has no display output"
    data = outs[0]["data"]
    assert "application/vnd.jupyter.widget-view+json" in data
    html = "".join(data.get("text/html", ""))
    assert "table class='nb-table'" in html or 'table class="nb-table"' in html
    assert "<svg" in html
    assert "Roles" in html and "Segments" in html


def test_no_console_errors_and_no_outside_requests(tour: Session) -> None:
    """Last in this module: everything above ran in this page."""
    tour.guard.assert_clean()
    assert any("/api/kernels" in u for u in tour.guard.requests), "the router saw no Lab request"
    tour.console.assert_clean()
