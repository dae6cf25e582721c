"""Spread: every number checked against an outside reference named beside the check."""

from __future__ import annotations

import re
import warnings

import numpy as np
import pandas as pd
import pytest
from helpers import assert_same_table, run_code
from scipy import stats

from nbeda.report import Report
from nbeda.stats.spread import LEVELS_COLUMNS, SPREAD_COLUMNS, SPREAD_EXTRA_COLUMNS, spread_table


def _spread(frame: pd.DataFrame, **options):
    """The Spread result, with its emitted code checked to rebuild both tables."""
    result = Report(frame, **options).section("spread")
    ns = run_code(result.code("df"), frame)
    assert_same_table(ns["spread"], result.table)
    assert_same_table(ns["spread_levels"], result.levels)
    return result


def _lre(value: float, certified: float) -> float:
    """Log relative error (number of correct significant digits), as NIST StRD reports it."""
    if value == certified:
        return 16.0
    return float(-np.log10(abs(value - certified) / abs(certified)))


def _random_columns(seed: int, n: int, k: int, nan_share: float = 0.1) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    x = rng.lognormal(size=(n, k)) * rng.choice([-1.0, 1.0], size=(n, k))
    x[rng.random((n, k)) < nan_share] = np.nan
    return pd.DataFrame(x, columns=[f"c{j}" for j in range(k)])


# --------------------------------------------------------------------------- table layout
def test_columns_and_index():
    frame = pd.DataFrame({"a": [1.0, 2.5, 4.0, 8.0], "b": ["x", "y", "x", "z"]})
    t = _spread(frame).table
    assert list(t.columns) == SPREAD_COLUMNS + SPREAD_EXTRA_COLUMNS
    assert t.index.name == "column" and list(t.index) == ["a"]
    assert t.loc["a", "count"] == 4


def test_empty_selection_keeps_columns_in_table_and_code():
    frame = pd.DataFrame({"site": ["North", "South", "North"], "when": pd.date_range("2024-01-01", periods=3)})
    result = _spread(frame)  # checks the emitted code too
    assert result.table.empty and list(result.table.columns) == SPREAD_COLUMNS + SPREAD_EXTRA_COLUMNS
    assert list(result.levels.columns) == LEVELS_COLUMNS
    empty = _spread(pd.DataFrame())
    assert empty.table.empty and empty.levels.empty


# ------------------------------------------------------------------ outside references
def test_iris_min_max_against_dataset_description():
    """Fisher's iris as shipped by scikit-learn: min and max per feature against the summary table
    in the dataset's own description (``load_iris().DESCR``). Only min/max are compared: the
    description's means/SDs were computed on a slightly different copy of the data."""
    from sklearn.datasets import load_iris

    bunch = load_iris(as_frame=True)
    rows = re.findall(r"^(sepal|petal) (length|width):\s+([\d.]+)\s+([\d.]+)", bunch.DESCR, flags=re.M)
    assert len(rows) == 4, "summary table not found in the iris description"
    t = _spread(bunch.data).table
    for part, dim, lo, hi in rows:
        col = f"{part} {dim} (cm)"
        assert t.loc[col, "min"] == pytest.approx(float(lo), abs=1e-12)
        assert t.loc[col, "max"] == pytest.approx(float(hi), abs=1e-12)
        assert t.loc[col, "count"] == 150


def test_anscombe_quartet_moments():
    """Anscombe (1973), "Graphs in Statistical Analysis", Am. Stat. 27(1):17–21 (data via
    ``vega_datasets.local_data.anscombe()``): in all four sets mean x = 9, variance x = 11,
    mean y ≈ 7.50."""
    from vega_datasets import local_data

    long = local_data.anscombe()
    wide = {}
    for name, part in long.groupby("Series", sort=True):
        wide[f"x_{name}"] = part["X"].to_numpy(dtype=float)
        wide[f"y_{name}"] = part["Y"].to_numpy(dtype=float)
    frame = pd.DataFrame(wide)
    t = _spread(frame, roles={c: "continuous" for c in frame.columns}).table
    for name in ("I", "II", "III", "IV"):
        assert t.loc[f"x_{name}", "count"] == 11
        assert t.loc[f"x_{name}", "mean"] == pytest.approx(9.0, rel=1e-12)
        assert t.loc[f"x_{name}", "var"] == pytest.approx(11.0, rel=1e-12)
        assert t.loc[f"y_{name}", "mean"] == pytest.approx(7.50, abs=0.005)


def test_nist_strd_numacc1():
    """NIST StRD univariate summary statistics, NumAcc1 (values 10000001, 10000003, 10000002):
    certified mean 10000002 and standard deviation 1 — from memory of the NIST page."""
    frame = pd.DataFrame({"v": [10000001.0, 10000003.0, 10000002.0]})
    t = _spread(frame, roles={"v": "continuous"}).table
    assert _lre(t.loc["v", "mean"], 10000002.0) >= 8
    assert _lre(t.loc["v", "std"], 1.0) >= 8


@pytest.mark.parametrize("base", ["1000000", "10000000"])
def test_numacc3_and_numacc4_style_precision(base):
    """NumAcc3-style data (NIST StRD construction): base+0.2 once, then base+0.1 and base+0.3
    alternating, 1001 values (base 1e6 as in NumAcc3, 1e7 as in NumAcc4). Certified values derived
    by hand from the construction: the deviations from base+0.2 are 0 once and ±0.1 five hundred
    times each, so mean = base+0.2 and var = 1000·0.01/1000 = 0.01, sd = 0.1. Values are read from
    their decimal text, as from the NIST file; ≥ 8 correct digits required."""
    values = [float(base + ".2")] + [float(base + ".1"), float(base + ".3")] * 500
    frame = pd.DataFrame({"v": values})
    t = _spread(frame).table
    assert t.loc["v", "count"] == 1001
    assert _lre(t.loc["v", "mean"], float(base) + 0.2) >= 8
    assert _lre(t.loc["v", "std"], 0.1) >= 8
    # The variance doubles the relative error, and at 1e7 the stored doubles themselves are only
    # ~1e-9 from the decimals (ulp of 1e7 ≈ 1.9e-9), so ~8 digits is the most any float64 method gets.
    assert _lre(t.loc["v", "var"], 0.01) >= 7.5


# ------------------------------------------------------------------- reference libraries
@pytest.mark.parametrize("n", [1, 2, 3, 4, 7, 10, 57, 400])
def test_order_statistics_against_numpy(n):
    """median/q1/q3/min/max against numpy's nanmedian/nanquantile (linear method, pandas' default)."""
    frame = _random_columns(n, n, 4)
    t = spread_table(frame)
    x = frame.to_numpy()
    for j, col in enumerate(frame.columns):
        v = x[:, j][~np.isnan(x[:, j])]
        if v.size == 0:
            assert t.loc[col, "count"] == 0 and np.isnan(t.loc[col, "median"])
            continue
        assert t.loc[col, "count"] == v.size
        assert t.loc[col, "median"] == pytest.approx(np.median(v), rel=1e-12)
        assert t.loc[col, "q1"] == pytest.approx(np.quantile(v, 0.25), rel=1e-12)
        assert t.loc[col, "q3"] == pytest.approx(np.quantile(v, 0.75), rel=1e-12)
        assert t.loc[col, "min"] == v.min() and t.loc[col, "max"] == v.max()
        assert t.loc[col, "iqr"] == pytest.approx(np.quantile(v, 0.75) - np.quantile(v, 0.25), rel=1e-12)


def test_moments_against_numpy_and_scipy():
    """mean/std/var/sem/sum against numpy and ``scipy.stats.sem``; cv = std/mean."""
    frame = _random_columns(11, 300, 5)
    t = spread_table(frame)
    for col in frame.columns:
        v = frame[col].dropna().to_numpy()
        assert t.loc[col, "mean"] == pytest.approx(np.mean(v), rel=1e-12)
        assert t.loc[col, "std"] == pytest.approx(np.std(v, ddof=1), rel=1e-12)
        assert t.loc[col, "var"] == pytest.approx(np.var(v, ddof=1), rel=1e-12)
        assert t.loc[col, "sem"] == pytest.approx(stats.sem(v), rel=1e-12)
        assert t.loc[col, "sum"] == pytest.approx(np.sum(v), rel=1e-12)
        assert t.loc[col, "cv"] == pytest.approx(np.std(v, ddof=1) / np.mean(v), rel=1e-10)


@pytest.mark.parametrize("confidence", [0.8, 0.9, 0.95, 0.99])
def test_mean_ci_against_scipy_t_interval(confidence):
    """Mean interval against ``scipy.stats.t.interval(confidence, n - 1, loc=mean, scale=sem)``."""
    frame = _random_columns(3, 60, 3)
    t = _spread(frame, confidence=confidence).table
    for col in frame.columns:
        v = frame[col].dropna().to_numpy()
        lo, hi = stats.t.interval(confidence, v.size - 1, loc=np.mean(v), scale=stats.sem(v))
        assert t.loc[col, "mean_ci_low"] == pytest.approx(lo, rel=1e-10)
        assert t.loc[col, "mean_ci_high"] == pytest.approx(hi, rel=1e-10)


def _reference_median_rank(n: int, confidence: float) -> int:
    """Largest 1-based rank l whose interval [x_(l), x_(n+1-l)] covers the median with probability
    ≥ confidence, scanning Binomial(n, ½) directly (0 when none does)."""
    best = 0
    for rank in range(1, n // 2 + 1):
        coverage = stats.binom.cdf(n - rank, n, 0.5) - stats.binom.cdf(rank - 1, n, 0.5)
        if coverage >= confidence:
            best = rank
    return best


@pytest.mark.parametrize("confidence", [0.9, 0.95, 0.99])
@pytest.mark.parametrize("n", [1, 5, 6, 7, 9, 10, 25, 31, 100, 1001])
def test_median_ci_against_binomial_order_statistics(n, confidence):
    """Median interval = order statistics chosen with ``scipy.stats.binom`` (coverage ≥ level), and it
    is the sign-test inversion: ``scipy.stats.binomtest`` rejects a median just outside it and keeps
    one just inside."""
    rng = np.random.default_rng(n)
    v = rng.exponential(size=n)
    t = spread_table(pd.DataFrame({"v": v}), confidence=confidence)
    lo, hi = t.loc["v", "median_ci_low"], t.loc["v", "median_ci_high"]
    rank = _reference_median_rank(n, confidence)
    if rank == 0:
        assert np.isnan(lo) and np.isnan(hi)
        return
    s = np.sort(v)
    assert lo == s[rank - 1] and hi == s[n - rank]
    coverage = stats.binom.cdf(n - rank, n, 0.5) - stats.binom.cdf(rank - 1, n, 0.5)
    assert coverage >= confidence
    alpha = 1 - confidence
    assert stats.binomtest(rank - 1, n, 0.5).pvalue < alpha  # a median just below x_(l) is rejected
    assert stats.binomtest(rank, n, 0.5).pvalue >= alpha  # one just above x_(l) is kept


def test_interval_coverage_by_simulation():
    """Seeded calibration: 4,000 samples of n = 25 from a unit exponential (median ln 2, mean 1).
    The median interval's exact coverage is 1 − 2·P(B ≤ 7), B ~ Binomial(25, ½) (≈ 0.957 ≥ 0.95);
    the observed coverage must match it within 4 Monte-Carlo standard errors. The t-interval on
    normal data (mean 5) must cover about 95%."""
    rng = np.random.default_rng(2024)
    reps, n = 4000, 25
    expo = spread_table(pd.DataFrame(rng.exponential(size=(n, reps))))
    covered = ((expo["median_ci_low"] <= np.log(2)) & (expo["median_ci_high"] >= np.log(2))).mean()
    exact = 1 - 2 * stats.binom.cdf(7, n, 0.5)
    se = np.sqrt(exact * (1 - exact) / reps)
    assert exact >= 0.95
    assert abs(covered - exact) < 4 * se
    normal = spread_table(pd.DataFrame(rng.normal(5.0, 2.0, size=(n, reps))))
    covered_mean = ((normal["mean_ci_low"] <= 5.0) & (normal["mean_ci_high"] >= 5.0)).mean()
    assert abs(covered_mean - 0.95) < 4 * np.sqrt(0.95 * 0.05 / reps)


@pytest.mark.parametrize("n", [1, 2, 9, 10, 11, 19, 20, 21, 99, 250])
def test_trimmed_mean_against_scipy(n):
    """10% trimmed mean against ``scipy.stats.trim_mean(x, 0.1)``."""
    frame = _random_columns(100 + n, n, 3, nan_share=0.0)
    t = spread_table(frame)
    for col in frame.columns:
        assert t.loc[col, "trimmed_mean"] == pytest.approx(stats.trim_mean(frame[col].to_numpy(), 0.1), rel=1e-12)


@pytest.mark.parametrize("n", [1, 2, 3, 4, 5, 8, 13, 137, 1000])
@pytest.mark.parametrize("kind", ["continuous", "ties"])
def test_mad_against_scipy(n, kind):
    """MAD against ``scipy.stats.median_abs_deviation`` (raw, and scale='normal' for mad_scaled),
    on continuous values and on heavily tied integers."""
    frame = _random_columns(5 + n, n, 4)
    if kind == "ties":
        frame = frame.round(0)
    t = spread_table(frame)
    for col in frame.columns:
        v = frame[col].dropna().to_numpy()
        if v.size == 0:
            assert np.isnan(t.loc[col, "mad"])
            continue
        assert t.loc[col, "mad"] == pytest.approx(stats.median_abs_deviation(v), rel=1e-12)
        assert t.loc[col, "mad_scaled"] == pytest.approx(
            stats.median_abs_deviation(v, scale="normal"), rel=1e-12
        )


def test_mode_against_pandas():
    """mode against pandas' ``Series.mode`` (smallest of the most frequent values); blank when no
    value repeats; mode_count against ``value_counts``."""
    rng = np.random.default_rng(9)
    frame = pd.DataFrame(
        {
            "ties": [3.0, 1.0, 3.0, 1.0, 2.0] + [np.nan] * 195,
            "dice": rng.integers(1, 7, 200).astype(float),
            "distinct": rng.normal(size=200).tolist()[:6] + [np.nan] * 194,
        }
    )
    t = spread_table(frame)
    for col in ("ties", "dice"):
        s = frame[col].dropna()
        assert t.loc[col, "mode"] == s.mode().min()
        assert t.loc[col, "mode_count"] == s.value_counts().max()
    assert t.loc["ties", "mode"] == 1.0
    assert np.isnan(t.loc["distinct", "mode"]) and t.loc["distinct", "mode_count"] == 1


def test_infinities_set_aside_and_counted():
    """±inf are excluded from every statistic and counted in n_inf (reference: numpy on the finite values)."""
    v = np.array([1.0, 2.0, np.inf, 4.0, -np.inf, np.nan, 7.0])
    result = _spread(pd.DataFrame({"v": v}))
    t = result.table
    finite = v[np.isfinite(v)]
    assert t.loc["v", "n_inf"] == 2 and t.loc["v", "count"] == finite.size
    assert t.loc["v", "mean"] == pytest.approx(finite.mean(), rel=1e-12)
    assert t.loc["v", "max"] == 7.0 and t.loc["v", "min"] == 1.0
    assert "2 infinite value(s) set aside" in t.loc["v", "reading"]
    assert any("infinite" in f for f in result.flags)


def test_huge_values_do_not_overflow_std():
    """Values near 1e300: std stays finite and equals numpy's std of the values scaled down by 1e300."""
    rng = np.random.default_rng(4)
    small = rng.normal(size=50)
    t = spread_table(pd.DataFrame({"v": small * 1e300}))
    assert t.loc["v", "std"] == pytest.approx(np.std(small, ddof=1) * 1e300, rel=1e-12)
    assert t.loc["v", "mean"] == pytest.approx(np.mean(small) * 1e300, rel=1e-10)
    assert np.isinf(t.loc["v", "var"])  # 1e600 is not representable: honest overflow


def test_cv_blank_when_mean_is_zero():
    t = spread_table(pd.DataFrame({"v": [-2.0, -1.0, 0.0, 1.0, 2.0]}))
    assert t.loc["v", "mean"] == 0 and np.isnan(t.loc["v", "cv"])


def test_levels_table_against_value_counts_and_scipy_entropy():
    """Level summary: top/top_count against ``value_counts``; entropy against
    ``scipy.stats.entropy(p, base=2)`` (bits)."""
    frame = pd.DataFrame(
        {
            "crop": ["basil", "kale", "basil", None, "leek", "basil", "kale"],
            "organic": [True, False, True, True, False, True, True],
            "grade": pd.Categorical(list("ABBACBA"), categories=list("DCBA"), ordered=True),
        }
    )
    result = _spread(frame)
    lv = result.levels
    assert list(lv.index) == ["crop", "organic", "grade"]
    for col in frame.columns:
        counts = frame[col].value_counts()
        counts = counts[counts > 0]
        assert lv.loc[col, "count"] == counts.sum()
        assert lv.loc[col, "unique"] == len(counts)
        assert lv.loc[col, "top_count"] == counts.max()
        assert lv.loc[col, "top_share"] == pytest.approx(counts.max() / counts.sum())
        assert lv.loc[col, "entropy"] == pytest.approx(stats.entropy(counts.to_numpy(), base=2), rel=1e-12)
    assert lv.loc["crop", "top"] == "basil" and lv.loc["organic", "top"] == "True"
    assert lv.loc["organic", "evenness"] == pytest.approx(stats.entropy([5, 2], base=2))
    assert "Levels of nominal, boolean and ordinal columns" in result.tables()


# --------------------------------------------------------------------------- readings
def test_readings_on_seeded_simulations():
    """Seeded simulations with known shape: log-normal is right-skewed, its mirror left-skewed, the
    normal symmetric; a sentinel -999 among symmetric values pulls the mean without skewing the
    quartiles; a 5-level scale is not read as skewed (von Hippel 2005)."""
    rng = np.random.default_rng(12)
    n = 800
    sym = rng.normal(6.5, 0.3, n)
    sym[:20] = -999.0
    frame = pd.DataFrame(
        {
            "lognormal": rng.lognormal(0.0, 0.8, n),
            "mirror": -rng.lognormal(0.0, 0.8, n),
            "normal": rng.normal(10.0, 2.0, n),
            "sentinel": sym,
            "scale": np.clip(np.round(rng.normal(2.6, 1.0, n)), 1, 5),
        }
    )
    t = spread_table(frame)
    assert t.loc["lognormal", "reading"].startswith("mean above median: right skew")
    assert t.loc["mirror", "reading"].startswith("mean below median: left skew")
    assert t.loc["normal", "reading"] == "mean close to median: no clear skew"
    assert "a few extreme values pull the mean down" in t.loc["sentinel", "reading"]
    assert "heavy tails or extreme values" in t.loc["sentinel", "reading"]
    assert "min -999 looks like a missing-value code" in t.loc["sentinel", "reading"]
    assert "missing-value code" not in t.loc["lognormal", "reading"]
    assert "not read as skew" in t.loc["scale", "reading"]
    assert t.loc["lognormal", "quartile_skew"] > 0 > t.loc["mirror", "quartile_skew"]


def test_demo_yield_read_as_right_skewed(demo_frame):
    """Demo data (invented, documented in ``nbeda.demo.greenhouse``): yield_kg is log-normal, so
    right-skewed, with a few rows keyed in grams."""
    result = _spread(demo_frame)
    t = result.table
    assert t.loc["yield_kg", "reading"].startswith("mean above median: right skew")
    assert t.loc["yield_kg", "mean"] > t.loc["yield_kg", "median_ci_high"]
    assert "heavy tails or extreme values" in t.loc["yield_kg", "reading"]
    assert "yield_kg" in t.index and "pest_score" in t.index  # numeric-coded ordinal is included
    assert "site" in result.levels.index and "plot_id" not in result.levels.index
    # the documented -999 sentinel in soil_ph is named, and pulls the mean below the median
    assert "min -999 looks like a missing-value code" in t.loc["soil_ph", "reading"]
    assert any("soil_ph" in f and "-999" in f for f in result.flags)


# ------------------------------------------------------------------- code, chart, options
def test_code_shows_options_and_rebuilds_with_other_confidence(demo_frame):
    result = _spread(demo_frame, confidence=0.9)
    code = result.code("greenhouse")
    assert "confidence=0.9" in code and "import nbeda" not in code
    ns = run_code(code, demo_frame, frame_name="greenhouse")
    assert_same_table(ns["spread"], result.table)
    wide = Report(demo_frame).section("spread").table
    t = result.table
    assert (t["mean_ci_high"] - t["mean_ci_low"] < wide["mean_ci_high"] - wide["mean_ci_low"]).all()


def test_duplicate_and_hostile_names_round_trip():
    frame = pd.DataFrame(np.arange(24, dtype=float).reshape(8, 3) ** 1.5, columns=["d", "d", 'x"]; import os #'])
    frame["lvl"] = list("abcabcab")
    result = _spread(frame)
    assert list(result.table.index) == ["d", "d", 'x"]; import os #']


def test_chart_is_pre_aggregated(demo_frame):
    result = Report(demo_frame).section("spread")
    data = result.chart_data()
    assert len(data) == len(result.table)  # one row per column, never row-level data
    assert data.loc[data["column"] == "yield_kg", "median"].iloc[0] == result.table.loc["yield_kg", "median"]
    spec = result.chart().to_dict()
    rows = sum(len(v) for v in spec.get("datasets", {}).values())
    assert rows == len(result.table)


def test_no_warnings_on_awkward_columns():
    frame = pd.DataFrame(
        {
            "all_nan": [np.nan] * 5,
            "one": [np.nan, np.nan, 3.0, np.nan, np.nan],
            "zero_var": [2.0] * 5,
            "nullable": pd.array([1, None, 3, 4, 5], dtype="Int64"),
        }
    )
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        t = spread_table(frame.astype("float64"))
    assert t.loc["all_nan", "count"] == 0 and t.loc["all_nan", "reading"] == "no finite values"
    assert t.loc["one", "median"] == 3.0 and t.loc["one", "mode"] == 3.0 and np.isnan(t.loc["one", "std"])
    assert t.loc["zero_var", "std"] == 0 and t.loc["zero_var", "reading"] == "all values equal"
    assert t.loc["nullable", "count"] == 4


def test_role_overrides_move_columns_between_tables(demo_frame):
    """Role overrides propagate: a rating scale set to nominal moves to the levels table, a numeric
    column set to nominal too; the emitted code (checked by ``_spread``) follows them."""
    base = _spread(demo_frame)
    moved = _spread(demo_frame, roles={"pest_score": "nominal", "irrigation_l": "nominal"})
    assert "pest_score" in base.table.index and "pest_score" not in moved.table.index
    assert {"pest_score", "irrigation_l"} <= set(moved.levels.index)
    counts = demo_frame["pest_score"].value_counts()
    assert moved.levels.loc["pest_score", "top"] == str(counts.idxmax())
    assert moved.levels.loc["pest_score", "top_count"] == counts.max()
    # numbers of the columns that stay are unaffected by the move
    assert_same_table(moved.table.loc[["yield_kg"]], base.table.loc[["yield_kg"]], rtol=0)


@pytest.mark.parametrize("frame_name", ["x", "cols", "data", "values"])
def test_code_survives_any_frame_name(demo_frame, frame_name):
    """The emitted code must not overwrite the frame it reads, whatever the frame is called."""
    result = Report(demo_frame).section("spread")
    ns = run_code(result.code(frame_name), demo_frame, frame_name=frame_name)
    assert_same_table(ns["spread"], result.table)
    assert_same_table(ns["spread_levels"], result.levels)
