"""Shared test helpers: the code round-trip, the table comparison and the hostile corpus."""

from __future__ import annotations

import copy
import datetime as dt
import math
from typing import Any

import numpy as np
import pandas as pd

HOSTILE_NAME = 'x"]; import os #'
SCRIPT = "<script>alert(1)</script>"


def run_code(code: str, frame: pd.DataFrame, frame_name: str = "df") -> dict[str, Any]:
    """Execute emitted code in a fresh namespace holding only the frame; nbeda must not be imported."""
    assert "nbeda" not in "\n".join(
        line for line in code.splitlines() if not line.lstrip().startswith("#")
    ), "emitted code must not use nbeda"
    ns: dict[str, Any] = {frame_name: frame}
    exec(compile(code, "<emitted>", "exec"), ns)  # noqa: S102
    return ns


def _same_cell(a: Any, b: Any, rtol: float) -> bool:
    a_na = a is None or a is pd.NA or a is pd.NaT or (isinstance(a, float) and math.isnan(a))
    b_na = b is None or b is pd.NA or b is pd.NaT or (isinstance(b, float) and math.isnan(b))
    if a_na or b_na:
        return a_na and b_na
    if isinstance(a, (bool, np.bool_)) or isinstance(b, (bool, np.bool_)):
        return bool(a) == bool(b)
    if isinstance(a, (int, float, np.integer, np.floating)) and isinstance(
        b, (int, float, np.integer, np.floating)
    ):
        fa, fb = float(a), float(b)
        if math.isinf(fa) or math.isinf(fb):
            return fa == fb
        return abs(fa - fb) <= rtol * max(abs(fa), abs(fb)) + 1e-300 or abs(fa - fb) <= 1e-12
    return a == b or str(a) == str(b)


def assert_same_table(got: pd.DataFrame, want: pd.DataFrame, rtol: float = 1e-9) -> None:
    """Same index labels, same columns, same values (numbers to ``rtol`` relative; NaN == NaN)."""
    assert isinstance(got, pd.DataFrame), f"emitted code gave {type(got).__name__}, not a DataFrame"
    assert list(got.columns) == list(want.columns), (list(got.columns), list(want.columns))
    assert list(got.index) == list(want.index), (list(got.index)[:10], list(want.index)[:10])
    assert got.index.name == want.index.name, (got.index.name, want.index.name)
    g, w = got.to_numpy(dtype=object), want.to_numpy(dtype=object)
    for i in range(w.shape[0]):
        for j in range(w.shape[1]):
            assert _same_cell(g[i, j], w[i, j], rtol), (
                f"row {want.index[i]!r}, column {want.columns[j]!r}: emitted {g[i, j]!r} != table {w[i, j]!r}"
            )


def snapshot(frame: pd.DataFrame) -> tuple[pd.DataFrame, dict[str, Any]]:
    return frame.copy(deep=True), copy.deepcopy(frame.attrs)


def assert_unchanged(frame: pd.DataFrame, snap: tuple[pd.DataFrame, dict[str, Any]]) -> None:
    before, attrs = snap
    pd.testing.assert_frame_equal(frame, before, check_exact=True)
    assert list(frame.dtypes.astype(str)) == list(before.dtypes.astype(str))
    assert frame.attrs == attrs


def hostile_frames() -> dict[str, pd.DataFrame]:
    """Frames that break naive code; every section must survive each one."""
    rng = np.random.default_rng(7)
    n = 40
    frames: dict[str, pd.DataFrame] = {}
    frames["empty_0x0"] = pd.DataFrame()
    frames["zero_rows"] = pd.DataFrame({"a": pd.Series([], dtype="float64"), "b": pd.Series([], dtype="str")})
    frames["one_row"] = pd.DataFrame({"a": [1.5], "b": ["x"], "c": [3]})
    frames["all_nan_column"] = pd.DataFrame({"a": rng.normal(size=n), "gone": [np.nan] * n})
    frames["infinities"] = pd.DataFrame(
        {"a": np.r_[rng.normal(size=n - 3), [np.inf, -np.inf, np.nan]], "b": rng.normal(size=n)}
    )
    frames["mixed_object"] = pd.DataFrame(
        {"m": pd.Series([1, "two", 3.0, None, dt.date(2020, 1, 1)] * 8, dtype=object), "v": rng.normal(size=n)}
    )
    dup = pd.DataFrame(rng.normal(size=(n, 3)), columns=["d", "d", "e"])
    frames["duplicate_names"] = dup
    frames["non_string_names"] = pd.DataFrame(
        {0: rng.normal(size=n), 1.5: rng.integers(0, 5, n), ("t", 1): list("abcd") * 10}
    )
    frames["multiindex_columns"] = pd.DataFrame(
        rng.normal(size=(n, 3)), columns=pd.MultiIndex.from_tuples([("g", "a"), ("g", "b"), ("h", "a")])
    )
    frames["tz_datetimes"] = pd.DataFrame(
        {"when": pd.date_range("2024-03-30", periods=n, freq="h", tz="Europe/Berlin"), "v": rng.normal(size=n)}
    )
    frames["nullable_dtypes"] = pd.DataFrame(
        {
            "i": pd.array([1, None, 3, 4] * 10, dtype="Int64"),
            "b": pd.array([True, False, None, True] * 10, dtype="boolean"),
            "s": pd.array(["a", None, "c", "d"] * 10, dtype="string"),
            "f": pd.array([0.5, None, 1.5, 2.5] * 10, dtype="Float64"),
        }
    )
    frames["ordered_categorical"] = pd.DataFrame(
        {
            "grade": pd.Categorical(list("ABCDA") * 8, categories=list("DCBA"), ordered=True),
            "v": rng.normal(size=n),
        }
    )
    frames["timedelta_period"] = pd.DataFrame(
        {
            "td": pd.to_timedelta(rng.integers(0, 1000, n), unit="s"),
            "p": pd.period_range("2020-01", periods=n, freq="M"),
            "v": rng.normal(size=n),
        }
    )
    frames["lists_and_dicts"] = pd.DataFrame(
        {"l": [[1, 2], [3]] * (n // 2), "d": [{"a": 1}, {"b": 2}] * (n // 2), "v": rng.normal(size=n)}
    )
    wide = pd.DataFrame(rng.normal(size=(6, 2000)), columns=[f"c{i}" for i in range(2000)])
    frames["two_thousand_columns"] = wide
    frames["script_names_and_values"] = pd.DataFrame(
        {
            SCRIPT: rng.normal(size=n),
            HOSTILE_NAME: rng.integers(0, 3, n),
            "label": [SCRIPT, "ok", "<b>bold</b>", "x"] * 10,
        }
    )
    frames["constant_and_int64_extremes"] = pd.DataFrame(
        {
            "k": [7] * n,
            "big": np.r_[np.full(n - 1, np.iinfo(np.int64).max - 5), [np.iinfo(np.int64).max]],
            "huge": rng.normal(size=n) * 1e300,
        }
    )
    frames["attrs_and_index"] = pd.DataFrame(
        {"v": rng.normal(size=n), "g": list("xy") * (n // 2)},
        index=pd.Index([f"r{i}" for i in range(n)], name="rid"),
    )
    frames["attrs_and_index"].attrs["source"] = "bench"
    # A NUL and other control characters in labels (once aborted the chart renderer's process)
    # and bytes that are not UTF-8 (once broke the roles rules).
    frames["control_chars_and_bytes"] = pd.DataFrame(
        {
            "site\x00": ["North\x00gate", "East\x1b[31m", "West"] * 13 + ["West"],
            "photo": [b"\x89PNG\r\n", None, b"ok"] * 13 + [b"\xff"],
            "yield_kg": rng.gamma(2.0, 3.0, n),
        }
    )
    return frames
