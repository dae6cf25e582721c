"""Gaps: where values are missing, whether the holes look random, and what filling them costs.

Everything the Gaps table shows is computed by the self-contained plain
pandas/numpy/scipy functions below; the emitted code embeds the very same
functions (:func:`nbeda.stats._codegen.function_source`), so the code hands
back exactly the table.

Documented rules
----------------
*Missing* means ``pandas.isna`` (NaN, None, NaT, pd.NA).  ±inf is not missing
(the Extremes tab reports it); Little's test sets non-finite values aside.

*Disguised missing values* (:func:`disguised_missing`) are reported, never
converted.  A value counts as disguised when

1. text (str/object/string columns, string categories): after stripping
   whitespace and lower-casing it is one of ``""``, ``"na"``, ``"n/a"``,
   ``"null"``, ``"none"``, ``"nan"``, ``"?"``, ``"-"``, ``"missing"``,
   ``"unknown"`` (a blank or whitespace-only string strips to ``""``);
2. numbers: one of the sentinels −99999, −9999, −999, −99, 9999, 99999 lying
   beyond every other value of the column (below its minimum for the negative
   ones, above its maximum for the positive ones);
3. numbers: −1 in a column whose other values are all ≥ 0 and take at least
   three distinct values (a "not recorded" code in a count or measurement);
4. numbers: the column's minimum or maximum when it is repeated (≥ 3 rows and
   ≥ 0.5% of the values) and set apart from the rest: its distance to the
   nearest other value exceeds both 3 × the IQR and the whole range of the
   other values (common practice for placeholder codes such as 999 in an age
   column; the thresholds are our documented choice).

*Missingness patterns* are the distinct rows of the boolean missing matrix,
found with ``np.packbits`` + ``np.unique`` (no row loop), ordered by count
(ties by the packed bit pattern).  ``pattern_count`` of a column is the number
of distinct patterns in which that column is missing.

*MAR hints* (:func:`mar_tests`, :func:`mar_hint`): for each column X with some
but not all values missing, "X is missing" is compared with every other
analysable column Y over the rows where Y is observed:

- numeric Y (continuous, discrete, numeric-coded ordinal): Mann–Whitney U,
  two-sided, normal approximation with tie and continuity correction (the
  same as ``scipy.stats.mannwhitneyu(..., method="asymptotic")``); each Y is
  ranked once and its rank sums reused for every X; effect size
  ``|2·AUC − 1|`` (rank-biserial);
- categorical Y (nominal, boolean, text-coded ordinal; at most 30 levels, the
  rarest lumped into "(other levels)"): χ² test of independence on the
  2 × levels table, ``correction=False`` (no Yates), run only when every
  expected count is ≥ 1 and at most 20% are < 5 (Cochran 1954, common
  practice); effect size Cramér's V;
- both groups need ≥ 5 rows (common practice for the normal approximation).

All p-values of the frame are adjusted together by Benjamini–Hochberg
(``scipy.stats.false_discovery_control``).  The hint of X names, among the
tests with adjusted p < 0.05, the one with the largest effect size; when that
effect is below 0.1 (Cohen's 1988 "small" effect for w and r, common practice)
the hint starts with "weak association:" — significant only through sample size.

*Little's MCAR test* (:func:`little_mcar`; Little 1988, JASA 83:1198–1202):
ML mean and covariance of the numeric columns by EM (:func:`em_normal`), then
d² = Σ_g n_g (ȳ_g − μ̂_g)ᵀ Σ̂_g⁻¹ (ȳ_g − μ̂_g) over the missingness patterns g,
with Σ_g (observed variables per pattern) − p degrees of freedom.  Σ̂ is the ML
estimate (divisor n).  Non-finite values are set aside as missing; rows with
no observed numeric value are left out; beyond 50,000 such rows the test runs
on a seeded random sample of 50,000 of them (the same draw in the emitted
code).  It is *not applicable* (with the reason) when there are fewer than two
numeric columns with varying values, no numeric column has gaps, fewer than
p + 1 complete rows anchor the p means and p(p+1)/2 covariances, the patterns
are too many for the per-pattern EM sums (patterns × p² > 25 million), the EM
covariance is singular (collinear columns), or only one pattern remains.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import stats

__all__ = [
    "GAPS_COLUMNS",
    "PATTERN_COLUMNS",
    "TEST_COLUMNS",
    "FILL_STRATEGIES",
    "as_float",
    "column_kinds",
    "disguised_missing",
    "missing_patterns",
    "pattern_table",
    "mar_tests",
    "mar_hint",
    "gaps_tables",
    "em_normal",
    "little_mcar",
    "fill_column",
    "fill_comparison",
    "nullity_correlation",
]

GAPS_COLUMNS = [
    "role",
    "missing",
    "missing_pct",
    "disguised",
    "disguised_values",
    "effective_missing_pct",
    "pattern_count",
    "mar_hint",
    "mar_with",
    "mar_p_adj",
]
PATTERN_COLUMNS = ["rows", "rows_pct", "gap_columns", "missing_in"]
TEST_COLUMNS = ["x", "y", "test", "statistic", "p_value", "p_adj", "effect", "n_missing", "n_observed", "detail"]
FILL_STRATEGIES = ["drop_rows", "mean", "median", "mode", "group_median", "regression", "hot_deck"]


# --------------------------------------------------------------------------- plain functions
# Each function below is self-contained (only np, pd and scipy's `stats`), because the
# emitted code embeds its source verbatim.


def as_float(s):
    """A numeric-coded column as float64 (NaN for missing; durations in seconds)."""
    if pd.api.types.is_timedelta64_dtype(s.dtype):
        return s.dt.total_seconds().to_numpy(dtype="float64", na_value=np.nan)
    return s.to_numpy(dtype="float64", na_value=np.nan)


def column_kinds(frame, role_list):
    """Split column positions into numeric and categorical ones, from the Roles tab's roles."""
    numeric, categorical = [], []
    dtypes = list(frame.dtypes)
    for j, role in enumerate(role_list):
        dt = dtypes[j]
        if isinstance(dt, pd.CategoricalDtype):
            num_coded = pd.api.types.is_numeric_dtype(dt.categories.dtype) and not pd.api.types.is_bool_dtype(
                dt.categories.dtype
            )
        else:
            num_coded = not pd.api.types.is_bool_dtype(dt) and (
                pd.api.types.is_numeric_dtype(dt) or pd.api.types.is_timedelta64_dtype(dt)
            )
        if role in ("continuous", "discrete", "ordinal") and num_coded:
            numeric.append(j)
        elif role in ("nominal", "boolean", "ordinal"):
            categorical.append(j)
    return numeric, categorical


def disguised_missing(s):
    """Return (mask, found) for values that stand in for a gap; found = [(value, rows), ...].

    Rules (reported, never converted): text tokens such as '', 'N/A', 'null', '?',
    'unknown' (case- and whitespace-insensitive); numeric sentinels -99999, -9999,
    -999, -99, 9999, 99999 beyond every other value; -1 in an otherwise non-negative
    column with at least three other levels; a repeated minimum or maximum set apart
    from the rest by more than 3 IQR and more than the range of the other values.
    """
    n = len(s)
    dt = s.dtype
    none = (np.zeros(n, dtype=bool), [])
    if n == 0 or pd.api.types.is_bool_dtype(dt):
        return none
    tokens = {"", "na", "n/a", "null", "none", "nan", "?", "-", "missing", "unknown"}
    if isinstance(dt, pd.CategoricalDtype):
        cats = list(dt.categories)
        bad = [c for c in cats if isinstance(c, str) and c.strip().lower() in tokens]
        if not bad:
            return none
        codes = s.cat.codes.to_numpy()
        bad_codes = [cats.index(c) for c in bad]
        mask = np.isin(codes, bad_codes)
        found = [(c, int((codes == cats.index(c)).sum())) for c in bad]
        return mask, [f for f in found if f[1] > 0]
    is_number = pd.api.types.is_numeric_dtype(dt) and not pd.api.types.is_complex_dtype(dt)
    if is_number:
        v = s.to_numpy(dtype="float64", na_value=np.nan)
        x = v[np.isfinite(v)]
        if x.size == 0:
            return none
        flagged = []
        sentinels = np.array([-99999.0, -9999.0, -999.0, -99.0, 9999.0, 99999.0])
        rest = x[~np.isin(x, sentinels)]
        for c in sentinels:
            if np.any(x == c):
                if rest.size == 0 or (c < 0 and c < rest.min()) or (c > 0 and c > rest.max()):
                    flagged.append(float(c))
        if np.any(x == -1.0):
            rest = x[(x != -1.0) & ~np.isin(x, flagged)]
            if rest.size and rest.min() >= 0 and np.unique(rest).size >= 3:
                flagged.append(-1.0)
        kept = x[~np.isin(x, flagged)]
        if kept.size >= 10:
            lo, hi = kept.min(), kept.max()
            for c in (lo, hi):
                reps = int(np.sum(kept == c))
                rest = kept[kept != c]
                if reps >= max(3, 0.005 * kept.size) and rest.size >= 10:
                    q1, q3 = np.percentile(rest, [25, 75])
                    gap = rest.min() - c if c == lo else c - rest.max()
                    span = rest.max() - rest.min()
                    if q3 > q1 and gap > 3 * (q3 - q1) and gap > span:
                        flagged.append(float(c))
        if not flagged:
            return none
        flagged = sorted(set(flagged))
        mask = np.isin(v, flagged)
        return mask, [(c, int(np.sum(v == c))) for c in flagged]
    if not (pd.api.types.is_object_dtype(dt) or pd.api.types.is_string_dtype(dt)):
        return none
    try:
        codes, uniques = pd.factorize(s, use_na_sentinel=True)
        uniques = list(uniques)
    except TypeError:  # unhashable cells (lists, dicts): compare the string cells only
        t = s.astype(str).str.strip().str.lower()
        mask = (t.isin(list(tokens)) & s.notna()).to_numpy(dtype=bool)
        vals = s[mask].astype(str)
        found = sorted(vals.value_counts().items(), key=lambda kv: kv[0]) if mask.any() else []
        return mask, [(k, int(c)) for k, c in found]
    bad = [i for i, u in enumerate(uniques) if isinstance(u, str) and u.strip().lower() in tokens]
    if not bad:
        return none
    mask = np.isin(codes, bad)
    counts = np.bincount(codes[mask], minlength=len(uniques))
    found = sorted(((uniques[i], int(counts[i])) for i in bad), key=lambda kv: kv[0])
    return mask, found


def missing_patterns(miss):
    """Distinct rows of a boolean missing matrix: (patterns, counts, pattern id of each row).

    Rows are packed into bits and made unique with np.unique (no loop over rows);
    patterns are ordered by count, largest first (ties by bit pattern).
    """
    n, k = miss.shape
    if n == 0:
        return np.zeros((0, k), dtype=bool), np.zeros(0, dtype=np.int64), np.zeros(0, dtype=np.int64)
    if k == 0:
        return np.zeros((1, 0), dtype=bool), np.array([n], dtype=np.int64), np.zeros(n, dtype=np.int64)
    packed = np.packbits(miss, axis=1)
    if packed.shape[1] <= 8:  # up to 64 columns: one 64-bit key per row, a 1-D unique
        wide = np.zeros((n, 8), dtype=np.uint8)
        wide[:, : packed.shape[1]] = packed
        keys = wide.view(">u8").ravel()
        _, first, inverse, counts = np.unique(keys, return_index=True, return_inverse=True, return_counts=True)
    else:
        _, first, inverse, counts = np.unique(
            packed, axis=0, return_index=True, return_inverse=True, return_counts=True
        )
    order = np.lexsort((np.arange(counts.size), -counts))
    rank = np.empty_like(order)
    rank[order] = np.arange(order.size)
    return miss[first[order]], counts[order].astype(np.int64), rank[np.ravel(inverse)].astype(np.int64)


def pattern_table(patterns, counts, labels, top=20):
    """The top missingness patterns with their row counts (the rest pooled as 'other')."""
    n = int(counts.sum())
    rows, names = [], []
    for g in range(min(top, counts.size)):
        cols = np.flatnonzero(patterns[g])
        text = [str(labels[j]) for j in cols[:12]]
        if cols.size > 12:
            text.append(f"… (+{cols.size - 12} more)")
        rows.append([int(counts[g]), 100.0 * counts[g] / n, int(cols.size), ", ".join(text) or "(none: complete rows)"])
        names.append(str(g + 1))
    if counts.size > top:
        rest = int(counts[top:].sum())
        rows.append([rest, 100.0 * rest / n, pd.NA, f"{counts.size - top} other patterns"])
        names.append("other")
    table = pd.DataFrame(rows, index=pd.Index(names, name="pattern", dtype=object), columns=["rows", "rows_pct", "gap_columns", "missing_in"])
    return table.astype({"rows": "int64", "rows_pct": "float64", "gap_columns": "Int64", "missing_in": object})


def mar_tests(frame, miss, numeric, categorical, min_group=5, max_levels=30):
    """Is 'X is missing' associated with the other columns? One row per test, BH-adjusted.

    Numeric Y: Mann-Whitney U (two-sided, normal approximation with tie and continuity
    correction); each Y is ranked once and its rank sums reused for every X.
    Categorical Y: chi-squared test of independence (correction=False), run only when
    every expected count is >= 1 and at most 20% are < 5 (Cochran's rule).
    """
    n, k = miss.shape
    n_miss = miss.sum(axis=0)
    xs = [j for j in range(k) if 0 < n_miss[j] < n]
    where = {}
    for j in xs:  # rows where X is missing (or observed, whichever is fewer)
        few_missing = n_miss[j] <= n // 2
        where[j] = (few_missing, np.flatnonzero(miss[:, j] if few_missing else ~miss[:, j]))
    recs = []
    for y in numeric if xs else []:
        v = as_float(frame.iloc[:, y])
        ok = ~np.isnan(v)
        m = int(ok.sum())
        if m < 2 * min_group:
            continue
        vo = v[ok]
        order = np.argsort(vo)  # sort once: ranks and ties (tied values share their mean rank)
        sv = vo[order]
        starts = np.r_[0, np.flatnonzero(sv[1:] != sv[:-1]) + 1]
        sizes = np.diff(np.r_[starts, m])
        avg = starts + (sizes + 1) / 2.0
        ranks = np.zeros(n)
        ranks[np.flatnonzero(ok)[order]] = np.repeat(avg, sizes)
        tie = float(np.sum(sizes.astype(np.float64) ** 3 - sizes))
        total = m * (m + 1) / 2.0
        for x in xs:
            if x == y:
                continue
            few_missing, idx = where[x]
            n_in, s_in = int(ok[idx].sum()), float(ranks[idx].sum())
            n1, r1 = (n_in, s_in) if few_missing else (m - n_in, total - s_in)
            n2 = m - n1
            if n1 < min_group or n2 < min_group:
                continue
            u1 = r1 - n1 * (n1 + 1) / 2.0
            sd = np.sqrt(n1 * n2 / 12.0 * ((m + 1) - tie / (m * (m - 1.0))))
            if not sd > 0:
                continue
            z = (max(u1, n1 * n2 - u1) - n1 * n2 / 2.0 - 0.5) / sd
            p = min(1.0, 2.0 * float(stats.norm.sf(z)))
            auc = u1 / (n1 * n2)
            word = "higher" if auc > 0.5 else "lower"
            recs.append([x, y, "Mann-Whitney U", u1, p, abs(2.0 * auc - 1.0), n1, n2, word])
    for y in categorical if xs else []:
        s = frame.iloc[:, y]
        try:
            codes, levels = pd.factorize(s, sort=True, use_na_sentinel=True)
        except TypeError:
            continue
        levels = list(levels)
        ok = codes >= 0
        if len(levels) < 2 or ok.sum() < 2 * min_group:
            continue
        allc = np.bincount(codes[ok], minlength=len(levels))
        if len(levels) > max_levels:  # keep the commonest levels, pool the rest
            keep = np.sort(np.argsort(-allc, kind="mergesort")[: max_levels - 1])
            remap = np.full(len(levels), max_levels - 1)
            remap[keep] = np.arange(keep.size)
            codes = np.where(ok, remap[np.where(ok, codes, 0)], -1)
            levels = [levels[i] for i in keep] + ["(other levels)"]
            allc = np.bincount(codes[ok], minlength=len(levels))
        for x in xs:
            if x == y:
                continue
            few_missing, idx = where[x]
            c = codes[idx]
            c_in = np.bincount(c[c >= 0], minlength=len(levels))
            c1 = c_in if few_missing else allc - c_in
            c0 = allc - c1
            used = allc > 0
            table = np.vstack([c1[used], c0[used]])
            if table.shape[1] < 2 or c1.sum() < min_group or c0.sum() < min_group:
                continue
            expected = np.outer(table.sum(axis=1), table.sum(axis=0)) / table.sum()
            if expected.min() < 1 or np.mean(expected < 5) > 0.2:
                continue
            chi2, p, dof, _ = stats.chi2_contingency(table, correction=False)
            rate = c1 / np.maximum(allc, 1)
            best = int(np.argmax(np.where(used, rate, -1.0)))
            rest_n = allc.sum() - allc[best]
            rest_rate = (c1.sum() - c1[best]) / rest_n if rest_n else 0.0
            detail = (levels[best], float(rate[best]), float(rest_rate))
            v_eff = float(np.sqrt(chi2 / table.sum()))
            recs.append([x, y, "chi-squared", float(chi2), float(p), v_eff, int(c1.sum()), int(c0.sum()), detail])
    tests = pd.DataFrame(recs, columns=["x", "y", "test", "statistic", "p_value", "effect", "n_missing", "n_observed", "detail"])
    tests.insert(5, "p_adj", stats.false_discovery_control(tests["p_value"].to_numpy(dtype=float), method="bh") if len(tests) else np.zeros(0))
    return tests.astype({"x": "int64", "y": "int64", "statistic": "float64", "p_value": "float64", "p_adj": "float64", "effect": "float64"})


def mar_hint(frame, miss, tests, x, alpha=0.05):
    """Plain words for the strongest BH-significant association of 'x is missing' (or why none)."""
    n, n_miss = miss.shape[0], int(miss[:, x].sum())
    if n_miss == 0:
        return "no gaps", "", np.nan
    if n_miss == n:
        return "every value is missing: nothing to compare", "", np.nan
    mine = tests[tests["x"] == x]
    if mine.empty:
        return f"not tested: too few gaps ({n_miss}) or no other column to compare", "", np.nan
    sig = mine[mine["p_adj"] < alpha]
    if sig.empty:
        return (
            f"no association with the {len(mine)} other columns tested (all BH-adjusted p ≥ {alpha}); "
            "consistent with gaps at random, which no test can prove",
            "",
            float(mine["p_adj"].min()),
        )
    best = sig.sort_values(["effect", "p_adj"], ascending=[False, True], kind="mergesort").iloc[0]
    y, p = int(best["y"]), float(best["p_adj"])
    ptext = "BH-adjusted p < 0.001" if p < 0.001 else f"BH-adjusted p = {p:.3f}"
    xl, yl = str(frame.columns[x]), str(frame.columns[y])
    if best["test"] == "chi-squared":
        level, rate, rest = best["detail"]
        ratio = rate / rest if rest > 0 else np.inf
        how = "far more common" if ratio >= 3 else "more common" if ratio >= 1.5 else "somewhat more common"
        shown = repr(level) if isinstance(level, str) else str(level)
        words = (
            f"gaps in {xl} are {how} when {yl} = {shown} "
            f"({100 * rate:.1f}% vs {100 * rest:.1f}% otherwise; {ptext})"
        )
    else:
        v = as_float(frame.iloc[:, y])
        gone = miss[:, x]
        a, b = v[gone & ~np.isnan(v)], v[~gone & ~np.isnan(v)]
        words = (
            f"gaps in {xl} are more common when {yl} is {best['detail']} "
            f"(median {yl} {np.median(a):.4g} where {xl} is missing vs {np.median(b):.4g} where observed; {ptext})"
        )
    if best["effect"] < 0.1:  # below Cohen's (1988) "small" effect: significant only through sample size
        words = "weak association: " + words
    return words, yl, p


def gaps_tables(frame, role_list, top=20):
    """The Gaps table (one row per column), the pattern table and the MAR tests."""
    n, k = frame.shape
    labels = list(frame.columns)
    miss = frame.isna().to_numpy(dtype=bool) if k else np.zeros((n, 0), dtype=bool)
    patterns, counts, _ = missing_patterns(miss)
    numeric, categorical = column_kinds(frame, role_list)
    tests = mar_tests(frame, miss, numeric, categorical)
    rows = []
    for j in range(k):
        mask, found = disguised_missing(frame.iloc[:, j])
        shown = ", ".join(
            (repr(v) if isinstance(v, str) else f"{v:g}" if isinstance(v, float) else str(v)) + f" ({c})"
            for v, c in found
        )
        n_miss, n_disg = int(miss[:, j].sum()), int(mask.sum())
        hint, with_col, p = mar_hint(frame, miss, tests, j)
        rows.append(
            [
                role_list[j],
                n_miss,
                100.0 * n_miss / n if n else np.nan,
                n_disg,
                shown,
                100.0 * (n_miss + n_disg) / n if n else np.nan,
                int(patterns[:, j].sum()) if k else 0,
                hint,
                with_col,
                p,
            ]
        )
    index = pd.Index(labels, name="column", tupleize_cols=False, dtype=object)
    columns = ["role", "missing", "missing_pct", "disguised", "disguised_values", "effective_missing_pct",
               "pattern_count", "mar_hint", "mar_with", "mar_p_adj"]
    table = pd.DataFrame(rows, index=index, columns=columns)
    table = table.astype({"missing": "int64", "disguised": "int64", "pattern_count": "int64", "missing_pct": "float64", "effective_missing_pct": "float64", "mar_p_adj": "float64"})
    return table, pattern_table(patterns, counts, labels, top=top), tests


def em_normal(z, max_iter=1000, tol=1e-9):
    """ML mean and covariance of a multivariate normal from data with gaps (EM algorithm).

    z: rows × p float array, NaN = missing (each row has at least one observed value).
    The E-step works on per-pattern sums (count, sum, cross-products of the observed
    part), batched over all patterns with the same number of observed columns, so an
    iteration costs a few numpy calls per such group whatever the number of rows.
    Returns (mean, cov, iterations, converged, groups); groups maps the number of
    observed columns q to (O, M, n_g, S, Q): observed and missing column indices per
    pattern (G × q, G × (p − q)), rows, sums (G × q) and cross-products (G × q × q).
    """
    n, p = z.shape
    pats, counts, pid = missing_patterns(np.isnan(z))
    order = np.argsort(pid, kind="stable")
    bounds = np.r_[0, np.cumsum(counts)]
    z0 = np.where(np.isnan(z), 0.0, z)[order]  # rows grouped by pattern, gaps as 0
    starts = bounds[:-1]
    sums_all = np.add.reduceat(z0, starts, axis=0)  # G × p sums per pattern
    cross_all = np.empty((counts.size, p, p))  # G × p × p cross-products per pattern
    for i in range(p):
        for j in range(i, p):
            cross_all[:, i, j] = cross_all[:, j, i] = np.add.reduceat(z0[:, i] * z0[:, j], starts)
    nobs = (~pats).sum(axis=1)
    groups = {}
    for q in np.unique(nobs):
        gs = np.flatnonzero(nobs == q)
        o = np.nonzero(~pats[gs])[1].reshape(gs.size, q)  # observed columns, in order
        m = np.nonzero(pats[gs])[1].reshape(gs.size, p - q)  # missing columns
        sums = np.take_along_axis(sums_all[gs], o, axis=1)
        cross = cross_all[gs[:, None, None], o[:, :, None], o[:, None, :]]
        groups[int(q)] = (o, m, counts[gs].astype(np.float64), sums, cross)
    # The observed parts never change: their sums are added once.
    t1_fixed, t2_fixed = np.zeros(p * 1), np.zeros(p * p)
    for q, (o, m, ng, sums, cross) in groups.items():
        t1_fixed += np.bincount(o.ravel(), weights=sums.ravel(), minlength=p)
        t2_fixed += np.bincount((o[:, :, None] * p + o[:, None, :]).ravel(), weights=cross.ravel(), minlength=p * p)
    mu, cov = np.zeros(p), np.eye(p)
    it, converged = 0, False
    for it in range(1, max_iter + 1):
        t1, t2 = t1_fixed.copy(), t2_fixed.copy()
        for q, (o, m, ng, sums, cross) in groups.items():
            if q == p:
                continue
            s_oo = cov[o[:, :, None], o[:, None, :]]
            s_om = cov[o[:, :, None], m[:, None, :]]
            s_mm = cov[m[:, :, None], m[:, None, :]]
            bt = np.linalg.solve(s_oo, s_om)  # G × q × m: regression of missing on observed
            b = bt.transpose(0, 2, 1)
            c = mu[m] - np.einsum("gmq,gq->gm", b, mu[o])
            resid = s_mm - b @ s_om
            bs = np.einsum("gmq,gq->gm", b, sums)
            t1 += np.bincount(m.ravel(), weights=(ng[:, None] * c + bs).ravel(), minlength=p)
            om = sums[:, :, None] * c[:, None, :] + cross @ bt
            t2 += np.bincount((o[:, :, None] * p + m[:, None, :]).ravel(), weights=om.ravel(), minlength=p * p)
            t2 += np.bincount((m[:, :, None] * p + o[:, None, :]).ravel(), weights=om.transpose(0, 2, 1).ravel(), minlength=p * p)
            mm = (
                ng[:, None, None] * (c[:, :, None] * c[:, None, :] + resid)
                + c[:, :, None] * bs[:, None, :]
                + bs[:, :, None] * c[:, None, :]
                + b @ cross @ bt
            )
            t2 += np.bincount((m[:, :, None] * p + m[:, None, :]).ravel(), weights=mm.ravel(), minlength=p * p)
        new_mu = t1 / n
        new_cov = t2.reshape(p, p) / n - np.outer(new_mu, new_mu)
        new_cov = (new_cov + new_cov.T) / 2.0
        delta = max(np.max(np.abs(new_mu - mu)), np.max(np.abs(new_cov - cov)))
        mu, cov = new_mu, new_cov
        if delta < tol:
            converged = True
            break
    return mu, cov, it, converged, groups


def little_mcar(x, names=None, max_rows=50_000, seed=0):
    """Little's (1988) test that the gaps of the numeric matrix x (rows × columns) are MCAR.

    Rows with no observed value are left out; beyond max_rows such rows, the test runs
    on a seeded random sample of max_rows of them (numpy Generator seeded with `seed`).
    Returns a dict with statistic, dof, p_value, patterns, applicable, reason, rows,
    sampled, complete_rows, columns, mean, cov (ML by EM), iterations, converged.
    """
    x = np.asarray(x, dtype=np.float64)
    x = np.where(np.isfinite(x), x, np.nan)
    names = list(range(x.shape[1])) if names is None else list(names)
    out = {
        "statistic": np.nan, "dof": np.nan, "p_value": np.nan, "patterns": 0, "applicable": False,
        "reason": "", "rows": 0, "sampled": False, "complete_rows": 0, "columns": [], "mean": None, "cov": None,
        "iterations": 0, "converged": False,
    }
    obs = ~np.isnan(x)
    keep = []
    if x.shape[0]:
        lo, hi = np.min(np.where(obs, x, np.inf), axis=0), np.max(np.where(obs, x, -np.inf), axis=0)
        keep = [j for j in range(x.shape[1]) if lo[j] < hi[j]]  # at least two distinct values
    x, obs = x[:, keep], obs[:, keep]
    out["columns"] = [names[j] for j in keep]
    p = len(keep)
    if p < 2:
        out["reason"] = "not applicable: the test needs at least two numeric columns with varying values"
        return out
    used = np.flatnonzero(obs.any(axis=1))
    if used.size > max_rows:
        used = np.sort(np.random.default_rng(seed).choice(used, size=max_rows, replace=False))
        out["sampled"] = True
    x, obs = x[used], obs[used]
    out["rows"], out["complete_rows"] = int(x.shape[0]), int(obs.all(axis=1).sum())
    if obs.all():
        out["reason"] = "not applicable: no numeric column has gaps"
        return out
    if out["complete_rows"] < p + 1:
        out["reason"] = (
            f"not applicable: {out['complete_rows']} complete rows are too few to anchor the EM "
            f"estimates of {p} means and covariances (needs at least {p + 1})"
        )
        return out
    n_pat = np.unique(np.packbits(~obs, axis=1), axis=0).shape[0]
    if n_pat * p * p > 25_000_000:
        out["reason"] = f"not applicable: {n_pat:,} distinct patterns are too many for the EM estimates"
        return out
    centre = np.nanmean(x, axis=0)
    scale = np.nanstd(x, axis=0)
    z = (x - centre) / scale
    try:
        mu, cov, it, converged, groups = em_normal(z)
        eig = np.linalg.eigvalsh(cov)
    except np.linalg.LinAlgError:
        eig = np.zeros(1)
    else:
        out["iterations"], out["converged"] = int(it), bool(converged)
    if not eig.min() > 1e-10 * max(eig.max(), 1e-300):
        out["reason"] = "not applicable: the EM covariance is singular (some numeric columns are collinear)"
        return out
    out["mean"] = mu * scale + centre
    out["cov"] = cov * np.outer(scale, scale)
    d2, dof, n_pat = 0.0, -p, 0
    for q, (o, _, ng, sums, _) in groups.items():
        diff = sums / ng[:, None] - mu[o]
        sol = np.linalg.solve(cov[o[:, :, None], o[:, None, :]], diff[:, :, None])[:, :, 0]
        d2 += float(np.sum(ng * np.sum(diff * sol, axis=1)))
        dof += q * o.shape[0]
        n_pat += o.shape[0]
    out["patterns"] = n_pat
    if dof <= 0:
        out["reason"] = "not applicable: only one missingness pattern among the rows with numeric values"
        return out
    out.update(statistic=d2, dof=int(dof), p_value=float(stats.chi2.sf(d2, dof)), applicable=True)
    out["reason"] = "" if converged else "EM stopped before converging: treat the p-value with care"
    return out


def nullity_correlation(miss, labels):
    """Pearson correlation of the 0/1 missing indicators of the columns with some gaps."""
    n = miss.shape[0]
    c = miss.sum(axis=0)
    cols = [j for j in range(miss.shape[1]) if 0 < c[j] < n]
    if not cols:
        return pd.DataFrame(index=pd.Index([], name="column", dtype=object), columns=pd.Index([], dtype=object), dtype=float)
    pats, counts, _ = missing_patterns(miss[:, cols])  # co-missing counts from the distinct patterns
    on = pats.astype(np.float64)
    both = (on.T * counts) @ on
    p = c[cols].astype(np.float64) / n
    cov = both / n - np.outer(p, p)
    sd = np.sqrt(p * (1 - p))
    corr = np.clip(cov / np.outer(sd, sd), -1.0, 1.0)
    idx = pd.Index([labels[j] for j in cols], name="column", tupleize_cols=False, dtype=object)
    return pd.DataFrame(corr, index=idx, columns=pd.Index(list(idx), tupleize_cols=False, dtype=object))


def fill_column(y, strategy, group=None, x=None, seed=0):
    """The float column y after one filling strategy (drop_rows returns the observed values).

    mean/median/mode: one value for every gap (mode: the smallest most frequent value);
    group_median: the median of the row's segment (overall median where the segment has
    none); regression: least-squares line on the predictor x; hot_deck: observed values
    drawn at random with replacement (numpy Generator seeded with `seed`).
    """
    y = pd.Series(y, dtype="float64")
    if strategy == "drop_rows":
        return y.dropna()
    if strategy == "mean":
        return y.fillna(y.mean())
    if strategy == "median":
        return y.fillna(y.median())
    if strategy == "mode":
        return y.fillna(y.mode().min())
    if strategy == "group_median":
        return y.fillna(y.groupby(group, observed=True, dropna=True).transform("median")).fillna(y.median())
    if strategy == "regression":
        x = pd.Series(x, dtype="float64", index=y.index)
        ok = y.notna() & x.notna()
        xm, ym = x[ok].mean(), y[ok].mean()
        slope = ((x[ok] - xm) * (y[ok] - ym)).sum() / ((x[ok] - xm) ** 2).sum()
        return y.fillna(ym + slope * (x - xm))
    if strategy == "hot_deck":
        rng = np.random.default_rng(seed)
        gone = y.isna().to_numpy()
        out = y.to_numpy(copy=True)
        out[gone] = rng.choice(y.dropna().to_numpy(), size=int(gone.sum()), replace=True)
        return pd.Series(out, index=y.index)
    raise ValueError(f"unknown strategy {strategy!r}")


def fill_comparison(y, group=None, x=None, linked=(), seed=0):
    """One row per filling strategy: mean, median, std, change in links and in segment means.

    y: float Series with gaps; group: segment labels (or None); x: regression predictor
    (or None); linked: list of (name, float Series) whose correlation with y is tracked.
    Returns (table, segment_means).
    """
    base = y.dropna()
    rows, seg_rows, names = [], [], []
    base_r = {name: y.corr(v) for name, v in linked}
    base_seg = y.groupby(group, observed=True, dropna=True).mean() if group is not None else None
    for strategy in ["drop_rows", "mean", "median", "mode", "group_median", "regression", "hot_deck"]:
        usable = not (strategy == "group_median" and group is None) and not (strategy == "regression" and x is None)
        f = fill_column(y, strategy, group=group, x=x, seed=seed) if usable else None
        names.append(strategy)
        if f is None:
            rows.append([np.nan] * (6 + 2 * len(linked) + 1))
            seg_rows.append(None)
            continue
        row = [float(len(f)), float(f.notna().sum() - base.size), f.mean(), f.median(), f.std(), 100.0 * (f.std() / base.std() - 1.0)]
        for name, v in linked:
            r = f.corr(v.loc[f.index])
            row += [r, r - base_r[name]]
        if base_seg is not None:
            seg = f.groupby(group.loc[f.index], observed=True, dropna=True).mean().reindex(base_seg.index)
            row.append(float((seg - base_seg).abs().max()))
            seg_rows.append(seg)
        else:
            row.append(np.nan)
            seg_rows.append(None)
        rows.append(row)
    columns = ["rows", "filled", "mean", "median", "std", "std_change_pct"]
    for name, _ in linked:
        columns += [f"r with {name}", f"r change with {name}"]
    columns.append("max_segment_mean_shift")
    table = pd.DataFrame(rows, index=pd.Index(names, name="strategy", dtype=object), columns=columns, dtype="float64")
    segments = None
    if base_seg is not None:
        segments = pd.DataFrame(
            [s if s is not None else pd.Series(np.nan, index=base_seg.index) for s in seg_rows],
            index=pd.Index(names, name="strategy", dtype=object),
        )
        segments.columns = pd.Index([str(c) for c in base_seg.index], name="segment", dtype=object)
    return table, segments
