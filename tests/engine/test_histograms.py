"""Shape's histograms on the engine path: Freedman–Diaconis edges from summaries, counts by a group-by.

References: numpy (``numpy.histogram_bin_edges`` through the pandas path's
``fd_histogram``, and ``numpy.histogram`` for the counts) on the full data.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

import nbeda
from nbeda.stats.shape import fd_edges, fd_histogram


def _shapes(rng: np.random.Generator, kind: int, n: int) -> np.ndarray:
    return [
        rng.normal(size=n),
        rng.lognormal(0.0, 2.0, size=n),  # long right tail: Tukey's far-out fences cap the bins
        rng.integers(0, 5, size=n).astype("float64"),  # ties: IQR may be 0 → Sturges
        np.full(n, 3.0),  # constant: one bin of width 1 (numpy's rule)
        rng.standard_cauchy(n) * 1e6,
        rng.normal(1e12, 1.0, size=n),  # large offset: power-of-two scaling keeps edges exact
    ][kind]


def test_edges_from_summaries_equal_the_pandas_paths_edges():
    """fd_edges(n, q1, q3, min, max) gives the very floats fd_histogram (numpy) gives on the data."""
    rng = np.random.default_rng(11)
    for k in range(240):
        n = int(rng.integers(2, 4000))
        x = _shapes(rng, k % 6, n)
        bins, _, _ = fd_histogram(x)
        want = np.r_[bins["bin_start"].to_numpy(), bins["bin_end"].to_numpy()[-1:]]
        got = fd_edges(n, *np.quantile(x, [0.25, 0.75]), x.min(), x.max())
        np.testing.assert_array_equal(got, want, err_msg=f"kind {k % 6}, n {n}")


@pytest.fixture(scope="module")
def report(tmp_path_factory):
    rng = np.random.default_rng(5)
    n = 40_000
    df = pd.DataFrame(
        {
            "ec_ms": rng.lognormal(0.5, 1.2, n),  # skewed: far-out fences apply
            "temp_c": np.where(rng.random(n) < 0.03, np.nan, rng.normal(21.0, 3.0, n)),
            "trays": rng.integers(1, 9, n).astype("float64"),
        }
    )
    df.loc[7, "temp_c"] = np.inf
    path = tmp_path_factory.mktemp("hist") / "beds.parquet"
    df.to_parquet(path)
    return df, nbeda.source(str(path), sample=2_000)


@pytest.mark.parametrize("column", ["ec_ms", "temp_c", "trays"])
def test_engine_histogram_equals_numpy_on_all_rows(report, column):
    df, r = report
    shape = r.shape()
    bins, below, above = shape.hist(column)
    ref, ref_below, ref_above = fd_histogram(df[column].to_numpy(dtype="float64"))
    np.testing.assert_array_equal(bins["bin_start"].to_numpy(), ref["bin_start"].to_numpy())
    np.testing.assert_array_equal(bins["bin_end"].to_numpy(), ref["bin_end"].to_numpy())
    np.testing.assert_array_equal(bins["count"].to_numpy(), ref["count"].to_numpy())
    assert (below, above) == (ref_below, ref_above)
    finite = np.isfinite(df[column].to_numpy(dtype="float64")).sum()
    assert bins["count"].sum() + below + above == finite  # every finite row, not the sample's 2,000


def test_charts_draw_all_row_histograms_and_say_so(report):
    df, r = report
    shape = r.shape()
    chart = shape.chart("ec_ms").to_dict()
    titles = str(chart)
    assert "all rows, by the engine" in titles
    data = shape.overview_chart().data
    assert data.groupby("panel")["count"].sum().max() > 2_000 * 2  # counts over all rows
