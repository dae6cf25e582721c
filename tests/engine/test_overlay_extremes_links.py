"""Extremes and Links on the engine path (embedded DuckDB through ibis), against outside references.

* Agreement: on a table no larger than the sample, the engine path equals the pandas path
  (``df.eda.extremes()`` / ``df.eda.links()``) to 1e-9 relative, every column.
* Certified values: NIST StRD "Norris" (certified R², tests/data/Norris.dat) and Anscombe's
  quartet (Anscombe 1973, "Graphs in statistical analysis", The American Statistician
  27(1):17–21: every set has r ≈ 0.816).
* Larger than the sample: counts beyond the fences equal numpy counts on the full data
  against the same fences, Tukey fences equal numpy's quartiles (linear interpolation),
  Pearson r equals ``scipy.stats.pearsonr`` on the full data, Benjamini–Hochberg equals
  statsmodels' ``multipletests(method="fdr_bh")``; sample-based columns say so.
* The emitted code, run in a fresh namespace, reproduces ``.table``.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from statsmodels.stats.multitest import multipletests
from vega_datasets import local_data

import nbeda
from tests.helpers import assert_same_table, run_code

DATA = Path(__file__).resolve().parents[1] / "data"


def _small_frame() -> pd.DataFrame:
    """Plain dtypes (float64, int64, str), with NaN and ±inf, 300 rows (< the default sample)."""
    rng = np.random.default_rng(11)
    n = 300
    a = rng.normal(size=n)
    df = pd.DataFrame({
        "a": a,
        "b": 0.5 * a + rng.normal(size=n) * 3 + 1,
        "c": rng.lognormal(size=n),
        "d": rng.integers(0, 50, size=n).astype("float64"),
        "h": rng.standard_t(3, size=n) * 10 + 1e6,
        "k": rng.integers(-20, 20, size=n),
        "g": rng.choice(["north", "south", "east"], size=n),
    })
    df.loc[3, "a"] = np.nan
    df.loc[5, "b"] = np.inf
    df.loc[7, "c"] = np.inf
    df.loc[9, "h"] = -np.inf
    df.loc[11:20, "d"] = np.nan
    df.loc[40, "a"] = 9.0  # a clear extreme
    # "u" is constant (2.5) on the rows where "v" is present: no Pearson r for the pair (u, v)
    df["u"] = np.where(np.arange(n) % 3 == 0, 2.5, rng.normal(size=n))
    df["v"] = np.where(np.arange(n) % 3 == 0, rng.normal(size=n), np.nan)
    return df


@pytest.fixture(scope="module")
def small(tmp_path_factory):
    df = _small_frame()
    path = tmp_path_factory.mktemp("small") / "small.parquet"
    df.to_parquet(path)
    return df, path


def _big_frame() -> pd.DataFrame:
    rng = np.random.default_rng(5)
    n = 60_000
    a = rng.normal(size=n)
    df = pd.DataFrame({
        "a": a,
        "b": 0.6 * a + rng.normal(size=n) * 0.8 + 1e6,  # centred far from 0: one-pass sums would lose digits
        "c": rng.lognormal(size=n),
        "d": rng.standard_t(4, size=n) * 5,
        "e": rng.integers(1, 8, size=n).astype("float64"),
        "f": rng.normal(size=n) * 2 + 5e6,  # f and g: complete columns (no missing, no inf)
    })
    df["g"] = -0.3 * (df["f"] - 5e6) + rng.normal(size=n) * 3
    df.loc[rng.choice(n, 500, replace=False), "a"] = np.nan
    df.loc[rng.choice(n, 300, replace=False), "b"] = np.nan
    df.loc[rng.choice(n, 20, replace=False), "c"] = np.inf
    df.loc[rng.choice(n, 10, replace=False), "d"] = -np.inf
    return df


@pytest.fixture(scope="module")
def big(tmp_path_factory):
    df = _big_frame()
    path = tmp_path_factory.mktemp("big") / "big.parquet"
    df.to_parquet(path)
    return df, path, nbeda.source(path, sample=5000)


# ------------------------------------------------------------------------------------------
# (1) agreement with the pandas path when the sample is the whole table
# ------------------------------------------------------------------------------------------
@pytest.mark.parametrize("rule", [None, "tukey", "tukey_far", "tukey_log", "modified_z", "esd", "zscore"])
def test_extremes_equal_pandas_path_on_small_table(small, rule):
    """Reference: the pandas path ``df.eda.extremes(rule=...)`` on the same frame."""
    df, path = small
    r = nbeda.source(path)
    got = r.extremes(rule=rule)
    want = df.eda.extremes(rule=rule).table
    assert_same_table(got.table, want)
    assert got.exactness.loc["n_low", "how"].startswith("exact (all rows, by the engine)")
    # the table has extremes to count, so agreement is not a comparison of zeros
    assert (want["n_low"] + want["n_high"]).sum() > 0


def test_links_equal_pandas_path_on_small_table(small):
    """Reference: the pandas path ``df.eda.links()`` on the same frame."""
    df, path = small
    got = nbeda.source(path).links()
    want = df.eda.links().table
    assert_same_table(got.table, want)
    assert (want["measure"] == "pearson").sum() == 28  # the eight numeric columns pairwise
    uv = got.table[(got.table["x"] == "u") & (got.table["y"] == "v") & (got.table["measure"] == "pearson")]
    assert uv["estimate"].isna().all() and uv["note"].str.contains("constant").all()
    assert got.exactness.loc["estimate", "how"].startswith("Pearson rows: exact (all rows, by the engine)")


# ------------------------------------------------------------------------------------------
# (2) certified values
# ------------------------------------------------------------------------------------------
def _norris() -> pd.DataFrame:
    lines = (DATA / "Norris.dat").read_text().splitlines()[60:]
    rows = [[float(v) for v in line.split()] for line in lines if line.strip()]
    return pd.DataFrame(rows, columns=["y", "x"])


def test_pearson_matches_nist_norris_certified_r2(tmp_path):
    """NIST StRD linear regression "Norris" (tests/data/Norris.dat, lower difficulty): certified
    R² = 0.999993745883712, so r = +sqrt(R²) for the simple regression of y on x."""
    df = _norris()
    assert len(df) == 36
    path = tmp_path / "norris.parquet"
    df.to_parquet(path)
    t = nbeda.source(path).links().table
    row = t[t["measure"] == "pearson"].iloc[0]
    assert row["n"] == 36
    assert row["estimate"] == pytest.approx(np.sqrt(0.999993745883712), rel=1e-12)


def test_pearson_matches_nist_norris_shifted(tmp_path):
    """NIST StRD "Norris" with 1e8 added to both columns: r is unchanged (certified R² as above);
    two-pass sums keep the digits that a one-pass formula would lose."""
    df = _norris() + 1e8
    path = tmp_path / "norris_shifted.parquet"
    df.to_parquet(path)
    t = nbeda.source(path).links().table
    row = t[t["measure"] == "pearson"].iloc[0]
    assert row["estimate"] == pytest.approx(np.sqrt(0.999993745883712), rel=1e-9)


def test_pearson_matches_anscombe_quartet(tmp_path):
    """Anscombe (1973), The American Statistician 27(1):17–21: the four x–y sets share the
    correlation coefficient 0.82 (0.816 to three places; data from
    vega_datasets.local_data.anscombe()); also equal to scipy.stats.pearsonr."""
    a = local_data.anscombe()
    wide = pd.DataFrame({
        f"{c}{i}": a.loc[a["Series"] == s, c.upper()].to_numpy(dtype="float64")
        for i, s in enumerate(["I", "II", "III", "IV"], start=1) for c in "xy"
    })
    path = tmp_path / "anscombe.parquet"
    wide.to_parquet(path)
    t = nbeda.source(path).links().table
    p = t[t["measure"] == "pearson"].set_index(["x", "y"])
    for i in range(1, 5):
        r = p.loc[(f"x{i}", f"y{i}"), "estimate"]
        assert round(r, 2) == 0.82, i  # the paper's table: correlation coefficient 0.82
        assert r == pytest.approx(0.816, abs=1e-3), i  # 0.8162 … 0.8165 across the four sets
        ref = stats.pearsonr(wide[f"x{i}"], wide[f"y{i}"])
        assert r == pytest.approx(ref.statistic, rel=1e-9)
        assert p.loc[(f"x{i}", f"y{i}"), "p_value"] == pytest.approx(ref.pvalue, rel=1e-6)
        assert p.loc[(f"x{i}", f"y{i}"), "n"] == 11


# ------------------------------------------------------------------------------------------
# (3) a table larger than the sample
# ------------------------------------------------------------------------------------------
def _check_counts(df: pd.DataFrame, table: pd.DataFrame) -> None:
    """numpy counts on the full data against the table's fences (reference: numpy)."""
    for col in table.index:
        x = df[col].to_numpy(dtype="float64")
        fin = x[np.isfinite(x)]
        lo, hi = table.loc[col, "lower"], table.loc[col, "upper"]
        n_low = int((fin < lo).sum()) if np.isfinite(lo) else 0
        n_high = int((fin > hi).sum()) if np.isfinite(hi) else 0
        n_inf = int(np.isinf(x).sum())
        assert table.loc[col, "n"] == fin.size, col
        assert table.loc[col, "n_inf"] == n_inf, col
        if table.loc[col, "rule"] != "none":
            assert table.loc[col, "n_low"] == n_low, col
            assert table.loc[col, "n_high"] == n_high, col
        share = (table.loc[col, "n_low"] + table.loc[col, "n_high"] + n_inf) / (fin.size + n_inf)
        assert table.loc[col, "share"] == pytest.approx(share, rel=1e-12)


def test_extremes_counts_over_all_rows(big):
    df, _, r = big
    res = r.extremes()
    t = res.table
    assert not r.engine.sample_is_all and len(r.frame) < 6000
    _check_counts(df, t)
    # the rules chosen here include sample-fenced ones, and they flag values over all rows
    assert {"esd", "tukey_log", "modified_z"} <= set(t["rule"])
    assert t["n_low"].sum() + t["n_high"].sum() > 1000
    assert int(t.loc["c", "n_inf"]) == 20 and int(t.loc["d", "n_inf"]) == 10
    how = res.exactness["how"]
    assert how["rule"].startswith("chosen on the sample (")
    assert how["note"].startswith("sample (")
    assert "fences chosen on the sample (" in how["lower"]
    assert how["n_low"].startswith("exact (all rows, by the engine)")
    assert any("positions in the sample" in s for s in res.notes)
    assert any("real" in c and "case" in c for c in res.cautions)
    # most extreme value: the all-row minimum or maximum (reference: numpy)
    for col in t.index:
        x = df[col].to_numpy(dtype="float64")
        fin = x[np.isfinite(x)]
        assert t.loc[col, "most_extreme"] in (fin.min(), fin.max()), col


@pytest.mark.parametrize("rule,k", [("tukey", 1.5), ("tukey_far", 3.0)])
def test_tukey_fences_from_all_row_quartiles(big, rule, k):
    """Tukey (1977) fences Q1 − k·IQR, Q3 + k·IQR with numpy's quartiles (linear interpolation,
    Hyndman & Fan type 7) of all finite values; counts and score as numpy."""
    df, _, r = big
    res = r.extremes(rule=rule)
    t = res.table
    for col in t.index:
        x = df[col].to_numpy(dtype="float64")
        fin = x[np.isfinite(x)]
        q1, q3 = np.quantile(fin, [0.25, 0.75])
        iqr = q3 - q1
        assert t.loc[col, "lower"] == pytest.approx(q1 - k * iqr, rel=1e-12, abs=1e-12), col
        assert t.loc[col, "upper"] == pytest.approx(q3 + k * iqr, rel=1e-12), col
        s_lo, s_hi = (fin.min() - q1) / iqr, (fin.max() - q3) / iqr
        top = fin.max() if abs(s_hi) >= abs(s_lo) else fin.min()
        assert t.loc[col, "most_extreme"] == top
        # rel 1e-9: column f sits near 5e6 with IQR ≈ 2.7, so one ulp of Q1 (≈ 1e-9) moves the score by ~4e-10
        assert t.loc[col, "most_extreme_score"] == pytest.approx(s_hi if top == fin.max() else s_lo, rel=1e-9)
    _check_counts(df, t)
    assert res.exactness.loc["lower", "how"].startswith("tukey/tukey_far columns: exact (all rows, by the engine)")


def test_links_pearson_over_all_rows(big):
    """Pearson r, n, interval and p-value against scipy.stats.pearsonr on the full data;
    p_adjusted against statsmodels' Benjamini–Hochberg (fdr_bh) over the table's p-values."""
    df, _, r = big
    res = r.links()
    t = res.table
    pear = t[t["measure"] == "pearson"]
    assert len(pear) == 15  # a, b, c, d, f, g pairwise (e is ordinal: Spearman and Kendall)
    z = stats.norm.ppf(0.975)
    for _, row in pear.iterrows():
        x, y = df[row["x"]].to_numpy(), df[row["y"]].to_numpy()
        ok = np.isfinite(x) & np.isfinite(y)
        ref = stats.pearsonr(x[ok], y[ok])
        assert row["n"] == ok.sum()
        assert row["estimate"] == pytest.approx(ref.statistic, rel=1e-9), (row["x"], row["y"])
        if ref.pvalue > 1e-300:
            assert row["p_value"] == pytest.approx(ref.pvalue, rel=1e-6)
        # Fisher (1915) z interval, SE = 1/sqrt(n − 3)
        zr = np.arctanh(ref.statistic)
        se = 1 / np.sqrt(ok.sum() - 3)
        assert row["ci_low"] == pytest.approx(np.tanh(zr - z * se), rel=1e-9)
        assert row["ci_high"] == pytest.approx(np.tanh(zr + z * se), rel=1e-9)
        assert row["share_explained"] == pytest.approx(ref.statistic**2, rel=1e-9)
    strong = pear.set_index(["x", "y"]).loc[("a", "b")]
    assert strong["strength"] == "strong"  # r ≈ 0.59: 0.5 ≤ |r| < 0.7 (common practice, after Cohen 1988)
    p = t["p_value"].to_numpy(dtype="float64")
    ok = np.isfinite(p)
    want = multipletests(p[ok], method="fdr_bh")[1]
    np.testing.assert_allclose(t["p_adjusted"].to_numpy(dtype="float64")[ok], want, rtol=1e-12)
    # the other measures stay on the sample and are labelled so
    spear = t[t["measure"] == "spearman"]
    assert (spear["n"] < 6000).all()
    assert "other rows: sample (" in res.exactness.loc["estimate", "how"]
    assert any("not a cause" in c for c in res.cautions)


# ------------------------------------------------------------------------------------------
# (4) the emitted code reproduces the table
# ------------------------------------------------------------------------------------------
@pytest.mark.parametrize("tab,kw", [("extremes", {}), ("extremes", {"rule": "tukey"}), ("extremes", {"rule": "esd"}),
                                    ("links", {})])
def test_code_reproduces_table_big(big, tab, kw):
    _, _, r = big
    res = r.section(tab, **kw)
    ns = run_code(res.code(), None, "t")
    assert_same_table(ns[tab], res.table)


@pytest.mark.parametrize("tab", ["extremes", "links"])
def test_code_reproduces_table_small(small, tab):
    _, path = small
    res = nbeda.source(path).section(tab)
    ns = run_code(res.code(), None, "t")
    assert_same_table(ns[tab], res.table)


# ------------------------------------------------------------------------------------------
# the same aggregates on Spark (the ``spark`` session fixture of tests/engine/conftest.py)
# ------------------------------------------------------------------------------------------
def test_spark_equals_pandas_path_on_small_table(spark):
    """Reference: the pandas path on the same frame; Spark with exact quantiles (its infinity
    tests must be explicit comparisons: ibis' isinf() compiles to FALSE there)."""
    df = _small_frame()
    r = nbeda.source(spark.createDataFrame(df), exact=True)
    for tab in ("extremes", "links"):
        got = r.section(tab)
        assert_same_table(got.table, getattr(df.eda, tab)().table)
    assert int(r.extremes().table.loc["c", "n_inf"]) == 1
