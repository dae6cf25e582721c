"""DuckDB at scale: a multi-million-row Parquet file under a memory limit smaller than the data.

Real DuckDB through ibis (no mocks).  References, named beside each check:

* the pandas path on the full frame (``df.eda.spread()``), itself checked against
  NIST StRD certified values and scipy elsewhere in the suite;
* numpy on the same values (``np.mean``, ``np.std(ddof=1)``, ``np.quantile`` with its
  default linear interpolation — the same definition as pandas' ``quantile`` —,
  ``np.unique``), with NaN treated as missing and ±inf set aside as both paths do.

Slow (a few seconds of DuckDB work plus the pandas path on 2,000,000 rows): marked
``slow``; CI runs it.
"""

from __future__ import annotations

import re

import duckdb
import ibis
import numpy as np
import pandas as pd
import pytest

import nbeda
from nbeda.engine import aggregates
from nbeda.engine._run import EXACT, EngineMemoryError, EngineRun
from nbeda.engine._source import open_source

pytestmark = pytest.mark.slow

ROWS = 2_000_000
#: the numbers of Spread the engine computes over all rows (the rest come from the sample)
EXACT_COLUMNS = ["count", "mean", "std", "var", "min", "max", "sum", "median", "q1", "q3", "distinct",
                 "n_inf", "range", "iqr"]
SAMPLE_COLUMNS = ["mode", "trimmed_mean", "mad", "mad_scaled", "median_ci_low", "median_ci_high",
                  "mode_count", "reading"]


def _bytes(limit: str) -> int:
    number, unit = re.fullmatch(r"(\d+)\s*([KMG]B)", limit).groups()
    return int(number) * {"KB": 10**3, "MB": 10**6, "GB": 10**9}[unit]


@pytest.fixture(scope="module")
def big(tmp_path_factory):
    """2,000,000 planted-bed readings: floats with NaN and ±inf, a rounded float with heavy ties,
    an integer count with missing values, a text column with missing values."""
    rng = np.random.default_rng(20260)
    n = ROWS
    growth = rng.normal(12.0, 3.0, n)
    growth[rng.random(n) < 0.05] = np.nan
    growth[[10, 500_000]] = np.inf
    growth[1_234_567] = -np.inf
    moisture = np.exp(rng.normal(3.0, 0.5, n))  # right-skewed
    moisture[rng.random(n) < 0.10] = np.nan
    moisture[77] = np.inf
    ph = np.round(rng.normal(6.5, 0.4, n), 1)  # ~40 distinct values: the quartiles fall on ties
    pests = pd.array(rng.poisson(4.0, n), dtype="Int64")
    pests[rng.random(n) < 0.03] = pd.NA
    bed = pd.array(np.char.add("bed-", rng.integers(0, 5000, n).astype(str)), dtype="str")
    bed[rng.random(n) < 0.02] = None
    df = pd.DataFrame({"growth_mm": growth, "moisture": moisture, "ph": ph, "pests": pests, "bed": bed})
    path = tmp_path_factory.mktemp("scale") / "beds.parquet"
    df.to_parquet(path, row_group_size=250_000)
    return df, str(path)


def _numpy_reference(values: np.ndarray) -> dict[str, float]:
    """Reference: numpy on the finite values (NaN missing, ±inf set aside)."""
    x = values[np.isfinite(values)]
    q1, med, q3 = np.quantile(x, [0.25, 0.5, 0.75])  # numpy's default 'linear' = pandas' quantile
    return {"count": x.size, "mean": np.mean(x), "std": np.std(x, ddof=1), "var": np.var(x, ddof=1),
            "min": x.min(), "max": x.max(), "sum": np.sum(x), "median": med, "q1": q1, "q3": q3,
            "distinct": np.unique(x).size, "n_inf": int(np.isinf(values).sum())}


def test_spread_of_two_million_rows_under_a_memory_limit_below_the_data_matches_pandas_and_numpy(
        big, tmp_path, monkeypatch):
    df, path = big
    monkeypatch.chdir(tmp_path)  # DuckDB spills to ./.tmp when it needs to: keep that out of the repo
    limit = "64MB"
    assert _bytes(limit) < df.memory_usage(deep=True).sum(), "the limit must be below the data's size"
    report = nbeda.source(path, memory_limit=limit, sample=20_000)
    run = report.engine
    assert run.n_rows == ROWS and not run.sample_is_all
    # Bernoulli sample of expected size 20,000: within ±5 standard deviations (√20,000 ≈ 141)
    assert abs(len(report.frame) - 20_000) < 5 * 142

    eng = report.spread()
    ref = df.eda.spread().table  # reference: the pandas path on the full frame
    assert list(eng.table.index) == list(ref.index) == ["growth_mm", "moisture", "ph", "pests"]
    for col in EXACT_COLUMNS:
        np.testing.assert_allclose(eng.table[col].astype("float64"), ref[col].astype("float64"),
                                   rtol=1e-9, equal_nan=True, err_msg=f"{col}: engine vs pandas path")
    # reference: numpy on the same values
    for name in eng.table.index:
        want = _numpy_reference(df[name].to_numpy(dtype="float64", na_value=np.nan))
        for stat, value in want.items():
            assert eng.table.at[name, stat] == pytest.approx(value, rel=1e-9), (name, stat)
    assert eng.table.at["growth_mm", "n_inf"] == 3 and eng.table.at["moisture", "n_inf"] == 1
    assert eng.table.at["pests", "count"] == df["pests"].notna().sum()

    # how each number was computed: exact columns say so, the rest name the sample
    how = eng.exactness["how"]
    for col in EXACT_COLUMNS:
        assert how[col] == EXACT, (col, how[col])
    sample_label = f"sample ({len(report.frame):,} of {ROWS:,} rows, seeded)"
    for col in SAMPLE_COLUMNS:
        assert how[col] == sample_label, (col, how[col])
    # the sample-based numbers really are the sample's (reference: pandas on the sample frame)
    on_sample = report.frame["moisture"].to_numpy(dtype="float64", na_value=np.nan)
    on_sample = on_sample[np.isfinite(on_sample)]
    s = pd.Series(on_sample)
    assert eng.table.at["moisture", "mad"] == pytest.approx((s - s.median()).abs().median(), rel=1e-9)
    assert eng.table.at["moisture", "mad"] != pytest.approx(ref.at["moisture", "mad"], rel=1e-9)


@pytest.fixture(scope="module")
def wide_text(tmp_path_factory):
    """300,000 rows, four text columns whose values are all distinct, and one float column."""
    rng = np.random.default_rng(11)
    n = 300_000
    cols = {f"tag_{j}": pd.array(np.char.add(f"bed-{j}-", rng.permutation(n).astype(str)), dtype="str")
            for j in range(4)}
    depth = rng.gamma(2.0, 5.0, n)
    depth[rng.random(n) < 0.04] = np.nan
    cols["depth_cm"] = depth
    df = pd.DataFrame(cols)
    path = tmp_path_factory.mktemp("oom") / "tags.parquet"
    df.to_parquet(path)
    return df, str(path)


def _tight_source(path: str, limit: str):
    """DuckDB at ``limit`` on one thread, with spilling to disk turned off so the limit bites
    (DuckDB 2.0 does not spill exact distinct counts anyway; this keeps the premise if it learns to)."""
    src = open_source(path, memory_limit=limit, threads=1, sample_rows=5_000)
    ibis.get_backend(src.table).raw_sql("SET temp_directory = ''")
    return src


def test_out_of_memory_with_all_columns_is_retried_one_column_at_a_time(wide_text):
    df, path = wide_text
    src = _tight_source(path, "30MB")
    names = list(src.table.columns)
    # the premise, on the same connection: all columns at once really fail, one column fits
    with pytest.raises(duckdb.OutOfMemoryException):
        aggregates.column_stats(src.table, names)
    one = aggregates.column_stats(src.table, ["tag_0"])
    assert one.at["tag_0", "distinct"] == len(df)

    report = nbeda.source(src)
    stats = report.engine.stats()
    assert any("ran out of memory with all columns in one query; retried one column at a time" in note
               for note in report.engine.notes), report.engine.notes
    # reference: pandas on the same frame
    assert list(stats.index) == names
    for name in names:
        assert stats.at[name, "missing"] == df[name].isna().sum()
        assert stats.at[name, "distinct"] == df[name].nunique()
    d = df["depth_cm"].to_numpy()
    d = d[np.isfinite(d)]
    assert stats.at["depth_cm", "count"] == d.size
    assert stats.at["depth_cm", "mean"] == pytest.approx(np.mean(d), rel=1e-12)  # reference: numpy
    assert stats.at["depth_cm", "min"] == d.min() and stats.at["depth_cm", "max"] == d.max()
    # the tab built on the retried aggregates agrees with the pandas path on the full frame
    eng = report.spread().table
    ref = df.eda.spread().table
    for col in ["count", "mean", "std", "median", "q1", "q3", "distinct"]:
        assert eng.at["depth_cm", col] == pytest.approx(ref.at["depth_cm", col], rel=1e-9), col


def test_a_column_that_alone_exceeds_the_limit_is_explained(wide_text):
    df, path = wide_text
    src = _tight_source(path, "8MB")
    run = EngineRun(src)  # (nbeda.source would already fail drawing its sample, with its own message)
    with pytest.raises(EngineMemoryError) as info:
        run.stats()
    assert any("retried one column at a time" in note for note in run.notes)
    text = str(info.value)
    assert "does not fit the engine's memory limit (8MB)" in text
    assert "memory_limit=" in text and re.search(r"column 'tag_\d'", text)
