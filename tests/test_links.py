"""Links tab and trend: checked against outside references, each named beside its check."""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
from helpers import assert_same_table, assert_unchanged, run_code, snapshot
from scipy import stats
from scipy.stats.contingency import association

import nbeda  # noqa: F401
from nbeda.report import Report
from nbeda.stats import links as L
from conftest import DATA


# --------------------------------------------------------------------------- helpers
def _row(table, x, y, measure):
    t = table[(table["x"] == x) & (table["y"] == y) & (table["measure"] == measure)]
    if t.empty:
        t = table[(table["x"] == y) & (table["y"] == x) & (table["measure"] == measure)]
    assert len(t) == 1, (x, y, measure, len(t))
    return t.iloc[0]


def _numeric_frame(seed=3, n=400):
    rng = np.random.default_rng(seed)
    a = rng.normal(size=n)
    b = 0.6 * a + rng.normal(size=n)
    c = np.exp(a) + 0.3 * rng.normal(size=n)
    d = np.round(rng.normal(size=n), 1)  # ties
    frame = pd.DataFrame({"a": a, "b": b, "c": c, "d": d})
    mask = rng.random(frame.shape) < 0.1
    return frame.mask(mask)


# --------------------------------------------------------------- NIST StRD Norris
def _norris():
    lines = (DATA / "Norris.dat").read_text().splitlines()
    data = np.array([[float(v) for v in line.split()] for line in lines[60:96]])
    return pd.DataFrame({"y": data[:, 0], "x": data[:, 1]})


def _sig_digits(got, want):
    return -np.log10(abs(got - want) / abs(want)) if got != want else 16.0


def test_trend_matches_nist_strd_norris_certified_values():
    """NIST StRD linear regression, Norris (lower difficulty): certified B0, B1, their SDs,
    residual SD and R² (Norris.dat header), to at least 9 significant digits."""
    frame = _norris()
    t = frame.eda.trend("x", "y").table.iloc[0]
    certified = {
        "intercept": -0.262323073774029,
        "intercept_se": 0.232818234301152,
        "slope": 1.00211681802045,
        "slope_se": 0.429796848199937e-03,
        "resid_sd": 0.884796396144373,
        "r2": 0.999993745883712,
    }
    for key, want in certified.items():
        assert _sig_digits(float(t[key]), want) >= 9, (key, t[key], want)
    assert t["n"] == 36


def test_trend_code_rebuilds_the_fit():
    frame = _norris()
    res = frame.eda.trend("x", "y")
    ns = run_code(res.code("df"), frame)
    assert_same_table(ns["trend"], res.table)


# ------------------------------------------------------------ Anscombe's quartet
@pytest.fixture(scope="module")
def anscombe():
    from vega_datasets import local_data

    return local_data.anscombe()


@pytest.mark.parametrize("series", ["I", "II", "III", "IV"])
def test_anscombe_quartet_same_line_and_r(anscombe, series):
    """Anscombe (1973), The American Statistician 27:17–21: every set has r ≈ 0.816 and the
    fitted line y ≈ 3.00 + 0.500x."""
    g = anscombe[anscombe["Series"] == series][["X", "Y"]].astype("float64")
    res = g.eda.trend("X", "Y")
    row = res.table.iloc[0]
    assert row["slope"] == pytest.approx(0.500, abs=0.0015)
    assert row["intercept"] == pytest.approx(3.00, abs=0.005)
    assert np.sqrt(row["r2"]) == pytest.approx(0.816, abs=0.001)
    links = g.eda.links(method="pearson").table
    assert _row(links, "X", "Y", "pearson")["estimate"] == pytest.approx(0.816, abs=0.001)
    assert any("not a cause" in w for w in res.warnings)


def test_anscombe_warnings_on_sets_two_to_four_not_one(anscombe):
    """Anscombe (1973): set I is a plain straight-line case; set II is a curve; set III has one
    outlying point; set IV has one point that alone sets the slope."""
    w = {}
    for s in ["I", "II", "III", "IV"]:
        g = anscombe[anscombe["Series"] == s][["X", "Y"]].astype("float64")
        w[s] = [x for x in g.eda.trend("X", "Y").warnings if "not a cause" not in x]
    assert w["I"] == []
    assert any("curve" in x for x in w["II"])
    assert any("single point drives" in x for x in w["III"])
    assert any("alone sets the slope" in x for x in w["IV"])


# --------------------------------------------------------------- against scipy
def test_pearson_spearman_kendall_match_scipy():
    """scipy.stats.pearsonr / spearmanr / kendalltau on each pair's complete rows."""
    frame = _numeric_frame()
    res = frame.eda.links(method="auto")
    kt = frame.eda.links(method="kendall").table
    t = res.table
    for x, y in [("a", "b"), ("a", "c"), ("b", "d"), ("c", "d")]:
        both = frame[[x, y]].dropna()
        pr = stats.pearsonr(both[x], both[y])
        sr = stats.spearmanr(both[x], both[y])
        kr = stats.kendalltau(both[x], both[y])
        p, s, k = _row(t, x, y, "pearson"), _row(t, x, y, "spearman"), _row(kt, x, y, "kendall")
        assert p["n"] == len(both) == s["n"] == k["n"]
        assert p["estimate"] == pytest.approx(pr.statistic, abs=1e-12)
        assert p["p_value"] == pytest.approx(pr.pvalue, rel=1e-7)
        assert s["estimate"] == pytest.approx(sr.statistic, abs=1e-12)
        assert s["p_value"] == pytest.approx(sr.pvalue, rel=1e-7)
        assert k["estimate"] == pytest.approx(kr.statistic, abs=1e-12)
        assert k["p_value"] == pytest.approx(kr.pvalue, rel=1e-9)
        # Fisher-z interval of Pearson, written out (Fisher 1921; SE 1/sqrt(n-3))
        z, se = np.arctanh(pr.statistic), 1 / np.sqrt(len(both) - 3)
        q = stats.norm.ppf(0.975)
        assert p["ci_low"] == pytest.approx(np.tanh(z - q * se), abs=1e-12)
        assert p["ci_high"] == pytest.approx(np.tanh(z + q * se), abs=1e-12)
        assert p["ci_low"] < p["estimate"] < p["ci_high"]


def test_pearson_interval_covers_at_nominal_rate():
    """Seeded simulation with a known ρ = 0.5: the 95% Fisher-z interval covers ρ about 95% of
    the time (calibration check, binomial tolerance)."""
    rng = np.random.default_rng(11)
    n, reps, rho = 40, 400, 0.5
    a = rng.normal(size=(reps, n))
    b = rho * a + np.sqrt(1 - rho**2) * rng.normal(size=(reps, n))
    r = np.array([np.corrcoef(a[i], b[i])[0, 1] for i in range(reps)])
    lo, hi = L.fisher_ci(r, np.full(reps, n), "pearson", 0.95)
    cover = np.mean((lo <= rho) & (rho <= hi))
    assert abs(cover - 0.95) < 3 * np.sqrt(0.95 * 0.05 / reps)


def test_cramers_v_matches_scipy_association():
    """scipy.stats.contingency.association(method="cramer") (no bias correction) equals our
    uncorrected V; Bergsma's (2013) corrected V is written out from his formula."""
    rng = np.random.default_rng(5)
    a = rng.integers(0, 3, 600)
    b = (a + rng.integers(0, 2, 600)) % 4
    table = pd.crosstab(a, b).to_numpy()
    v, p, _ = L.cramers_v_test(a, b, bias_correction=False)
    assert v == pytest.approx(association(table, method="cramer"), abs=1e-12)
    chi2, p_ref, _, _ = stats.chi2_contingency(table, correction=False)
    assert p == pytest.approx(p_ref, rel=1e-9)
    vc, pc, _ = L.cramers_v_test(a, b, bias_correction=True)
    n, (r, k) = table.sum(), table.shape
    phi2 = max(0.0, chi2 / n - (k - 1) * (r - 1) / (n - 1))
    rr, kk = r - (r - 1) ** 2 / (n - 1), k - (k - 1) ** 2 / (n - 1)
    assert vc == pytest.approx(np.sqrt(phi2 / min(kk - 1, rr - 1)), abs=1e-12)
    assert vc < v and pc == p


def test_cramers_v_is_near_zero_for_independent_categories():
    """Bergsma (2013): the corrected V is close to 0 under independence where the raw V is biased up."""
    rng = np.random.default_rng(8)
    a, b = rng.integers(0, 6, 300), rng.integers(0, 6, 300)
    raw, _, _ = L.cramers_v_test(a, b, bias_correction=False)
    cor, _, _ = L.cramers_v_test(a, b, bias_correction=True)
    assert cor < raw and cor < 0.06


def test_eta_matches_scipy_one_way_anova():
    """Correlation ratio η: η² = SS_between/SS_total; p equals scipy.stats.f_oneway."""
    rng = np.random.default_rng(9)
    g = rng.integers(0, 4, 300)
    y = rng.normal(size=300) + 0.4 * g
    eta, p = L.eta_test(g, y)
    groups = [y[g == j] for j in range(4)]
    assert p == pytest.approx(stats.f_oneway(*groups).pvalue, rel=1e-8)
    ss_b = sum(len(v) * (v.mean() - y.mean()) ** 2 for v in groups)
    assert eta**2 == pytest.approx(ss_b / np.sum((y - y.mean()) ** 2), rel=1e-12)


def test_benjamini_hochberg_matches_scipy():
    """scipy.stats.false_discovery_control(method="bh"); NaN entries are left out."""
    rng = np.random.default_rng(2)
    p = np.concatenate([rng.uniform(size=50), rng.uniform(0, 1e-3, size=10)])
    assert np.allclose(L.bh_adjust(p), stats.false_discovery_control(p, method="bh"), rtol=1e-12)
    q = p.copy()
    q[[3, 17]] = np.nan
    got = L.bh_adjust(q)
    assert np.isnan(got[[3, 17]]).all()
    keep = ~np.isnan(q)
    assert np.allclose(got[keep], stats.false_discovery_control(q[keep], method="bh"), rtol=1e-12)


def test_table_p_adjusted_is_bh_over_every_row():
    frame = _numeric_frame()
    t = frame.eda.links().table
    p = t["p_value"].to_numpy(dtype=float)
    ok = ~np.isnan(p)
    want = stats.false_discovery_control(p[ok], method="bh")
    assert np.allclose(t["p_adjusted"].to_numpy(dtype=float)[ok], want, rtol=1e-12)


def test_spearman_interval_uses_bonett_wright_se():
    """Bonett & Wright (2000), Psychometrika 65:23–28: SE of z = sqrt((1 + ρ²/2)/(n − 3))."""
    lo, hi = L.fisher_ci(np.array([0.4]), np.array([50]), "spearman", 0.95)
    se = np.sqrt((1 + 0.4**2 / 2) / 47)
    q = stats.norm.ppf(0.975)
    assert lo[0] == pytest.approx(np.tanh(np.arctanh(0.4) - q * se), abs=1e-14)
    assert hi[0] == pytest.approx(np.tanh(np.arctanh(0.4) + q * se), abs=1e-14)


# ---------------------------------------------------------- fast Spearman = pandas
def test_fast_spearman_equals_pandas_with_nans_and_ties():
    """pandas DataFrame.corr(method="spearman") with pairwise-complete rows is the reference."""
    rng = np.random.default_rng(4)
    n = 3000
    x = rng.normal(size=(n, 7))
    x[:, 1] = x[:, 0] + rng.normal(size=n)
    x[:, 2] = np.round(x[:, 2], 1)
    x[:, 3] = rng.integers(0, 4, n)
    x[:, 4] = np.exp(x[:, 0])
    x[:, 5] = np.where(rng.random(n) < 0.5, x[:, 3], np.nan)  # heavy missingness and ties
    x[rng.random(x.shape) < 0.07] = np.nan
    want = pd.DataFrame(x).corr(method="spearman").to_numpy()
    got = L.fast_spearman(x)
    off = ~np.eye(7, dtype=bool)
    assert np.nanmax(np.abs(got[off] - want[off])) < 1e-9
    assert np.array_equal(np.isnan(got[off]), np.isnan(want[off]))
    pear, nobs = L.fast_pearson(x)
    wantp = pd.DataFrame(x).corr(method="pearson").to_numpy()
    assert np.nanmax(np.abs(pear[off] - wantp[off])) < 1e-9
    assert np.array_equal(nobs, (~np.isnan(x)).T.astype(int) @ (~np.isnan(x)).astype(int))


def test_fast_spearman_matches_pandas_property():
    """Random small frames (seeded): fast Spearman equals pandas to 1e-9."""
    for seed in range(25):
        rng = np.random.default_rng(100 + seed)
        n, k = int(rng.integers(5, 60)), int(rng.integers(2, 5))
        x = rng.integers(0, int(rng.integers(2, 12)), size=(n, k)).astype(float)
        x[rng.random(x.shape) < rng.uniform(0, 0.4)] = np.nan
        want = pd.DataFrame(x).corr(method="spearman", min_periods=2).to_numpy()
        got = L.fast_spearman(x)
        off = ~np.eye(k, dtype=bool)
        both = ~np.isnan(want[off])
        assert np.allclose(got[off][both], want[off][both], atol=1e-9, rtol=0), seed


# ------------------------------------------------------------------- Simpson
def _planted_simpson(reverse: bool, seed=21):
    """Seeded simulation: three groups whose centres rise together; within a group the slope is
    -0.8 (reversal planted) or +0.8 (consistent link)."""
    rng = np.random.default_rng(seed)
    frames = []
    for j, centre in enumerate([0.0, 5.0, 10.0]):
        x = centre + rng.normal(size=200)
        slope = -0.8 if reverse else 0.8
        y = centre + slope * (x - centre) + 0.3 * rng.normal(size=200)
        frames.append(pd.DataFrame({"x": x, "y": y, "g": f"g{j}"}))
    return pd.concat(frames, ignore_index=True)


def test_planted_simpson_reversal_is_flagged():
    frame = _planted_simpson(True)
    res = frame.eda.trend("x", "y", by="g")
    assert any("Simpson's reversal" in w for w in res.warnings)
    t = res.table
    assert t["slope"].iloc[0] > 0
    assert (t["slope"].iloc[1:] < 0).all()
    assert t["slope"].iloc[1:].to_numpy() == pytest.approx([-0.8] * 3, abs=0.1)
    ns = run_code(res.code("df"), frame)
    assert_same_table(ns["trend"], t)


def test_planted_consistent_link_is_not_flagged():
    frame = _planted_simpson(False)
    res = frame.eda.trend("x", "y", by="g")
    assert not any("Simpson" in w for w in res.warnings)
    assert (res.table["slope"] > 0).all()


# ------------------------------------------------------------------ demo data
@pytest.fixture(scope="module")
def demo_links(demo_frame):
    return Report(demo_frame).links()


def test_demo_planted_link_is_found(demo_links):
    """The demo's planted link irrigation_l → yield_kg (log-linear, with 8 unit errors)."""
    t = demo_links.table
    s = _row(t, "irrigation_l", "yield_kg", "spearman")
    assert s["estimate"] > 0.4 and s["p_adjusted"] < 1e-10
    assert s["ci_low"] > 0.4
    # the eight rows keyed in grams break Pearson: the disagreement note says so
    p = _row(t, "irrigation_l", "yield_kg", "pearson")
    assert abs(p["estimate"]) < 0.1 and "differ" in p["note"]
    numeric = t[t["measure"] == "spearman"]
    top = numeric.iloc[np.argsort(-numeric["estimate"].abs().to_numpy())[:2]]
    assert {"irrigation_l", "yield_kg"} <= set(top["x"]) | set(top["y"])


def test_demo_reversal_temperature_wetness_by_site(demo_frame):
    """The demo's planted reversal: wetness rises with temperature across sites, falls within."""
    res = demo_frame.eda.trend("temperature_c", "leaf_wetness_h", by="site")
    assert any("Simpson's reversal" in w for w in res.warnings)
    assert res.table["slope"].iloc[0] > 0
    assert (res.table["slope"].iloc[1:] < 0).all()
    assert res.table["slope"].iloc[1:].to_numpy() == pytest.approx([-0.6] * 5, abs=0.1)


def test_demo_measures_per_role_pair(demo_links):
    t = demo_links.table
    assert _row(t, "site", "crop", "cramers_v")["n"] == 5000
    eta = _row(t, "site", "temperature_c", "eta")  # sites differ in typical temperature (planted)
    assert eta["estimate"] > 0.8 and eta["p_adjusted"] < 1e-10
    assert eta["share_explained"] == pytest.approx(eta["estimate"] ** 2)
    k = _row(t, "soil_grade", "pest_score", "kendall")
    assert k["x_role"] == "ordinal" and k["y_role"] == "ordinal"
    const = t[(t["x"] == "network") | (t["y"] == "network")]
    assert len(const) and const["estimate"].isna().all() and (const["note"].str.contains("constant")).all()
    assert set(t["measure"]) <= {"pearson", "spearman", "kendall", "cramers_v", "eta", "mutual_info"}


def test_demo_round_trip_with_mutual_info_and_sample(demo_frame):
    snap = snapshot(demo_frame)
    for kw, opts in [({"mutual_info": True}, {}), ({"method": "kendall"}, {"sample": 900, "seed": 4})]:
        res = Report(demo_frame, **opts).links(**kw)
        ns = run_code(res.code("df"), demo_frame)
        assert_same_table(ns["links"], res.table)
    mi = Report(demo_frame).links(mutual_info=True).table
    m = mi[mi["measure"] == "mutual_info"]["estimate"].dropna()
    assert ((m >= 0) & (m <= 1)).all()
    assert_unchanged(demo_frame, snap)


def test_matrix_wide_form(demo_links):
    m = demo_links.matrix("spearman")
    assert m.loc["irrigation_l", "yield_kg"] == m.loc["yield_kg", "irrigation_l"]
    assert m.loc["irrigation_l", "yield_kg"] == pytest.approx(
        _row(demo_links.table, "irrigation_l", "yield_kg", "spearman")["estimate"]
    )
    assert m.loc["irrigation_l", "irrigation_l"] == 1.0
    assert demo_links.matrix("spearman", top=3).shape == (3, 3)


# ------------------------------------------------------------------ bad input
def test_constant_and_short_pairs_are_blank_with_reason():
    frame = pd.DataFrame({
        "k": [2.0] * 30,
        "v": np.arange(30.0) ** 1.5,
        "w": np.r_[[1.0, 2.0], [np.nan] * 28],
        "z": np.linspace(0, 1, 30) + np.r_[np.inf, np.zeros(29)],
    })
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        t = frame.eda.links(roles={"k": "continuous"}).table
    kv = _row(t, "k", "v", "pearson")
    assert np.isnan(kv["estimate"]) and "constant" in kv["note"]
    wv = _row(t, "w", "v", "spearman")
    assert np.isnan(wv["estimate"]) and "fewer than 3" in wv["note"] and wv["n"] == 2
    assert _row(t, "v", "z", "spearman")["n"] == 29  # ±inf counts as missing


def test_wide_frame_limits_columns_and_says_so():
    rng = np.random.default_rng(0)
    frame = pd.DataFrame(rng.normal(size=(50, 300)), columns=[f"c{i}" for i in range(300)])
    res = frame.eda.links()
    assert len(res.info["positions"]) == L.MAX_COLUMNS
    assert any("most complete" in n for n in res.notes)
    assert any("heatmap shows" in n for n in res.notes)
    assert res.matrix(top=20).shape == (20, 20)
    spec = res.chart().to_dict()
    assert "strongest links" in str(spec)


def test_chart_and_panel_build(demo_links, demo_frame):
    spec = demo_links.chart().to_dict()
    text = str(spec)
    assert "domainMid" in text and "opacity" in text
    res = demo_frame.eda.trend("irrigation_l", "yield_kg")
    assert res.chart() is not None
    pytest.importorskip("ipywidgets")
    panel = demo_links.panel()
    assert panel is not None


def test_large_trend_chart_is_binned_and_sampled():
    rng = np.random.default_rng(1)
    n = 20_000
    frame = pd.DataFrame({"x": rng.normal(size=n)})
    frame["y"] = 2 * frame["x"] + rng.normal(size=n)
    spec = frame.eda.trend("x", "y").chart().to_dict()
    sizes = [len(v) for v in spec.get("datasets", {}).values()]
    assert max(sizes) <= 5000
    assert "seeded sample of 5,000 points" in str(spec)


def test_fast_pearson_without_threadpoolctl(monkeypatch):
    """The einsum path (no BLAS thread limit available) gives pandas' values too."""
    import contextlib

    monkeypatch.setattr(L, "_one_blas_thread", lambda: (contextlib.nullcontext(), False))
    rng = np.random.default_rng(6)
    x = rng.normal(size=(40_000, 4))
    x[:, 1] += x[:, 0]
    x[rng.random(x.shape) < 0.1] = np.nan
    got, _ = L.fast_pearson(x)
    want = pd.DataFrame(x).corr().to_numpy()
    assert np.nanmax(np.abs(got - want)) < 1e-12


def test_extreme_magnitudes_round_trip():
    """Values near 1e300 and 1e-300: correlation is scale-free, so both sides scale first."""
    rng = np.random.default_rng(12)
    a = rng.normal(size=60)
    frame = pd.DataFrame({"huge": a * 1e300, "tiny": (a + rng.normal(size=60)) * 1e-300,
                          "plain": rng.normal(size=60)})
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        res = frame.eda.links()
    ref = stats.pearsonr(a, frame["tiny"] * 1e300).statistic
    assert _row(res.table, "huge", "tiny", "pearson")["estimate"] == pytest.approx(ref, abs=1e-12)
    ns = run_code(res.code("df"), frame)
    assert_same_table(ns["links"], res.table)


def test_strength_label_is_stable_on_a_threshold():
    """An estimate on a threshold (here 0.5, up to float noise) gets one label on every route:
    found by hypothesis, where the fast ranks and pandas' corr differed in the last bit."""
    from nbeda.stats.links import strength_label

    labels = strength_label(np.array([0.5 - 1e-15, 0.5, 0.5 + 1e-15, -0.3 + 1e-16, 0.1 - 2e-16]))
    assert list(labels) == ["strong", "strong", "strong", "moderate", "weak"]
