"""Shape: how each variable is distributed (skew, tails, peaks, normality, transforms).

Pure computation (pandas/numpy/scipy only).  The per-column rules live in a few
self-contained plain functions (:func:`shape_moments`, :func:`shape_modes`,
:func:`shape_of`, :func:`fd_histogram`), so the code handed to the analyst embeds
exactly the same rules as the table they see.

Rules (each documented here and in the emitted code):

* Only finite values count: missing values and ±inf are left out (and counted in
  ``note``).  Every value is first scaled by an exact power of two so that its
  largest magnitude lies in [0.5, 1): moments of 1e300-sized values then cannot
  overflow, and every statistic below (all location/scale-free) is unchanged.
* ``skew`` = adjusted Fisher–Pearson G1 (= ``Series.skew()`` =
  ``scipy.stats.skew(bias=False)``), ``kurtosis`` = excess G2 (= ``Series.kurt()``
  = ``scipy.stats.kurtosis(bias=False)``); standard errors
  SES = sqrt(6n(n−1)/((n−2)(n+1)(n+3))) and SEK = 2·SES·sqrt((n²−1)/((n−3)(n+5)))
  (the usual textbook small-sample formulas, from memory; the tests check them
  against the spread of G1 and G2 over seeded normal samples).
* ``quartile_skew`` = Bowley's (Q3 + Q1 − 2·Q2)/(Q3 − Q1) (undefined when IQR = 0).
* ``reading``: |skew| < 0.5 roughly symmetric, 0.5–1 moderately, ≥ 1 strongly
  skewed (Bulmer 1979 rule of thumb; common practice); excess kurtosis > 1
  heavy-tailed, < −1 light-tailed (common practice); the smallest or largest
  value being the most common one and holding ≥ 10% of the values reads
  "piled at a limit"; ≥ 2 density peaks reads bimodal/multimodal; |skew| ≥ 1
  with |quartile skew| < 0.05 reads "skew comes from a few extreme values" (our
  rule: a gamma law skewed that much has Bowley skew ≥ 0.11).
* Headline normality test: Shapiro–Wilk when 3 ≤ n ≤ 5000; above 5000 rows
  D'Agostino–Pearson K² on all values (computed from G1 and G2 by the formulas of
  D'Agostino, Belanger & D'Agostino 1990, as ``scipy.stats.normaltest`` does;
  Shapiro–Wilk is then also run, on a seeded
  random sample of 5000, and kept in ``shapiro_stat``/``shapiro_p``).  K² needs
  n ≥ 20 (scipy's kurtosis test).  Anderson–Darling A² with its 5% critical value
  0.752/(1 + 0.75/n + 2.25/n²) (Stephens 1974, the table scipy uses) for n ≥ 8,
  on the same seeded sample of 5000 above that size.
* Transform: skipped ("none") when |skew| < 0.5 (common practice).  Strictly
  positive data: log and Box–Cox (λ by maximum likelihood, ``scipy.stats.boxcox``)
  are compared and log is preferred unless Box–Cox leaves a skew smaller by more
  than 0.25 (log is easier to read; our rule).  Other data: Yeo–Johnson
  (``scipy.stats.yeojohnson``) on the values divided by their standard deviation
  (Yeo–Johnson is not scale-invariant; this makes λ unit-free).  λ is estimated
  on the same seeded sample of at most 5000 values; ``skew_after`` is the skew of
  all values after the transform.  "none" too when no transform lowers |skew|,
  and with fewer than 8 values (too few to fit λ; our rule).  The candidate
  columns (``log_skew``, ``boxcox_*``, ``yeojohnson_*``) are filled only when a
  transform is called for.
* ``modes``: peaks of a Gaussian kernel density on the (sampled) values, with
  Silverman's robust bandwidth 0.9·min(sd, IQR/1.34)·n^(−1/5) (Silverman 1986),
  widened to the smallest gap between levels for columns with ≤ 20 distinct
  values (so integer scales do not peak at every level), evaluated on 512 points
  spanning the 0.5th–99.5th percentiles ± 3 bandwidths; a peak counts when its
  prominence (its rise above the dip separating it from any higher peak,
  ``scipy.signal.find_peaks``) is at least 10% of the highest peak (our rule,
  calibrated on seeded normal, exponential and two-normal mixture samples, 40
  each: 2–3% false second peaks at n = 50, none seen from n = 100).  Needs n ≥ 20 (our
  rule).  The bandwidth is at least one grid step (finer cannot be resolved).
  The density is computed by linear binning onto the grid and a
  Gaussian-kernel convolution (values beyond the grid, at most 1%, left out): the
  curve of ``scipy.stats.gaussian_kde`` with that bandwidth, up to a constant.
* Histogram: Freedman–Diaconis bins (width 2·IQR·n^(−1/3), edges equal to
  ``numpy.histogram_bin_edges(bins="fd")``); Sturges' rule when IQR = 0; when
  that would give more than 200 bins (long tails, stray values such as a -999
  code), FD-width bins (≤ 200) between Tukey's far-out fences Q1 − 3·IQR and
  Q3 + 3·IQR only, and the values beyond are counted apart (shown in the title).
* Categorical columns (nominal, boolean, ordinal not coded as numbers): counts
  per level (ordered categoricals in their level order, others most common
  first; top 10 + "other" in the frequency table), imbalance ratio = largest /
  smallest level count, normalised entropy = H / ln(levels) (1 = even spread).
* Datetime columns (tz-aware times keep their zone; periods use their start;
  strings are parsed): first/last, span, median step and largest gap between
  distinct times, the most common timestamp, its share and its count over the
  median count per timestamp; counts per month (per year beyond 120 months) and
  per weekday on wall-clock time.  Levels and dates always use all rows.
"""

from __future__ import annotations

import warnings
from typing import Any

import numpy as np
import pandas as pd
from scipy import stats
from scipy.signal import find_peaks

from nbeda._context import Context
from nbeda.stats._codegen import function_source, header, join_blocks, lit

__all__ = [
    "SHAPE_COLUMNS",
    "shape_moments",
    "dagostino_k2",
    "shape_modes",
    "shape_of",
    "fd_histogram",
    "fd_edges",
    "box_summary",
    "quantile_points",
    "compute_shape",
    "sample_rows",
    "level_summary",
    "level_tables",
    "frequency_table",
    "level_counts_of",
    "level_row",
    "date_row",
    "categorical_positions",
    "level_counts",
    "date_summary",
    "date_counts",
    "to_datetimes",
    "shape_code",
    "hist_code",
]

SHAPE_COLUMNS = [
    "n",
    "skew",
    "skew_se",
    "kurtosis",
    "kurtosis_se",
    "quartile_skew",
    "mean_minus_median",
    "reading",
    "normality_test",
    "normality_stat",
    "normality_p",
    "suggested_transform",
    "transform_lambda",
    "skew_after",
    "modes",
    "missing",
    "infinite",
    "shapiro_stat",
    "shapiro_p",
    "dagostino_stat",
    "dagostino_p",
    "anderson_stat",
    "anderson_crit_5",
    "log_skew",
    "boxcox_lambda",
    "boxcox_skew",
    "yeojohnson_lambda",
    "yeojohnson_skew",
    "sampled",
    "note",
]

#: Sample size for the Shapiro–Wilk test, the kernel density and the λ fits.
SAMPLE_MAX = 5000
#: |skew| below this needs no transform (common practice).
SMALL_SKEW = 0.5


# ---------------------------------------------------------------------------
# Self-contained plain functions: embedded verbatim in the emitted code.
# ---------------------------------------------------------------------------
def shape_moments(y):
    """Adjusted Fisher-Pearson skewness G1 and excess kurtosis G2 of finite values y."""
    n = y.size
    if n < 3:
        return float("nan"), float("nan")
    d = y - y.mean()
    d2 = d * d
    m2 = d2.mean()
    if not m2 > 0:
        return float("nan"), float("nan")
    m3 = (d2 * d).mean()
    g1 = m3 / m2**1.5 * np.sqrt(n * (n - 1.0)) / (n - 2.0)
    if n < 4:
        return float(g1), float("nan")
    m4 = (d2 * d2).mean()
    g2 = ((n + 1.0) * m4 / m2**2 - 3.0 * (n - 1.0)) * (n - 1.0) / ((n - 2.0) * (n - 3.0))
    return float(g1), float(g2)


def dagostino_k2(g1, g2, n):
    """D'Agostino-Pearson K2 and its p-value from G1, G2 (D'Agostino, Belanger & D'Agostino 1990)."""
    b1 = g1 * (n - 2.0) / np.sqrt(n * (n - 1.0))  # biased skewness m3 / m2**1.5
    b2 = (g2 * (n - 2.0) * (n - 3.0) / (n - 1.0) + 3.0 * (n - 1.0)) / (n + 1.0)  # m4 / m2**2
    with np.errstate(all="ignore"):
        y = b1 * np.sqrt((n + 1.0) * (n + 3.0) / (6.0 * (n - 2.0)))
        beta2 = 3.0 * (n * n + 27.0 * n - 70.0) * (n + 1.0) * (n + 3.0) / (
            (n - 2.0) * (n + 5.0) * (n + 7.0) * (n + 9.0)
        )
        w2 = -1.0 + np.sqrt(2.0 * (beta2 - 1.0))
        delta = 1.0 / np.sqrt(0.5 * np.log(w2))
        alpha = np.sqrt(2.0 / (w2 - 1.0))
        y = 1.0 if y == 0 else y
        z_skew = delta * np.log(y / alpha + np.sqrt((y / alpha) ** 2 + 1.0))
        e = 3.0 * (n - 1.0) / (n + 1.0)
        var_b2 = 24.0 * n * (n - 2.0) * (n - 3.0) / ((n + 1.0) ** 2 * (n + 3.0) * (n + 5.0))
        x = (b2 - e) / np.sqrt(var_b2)
        sb1 = 6.0 * (n * n - 5.0 * n + 2.0) / ((n + 7.0) * (n + 9.0)) * np.sqrt(
            6.0 * (n + 3.0) * (n + 5.0) / (n * (n - 2.0) * (n - 3.0))
        )
        a = 6.0 + 8.0 / sb1 * (2.0 / sb1 + np.sqrt(1.0 + 4.0 / sb1**2))
        denom = 1.0 + x * np.sqrt(2.0 / (a - 4.0))
        if denom == 0:
            return float("nan"), float("nan")
        term2 = np.sign(denom) * ((1.0 - 2.0 / a) / abs(denom)) ** (1.0 / 3.0)
        z_kurt = (1.0 - 2.0 / (9.0 * a) - term2) / np.sqrt(2.0 / (9.0 * a))
        k2 = z_skew**2 + z_kurt**2
    return float(k2), float(np.exp(-k2 / 2.0))  # chi-square with 2 df: sf(k2) = exp(-k2/2)


def shape_modes(ys, grid=512, prominence=0.10):
    """Number of peaks of a Gaussian kernel density of ys (Silverman's robust bandwidth)."""
    n = ys.size
    sd = ys.std(ddof=1)
    q005, q25, q75, q995 = np.quantile(ys, [0.005, 0.25, 0.75, 0.995])
    spread = min(sd, (q75 - q25) / 1.34) if q75 > q25 else sd
    h = 0.9 * spread * n ** (-0.2)
    levels = np.unique(ys)
    if levels.size < 2:
        return 1
    if levels.size <= 20:
        h = max(h, np.diff(levels).min())  # integer-like scales: one bump per level is not a mode
    if not (sd > 0 and h > 0):
        return 1
    lo, hi = q005 - 3 * h, q995 + 3 * h
    step = (hi - lo) / (grid - 1)
    if not step > 0:
        return 1
    h = max(h, step)  # the grid cannot resolve a bandwidth finer than one step
    # Linear binning onto the grid (values beyond it, at most 1% of them, are left out), then a
    # Gaussian kernel convolution: the kernel density up to a constant factor, which does not move peaks.
    pos = (ys - lo) / step
    inside = (pos >= 0) & (pos < grid - 1)
    i = np.floor(pos[inside]).astype(np.int64)
    w = pos[inside] - i
    mass = np.bincount(i, 1 - w, minlength=grid) + np.bincount(i + 1, w, minlength=grid)
    reach = int(min(grid - 1, np.ceil(5 * h / step)))
    kernel = np.exp(-0.5 * (np.arange(-reach, reach + 1) * step / h) ** 2)
    dens = np.convolve(mass, kernel)[reach : reach + grid]
    # A peak counts when it rises at least `prominence` x the highest peak above the dip
    # that separates it from any higher peak.
    peaks, _ = find_peaks(dens, prominence=prominence * dens.max())
    return int(max(peaks.size, 1))


def shape_of(x, seed=0, sample_max=5000, small_skew=0.5):
    """One Shape row for the float values x (NaN = missing), by the documented rules."""
    nan = float("nan")
    x = np.asarray(x, dtype="float64")
    finite = np.isfinite(x)
    v = x[finite]
    n = int(v.size)
    row = {
        "n": n, "skew": nan, "skew_se": nan, "kurtosis": nan, "kurtosis_se": nan,
        "quartile_skew": nan, "mean_minus_median": nan, "reading": "", "normality_test": "",
        "normality_stat": nan, "normality_p": nan, "suggested_transform": "", "transform_lambda": nan,
        "skew_after": nan, "modes": None, "missing": int(np.isnan(x).sum()),
        "infinite": int(np.isinf(x).sum()), "shapiro_stat": nan, "shapiro_p": nan,
        "dagostino_stat": nan, "dagostino_p": nan, "anderson_stat": nan, "anderson_crit_5": nan,
        "log_skew": nan, "boxcox_lambda": nan, "boxcox_skew": nan, "yeojohnson_lambda": nan,
        "yeojohnson_skew": nan, "sampled": n, "note": "",
    }
    notes = []
    if row["infinite"]:
        notes.append(f"{row['infinite']} infinite value(s) left out")
    if n == 0:
        notes.append("no finite values: nothing to describe")
        row["note"] = "; ".join(notes)
        return row
    amax = np.abs(v).max()
    if amax >= 2.0**53 and np.all(v == np.round(v)):
        notes.append("integers of magnitude >= 2**53 are not exact in float64: small differences may be lost")
    # Scale by an exact power of two (max |y| in [0.5, 1)): no overflow, same shape statistics.
    e = int(np.frexp(amax)[1]) if amax > 0 else 0
    y = np.ldexp(v, -e)
    if y.min() == y.max():
        notes.append("constant: every finite value is the same, no shape to describe")
        row["note"] = "; ".join(notes)
        return row
    if n < 3:
        notes.append("fewer than 3 finite values: shape statistics need at least 3 (kurtosis 4)")
        row["note"] = "; ".join(notes)
        return row
    g1, g2 = shape_moments(y)
    row["skew"], row["kurtosis"] = g1, g2
    row["skew_se"] = float(np.sqrt(6.0 * n * (n - 1) / ((n - 2.0) * (n + 1.0) * (n + 3.0))))
    if n >= 4:
        row["kurtosis_se"] = float(
            2.0 * row["skew_se"] * np.sqrt((n * n - 1.0) / ((n - 3.0) * (n + 5.0)))
        )
    ysort = np.sort(y)  # sorted once: quartiles and distinct values come from it
    q1, q2, q3 = np.quantile(ysort, [0.25, 0.5, 0.75])
    if q3 > q1:
        row["quartile_skew"] = float((q3 + q1 - 2.0 * q2) / (q3 - q1))
    else:
        notes.append("IQR is zero: quartile skew undefined")
    mean = y.mean()
    row["mean_minus_median"] = float(np.ldexp(mean - q2, e))
    # The seeded sample used by Shapiro-Wilk, the density and the lambda fits.
    if n > sample_max:
        pick = np.sort(np.random.default_rng(seed).choice(n, size=sample_max, replace=False))
        ys = y[pick]
        row["sampled"] = int(sample_max)
        notes.append(f"Shapiro-Wilk, Anderson-Darling, density peaks and lambda on a seeded random sample of {sample_max}")
    else:
        ys = y
    # Normality tests.
    # Both tests are location/scale-free: run them on the sample centred and scaled to [-1, 1]
    # (values far below 1 would underflow when squared or trip scipy's "range zero" check).
    c = ys - np.median(ys)
    cs = c / np.abs(c).max() if ys.min() < ys.max() else c
    if ys.min() < ys.max():
        w = stats.shapiro(cs)
        row["shapiro_stat"], row["shapiro_p"] = float(w.statistic), float(w.pvalue)
    if n >= 20:
        row["dagostino_stat"], row["dagostino_p"] = dagostino_k2(g1, g2, n)  # = scipy.stats.normaltest
    if ys.size >= 8 and ys.min() < ys.max():
        m = ys.size
        row["anderson_stat"] = float(stats.anderson(cs, method="interpolate").statistic)
        row["anderson_crit_5"] = float(np.round(0.752 / (1.0 + 0.75 / m + 2.25 / m / m), 3))
    if n <= 5000:
        row["normality_test"] = "Shapiro-Wilk"
        row["normality_stat"], row["normality_p"] = row["shapiro_stat"], row["shapiro_p"]
    else:
        row["normality_test"] = "D'Agostino-Pearson K2"
        row["normality_stat"], row["normality_p"] = row["dagostino_stat"], row["dagostino_p"]
    # Transforms (only when |skew| >= small_skew and n >= 8): lambda on the sample, skew after on all values.
    if g1 == g1 and abs(g1) >= small_skew and n >= 8 and ys.min() < ys.max():
        with np.errstate(all="ignore"), warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            if y.min() > 0:
                row["log_skew"] = shape_moments(np.log(y))[0]
                lam = float(stats.boxcox(ys)[1])
                t = stats.boxcox(y, lmbda=lam)
                row["boxcox_lambda"] = lam
                row["boxcox_skew"] = shape_moments(t)[0] if np.all(np.isfinite(t)) else nan
            else:
                z = y / y.std(ddof=1)
                lam = float(stats.yeojohnson(z[pick] if n > sample_max else z)[1])
                t = stats.yeojohnson(z, lmbda=lam)
                row["yeojohnson_lambda"] = lam
                row["yeojohnson_skew"] = shape_moments(t)[0] if np.all(np.isfinite(t)) else nan
        if caught:
            notes.append("the lambda fit hit a numerical limit: " + str(caught[0].message).split(".")[0])
        if y.min() > 0:
            bc = abs(row["boxcox_skew"]) if row["boxcox_skew"] == row["boxcox_skew"] else np.inf
            lg = abs(row["log_skew"]) if row["log_skew"] == row["log_skew"] else np.inf
            if lg <= bc + 0.25:
                best, lam, after = "log", 0.0, row["log_skew"]
            else:
                best, lam, after = "box-cox", row["boxcox_lambda"], row["boxcox_skew"]
        else:
            best, lam, after = "yeo-johnson", row["yeojohnson_lambda"], row["yeojohnson_skew"]
        if after == after and abs(after) < abs(g1):
            row["suggested_transform"], row["transform_lambda"], row["skew_after"] = best, lam, after
        else:
            row["suggested_transform"], row["skew_after"] = "none", g1
            notes.append("no transform tried lowers the skew")
    else:
        row["suggested_transform"], row["skew_after"] = "none", g1
        if g1 == g1 and abs(g1) >= small_skew:
            notes.append("fewer than 8 values: no transform suggested")
    # Peaks of the smoothed density (n >= 20).
    if n >= 20:
        row["modes"] = shape_modes(ys)
    # The plain-words reading.
    words = []
    side = "right" if g1 > 0 else "left"
    above = "mean above median" if mean > q2 else ("mean below median" if mean < q2 else "mean = median")
    if not g1 == g1:
        words.append("skew undefined")
    elif abs(g1) < 0.5:
        words.append("roughly symmetric")
    else:
        words.append(f"{'strongly' if abs(g1) >= 1 else 'moderately'} {side}-skewed ({above})")
    qs = row["quartile_skew"]
    if g1 == g1 and abs(g1) >= 1 and qs == qs and abs(qs) < 0.05:
        words.append("skew comes from a few extreme values (the quartiles are symmetric)")
        notes.append("check the extreme values (possible errors or codes) before transforming")
    if g2 == g2 and g2 > 1:
        words.append("heavy-tailed")
    elif g2 == g2 and g2 < -1:
        words.append("light-tailed")
    starts = np.flatnonzero(np.r_[True, ysort[1:] != ysort[:-1]])
    values, counts = ysort[starts], np.diff(np.r_[starts, n])
    top = counts.argmax()
    sole_top = (counts == counts[top]).sum() == 1
    if values.size >= 3 and top in (0, values.size - 1) and counts[top] >= max(0.10 * n, 2) and sole_top:
        words.append(f"piled at its {'lower' if top == 0 else 'upper'} limit ({counts[top] / n:.0%} of values)")
    if row["modes"] == 2:
        words.append("bimodal")
    elif row["modes"] is not None and row["modes"] > 2:
        words.append(f"multimodal ({row['modes']} peaks)")
    if values.size <= 10:
        words.append(f"few distinct values ({values.size})")
    row["reading"] = "; ".join(words)
    row["note"] = "; ".join(notes)
    return row


def fd_histogram(x, max_bins=200):
    """Freedman-Diaconis histogram of the finite values of x: (bins frame, count below, count above)."""
    v = np.asarray(x, dtype="float64")
    v = v[np.isfinite(v)]
    cols = ["bin_start", "bin_end", "count"]
    if v.size == 0:
        return pd.DataFrame({c: pd.Series(dtype="float64") for c in cols}), 0, 0
    amax = np.abs(v).max()
    e = int(np.frexp(amax)[1]) if amax > 0 else 0
    y = np.ldexp(v, -e)  # exact power-of-two scaling: no overflow, identical edges
    q1, q3 = np.quantile(y, [0.25, 0.75])
    lo, hi = y.min(), y.max()
    width = 2.0 * (q3 - q1) * y.size ** (-1.0 / 3.0)
    rule = "fd" if width > 0 else "sturges"
    below = above = 0
    if width > 0 and np.ceil((hi - lo) / width) > max_bins:
        # Long tails or stray values: show Tukey's far-out fences (Q1 - 3 IQR, Q3 + 3 IQR) only.
        lo, hi = max(lo, q1 - 3.0 * (q3 - q1)), min(hi, q3 + 3.0 * (q3 - q1))
        nbins = int(min(max(np.ceil((hi - lo) / width), 1), max_bins))
        edges = np.linspace(lo, hi, nbins + 1) if hi > lo else np.array([lo - 0.5, hi + 0.5])
        below, above = int((y < edges[0]).sum()), int((y > edges[-1]).sum())
    else:
        try:
            edges = np.histogram_bin_edges(y, bins=rule)
        except ValueError:  # range too small for float64 to split: a single bin
            edges = np.array([lo, hi])
    counts = np.histogram(y[(y >= edges[0]) & (y <= edges[-1])], bins=edges)[0]
    edges = np.ldexp(edges, e)
    frame = pd.DataFrame({"bin_start": edges[:-1], "bin_end": edges[1:], "count": counts.astype("int64")})
    return frame, below, above


def fd_edges(n, q1, q3, lo, hi, max_bins=200):
    """The bin edges :func:`fd_histogram` draws, from summaries alone (count, quartiles, min, max).

    For data that stay in an engine: same scaling, same rules (Freedman-Diaconis, else Sturges;
    Tukey's far-out fences when the bins would exceed ``max_bins``), same floats as numpy's
    ``histogram_bin_edges`` on the data whenever the quartiles are the same floats.
    """
    amax = max(abs(lo), abs(hi))
    e = int(np.frexp(amax)[1]) if amax > 0 else 0
    q1, q3, lo, hi = (float(np.ldexp(v, -e)) for v in (q1, q3, lo, hi))
    width = 2.0 * (q3 - q1) * n ** (-1.0 / 3.0)
    if width > 0 and np.ceil((hi - lo) / width) > max_bins:
        lo, hi = max(lo, q1 - 3.0 * (q3 - q1)), min(hi, q3 + 3.0 * (q3 - q1))
        nbins = int(min(max(np.ceil((hi - lo) / width), 1), max_bins))
        edges = np.linspace(lo, hi, nbins + 1) if hi > lo else np.array([lo - 0.5, hi + 0.5])
    else:
        first, last = (lo - 0.5, hi + 0.5) if lo == hi else (lo, hi)
        if width <= 0:  # Sturges (numpy: width = range / (log2(n) + 1) on the data's range)
            width = (hi - lo) / (np.log2(n) + 1.0)
        nbins = int(np.ceil((last - first) / width)) if width > 0 else 1
        edges = np.linspace(first, last, nbins + 1)
    return np.ldexp(edges, e)


# ---------------------------------------------------------------------------
# Chart helpers (small pre-aggregated frames)
# ---------------------------------------------------------------------------
def _finite(x: np.ndarray) -> np.ndarray:
    return x[np.isfinite(x)]


def box_summary(x: np.ndarray) -> dict[str, float]:
    """Quartiles, Tukey whiskers (most extreme values within 1.5·IQR), mean and outlier count."""
    v = _finite(np.asarray(x, dtype="float64"))
    if v.size == 0:
        return {}
    with np.errstate(all="ignore"):
        q1, med, q3 = np.quantile(v, [0.25, 0.5, 0.75])
        iqr = q3 - q1
        lo_fence, hi_fence = q1 - 1.5 * iqr, q3 + 1.5 * iqr
        inside = v[(v >= lo_fence) & (v <= hi_fence)]
        amax = np.abs(v).max()
        e = int(np.frexp(amax)[1]) if amax > 0 else 0
        mean = float(np.ldexp(np.ldexp(v, -e).mean(), e))
    return {
        "q1": float(q1),
        "median": float(med),
        "q3": float(q3),
        "whisker_low": float(inside.min()) if inside.size else float(q1),
        "whisker_high": float(inside.max()) if inside.size else float(q3),
        "mean": mean,
        "outside": int(v.size - inside.size),
    }


def quantile_points(x: np.ndarray, points: int = 500) -> pd.DataFrame:
    """≤ ``points`` sample quantiles with their probabilities and standard-normal quantiles."""
    v = _finite(np.asarray(x, dtype="float64"))
    m = int(min(v.size, points))
    if m == 0:
        return pd.DataFrame({"p": [], "value": [], "normal_q": []}, dtype="float64")
    p = (np.arange(m) + 0.5) / m
    return pd.DataFrame({"p": p, "value": np.quantile(v, p), "normal_q": stats.norm.ppf(p)})


# ---------------------------------------------------------------------------
# The main table
# ---------------------------------------------------------------------------
def sample_rows(n_rows: int, sample: int | None, seed: int) -> np.ndarray | None:
    """Row positions of the report-wide seeded sample (``None`` = all rows)."""
    if sample is None or int(sample) >= n_rows:
        return None
    return np.sort(np.random.default_rng(seed).choice(n_rows, size=int(sample), replace=False))


def compute_shape(ctx: Context) -> pd.DataFrame:
    """The Shape table: one row per numeric column (index ``column``)."""
    positions = ctx.numeric_positions()
    rows_pick = sample_rows(ctx.n_rows, ctx.options.sample, ctx.options.seed)
    rows = []
    for i in positions:
        x = ctx.float_values(i)
        if rows_pick is not None:
            x = x[rows_pick]
        rows.append(shape_of(x, seed=ctx.options.seed, sample_max=SAMPLE_MAX, small_skew=SMALL_SKEW))
    return _shape_frame(rows, ctx.index_for(positions))


def _shape_frame(rows: list[dict[str, Any]], index: pd.Index) -> pd.DataFrame:
    table = pd.DataFrame(rows, index=index, columns=SHAPE_COLUMNS)
    return table.astype({"n": "int64", "modes": "Int64", "missing": "int64", "infinite": "int64", "sampled": "int64"})


# ---------------------------------------------------------------------------
# Levels (nominal, ordinal labels, boolean) and dates
# ---------------------------------------------------------------------------
def level_counts_of(s):
    """Counts per level: ordered categoricals in level order, otherwise most common first."""
    values = s.dropna()
    if isinstance(s.dtype, pd.CategoricalDtype):
        counts = values.value_counts(sort=False).reindex(s.dtype.categories, fill_value=0)
        if s.dtype.ordered:
            return counts, True
        counts = counts[counts > 0]
    else:
        try:
            counts = values.value_counts(sort=False)
        except TypeError:  # unhashable values (lists, dicts): counted by their text
            counts = values.astype(str).value_counts(sort=False)
    order = np.argsort(-counts.to_numpy(), kind="stable")
    return counts.iloc[order], False


def level_row(s, counted=None):
    """Levels, top level and its share, imbalance ratio (largest/smallest) and normalised entropy."""
    counts, ordered = level_counts_of(s) if counted is None else counted
    c = counts.to_numpy(dtype="float64")
    n = float(c.sum())
    used = c[c > 0]
    k = int(used.size)
    row = {"n": int(n), "levels": k, "ordered": ordered, "top": None, "top_share": float("nan"),
           "imbalance_ratio": float("nan"), "entropy_norm": float("nan")}
    if n > 0:
        p = used / n
        row["top"] = str(counts.index[int(np.argmax(c))])
        row["top_share"] = float(c.max() / n)
        row["imbalance_ratio"] = float(used.max() / used.min())
        row["entropy_norm"] = float(-(p * np.log(p)).sum() / np.log(k)) if k > 1 else 0.0
    return row


LEVEL_COLUMNS = ["n", "levels", "ordered", "top", "top_share", "imbalance_ratio", "entropy_norm"]


def level_summary(ctx: Context, positions: list[int]) -> pd.DataFrame:
    """Per categorical column: levels, top level and share, imbalance ratio, normalised entropy."""
    return level_tables(ctx, positions)[0]


def level_tables(ctx: Context, positions: list[int], top: int = 10) -> tuple[pd.DataFrame, pd.DataFrame]:
    """The per-column level summary and the long frequency table (top ``top`` + "other"), one count each."""
    rows, freqs = [], []
    for i in positions:
        counted = level_counts_of(ctx.series(i))
        rows.append(level_row(ctx.series(i), counted))
        f = frequency_table(*counted, top=top)
        f.index = pd.Index([ctx.labels[i]] * len(f), name="column", tupleize_cols=False, dtype=object)
        freqs.append(f)
    summary = pd.DataFrame(rows, index=ctx.index_for(positions), columns=LEVEL_COLUMNS)
    if freqs:
        frequencies = pd.concat(freqs)
    else:
        frequencies = pd.DataFrame(
            {"level": pd.Series(dtype=object), "count": pd.Series(dtype="int64"), "share": pd.Series(dtype="float64")},
            index=pd.Index([], name="column", dtype=object),
        )
    return summary, frequencies


def level_counts(ctx: Context, i: int, top: int = 10) -> pd.DataFrame:
    """Frequency table of one column: top ``top`` levels + "other" (ordered levels all kept in order)."""
    return frequency_table(*level_counts_of(ctx.series(i)), top=top)


def frequency_table(counts, ordered, top=10):
    """Top `top` levels + "other" (ordered levels are all kept, in their order), with shares."""
    n = int(counts.sum())
    labels = [str(v) for v in counts.index]
    vals = counts.to_numpy(dtype="int64")
    if not ordered and len(vals) > top:
        labels = labels[:top] + [f"other ({len(vals) - top} levels)"]
        vals = np.r_[vals[:top], vals[top:].sum()]
    share = vals / n if n else np.full(len(vals), np.nan)
    return pd.DataFrame({"level": labels, "count": vals, "share": share})


def to_datetimes(s: pd.Series) -> pd.Series:
    """Timestamps of a datetime-role column (periods to their start, strings parsed; NaT if not)."""
    dt = s.dtype
    if isinstance(dt, pd.PeriodDtype):
        return s.dt.to_timestamp()
    if pd.api.types.is_datetime64_any_dtype(dt):
        return s
    values = s.astype(object).where(s.notna(), None)
    try:
        out = pd.to_datetime(values, errors="coerce", format="mixed")
    except (ValueError, TypeError):
        out = pd.to_datetime(values, errors="coerce", format="mixed", utc=True)
    if not pd.api.types.is_datetime64_any_dtype(out.dtype):
        out = pd.to_datetime(values, errors="coerce", format="mixed", utc=True)
    return out


def _wall(t: pd.Series) -> pd.Series:
    """Wall-clock times (tz-aware values shown in their own zone, zone dropped)."""
    return t.dt.tz_localize(None) if getattr(t.dt, "tz", None) is not None else t


def date_row(s):
    """First/last, span, median step and largest gap between distinct times, most common timestamp."""
    t = to_datetimes(s).dropna()
    row = {"n": int(t.size), "first": None, "last": None, "span": None, "median_step": None,
           "largest_gap": None, "gap_after": None, "top_timestamp": None, "top_share": float("nan"),
           "top_vs_median": float("nan")}
    if t.size:
        vc = t.value_counts()  # hashed once; only the distinct times are sorted
        distinct = vc.index.sort_values()
        row.update(first=str(distinct[0]), last=str(distinct[-1]), span=str(distinct[-1] - distinct[0]),
                   top_timestamp=str(vc.index[0]), top_share=float(vc.iloc[0] / t.size),
                   top_vs_median=float(vc.iloc[0] / vc.median()))
        if distinct.size > 1:
            steps = distinct[1:] - distinct[:-1]
            k = int(steps.argmax())
            row.update(median_step=str(steps.median()), largest_gap=str(steps[k]), gap_after=str(distinct[k]))
    return row


DATE_COLUMNS = [
    "n", "first", "last", "span", "median_step", "largest_gap", "gap_after", "top_timestamp", "top_share",
    "top_vs_median",
]


def date_summary(ctx: Context, positions: list[int]) -> pd.DataFrame:
    """Per datetime column: first/last, span, median step, largest gap, most common timestamp."""
    rows = [date_row(ctx.series(i)) for i in positions]
    return pd.DataFrame(rows, index=ctx.index_for(positions), columns=DATE_COLUMNS)


WEEKDAYS = ("Monday", "Tuesday", "Wednesday", "Thursday", "Friday", "Saturday", "Sunday")


def date_counts(ctx: Context, i: int, max_months: int = 120) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Counts per month (per year beyond ``max_months`` months) and per weekday, wall-clock time."""
    t = _wall(to_datetimes(ctx.series(i)).dropna())
    if t.size == 0:
        empty = pd.DataFrame({"period": [], "count": []})
        return empty, pd.DataFrame({"weekday": list(WEEKDAYS), "count": np.zeros(7, dtype="int64")})
    months = t.dt.year.astype("int64") * 12 + t.dt.month.astype("int64") - 1
    lo, hi = int(months.min()), int(months.max())
    if hi - lo + 1 <= max_months:
        c = np.bincount(months.to_numpy() - lo, minlength=hi - lo + 1)
        labels = [f"{(lo + k) // 12:04d}-{(lo + k) % 12 + 1:02d}" for k in range(hi - lo + 1)]
    else:
        years = t.dt.year.astype("int64").to_numpy()
        c = np.bincount(years - years.min())
        labels = [f"{years.min() + k:04d}" for k in range(c.size)]
    per_period = pd.DataFrame({"period": labels, "count": c.astype("int64")})
    wd = np.bincount(t.dt.day_of_week.astype("int64").to_numpy(), minlength=7)
    per_weekday = pd.DataFrame({"weekday": list(WEEKDAYS), "count": wd.astype("int64")})
    return per_period, per_weekday


# ---------------------------------------------------------------------------
# Code writers
# ---------------------------------------------------------------------------
_RULES = [
    "Rules: only finite values count (missing and +/-inf left out); values are scaled by a power of two",
    "so 1e300-sized numbers cannot overflow; skew = adjusted Fisher-Pearson G1, kurtosis = excess G2;",
    "headline test Shapiro-Wilk for n <= 5000, else D'Agostino-Pearson K2 (Shapiro-Wilk, Anderson-Darling,",
    "density peaks and lambda fits then on a seeded sample of 5000); transforms skipped when |skew| < 0.5 (common practice); density peaks from a",
    "Gaussian KDE with Silverman's robust bandwidth on 512 points, peaks with prominence >= 10% of the",
    "highest (n >= 20).",
]


def _select_code(ctx: Context, positions: list[int], frame_name: str) -> str:
    """Code assigning ``x`` = the numeric columns as float64 (mirrors ``ctx.float_values``)."""
    from nbeda.stats._codegen import float_frame_code

    code = float_frame_code(ctx, positions, frame_name, var="x")
    o = ctx.options
    if sample_rows(ctx.n_rows, o.sample, o.seed) is not None:
        code += (
            f"# Report-wide seeded row sample of {int(o.sample)} rows (option sample={int(o.sample)}).\n"
            f"rows = np.sort(np.random.default_rng({int(o.seed)}).choice(len(x), size={int(o.sample)}, replace=False))\n"
            "x = x.iloc[rows]\n"
        )
    return code


def shape_code(ctx: Context, frame_name: str = "df", column_pos: int | None = None) -> str:
    """Plain code rebuilding the Shape table (and the histogram of one column)."""
    positions = ctx.numeric_positions()
    seed = int(ctx.options.seed)
    body = f"""\
# Shape of every numeric column (one row each).
positions = {positions!r}  # column positions in {frame_name}
rows = [shape_of(x.iloc[:, j].to_numpy(), seed={seed}, sample_max={SAMPLE_MAX}, small_skew={SMALL_SKEW})
        for j in range(x.shape[1])]
shape = pd.DataFrame(
    rows,
    index=pd.Index([{frame_name}.columns[i] for i in positions], name="column", tupleize_cols=False, dtype=object),
    columns={SHAPE_COLUMNS!r},
).astype({{"n": "int64", "modes": "Int64", "missing": "int64", "infinite": "int64", "sampled": "int64"}})
"""
    blocks = [
        header("Shape: distributions, skew, normality and transformations", ctx, frame_name, _RULES),
        "import warnings\nfrom scipy.signal import find_peaks\n\n# The per-column rules.",
        function_source(shape_moments),
        function_source(dagostino_k2),
        function_source(shape_modes),
        function_source(shape_of),
        _select_code(ctx, positions, frame_name),
        body,
    ]
    if column_pos is not None and column_pos in positions:
        blocks.insert(6, function_source(fd_histogram))
        blocks.append(hist_code(ctx, column_pos, positions))
    levels, dates = categorical_positions(ctx), ctx.with_role("datetime")
    index = 'pd.Index([{f}.columns[i] for i in {v}], name="column", tupleize_cols=False, dtype=object)'
    if levels:
        blocks += [
            "# Categorical columns (nominal, labelled ordinal, boolean), on all rows: one row each.",
            function_source(level_counts_of),
            function_source(level_row),
            f"level_positions = {levels!r}\n"
            f"shape_levels = pd.DataFrame([level_row({frame_name}.iloc[:, i]) for i in level_positions],\n"
            f"    index={index.format(f=frame_name, v='level_positions')}, columns={LEVEL_COLUMNS!r})\n",
            "# Level frequencies, one block per column (top 10 + \"other\"; ordinal levels all, in order).",
            function_source(frequency_table),
            "parts = []\n"
            "for i in level_positions:\n"
            f"    f = frequency_table(*level_counts_of({frame_name}.iloc[:, i]))\n"
            f"    f.index = pd.Index([{frame_name}.columns[i]] * len(f), name=\"column\", tupleize_cols=False, dtype=object)\n"
            "    parts.append(f)\n"
            "shape_frequencies = pd.concat(parts)\n",
        ]
    if dates:
        blocks += [
            "# Datetime columns, on all rows: one row each.",
            function_source(to_datetimes),
            function_source(date_row),
            f"date_positions = {dates!r}\n"
            f"shape_dates = pd.DataFrame([date_row({frame_name}.iloc[:, i]) for i in date_positions],\n"
            f"    index={index.format(f=frame_name, v='date_positions')}, columns={DATE_COLUMNS!r})\n",
        ]
    return join_blocks(*blocks)


def categorical_positions(ctx: Context) -> list[int]:
    """Columns described by their levels: nominal, boolean and ordinal columns not analysed as numbers."""
    numeric = set(ctx.numeric_positions())
    return [i for i in ctx.with_role("nominal", "ordinal", "boolean") if i not in numeric]


def hist_code(ctx: Context, column_pos: int, positions: list[int]) -> str:
    j = positions.index(column_pos)
    return f"""\
# Histogram of {lit(ctx.labels[column_pos])} (Freedman-Diaconis bins; values beyond the shown range counted apart).
shape_hist, shape_hist_below, shape_hist_above = fd_histogram(x.iloc[:, {j}].to_numpy())
shape_hist_edges = np.r_[shape_hist["bin_start"].to_numpy(), shape_hist["bin_end"].to_numpy()[-1:]]
"""
