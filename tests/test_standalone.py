"""The standalone report: one self-contained HTML file, no network, every tab with its code.

Outside reference: Fisher's iris as shipped by scikit-learn — the Spread tab of the file must
show the minimum and maximum of each measurement from the summary table in the dataset's own
description (DESCR: sepal length 4.3–7.9, sepal width 2.0–4.4, petal length 1.0–6.9, petal
width 0.1–2.5).  Only min/max are used: the description's means/SDs were computed on a slightly
different copy of the data.
"""

from __future__ import annotations

import html
import re
from html.parser import HTMLParser

import numpy as np
import pandas as pd
import pytest
from helpers import SCRIPT, assert_unchanged, hostile_frames, snapshot

import nbeda.report as report_module
from nbeda.report import Report
from nbeda.sections import SECTIONS, TITLES, builder
from nbeda.standalone import offline_svg, report_html
from nbeda.widget import ReportWidget


class Outline(HTMLParser):
    """Collects the elements the page needs: radios, labels, panels, scripts, external refs."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.radios: list[dict[str, str | None]] = []
        self.labels: dict[str, str] = {}
        self.panels: dict[str, str] = {}
        self.script_tags = 0
        self.external: list[str] = []
        self._label_for: str | None = None
        self._stack: list[str] = []

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if tag == "script":
            self.script_tags += 1
        for key in ("src", "href"):
            if a.get(key) and not str(a[key]).startswith("#"):
                self.external.append(f"{tag} {key}={a[key]}")
        if tag == "input" and a.get("type") == "radio":
            self.radios.append(a)
        if tag == "label" and a.get("for"):
            self._label_for = a["for"]
            self.labels[a["for"]] = ""
        if tag == "section" and "nb-panel" in (a.get("class") or ""):
            self.panels[a["id"]] = a.get("data-tab") or ""

    def handle_data(self, data):
        if self._label_for is not None:
            self.labels[self._label_for] += data

    def handle_endtag(self, tag):
        if tag == "label":
            self._label_for = None


def panel(page: str, name: str) -> str:
    start = page.index(f"id='nbr-{name}-panel'")
    end = page.find("<section class='nb-panel'", start)
    return page[start : end if end > 0 else len(page)]


@pytest.fixture(scope="module")
def demo_page(demo_frame):
    report = Report(demo_frame, by="site")
    return report, report_html(report, title="Greenhouse beds", source="beds.csv")


def test_self_contained_and_offline(demo_page):
    _, page = demo_page
    assert page.startswith("<!DOCTYPE html>")
    assert "http://" not in page and "https://" not in page
    assert "Content-Security-Policy" in page and "default-src 'none'" in page
    outline = Outline()
    outline.feed(page)
    assert outline.script_tags == 0  # tabs switch with CSS only
    assert outline.external == []  # nothing is loaded from anywhere


def test_all_seven_tabs_switch_with_css(demo_page):
    report, page = demo_page
    outline = Outline()
    outline.feed(page)
    assert [r["id"] for r in outline.radios] == [f"nbr-{s}" for s in SECTIONS]
    assert [r["id"] for r in outline.radios if "checked" in r] == ["nbr-roles"]
    assert {k: v.strip() for k, v in outline.labels.items()} == {f"nbr-{s}": TITLES[s] for s in SECTIONS}
    assert outline.panels == {f"nbr-{s}-panel": s for s in SECTIONS}
    for s in SECTIONS:  # one CSS rule shows each panel when its radio is checked
        assert f"#nbr-{s}:checked ~ .nb-panels > #nbr-{s}-panel {{ display: block; }}" in page
    assert html.escape(report.header_text()) in page


def test_each_tab_has_its_results_and_code(demo_page):
    report, page = demo_page
    roles_panel = panel(page, "roles")
    assert "<svg" in roles_panel and "nb-table" in roles_panel
    for name in SECTIONS:
        body = panel(page, name)
        try:
            code = report.code(name)
        except NotImplementedError:
            assert "coming in a later release" in body
            continue
        except Exception:
            assert "code unavailable" in body or "could not be computed" in body
            continue
        pre = re.search(r"<pre class='nb-code'>(.*?)</pre>", body, re.S)
        assert pre is not None, name
        assert html.unescape(pre.group(1)) == code


def test_roles_values_in_page(demo_page):
    report, page = demo_page
    roles_panel = panel(page, "roles")
    t = report.roles().table
    assert t.loc["plot_id", "role"] == "identifier"
    for label, role in t["role"].items():
        assert f'<th class="nb-row">{html.escape(str(label))}</th><td class="nb-text">{role}</td>' in roles_panel


def test_failing_tab_shows_its_error_in_place(monkeypatch):
    def fake(name):
        if name == "spread":

            def broken(ctx, **kw):
                raise ZeroDivisionError("<img src=x onerror=alert(1)>")

            return broken
        return builder(name)

    monkeypatch.setattr(report_module, "builder", fake)
    frame = pd.DataFrame({"a": np.arange(20.0), "b": list("xy") * 10})
    page = report_html(Report(frame))
    spread = panel(page, "spread")
    assert "ZeroDivisionError" in spread and "could not be computed" in spread
    assert "<img" not in page and "&lt;img src=x onerror=alert(1)&gt;" in spread
    assert "nb-table" in panel(page, "roles")  # the others are intact


def test_hostile_names_and_values_are_escaped():
    frame = pd.DataFrame(
        {
            SCRIPT: np.linspace(0.0, 1.0, 40),
            "label": [SCRIPT, "ok", "<b>bold</b>", "x"] * 10,
            'x"]; import os #': np.arange(40) % 3,
        }
    )
    snap = snapshot(frame)
    page = Report(frame).to_html()
    assert "<script" not in page and "<b>bold" not in page
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in page
    assert_unchanged(frame, snap)


def test_to_html_writes_one_file(tmp_path):
    frame = pd.DataFrame({"a": [1.5, 2.5, 4.0], "b": ["x", "y", "x"]})
    target = tmp_path / "r.html"
    text = Report(frame).to_html(str(target))
    assert target.read_text(encoding="utf-8") == text
    assert text.rstrip().endswith("</html>")


def test_iris_min_max_in_spread_tab():
    """Fisher's iris (scikit-learn copy): min/max from the dataset description's summary table."""
    from sklearn.datasets import load_iris

    iris = load_iris(as_frame=True).frame
    page = report_html(Report(iris))
    spread = panel(page, "spread")
    described = {  # from the "Summary Statistics" table in load_iris().DESCR
        "sepal length (cm)": ("4.3", "7.9"),
        "sepal width (cm)": ("2", "4.4"),
        "petal length (cm)": ("1", "6.9"),
        "petal width (cm)": ("0.1", "2.5"),
    }
    header = re.search(r"<thead><tr>(.*?)</tr></thead>", spread, re.S).group(1)
    cols = [html.unescape(c) for c in re.findall(r"<th[^>]*>(.*?)</th>", header)][1:]
    i_min, i_max = cols.index("min"), cols.index("max")
    for name, (lo, hi) in described.items():
        row = re.search(rf'<tr><th class="nb-row">{re.escape(name)}</th>(.*?)</tr>', spread).group(1)
        cells = re.findall(r"<td[^>]*>(.*?)</td>", row)
        assert (cells[i_min], cells[i_max]) == (lo, hi), name


def test_offline_svg_drops_namespaces_and_prefixes_ids():
    svg = (
        '<svg xmlns="http://www.w3.org/2000/svg" xmlns:xlink="http://www.w3.org/1999/xlink">'
        '<defs><clipPath id="clip1"><rect/></clipPath></defs><g clip-path="url(#clip1)"/>'
        '<use href="#clip1"/></svg>'
    )
    out = offline_svg(svg, "p7")
    assert "http" not in out
    assert 'id="p7-clip1"' in out and "url(#p7-clip1)" in out and 'href="#p7-clip1"' in out
    assert 'id="clip1"' not in out


_HOSTILE = {k: v for k, v in hostile_frames().items() if k != "two_thousand_columns"}  # the wide one: contract test


@pytest.mark.parametrize("name", sorted(_HOSTILE))
def test_hostile_frames_give_a_whole_page_and_widget(name):
    """Every hostile frame: seven panels, nothing raw from the data, the frame untouched."""
    frame = _HOSTILE[name]
    snap = snapshot(frame)
    page = report_html(Report(frame))
    assert page.count("class='nb-panel'") == 7
    assert "<script" not in page and "http://" not in page and "https://" not in page
    w = ReportWidget(Report(frame))
    assert w.state["roles"] in ("done", "error")
    assert "<script" not in "".join(c.value for c in w.contents["roles"].children if hasattr(c, "value"))
    assert_unchanged(frame, snap)
