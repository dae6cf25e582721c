"""Gaps tab: counts, disguised gaps, patterns, Little's MCAR test, MAR hints and fill comparison.

Each check names its outside reference beside it.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
from helpers import assert_same_table, assert_unchanged, run_code, snapshot
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays
from scipy import stats

from nbeda.report import Report
from nbeda.stats.gaps import disguised_missing, em_normal, little_mcar, missing_patterns


def gaps_of(frame: pd.DataFrame, **kw):
    return Report(frame, **kw).gaps()


# --------------------------------------------------------------------------- Palmer penguins
def test_penguin_missing_counts_match_the_package():
    """Palmer penguins (Gorman, Williams & Fraser 2014, PLoS ONE 9(3):e90081) as shipped by the
    `palmerpenguins` package: 344 rows; bill length, bill depth, flipper length and body mass each
    miss 2 values and sex misses 11 (the NA counts in the package's documented summary of the
    data — from memory — and verified here against the shipped CSV); the package's own
    `drop_na=True` keeps the 333 complete rows."""
    palmerpenguins = pytest.importorskip("palmerpenguins")
    df = palmerpenguins.load_penguins()
    snap = snapshot(df)
    g = gaps_of(df)
    t = g.table
    assert len(df) == 344
    want = {
        "species": 0, "island": 0, "bill_length_mm": 2, "bill_depth_mm": 2,
        "flipper_length_mm": 2, "body_mass_g": 2, "sex": 11, "year": 0,
    }
    assert t["missing"].to_dict() == want
    assert t.loc["sex", "missing_pct"] == pytest.approx(100 * 11 / 344)
    with warnings.catch_warnings():  # the package's own dropna(inplace=True) warns under pandas 3
        warnings.simplefilter("ignore")
        complete_rows, _ = palmerpenguins.load_penguins(return_X_y=True, drop_na=True)
    assert len(complete_rows) == 333
    # Patterns: 333 complete rows, 9 rows missing only sex, 2 rows missing all five measured fields.
    p = g.patterns
    assert p["rows"].tolist() == [333, 9, 2]
    assert p["missing_in"].iloc[0] == "(none: complete rows)"
    assert p["missing_in"].iloc[1] == "sex"
    assert p["gap_columns"].tolist() == [0, 1, 5]
    assert t.loc["bill_length_mm", "pattern_count"] == 1 and t.loc["sex", "pattern_count"] == 2
    # The four measurements are missing in the same two rows: nullity correlation exactly 1.
    assert g.nullity_corr.loc["bill_length_mm", "body_mass_g"] == pytest.approx(1.0)
    assert g.nullity_corr.loc["bill_length_mm", "sex"] == pytest.approx(
        np.corrcoef(df["bill_length_mm"].isna(), df["sex"].isna())[0, 1]
    )
    # Too few gaps (2) for a two-group comparison: said so, not guessed.
    assert t.loc["bill_length_mm", "mar_hint"].startswith("not tested: too few gaps (2)")
    assert any(n.startswith("Columns that go missing together") and "bill_length_mm & body_mass_g (r = 1.00)" in n for n in g.notes)
    ns = run_code(g.code("df"), df)
    assert_same_table(ns["gaps"], t)
    assert_same_table(ns["gaps_patterns"], g.patterns)
    assert_unchanged(df, snap)


# --------------------------------------------------------------------------- disguised values
def test_disguised_text_tokens_are_reported_not_converted():
    """The token list of the issue ("", whitespace, NA, N/A, null, None, ?, -, missing, unknown),
    case-insensitive; other words untouched."""
    s = pd.Series(["a", "", "  ", "NA", "n/a", "NULL", "None", "?", "-", "Missing", "UNKNOWN", "b", None, "nah"])
    mask, found = disguised_missing(s)
    assert mask.tolist() == [False] + [True] * 10 + [False, False, False]
    assert sum(c for _, c in found) == 10
    df = pd.DataFrame({"s": s})
    snap = snapshot(df)
    g = gaps_of(df)
    assert g.table.loc["s", "missing"] == 1 and g.table.loc["s", "disguised"] == 10
    assert g.table.loc["s", "effective_missing_pct"] == pytest.approx(100 * 11 / 14)
    assert "'N/A'" not in g.table.loc["s", "disguised_values"]  # raw values shown as they are
    assert "'n/a' (1)" in g.table.loc["s", "disguised_values"]
    assert_unchanged(df, snap)  # reported, never converted
    ns = run_code(g.code_convert("df"), df)
    assert ns["df_clean"]["s"].isna().sum() == 11
    assert ns["df_clean"]["s"].dropna().tolist() == ["a", "b", "nah"]


def test_numeric_sentinel_rules():
    """The documented sentinel rules of nbeda.stats.gaps (placeholder codes such as -999, 9999 or
    -1 for "not recorded" are common practice in survey and sensor files; thresholds are ours)."""
    rng = np.random.default_rng(3)
    base = rng.normal(40, 8, 400)
    # -999 below every other value: disguised.
    m, f = disguised_missing(pd.Series(np.r_[base, [-999.0] * 4]))
    assert f == [(-999.0, 4)] and m.sum() == 4
    # -99 inside a column that genuinely goes below -99: not disguised.
    m, f = disguised_missing(pd.Series(np.r_[rng.normal(-60, 30, 400), [-99.0] * 3]))
    assert f == []
    # -1 in a non-negative count column with several levels: disguised; in a -1/0/1 code: not.
    m, f = disguised_missing(pd.Series(np.r_[rng.integers(0, 9, 300), [-1] * 5]))
    assert f == [(-1.0, 5)]
    assert disguised_missing(pd.Series([-1, 0, 1] * 30))[1] == []
    # A repeated maximum set far apart (999 in an age-like column): disguised.
    m, f = disguised_missing(pd.Series(np.r_[np.clip(base, 0, None).round(), [999.0] * 6]))
    assert f == [(999.0, 6)]
    # Zero-inflated data and a repeated cap next to the bulk are not gaps.
    assert disguised_missing(pd.Series(np.r_[np.zeros(200), rng.gamma(2, 3, 300)]))[1] == []
    assert disguised_missing(pd.Series(np.minimum(rng.normal(90, 8, 500), 100.0)))[1] == []
    # Nullable integers keep the rule; booleans are never sentinels.
    m, f = disguised_missing(pd.Series(pd.array(list(range(30)) + [-999, None], dtype="Int64")))
    assert f == [(-999.0, 1)] and m.tolist()[-2:] == [True, False]
    assert disguised_missing(pd.Series([True, False] * 10))[1] == []


# --------------------------------------------------------------------------- demo data
def test_demo_finds_planted_sentinel_and_mar_dependence(demo_frame):
    """The planted properties documented in nbeda.demo.greenhouse (invented data)."""
    g = gaps_of(demo_frame)
    t = g.table
    n_sentinel = int((demo_frame["soil_ph"] == -999).sum())
    assert n_sentinel > 0
    assert t.loc["soil_ph", "disguised"] == n_sentinel
    assert t.loc["soil_ph", "disguised_values"] == f"-999 ({n_sentinel})"
    assert t.loc["soil_ph", "effective_missing_pct"] == pytest.approx(100 * n_sentinel / len(demo_frame))
    assert t.drop(index="soil_ph")["disguised"].sum() == 0
    hint = t.loc["humidity_pct", "mar_hint"]
    assert t.loc["humidity_pct", "mar_with"] == "sensor_model"
    assert hint.startswith("gaps in humidity_pct are far more common when sensor_model = 'v1'")
    assert "p < 0.001" in hint
    assert t.loc["humidity_pct", "mar_p_adj"] < 1e-10
    assert any("sensor_model = 'v1'" in f for f in g.flags)
    assert any("soil_ph" in f and "-999" in f for f in g.flags)
    # The rate quoted in the words is the observed one.
    v1 = demo_frame["sensor_model"] == "v1"
    rate = demo_frame.loc[v1, "humidity_pct"].isna().mean()
    assert f"({100 * rate:.1f}% vs" in hint
    assert t["missing"].to_dict()["humidity_pct"] == int(demo_frame["humidity_pct"].isna().sum())
    ns = run_code(g.code_convert("df"), demo_frame)
    assert ns["df_clean"]["soil_ph"].isna().sum() == n_sentinel
    assert (demo_frame["soil_ph"] == -999).sum() == n_sentinel  # the user's frame is untouched


# --------------------------------------------------------------------------- tests vs scipy
def _test_row(g, x, y):
    cols = list(g.ctx.frame.columns)
    t = g.tests
    row = t[(t["x"] == cols.index(x)) & (t["y"] == cols.index(y))]
    assert len(row) == 1
    return row.iloc[0]


def test_mann_whitney_matches_scipy(demo_frame):
    """Mann–Whitney U from shared ranks equals scipy.stats.mannwhitneyu (asymptotic, tie- and
    continuity-corrected), with and without ties and when Y has its own gaps."""
    g = gaps_of(demo_frame)
    gone = demo_frame["humidity_pct"].isna()
    for y in ("temperature_c", "pest_score", "yield_kg"):
        v = demo_frame[y].astype("float64")
        ok = v.notna()
        ref = stats.mannwhitneyu(v[gone & ok], v[~gone & ok], alternative="two-sided", method="asymptotic")
        row = _test_row(g, "humidity_pct", y)
        assert row["test"] == "Mann-Whitney U"
        assert row["statistic"] == pytest.approx(ref.statistic, rel=1e-12)
        assert row["p_value"] == pytest.approx(ref.pvalue, rel=1e-9)
    # A column with more missing than observed values (the complement path).
    rng = np.random.default_rng(5)
    x = rng.normal(size=300)
    y = np.where(rng.random(300) < 0.7 + 0.2 * (x > 0), np.nan, rng.normal(size=300))
    df = pd.DataFrame({"x": x.round(1), "y": y})
    g2 = gaps_of(df)
    row = _test_row(g2, "y", "x")
    ref = stats.mannwhitneyu(df["x"][df["y"].isna()], df["x"][df["y"].notna()], method="asymptotic")
    assert row["statistic"] == pytest.approx(ref.statistic, rel=1e-12)
    assert row["p_value"] == pytest.approx(ref.pvalue, rel=1e-9)


def test_chi_squared_matches_scipy_and_bh_matches_statsmodels(demo_frame):
    """χ² of "humidity missing" × sensor_model equals scipy.stats.chi2_contingency(correction=False);
    the Benjamini–Hochberg adjustment equals statsmodels' multipletests(method="fdr_bh")."""
    g = gaps_of(demo_frame)
    for y in ("sensor_model", "site", "soil_grade"):
        table = pd.crosstab(demo_frame["humidity_pct"].isna(), demo_frame[y])
        ref = stats.chi2_contingency(table.to_numpy(), correction=False)
        row = _test_row(g, "humidity_pct", y)
        assert row["test"] == "chi-squared"
        assert row["statistic"] == pytest.approx(ref.statistic, rel=1e-12)
        assert row["p_value"] == pytest.approx(ref.pvalue, rel=1e-9, abs=1e-300)
    multitest = pytest.importorskip("statsmodels.stats.multitest")
    _, p_adj, _, _ = multitest.multipletests(g.tests["p_value"].to_numpy(), method="fdr_bh")
    np.testing.assert_allclose(g.tests["p_adj"].to_numpy(), p_adj, rtol=1e-12)


def test_sparse_tables_are_not_tested_with_chi_squared():
    """Cochran's rule (common practice): no χ² when an expected count is < 1 or > 20% are < 5."""
    rng = np.random.default_rng(2)
    n = 60
    level = np.r_[["a"] * 28, ["b"] * 28, ["c", "d", "e", "f"]]
    y = rng.normal(size=n)
    y[rng.random(n) < 0.2] = np.nan
    g = gaps_of(pd.DataFrame({"y": y, "g": level}))
    assert (g.tests["test"] == "chi-squared").sum() == 0
    g2 = gaps_of(pd.DataFrame({"y": y, "g": level[:56].tolist() + ["a", "b", "a", "b"]}))
    assert (g2.tests["test"] == "chi-squared").sum() == 1


# --------------------------------------------------------------------------- Little's test
def test_em_matches_closed_form_for_monotone_bivariate_data():
    """Bivariate normal with y2 missing on some rows (a monotone pattern): the ML estimates have a
    closed form (Anderson 1957; Little & Rubin 2002, Statistical Analysis with Missing Data,
    2nd ed., §7.2, section number from memory): μ1, σ11 from all rows; y2 on y1 regressed over the
    complete rows."""
    rng = np.random.default_rng(11)
    n = 400
    y1 = rng.normal(5, 2, n)
    y2 = 1 + 0.8 * y1 + rng.normal(0, 1, n)
    y2[rng.random(n) < 0.3] = np.nan
    z = np.column_stack([y1, y2])
    mu, cov, _, converged, _ = em_normal(z, tol=1e-13, max_iter=5000)
    assert converged
    c = ~np.isnan(y2)
    mu1, s11 = y1.mean(), y1.var()
    b = np.cov(y1[c], y2[c], bias=True)[0, 1] / y1[c].var()
    r = y2[c] - y2[c].mean() - b * (y1[c] - y1[c].mean())
    mu2 = y2[c].mean() + b * (mu1 - y1[c].mean())
    s22 = (r**2).mean() + b**2 * s11
    np.testing.assert_allclose(mu, [mu1, mu2], rtol=1e-9)
    np.testing.assert_allclose(cov, [[s11, b * s11], [b * s11, s22]], rtol=1e-8)


def test_little_statistic_by_its_formula():
    """d² = Σ_g n_g (ȳ_g − μ̂_g)ᵀ Σ̂_g⁻¹ (ȳ_g − μ̂_g), dof = Σ_g p_g − p (Little 1988, JASA
    83:1198–1202, eq. for d² with ML estimates), recomputed here pattern by pattern."""
    rng = np.random.default_rng(4)
    x = rng.multivariate_normal([0, 1, 2], [[1, 0.5, 0.2], [0.5, 2, 0.3], [0.2, 0.3, 1.5]], 250)
    x[rng.random(250) < 0.2, 1] = np.nan
    x[rng.random(250) < 0.15, 2] = np.nan
    res = little_mcar(x)
    assert res["applicable"]
    mu, cov = res["mean"], res["cov"]
    d2, dof = 0.0, -3
    miss = np.isnan(x)
    for pattern in np.unique(miss, axis=0):
        rows = (miss == pattern).all(axis=1)
        o = ~pattern
        diff = x[rows][:, o].mean(axis=0) - mu[o]
        d2 += rows.sum() * diff @ np.linalg.solve(cov[np.ix_(o, o)], diff)
        dof += o.sum()
    assert res["statistic"] == pytest.approx(d2, rel=1e-6)
    assert res["dof"] == dof == (3 + 2 + 2 + 1) - 3  # four patterns: 3, 2, 2 and 1 observed variables, minus p
    assert res["p_value"] == pytest.approx(stats.chi2.sf(d2, dof), rel=1e-5)


def _simulate(rng, n, mechanism):
    x = rng.multivariate_normal([0, 0, 0], [[1, 0.5, 0.3], [0.5, 1, 0.4], [0.3, 0.4, 1]], n)
    if mechanism == "mcar":
        x[rng.random(n) < 0.15, 1] = np.nan
        x[rng.random(n) < 0.15, 2] = np.nan
    else:  # planted MAR: x1 goes missing mostly when x0 is high
        x[rng.random(n) < np.where(x[:, 0] > 0, 0.35, 0.03), 1] = np.nan
        x[rng.random(n) < 0.15, 2] = np.nan
    return x


@pytest.mark.slow
def test_little_mcar_calibration_by_seeded_simulation():
    """Calibration by seeded simulation with known mechanisms (the issue's criterion): under MCAR
    the 5%-level rejection rate over 200 runs lies in [2%, 9%]; under a planted MAR mechanism
    (gaps in x1 depend on the observed x0) the test rejects in at least 90% of 200 runs."""
    rng = np.random.default_rng(20261202)
    p_mcar = [little_mcar(_simulate(rng, 300, "mcar"))["p_value"] for _ in range(200)]
    p_mar = [little_mcar(_simulate(rng, 300, "mar"))["p_value"] for _ in range(200)]
    rate_mcar = np.mean(np.array(p_mcar) < 0.05)
    rate_mar = np.mean(np.array(p_mar) < 0.05)
    assert 0.02 <= rate_mcar <= 0.09, rate_mcar
    assert rate_mar >= 0.90, rate_mar
    # Under MCAR the p-values are roughly uniform (Kolmogorov–Smirnov, generous level).
    assert stats.kstest(p_mcar, "uniform").pvalue > 0.001


def test_mcar_exposed_on_the_result_and_in_the_code():
    """Seeded simulation with a planted MAR mechanism (known parameters): Little's test rejects,
    and the MAR hint names the driver; the emitted code gives the same statistic."""
    rng = np.random.default_rng(8)
    df = pd.DataFrame(_simulate(rng, 500, "mar"), columns=["a", "b", "c"])
    g = gaps_of(df)
    m = g.mcar
    assert m.applicable and m["statistic"] == m.statistic and m["dof"] == m.dof == 5
    assert m.patterns == m["patterns"] == 4 and m.p_value < 0.001
    assert "Little's MCAR test on 3 numeric columns" in " ".join(g.notes)
    ns = run_code(g.code("df"), df)
    assert ns["gaps_mcar"]["statistic"] == pytest.approx(m.statistic, rel=1e-12)
    # MAR hint on the numeric driver: gaps in b when a is higher.
    assert g.table.loc["b", "mar_hint"].startswith("gaps in b are more common when a is higher (median a ")
    pd.testing.assert_frame_equal(ns["gaps_nullity"], g.nullity_corr)


def test_mcar_not_applicable_cases_say_why():
    rng = np.random.default_rng(9)
    y = rng.normal(size=50)
    y[:10] = np.nan
    single = gaps_of(pd.DataFrame({"y": y}))
    assert not single.mcar.applicable and "at least two numeric columns" in single.mcar.reason
    cats = gaps_of(pd.DataFrame({"a": ["x", None, "y", "z"] * 10, "b": ["u", "v", None, "v"] * 10}))
    assert not cats.mcar.applicable and "at least two numeric columns" in cats.mcar.reason
    assert "not applicable" in cats.mcar.summary()
    full = gaps_of(pd.DataFrame({"a": rng.normal(size=30), "b": rng.normal(size=30)}))
    assert full.mcar.reason == "not applicable: no numeric column has gaps"
    a, b = rng.normal(size=40), rng.normal(size=40)
    a[::2] = np.nan
    b[1::2] = np.nan  # no row is complete
    none_complete = gaps_of(pd.DataFrame({"a": a, "b": b, "c": rng.normal(size=40)}))
    assert "0 complete rows are too few" in none_complete.mcar.reason
    assert np.isnan(none_complete.mcar.p_value)
    c = rng.normal(size=200)
    c[rng.random(200) < 0.2] = np.nan
    a = rng.normal(size=200)
    collinear = gaps_of(pd.DataFrame({"a": a, "twice_a": 2 * a + 1, "c": c}))
    assert collinear.mcar.reason == "not applicable: the EM covariance is singular (some numeric columns are collinear)"


def test_significant_but_negligible_association_is_called_weak():
    """Cohen (1988): w = 0.1 is a "small" effect (common practice); below it the hint says "weak"."""
    rng = np.random.default_rng(21)
    n = 40000
    seg = np.where(rng.random(n) < 0.5, "a", "b")
    y = rng.normal(size=n)
    y[rng.random(n) < np.where(seg == "a", 0.10, 0.125)] = np.nan
    g = gaps_of(pd.DataFrame({"y": y, "seg": seg}))
    row = _test_row(g, "y", "seg")
    assert row["p_adj"] < 0.05 and row["effect"] < 0.1
    assert g.table.loc["y", "mar_hint"].startswith("weak association: gaps in y are somewhat more common when seg = 'b' (12.6% vs 10.3%")
    assert not any(f.startswith("weak") or "seg = 'b'" in f for f in g.flags)


# --------------------------------------------------------------------------- bad input
def test_no_gaps_is_said_plainly():
    """Bad input required by the issue: a frame without gaps."""
    df = pd.DataFrame({"a": [1.0, 2.0, 3.0], "b": ["x", "y", "z"]})
    g = gaps_of(df)
    assert g.notes[0] == "No gaps: all 3 rows are complete (no missing value in any of the 2 columns)."
    assert (g.table["mar_hint"] == "no gaps").all() and (g.table["missing"] == 0).all()
    assert g.chart() is None
    assert g.patterns["rows"].tolist() == [3]


def test_every_value_missing():
    """Bad input required by the issue: every value missing."""
    df = pd.DataFrame({"a": [np.nan] * 5, "b": pd.Series([None] * 5, dtype="str")})
    g = gaps_of(df)
    assert g.table["missing_pct"].tolist() == [100.0, 100.0]
    assert g.table.loc["a", "mar_hint"] == "every value is missing: nothing to compare"
    assert any("every value is missing" in f for f in g.flags)
    assert not g.mcar.applicable
    assert_same_table(run_code(g.code("df"), df)["gaps"], g.table)


def test_thousands_of_patterns_pool_into_other():
    """Bad input required by the issue: thousands of distinct patterns (top 20 + "other");
    pattern counts cross-checked with pandas' own drop_duplicates."""
    rng = np.random.default_rng(1)
    n, k = 6000, 14
    x = rng.normal(size=(n, k))
    x[rng.random((n, k)) < 0.3] = np.nan
    df = pd.DataFrame(x, columns=[f"v{i}" for i in range(k)])
    g = gaps_of(df)
    pats, counts, pid = missing_patterns(df.isna().to_numpy())
    assert counts.size > 1000
    p = g.patterns
    assert len(p) == 21 and p.index[-1] == "other"
    assert p["rows"].sum() == n
    assert p["missing_in"].iloc[-1] == f"{counts.size - 20} other patterns"
    assert p["rows"].iloc[:20].tolist() == sorted(p["rows"].iloc[:20].tolist(), reverse=True)
    # Pattern ids agree with the rows' own missing flags.
    np.testing.assert_array_equal(pats[pid], df.isna().to_numpy())
    # Per-column pattern counts: distinct patterns containing a gap in that column.
    want = df.isna().drop_duplicates()
    assert g.table["pattern_count"].tolist() == want.sum().tolist()
    assert_same_table(run_code(g.code("df"), df)["gaps_patterns"], p)


def test_duplicate_labels_and_hostile_names_round_trip():
    """The code contract (brief): duplicated and hostile labels, the frame left unchanged."""
    rng = np.random.default_rng(6)
    x = rng.normal(size=(80, 3))
    x[rng.random((80, 3)) < 0.2] = np.nan
    df = pd.DataFrame(x, columns=["d", "d", 'x"]; import os #'])
    df["g"] = ["N/A", "a", "b", "c"] * 20
    snap = snapshot(df)
    g = gaps_of(df)
    ns = run_code(g.code("frame"), df, frame_name="frame")
    assert_same_table(ns["gaps"], g.table)
    ns = run_code(g.code_convert("frame"), df, frame_name="frame")
    assert ns["frame_clean"].iloc[:, 3].isna().sum() == 20
    assert_unchanged(df, snap)


# --------------------------------------------------------------------------- filling
def test_compare_fills_on_demo(demo_frame):
    """Filling the demo's humidity gaps. Reference for the shrinkage: filling r observed values'
    mean into n − r gaps leaves the sample variance (r − 1)/(n − 1) times the observed one
    (Little & Rubin 2002, Statistical Analysis with Missing Data, 2nd ed., §4.2.1 — section number
    from memory; the identity is checked exactly). Each
    strategy's mean/median/std is checked against the pandas one-liner that .code(strategy=...)
    emits."""
    g = gaps_of(demo_frame)
    f = g.compare_fills("humidity_pct")
    t = f.table
    assert list(t.index) == ["drop_rows", "mean", "median", "mode", "group_median", "regression", "hot_deck"]
    assert {"mean", "median", "std"} <= set(t.columns)
    obs = demo_frame["humidity_pct"].dropna()
    assert t.loc["drop_rows", "mean"] == pytest.approx(obs.mean(), rel=1e-12)
    assert t.loc["mean", "mean"] == pytest.approx(obs.mean(), rel=1e-12)
    # Mean filling shrinks the spread: sd × sqrt((n_obs − 1)/(n − 1)) exactly.
    n, m = len(demo_frame), len(obs)
    assert t.loc["mean", "std"] == pytest.approx(obs.std() * np.sqrt((m - 1) / (n - 1)), rel=1e-10)
    assert t.loc["mean", "std"] < t.loc["drop_rows", "std"]
    assert t.loc["mean", "std_change_pct"] < -5
    assert t.loc["mean", "filled"] == demo_frame["humidity_pct"].isna().sum()
    # Segments default to the categorical most linked to the gaps.
    assert demo_frame.columns[f.by] == "sensor_model"
    assert list(f.segment_means.columns) == ["v1", "v2"]
    assert any("every fill choice" in c.lower() or "every way of filling" in c.lower() for c in f.cautions)
    # The emitted comparison code rebuilds the table.
    ns = run_code(f.code("df"), demo_frame)
    assert_same_table(ns["fills"], t)
    # The one-liner for each strategy gives the table's mean, median and std.
    for strategy in t.index:
        ns = run_code(f.code("df", strategy=strategy), demo_frame)
        out = ns["df_filled"]["humidity_pct"]
        assert out.isna().sum() == 0
        assert out.mean() == pytest.approx(t.loc[strategy, "mean"], rel=1e-12), strategy
        assert out.median() == pytest.approx(t.loc[strategy, "median"], rel=1e-12), strategy
        assert out.std() == pytest.approx(t.loc[strategy, "std"], rel=1e-12), strategy
    # pandas' own one-liner for the median fill.
    y = demo_frame["humidity_pct"]
    assert y.fillna(y.median()).median() == pytest.approx(t.loc["median", "median"], rel=1e-12)


def test_mean_filling_weakens_links_and_regression_keeps_them():
    """Little & Rubin (2002, §4.2.1–4.2.2, section numbers from memory): unconditional mean filling attenuates correlations;
    conditional-mean (regression) filling overstates them. Seeded simulation, known parameters."""
    rng = np.random.default_rng(12)
    n = 2000
    x = rng.normal(size=n)
    y = 2 * x + rng.normal(size=n)
    y[rng.random(n) < 0.3] = np.nan
    df = pd.DataFrame({"x": x, "y": y, "seg": np.where(x > 0, "hi", "lo")})
    f = gaps_of(df).compare_fills("y", by="seg")
    t = f.table
    r0 = t.loc["drop_rows", "r with x"]
    assert r0 == pytest.approx(df["x"].corr(df["y"]), rel=1e-12)
    assert t.loc["mean", "r with x"] < r0 - 0.05  # attenuated
    assert t.loc["mean", "r change with x"] < -0.05
    assert t.loc["regression", "r with x"] > r0  # filled values on the line: link overstated
    assert t.loc["mean", "max_segment_mean_shift"] > t.loc["group_median", "max_segment_mean_shift"]
    assert f.predictor == 0
    # Hot-deck is seeded: the same draw every time, and in the emitted code.
    again = Report(df).gaps().compare_fills("y", by="seg").table
    assert again.loc["hot_deck", "mean"] == t.loc["hot_deck", "mean"]
    other = Report(df, seed=1).gaps().compare_fills("y", by="seg").table
    assert other.loc["hot_deck", "mean"] != t.loc["hot_deck", "mean"]


def test_compare_fills_refuses_clearly():
    """Clear errors for columns that cannot be filled numerically (documented behaviour)."""
    df = pd.DataFrame({"a": [1.0, None, 3.0, 4.0], "b": ["x", None, "y", "y"], "c": [1.5, 2.5, 1.5, 4.0]})
    g = gaps_of(df)
    with pytest.raises(ValueError, match="numeric"):
        g.compare_fills("b")
    with pytest.raises(ValueError, match="no gaps"):
        g.compare_fills("c")
    with pytest.raises(KeyError):
        g.compare_fills("nope")


# --------------------------------------------------------------------------- display
def test_charts_are_aggregated_and_html_escaped(demo_frame):
    """Brief: charts from small pre-aggregated frames only; every label escaped in HTML."""
    g = gaps_of(demo_frame)
    spec = g.chart().to_dict()
    datasets = spec.get("datasets", {})
    assert datasets and max(len(v) for v in datasets.values()) < 200  # never row-level
    html = g.to_html(with_chart=False)
    assert "Little" in html and "humidity_pct" in html
    df = pd.DataFrame({"<script>alert(1)</script>": [1.0, None, 3.0] * 10, "g": ["<b>", "?", "x"] * 10})
    html = gaps_of(df).to_html()
    assert "<script>" not in html and "&lt;script&gt;" in html


def test_fill_code_with_duplicate_labels_and_the_panel():
    """The code contract with duplicated labels (positions, isetitem) and the interactive panel."""
    rng = np.random.default_rng(13)
    x = rng.normal(size=(120, 2))
    x[rng.random(120) < 0.25, 0] = np.nan
    df = pd.DataFrame(x, columns=["m", "m"])
    df["seg"] = np.where(rng.random(120) < 0.5, "a", "b")
    snap = snapshot(df)
    g = gaps_of(df)
    f = g.compare_fills("m", by="seg")
    assert f.position == 0 and f.predictor == 1
    assert_same_table(run_code(f.code("frame"), df, frame_name="frame")["fills"], f.table)
    for strategy in ("median", "regression", "hot_deck", "group_median"):
        out = run_code(f.code("frame", strategy=strategy), df, frame_name="frame")["frame_filled"]
        assert list(out.columns) == ["m", "m", "seg"]
        assert out.iloc[:, 0].mean() == pytest.approx(f.table.loc[strategy, "mean"], rel=1e-12)
        np.testing.assert_array_equal(out.iloc[:, 1].to_numpy(), df.iloc[:, 1].to_numpy())
    with pytest.raises(ValueError, match="unknown strategy"):
        f.code(strategy="zero")
    assert_unchanged(df, snap)
    pytest.importorskip("ipywidgets")
    panel = g.panel()
    assert panel is not None and "Filling gaps in m" in panel.children[-1].value


@settings(max_examples=60, deadline=None)
@given(
    arrays(np.bool_, st.tuples(st.integers(0, 60), st.integers(1, 70))),
)
def test_patterns_agree_with_pandas_value_counts(miss):
    """Packed-bit patterns (including more than 64 columns) against pandas' own
    DataFrame.value_counts of the boolean rows."""
    pats, counts, pid = missing_patterns(miss)
    assert counts.sum() == miss.shape[0]
    assert list(counts) == sorted(counts, reverse=True)
    if miss.shape[0]:
        np.testing.assert_array_equal(pats[pid], miss)
        ref = pd.DataFrame(miss).value_counts()
        got = {tuple(map(bool, p)): int(c) for p, c in zip(pats, counts, strict=True)}
        assert got == {tuple(map(bool, k)): int(v) for k, v in ref.items()}
