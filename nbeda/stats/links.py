"""Links: how pairs of columns move together, with uncertainty.

Which measure for which pair of roles
-------------------------------------
Columns are sorted into three kinds by their role:

- *numeric*: ``continuous`` and ``discrete`` numbers (durations in seconds);
- *ordinal*: ``ordinal`` columns (numbers on a rating-like scale, or an ordered
  categorical read through its level order);
- *nominal*: ``nominal`` and ``boolean`` columns, and ``constant`` non-numeric ones.

``identifier``, ``text``, ``datetime`` and ``empty`` columns are not paired.

============================  ==========================================================
pair                          measures (``method="auto"``)
============================  ==========================================================
numeric – numeric             Pearson r **and** Spearman ρ; a note when they disagree by
                              0.2 or more (a non-linear or outlier-driven link)
ordinal – numeric / ordinal   Spearman ρ and Kendall τ-b
nominal – nominal             Cramér's V, bias-corrected (Bergsma 2013), χ² p-value
ordinal – nominal             Cramér's V (ordinal levels read as categories)
numeric – nominal             correlation ratio η (η² in ``share_explained``) with the
                              one-way ANOVA F-test p-value
============================  ==========================================================

``method="pearson" | "spearman" | "kendall"`` replaces the measure(s) of the numeric
and ordinal pairs by that one; nominal pairs keep theirs.  ``mutual_info=True``
adds the normalised mutual information of every pair (numbers cut into 10
quantile bins; MI / sqrt(H(x)·H(y)), Strehl & Ghosh 2002; no p-value).

Uncertainty and tests
---------------------
- Pearson: CI by Fisher's z, SE = 1/sqrt(n−3); p from t = r·sqrt((n−2)/(1−r²)), n−2 df.
- Spearman: CI by Fisher's z with SE = sqrt((1 + ρ²/2)/(n−3)) (Bonett & Wright 2000,
  Psychometrika 65:23–28); p from the same t approximation (as ``scipy.stats.spearmanr``).
- Kendall τ-b: ``scipy.stats.kendalltau`` (O(n log n)); CI by Fisher's z with
  SE = sqrt(0.437/(n−4)) (Fieller, Hartley & Pearson 1957).  Above
  :data:`KENDALL_MAX_ROWS` rows Kendall uses a seeded sample of rows (disclosed in ``note``).
- Cramér's V: χ² test of independence **without** Yates' continuity correction; V with
  Bergsma's (2013, J. Korean Stat. Soc. 42:323–328) bias correction.  No CI.  A note when
  more than 20% of expected counts are below 5 (common practice: χ² is then approximate).
- η: one-way ANOVA F-test.  No CI.
- ``p_adjusted``: Benjamini–Hochberg (1995) over every p-value in the table.

All pairs use their pairwise-complete rows (``n`` per pair); ±inf counts as missing.
A pair with fewer than 3 complete rows, or where a column is constant over the
complete rows, is left blank with the reason in ``note``.

``strength`` (common practice, after Cohen 1988's r benchmarks, applied to |estimate|):
below 0.1 "negligible", below 0.3 "weak", below 0.5 "moderate", below 0.7 "strong",
otherwise "very strong".

Limits: at most :data:`MAX_COLUMNS` columns are paired (the most complete ones, ties in
frame order); nominal columns with more than :data:`MAX_LEVELS` levels are skipped.

Speed
-----
Pearson for all pairs comes from masked matrix products (each column centred and
scaled first).  Spearman sorts each column **once** (packed 64-bit keys, faster than
``argsort``).  For a pair (a, b) the ranks of ``a`` over the rows where ``b`` is present
are ``a``'s ranks minus the number of its rows missing in ``b`` that sort below (ties
averaged over the tie group): that count is read from two cache-sized tables built
from the few missing rows (a prefix count per block of 32 sorted positions and a 32-bit
mask per block), so nothing is re-sorted and no pass follows a sort order.  Pearson is
then taken on the two rank vectors in row order, slice by slice, with the rank variances
from the closed form (m³ − m)/12 − Σ(t³ − t)/12.  Pairs run on up to two threads.
``benchmarks/bench_links.py`` compares this with ``DataFrame.corr`` on the same frame.
"""

from __future__ import annotations

import os
from typing import Any

import numpy as np
import pandas as pd
from scipy import stats

from nbeda._context import Context
from nbeda.stats._codegen import function_source, header, join_blocks, lit

__all__ = [
    "LINK_COLUMNS",
    "MAX_COLUMNS",
    "MAX_LEVELS",
    "KENDALL_MAX_ROWS",
    "METHODS",
    "compute_links",
    "links_code",
    "fast_pearson",
    "fast_spearman",
    "fisher_ci",
    "bh_adjust",
    "strength_label",
    "cramers_v_test",
    "eta_test",
    "kendall_test",
    "norm_mutual_info",
    "mi_bins",
    "measures_for",
    "assemble_links",
]

LINK_COLUMNS = [
    "x",
    "y",
    "x_role",
    "y_role",
    "measure",
    "estimate",
    "ci_low",
    "ci_high",
    "p_value",
    "p_adjusted",
    "n",
    "strength",
    "share_explained",
    "note",
]
METHODS = ("auto", "pearson", "spearman", "kendall")
#: Most columns paired (documented; the most complete ones are kept).
MAX_COLUMNS = 60
#: Nominal columns with more levels than this are not paired.
MAX_LEVELS = 100
#: Kendall's τ-b runs on a seeded sample of this many rows above it.
KENDALL_MAX_ROWS = 100_000


# ---------------------------------------------------------------------------
# Self-contained helpers (their source is embedded in the emitted code).
# ---------------------------------------------------------------------------
def fisher_ci(r, n, kind, confidence):
    """Confidence interval of a correlation by Fisher's z transform.

    SE of z: 1/sqrt(n-3) for Pearson; sqrt((1 + r**2/2)/(n-3)) for Spearman
    (Bonett & Wright 2000); sqrt(0.437/(n-4)) for Kendall (Fieller, Hartley & Pearson 1957).
    """
    r = np.asarray(r, dtype="float64")
    n = np.asarray(n, dtype="float64")
    with np.errstate(all="ignore"):
        if kind == "pearson":
            se = 1.0 / np.sqrt(n - 3.0)
            ok = n > 3
        elif kind == "spearman":
            se = np.sqrt((1.0 + r**2 / 2.0) / (n - 3.0))
            ok = n > 3
        else:
            se = np.sqrt(0.437 / (n - 4.0))
            ok = n > 4
        z = np.arctanh(np.clip(r, -1.0, 1.0))
        q = stats.norm.ppf(0.5 + confidence / 2.0)
        low = np.where(ok, np.tanh(z - q * se), np.nan)
        high = np.where(ok, np.tanh(z + q * se), np.nan)
    return low, high


def corr_p_value(r, n):
    """Two-sided p-value of a correlation from t = r*sqrt((n-2)/(1-r**2)) with n-2 df."""
    r = np.asarray(r, dtype="float64")
    n = np.asarray(n, dtype="float64")
    with np.errstate(all="ignore"):
        t = r * np.sqrt((n - 2.0) / ((1.0 - r) * (1.0 + r)))
        p = 2.0 * stats.t.sf(np.abs(t), n - 2.0)
    return np.where(n > 2, p, np.nan)


def bh_adjust(p):
    """Benjamini-Hochberg (1995) adjusted p-values; NaN entries stay NaN and are not counted."""
    p = np.asarray(p, dtype="float64")
    out = np.full(p.shape, np.nan)
    ok = np.flatnonzero(np.isfinite(p))
    m = ok.size
    if m:
        order = ok[np.argsort(p[ok], kind="stable")]
        scaled = p[order] * m / np.arange(1, m + 1)
        out[order] = np.minimum(np.minimum.accumulate(scaled[::-1])[::-1], 1.0)
    return out


def strength_label(estimate):
    """Plain-words strength of |estimate| (common practice, after Cohen 1988).

    |estimate| is rounded to 9 decimals first, so an estimate that sits on a threshold
    gets the same label whichever exact route (fast ranks or pandas ``corr``) computed it.
    """
    a = np.round(np.abs(np.asarray(estimate, dtype="float64")), 9)
    labels = np.select(
        [a < 0.1, a < 0.3, a < 0.5, a < 0.7, a >= 0.7],
        ["negligible", "weak", "moderate", "strong", "very strong"],
        default="",
    )
    return np.where(np.isnan(a), "", labels).astype(object)


def cramers_v_test(ca, cb, bias_correction=True):
    """Cramér's V (Bergsma 2013 bias correction) and the χ² p-value (no Yates' correction).

    ``ca``, ``cb``: integer codes of the complete rows.  Returns (V, p, sparse) where
    ``sparse`` is True when over 20% of expected counts are below 5.
    """
    ca = np.unique(ca, return_inverse=True)[1]
    cb = np.unique(cb, return_inverse=True)[1]
    n = ca.size
    r, k = int(ca.max()) + 1 if n else 0, int(cb.max()) + 1 if n else 0
    if n < 3 or r < 2 or k < 2:
        return np.nan, np.nan, False
    table = np.bincount(ca * k + cb, minlength=r * k).reshape(r, k).astype("float64")
    expected = table.sum(axis=1, keepdims=True) * table.sum(axis=0, keepdims=True) / n
    chi2 = float(((table - expected) ** 2 / expected).sum())
    p = float(stats.chi2.sf(chi2, (r - 1) * (k - 1)))
    phi2 = chi2 / n
    if bias_correction:
        phi2 = max(0.0, phi2 - (k - 1) * (r - 1) / (n - 1))
        rr = r - (r - 1) ** 2 / (n - 1)
        kk = k - (k - 1) ** 2 / (n - 1)
        denom = min(kk - 1, rr - 1)
    else:
        denom = min(k - 1, r - 1)
    v = float(np.sqrt(phi2 / denom)) if denom > 0 else np.nan
    sparse = bool((expected < 5).mean() > 0.2)
    return v, p, sparse


def eta_test(groups, y):
    """Correlation ratio η of numbers ``y`` across group codes, with the one-way ANOVA p-value."""
    g = np.unique(groups, return_inverse=True)[1]
    n = y.size
    k = int(g.max()) + 1 if n else 0
    if n < 3 or k < 2 or n <= k:
        return np.nan, np.nan
    yc = y - y.mean()
    counts = np.bincount(g, minlength=k).astype("float64")
    means = np.bincount(g, weights=yc, minlength=k) / counts
    ss_total = float(np.sum(yc**2))
    ss_between = float(np.sum(counts * means**2))
    if not ss_total > 0:
        return np.nan, np.nan
    ss_within = np.float64(np.sum((yc - means[g]) ** 2))
    eta2 = min(ss_between / ss_total, 1.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        f = (ss_between / (k - 1)) / (ss_within / (n - k))
    p = float(stats.f.sf(f, k - 1, n - k))
    return float(np.sqrt(eta2)), p


def kendall_test(x, y):
    """Kendall's τ-b and its p-value (scipy, O(n log n)); NaN when a side is constant."""
    if x.size < 3 or np.all(x == x[0]) or np.all(y == y[0]):
        return np.nan, np.nan
    res = stats.kendalltau(x, y)
    return float(res.statistic), float(res.pvalue)


def norm_mutual_info(ca, cb):
    """Mutual information of two code arrays, normalised by sqrt(H(a)·H(b)) (Strehl & Ghosh 2002)."""
    ca = np.unique(ca, return_inverse=True)[1]
    cb = np.unique(cb, return_inverse=True)[1]
    n = ca.size
    if n < 3:
        return np.nan
    r, k = int(ca.max()) + 1, int(cb.max()) + 1
    pxy = np.bincount(ca * k + cb, minlength=r * k).reshape(r, k) / n
    px, py = pxy.sum(axis=1), pxy.sum(axis=0)
    nz = pxy > 0
    mi = float(np.sum(pxy[nz] * np.log(pxy[nz] / np.outer(px, py)[nz])))
    hx = float(-np.sum(px[px > 0] * np.log(px[px > 0])))
    hy = float(-np.sum(py[py > 0] * np.log(py[py > 0])))
    if hx <= 0 or hy <= 0:
        return np.nan
    return min(max(mi / np.sqrt(hx * hy), 0.0), 1.0)


def mi_bins(values, codes, kind):
    """Codes for mutual information: numbers cut into 10 quantile bins, categories as they are."""
    if kind != "numeric":
        return codes
    ranks = pd.Series(values).rank(method="average", pct=True).to_numpy()
    return np.where(np.isnan(ranks), -1, np.ceil(ranks * 10.0) - 1).astype("int64")


def measures_for(kind_a, kind_b, method):
    """The measures reported for a pair of column kinds (numeric / ordinal / nominal)."""
    kinds = {kind_a, kind_b}
    if kinds == {"numeric"}:
        return {"auto": ["pearson", "spearman"]}.get(method, [method])
    if "nominal" in kinds:
        return ["eta"] if "numeric" in kinds else ["cramers_v"]
    return {"auto": ["spearman", "kendall"], "pearson": ["pearson"]}.get(method, [method])


def assemble_links(labels, roles, kinds, num, codes, pearson, spearman, method, confidence,
                   mutual_info, kendall_max_rows, seed):
    """The long links table: one row per pair and measure.

    ``num``: rows × columns float array (numeric and ordinal columns; ±inf as NaN);
    ``codes``: integer codes per column (-1 = missing) for nominal/ordinal use;
    ``pearson``/``spearman``: pairwise-complete correlation matrices of ``num``.
    """
    n_rows = num.shape[0]
    present = ~np.isnan(num)
    kendall_rows = None
    if n_rows > kendall_max_rows:
        rng = np.random.default_rng(seed)
        kendall_rows = np.sort(rng.choice(n_rows, size=kendall_max_rows, replace=False))
    rows = []
    both_rows = []  # (pearson row, spearman row) of the same pair
    k = len(labels)
    for a in range(k):
        for b in range(a + 1, k):
            found = {}
            for measure in measures_for(kinds[a], kinds[b], method):
                found[measure] = len(rows)
                row = {"x": labels[a], "y": labels[b], "x_role": roles[a], "y_role": roles[b],
                       "measure": measure, "estimate": np.nan, "p_value": np.nan, "note": ""}
                if measure in ("pearson", "spearman", "kendall"):
                    both = present[:, a] & present[:, b]
                    row["n"] = int(both.sum())
                    if measure == "pearson":
                        row["estimate"] = float(np.clip(pearson[a, b], -1.0, 1.0))
                    elif measure == "spearman":
                        row["estimate"] = float(np.clip(spearman[a, b], -1.0, 1.0))
                    else:
                        if kendall_rows is not None:
                            both = np.zeros(n_rows, dtype=bool)
                            both[kendall_rows] = present[kendall_rows, a] & present[kendall_rows, b]
                            row["n"] = int(both.sum())
                            row["note"] = (f"Kendall on a seeded sample of {kendall_max_rows:,} rows "
                                           f"(seed {seed})")
                        if row["n"] >= 3:
                            row["estimate"], row["p_value"] = kendall_test(num[both, a], num[both, b])
                elif measure == "cramers_v":
                    both = (codes[a] >= 0) & (codes[b] >= 0)
                    row["n"] = int(both.sum())
                    v, p, sparse = cramers_v_test(codes[a][both], codes[b][both])
                    row["estimate"], row["p_value"] = v, p
                    if sparse:
                        row["note"] = ("over 20% of expected counts are below 5: the χ² p-value "
                                       "is approximate (common practice)")
                elif measure == "eta":
                    g, y = (a, b) if kinds[a] == "nominal" else (b, a)
                    both = (codes[g] >= 0) & present[:, y]
                    row["n"] = int(both.sum())
                    row["estimate"], row["p_value"] = eta_test(codes[g][both], num[both, y])
                if row["n"] < 3:
                    row["estimate"], row["p_value"] = np.nan, np.nan
                    row["note"] = "fewer than 3 complete rows: not computed"
                elif np.isnan(row["estimate"]):
                    row["p_value"] = np.nan
                    row["note"] = "a column is constant over the complete rows: the measure is undefined"
                rows.append(row)
            if "pearson" in found and "spearman" in found:
                both_rows.append((found["pearson"], found["spearman"]))
            if mutual_info:
                ba, bb = mi_bins(num[:, a], codes[a], kinds[a]), mi_bins(num[:, b], codes[b], kinds[b])
                both = (ba >= 0) & (bb >= 0)
                nn = int(both.sum())
                est = norm_mutual_info(ba[both], bb[both]) if nn >= 3 else np.nan
                note = "" if nn >= 3 else "fewer than 3 complete rows: not computed"
                if nn >= 3 and np.isnan(est):
                    note = "a column is constant over the complete rows: the measure is undefined"
                rows.append({"x": labels[a], "y": labels[b], "x_role": roles[a], "y_role": roles[b],
                             "measure": "mutual_info", "estimate": est, "p_value": np.nan,
                             "n": nn, "note": note})
    table = pd.DataFrame(rows, columns=["x", "y", "x_role", "y_role", "measure", "estimate",
                                        "p_value", "n", "note"])
    table["n"] = table["n"].astype("int64")
    est = table["estimate"].to_numpy(dtype="float64")
    ns = table["n"].to_numpy(dtype="float64")
    measure = table["measure"].to_numpy(dtype=object)
    # p-values of Pearson and Spearman from the t approximation (n - 2 df)
    tp = np.isin(measure, ["pearson", "spearman"]) & ~np.isnan(est)
    p = table["p_value"].to_numpy(dtype="float64").copy()
    p[tp] = corr_p_value(est[tp], ns[tp])
    low = np.full(len(table), np.nan)
    high = np.full(len(table), np.nan)
    for kind in ("pearson", "spearman", "kendall"):
        sel = (measure == kind) & ~np.isnan(est)
        low[sel], high[sel] = fisher_ci(est[sel], ns[sel], kind, confidence)
    share = np.where(np.isin(measure, ["pearson", "eta"]), est**2, np.nan)
    # Pearson and Spearman disagreeing by 0.2 or more: say so on both rows
    notes = table["note"].to_numpy(dtype=object).copy()
    for i, j in both_rows:
        if abs(est[i] - est[j]) >= 0.2:
            notes[[i, j]] = ("Pearson and Spearman differ by 0.2 or more: "
                             "a non-linear or outlier-driven link")
    table["note"] = notes
    table["ci_low"], table["ci_high"] = low, high
    table["p_value"] = p
    table["p_adjusted"] = bh_adjust(p)
    table["strength"] = strength_label(est)
    table["share_explained"] = share
    return table[["x", "y", "x_role", "y_role", "measure", "estimate", "ci_low", "ci_high",
                  "p_value", "p_adjusted", "n", "strength", "share_explained", "note"]]


def column_inputs(s, kind):
    """Float values (numeric/ordinal; ±inf → NaN) and integer codes (-1 missing) of one column."""
    if kind == "ordinal" and isinstance(s.dtype, pd.CategoricalDtype):
        codes = s.cat.codes.to_numpy(dtype="int64")
        values = np.where(codes >= 0, codes, np.nan).astype("float64")
        return values, codes
    if kind in ("numeric", "ordinal"):
        if pd.api.types.is_timedelta64_dtype(s.dtype):
            values = s.dt.total_seconds().to_numpy(dtype="float64", na_value=np.nan)
        else:
            values = s.astype("float64").to_numpy(dtype="float64", na_value=np.nan)
        values = np.where(np.isfinite(values), values, np.nan)
        codes = pd.factorize(values, sort=True, use_na_sentinel=True)[0].astype("int64")
        return values, codes
    codes = pd.factorize(s, sort=False, use_na_sentinel=True)[0].astype("int64")
    return np.full(len(s), np.nan), codes


# ---------------------------------------------------------------------------
# Fast pairwise-complete Pearson and Spearman (library side only).
# ---------------------------------------------------------------------------
def _one_blas_thread() -> Any:
    """Limit BLAS to one thread while we run (threadpoolctl, when installed).

    Our matrix products are small and many; a multi-threaded BLAS spends far more time
    starting and spinning its threads than computing (measured 300x slower on a busy
    2-core machine).  Returns a context manager and whether the limit is in force.
    """
    try:
        from threadpoolctl import threadpool_limits

        return threadpool_limits(limits=1, user_api="blas"), True
    except Exception:  # not installed, or no BLAS found
        import contextlib

        return contextlib.nullcontext(), False


def fast_pearson(x: np.ndarray, chunk: int = 16384) -> tuple[np.ndarray, np.ndarray]:
    """Pairwise-complete Pearson matrix and pair counts via masked matrix products.

    Each column is centred on its own mean and scaled by its SD first, so the sums
    stay small and the subtraction of pair means loses no precision to speak of.
    Rows are taken in slices so that no full-size temporary is ever allocated.
    A column constant over a pair's complete rows yields NaN.
    """
    n, k = x.shape
    cnt = np.zeros(k)
    total = np.zeros(k)
    big = np.zeros(k)  # largest |value|: dividing by it first keeps squares from overflowing
    for s0 in range(0, n, chunk):
        b = np.abs(x[s0:s0 + chunk])
        big = np.maximum(big, np.where(np.isnan(b), 0.0, b).max(axis=0, initial=0.0))
    big = np.where(big > 0, big, 1.0)
    for s0 in range(0, n, chunk):
        b = x[s0:s0 + chunk] / big
        ok = ~np.isnan(b)
        cnt += ok.sum(axis=0)
        total += np.where(ok, b, 0.0).sum(axis=0)
    mean = np.where(cnt > 0, total / np.maximum(cnt, 1), 0.0)
    ss = np.zeros(k)
    with np.errstate(under="ignore"):
        for s0 in range(0, n, chunk):
            b = x[s0:s0 + chunk] / big
            d = np.where(np.isnan(b), 0.0, b - mean)
            ss += (d * d).sum(axis=0)
    # stay in the scaled units (values / big): multiplying back would underflow for
    # subnormal magnitudes and overflow near the float limit
    scale = np.sqrt(ss / np.maximum(cnt, 1))
    scale = np.where(scale > 0, scale, 1.0)
    nobs = np.zeros((k, k))
    sx = np.zeros((k, k))
    sxx = np.zeros((k, k))
    sxy = np.zeros((k, k))
    limit, single = _one_blas_thread()

    def mm(a: np.ndarray, b: np.ndarray) -> np.ndarray:
        return a.T @ b if single else np.einsum("ij,ik->jk", a, b)

    with limit:
        for s0 in range(0, n, chunk):
            b = x[s0:s0 + chunk] / big
            pf = (~np.isnan(b)).astype("float64")
            z = np.where(pf > 0, (b - mean) / scale, 0.0)
            nobs += mm(pf, pf)
            sx += mm(z, pf)  # [a, b] = sum of a over rows where b is present
            sxx += mm(z * z, pf)
            sxy += mm(z, z)
    with np.errstate(all="ignore"):
        mx, my = sx / nobs, sx.T / nobs
        cov = sxy - nobs * mx * my
        vx = sxx - nobs * mx**2
        vy = sxx.T - nobs * my**2
        r = cov / np.sqrt(vx * vy)
    # constant over the complete rows (variance lost to rounding counts as constant)
    tiny = 1e-13 * nobs
    r[(vx <= tiny) | (vy <= tiny)] = np.nan
    r[nobs < 2] = np.nan
    np.fill_diagonal(r, np.where(cnt > 1, 1.0, np.nan))
    return np.clip(r, -1.0, 1.0), nobs.astype("int64")


def _order_present(x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Row positions of the non-missing values of ``x`` in ascending order, and those values.

    Sorting packed 64-bit keys (the value's order-preserving bits, high part, with the row
    number in the low bits) is several times faster than ``np.argsort`` on floats; values
    that share the kept high bits but differ below them are detected and the column falls
    back to a plain stable argsort.
    """
    idx = np.flatnonzero(~np.isnan(x))
    v = x[idx]
    na = idx.size
    if na < 2:
        return idx, v
    bits = int(na - 1).bit_length()
    u = v.view(np.uint64)
    key = np.where(u >> np.uint64(63), ~u, u | np.uint64(1 << 63))
    key >>= np.uint64(bits)
    key <<= np.uint64(bits)
    key |= np.arange(na, dtype=np.uint64)
    key.sort()
    local = (key & np.uint64((1 << bits) - 1)).astype(np.intp)
    sv = v[local]
    bad = np.flatnonzero(sv[1:] < sv[:-1])
    if bad.size:  # distinct values sharing the kept high bits: sort those runs by full value
        top = key >> np.uint64(bits)  # sorted, so each run is found by binary search
        lo = np.searchsorted(top, top[bad], side="left")
        hi = np.searchsorted(top, top[bad], side="right")
        lo, first = np.unique(lo, return_index=True)
        hi = hi[first]
        lens = hi - lo
        sel = np.repeat(lo - np.cumsum(np.r_[0, lens[:-1]]), lens) + np.arange(lens.sum())
        run = np.repeat(np.arange(lo.size), lens)
        local[sel] = local[sel][np.lexsort((v[local[sel]], run))]
        sv = v[local]
    return idx[local], sv


def _low_mask(p: np.ndarray) -> np.ndarray:
    """Bit masks with the ``p % 32`` lowest bits set (uint32)."""
    return np.left_shift(np.uint32(1), (p & 31).astype(np.uint32)) - np.uint32(1)


class _Ranked:
    """One column sorted once: average ranks in row order and look-up codes for re-ranking.

    Dropping a set D of rows from the column changes the average rank of row i by
    F(start of i's tie group) and F(end of it), averaged, where F(p) counts the dropped
    rows before sorted position p.  F is read from two small tables (a prefix count per
    block of 32 positions and a 32-bit mask of dropped positions per block), so re-ranking
    needs no sort and touches only cache-sized tables.
    """

    __slots__ = ("n", "nrows", "rank", "blk_s", "low_s", "blk_e", "low_e", "starts", "lens")

    def __init__(self, x: np.ndarray) -> None:
        nrows = x.size
        order, sv = _order_present(x)
        na = order.size
        self.n, self.nrows = na, nrows
        flags = np.empty(na, dtype=bool)
        if na:
            flags[0] = True
            np.not_equal(sv[1:], sv[:-1], out=flags[1:])
        starts = np.flatnonzero(flags)
        srow = np.full(nrows, -1, dtype=np.int32)  # start of the row's tie group (its position without ties)
        if starts.size == na:  # no ties
            srow[order] = np.arange(na, dtype=np.int32)
            self.rank = np.where(srow >= 0, srow + 1.0, 0.0)
            self.starts = self.lens = None
            self.blk_e = self.low_e = None
        else:
            lens = np.diff(np.append(starts, na))
            srow[order] = np.repeat(starts, lens)
            erow = np.full(nrows, -1, dtype=np.int32)
            erow[order] = np.repeat(starts + lens, lens)
            self.rank = np.where(srow >= 0, 0.5 * (srow + erow) + 0.5, 0.0)
            self.starts, self.lens = starts, lens
            self.blk_e, self.low_e = self._codes(erow)
        self.blk_s, self.low_s = self._codes(srow)

    @staticmethod
    def _codes(prow: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Block number and low-bit mask of each row's sorted position (missing: block 0, no bits)."""
        ok = prow >= 0
        blk = np.where(ok, prow >> 5, 0).astype(np.int32)
        low = np.where(ok, _low_mask(np.where(ok, prow, 0)), np.uint32(0))
        return blk, low

    def tables(self, drop_rows: np.ndarray) -> tuple[np.ndarray, np.ndarray, int]:
        """Prefix-count and bit-mask tables of the dropped rows' sorted positions.

        Only tie-group boundaries are ever looked up, so a dropped row inside a tie group
        may take any free place in it.
        """
        keep = self.rank[drop_rows] > 0
        rows = drop_rows[keep]
        dp = np.sort(self.blk_s[rows].astype(np.int64) * 32 + np.bitwise_count(self.low_s[rows]))
        if self.starts is not None and dp.size:
            # rows dropped from one tie group get distinct places inside it (start, start+1, …)
            dp = dp + (np.arange(dp.size) - np.searchsorted(dp, dp, side="left"))
        nb = (self.n >> 5) + 2
        blk = dp >> 5
        fblk = np.zeros(nb, dtype=np.uint64)
        np.cumsum(np.bincount(blk, minlength=nb)[:-1], out=fblk[1:])
        words = np.bincount(blk, weights=np.ldexp(1.0, (dp & 31).astype(np.int32)), minlength=nb)
        table = (fblk << np.uint64(32)) | words.astype(np.uint64)  # prefix count | bit mask
        return table, words.astype(np.uint32), int(dp.size)

    def reranked(self, fblk: np.ndarray, words: np.ndarray, sl: slice, out: np.ndarray,
                 tmp: np.ndarray, out2: np.ndarray) -> np.ndarray:
        """Average ranks of rows ``sl`` (row order) after the drop; 0 for rows missing here.

        Works on a slice of rows into preallocated buffers so the temporaries stay in cache.
        """
        m = out.shape[0] if sl.stop - sl.start >= out.shape[0] else sl.stop - sl.start
        o, t = out[:m], tmp[:m]
        np.take(fblk, self.blk_s[sl], out=t)  # fblk: prefix count << 32 | bit mask
        c = (t >> np.uint64(32)) + np.bitwise_count(t & self.low_s[sl])
        if self.blk_e is not None:
            np.take(fblk, self.blk_e[sl], out=t)
            c += (t >> np.uint64(32)) + np.bitwise_count(t & self.low_e[sl])
            np.subtract(self.rank[sl], c, out=o)
            o += 0.5 * c  # rank − (F(start) + F(end))/2
            return o
        np.subtract(self.rank[sl], c, out=o)
        return o

    def tie_term(self, fblk: np.ndarray, words: np.ndarray) -> float:
        """Σ (t³ − t)/12 over tie groups after the drop (t = rows left in the group)."""
        if self.starts is None:
            return 0.0
        s, e = self.starts, self.starts + self.lens

        def f(p: np.ndarray) -> np.ndarray:
            return (fblk[p >> 5] >> np.uint64(32)).astype(np.int64) + np.bitwise_count(
                words[p >> 5] & _low_mask(p)
            )

        t = (self.lens - (f(e) - f(s))).astype("float64")
        return float(np.sum(t**3 - t)) / 12.0


#: Rows per slice in the fast Spearman's pair loop (temporaries stay in cache).
_CHUNK = 32768
#: Smaller slices when BLAS cannot be held to one thread (its dot goes multi-threaded
#: above about 10,000 elements, which is very slow on a busy machine).
_CHUNK_NO_LIMIT = 8192


def fast_spearman(x: np.ndarray, pairs: list[tuple[int, int]] | None = None,
                  threads: int | None = None) -> np.ndarray:
    """Pairwise-complete Spearman matrix equal to ``DataFrame.corr(method="spearman")``.

    Each column is sorted once (:class:`_Ranked`).  For a pair (a, b) the ranks of ``a``
    over the rows where ``b`` is present are ``a``'s ranks minus the count of its rows
    missing in ``b`` that sort below (ties averaged over the tie group), read from small
    tables — no re-sort.  Pearson is then taken on the two rank vectors in row order (a row
    missing on either side contributes zero), with the rank variances from the closed form
    (m³ − m)/12 − Σ(t³ − t)/12.  Pairs run on up to ``threads`` threads (default: 2 when the
    machine has them; numpy releases the GIL in these loops).
    """
    n, k = x.shape
    workers = threads if threads is not None else min(2, os.cpu_count() or 1)
    pool = None
    if workers > 1 and n >= 50_000 and k > 1:
        from concurrent.futures import ThreadPoolExecutor

        pool = ThreadPoolExecutor(max_workers=workers)
    try:
        return _spearman_pairs(x, pairs, pool)
    finally:
        if pool is not None:
            pool.shutdown()


def _spearman_pairs(x: np.ndarray, pairs: list[tuple[int, int]] | None, pool: Any) -> np.ndarray:
    n, k = x.shape

    def ranked(j: int) -> _Ranked:
        return _Ranked(np.ascontiguousarray(x[:, j], dtype="float64"))

    cols = list(pool.map(ranked, range(k))) if pool is not None else [ranked(j) for j in range(k)]
    limit, single = _one_blas_thread()
    chunk = _CHUNK if single else _CHUNK_NO_LIMIT
    missing = [np.flatnonzero(np.isnan(x[:, j])) for j in range(k)]
    r = np.full((k, k), np.nan)
    todo = pairs if pairs is not None else [(a, b) for a in range(k) for b in range(a + 1, k)]

    def one(ab: tuple[int, int]) -> None:
        a, b = ab
        ca, cb = cols[a], cols[b]
        fa, wa, da = ca.tables(missing[b])
        m = ca.n - da
        if m < 2:
            return
        fb, wb, _ = cb.tables(missing[a])
        size = min(n, chunk)
        bufs = [np.empty(size) for _ in range(4)] + [np.empty(size, dtype=np.uint64)]
        dot = 0.0
        for start in range(0, n, chunk):
            sl = slice(start, min(n, start + chunk))
            ra = ca.reranked(fa, wa, sl, bufs[0], bufs[4], bufs[1])
            rb = cb.reranked(fb, wb, sl, bufs[2], bufs[4], bufs[3])
            dot += float(np.dot(ra, rb))
        mu = 0.5 * (m + 1)
        cross = dot - m * mu * mu
        base = (float(m) ** 3 - m) / 12.0
        va = base - ca.tie_term(fa, wa)
        vb = base - cb.tie_term(fb, wb)
        if va > 0 and vb > 0:
            r[a, b] = r[b, a] = cross / np.sqrt(va * vb)

    with limit:
        if pool is not None and len(todo) > 1:
            list(pool.map(one, todo))
        else:
            for ab in todo:
                one(ab)
    return np.clip(r, -1.0, 1.0)


# ---------------------------------------------------------------------------
# Selection of columns, the table, and its code.
# ---------------------------------------------------------------------------
KINDS = {"continuous": "numeric", "discrete": "numeric", "ordinal": "ordinal",
         "nominal": "nominal", "boolean": "nominal"}


def select_columns(ctx: Context) -> tuple[list[int], list[str], list[str]]:
    """Positions and kinds of the columns paired, plus notes on what was left out."""
    notes: list[str] = []
    roles = ctx.roles
    numeric = set(ctx.numeric_positions())
    chosen, kinds, skipped = [], [], []
    table = ctx.roles_table
    dtypes = list(ctx.frame.dtypes)
    uniques = table["unique"].to_numpy()
    for i, role in enumerate(roles):
        dtype = dtypes[i]
        if role == "constant":
            kind = "numeric" if ctx.is_numeric_coded(i) else "nominal"
        elif role == "ordinal":
            if i in numeric or (isinstance(dtype, pd.CategoricalDtype) and dtype.ordered):
                kind = "ordinal"
            else:
                kind = "nominal"
        elif role in ("continuous", "discrete"):
            kind = "numeric" if i in numeric else "nominal"
        elif role in ("nominal", "boolean"):
            kind = "nominal"
        else:
            skipped.append(i)
            continue
        if kind == "nominal" and int(uniques[i]) > MAX_LEVELS:
            notes.append(f"{ctx.labels[i]!r} has more than {MAX_LEVELS} levels: not paired")
            continue
        if kind == "nominal" and not _hashable(ctx.series(i)):
            continue
        chosen.append(i)
        kinds.append(kind)
    if skipped:
        names = ", ".join(repr(ctx.labels[i]) for i in skipped[:8])
        more = f" and {len(skipped) - 8} more" if len(skipped) > 8 else ""
        notes.append(
            f"Not paired (identifier, text, datetime or empty columns): {names}{more}."
        )
    if len(chosen) > MAX_COLUMNS:
        counts = np.asarray(table["count"].to_numpy()[chosen], dtype="int64")
        keep = np.sort(np.argsort(-counts, kind="stable")[:MAX_COLUMNS])
        notes.append(
            f"{len(chosen)} columns could be paired; only the {MAX_COLUMNS} most complete ones "
            f"(ties in frame order) are analysed pairwise, {MAX_COLUMNS * (MAX_COLUMNS - 1) // 2:,} pairs."
        )
        chosen = [chosen[j] for j in keep]
        kinds = [kinds[j] for j in keep]
    return chosen, kinds, notes


def _hashable(s: pd.Series) -> bool:
    try:
        pd.factorize(s.iloc[:50])
        s.nunique()
        return True
    except TypeError:
        return False


def sample_rows(ctx: Context) -> np.ndarray | None:
    """Row positions of the seeded ``sample`` option (same draw as ``frame.sample``), or None."""
    o = ctx.options
    if o.sample is None or o.sample >= ctx.n_rows:
        return None
    # DataFrame.sample(n, random_state=seed) draws positions exactly like this:
    return pd.Series(np.arange(ctx.n_rows)).sample(n=int(o.sample), random_state=o.seed).to_numpy()


def compute_links(
    ctx: Context, method: str = "auto", mutual_info: bool = False
) -> tuple[pd.DataFrame, dict[str, Any]]:
    """The links table and what was used to build it (for code, charts and notes)."""
    if method not in METHODS:
        raise ValueError(f"method must be one of {METHODS}, got {method!r}")
    positions, kinds, notes = select_columns(ctx)
    rows = sample_rows(ctx)
    frame = ctx.frame if rows is None else ctx.frame.iloc[rows]
    num_cols, codes = [], []
    for i, kind in zip(positions, kinds, strict=True):
        v, c = column_inputs(frame.iloc[:, i], kind)
        num_cols.append(v)
        codes.append(c)
    n = frame.shape[0]
    k = len(positions)
    num = np.column_stack(num_cols) if k else np.empty((n, 0))
    corr_cols = [j for j, kd in enumerate(kinds) if kd in ("numeric", "ordinal")]
    pearson = np.full((k, k), np.nan)
    spearman = np.full((k, k), np.nan)
    need_p = {kinds[a] for a in corr_cols} and (method in ("auto", "pearson"))
    need_s = method in ("auto", "spearman")
    if corr_cols and need_p:
        pear, _ = fast_pearson(num[:, corr_cols])
        pearson[np.ix_(corr_cols, corr_cols)] = pear
    if corr_cols and need_s:
        spear = fast_spearman(num[:, corr_cols])
        spearman[np.ix_(corr_cols, corr_cols)] = spear
    labels = [ctx.labels[i] for i in positions]
    all_roles = ctx.roles
    roles = [all_roles[i] for i in positions]
    table = assemble_links(labels, roles, kinds, num, codes, pearson, spearman, method,
                           ctx.options.confidence, mutual_info, KENDALL_MAX_ROWS, ctx.options.seed)
    info = {"positions": positions, "kinds": kinds, "notes": notes, "sample_rows": rows,
            "corr_cols": corr_cols, "method": method, "mutual_info": mutual_info,
            "need_p": bool(need_p), "need_s": bool(need_s)}
    return table, info


def links_code(ctx: Context, info: dict[str, Any], frame_name: str = "df") -> str:
    """Plain pandas/scipy code rebuilding the links table (pandas ``corr``, BH in numpy)."""
    positions, kinds = info["positions"], info["kinds"]
    o = ctx.options
    lines = []
    if info["sample_rows"] is not None:
        lines.append(f"frame = {frame_name}.sample(n={int(o.sample)}, random_state={o.seed})"
                     "  # the seeded row sample in force")
    else:
        lines.append(f"frame = {frame_name}")
    lines.append("# Columns paired: (position, label, role, kind).  Kinds: numeric, ordinal, nominal.")
    lines.append("columns = [")
    all_roles = ctx.roles
    for i, kind in zip(positions, kinds, strict=True):
        lines.append(f"    ({i}, {lit(ctx.labels[i])}, {lit(all_roles[i])}, {lit(kind)}),")
    lines.append("]")
    body = "\n".join(lines) + "\n"
    corr_lines = ""
    if info["need_p"]:
        corr_lines += ('    pearson[np.ix_(corr_cols, corr_cols)] = values.corr(method="pearson").to_numpy()\n')
    if info["need_s"]:
        corr_lines += ('    # ranks do not depend on scale: Spearman on the values as they are\n'
                       '    spearman[np.ix_(corr_cols, corr_cols)] = '
                       'pd.DataFrame(num[:, corr_cols]).corr(method="spearman").to_numpy()\n')
    body += f"""\
inputs = [column_inputs(frame.iloc[:, i], kind) for i, _, _, kind in columns]
labels = [label for _, label, _, _ in columns]
roles = [role for _, _, role, _ in columns]
kinds = [kind for _, _, _, kind in columns]
num = np.column_stack([v for v, _ in inputs]) if columns else np.empty((len(frame), 0))
codes = [c for _, c in inputs]

# Pairwise-complete correlation matrices from pandas (each column scaled by its largest
# |value| first, which leaves r unchanged and keeps sums of squares from overflowing).
k = len(columns)
pearson = np.full((k, k), np.nan)
spearman = np.full((k, k), np.nan)
corr_cols = [j for j, kind in enumerate(kinds) if kind in ("numeric", "ordinal")]
if corr_cols:
    values = pd.DataFrame(num[:, corr_cols])
    big = values.abs().max()
    values = values / big.where(big > 0, 1.0)
{corr_lines}
links = assemble_links(labels, roles, kinds, num, codes, pearson, spearman,
                       method={info["method"]!r}, confidence={o.confidence!r},
                       mutual_info={info["mutual_info"]!r}, kendall_max_rows={KENDALL_MAX_ROWS!r},
                       seed={o.seed!r})
"""
    return join_blocks(
        header(
            "Links: how pairs of columns move together",
            ctx,
            frame_name,
            extra=[
                f"method={info['method']!r}; pairwise-complete rows; ±inf treated as missing.",
                "χ² tests without Yates' correction; p_adjusted = Benjamini-Hochberg over all rows.",
                "A link is not a cause.",
            ],
        ),
        "# Helpers: measures, intervals, tests and the Benjamini-Hochberg step.",
        function_source(column_inputs),
        function_source(fisher_ci),
        function_source(corr_p_value),
        function_source(bh_adjust),
        function_source(strength_label),
        function_source(cramers_v_test),
        function_source(eta_test),
        function_source(kendall_test),
        function_source(norm_mutual_info),
        function_source(mi_bins),
        function_source(measures_for),
        function_source(assemble_links),
        body,
    )


# ---------------------------------------------------------------------------
# Trend: a straight-line fit of y on x, overall and within segments.
# ---------------------------------------------------------------------------
TREND_COLUMNS = ["slope", "slope_se", "intercept", "intercept_se", "r2", "p_value", "resid_sd",
                 "n", "equation", "reading"]
#: The row of the whole frame in the trend table.
ALL_ROWS = "(all rows)"


def ols_fit(x, y, x_name, y_name):
    """Ordinary least squares of y on x with centred two-pass sums (NIST StRD-grade).

    Returns the trend row: slope and intercept with standard errors, R², the slope's
    two-sided t-test p-value (n-2 df), residual SD, n, the equation and plain words.
    """
    n = int(x.size)
    row = {"slope": np.nan, "slope_se": np.nan, "intercept": np.nan, "intercept_se": np.nan,
           "r2": np.nan, "p_value": np.nan, "resid_sd": np.nan, "n": n, "equation": "",
           "reading": "fewer than 3 complete rows: no fit" if n < 3 else ""}
    if n < 3:
        return row
    xm, ym = x.mean(), y.mean()
    dx, dy = x - xm, y - ym
    sxx, syy = float(dx @ dx), float(dy @ dy)
    if not sxx > 0:
        row["reading"] = f"{x_name} is constant: no slope"
        return row
    slope = float(dx @ dy) / sxx
    resid = dy - slope * dx
    sse = float(resid @ resid)
    s = np.sqrt(sse / (n - 2))
    row["slope"], row["intercept"] = slope, float(ym - slope * xm)
    row["slope_se"] = float(s / np.sqrt(sxx))
    row["intercept_se"] = float(s * np.sqrt(1.0 / n + xm**2 / sxx))
    row["resid_sd"] = float(s)
    row["r2"] = float(1.0 - sse / syy) if syy > 0 else np.nan
    with np.errstate(divide="ignore", invalid="ignore"):
        t = slope / row["slope_se"] if row["slope_se"] > 0 else np.inf * np.sign(slope)
    row["p_value"] = float(2.0 * stats.t.sf(abs(t), n - 2)) if np.isfinite(t) or slope != 0 else np.nan
    sign = "-" if row["intercept"] < 0 else "+"
    row["equation"] = f"{y_name} = {slope:.4g}·{x_name} {sign} {abs(row['intercept']):.4g}"
    if np.isfinite(row["r2"]):
        row["reading"] = (f"R² = {row['r2']:.2f}: {100 * row['r2']:.0f}% of the variation in {y_name} "
                          f"is accounted for by {x_name} in a straight line")
    return row


def trend_table(x, y, groups, x_name, y_name):
    """Trend rows: the whole frame first, then one per segment (``groups`` may be None)."""
    ok = np.isfinite(x) & np.isfinite(y)
    names, rows = ["(all rows)"], [ols_fit(x[ok], y[ok], x_name, y_name)]
    if groups is not None:
        try:
            codes, levels = pd.factorize(pd.Series(groups[ok], dtype=object), sort=True)
        except TypeError:  # labels of mixed types do not sort: keep first-seen order
            codes, levels = pd.factorize(pd.Series(groups[ok], dtype=object), sort=False)
        for j, level in enumerate(levels):
            m = codes == j
            names.append(level)
            rows.append(ols_fit(x[ok][m], y[ok][m], x_name, y_name))
    index = pd.Index(names, name="segment", dtype=object, tupleize_cols=False)
    table = pd.DataFrame(rows, index=index,
                         columns=["slope", "slope_se", "intercept", "intercept_se", "r2", "p_value",
                                  "resid_sd", "n", "equation", "reading"])
    return table.astype({"n": "int64"})


def trend_warnings(x, y, labels, x_name, y_name):
    """Plain-words warnings about one straight-line fit (complete rows only).

    - One point sets the slope: leverage ≥ 0.99.
    - Points that drive the fit: Cook's distance above the median of F(2, n-2) (Cook 1977).
      (The 4/n rule of thumb fires on most clean samples, so it is not used.)
    - Curvature: a quadratic term in x is significant (p < 0.01) and adds at least
      0.01 to R² (our rule; a straight line then misses a bend).
    """
    out = []
    n = x.size
    if n < 4:
        return out
    dx = x - x.mean()
    sxx = float(dx @ dx)
    if not sxx > 0:
        return out
    slope = float(dx @ (y - y.mean())) / sxx
    resid = (y - y.mean()) - slope * dx
    sse = float(resid @ resid)
    s2 = sse / (n - 2)
    h = 1.0 / n + dx**2 / sxx
    top = int(np.argmax(h))
    if h[top] >= 0.99:
        out.append(f"One point alone sets the slope: row {labels[top]!r} has leverage {h[top]:.2f} "
                   f"(its {x_name} is far from every other value); the fit rests on it.")
    elif s2 > 0:
        cook = resid**2 / (2.0 * s2) * h / (1.0 - h) ** 2
        cut = float(stats.f.ppf(0.5, 2, n - 2))
        big = np.flatnonzero(cook > cut)
        if big.size == 1:
            i = int(big[0])
            out.append(f"A single point drives the fit: row {labels[i]!r} has Cook's distance "
                       f"{cook[i]:.2f}, above {cut:.2f} (the median of F(2, n−2); Cook 1977).")
        elif big.size > 1:
            worst = big[np.argsort(-cook[big])][:5]
            out.append(f"{big.size} points drive the fit (Cook's distance above {cut:.2f}, the median "
                       f"of F(2, n−2); Cook 1977), e.g. rows "
                       + ", ".join(repr(labels[i]) for i in worst) + ".")
    # curvature: add a centred quadratic term and test it
    q = dx**2 - np.mean(dx**2)
    design = np.column_stack([np.ones(n), dx, q])
    coef, *_ = np.linalg.lstsq(design, y, rcond=None)
    r2res = y - design @ coef
    sse2 = float(r2res @ r2res)
    syy = float((y - y.mean()) @ (y - y.mean()))
    if n > 3 and syy > 0:
        cov = np.linalg.pinv(design.T @ design)
        s2q = sse2 / (n - 3)
        se_q = np.sqrt(s2q * cov[2, 2])
        with np.errstate(divide="ignore", invalid="ignore"):
            tq = coef[2] / se_q if se_q > 0 else (np.inf if abs(coef[2]) > 0 else 0.0)
        pq = 2.0 * stats.t.sf(abs(tq), n - 3)
        gain = (sse - sse2) / syy
        if pq < 0.01 and gain >= 0.01:
            ptxt = f"p = {pq:.2g}" if pq > 0 else "p < 1e-300"
            out.append(f"The residuals curve: a quadratic term in {x_name} is significant "
                       f"({ptxt}) and lifts R² by {gain:.2f}; a straight line misses a bend.")
    return out


def simpson_warning(table, by_name, x_name, y_name, pooled_slope):
    """A "Simpson's reversal" warning when the overall slope's sign differs from the pooled
    within-segment slope's sign or from most segments' slopes; None when the signs agree."""
    overall = table["slope"].iloc[0]
    seg = table["slope"].iloc[1:].dropna()
    if not np.isfinite(overall) or overall == 0 or seg.empty:
        return None
    s0 = np.sign(overall)
    against = int((np.sign(seg) == -s0).sum())
    pooled_against = np.isfinite(pooled_slope) and np.sign(pooled_slope) == -s0
    if not (pooled_against or against > seg.size / 2):
        return None
    word = "rises" if s0 > 0 else "falls"
    other = "falls" if s0 > 0 else "rises"
    return (f"Simpson's reversal: across all rows {y_name} {word} with {x_name} (slope {overall:.3g}), "
            f"but within segments of {by_name} it {other} (pooled within-segment slope "
            f"{pooled_slope:.3g}; {against} of {seg.size} segments go against the overall slope). "
            f"The overall link comes from differences between segments.")


def pooled_within_slope(x, y, groups):
    """Slope of y on x after removing each segment's means (the pooled within-segment slope)."""
    ok = np.isfinite(x) & np.isfinite(y) & pd.notna(groups)
    if ok.sum() < 3:
        return np.nan
    s = pd.DataFrame({"g": pd.Series(groups[ok]).to_numpy(), "x": x[ok], "y": y[ok]})
    dx = s["x"] - s.groupby("g", sort=False)["x"].transform("mean")
    dy = s["y"] - s.groupby("g", sort=False)["y"].transform("mean")
    sxx = float(dx @ dx)
    return float(dx @ dy) / sxx if sxx > 0 else np.nan
