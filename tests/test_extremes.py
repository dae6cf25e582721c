"""Extremes tab: rules checked against outside references, planted cases, actions and bad input.

References named beside each check:
- Rosner, B. (1983), "Percentage points for a generalized ESD many-outlier procedure",
  Technometrics 25(2):165–172, as the worked example of the NIST/SEMATECH e-Handbook of
  Statistical Methods §1.3.5.17.3 (tests/data/rosner_1983.csv, 54 values);
- Tukey fences (Tukey 1977) and modified z-scores (Iglewicz & Hoaglin 1993) recomputed directly
  with numpy/pandas on the same data;
- seeded multivariate-normal simulations with known, planted contamination (calibration checks);
- the invented greenhouse demo data and its documented planted errors (nbeda.demo docstring).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from conftest import DATA
from helpers import assert_same_table, assert_unchanged, run_code, snapshot
from scipy import stats

from nbeda._context import Context
from nbeda.report import Report
from nbeda.sections.extremes import JOINT_RULE
from nbeda.stats.extremes import esd_steps, robust_distances


@pytest.fixture(scope="module")
def rosner():
    return pd.read_csv(DATA / "rosner_1983.csv")


def _extremes(frame, **kw):
    return Report(frame).extremes(**kw)


def _roundtrip(result, frame):
    ns = run_code(result.code("df"), frame)
    assert_same_table(ns["extremes"], result.table)
    return ns


# ----------------------------------------------------------------------------- Rosner / NIST
def test_rosner_generalized_esd_matches_nist_handbook(rosner):
    """NIST/SEMATECH e-Handbook §1.3.5.17.3 (Rosner 1983 data): generalized ESD with r = 10,
    α = 0.05 finds exactly 3 outliers, 6.01, 5.42 and 5.34; R₁..R₃ ≈ 3.119, 2.943, 3.179 against
    λ₁..λ₃ ≈ 3.159, 3.151, 3.144 (tabulated there; tests/data/README.md)."""
    assert len(rosner) == 54
    res = _extremes(rosner, rule="esd", alpha=0.05, max_outliers=10)
    row = res.table.loc["value"]
    assert row["rule"] == "esd"
    assert (row["n_low"], row["n_high"], row["n_inf"]) == (0, 3, 0)
    flagged = res.rows[res.rows["column"] == "value"]
    assert sorted(flagged["value"]) == [5.34, 5.42, 6.01]
    assert flagged["rule"].eq("esd").all()
    # the statistic of each removal step, in removal order (6.01, 5.42, 5.34)
    by_value = flagged.set_index("value")["score"]
    np.testing.assert_allclose(by_value.loc[[6.01, 5.42, 5.34]], [3.119, 2.943, 3.179], atol=1e-3)
    # the step statistics and critical values themselves
    v = rosner["value"].to_numpy()
    steps = esd_steps(np.sort(v)[:, None], v[:, None], np.array([54]), np.array([10]), 0.05)
    np.testing.assert_allclose(steps["R"][:3, 0], [3.119, 2.943, 3.179], atol=1e-3)
    np.testing.assert_allclose(steps["lam"][:3, 0], [3.159, 3.151, 3.144], atol=1e-3)
    assert int(steps["found"][0]) == 3
    # R₁ is the largest |x − mean|/SD of the full data (direct numpy)
    assert row["most_extreme"] == 6.01
    np.testing.assert_allclose(row["most_extreme_score"], (6.01 - v.mean()) / v.std(ddof=1), rtol=1e-12)
    # λ_i by its formula with scipy's t quantile (Rosner 1983; NIST §1.3.5.17.3)
    for i in range(1, 11):
        m = 54 - i + 1
        t = stats.t.ppf(1 - 0.05 / (2 * m), m - 2)
        lam = (m - 1) * t / np.sqrt((m - 2 + t**2) * m)
        np.testing.assert_allclose(steps["lam"][i - 1, 0], lam, rtol=1e-12)
    # fences: mean ± λ₄·SD of the 51 values left; every remaining value lies inside
    rest = np.sort(v)[:-3]
    lam4 = steps["lam"][3, 0]
    np.testing.assert_allclose(row["lower"], rest.mean() - lam4 * rest.std(ddof=1), rtol=1e-12)
    np.testing.assert_allclose(row["upper"], rest.mean() + lam4 * rest.std(ddof=1), rtol=1e-12)
    assert rest.max() <= row["upper"] < 5.34
    _roundtrip(res, rosner)


def test_rosner_esd_respects_alpha_and_max_outliers(rosner):
    """Same data (NIST §1.3.5.17.3): with r = 2 the procedure can test only 6.01 and 5.42, whose
    R values (3.119, 2.943) stay below λ (3.159, 3.151): nothing is flagged. A looser α = 0.2
    lowers every λ, so at least the same 3 outliers are found."""
    res = _extremes(rosner, rule="esd", max_outliers=2)
    assert res.table.loc["value", "n_high"] == 0
    loose = _extremes(rosner, rule="esd", alpha=0.2)
    assert loose.table.loc["value", "n_high"] >= 3


def test_tukey_fences_match_numpy(rosner):
    """Tukey (1977) fences Q1 − k·IQR, Q3 + k·IQR, quartiles by linear interpolation: checked
    against numpy.percentile (default method) and pandas.Series.quantile on the Rosner data."""
    v = rosner["value"].to_numpy()
    q1, q3 = np.percentile(v, [25, 75])
    assert (q1, q3) == tuple(rosner["value"].quantile([0.25, 0.75]))
    for rule, k in (("tukey", 1.5), ("tukey_far", 3.0)):
        res = _extremes(rosner, rule=rule)
        row = res.table.loc["value"]
        np.testing.assert_allclose([row["lower"], row["upper"]], [q1 - k * (q3 - q1), q3 + k * (q3 - q1)], rtol=1e-12)
        want = np.flatnonzero((v < q1 - k * (q3 - q1)) | (v > q3 + k * (q3 - q1)))
        got = res.rows[res.rows["column"] == "value"]["row"].to_numpy(dtype=np.int64)
        np.testing.assert_array_equal(np.sort(got), want)
        assert "linear interpolation" in row["basis"]
        # scores: IQRs beyond the nearer quartile
        rows = res.rows[res.rows["column"] == "value"]
        np.testing.assert_allclose(rows["score"], (rows["value"] - q3) / (q3 - q1), rtol=1e-12)
        _roundtrip(res, rosner)
    assert _extremes(rosner, rule="tukey").table.loc["value", "n_high"] == 3  # 6.01, 5.42, 5.34
    assert _extremes(rosner, rule="tukey_far").table.loc["value", "n_high"] == 0


def test_modified_z_matches_numpy(rosner):
    """Iglewicz & Hoaglin (1993): M = 0.6745·(x − median)/MAD, flagged when |M| > 3.5 — against
    direct numpy on the Rosner data."""
    v = rosner["value"].to_numpy()
    med = np.median(v)
    mad = np.median(np.abs(v - med))
    m = 0.6745 * (v - med) / mad
    res = _extremes(rosner, rule="modified_z")
    row = res.table.loc["value"]
    np.testing.assert_allclose(row["lower"], med - 3.5 * mad / 0.6745, rtol=1e-12)
    np.testing.assert_allclose(row["upper"], med + 3.5 * mad / 0.6745, rtol=1e-12)
    rows = res.rows[res.rows["column"] == "value"]
    np.testing.assert_array_equal(np.sort(rows["row"].to_numpy(dtype=np.int64)), np.flatnonzero(np.abs(m) > 3.5))
    np.testing.assert_allclose(rows["score"].to_numpy(), m[rows["row"].to_numpy(dtype=np.int64)], rtol=1e-12)
    i = np.argmax(np.abs(m))
    assert row["most_extreme"] == v[i]
    np.testing.assert_allclose(row["most_extreme_score"], m[i], rtol=1e-12)
    _roundtrip(res, rosner)


def test_zscore_matches_numpy(rosner):
    """|z| > 3 (common practice), z with the sample SD: against numpy on the Rosner data."""
    v = rosner["value"].to_numpy()
    mu, sd = v.mean(), v.std(ddof=1)
    res = _extremes(rosner, rule="zscore")
    row = res.table.loc["value"]
    np.testing.assert_allclose([row["lower"], row["upper"]], [mu - 3 * sd, mu + 3 * sd], rtol=1e-12)
    assert row["n_high"] == int(np.sum(v > mu + 3 * sd)) == 1  # 6.01 only: z = 3.119
    assert "masking" in row["note"]
    assert any("masking" in c for c in res.cautions)


def test_log_tukey_matches_numpy(demo_frame):
    """Tukey fences on log(x), back-transformed: against numpy on the demo's yield_kg."""
    v = demo_frame["yield_kg"].to_numpy()
    lq1, lq3 = np.percentile(np.log(v), [25, 75])
    res = _extremes(demo_frame, rule={"yield_kg": "tukey_log"})
    row = res.table.loc["yield_kg"]
    lo, hi = np.exp(lq1 - 1.5 * (lq3 - lq1)), np.exp(lq3 + 1.5 * (lq3 - lq1))
    np.testing.assert_allclose([row["lower"], row["upper"]], [lo, hi], rtol=1e-12)
    assert row["n_low"] == int(np.sum(v < lo)) and row["n_high"] == int(np.sum(v > hi))
    # a {column: rule} mapping leaves the other columns to the policy
    assert res.table.loc["yield_kg", "reason"] == "requested"
    assert res.table.loc["humidity_pct", "reason"] != "requested"


# ----------------------------------------------------------------------------- demo
def test_demo_unit_error_and_sentinel(demo_frame):
    """nbeda.demo: 8 yields keyed in grams (×1000) and the sentinel −999 in about 1% of soil_ph."""
    res = _extremes(demo_frame)
    t = res.table
    grams = np.flatnonzero(demo_frame["yield_kg"].to_numpy() > 1000)
    assert grams.size == 8
    assert t.loc["yield_kg", "rule"] == "tukey_log"
    assert "possible unit error: 8 high values" in t.loc["yield_kg", "note"]
    assert "1,000× the median" in t.loc["yield_kg", "note"]
    rows = res.rows
    high = rows[(rows["column"] == "yield_kg") & (rows["side"] == "high")]
    assert set(grams) <= set(high["row"])
    assert any("yield_kg: " in f and "unit error" in f for f in res.flags)
    # every −999 is flagged, with a missing-code note
    sentinel = np.flatnonzero(demo_frame["soil_ph"].to_numpy() == -999)
    low = rows[(rows["column"] == "soil_ph") & (rows["side"] == "low")]
    assert set(sentinel) <= set(low["row"])
    assert f"-999 is repeated {sentinel.size} times" in t.loc["soil_ph", "note"]
    # soil_ph looks normal, but ESD would hit its maximum (10) with ~50 sentinels: robust rule instead
    assert t.loc["soil_ph", "rule"] == "modified_z"
    assert "maximum of 10" in t.loc["soil_ph", "reason"]
    # the rating scale is not flagged at its ends
    assert t.loc["pest_score", "rule"] == "tukey_far"
    assert t.loc["pest_score", ["n_low", "n_high"]].sum() == 0
    # humidity is roughly normal and clean
    assert t.loc["humidity_pct", "rule"] == "esd" and t.loc["humidity_pct", "n_high"] == 0
    # the robust distance flags the planted rows too, and names the column behind them
    mv = res.multivariate
    gram_rows = mv[mv["row"].isin(grams)]
    complete = demo_frame.iloc[grams][["pest_score", "humidity_pct"]].notna().all(axis=1).sum()
    assert len(gram_rows) == complete
    assert gram_rows["top_columns"].str.startswith("yield_kg").all()
    sent_rows = mv[mv["row"].isin(sentinel)]
    assert len(sent_rows) and sent_rows["top_columns"].str.startswith("soil_ph (100%)").all()


def test_demo_round_trip_and_joint_code(demo_frame):
    res = _extremes(demo_frame)
    ns = _roundtrip(res, demo_frame)
    assert_same_table(ns["extremes_joint"], res.multivariate)


def test_actions_filter_cap_flag(demo_frame):
    """Emitted action code works on a copy: filter removes exactly the flagged rows, cap clips at
    exactly the fences, flag adds a boolean column; the user's frame is unchanged."""
    snap = snapshot(demo_frame)
    res = _extremes(demo_frame)
    flagged = set(res.rows["row"])
    ns = run_code(res.code_action("filter"), demo_frame)
    kept = ns["df_filtered"]
    assert set(kept.index) == set(demo_frame.index) - flagged
    assert len(kept) == len(demo_frame) - len(flagged)
    # without the robust-distance flags
    ns = run_code(res.code_action("filter", joint=False), demo_frame)
    uni = set(res.rows.loc[res.rows["rule"] != JOINT_RULE, "row"])
    assert set(ns["df_filtered"].index) == set(demo_frame.index) - uni

    ns = run_code(res.code_action("cap"), demo_frame)
    capped = ns["df_capped"]
    for label, row in res.table.iterrows():
        before = demo_frame[label].astype("float64").to_numpy()
        after = capped[label].to_numpy(dtype="float64", na_value=np.nan)
        lo, hi = row["lower"], row["upper"]
        cells = res.rows[(res.rows["column"] == label)]
        low = cells.loc[cells["side"] == "low", "row"].to_numpy(dtype=np.int64)
        high = cells.loc[cells["side"] == "high", "row"].to_numpy(dtype=np.int64)
        assert np.all(after[low] == lo) and np.all(after[high] == hi)
        other = np.setdiff1d(np.arange(len(before)), np.r_[low, high])
        np.testing.assert_array_equal(after[other], before[other])
    assert capped["yield_kg"].max() == res.table.loc["yield_kg", "upper"]

    ns = run_code(res.code_action("flag"), demo_frame)
    marked = ns["df_flagged"]
    assert marked["is_extreme"].dtype == bool
    assert set(marked.index[marked["is_extreme"]]) == flagged
    assert "is_extreme" not in demo_frame.columns
    for kind in ("filter", "cap", "flag"):
        assert "real, important case" in res.code_action(kind)
    assert_unchanged(demo_frame, snap)
    with pytest.raises(ValueError):
        res.code_action("delete")


def test_records_rows_and_chart(demo_frame):
    res = _extremes(demo_frame)
    assert list(res.rows.columns[:6]) == ["row", "column", "value", "rule", "score", "fence"]
    rec = res.records()
    assert rec.columns[0] == "flagged by"
    assert set(rec.index) == set(res.rows["row"])
    assert list(rec.columns[1:]) == list(demo_frame.columns)
    joint = res.rows[res.rows["rule"] == JOINT_RULE]
    assert len(joint) == len(res.multivariate)
    assert isinstance(joint["column"].iloc[0], tuple) and "yield_kg" in joint["column"].iloc[0]
    yk = res.records(column="yield_kg")
    assert set(yk.index) == set(res.rows.loc[res.rows["column"] == "yield_kg", "row"])
    # charts carry pre-aggregated data only
    spec = res.chart().to_dict()
    sizes = [len(v) for v in spec.get("datasets", {}).values()]
    assert sizes and max(sizes) <= 100
    html = res.to_html(with_chart=False)
    assert "Flagged rows, full records" in html


def test_panel_builds(demo_frame):
    pytest.importorskip("ipywidgets")
    panel = _extremes(demo_frame).panel()
    assert panel is not None and len(panel.children) == 5


# ----------------------------------------------------------------------------- robust distance
def _planted(seed, n=2000, p=5, share=0.05, shift=None):
    rng = np.random.default_rng(seed)
    a = rng.normal(size=(p, p))
    cov = a @ a.T + p * np.eye(p)
    x = rng.multivariate_normal(np.zeros(p), cov, size=n)
    k = int(round(share * n))
    bad = rng.choice(n, size=k, replace=False)
    if shift is None:
        # planted at squared distance 60 along a random direction (χ²(5) 0.975 ≈ 12.8)
        d = rng.normal(size=p)
        L = np.linalg.cholesky(cov)
        d = L @ (d / np.linalg.norm(d)) * np.sqrt(60.0)
        x[bad] = rng.multivariate_normal(d, cov * 0.1, size=k)
    else:
        x[bad] = shift(x[bad], rng)
    return pd.DataFrame(x, columns=[f"v{j}" for j in range(p)]), np.sort(bad)


def _recall_false(res, frame, bad):
    flagged = set(res.multivariate["row"])
    clean = set(range(len(frame))) - set(bad)
    recall = len(flagged & set(bad)) / len(bad)
    false = len(flagged & clean) / len(clean)
    return recall, false


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_robust_distance_finds_planted_cluster(seed):
    """Seeded simulation, known contamination (5% planted rows at squared Mahalanobis distance 60):
    ≥ 90% of the planted rows found, ≤ 5% of the clean rows flagged."""
    frame, bad = _planted(seed)
    res = _extremes(frame)
    recall, false = _recall_false(res, frame, bad)
    assert recall >= 0.9, recall
    assert false <= 0.05, false


def test_robust_distance_finds_correlation_breakers():
    """Rows that are unremarkable column by column but break a strong correlation (ρ = 0.9):
    planted at (+2, −2) SDs; none passes a univariate rule, the robust distance finds ≥ 90%."""
    rng = np.random.default_rng(11)
    n = 3000
    cov = np.array([[1.0, 0.9, 0.0], [0.9, 1.0, 0.0], [0.0, 0.0, 1.0]])
    x = rng.multivariate_normal(np.zeros(3), cov, size=n)
    bad = np.sort(rng.choice(n, size=90, replace=False))
    x[bad, 0] = 2.0 + rng.normal(0, 0.1, 90)
    x[bad, 1] = -2.0 + rng.normal(0, 0.1, 90)
    frame = pd.DataFrame(x, columns=["a", "b", "c"])
    res = _extremes(frame, rule="tukey_far")
    assert res.table[["n_low", "n_high"]].to_numpy().sum() == 0
    recall, false = _recall_false(res, frame, bad)
    assert recall >= 0.9 and false <= 0.05, (recall, false)
    top = res.multivariate[res.multivariate["row"].isin(bad)]["top_columns"]
    assert top.str.match(r"^(a|b) \(").all()


def test_robust_distance_calibration_on_clean_data():
    """Clean multivariate normal data (seeded): about 2.5% of rows exceed the χ²(p) 0.975 quantile."""
    rng = np.random.default_rng(5)
    p = 4
    a = rng.normal(size=(p, p))
    x = rng.multivariate_normal(np.arange(p) * 10.0, a @ a.T + np.eye(p), size=8000)
    res = _extremes(pd.DataFrame(x, columns=list("abcd")))
    share = len(res.multivariate) / len(x)
    assert 0.01 <= share <= 0.045, share
    # the fit used a seeded sample of 5,000 rows; the note says so
    assert "seeded sample of 5000 rows" in res.parts["joint"]["note"]


def test_shapley_contributions_sum_to_distance():
    """e_j·(S⁻¹e)_j summed over columns equals the squared distance eᵀS⁻¹e (identity)."""
    frame, bad = _planted(4, n=600, p=4)
    y = frame.to_numpy()
    d2, centre, precision, med, mad = robust_distances(y, np.arange(len(y)))
    e = (y - med) / mad - centre
    contrib = e * (e @ precision)
    np.testing.assert_allclose(contrib.sum(axis=1), d2, rtol=1e-9)
    res = _extremes(frame)
    shares = res.multivariate["top_columns"].str.findall(r"\((\d+)%\)")
    assert all(sum(int(s) for s in row) <= 101 for row in shares)


def test_robust_distance_is_seeded():
    """Above the fit size the fit uses a seeded sample: same seed, same flags; the emitted code agrees."""
    frame, _ = _planted(6, n=6000, p=3)
    a = Report(frame, seed=3).extremes()
    b = Report(frame, seed=3).extremes()
    pd.testing.assert_frame_equal(a.multivariate, b.multivariate)
    ns = run_code(a.code("df"), frame)
    assert_same_table(ns["extremes_joint"], a.multivariate)


# ----------------------------------------------------------------------------- bad input
def test_bad_input_constant_tiny_inf_huge_bigint():
    rng = np.random.default_rng(0)
    n = 60
    normal = rng.normal(size=n)
    frame = pd.DataFrame(
        {
            "const": np.full(n, 3.25),
            "mostly": np.r_[np.zeros(n - 4), [1.0, 2.0, 50.0, 7.0]],
            "infs": np.r_[normal[: n - 3], [np.inf, -np.inf, np.nan]],
            "huge": normal * 1e300,
            "ints_as_floats": rng.integers(0, 400, n).astype("float64"),
            "big": np.r_[np.full(n - 1, np.iinfo(np.int64).max - 5), [np.iinfo(np.int64).max]],
        }
    )
    snap = snapshot(frame)
    # a constant column has the role `constant` (not analysed); forced to continuous it says "no spread"
    assert "const" not in _extremes(frame).table.index
    with np.errstate(all="raise"):
        res = Report(frame, roles={"const": "continuous"}).extremes()
    t = res.table
    for col in ("const", "mostly"):
        assert t.loc[col, "rule"] == "none" and "no spread" in t.loc[col, "reason"]
        assert t.loc[col, ["n_low", "n_high"]].sum() == 0 and np.isnan(t.loc[col, "lower"])
    assert "constant" in t.loc["const", "note"]
    assert "4 value(s) differ from the common value 0" in t.loc["mostly", "note"]
    # ±inf always flagged, counted apart; fences from the finite values only
    assert t.loc["infs", "n_inf"] == 2
    inf_rows = res.rows[(res.rows["column"] == "infs") & (res.rows["rule"] == "infinite")]
    assert sorted(inf_rows["row"]) == [n - 3, n - 2] and set(inf_rows["side"]) == {"low", "high"}
    assert t.loc["infs", "share"] == pytest.approx((t.loc["infs", ["n_low", "n_high"]].sum() + 2) / (n - 1))
    # huge magnitudes: the same fences as the unscaled data, times 1e300
    ref = _extremes(pd.DataFrame({"huge": normal}), rule="tukey").table.loc["huge"]
    got = _extremes(frame, rule="tukey").table.loc["huge"]
    np.testing.assert_allclose([got["lower"], got["upper"]], [ref["lower"] * 1e300, ref["upper"] * 1e300], rtol=1e-12)
    assert got["n_low"] == ref["n_low"] and got["n_high"] == ref["n_high"]
    # int64 near its maximum: float64 cannot tell the values apart — said so
    assert "2**53" in t.loc["big", "note"]
    assert t.loc["big", "rule"] == "none"
    ns = run_code(res.code("df"), frame)
    assert_same_table(ns["extremes"], res.table)
    assert_unchanged(frame, snap)


def test_power_of_two_scale_invariance():
    """Scaling a column by 2**k (exact in floating point) changes no flag and scales every fence."""
    rng = np.random.default_rng(9)
    v = np.r_[rng.normal(size=200), [8.0, -7.5]]
    for rule in ("tukey", "modified_z", "esd", "zscore"):
        a = _extremes(pd.DataFrame({"v": v}), rule=rule)
        b = _extremes(pd.DataFrame({"v": v * 2.0**-900}), rule=rule)
        assert list(a.rows["row"]) == list(b.rows["row"])
        np.testing.assert_allclose(b.table.loc["v", ["lower", "upper"]].to_numpy(dtype=float) * 2.0**900,
                                   a.table.loc["v", ["lower", "upper"]].to_numpy(dtype=float), rtol=1e-15)


def test_tiny_n_and_esd_small_sample_note():
    tiny = pd.DataFrame({"a": [1.5, 2.5, 100.0, np.nan]})
    res = _extremes(tiny)
    assert res.table.loc["a", "rule"] == "none" and "too few" in res.table.loc["a", "reason"]
    assert len(res.rows) == 0
    res = _extremes(tiny, rule="tukey")
    assert "nothing flagged" in res.table.loc["a", "note"] and len(res.rows) == 0
    _roundtrip(res, tiny)
    small = pd.DataFrame({"a": [1.0, 1.2, 0.9, 1.1, 1.05, 0.95, 1.15, 0.85, 9.0, 1.0, 1.02, 0.98]})
    res = _extremes(small, rule="esd")
    assert res.table.loc["a", "n_high"] == 1 and "n < 25" in res.table.loc["a", "note"]
    z = _extremes(pd.DataFrame({"a": [1.5, 2, 3, 4, 50]}), rule="zscore")
    assert "no |z| can exceed" in z.table.loc["a", "note"] and len(z.rows) == 0


def test_duplicate_labels_and_nonunique_index():
    rng = np.random.default_rng(2)
    x = rng.normal(size=(80, 3))
    x[5, 0] = 40.0
    x[7, 1] = -35.0
    frame = pd.DataFrame(x, columns=["d", "d", "e"], index=[f"r{i % 40}" for i in range(80)])
    res = _extremes(frame, rule="tukey_far")
    assert list(res.table.index) == ["d", "d", "e"]
    assert set(zip(res.rows["row"], res.rows["value"])) >= {("r5", 40.0), ("r7", -35.0)}
    ns = run_code(res.code_action("cap", frame_name="frame"), frame, frame_name="frame")
    capped = ns["frame_capped"]
    assert capped.iloc[5, 0] == res.table["upper"].iloc[0] and capped.iloc[7, 1] == res.table["lower"].iloc[1]
    ns = run_code(res.code_action("filter", frame_name="frame", joint=False), frame, frame_name="frame")
    assert len(ns["frame_filtered"]) == 78
    _roundtrip(res, frame)


def test_bad_options():
    frame = pd.DataFrame({"a": np.arange(30.0)})
    with pytest.raises(ValueError):
        _extremes(frame, rule="grubbs")
    with pytest.raises(ValueError):
        _extremes(frame, alpha=1.5)
    with pytest.raises(ValueError):
        _extremes(frame, max_outliers=0)
    with pytest.raises(KeyError):
        _extremes(frame, rule={"nope": "tukey"})


def test_policy_reasons_on_reference_shapes():
    """Policy on seeded samples of known shape: normal → ESD; log-normal (σ = 1) → log-scale
    Tukey; uniform (Moors kurtosis 1.0, outside 1.1–1.4) → Tukey."""
    rng = np.random.default_rng(21)
    frame = pd.DataFrame(
        {
            "normal": rng.normal(50, 5, 2000),
            "lognormal": rng.lognormal(1.0, 1.0, 2000),
            "uniform": rng.uniform(0, 1, 2000),
        }
    )
    t = _extremes(frame).table
    assert list(t["rule"]) == ["esd", "tukey_log", "tukey"]
    assert "Moors kurtosis" in t.loc["normal", "reason"] and "log scale" in t.loc["lognormal", "reason"]
    # no spurious unit-error note on a clean log-normal tail
    assert "unit error" not in t.loc["lognormal", "note"]
    ctx = Context(frame)
    assert ctx.numeric_positions() == [0, 1, 2]


# ----------------------------------------------------------------------------- properties
from hypothesis import HealthCheck, given, settings  # noqa: E402
from hypothesis import strategies as st  # noqa: E402

_values = st.one_of(
    st.floats(min_value=-1e6, max_value=1e6, allow_nan=False, width=64),
    st.sampled_from([np.nan, np.inf, -np.inf, 0.0, 1.0, 1e-300, -999.0, 1e12]),
)


@settings(max_examples=30, deadline=None, suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])
@given(
    cols=st.lists(st.lists(_values, min_size=30, max_size=30), min_size=1, max_size=4),
    rule=st.sampled_from([None, "tukey", "tukey_far", "tukey_log", "modified_z", "esd", "zscore"]),
)
def test_property_flags_agree_with_fences_and_code(cols, rule):
    """Generated columns (NaN, ±inf, ties, huge values) under every rule: no warning, the emitted
    code rebuilds the table, counts agree with .rows, and (outside ESD) a finite value is flagged
    exactly when it lies beyond a fence."""
    import warnings

    frame = pd.DataFrame({f"c{j}": c for j, c in enumerate(cols)})
    frame = frame.astype("float64")
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        res = Report(frame, roles={c: "continuous" for c in frame.columns}).extremes(rule=rule)
    _roundtrip(res, frame)
    rows = res.rows
    for label, row in res.table.iterrows():
        cells = rows[rows["column"] == label]
        finite = cells[cells["rule"] != "infinite"]
        assert row["n_low"] == (finite["side"] == "low").sum()
        assert row["n_high"] == (finite["side"] == "high").sum()
        assert row["n_inf"] == np.isinf(frame[label]).sum() == (cells["rule"] == "infinite").sum()
        v = frame[label].to_numpy()
        if row["rule"] != "esd":
            beyond = np.isfinite(v) & ((v < row["lower"]) | (v > row["upper"]))
            assert set(np.flatnonzero(beyond)) == set(finite["row"])
