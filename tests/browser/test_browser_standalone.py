"""The standalone report (``report.to_html(path)``) opened from ``file://`` with the network blocked.

The file must work on its own: every request other than the file itself is
aborted (even to 127.0.0.1) and fails the test; tabs switch by clicking their
labels (CSS only, so also with JavaScript switched off); each tab shows its
tables with rows, its charts drawn at a non-zero size, and its plain code equal,
character for character, to what the library emits for the same data.
"""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest
from .harness import Session, open_session, save_doc_screenshot

import nbeda
from nbeda.report import Report
from nbeda.sections import SECTIONS, TITLES

pytestmark = pytest.mark.browser


@pytest.fixture(scope="module")
def report() -> Report:
    return Report(nbeda.demo.greenhouse(), by="site", target="yield_kg", frame_name="df")


@pytest.fixture(scope="module")
def report_file(report: Report, tmp_path_factory: pytest.TempPathFactory) -> Path:
    path = tmp_path_factory.mktemp("standalone") / "greenhouse report.html"  # a space in the name, too
    report.to_html(str(path))
    return path


def _open(browser: Any, report_file: Path, *, javascript: bool = True) -> Session:
    s = open_session(browser, allow_file=True, allow_local=False, javascript=javascript)
    s.page.goto(report_file.as_uri())
    s.page.wait_for_selector(".nb-tabs label.nb-tablabel")
    return s


@pytest.fixture(scope="module")
def standalone(browser: Any, report_file: Path) -> Iterator[Session]:
    s = _open(browser, report_file)
    try:
        yield s
    finally:
        s.close()


@pytest.fixture(autouse=True)
def _each_test_stays_offline_and_error_free(standalone: Session) -> Iterator[None]:
    """Blame the test that made an outside request or logged a console error."""
    blocked, errors = len(standalone.guard.blocked), len(standalone.console.errors)
    yield
    assert not standalone.guard.blocked[blocked:], f"requests outside 127.0.0.1: {standalone.guard.blocked[blocked:]}"
    assert not standalone.console.errors[errors:], "console errors:\n" + "\n".join(standalone.console.errors[errors:])


def _check_tab(page: Any, name: str, report: Report) -> Any:
    page.locator("label.nb-tablabel").get_by_text(TITLES[name], exact=True).click()
    panel = page.locator(f"section.nb-panel[data-tab='{name}']")
    assert panel.is_visible(), f"{TITLES[name]} panel hidden after clicking its label"
    others = page.locator(f"section.nb-panel:not([data-tab='{name}'])")
    assert others.count() == len(SECTIONS) - 1
    assert all(not others.nth(i).is_visible() for i in range(others.count()))
    assert panel.locator(".nb-status").count() == 0, panel.locator(".nb-status").first.inner_text()[:500]

    tables = panel.locator("table.nb-table")
    assert tables.count() >= 1, f"{TITLES[name]}: no table"
    rows = tables.evaluate_all("ts => ts.map(t => t.querySelectorAll('tbody tr').length)")
    assert all(r >= 1 for r in rows), f"{TITLES[name]}: empty table among {rows}"
    table = report.section(name).table
    head = [str(table.index.name or "")] + [str(c) for c in table.columns]
    heads = tables.evaluate_all("ts => ts.map(t => [...t.querySelectorAll('thead th')].map(th => th.textContent))")
    assert head in heads, f"{TITLES[name]}: main table header {head} not shown"

    charts = panel.locator(".nb-chart svg")
    assert charts.count() >= 1, f"{TITLES[name]}: no chart"
    for i in range(charts.count()):
        box = charts.nth(i).bounding_box()
        assert box is not None and box["width"] > 0 and box["height"] > 0, f"{TITLES[name]} chart {i}: {box}"
    return panel


@pytest.mark.parametrize("name", SECTIONS)
def test_tab_switches_and_shows_tables_charts_code(
    standalone: Session, report: Report, artifacts: Path, name: str
) -> None:
    page = standalone.page
    panel = _check_tab(page, name, report)
    code = panel.locator(f".nb-codepanel[data-tab='{name}'] pre.nb-code")
    assert code.count() == 1
    assert code.evaluate("e => e.textContent") == report.code(name)
    assert panel.locator("button.nb-insert").count() == 0  # no notebook here: no "Insert below"
    save_doc_screenshot(page, page.locator(".nb-report"), artifacts / f"standalone-{name}.png")


def test_tabs_switch_without_javascript(browser: Any, report_file: Path, report: Report) -> None:
    s = _open(browser, report_file, javascript=False)
    try:
        for name in ("segments", "spread", "links"):
            _check_tab(s.page, name, report)
        s.guard.assert_clean()
        s.console.assert_clean()
    finally:
        s.close()


def test_file_requests_nothing_and_logs_no_error(standalone: Session, report_file: Path) -> None:
    """Last: everything above ran in this page."""
    standalone.guard.assert_clean()
    assert standalone.guard.requests == [report_file.as_uri()], standalone.guard.requests
    text = report_file.read_text(encoding="utf-8")
    assert "http://" not in text and "https://" not in text
    standalone.console.assert_clean()
