"""Spread: centre, dispersion and their uncertainty, per column.

Two tables:

* the **numeric table** (``spread``) for continuous, discrete and numeric-coded
  ordinal columns, computed by :func:`spread_table`;
* the **levels table** (``spread_levels``) for nominal, boolean and non-numeric
  ordinal columns, computed by :func:`levels_table`.

Both functions are self-contained plain pandas/numpy/scipy: the emitted code
embeds their source, so the code a user copies computes exactly what is shown.

Definitions (numeric table; ``n`` = number of finite values)
------------------------------------------------------------
* Missing values and ``±inf`` are set aside before anything is computed;
  ``count`` is the number of finite values and ``n_inf`` counts the infinite
  ones. Every statistic (moments *and* order statistics) uses the finite values.
* Moments use a corrected two-pass algorithm on values scaled by a power of two
  (exact), so values near 1e7 that differ in the first decimal keep ≥ 8 correct
  digits in mean and standard deviation, and values near 1e300 do not overflow
  the standard deviation: mean = Σx/n refined by the mean residual,
  var = (Σd² − (Σd)²/n)/(n − 1) with d = x − Σx/n, ``std`` = √var,
  ``sem`` = std/√n, ``sum`` = Σx.
* ``mean_ci_low``/``mean_ci_high``: t-interval mean ± t₍₁₊c₎/₂, ₙ₋₁ · sem at
  confidence c (``Options.confidence``, default 0.95); it assumes the sample
  mean is roughly normal (large n or near-normal data) and independent rows.
* ``median_ci_low``/``median_ci_high``: distribution-free order-statistic
  interval [x₍ₗ₎, x₍ₙ₊₁₋ₗ₎] (1-based order statistics) with
  l = ``binom.ppf((1 − c)/2, n, 0.5)``, i.e. the largest l with
  P(B ≤ l − 1) < (1 − c)/2 for B ~ Binomial(n, ½). Its coverage,
  1 − 2·P(B ≤ l − 1), is therefore ≥ c for any continuous distribution (and
  at least that with ties, the interval being closed). When even [min, max]
  falls short of c (n ≤ 5 at 95%) the interval is left blank.
* ``median``, ``q1``, ``q3``: quantiles with linear interpolation between order
  statistics (pandas' and numpy's default: position (n − 1)·p).
* ``mode``: the most frequent value; ties go to the smallest value; blank when
  no value repeats. ``mode_count`` (extra) is its frequency.
* ``trimmed_mean``: mean after cutting ⌊0.1·n⌋ values from each end (as
  ``scipy.stats.trim_mean(x, 0.1)``).
* ``mad``: raw median absolute deviation from the median; ``mad_scaled``
  (extra) = mad / Φ⁻¹(¾) ≈ 1.4826·mad, comparable to the std for normal data
  (as ``scipy.stats.median_abs_deviation(x, scale='normal')``).
* ``cv`` = std/mean; blank when the mean is 0 (meaningful only for positive,
  ratio-scale measurements).
* ``range`` = max − min, ``iqr`` = q3 − q1.
* ``distinct`` (extra): number of distinct finite values.
* ``quartile_skew`` (extra): Bowley's quartile skewness
  ((q3 − median) − (median − q1))/iqr, in [−1, 1]; blank when iqr = 0.
* ``reading`` (extra): plain words, by rules of common practice:
  - at most 20 distinct values: the mean–median comparison is not read as
    skew (it often points the wrong way on coarse scales — von Hippel 2005,
    "Mean, median, and skew: correcting a textbook rule", J. Stat. Educ. 13(2));
  - no median interval (too few values): "shape hard to read";
  - "mean above median: right skew" when the mean lies above the median's
    confidence interval *and* quartile_skew > 0.05 (mirror rule for left
    skew);
  - mean outside the median's interval, by more than 0.1·mad_scaled, while the
    quartiles are not skewed the same way: "a few extreme values pull the mean";
  - otherwise "mean close to median: no clear skew";
  - "std well above scaled MAD: heavy tails or extreme values" when
    std > 1.5·mad_scaled (≈ 1 for normal data);
  - "MAD is 0: at least half the values are equal" when mad = 0 < std;
  - "min -999 looks like a missing-value code" when the min or max is one of
    ±999, ±9999, ±99999 and lies beyond 3·IQR from the quartiles;
  - "all values equal", "a single value", "no finite values",
    "k infinite value(s) set aside".

Levels table (non-numeric roles)
--------------------------------
``count`` (non-missing), ``unique`` (levels present), ``top`` (most frequent
level as text; ties go to the level met first — category order for
categoricals), ``top_count``, ``top_share`` = top_count/count, ``entropy``
= −Σ pᵢ·log₂ pᵢ in **bits** over the levels present (0 for one level,
log₂(unique) when all levels are equally common), and ``evenness`` (extra) =
entropy/log₂(unique) (1 = all levels equally common; blank for one level).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import stats

from nbeda._context import Context
from nbeda.stats._codegen import float_frame_code, function_source, header, join_blocks, lit

__all__ = [
    "SPREAD_COLUMNS",
    "SPREAD_EXTRA_COLUMNS",
    "LEVELS_COLUMNS",
    "spread_table",
    "spread_reading",
    "levels_table",
    "level_positions",
    "compute_spread",
    "compute_levels",
    "spread_code",
]

SPREAD_COLUMNS = [
    "count", "mean", "mean_ci_low", "mean_ci_high", "median", "median_ci_low", "median_ci_high",
    "mode", "trimmed_mean", "std", "var", "sem", "min", "q1", "q3", "max", "range", "iqr", "mad",
    "cv", "sum",
]
SPREAD_EXTRA_COLUMNS = ["n_inf", "mad_scaled", "mode_count", "distinct", "quartile_skew", "reading"]
LEVELS_COLUMNS = ["count", "unique", "top", "top_count", "top_share", "entropy", "evenness"]


def spread_table(x, confidence=0.95):
    """Spread statistics of every column of the float frame ``x`` (one row per column).

    Missing values and ±inf are set aside (n_inf counts ±inf). Quantiles interpolate linearly
    (pandas' default). mean CI: t-interval. median CI: order statistics [x_(l), x_(n+1-l)] with
    l = binom.ppf((1 - confidence) / 2, n, 1/2), so its coverage is >= confidence for any
    continuous distribution. trimmed_mean cuts floor(0.1·n) values from each end. mad is raw;
    mad_scaled = mad / norm.ppf(0.75) (about 1.4826·mad). mode ties go to the smallest value.
    """
    columns = [
        "count", "mean", "mean_ci_low", "mean_ci_high", "median", "median_ci_low",
        "median_ci_high", "mode", "trimmed_mean", "std", "var", "sem", "min", "q1", "q3", "max",
        "range", "iqr", "mad", "cv", "sum", "n_inf", "mad_scaled", "mode_count", "distinct",
        "quartile_skew",
    ]
    index = pd.Index(list(x.columns), name="column", tupleize_cols=False, dtype=object)
    values = np.array(x.to_numpy(dtype="float64", na_value=np.nan), dtype="float64", order="F")
    n_rows, k = values.shape
    cols = np.arange(k)
    row = np.arange(n_rows, dtype=np.int32 if n_rows < 2**31 - 1 else np.int64)[:, None]
    with np.errstate(all="ignore"):
        # ±inf are set aside (counted in n_inf); every statistic uses the finite values.
        infinite = np.isinf(values)
        n_inf = infinite.sum(axis=0)
        values[infinite] = np.nan
        del infinite
        n = n_rows - np.isnan(values).sum(axis=0)

        # Sort every column once (missing values go last); everything below reuses it.
        s = np.sort(values, axis=0)
        del values
        valid = row < n  # the finite values of each column are its first n sorted rows

        def order_stat(pos):
            """0-based order statistic ``pos`` of each column (NaN where out of range)."""
            pos = np.asarray(pos, dtype="float64")
            ok = (pos >= 0) & (pos < n)
            if n_rows == 0:
                return np.full(k, np.nan)
            return np.where(ok, s[np.where(ok, pos, 0).astype(np.int64), cols], np.nan)

        def lerp(a, b, t):
            """a + (b - a)·t, written as numpy does for its linear quantiles."""
            out = np.where(t >= 0.5, b - (b - a) * (1 - t), a + (b - a) * t)
            return np.where(a == b, a, out)

        def quantile(p):
            """Linear-interpolation quantile (pandas/numpy default): position (n - 1)·p."""
            if n_rows == 0:
                return np.full(k, np.nan)
            h = np.maximum((n - 1) * p, 0)
            lo, hi = np.floor(h).astype(np.int64), np.ceil(h).astype(np.int64)
            return np.where(n > 0, lerp(s[lo, cols], s[hi, cols], h - lo), np.nan)

        def nearest_deviation(kth):
            """The kth smallest |x - median| (0-based) of each column, without a second sort.

            The kth + 1 values nearest the median form a window s[a], ..., s[a + kth] of the
            sorted column, and that deviation is min over a of max(median - s[a], s[a + kth] - median):
            the first term falls and the second rises with a, so a binary search finds the best a.
            """
            lo = np.zeros(k, dtype=np.int64)
            hi = np.maximum(n - 1 - kth, 0)
            while np.any(lo < hi):
                active = lo < hi
                mid = (lo + hi) // 2
                left_farther = (median - s[mid, cols]) > (s[mid + kth, cols] - median)
                lo = np.where(active & left_farther, mid + 1, lo)
                hi = np.where(active & ~left_farther, mid, hi)
            before = np.maximum(lo - 1, 0)
            at_lo = np.maximum(median - s[lo, cols], s[lo + kth, cols] - median)
            at_before = np.maximum(median - s[before, cols], s[before + kth, cols] - median)
            return np.minimum(at_lo, at_before)

        # Order statistics: min, quartiles, median, max.
        minimum = order_stat(np.zeros(k))
        maximum = order_stat(n - 1)
        median = quantile(0.5)
        q1 = quantile(0.25)
        q3 = quantile(0.75)
        iqr = q3 - q1

        # Distribution-free median interval [x_(l), x_(n+1-l)] (1-based), l from Binomial(n, 1/2):
        # coverage 1 - 2·P(B <= l - 1) >= confidence; blank when l < 1 (too few values).
        l = stats.binom.ppf((1 - confidence) / 2, np.maximum(n, 1), 0.5)
        has_ci = (n > 0) & (l >= 1)
        median_ci_low = np.where(has_ci, order_stat(l - 1), np.nan)
        median_ci_high = np.where(has_ci, order_stat(n - l), np.nan)

        # Moments: scale each column by a power of two (exact; avoids overflow near 1e308),
        # then the corrected two-pass algorithm: mean refined by the mean residual and
        # var = (sum(d^2) - sum(d)^2 / n) / (n - 1), with d = x - sum(x) / n.
        max_abs = np.fmax(np.abs(minimum), np.abs(maximum))
        scale = np.ldexp(1.0, np.frexp(np.nan_to_num(max_abs))[1])
        z = np.where(valid, s / scale, 0.0)
        total_z = z.sum(axis=0)
        mean0 = total_z / n

        # 10% trimmed mean: drop floor(0.1·n) values from each end (scipy.stats.trim_mean(x, 0.1)).
        g = np.floor(0.1 * n)
        keep = (row >= g) & (row < n - g)
        trimmed = np.where(n > 0, z.sum(axis=0, where=keep) / (n - 2 * g) * scale, np.nan)
        del keep

        z -= mean0
        z *= valid  # deviations d (0 outside the finite values)
        resid = z.sum(axis=0)
        np.square(z, out=z)
        ss = z.sum(axis=0) - resid * resid / n
        del z
        mean = np.where(n > 0, (mean0 + resid / n) * scale, np.nan)
        std = np.where(n > 1, np.sqrt(np.maximum(ss, 0.0) / (n - 1)) * scale, np.nan)
        var = std * std
        sem = std / np.sqrt(n)
        total = np.where(n > 0, total_z * scale, 0.0)
        cv = np.where(mean != 0, std / mean, np.nan)

        # t-interval for the mean.
        t_crit = stats.t.ppf(0.5 + confidence / 2, np.where(n > 1, n - 1, 1))
        half = np.where(n > 1, t_crit * sem, np.nan)
        mean_ci_low = np.where(half == 0, mean, mean - half)
        mean_ci_high = np.where(half == 0, mean, mean + half)

        # Mode: longest run of equal values in the sorted column; the first such run is the
        # smallest most frequent value. (Missing values at the end are runs of length 1.)
        if n_rows:
            starts = np.ones(s.shape, dtype=bool)
            np.not_equal(s[1:], s[:-1], out=starts[1:])
            distinct = (starts & valid).sum(axis=0)
            run = np.where(starts, row, 0)
            del starts
            np.maximum.accumulate(run, axis=0, out=run)
            np.subtract(row + np.int32(1), run, out=run)  # run length so far at each sorted row
            mode_pos = run.argmax(axis=0)
            mode_count = np.where(n > 0, run[mode_pos, cols], 0)
            del run
            mode = np.where((mode_count > 1) | (n == 1), s[mode_pos, cols], np.nan)
        else:
            distinct = mode_count = np.zeros(k, dtype=np.int64)
            mode = np.full(k, np.nan)

        # Median absolute deviation from the median (raw), and scaled to match the std for normal data.
        # (the median of the n deviations, interpolated like the median itself).
        if n_rows:
            h = np.maximum((n - 1) * 0.5, 0)
            kth_lo, kth_hi = np.floor(h).astype(np.int64), np.ceil(h).astype(np.int64)
            mad = np.where(n > 0, lerp(nearest_deviation(kth_lo), nearest_deviation(kth_hi), h - kth_lo), np.nan)
        else:
            mad = np.full(k, np.nan)
        mad_scaled = mad / stats.norm.ppf(0.75)

        # Quartile (Bowley) skewness: (q3 + q1 - 2·median) / iqr, in [-1, 1]; blank when iqr is 0.
        quartile_skew = np.where(iqr > 0, ((q3 - median) - (median - q1)) / iqr, np.nan)
        value_range = maximum - minimum

    table = pd.DataFrame(
        {
            "count": n.astype("int64"), "mean": mean, "mean_ci_low": mean_ci_low,
            "mean_ci_high": mean_ci_high, "median": median, "median_ci_low": median_ci_low,
            "median_ci_high": median_ci_high, "mode": mode, "trimmed_mean": trimmed, "std": std,
            "var": var, "sem": sem, "min": minimum, "q1": q1, "q3": q3, "max": maximum,
            "range": value_range, "iqr": iqr, "mad": mad, "cv": cv, "sum": total,
            "n_inf": n_inf.astype("int64"), "mad_scaled": mad_scaled,
            "mode_count": mode_count.astype("int64"),
            "distinct": distinct.astype("int64"), "quartile_skew": quartile_skew,
        },
        index=index,
        columns=columns,
    )
    table["reading"] = spread_reading(table)
    return table


def spread_reading(table):
    """Plain-words reading of each row of a spread table (rules of common practice)."""
    words = []
    for r in table.to_dict("records"):  # one entry per column of data, not per row
        parts = []
        if r["count"] == 0:
            parts.append("no finite values")
        elif r["count"] == 1 or r["std"] == 0:
            parts.append("all values equal" if r["count"] > 1 else "a single value")
        else:
            gap = r["mean"] - r["median"]
            big = abs(gap) > 0.1 * r["mad_scaled"]
            bowley = r["quartile_skew"]
            if r["distinct"] <= 20:
                parts.append(
                    f"{r['distinct']} distinct values: on so coarse a scale mean vs median "
                    "is not read as skew"
                )
            elif not r["median_ci_low"] == r["median_ci_low"]:  # no median interval (NaN)
                parts.append("few values: shape hard to read")
            elif r["mean"] > r["median_ci_high"] and bowley > 0.05:
                parts.append("mean above median: right skew")
            elif r["mean"] < r["median_ci_low"] and bowley < -0.05:
                parts.append("mean below median: left skew")
            elif big and (r["mean"] > r["median_ci_high"] or r["mean"] < r["median_ci_low"]):
                side, pull = ("above", "up") if gap > 0 else ("below", "down")
                parts.append(
                    f"mean {side} median but the quartiles are not skewed that way: "
                    f"a few extreme values pull the mean {pull}"
                )
            else:
                parts.append("mean close to median: no clear skew")
            if r["mad"] == 0:
                parts.append("MAD is 0: at least half the values are equal")
            elif r["std"] > 1.5 * r["mad_scaled"]:
                parts.append("std well above scaled MAD: heavy tails or extreme values")
        for end in ("min", "max"):
            # A classic missing-value code far outside the quartiles (beyond 3·IQR).
            v = r[end]
            far = v < r["q1"] - 3 * r["iqr"] or v > r["q3"] + 3 * r["iqr"]
            if r["count"] > 1 and far and v in (-99999.0, -9999.0, -999.0, 999.0, 9999.0, 99999.0):
                parts.append(f"{end} {v:g} looks like a missing-value code")
        if r["n_inf"] > 0:
            parts.append(f"{r['n_inf']} infinite value(s) set aside")
        words.append("; ".join(parts))
    return pd.Series(words, index=table.index, dtype=object)


def levels_table(cols):
    """Level summary of every column of ``cols`` (nominal, boolean, non-numeric ordinal)."""
    rows = []
    for j in range(cols.shape[1]):
        s = cols.iloc[:, j]
        counts = s.value_counts(sort=False, dropna=True)
        counts = counts[counts > 0]  # categoricals list unused categories with 0
        total = int(counts.sum())
        if total == 0:
            rows.append({"count": 0, "unique": 0, "top": "", "top_count": 0,
                         "top_share": np.nan, "entropy": np.nan, "evenness": np.nan})
            continue
        freq = counts.to_numpy(dtype="int64")
        top = int(np.argmax(freq))  # ties: the level met first
        p = freq / total
        entropy = float(-(p * np.log2(p)).sum()) + 0.0  # bits
        rows.append({
            "count": total,
            "unique": int(len(freq)),
            "top": str(counts.index[top]),
            "top_count": int(freq[top]),
            "top_share": freq[top] / total,
            "entropy": entropy,
            "evenness": entropy / np.log2(len(freq)) if len(freq) > 1 else np.nan,
        })
    index = pd.Index(list(cols.columns), name="column", tupleize_cols=False, dtype=object)
    columns = ["count", "unique", "top", "top_count", "top_share", "entropy", "evenness"]
    table = pd.DataFrame(rows, index=index, columns=columns)
    return table.astype({"count": "int64", "unique": "int64", "top": object, "top_count": "int64",
                         "top_share": "float64", "entropy": "float64", "evenness": "float64"})


# ---------------------------------------------------------------------------- glue
def level_positions(ctx: Context) -> list[int]:
    """Columns summarised by level counts: nominal, boolean and non-numeric ordinal."""
    numeric = set(ctx.numeric_positions())
    return [i for i in ctx.with_role("nominal", "boolean", "ordinal") if i not in numeric]


def compute_spread(ctx: Context) -> pd.DataFrame:
    """The numeric Spread table for ``ctx`` (index ``column``)."""
    positions = ctx.numeric_positions()
    x = pd.DataFrame(ctx.float_frame(positions), columns=ctx.index_for(positions), copy=False)
    if not positions:
        x = pd.DataFrame(index=ctx.frame.index)
    table = spread_table(x, ctx.options.confidence)
    table.index = ctx.index_for(positions)
    return table


def compute_levels(ctx: Context) -> pd.DataFrame:
    """The levels table (non-numeric roles) for ``ctx``."""
    positions = level_positions(ctx)
    table = levels_table(ctx.frame.iloc[:, positions])
    table.index = ctx.index_for(positions)
    return table


def _columns_code(ctx: Context, positions: list[int], frame_name: str, var: str) -> str:
    if ctx.unique_labels:
        labels = "[" + ", ".join(lit(ctx.labels[i]) for i in positions) + "]"
        return f"{var} = {frame_name}[{labels}]\n"
    shown = ", ".join(lit(ctx.labels[i]) for i in positions)
    return f"# columns (by position, the labels repeat or are nested): {shown}\n{var} = {frame_name}.iloc[:, {positions!r}]\n"


def spread_code(ctx: Context, frame_name: str = "df") -> str:
    """Plain pandas/numpy/scipy code that rebuilds ``spread`` and ``spread_levels``."""
    num = ctx.numeric_positions()
    lev = level_positions(ctx)
    conf = ctx.options.confidence
    numeric_block = (
        "# Numeric columns (continuous, discrete, numeric-coded ordinal) as float64;\n"
        "# missing values become NaN and durations are counted in seconds.\n"
        + float_frame_code(ctx, num, frame_name, var="spread_values")
        + f"spread = spread_table(spread_values, confidence={conf!r})\n"
    )
    levels_block = (
        "# Nominal, boolean and non-numeric ordinal columns: level counts and entropy (bits).\n"
        + _columns_code(ctx, lev, frame_name, var="spread_columns")
        + "spread_levels = levels_table(spread_columns)\n"
    )
    return join_blocks(
        header(
            "Spread: centre, dispersion and their uncertainty",
            ctx,
            frame_name,
            extra=[
                "Every row is used (no sampling). Missing values and ±inf are set aside; n_inf counts ±inf.",
                f"Mean CI: t-interval; median CI: distribution-free order statistics; level {conf!r}.",
            ],
        ),
        "# Numeric summary, vectorised over columns (each column sorted once).",
        function_source(spread_table),
        "# Plain-words reading of each numeric column (rules of common practice).",
        function_source(spread_reading),
        "# Level summary of each non-numeric column.",
        function_source(levels_table),
        numeric_block,
        levels_block,
    )
