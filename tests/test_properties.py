"""Property test of the code contract, for every section that exists.

Hypothesis generates small frames of mixed dtypes (floats with NaN/±inf, ints,
nullable Int64, strings with None, booleans, categoricals, datetimes) with odd
column names (duplicates, non-strings, a name that looks like code injection).
For each section: the emitted plain code, run in a fresh namespace, rebuilds
``.table``, and the user's frame is unchanged afterwards.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from helpers import HOSTILE_NAME, SCRIPT, assert_same_table, assert_unchanged, run_code, snapshot
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from nbeda.report import Report
from nbeda.sections import SECTIONS, builder

NAMES = ["a", "b", "a", HOSTILE_NAME, SCRIPT, 0, 1.5, ("t", 1), "yield kg", "ünïcode"]
KINDS = ["float", "int", "Int64", "str", "bool", "category", "ordered", "datetime"]


floats = st.one_of(
    st.floats(min_value=-1e6, max_value=1e6, allow_nan=False, width=64),
    st.sampled_from([np.nan, np.inf, -np.inf, 0.0, 1e-300, 123456789.125]),
)


@st.composite
def column(draw, n: int):
    kind = draw(st.sampled_from(KINDS))
    if kind == "float":
        return np.array(draw(st.lists(floats, min_size=n, max_size=n)), dtype="float64")
    if kind == "int":
        return np.array(draw(st.lists(st.integers(-50, 50), min_size=n, max_size=n)), dtype="int64")
    if kind == "Int64":
        vals = draw(st.lists(st.one_of(st.none(), st.integers(0, 6)), min_size=n, max_size=n))
        return pd.array(vals, dtype="Int64")
    if kind == "str":
        words = st.one_of(st.none(), st.sampled_from(["north", "south", "x", SCRIPT, "", "yes"]))
        return pd.array(draw(st.lists(words, min_size=n, max_size=n)), dtype="str")
    if kind == "bool":
        return np.array(draw(st.lists(st.booleans(), min_size=n, max_size=n)), dtype=bool)
    if kind in ("category", "ordered"):
        vals = draw(st.lists(st.one_of(st.none(), st.sampled_from(["low", "mid", "high"])), min_size=n, max_size=n))
        return pd.Categorical(vals, categories=["low", "mid", "high"], ordered=kind == "ordered")
    days = draw(st.lists(st.one_of(st.none(), st.integers(0, 400)), min_size=n, max_size=n))
    return pd.to_datetime(pd.Series(days, dtype="Float64"), unit="D", origin="2024-01-01").to_numpy()


@st.composite
def frames(draw):
    n = draw(st.integers(0, 9))
    k = draw(st.integers(1, 5))
    names = draw(st.lists(st.sampled_from(NAMES), min_size=k, max_size=k))
    cols = [draw(column(n)) for _ in range(k)]
    frame = pd.concat([pd.Series(c, name=f"c{j}") for j, c in enumerate(cols)], axis=1)
    frame.columns = pd.Index(names, dtype=object, tupleize_cols=False)
    return frame


def _implemented(name: str) -> bool:
    try:
        builder(name)
    except NotImplementedError:
        return False
    return True


@pytest.mark.parametrize("name", SECTIONS)
@settings(max_examples=30, deadline=None, suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])
@given(frame=frames())
def test_code_contract_holds_for_every_section(name, frame):
    if not _implemented(name):
        pytest.skip(f"{name} not implemented yet")
    snap = snapshot(frame)
    result = Report(frame).section(name)
    ns = run_code(result.code("df"), frame)
    assert name in ns, f"{name}: emitted code did not assign `{name}`"
    assert_same_table(ns[name], result.table)
    assert_unchanged(frame, snap)


@settings(max_examples=30, deadline=None, suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])
@given(frame=frames())
def test_spread_is_quiet_and_consistent(frame):
    """Spread on any generated frame: no warning escapes, counts add up (finite + ±inf + missing =
    rows) and the order statistics are ordered (min ≤ q1 ≤ median ≤ q3 ≤ max, median inside its CI)."""
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("error")
        result = Report(frame).section("spread")
        result.to_html(with_chart=False)
    t = result.table
    positions = result.ctx.numeric_positions()
    assert len(t) == len(positions)
    for j, pos in enumerate(positions):
        values = result.ctx.float_values(pos)
        row = t.iloc[j]
        assert row["count"] == np.isfinite(values).sum() and row["n_inf"] == np.isinf(values).sum()
        if row["count"]:
            chain = row[["min", "q1", "median", "q3", "max"]].to_numpy(dtype=float)
            assert np.all(np.diff(chain) >= 0)
            eps = 1e-12 * max(abs(row["min"]), abs(row["max"]))
            assert row["min"] - eps <= row["mean"] <= row["max"] + eps
        if row["median_ci_low"] == row["median_ci_low"]:  # not NaN
            assert row["median_ci_low"] <= row["median"] <= row["median_ci_high"]
