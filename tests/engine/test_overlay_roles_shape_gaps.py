"""Engine path of the Roles, Shape and Gaps tabs: all-row numbers from DuckDB (through ibis).

Outside references, named beside each check:

* the pandas path (``df.eda.<tab>()`` on the same frame) — the project's agreement rule:
  on the same data, the engine's exact numbers equal the in-memory ones to 1e-9;
* ``scipy.stats.skew(bias=False)`` / ``scipy.stats.kurtosis(bias=False)`` (adjusted
  Fisher–Pearson G1, excess G2) on Fisher's (1936) iris data
  (``sklearn.datasets.load_iris``) and on the NIST StRD "Norris" data (tests/data/Norris.dat);
* ``pandas.isna`` counts and the missing-value layout of the Palmer penguins data
  (Gorman, Williams & Fraser 2014, PLoS ONE 9(3):e90081; ``palmerpenguins.load_penguins()``).

Real DuckDB, no mocks.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import stats

import nbeda
from nbeda.engine._run import EXACT
from tests.helpers import assert_same_table, run_code

DATA = Path(__file__).resolve().parents[1] / "data"


def small_frame() -> pd.DataFrame:
    """Plain dtypes (they survive a Parquet round trip), with NaN, ±inf, None and an Int64 column with gaps."""
    rng = np.random.default_rng(11)
    n = 240
    growth = rng.gamma(2.0, 3.0, n)
    growth[[3, 40, 41]] = np.nan
    growth[7], growth[8] = np.inf, -np.inf
    pests = pd.array(rng.integers(0, 30, n), dtype="Int64")
    pests[[1, 2, 90]] = pd.NA
    grade = rng.choice(np.array(["A", "B", "C", " n/a", "?"], dtype=object), n, p=[0.4, 0.3, 0.2, 0.05, 0.05])
    grade[rng.random(n) < 0.1] = None
    temp = rng.normal(21.0, 2.5, n)
    temp[rng.random(n) < 0.15] = np.nan
    probe = rng.normal(40.0, 5.0, n).round(1)
    probe[[5, 6, 7, 8, 9]] = 999.0  # a repeated placeholder code, far above the rest
    return pd.DataFrame(
        {
            "growth": growth,
            "pests": pests,
            "grade": pd.Series(grade, dtype="str"),
            "temp": temp,
            "probe": probe,
            "tray": np.arange(n, dtype="int64"),
            "huge": rng.lognormal(0.0, 1.0, n) * 1e300,  # 4th powers overflow float64: rescaled sums
            "flat": np.full(n, 2.5),
            "gone": np.full(n, np.nan),
        }
    )


@pytest.fixture(scope="module")
def small(tmp_path_factory):
    df = small_frame()
    path = tmp_path_factory.mktemp("small") / "greenhouse.parquet"
    df.to_parquet(path)
    return df, nbeda.source(path)


def big_frame() -> pd.DataFrame:
    rng = np.random.default_rng(5)
    n = 60_000
    yield_kg = rng.gamma(1.5, 2.0, n)
    yield_kg[rng.random(n) < 0.05] = np.nan
    yield_kg[[10, 20_000]] = np.inf
    moisture = rng.normal(30.0, 4.0, n)
    moisture[rng.random(n) < 0.08] = np.nan
    both = rng.random(n) < 0.03  # rows where both sensors fail together
    yield_kg[both] = np.nan
    moisture[both] = np.nan
    score = pd.array(rng.integers(0, 30, n), dtype="Int64")
    score[rng.random(n) < 0.02] = pd.NA
    site = rng.choice(np.array(["Northgate", "Riverside", "Hilltop", "N/A"], dtype=object), n, p=[0.4, 0.3, 0.29, 0.01])
    site[rng.random(n) < 0.04] = None
    depth = rng.normal(12.0, 2.0, n).round(2)
    depth[rng.random(n) < 0.02] = -999.0  # a sentinel code below every real value
    # strictly increasing and skewed (a symmetric key has skew ~1e-9: noise for a relative check)
    batch = np.arange(n, dtype="int64") + np.arange(n, dtype="int64") ** 2 // 100_000
    batch[30_001] = batch[30_000]  # one repeat in 60,000: unique in (almost) any sample, not overall
    return pd.DataFrame(
        {"yield_kg": yield_kg, "moisture": moisture, "score": score, "site": pd.Series(site, dtype="str"),
         "depth": depth, "batch": batch}
    )


@pytest.fixture(scope="module")
def big(tmp_path_factory):
    df = big_frame()
    path = tmp_path_factory.mktemp("big") / "trays.parquet"
    df.to_parquet(path)
    return df, nbeda.source(path, sample=5000)


# --------------------------------------------------------------------------- (1) small frame
@pytest.mark.parametrize("tab", ["roles", "shape", "gaps"])
def test_small_frame_equals_pandas_path(small, tab):
    """Reference: the pandas path, df.eda.<tab>().table, on the same frame (≤ sample rows)."""
    df, report = small
    got = report.section(tab)
    want = getattr(df.eda, tab)()
    assert not report.engine.sample_is_all or len(df) <= report.engine.sample_rows
    assert_same_table(got.table, want.table)
    if tab == "gaps":
        assert_same_table(got.patterns, want.patterns)
    # the engine supplied (and labelled) its own numbers
    how = got.exactness["how"]
    exact_cols = {"roles": ["count", "missing", "unique"], "shape": ["n", "skew", "kurtosis", "missing"],
                  "gaps": ["missing", "missing_pct", "pattern_count"]}[tab]
    assert all(how[c] == EXACT for c in exact_cols)


def test_small_frame_values(small):
    """Reference: pandas counts (isna, nunique counting ±inf) and Series.skew/kurt on the raw frame."""
    df, report = small
    roles = report.roles().table
    assert roles.loc["growth", "missing"] == df["growth"].isna().sum() == 3
    assert roles.loc["growth", "unique"] == df["growth"].nunique()  # ±inf each count once
    assert roles.loc["pests", "count"] == df["pests"].count() == 237
    assert roles.loc["gone", "role"] == "empty" and roles.loc["flat", "role"] == "constant"
    assert roles.loc["tray", "role"] == "identifier"
    shape = report.shape().table
    finite = df["growth"][np.isfinite(df["growth"])]
    assert shape.loc["growth", "skew"] == pytest.approx(finite.skew(), rel=1e-9)
    assert shape.loc["growth", "kurtosis"] == pytest.approx(finite.kurt(), rel=1e-9)
    assert shape.loc["growth", "infinite"] == 2
    assert shape.loc["huge", "skew"] == pytest.approx((df["huge"] / 1e300).skew(), rel=1e-9)
    gaps = report.gaps().table
    assert gaps.loc["probe", "disguised"] == 5 and gaps.loc["probe", "disguised_values"] == "999 (5)"
    tokens = df["grade"].str.strip().str.lower().isin(["n/a", "?"]).sum()
    assert gaps.loc["grade", "disguised"] == tokens > 0


# --------------------------------------------------------------------------- outside references for G1, G2
@pytest.mark.parametrize("sample", [60, 1000])
def test_iris_skew_kurtosis_against_scipy(tmp_path, sample):
    """Reference: scipy.stats.skew(bias=False) and kurtosis(bias=False) on Fisher's iris (150 rows).

    With sample=60 the sample is not the table: G1/G2 can only come from the engine's sums.
    """
    from sklearn.datasets import load_iris

    iris = load_iris(as_frame=True).frame.drop(columns="target")
    path = tmp_path / "iris.parquet"
    iris.to_parquet(path)
    report = nbeda.source(path, sample=sample)
    shape = report.shape().table
    assert report.engine.sample_is_all == (sample >= 150)
    for col in iris.columns:
        if col not in shape.index:
            continue
        x = iris[col].to_numpy()
        assert shape.loc[col, "n"] == 150
        assert shape.loc[col, "skew"] == pytest.approx(stats.skew(x, bias=False), rel=1e-9)
        assert shape.loc[col, "kurtosis"] == pytest.approx(stats.kurtosis(x, bias=False), rel=1e-9)
        q1, q2, q3 = np.quantile(x, [0.25, 0.5, 0.75])
        assert shape.loc[col, "quartile_skew"] == pytest.approx((q3 + q1 - 2 * q2) / (q3 - q1), rel=1e-9)
        assert shape.loc[col, "mean_minus_median"] == pytest.approx(x.mean() - q2, rel=1e-9)
    assert len(shape.index) >= 3


def _norris() -> pd.DataFrame:
    lines = (DATA / "Norris.dat").read_text().splitlines()
    start = max(i for i, line in enumerate(lines) if line.strip().startswith("Data:")) + 1  # the data block
    rows = [line.split() for line in lines[start:] if line.strip()]
    return pd.DataFrame([[float(a), float(b)] for a, b in rows], columns=["y", "x"])


def test_norris_skew_kurtosis_against_scipy(tmp_path):
    """Reference: scipy.stats.skew/kurtosis(bias=False) on NIST StRD Norris (36 pairs), sample of 10 rows."""
    norris = _norris()
    assert len(norris) == 36
    path = tmp_path / "norris.parquet"
    norris.to_parquet(path)
    shape = nbeda.source(path, sample=10).shape().table
    for col in ("x", "y"):
        if col in shape.index:
            v = norris[col].to_numpy()
            assert shape.loc[col, "skew"] == pytest.approx(stats.skew(v, bias=False), rel=1e-9)
            assert shape.loc[col, "kurtosis"] == pytest.approx(stats.kurtosis(v, bias=False), rel=1e-9)
            n = 36
            ses = np.sqrt(6.0 * n * (n - 1) / ((n - 2) * (n + 1) * (n + 3)))
            assert shape.loc[col, "skew_se"] == pytest.approx(ses, rel=1e-12)


def test_penguins_gaps(tmp_path):
    """Reference: pandas.isna on the Palmer penguins (344 rows) and the pandas path's pattern table.

    The layout — 333 complete rows, 9 with only sex missing, 2 with every measurement and
    sex missing — is from memory of the dataset's documentation; pandas.isna confirms it here.
    """
    import palmerpenguins

    penguins = palmerpenguins.load_penguins()
    path = tmp_path / "penguins.parquet"
    penguins.to_parquet(path)
    report = nbeda.source(path, sample=100)  # the sample is not the table: counts come from the engine
    gaps = report.gaps()
    want = penguins.isna().sum()
    assert list(gaps.table["missing"]) == list(want)
    assert gaps.table.loc["sex", "missing"] == 11
    assert list(gaps.patterns["rows"]) == [333, 9, 2]
    assert list(gaps.patterns["gap_columns"]) == [0, 1, 5]
    assert gaps.patterns["missing_in"].iloc[2] == "bill_length_mm, bill_depth_mm, flipper_length_mm, body_mass_g, sex"
    assert_same_table(gaps.patterns, penguins.eda.gaps().patterns)
    assert list(gaps.table["pattern_count"]) == list(penguins.eda.gaps().table["pattern_count"])
    roles = report.roles().table
    assert list(roles["missing"]) == list(want) and list(roles["count"]) == list(344 - want)
    assert list(roles["unique"]) == list(penguins.nunique())


# --------------------------------------------------------------------------- (2) bigger than the sample
ROLES_EXACT = ["count", "missing", "unique", "role", "reason"]
SHAPE_EXACT = ["n", "missing", "infinite", "skew", "skew_se", "kurtosis", "kurtosis_se", "quartile_skew",
               "mean_minus_median", "dagostino_stat", "dagostino_p", "normality_test", "normality_stat",
               "normality_p"]
SHAPE_SAMPLE = ["shapiro_stat", "shapiro_p", "anderson_stat", "modes", "suggested_transform", "skew_after"]
GAPS_EXACT = ["missing", "missing_pct", "disguised", "disguised_values", "effective_missing_pct", "pattern_count"]
GAPS_SAMPLE = ["mar_hint", "mar_with", "mar_p_adj"]


def test_big_frame_exact_columns_equal_full_pandas_path(big):
    """Reference: the pandas path on the full 60,000-row frame (df.eda.<tab>()), exact columns to 1e-9."""
    df, report = big
    assert not report.engine.sample_is_all and len(report.engine.sample()) < 6000
    for tab, exact, sampled in (("roles", ROLES_EXACT, ["example"]), ("shape", SHAPE_EXACT, SHAPE_SAMPLE),
                                ("gaps", GAPS_EXACT, GAPS_SAMPLE)):
        got = report.section(tab)
        want = getattr(df.eda, tab)().table
        rows = [c for c in want.index if c in got.table.index]
        assert rows, tab
        assert_same_table(got.table.loc[rows, exact], want.loc[rows, exact])
        how = got.exactness["how"]
        for c in exact:
            assert not how[c].startswith("sample"), (tab, c, how[c])
        for c in sampled:
            assert how[c].startswith("sample (") and "of 60,000 rows" in how[c], (tab, c, how[c])
    assert_same_table(report.gaps().patterns, df.eda.gaps().patterns)
    shape = report.shape().table
    assert (shape["normality_test"] == "D'Agostino-Pearson K2").all()  # n > 5000 on every column
    assert shape.loc["yield_kg", "infinite"] == 2
    # the reading's skew and tail words follow the all-row G1/G2 (no piling or second peak here)
    assert list(shape["reading"]) == list(df.eda.shape().table.loc[shape.index, "reading"])
    # level counts of the categorical columns: all rows, by one engine group-by each
    assert_same_table(report.shape().levels, df.eda.shape().levels)
    assert_same_table(report.shape().frequencies, df.eda.shape().frequencies)


def test_big_frame_unique_in_sample_is_not_identifier(big):
    """A column all-distinct in the sample but with a repeat overall is no identifier.

    Reference: the pandas path on the full frame calls it continuous (59,999 distinct of 60,000).
    """
    df, report = big
    sample = report.engine.sample()["batch"]
    assert sample.is_unique and sample.is_monotonic_increasing  # the sample alone reads as a key
    roles = report.roles().table
    assert roles.loc["batch", "unique"] == df["batch"].nunique() == 59_999
    assert roles.loc["batch", "role"] == "continuous" == df.eda.roles().table.loc["batch", "role"]
    assert roles.loc["batch", "reason"] == df.eda.roles().table.loc["batch", "reason"]
    assert any("batch" in note for note in report.roles().notes)
    # every tab follows the all-row role: batch is analysed as a number in Shape and Spread
    assert report.ctx.roles_table.loc["batch", "role"] == "continuous"
    assert "batch" in report.shape().table.index and "batch" in report.spread().table.index


# --------------------------------------------------------------------------- (3) the emitted code
@pytest.mark.parametrize("which", ["small", "big"])
@pytest.mark.parametrize("tab", ["roles", "shape", "gaps"])
def test_emitted_code_reproduces_table(request, which, tab):
    """The .code() reopens the file with ibis and rebuilds .table (and the Gaps pattern table)."""
    _df, report = request.getfixturevalue(which)
    result = report.section(tab)
    code = result.code()
    assert "import ibis" in code and "column_stats(" in code
    ns = run_code(code, pd.DataFrame(), frame_name="t")  # a fresh namespace: the code reopens the file
    assert_same_table(ns[tab], result.table)
    if tab == "gaps":
        assert_same_table(ns["gaps_patterns"], result.patterns)
    if tab == "shape" and len(result.levels):
        assert_same_table(ns["shape_levels"], result.levels)
        assert_same_table(ns["shape_frequencies"], result.frequencies)


# --------------------------------------------------------------------------- Spark (approximate by default)
def test_spark_small_frame_equals_pandas_path(spark, tmp_path):
    """Reference: the pandas path on the same frame, through PySpark (approximate distinct counts by
    default: where the sample holds every row, the sample's exact distinct counts are used)."""
    df = small_frame().drop(columns=["huge"])
    df.to_parquet(tmp_path / "greenhouse.parquet")
    sdf = spark.read.parquet(str(tmp_path / "greenhouse.parquet"))
    report = nbeda.source(sdf)
    assert not report.engine.exact
    for tab in ("roles", "shape", "gaps"):
        result = report.section(tab)
        assert_same_table(result.table, getattr(df.eda, tab)().table)
        ns = run_code(result.code("sdf"), sdf, frame_name="sdf")
        assert_same_table(ns[tab], result.table)
    assert_same_table(report.gaps().patterns, df.eda.gaps().patterns)
    assert report.roles().table.loc["tray", "role"] == "identifier"


def test_skew_kurtosis_recentred_on_the_refined_mean(tmp_path):
    """Values near 1e9 (a seeded gamma sample shifted by 1e9): the first-pass mean is off by ~1e-7,
    so the sums about it must be recentred (binomial expansion) before forming G1 and G2.

    Reference: scipy.stats.skew/kurtosis(bias=False) on the values minus 1e9 — that subtraction is
    exact in float64 and G1/G2 do not change under a shift. Without recentring G1 is off by ~4e-7.
    """
    rng = np.random.default_rng(3)
    x = 1e9 + rng.gamma(4.0, 1.0, 20_000)
    pd.DataFrame({"x": x}).to_parquet(tmp_path / "offset.parquet")
    report = nbeda.source(tmp_path / "offset.parquet", sample=500)
    row = report.shape().table.loc["x"]
    y = x - 1e9
    assert row["skew"] == pytest.approx(stats.skew(y, bias=False), rel=1e-9)
    assert row["kurtosis"] == pytest.approx(stats.kurtosis(y, bias=False), rel=1e-9)
    a = report.engine.stats().loc["x"]
    n, b2, b3 = a["count"], a["m2"] / a["count"], a["m3"] / a["count"]
    naive = b3 / b2**1.5 * np.sqrt(n * (n - 1)) / (n - 2)  # sums about the first-pass mean, not recentred
    assert abs(naive / stats.skew(y, bias=False) - 1) > 1e-8  # the case needs the recentring
