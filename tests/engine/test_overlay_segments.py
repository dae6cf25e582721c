"""Segments on the engine path (real DuckDB through ibis; no mocks).

Outside references, named beside each check:

* the pandas path (``df.eda.segments``) — the reference whenever the table has no more
  rows than the sample, and for every all-row number on bigger tables (the pandas path
  groups every row);
* pandas ``groupby`` on the full data (n, mean, std, sum, median);
* NIST Statistical Reference Datasets (StRD), one-way ANOVA: certified between/within
  sums of squares, F and R² in each file header (``tests/data/nist_anova``, provenance in
  ``tests/data/README.md``); the digits required are those of ``tests/test_segments.py``;
* scipy: ``f_oneway``, ``kruskal``, ``chi2_contingency``; statsmodels (tests only):
  ``anova_oneway(use_var="unequal")`` for Welch's ANOVA.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from statsmodels.stats.oneway import anova_oneway

import nbeda
from nbeda.engine._run import EXACT
from tests.helpers import HOSTILE_NAME, assert_same_table, run_code
from tests.test_segments import AVERAGE, HIGHER, LOWER, _load_nist, _lre


def _greenhouse(n: int, seed: int) -> pd.DataFrame:
    """Seeded greenhouse-like frame with plain dtypes (Parquet round-trips them unchanged)."""
    rng = np.random.default_rng(seed)
    site = rng.choice(["Northgate", "Riverside", "Hilltop", "Eastfield", "Marsh Lane"], n,
                      p=[0.35, 0.25, 0.2, 0.15, 0.05])
    shift = pd.Series(site).map({"Northgate": 0.0, "Riverside": 2.0, "Hilltop": -1.5, "Eastfield": 4.0,
                                 "Marsh Lane": 1.0}).to_numpy()
    frame = pd.DataFrame({
        "site": site,
        "crop": rng.choice(["basil", "tomato", "lettuce", "pepper"], n),
        "irrigated": rng.choice([True, False], n),
        "soil_grade": rng.integers(1, 5, n),
        "air_temp_c": rng.normal(21, 3, n),
        "yield_kg": 40 + shift + rng.gamma(4, 2.5, n) * (1 + 0.3 * (site == "Eastfield")),
        "pest_score": rng.integers(0, 40, n).astype("float64"),
    })
    frame.loc[rng.choice(n, n // 50, replace=False), "site"] = None
    frame.loc[rng.choice(n, n // 40, replace=False), "yield_kg"] = np.nan
    frame.loc[rng.choice(n, 3, replace=False), "yield_kg"] = np.inf
    frame.loc[rng.choice(n, n // 60, replace=False), "air_temp_c"] = np.nan
    return frame


def _same_tables(got, want) -> None:
    """Every table the tab shows, in the same order, equal to 1e-9 relative."""
    wt = want.tables()
    gt = {k: v for k, v in got.tables().items() if k != "How each number was computed"}  # engine only
    assert list(gt) == list(wt)
    for key in wt:
        assert_same_table(gt[key], wt[key])
    if want.pivot is not None:
        pd.testing.assert_frame_equal(got.pivot, want.pivot, rtol=1e-9)
    assert got.summary == want.summary
    assert got.cautions == want.cautions


@pytest.fixture(scope="module")
def small(tmp_path_factory):
    frame = _greenhouse(700, seed=3)
    path = tmp_path_factory.mktemp("seg") / "small.parquet"
    frame.to_parquet(path)
    return frame, path


# ------------------------------------------------------- (1) small table: equal to the pandas path
@pytest.mark.parametrize(
    "kw",
    [
        {"by": "site"},  # defaults: metric = first continuous column, against = most associated
        {"by": "site", "metric": "yield_kg", "against": "crop"},
        {"by": "soil_grade", "metric": "yield_kg", "against": "irrigated"},  # ordered integer levels
        {"by": "air_temp_c", "metric": "yield_kg", "against": "site"},  # quantile bins, missing bin
        {"by": "irrigated", "metric": False, "against": "site"},  # balance only
        {"by": "pest_score", "metric": "air_temp_c", "against": False},  # > 20 levels pooled as "other"
        {"by": "irrigated", "metric": "yield_kg", "against": "soil_grade"},
    ],
)
def test_small_table_equals_the_pandas_path(small, kw):
    """Reference: the pandas path on the same frame (the sample is the whole table)."""
    frame, path = small
    want = frame.eda.segments(**kw)
    got = nbeda.source(path).segments(**kw)
    assert got._res["mode"] == want._res["mode"]
    _same_tables(got, want)
    # every column of the table is labelled as computed over all rows
    assert set(got.exactness["how"]) == {EXACT}


def test_small_table_two_by_two_fisher(tmp_path):
    """Reference: the pandas path (Fisher's exact test on the 2×2 cross-tab, Cochran caution)."""
    rng = np.random.default_rng(11)
    frame = pd.DataFrame({
        "irrigated": rng.choice(["yes", "no"], 60),
        "shaded": rng.choice(["yes", "no"], 60, p=[0.9, 0.1]),
        "yield_kg": rng.normal(30, 4, 60),
    })
    frame.to_parquet(tmp_path / "f.parquet")
    want = frame.eda.segments(by="irrigated", metric="yield_kg", against="shaded")
    got = nbeda.source(tmp_path / "f.parquet").segments(by="irrigated", metric="yield_kg", against="shaded")
    assert "fisher_exact" in got.tests.index
    _same_tables(got, want)
    # Cochran's rule (common practice): expected counts too small here, and the caution says so
    assert got.cochran_ok is False
    assert any("Cochran" in c for c in got.cautions)
    assert any("χ² needs adequate expected counts" in c for c in got.cautions)
    # scipy: the χ² of independence (no Yates correction) on the same counts
    chi2 = stats.chi2_contingency(pd.crosstab(frame["irrigated"], frame["shaded"]).to_numpy(), correction=False)
    assert got.tests.loc["chi2", "statistic"] == pytest.approx(chi2.statistic, rel=1e-12)


def test_hostile_names_and_values(tmp_path):
    """Reference: the pandas path; a column name and values that are code or HTML stay data."""
    frame = pd.DataFrame({HOSTILE_NAME: ["<b>", "x'", "<b>", 'x"', "y", "<b>", "y", "x'"],
                          "yield_kg": [1.0, 2.5, 3.0, 4.0, 5.5, 2.0, 7.0, 1.5]})
    frame.to_parquet(tmp_path / "h.parquet")
    want = frame.eda.segments(by=HOSTILE_NAME, metric="yield_kg")
    got = nbeda.source(tmp_path / "h.parquet").segments(by=HOSTILE_NAME, metric="yield_kg")
    _same_tables(got, want)
    assert "&lt;b&gt;" in got.to_html()
    ns = run_code(got.code(), frame, "unused")
    assert_same_table(ns["segments"], got.table)


# ------------------------------------------------------- (2) NIST StRD one-way ANOVA
def _nist_engine(name, tmp_path):
    cert, groups, text = _load_nist(name)
    frame = pd.DataFrame({"treatment": [f"T{g}" for g in groups], "response": np.array(text, dtype="float64")})
    frame.to_parquet(tmp_path / f"{name}.parquet")
    r = nbeda.source(tmp_path / f"{name}.parquet").segments(by="treatment", metric="response", against=False)
    return cert, r


@pytest.mark.parametrize("name", LOWER + AVERAGE)
def test_nist_anova_lower_and_average_difficulty(name, tmp_path):
    """NIST StRD one-way ANOVA (SiRstv, SmLs01–06, AtmWtAg): certified SS, F, R² to ≥ 9 digits,
    the digits the pandas path's tests require (tests/test_segments.py). Measured on the engine
    path: SiRstv ≥ 13, SmLs01–03 ≥ 13.7, SmLs04–06 ≥ 9.9, AtmWtAg ≥ 10.2."""
    cert, r = _nist_engine(name, tmp_path)
    at = r.anova_table
    assert at.loc["between", "df"] == cert["df_between"]  # NIST StRD certified df
    assert at.loc["within", "df"] == cert["df_within"]  # NIST StRD certified df
    assert _lre(at.loc["between", "sum_sq"], cert["ss_between"]) >= 9  # NIST StRD certified between SS
    assert _lre(at.loc["within", "sum_sq"], cert["ss_within"]) >= 9  # NIST StRD certified within SS
    assert _lre(at.loc["within", "mean_sq"], cert["ms_within"]) >= 9  # NIST StRD certified within MS
    assert _lre(at.loc["between", "F"], cert["f"]) >= 9  # NIST StRD certified F
    assert _lre(r.tests.loc["anova", "statistic"], cert["f"]) >= 9  # NIST StRD certified F
    assert _lre(r.tests.loc["anova", "effect_size"], cert["r_squared"]) >= 9  # NIST StRD R² (= η²)


@pytest.mark.parametrize("name", HIGHER)
def test_nist_anova_higher_difficulty(name, tmp_path):
    """NIST StRD SmLs07–09 read as float64: the limits of tests/test_segments.py (F, within SS ≥ 4
    digits, between SS ≥ 3.85; the float64 input itself limits these), and at least as good as
    scipy's f_oneway on the same float64 values."""
    cert, r = _nist_engine(name, tmp_path)
    at = r.anova_table
    assert _lre(at.loc["between", "F"], cert["f"]) >= 4.0  # NIST StRD certified F
    assert _lre(at.loc["within", "sum_sq"], cert["ss_within"]) >= 4.0  # NIST StRD certified within SS
    assert _lre(at.loc["between", "sum_sq"], cert["ss_between"]) >= 3.85  # NIST StRD certified between SS
    _, groups, text = _load_nist(name)
    y, g = np.array(text, dtype="float64"), np.array(groups)
    ref = stats.f_oneway(*[y[g == k] for k in dict.fromkeys(groups)]).statistic  # scipy reference
    assert _lre(at.loc["between", "F"], cert["f"]) >= _lre(ref, cert["f"]) - 0.05


# ------------------------------------------------------- (3) bigger than the sample
@pytest.fixture(scope="module")
def big(tmp_path_factory):
    frame = _greenhouse(60_000, seed=5)
    path = tmp_path_factory.mktemp("seg") / "big.parquet"
    frame.to_parquet(path)
    report = nbeda.source(path, sample=5000)
    return frame, report


def test_big_table_exact_group_numbers(big):
    """Reference: pandas groupby on all 60,000 rows (n, mean, std, sum, median); the pandas path
    on the full frame for every all-row column (ci, share of total, balance)."""
    frame, report = big
    assert not report.engine.sample_is_all and len(report.engine.sample()) < 6000
    got = report.segments(by="site", metric="yield_kg", against="crop")
    y = frame["yield_kg"].where(np.isfinite(frame["yield_kg"]))
    seg = frame["site"].fillna("(missing)")
    ref = y.groupby(seg).agg(["count", "mean", "std", "sum", "median"])
    t = got.table
    ref = ref.reindex(t.index)
    np.testing.assert_array_equal(t["n"].to_numpy(), ref["count"].to_numpy())
    for ours, theirs in (("mean", "mean"), ("std", "std"), ("sum", "sum"), ("median", "median")):
        np.testing.assert_allclose(t[ours].to_numpy(), ref[theirs].to_numpy(), rtol=1e-9)
    assert int(t["n"].sum()) == int(np.isfinite(frame["yield_kg"]).sum())  # all rows, not the sample
    # the pandas path on the full frame: every all-row table
    want = frame.eda.segments(by="site", metric="yield_kg", against="crop")
    assert_same_table(t, want.table)
    assert_same_table(got.balance, want.balance)
    assert_same_table(got.anova_table, want.anova_table)
    assert_same_table(got.crosstab, want.crosstab)
    assert_same_table(got.residuals, want.residuals)
    pd.testing.assert_frame_equal(got.pivot, want.pivot, rtol=1e-9)
    for test in ("anova", "welch_anova", "balance_chi2", "chi2"):
        assert_same_table(got.tests.loc[[test]], want.tests.loc[[test]])
    # scipy f_oneway and statsmodels Welch's ANOVA on all rows
    groups = [y[seg == s].dropna().to_numpy() for s in t.index]
    assert got.tests.loc["anova", "statistic"] == pytest.approx(stats.f_oneway(*groups).statistic, rel=1e-9)
    welch = anova_oneway(groups, use_var="unequal")
    assert got.tests.loc["welch_anova", "statistic"] == pytest.approx(welch.statistic, rel=1e-9)
    assert got.anova_table.loc["within", "df"] == len(y.dropna()) - len(groups)
    # labels: every column of the table over all rows; the note names what stays on the sample
    assert set(got.exactness["how"]) == {EXACT}
    assert any("Kruskal–Wallis and Tukey's HSD" in n and "seeded sample" in n for n in got.notes)


def test_big_table_sample_parts_use_the_sample(big):
    """Reference: scipy ``kruskal`` on the seeded sample's rows, grouped by the same segments."""
    frame, report = big
    got = report.segments(by="site", metric="yield_kg", against=False)
    sample = report.engine.sample()
    y = sample["yield_kg"].where(np.isfinite(sample["yield_kg"]))
    seg = sample["site"].fillna("(missing)")
    groups = [y[seg == s].dropna().to_numpy() for s in got.table.index]
    h = stats.kruskal(*groups).statistic
    assert got.tests.loc["kruskal", "statistic"] == pytest.approx(h, rel=1e-12)
    assert got.tests.loc["kruskal", "effect_size"] == pytest.approx(h / (sum(map(len, groups)) - 1), rel=1e-12)
    # Tukey's HSD on the sample (scipy tukey_hsd on the same groups)
    res = stats.tukey_hsd(*groups)
    pairs = got.pairs
    assert len(pairs) == len(groups) * (len(groups) - 1) // 2
    assert pairs["diff"].iloc[0] == pytest.approx(res.statistic[0, 1], rel=1e-12)
    # the full-data Kruskal–Wallis differs: the row really is the sample's
    full = [frame["yield_kg"].where(np.isfinite(frame["yield_kg"]))[frame["site"].fillna("(missing)") == s]
            .dropna().to_numpy() for s in got.table.index]
    assert abs(stats.kruskal(*full).statistic - h) > 1e-6 * abs(h)


def test_big_table_quantile_bins_over_all_rows(big):
    """Reference: the pandas path on the full frame — equal-count bins cut at the all-row quantiles."""
    frame, report = big
    got = report.segments(by="air_temp_c", metric="yield_kg", against=False)
    want = frame.eda.segments(by="air_temp_c", metric="yield_kg", against=False)
    assert got._res["mode"] == "bins"
    assert_same_table(got.table, want.table)
    assert_same_table(got.balance, want.balance)


def test_approximate_engine_labels_its_medians(small):
    """exact=False: medians from the engine's approximate quantile, labelled so; counts still exact
    (reference: the pandas path for n and mean)."""
    frame, path = small
    got = nbeda.source(path, exact=False).segments(by="site", metric="yield_kg", against=False)
    want = frame.eda.segments(by="site", metric="yield_kg", against=False)
    how = got.exactness["how"]
    assert how["median"].startswith("approximate") and how["mean"] == EXACT
    assert_same_table(got.table[["n", "mean", "std", "sum"]], want.table[["n", "mean", "std", "sum"]])
    np.testing.assert_allclose(got.table["median"], want.table["median"], rtol=0.05)


# ------------------------------------------------------- (4) the emitted code
@pytest.mark.parametrize(
    "kw",
    [
        {"by": "site", "metric": "yield_kg", "against": "crop"},
        {"by": "air_temp_c", "metric": "yield_kg", "against": "site"},
        {"by": "irrigated", "metric": False, "against": "site"},
    ],
)
def test_emitted_code_small(small, kw):
    """The engine code (reopen the file, draw the sample, pandas code, overlay) rebuilds the tables."""
    frame, path = small
    got = nbeda.source(path).segments(**kw)
    ns = run_code(got.code(), frame, "unused")
    assert_same_table(ns["segments"], got.table)
    assert_same_table(ns["segments_balance"], got.balance)
    assert_same_table(ns["segments_tests"], got.tests)
    if got.crosstab is not None:
        assert_same_table(ns["segments_crosstab"], got.crosstab)
        assert_same_table(ns["segments_residuals"], got.residuals)
    if got.pivot is not None:
        pd.testing.assert_frame_equal(ns["segments_pivot"], got.pivot, rtol=1e-9)


def test_emitted_code_big(big):
    """Bigger than the sample: the code redraws the same seeded sample, so even the sample-based
    Kruskal–Wallis row and Tukey pairs come back equal."""
    frame, report = big
    got = report.segments(by="site", metric="yield_kg", against="crop")
    ns = run_code(got.code(), frame, "unused")
    assert_same_table(ns["segments"], got.table)
    assert_same_table(ns["segments_tests"], got.tests)
    assert_same_table(ns["segments_pairs"], got.pairs)
    assert "t = con.read_parquet(" in got.code()


def test_many_levels_top_values_only(tmp_path):
    """A by column with many distinct values: the engine returns only the most frequent values
    (ties by value) plus the number of levels; the segments equal the pandas path's
    (reference: ``df.eda.segments`` — 20 most frequent kept, the rest pooled, missing last)."""
    from nbeda.engine.overlays.segments import engine_plan

    rng = np.random.default_rng(21)
    n = 3000
    trays = np.array([f"tray-{i:04d}" for i in rng.integers(0, 900, n)], dtype=object)
    trays[rng.choice(n, 40, replace=False)] = None
    frame = pd.DataFrame({"tray": trays, "yield_kg": rng.normal(30, 5, n)})
    frame.to_parquet(tmp_path / "trays.parquet")
    want = frame.eda.segments(by="tray", metric="yield_kg", against=False)
    report = nbeda.source(tmp_path / "trays.parquet")
    got = report.segments(by="tray", metric="yield_kg", against=False)
    assert_same_table(got.table, want.table)
    assert_same_table(got.balance, want.balance)
    assert any(str(v).startswith("other (") for v in got.table.index)
    small_limit = engine_plan(report.engine.t, "tray", "levels", 20, 5, limit=50)  # only 50 values back
    full = engine_plan(report.engine.t, "tray", "levels", 20, 5)
    assert small_limit["order"] == full["order"] == list(want.table.index)
    assert small_limit["labels"] == full["labels"]


# ------------------------------------------------------- Spark (the same ibis expressions)
def test_spark_equals_the_pandas_path(small, spark):
    """Reference: the pandas path. On Spark (exact=True) every table equals it, ±inf in the metric
    set aside (found by comparison); on Spark's default (approximate) the median says so."""
    frame, path = small
    sdf = spark.read.parquet(str(path))
    kw = {"by": "soil_grade", "metric": "yield_kg", "against": "site"}
    got = nbeda.source(sdf, exact=True).segments(**kw)
    _same_tables(got, frame.eda.segments(**kw))
    assert any("3 infinite values of yield_kg" in n for n in got.notes)
    approx = nbeda.source(sdf).segments(by="site", metric="yield_kg", against=False)
    assert approx.exactness["how"]["median"].startswith("approximate")
    want = frame.eda.segments(by="site", metric="yield_kg", against=False)
    cols = ["n", "mean", "std", "sum"]
    assert_same_table(approx.table[cols], want.table[cols])
