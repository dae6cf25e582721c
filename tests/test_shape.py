"""Shape tab: each check names its outside reference beside it.

References used: scipy.stats (skew, kurtosis, shapiro, normaltest, anderson, boxcox,
yeojohnson, gaussian_kde, entropy), pandas (Series.skew/kurt/value_counts), numpy
(histogram_bin_edges "fd"), Fisher's iris data (scikit-learn copy), the Shapiro &
Wilk (1965) worked example, and seeded simulations with known parameters.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
from helpers import assert_same_table, assert_unchanged, hostile_frames, run_code, snapshot
from scipy import stats
from scipy.signal import find_peaks

from nbeda.report import Report
from nbeda.stats.shape import SHAPE_COLUMNS, fd_histogram, shape_of

REQUIRED = [
    "n", "skew", "skew_se", "kurtosis", "kurtosis_se", "quartile_skew", "mean_minus_median",
    "reading", "normality_test", "normality_stat", "normality_p", "suggested_transform",
    "transform_lambda", "skew_after", "modes",
]


def shape_of_frame(frame: pd.DataFrame, **kw):
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        return Report(frame, **kw).section("shape")


@pytest.fixture(scope="module")
def iris():
    from sklearn.datasets import load_iris

    return load_iris(as_frame=True).frame.drop(columns="target")


@pytest.fixture(scope="module")
def demo_shape(demo_frame):
    return shape_of_frame(demo_frame)


# --------------------------------------------------------------------------- table layout
def test_required_columns_come_first(iris):
    t = shape_of_frame(iris).table
    assert list(t.columns[: len(REQUIRED)]) == REQUIRED
    assert list(t.columns) == SHAPE_COLUMNS
    assert t.index.name == "column"
    assert list(t.index) == list(iris.columns)


# --------------------------------------------------------------------------- moments
def test_skew_kurtosis_match_scipy_and_pandas_on_iris(iris):
    """Fisher (1936) iris data; references: scipy.stats.skew/kurtosis(bias=False) and pandas."""
    t = shape_of_frame(iris).table
    for col in iris.columns:
        x = iris[col].to_numpy(dtype=float)
        assert t.loc[col, "n"] == 150
        assert t.loc[col, "skew"] == pytest.approx(stats.skew(x, bias=False), rel=1e-10)
        assert t.loc[col, "skew"] == pytest.approx(iris[col].skew(), rel=1e-10)
        assert t.loc[col, "kurtosis"] == pytest.approx(stats.kurtosis(x, bias=False), rel=1e-10)
        assert t.loc[col, "kurtosis"] == pytest.approx(iris[col].kurt(), rel=1e-10)
        med = np.median(x)
        assert t.loc[col, "mean_minus_median"] == pytest.approx(x.mean() - med, rel=1e-10, abs=1e-12)
    # Petal length is the famously two-clustered iris feature (setosa apart from the others).
    assert t.loc["petal length (cm)", "modes"] == 2
    assert "bimodal" in t.loc["petal length (cm)", "reading"]


def test_standard_errors_calibrated_by_simulation():
    """Seeded simulation, normal parent (known skew 0, excess kurtosis 0): the spread of G1 and G2
    over many samples of n = 40 matches SES and SEK (the usual small-sample formulas)."""
    n, reps = 40, 6000
    sims = np.random.default_rng(11).normal(size=(reps, n))
    g1 = stats.skew(sims, axis=1, bias=False)
    g2 = stats.kurtosis(sims, axis=1, bias=False)
    row = shape_of(sims[0])
    assert row["skew_se"] == pytest.approx(np.std(g1), rel=0.05)
    assert row["kurtosis_se"] == pytest.approx(np.std(g2), rel=0.08)
    # the closed forms themselves, for n = 40
    ses = np.sqrt(6 * n * (n - 1) / ((n - 2) * (n + 1) * (n + 3)))
    assert row["skew_se"] == pytest.approx(ses, rel=1e-12)
    assert row["kurtosis_se"] == pytest.approx(2 * ses * np.sqrt((n * n - 1) / ((n - 3) * (n + 5))), rel=1e-12)


def test_exponential_known_shape():
    """Seeded Exp(1) sample (population skew 2, excess kurtosis 6, Bowley skew
    ln(4/3)/ln 3 = 0.2619 from its quartiles ln(4/3), ln 2, ln 4)."""
    x = np.random.default_rng(3).exponential(size=200_000)
    row = shape_of(x)
    assert row["skew"] == pytest.approx(2.0, abs=0.08)
    assert row["kurtosis"] == pytest.approx(6.0, abs=0.8)
    assert row["quartile_skew"] == pytest.approx(np.log(4 / 3) / np.log(3), abs=0.01)
    assert row["reading"].startswith("strongly right-skewed (mean above median)")
    assert row["modes"] == 1
    assert row["normality_test"] == "D'Agostino-Pearson K2"
    assert row["normality_p"] < 1e-10


# --------------------------------------------------------------------------- normality tests
def test_shapiro_wilk_1965_worked_example():
    """Shapiro & Wilk (1965), Biometrika 52:591-611, worked example (weights of 11 men):
    W = 0.79 (from memory), significant at the 1% level; and equal to scipy.stats.shapiro."""
    x = np.array([148, 154, 158, 160, 161, 162, 166, 170, 182, 195, 236], dtype=float)
    row = shape_of(x)
    assert row["normality_test"] == "Shapiro-Wilk"
    assert row["normality_stat"] == pytest.approx(0.79, abs=0.005)
    assert row["normality_p"] < 0.01
    ref = stats.shapiro(x)
    assert row["normality_stat"] == pytest.approx(ref.statistic, rel=1e-9)
    assert row["normality_p"] == pytest.approx(ref.pvalue, rel=1e-9)


def test_normality_tests_match_scipy_on_iris(iris):
    """References: scipy.stats.shapiro, scipy.stats.normaltest (D'Agostino-Pearson K2) and
    scipy.stats.anderson (statistic; 5% critical value from its legacy table, Stephens 1974)."""
    t = shape_of_frame(iris).table
    for col in iris.columns:
        x = iris[col].to_numpy(dtype=float)
        sw, k2 = stats.shapiro(x), stats.normaltest(x)
        assert t.loc[col, "normality_test"] == "Shapiro-Wilk"
        assert t.loc[col, "shapiro_stat"] == pytest.approx(sw.statistic, rel=1e-9)
        assert t.loc[col, "shapiro_p"] == pytest.approx(sw.pvalue, rel=1e-7)
        assert t.loc[col, "normality_p"] == t.loc[col, "shapiro_p"]
        assert t.loc[col, "dagostino_stat"] == pytest.approx(k2.statistic, rel=1e-9)
        assert t.loc[col, "dagostino_p"] == pytest.approx(k2.pvalue, rel=1e-9)
        assert t.loc[col, "anderson_stat"] == pytest.approx(
            stats.anderson(x, method="interpolate").statistic, rel=1e-9
        )
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # the legacy critical-value table is deprecated in scipy 1.17
            legacy = stats.anderson(x)
        assert list(legacy.significance_level).index(5.0) == 2
        assert t.loc[col, "anderson_crit_5"] == pytest.approx(legacy.critical_values[2], abs=1e-12)


def test_dagostino_k2_matches_scipy_normaltest():
    """Our K2 (from G1, G2 by D'Agostino, Belanger & D'Agostino 1990) vs scipy.stats.normaltest."""
    rng = np.random.default_rng(23)
    for x in (rng.normal(size=20), rng.exponential(size=57), rng.standard_t(3, size=1000), rng.uniform(size=300)):
        row = shape_of(x)
        ref = stats.normaltest(x)
        assert row["dagostino_stat"] == pytest.approx(ref.statistic, rel=1e-9)
        assert row["dagostino_p"] == pytest.approx(ref.pvalue, rel=1e-8, abs=1e-300)
    assert np.isnan(shape_of(rng.normal(size=19))["dagostino_stat"])  # K2 needs n >= 20


def test_large_n_headline_is_dagostino_and_shapiro_on_disclosed_sample():
    """Above 5000 values: K2 on all values (scipy.stats.normaltest); Shapiro-Wilk on the seeded
    sample drawn as disclosed (numpy default_rng(seed).choice without replacement, sorted)."""
    x = np.random.default_rng(5).normal(10, 2, size=12_000)
    frame = pd.DataFrame({"w": x})
    res = shape_of_frame(frame, seed=4)
    row = res.table.loc["w"]
    assert row["normality_test"] == "D'Agostino-Pearson K2"
    assert row["normality_stat"] == pytest.approx(stats.normaltest(x).statistic, rel=1e-9)
    pick = np.sort(np.random.default_rng(4).choice(x.size, size=5000, replace=False))
    assert row["shapiro_stat"] == pytest.approx(stats.shapiro(x[pick]).statistic, rel=1e-9)
    assert row["anderson_stat"] == pytest.approx(stats.anderson(x[pick], method="interpolate").statistic, rel=1e-9)
    assert row["sampled"] == 5000
    assert "sample of 5000" in row["note"]
    # a different seed draws a different sample
    other = shape_of_frame(frame, seed=5).table.loc["w"]
    assert other["shapiro_stat"] != row["shapiro_stat"]
    assert other["dagostino_stat"] == row["dagostino_stat"]


# --------------------------------------------------------------------------- transforms
def test_lognormal_read_right_skewed_with_log_suggested():
    """Seeded lognormal(mu=1, sigma=0.8) (population skew ~3.7): right-skewed, log suggested,
    and the Box-Cox lambda (scipy.stats.boxcox, maximum likelihood) is near 0."""
    x = np.random.default_rng(21).lognormal(mean=1.0, sigma=0.8, size=3000)
    row = shape_of_frame(pd.DataFrame({"growth": x})).table.loc["growth"]
    assert row["skew"] > 2
    assert row["reading"].startswith("strongly right-skewed (mean above median)")
    assert row["suggested_transform"] == "log"
    assert row["transform_lambda"] == 0.0
    assert abs(row["skew_after"]) < 0.2
    assert row["skew_after"] == pytest.approx(stats.skew(np.log(x), bias=False), rel=1e-9)
    # lambda found by a 1-D optimiser (tolerance ~1.5e-8): compare to 1e-6
    assert row["boxcox_lambda"] == pytest.approx(stats.boxcox(x)[1], abs=1e-6)
    assert abs(row["boxcox_lambda"]) < 0.1


def test_boxcox_lambda_and_skew_after_match_scipy():
    """Seeded gamma(shape 2) sample: Box-Cox lambda equals scipy.stats.boxcox's maximum-likelihood
    lambda, and the skew after equals scipy.stats.skew of scipy's transformed values."""
    x = np.random.default_rng(8).gamma(2.0, 3.0, size=2000)
    row = shape_of(x)
    xt, lam = stats.boxcox(x)
    assert row["boxcox_lambda"] == pytest.approx(lam, abs=1e-6)  # optimiser tolerance
    assert row["boxcox_skew"] == pytest.approx(stats.skew(xt, bias=False), abs=1e-5)
    assert row["log_skew"] == pytest.approx(stats.skew(np.log(x), bias=False), rel=1e-9)
    # gamma(2): the cube-root-like Box-Cox beats log by more than 0.25 in |skew|
    assert row["suggested_transform"] == "box-cox"
    assert row["transform_lambda"] == row["boxcox_lambda"]
    assert abs(row["skew_after"]) < 0.1


def test_yeojohnson_lambda_matches_scipy_on_mixed_sign_data():
    """Data with negatives: Yeo-Johnson lambda equals scipy.stats.yeojohnson on values / SD."""
    x = np.random.default_rng(9).gamma(1.5, 2.0, size=1500) - 2.0
    assert x.min() < 0 < x.max()
    row = shape_of(x)
    z = x / x.std(ddof=1)
    zt, lam = stats.yeojohnson(z)
    assert row["yeojohnson_lambda"] == pytest.approx(lam, abs=1e-6)  # optimiser tolerance
    assert row["yeojohnson_skew"] == pytest.approx(stats.skew(zt, bias=False), abs=1e-5)
    assert row["suggested_transform"] == "yeo-johnson"
    assert abs(row["skew_after"]) < abs(row["skew"]) / 4
    assert np.isnan(row["boxcox_lambda"])


def test_symmetric_data_gets_no_transform():
    """Seeded normal sample: |skew| < 0.5 (common-practice threshold) -> "none"."""
    row = shape_of(np.random.default_rng(2).normal(5, 1, size=1000))
    assert row["suggested_transform"] == "none"
    assert np.isnan(row["transform_lambda"])
    assert row["skew_after"] == row["skew"]
    assert row["reading"] == "roughly symmetric"
    assert row["modes"] == 1


# --------------------------------------------------------------------------- modes
def test_bimodal_mixture_read_as_bimodal_and_flagged():
    """Seeded mixture 0.5 N(0, 1) + 0.5 N(4, 1) (known to have two modes): modes == 2, flagged."""
    rng = np.random.default_rng(13)
    x = np.r_[rng.normal(0, 1, 1500), rng.normal(4, 1, 1500)]
    rng.shuffle(x)
    res = shape_of_frame(pd.DataFrame({"mix": x, "one": rng.normal(size=3000)}))
    assert res.table.loc["mix", "modes"] == 2
    assert "bimodal" in res.table.loc["mix", "reading"]
    assert res.table.loc["one", "modes"] == 1
    assert any("mix" in f and "peaks" in f for f in res.flags)


def test_density_peaks_agree_with_scipy_gaussian_kde():
    """The density we sum in numpy is scipy.stats.gaussian_kde with the same bandwidth (up to a
    constant): peak counts agree on a few seeded samples (including a three-component mixture)."""
    rng = np.random.default_rng(17)
    samples = [
        rng.normal(size=800),
        np.r_[rng.normal(0, 1, 400), rng.normal(5, 1, 400)],
        np.r_[rng.normal(0, 0.5, 300), rng.normal(4, 0.5, 300), rng.normal(8, 0.5, 300)],
        rng.exponential(size=800),
    ]
    for x in samples:
        sd = x.std(ddof=1)
        q005, q25, q75, q995 = np.quantile(x, [0.005, 0.25, 0.75, 0.995])
        h = 0.9 * min(sd, (q75 - q25) / 1.34) * x.size ** (-0.2)  # Silverman (1986) robust rule
        grid = np.linspace(q005 - 3 * h, q995 + 3 * h, 512)
        dens = stats.gaussian_kde(x, bw_method=h / sd)(grid)
        want = max(find_peaks(dens, prominence=0.1 * dens.max())[0].size, 1)
        assert shape_of(x)["modes"] == want
    assert shape_of(samples[2])["modes"] == 3


def test_piled_at_a_limit_is_read_and_flagged():
    """Seeded censored data: a detection limit of 1.0 replaces every smaller value (about 30%)."""
    x = np.random.default_rng(31).lognormal(0.3, 0.6, size=2000)
    x = np.where(x < 1.0, 1.0, x)
    share = (x == 1.0).mean()
    res = shape_of_frame(pd.DataFrame({"residue": x}))
    reading = res.table.loc["residue", "reading"]
    assert f"piled at its lower limit ({share:.0%} of values)" in reading
    assert any(f.startswith("residue: piled at its lower limit") for f in res.flags)
    # an ordinary normal sample is not piled anywhere
    assert "piled" not in shape_of(np.random.default_rng(1).normal(size=2000))["reading"]


def test_integer_scale_does_not_peak_at_every_level():
    """A 1-7 rating with a single-peaked pmf: bandwidth widened to the level gap -> one mode."""
    p = np.array([0.05, 0.10, 0.20, 0.30, 0.20, 0.10, 0.05])
    x = np.random.default_rng(4).choice(np.arange(1, 8), size=4000, p=p).astype(float)
    assert shape_of(x)["modes"] == 1


# --------------------------------------------------------------------------- histogram
def test_fd_bins_equal_numpy(iris):
    """Freedman-Diaconis bin edges equal numpy.histogram_bin_edges(bins="fd"); counts equal np.histogram."""
    res = shape_of_frame(iris)
    for col in iris.columns:
        x = iris[col].to_numpy(dtype=float)
        bins, below, above = res.hist(col)
        edges = np.r_[bins["bin_start"].to_numpy(), bins["bin_end"].to_numpy()[-1:]]
        ref = np.histogram_bin_edges(x, bins="fd")
        np.testing.assert_allclose(edges, ref, rtol=1e-13, atol=0)
        np.testing.assert_array_equal(bins["count"].to_numpy(), np.histogram(x, bins=ref)[0])
        assert below == above == 0
    # a width check: 2 IQR n^(-1/3) (Freedman & Diaconis 1981)
    x = np.random.default_rng(1).normal(size=5000) * 3
    bins, _, _ = fd_histogram(x)
    q1, q3 = np.percentile(x, [25, 75])
    width = 2 * (q3 - q1) * x.size ** (-1 / 3)
    assert len(bins) == int(np.ceil((x.max() - x.min()) / width))
    np.testing.assert_allclose(
        np.r_[bins["bin_start"], bins["bin_end"].iloc[-1]], np.histogram_bin_edges(x, bins="fd"), rtol=1e-13
    )


def test_long_tail_histogram_is_capped_and_counts_add_up(demo_frame):
    """yield_kg has planted gram-for-kilogram rows: FD would need thousands of bins."""
    res = shape_of_frame(demo_frame)
    bins, below, above = res.hist("yield_kg")
    x = demo_frame["yield_kg"].dropna().to_numpy()
    assert 1 <= len(bins) <= 200
    assert bins["count"].sum() + below + above == x.size
    assert above >= 8  # at least the eight rows keyed in grams lie beyond the shown range


# --------------------------------------------------------------------------- demo data
def test_demo_readings(demo_shape, demo_frame):
    t = demo_shape.table
    assert t.loc["yield_kg", "reading"].startswith("strongly right-skewed (mean above median)")
    assert t.loc["yield_kg", "skew"] == pytest.approx(demo_frame["yield_kg"].skew(), rel=1e-10)
    assert t.loc["yield_kg", "suggested_transform"] in ("log", "box-cox")
    assert abs(t.loc["yield_kg", "skew_after"]) < 1
    assert t.loc["irrigation_l", "skew"] > 0.5  # gamma(4) litres: population skew 2/sqrt(4) = 1
    assert t.loc["irrigation_l", "skew"] == pytest.approx(1.0, abs=0.2)
    assert t.loc["humidity_pct", "reading"] == "roughly symmetric"
    assert t.loc["pest_score", "n"] == demo_frame["pest_score"].notna().sum()
    assert "soil_ph" in t.index and t.loc["soil_ph", "skew"] < -1  # the -999 sentinel drags it left
    assert "skew comes from a few extreme values" in t.loc["soil_ph", "reading"]
    assert "few extreme values" not in t.loc["irrigation_l", "reading"]
    assert "plot_id" not in t.index and "network" not in t.index
    assert any("transform changes what a mean means" in c for c in demo_shape.cautions)
    assert any("multiple testing" in c for c in demo_shape.cautions)


# --------------------------------------------------------------------------- levels and dates
def test_levels_table(demo_shape, demo_frame):
    """References: pandas value_counts and scipy.stats.entropy."""
    lv = demo_shape.levels
    assert {"site", "crop", "soil_grade", "sensor_model", "organic"} <= set(lv.index)
    vc = demo_frame["site"].value_counts()
    assert lv.loc["site", "top"] == vc.index[0]
    assert lv.loc["site", "imbalance_ratio"] == pytest.approx(vc.max() / vc.min(), rel=1e-12)
    assert lv.loc["site", "entropy_norm"] == pytest.approx(stats.entropy(vc.to_numpy()) / np.log(len(vc)), rel=1e-12)
    assert lv.loc["soil_grade", "ordered"]
    counts = demo_shape.level_counts("soil_grade")
    assert list(counts["level"]) == ["A", "B", "C", "D"]  # kept in level order, not by count
    assert counts["count"].sum() == demo_frame["soil_grade"].notna().sum()
    assert "Levels (categorical columns)" in demo_shape.tables()
    # the long frequency table shown in the tab: same counts, per column, levels kept in order
    freq = demo_shape.frequencies
    assert list(freq.loc["soil_grade", "level"]) == ["A", "B", "C", "D"]
    sums = freq.groupby(level="column", sort=False)["count"].sum()
    assert sums.to_dict() == lv["n"].to_dict()
    assert list(freq.loc["site", "count"]) == vc.tolist()


def test_top_k_plus_other():
    labels = np.array([f"bed-{i:02d}" for i in range(25)])
    x = np.random.default_rng(6).choice(labels, size=2000, p=np.r_[np.full(5, 0.16), np.full(20, 0.01)])
    res = shape_of_frame(pd.DataFrame({"bed": x, "v": np.arange(2000) % 7}))
    c = res.level_counts("bed")
    assert len(c) == 11 and c["level"].iloc[-1] == "other (15 levels)"
    assert c["count"].sum() == 2000
    vc = pd.Series(x).value_counts()
    assert c["count"].iloc[:10].tolist() == vc.iloc[:10].tolist()
    assert c["count"].iloc[-1] == vc.iloc[10:].sum()


def test_dates_table_and_default_date_flag(demo_shape, demo_frame):
    d = demo_shape.dates.loc["planted_on"]
    s = demo_frame["planted_on"]
    assert d["first"] == str(s.min()) and d["last"] == str(s.max())
    assert d["span"] == str(s.max() - s.min())
    per_month, per_weekday = demo_shape.date_counts("planted_on")
    assert per_month["count"].sum() == s.notna().sum()
    assert list(per_month["count"]) == s.dt.month.value_counts().sort_index().tolist()
    assert list(per_weekday["count"]) == s.dt.day_of_week.value_counts().reindex(range(7), fill_value=0).tolist()
    # time zones: 40 hourly readings across the 2024 spring DST change span 39 elapsed hours
    tz = shape_of_frame(hostile_frames()["tz_datetimes"]).dates.loc["when"]
    assert tz["span"] == str(pd.Timedelta(hours=39)) and tz["median_step"] == str(pd.Timedelta(hours=1))
    # a placeholder date on 30% of the records is flagged
    when = pd.Series(pd.date_range("2024-01-01", periods=100, freq="D"))
    when.iloc[::3] = pd.Timestamp("1970-01-01")
    res = shape_of_frame(pd.DataFrame({"sown": when, "v": np.arange(100.0) % 9}))
    row = res.dates.loc["sown"]
    assert row["top_timestamp"].startswith("1970-01-01") and row["top_share"] == pytest.approx(34 / 100)
    # row 0 (2024-01-01) was overwritten, so the first real date after the placeholder is 2024-01-02
    assert row["largest_gap"] == str(pd.Timestamp("2024-01-02") - pd.Timestamp("1970-01-01"))
    assert row["gap_after"].startswith("1970-01-01")
    assert any("sown" in f and "placeholder" in f for f in res.flags)
    # monthly records (each month ~8% of rows) are regular, not a placeholder
    monthly = pd.Series(pd.date_range("2024-01-01", periods=12, freq="MS")).repeat(10).reset_index(drop=True)
    res2 = shape_of_frame(pd.DataFrame({"month": monthly, "v": np.arange(120.0) % 7}))
    assert res2.dates.loc["month", "top_share"] == pytest.approx(1 / 12)
    assert not any("month" in f for f in res2.flags)


# --------------------------------------------------------------------------- bad input
def test_bad_input_gives_notes_not_errors():
    big = np.iinfo(np.int64).max
    frame = pd.DataFrame(
        {
            "flat": [3.0] * 30,
            "two": [1.0, 2.0] + [np.nan] * 28,
            "gone": [np.nan] * 30,
            "inf": np.r_[np.random.default_rng(1).normal(size=27), [np.inf, -np.inf, np.nan]],
            "huge": np.random.default_rng(2).lognormal(size=30) * 1e300,
            "int_edge": np.r_[np.full(29, big - 5), [big]].astype("int64"),
        }
    )
    snap = snapshot(frame)
    res = shape_of_frame(frame, roles={"flat": "continuous", "gone": "continuous", "int_edge": "continuous"})
    t = res.table
    assert "constant" in t.loc["flat", "note"] and np.isnan(t.loc["flat", "skew"])
    assert "fewer than 3" in t.loc["two", "note"] and t.loc["two", "n"] == 2
    assert "no finite values" in t.loc["gone", "note"] and t.loc["gone", "n"] == 0
    assert "2 infinite value(s) left out" in t.loc["inf", "note"] and t.loc["inf", "n"] == 27
    fin = frame["inf"][np.isfinite(frame["inf"])]
    assert t.loc["inf", "skew"] == pytest.approx(stats.skew(fin, bias=False), rel=1e-10)
    # 1e300 magnitudes: scaled first, so the moments equal those of the unscaled values
    ref = stats.skew(frame["huge"].to_numpy() / 1e300, bias=False)
    assert t.loc["huge", "skew"] == pytest.approx(ref, rel=1e-9)
    assert np.isfinite(t.loc["huge", "mean_minus_median"]) and t.loc["huge", "mean_minus_median"] > 1e299
    assert t.loc["huge", "suggested_transform"] in ("log", "box-cox")
    assert "2**53" in t.loc["int_edge", "note"]
    ns = run_code(res.code("frame"), frame, frame_name="frame")
    assert_same_table(ns["shape"], t)
    assert_unchanged(frame, snap)


def test_tiny_inputs():
    assert shape_of(np.array([1.0, 2.0, 4.0]))["skew"] == pytest.approx(stats.skew([1, 2, 4], bias=False))
    assert np.isnan(shape_of(np.array([1.0, 2.0, 4.0]))["kurtosis"])
    row = shape_of(np.array([1.0, 2.0, 4.0, 9.0, 20.0]))
    assert row["kurtosis"] == pytest.approx(stats.kurtosis([1, 2, 4, 9, 20], bias=False), rel=1e-10)
    assert row["suggested_transform"] == "none" and "fewer than 8" in row["note"]
    empty = shape_of_frame(pd.DataFrame({"a": pd.Series([], dtype="float64")}))
    ns = run_code(empty.code(), pd.DataFrame({"a": pd.Series([], dtype="float64")}))
    assert_same_table(ns["shape"], empty.table)


# --------------------------------------------------------------------------- code contract
def test_code_rebuilds_table_and_histogram(demo_frame, demo_shape):
    code = demo_shape.code("beds", column="irrigation_l")
    assert "nbeda" not in code
    ns = run_code(code, demo_frame, frame_name="beds")
    assert_same_table(ns["shape"], demo_shape.table)
    bins, below, above = demo_shape.hist("irrigation_l")
    pd.testing.assert_frame_equal(ns["shape_hist"], bins)
    np.testing.assert_array_equal(
        ns["shape_hist_edges"], np.histogram_bin_edges(demo_frame["irrigation_l"].dropna(), bins="fd")
    )
    assert (ns["shape_hist_below"], ns["shape_hist_above"]) == (below, above)
    # default column: the first numeric one
    ns2 = run_code(demo_shape.code(), demo_frame)
    first = demo_shape.table.index[0]
    pd.testing.assert_frame_equal(ns2["shape_hist"], demo_shape.hist(first)[0])


def test_code_rebuilds_levels_and_dates(demo_frame, demo_shape):
    ns = run_code(demo_shape.code(), demo_frame)
    assert_same_table(ns["shape_levels"], demo_shape.levels)
    assert_same_table(ns["shape_dates"], demo_shape.dates)
    assert_same_table(ns["shape_frequencies"], demo_shape.frequencies)


@pytest.mark.parametrize(
    "key",
    ["tz_datetimes", "timedelta_period", "mixed_object", "lists_and_dicts", "nullable_dtypes",
     "ordered_categorical", "script_names_and_values", "non_string_names", "zero_rows", "one_row"],
)
def test_code_rebuilds_levels_and_dates_on_hostile_frames(key):
    frame = hostile_frames()[key]
    snap = snapshot(frame)
    res = shape_of_frame(frame)
    ns = run_code(res.code("frame"), frame, frame_name="frame")
    assert_same_table(ns["shape"], res.table)
    if len(res.levels):
        assert_same_table(ns["shape_levels"], res.levels)
        assert_same_table(ns["shape_frequencies"], res.frequencies)
    if len(res.dates):
        assert_same_table(ns["shape_dates"], res.dates)
    assert_unchanged(frame, snap)


def test_code_with_row_sample_and_duplicate_labels():
    rng = np.random.default_rng(12)
    frame = pd.DataFrame(rng.gamma(2.0, 1.0, size=(3000, 3)), columns=["d", "d", "e"])
    res = shape_of_frame(frame, sample=1200, seed=3)
    assert (res.table["n"] == 1200).all()
    assert list(res.table.index) == ["d", "d", "e"]
    ns = run_code(res.code("frame"), frame, frame_name="frame")
    assert_same_table(ns["shape"], res.table)
    pick = np.sort(np.random.default_rng(3).choice(3000, size=1200, replace=False))
    assert res.table["skew"].iloc[1] == pytest.approx(stats.skew(frame.iloc[pick, 1], bias=False), rel=1e-10)


# --------------------------------------------------------------------------- charts and panel
def _datasets_rows(spec) -> int:
    return max((len(v) for v in spec.get("datasets", {}).values()), default=0)


def test_charts_are_pre_aggregated(demo_frame, demo_shape):
    spec = demo_shape.chart().to_dict()  # default: first numeric column
    assert _datasets_rows(spec) <= 500
    for col in ("yield_kg", "soil_grade", "planted_on", "site"):
        s = demo_shape.chart(col).to_dict()
        assert _datasets_rows(s) <= 500
    qq = demo_shape.chart("yield_kg").to_dict()
    text = str(qq)
    assert "normal_q" in text and "whisker_low" in text and "bin_start" in text
    over = demo_shape.overview_chart().to_dict()
    assert "facet" in over
    assert _datasets_rows(over) < 200 * 7 + 1
    with pytest.raises(KeyError):
        demo_shape.chart("plot_id")
    html = demo_shape.chart_html()
    assert html.count("<svg") == 2  # the overview of all numeric columns, then the first column


def test_panel_picker_redraws(demo_shape):
    pytest.importorskip("ipywidgets")
    import ipywidgets as widgets

    box = demo_shape.panel()
    picker = next(w for w in box.children if isinstance(w, widgets.Dropdown))
    out = box.children[1]
    assert "<svg" in out.value
    labels = [label for label, _ in picker.options]
    assert labels[0].startswith("overview")
    picker.value = dict((lab, v) for lab, v in picker.options)[next(lab for lab in labels if lab.startswith("soil_grade"))]
    assert "<svg" in out.value and "soil_grade" in out.value


# --------------------------------------------------------------------------- property check
def test_shape_of_never_warns_and_agrees_with_scipy_on_generated_data():
    """Generated float arrays (hypothesis): no exception or warning; where defined, G1/G2 equal
    scipy.stats.skew/kurtosis(bias=False) on the finite values; counts add up."""
    hyp = pytest.importorskip("hypothesis")
    from hypothesis import given, settings
    from hypothesis import strategies as st
    from hypothesis.extra.numpy import arrays

    values = st.floats(min_value=-1e12, max_value=1e12) | st.sampled_from(
        [0.0, 1.0, -1.0, np.nan, np.inf, 1e300, -1e300, 5e-324]
    )

    @settings(max_examples=60, deadline=None, derandomize=True)
    @given(arrays(np.float64, st.integers(0, 60), elements=values), st.integers(0, 3))
    def check(x, seed):
        with warnings.catch_warnings():
            warnings.simplefilter("error")
            row = shape_of(x, seed=seed)
            bins, below, above = fd_histogram(x)
        fin = x[np.isfinite(x)]
        assert row["n"] == fin.size and row["missing"] == int(np.isnan(x).sum())
        assert row["infinite"] == int(np.isinf(x).sum())
        assert int(bins["count"].sum()) + below + above == fin.size
        assert row["modes"] is None or row["modes"] >= 1
        if row["skew"] == row["skew"] and np.ptp(fin) > 0 and np.abs(fin).max() < 1e150:
            with np.errstate(all="ignore"):
                ref = stats.skew(fin / np.abs(fin).max(), bias=False)
            if np.isfinite(ref) and abs(ref) < 1e6:
                assert row["skew"] == pytest.approx(ref, rel=1e-6, abs=1e-9)

    assert hyp is not None
    check()


def test_awkward_magnitudes_corpus_is_quiet():
    """Seeded corpus of awkward arrays (Cauchy tails, 1e250 strays, subnormals, 1e6 + 1e-9 noise,
    +/-1e308, ties): no exception and no warning from any of them."""
    rng = np.random.default_rng(7)
    gens = [
        lambda n: rng.lognormal(0, 3, size=n),
        lambda n: rng.standard_cauchy(n),
        lambda n: np.r_[rng.normal(size=n - 1), 1e250],
        lambda n: rng.exponential(size=n) * 1e-300,
        lambda n: rng.pareto(0.5, n) + 1e-300,
        lambda n: np.r_[np.zeros(n - 2), 1, 2],
        lambda n: -rng.lognormal(0, 2, n),
        lambda n: rng.choice([1e-310, 2e-310, 3e-310], n),
        lambda n: np.r_[np.full(n - 1, 1e308), -1e308],
        lambda n: 1e6 + rng.normal(size=n) * 1e-9,
        lambda n: np.r_[rng.normal(size=n - 1) * 1e-200, 1e200],
    ]
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        for g in gens:
            for n in (3, 8, 21, 300, 6000):
                x = g(n)
                row = shape_of(x, seed=n)
                bins, below, above = fd_histogram(x)
                assert row["n"] == np.isfinite(x).sum()
                assert int(bins["count"].sum()) + below + above == row["n"]
