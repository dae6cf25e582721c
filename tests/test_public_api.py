"""Pins the public surface: what users may import and call."""

from __future__ import annotations

import re

import pandas as pd

import nbeda


def test_top_level_all():
    assert sorted(nbeda.__all__) == sorted(
        ["ROLES", "SECTIONS", "Report", "demo", "options", "source", "load_ipython_extension", "__version__"]
    )
    assert nbeda.SECTIONS == ("roles", "spread", "shape", "gaps", "extremes", "links", "segments")
    assert nbeda.ROLES == (
        "continuous", "discrete", "nominal", "ordinal", "datetime", "boolean",
        "identifier", "text", "constant", "empty",
    )


def test_accessor_surface():
    acc = pd.DataFrame({"a": [1.0, 2.0]}).eda
    for name in ("report", "roles", "spread", "shape", "gaps", "extremes", "links", "segments", "trend"):
        assert callable(getattr(acc, name)), name
    assert callable(acc)


def test_chart_option_is_validated():
    assert nbeda.options.charts == "static"
    try:
        nbeda.options.charts = "fancy"
    except ValueError:
        pass
    else:  # pragma: no cover - the assignment must be refused
        raise AssertionError("a bad chart mode was accepted")
    assert nbeda.options.charts == "static"


def test_section_results_share_the_contract(demo_frame):
    report = nbeda.Report(demo_frame)
    for name in nbeda.SECTIONS:
        result = report.section(name)
        assert isinstance(result.table, pd.DataFrame)
        assert result.name == name
        code = result.code("df")
        # the code assigns the section's own name (alone or in a tuple; possibly inside a `with` block)
        assert re.search(rf"^\s*(\w+, )*{name}(, \w+)* = ", code, flags=re.M), name
