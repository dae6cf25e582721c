"""The contract every section keeps, on the demo data and on a corpus of hostile frames.

For each section: no exception escapes; the emitted plain-pandas code, run in a
fresh namespace, rebuilds ``.table``; the user's frame is unchanged (values,
dtypes, index, columns, attrs); HTML escapes ``<script>`` in names and values.
"""

from __future__ import annotations

import warnings

import pytest
from helpers import SCRIPT, assert_same_table, assert_unchanged, hostile_frames, run_code, snapshot

from nbeda.report import Report
from nbeda.sections import SECTIONS

HOSTILE = hostile_frames()


def _result(report: Report, name: str):
    try:
        return report.section(name)
    except NotImplementedError:
        pytest.skip(f"{name} not implemented yet")


@pytest.mark.parametrize("name", SECTIONS)
def test_demo_round_trip(name, demo_frame):
    snap = snapshot(demo_frame)
    report = Report(demo_frame)
    result = _result(report, name)
    ns = run_code(result.code("df"), demo_frame)
    assert_same_table(ns[name], result.table)
    assert_unchanged(demo_frame, snap)


@pytest.mark.parametrize("frame_key", sorted(HOSTILE))
@pytest.mark.parametrize("name", SECTIONS)
def test_hostile(name, frame_key):
    frame = HOSTILE[frame_key]
    snap = snapshot(frame)
    report = Report(frame)
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # no warning storms either
        result = _result(report, name)
    html = result.to_html(with_chart=frame_key in ("script_names_and_values",))
    assert SCRIPT not in html and "<script>" not in html
    if frame_key == "script_names_and_values":
        assert "&lt;script&gt;" in html
    ns = run_code(result.code("frame"), frame, frame_name="frame")
    assert_same_table(ns[name], result.table)
    assert_unchanged(frame, snap)
