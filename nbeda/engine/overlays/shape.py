"""Shape on the engine path: counts, skewness, kurtosis and quartile measures over all rows.

Exact (or, on approximate engines, labelled approximate) columns: n, missing,
infinite, skew, skew_se, kurtosis, kurtosis_se, quartile_skew,
mean_minus_median, dagostino_stat/dagostino_p, and the headline normality test
when n > 5000 (then D'Agostino–Pearson K², a function of n, G1 and G2 only).
``reading`` is rebuilt from the all-row skew, kurtosis, quartile skew and
distinct count, keeping the sample's word on piling at a limit and on density
peaks.  Shapiro–Wilk, Anderson–Darling, transforms and modes come from the
seeded sample and say so.

G1 and G2 come from the engine's two-pass sums about the first-pass mean
(n, s1, m2, m3, m4), recentred exactly on the refined mean d = s1/n by the
binomial expansion (Σ(e−d)² = m2 − s1·d, Σ(e−d)³ = m3 − 3d·m2 + 3d²·s1 − n·d³,
Σ(e−d)⁴ = m4 − 4d·m3 + 6d²·m2 − 4d³·s1 + n·d⁴).  Columns whose values are too
large or too small for fourth powers in float64 (largest |x| beyond 2⁶⁰ or below
2⁻⁶⁰) are summed again after scaling by an exact power of two, as the in-memory
path does; every statistic here is scale-free (mean − median is scaled back).
"""

from __future__ import annotations

from typing import Any

import ibis
import numpy as np
import pandas as pd

from nbeda.engine import aggregates
from nbeda.stats._codegen import function_source
from nbeda.stats.shape import SAMPLE_MAX, dagostino_k2, fd_edges, frequency_table, level_row

__all__ = ["scaled_moments", "exact_shape", "level_counts_engine", "exact_levels", "apply", "code"]

_EXACT = ["n", "missing", "infinite", "skew", "skew_se", "kurtosis", "kurtosis_se", "mean_minus_median",
          "dagostino_stat", "dagostino_p"]


def scaled_moments(t, agg, run=None, limit=60):
    """``column_stats`` rows with an exact power-of-two scale for very large or very small values.

    For numeric columns whose largest |finite value| lies beyond 2**limit or below
    2**-limit (or whose moments overflowed), the two passes are run again on
    y = x * 2**-e (e = the binary exponent of that largest value, as numpy.frexp gives):
    mean0, s1, m2, m3, m4 are then sums of y; ``scale_exp`` = e (0 elsewhere).
    """
    run = run or (lambda expr, what: expr.to_pandas())
    out = agg.copy()
    out["scale_exp"] = 0
    for c in out.index:
        a = out.loc[c]
        if a["kind"] != "number" or not a["count"] > 0:
            continue
        amax = max(abs(float(a["min"])), abs(float(a["max"])))
        e = int(np.frexp(amax)[1]) if amax > 0 else 0
        sums_ok = all(np.isfinite(float(a[k])) for k in ("mean0", "s1", "m2", "m3", "m4") if k in a.index)
        if -limit <= e <= limit and sums_ok:
            continue
        x = t[c].cast("float64")
        if t.schema()[c].is_floating():
            x = (x.isnan() | x.isinf()).ifelse(ibis.null("float64"), x)
        y = x * ibis.literal(float(np.ldexp(1.0, -e)), type="float64")
        total = run(t.aggregate(s=y.sum()), f"scaled sum of {c}")["s"].iloc[0]
        mean0 = float(total) / float(a["count"])
        d = y - ibis.literal(mean0, type="float64")
        got = run(t.aggregate(s1=d.sum(), m2=(d * d).sum(), m3=(d * d * d).sum(), m4=(d * d * d * d).sum()),
                  f"scaled moments of {c}").iloc[0]
        out.loc[c, ["mean0", "s1", "m2", "m3", "m4"]] = [mean0] + [float(got[k]) for k in ("s1", "m2", "m3", "m4")]
        out.loc[c, "mean"] = mean0 + float(got["s1"]) / float(a["count"])
        out.loc[c, "scale_exp"] = e
    return out


def exact_shape(shape, agg, quartiles, k2, sample_max=5000):
    """The Shape table with the engine's all-row numbers in place of the sample's.

    ``agg`` is ``scaled_moments(column_stats(...))`` (two-pass sums about the first-pass
    mean, of values scaled by 2**-scale_exp); ``quartiles`` is ``column_quantiles`` at
    0.25, 0.5, 0.75, or None to keep the table's quartile_skew and mean_minus_median
    (an approximate engine, when the sample holds every row); ``k2`` is
    ``dagostino_k2(g1, g2, n)``.  G1 and G2 use the sums
    recentred exactly on the refined mean (binomial expansion with d = s1/n).
    """
    out = shape.copy()
    nan = float("nan")
    a = agg.reindex(out.index)
    q = quartiles.reindex(out.index) if quartiles is not None else None
    cols = {k: [] for k in ("n", "missing", "infinite", "skew", "skew_se", "kurtosis", "kurtosis_se",
                            "quartile_skew", "mean_minus_median", "dagostino_stat", "dagostino_p",
                            "normality_test", "normality_stat", "normality_p", "reading")}
    for c in out.index:
        if a.at[c, "kind"] != "number":  # not a number to the engine (e.g. durations): the sample's row stands
            for k in cols:
                cols[k].append(out.at[c, k])
            continue
        n = int(a.at[c, "count"])
        lo, hi = float(a.at[c, "min"]), float(a.at[c, "max"])
        row = dict.fromkeys(cols, nan)
        row.update(n=n, missing=int(a.at[c, "missing"]), infinite=int(a.at[c, "n_inf"]), reading="")
        row["normality_test"] = out.at[c, "normality_test"]
        row["normality_stat"], row["normality_p"] = out.at[c, "normality_stat"], out.at[c, "normality_p"]
        if n >= 3 and lo < hi:  # as shape_of: no shape for fewer than 3 values or a constant column
            e = int(a.at[c, "scale_exp"])
            s1, m2, m3, m4 = (float(a.at[c, k]) for k in ("s1", "m2", "m3", "m4"))
            d = s1 / n
            c2 = m2 - s1 * d
            c3 = m3 - 3.0 * d * m2 + 3.0 * d * d * s1 - n * d**3
            c4 = m4 - 4.0 * d * m3 + 6.0 * d * d * m2 - 4.0 * d**3 * s1 + n * d**4
            b2, b3, b4 = c2 / n, c3 / n, c4 / n
            g1 = g2 = nan
            if b2 > 0:
                g1 = b3 / b2**1.5 * np.sqrt(n * (n - 1.0)) / (n - 2.0)
                if n >= 4:
                    g2 = ((n + 1.0) * b4 / b2**2 - 3.0 * (n - 1.0)) * (n - 1.0) / ((n - 2.0) * (n - 3.0))
            row["skew"], row["kurtosis"] = float(g1), float(g2)
            row["skew_se"] = float(np.sqrt(6.0 * n * (n - 1) / ((n - 2.0) * (n + 1.0) * (n + 3.0))))
            if n >= 4:
                row["kurtosis_se"] = float(2.0 * row["skew_se"] * np.sqrt((n * n - 1.0) / ((n - 3.0) * (n + 5.0))))
            if q is None:
                row["quartile_skew"] = float(out.at[c, "quartile_skew"])
                row["mean_minus_median"] = float(out.at[c, "mean_minus_median"])
            else:
                q1, q2, q3 = float(q.at[c, 0.25]), float(q.at[c, 0.5]), float(q.at[c, 0.75])
                if q3 > q1:
                    row["quartile_skew"] = float((q3 + q1 - 2.0 * q2) / (q3 - q1))
                mean_y = float(a.at[c, "mean0"]) + d  # the mean of the (scaled) values
                row["mean_minus_median"] = float(np.ldexp(mean_y - np.ldexp(q2, -e), e))
            if n >= 20:
                row["dagostino_stat"], row["dagostino_p"] = k2(g1, g2, n)
            if n > sample_max:  # the headline test: K2 on all values (Shapiro-Wilk above 5000 is on a sample)
                row["normality_test"] = "D'Agostino-Pearson K2"
                row["normality_stat"], row["normality_p"] = row["dagostino_stat"], row["dagostino_p"]
            # The plain-words reading (rules of shape_of): skew, tails and distinct values from all
            # rows; piling at a limit and density peaks as read on the sample.
            words = []
            mmm = row["mean_minus_median"]
            above = "mean above median" if mmm > 0 else ("mean below median" if mmm < 0 else "mean = median")
            if not g1 == g1:
                words.append("skew undefined")
            elif abs(g1) < 0.5:
                words.append("roughly symmetric")
            else:
                side = "right" if g1 > 0 else "left"
                words.append(f"{'strongly' if abs(g1) >= 1 else 'moderately'} {side}-skewed ({above})")
            qs = row["quartile_skew"]
            if g1 == g1 and abs(g1) >= 1 and qs == qs and abs(qs) < 0.05:
                words.append("skew comes from a few extreme values (the quartiles are symmetric)")
            if g2 == g2 and g2 > 1:
                words.append("heavy-tailed")
            elif g2 == g2 and g2 < -1:
                words.append("light-tailed")
            seen = str(out.at[c, "reading"] or "").split("; ")
            words += [w for w in seen if w.startswith(("piled at its", "bimodal", "multimodal"))]
            distinct = int(a.at[c, "distinct"])
            if distinct <= 10:
                words.append(f"few distinct values ({distinct})")
            row["reading"] = "; ".join(words)
        for k in cols:
            cols[k].append(row[k])
    for k, v in cols.items():
        out[k] = pd.Series(v, index=out.index, dtype=out[k].dtype if k in ("n", "missing", "infinite") else None)
    return out


def level_counts_engine(t, names, run=None):
    """Counts of every non-missing level of each column of ``names`` over all rows of ``t``.

    One group-by per column; returns {column: Series of counts indexed by level}, most
    common first, ties in the order of the levels.
    """
    run = run or (lambda expr, what: expr.to_pandas())
    out = {}
    for c in names:
        col = t[c]
        keep = col.notnull()
        if t.schema()[c].is_floating():
            keep = keep & ~col.isnan()
        got = run(t.filter(keep).group_by(value=col).aggregate(count=ibis._.count()), f"level counts of {c}")
        got = got.sort_values(["count", "value"], ascending=[False, True], kind="stable")
        out[c] = pd.Series(got["count"].to_numpy(dtype="int64"), index=pd.Index(list(got["value"]), dtype=object))
    return out


def exact_levels(levels, frequencies, counts, level_row, frequency_table):
    """The levels summary and frequency table rebuilt from all-row level counts.

    ``counts`` is ``level_counts_engine``; ``level_row`` and ``frequency_table`` are the
    Shape rules for one column (given its counts).  Columns without counts (ordered
    levels, kept in their own order) keep their rows.
    """
    rows, parts = [], []
    for c in levels.index:
        if c in counts:
            rows.append(level_row(None, (counts[c], False)))
            f = frequency_table(counts[c], False)
            f.index = pd.Index([c] * len(f), name="column", tupleize_cols=False, dtype=object)
        else:
            rows.append(levels.loc[c].to_dict())
            f = frequencies[frequencies.index == c]
        parts.append(f)
    summary = pd.DataFrame(rows, index=levels.index, columns=levels.columns).astype(levels.dtypes.to_dict())
    return summary, (pd.concat(parts) if parts else frequencies)


def _level_names(run: Any, result: Any) -> list[str]:
    """Unordered level columns whose counts the engine replaces (none when the sample is every row)."""
    levels = getattr(result, "levels", None)
    if run.sample_is_all or levels is None or not len(levels):
        return []
    return [str(c) for c in levels.index if not bool(levels.at[c, "ordered"])]


def _names(result: Any) -> list[str]:
    return [str(c) for c in result.table.index]


def _sample_quantiles(run: Any) -> bool:
    """An approximate engine while the sample holds every row: the sample's quartiles are exact."""
    return not run.exact and run.sample_is_all


def engine_histogram(run: Any, name: str) -> tuple[pd.DataFrame, int, int]:
    """The Shape histogram of one column over all rows: Freedman-Diaconis edges from the engine's
    count, quartiles, min and max (:func:`fd_edges`), counts by one engine group-by."""
    st = run.stats().loc[name]
    n = int(st["count"])
    cols = ["bin_start", "bin_end", "count"]
    if n == 0:
        return pd.DataFrame({c: pd.Series(dtype="float64") for c in cols}), 0, 0
    q = run.quantiles([name]).loc[name]
    edges = fd_edges(n, float(q[0.25]), float(q[0.75]), float(st["min"]), float(st["max"]))
    counts, below, above = aggregates.histogram_counts(run.t, name, edges, run=run.execute)
    frame = pd.DataFrame({"bin_start": edges[:-1], "bin_end": edges[1:], "count": counts})
    return frame, int(below), int(above)


def _attach_histograms(run: Any, result: Any) -> None:
    """Histograms (the tab's charts) over all rows, computed when a chart is first drawn."""
    if run.sample_is_all:
        return
    cache: dict[int, tuple[pd.DataFrame, int, int]] = {}

    def histogram_of(i: int) -> tuple[pd.DataFrame, int, int]:
        if i not in cache:
            cache[i] = engine_histogram(run, str(result.ctx.labels[i]))
        return cache[i]

    result.histogram_of = histogram_of
    result.histogram_note = " — all rows, by the engine"


def apply(run: Any, result: Any) -> dict[str, str]:
    _attach_histograms(run, result)
    level_names = _level_names(run, result)
    if level_names:
        counts = level_counts_engine(run.t, level_names, run=run.execute)
        result.levels, result.frequencies = exact_levels(result.levels, result.frequencies, counts,
                                                         level_row, frequency_table)
        result.notes.append("Levels tables: counts over all rows, by the engine (ties in the order of the "
                            "levels); the dates table and the charts use the sample.")
    names = _names(result)
    if not names:
        return {}
    agg = scaled_moments(run.t, run.stats().loc[names], run=run.execute)
    keep = _sample_quantiles(run)
    quartiles = None if keep else run.quantiles(names)
    result.table = exact_shape(result.table, agg, quartiles, dagostino_k2, sample_max=SAMPLE_MAX)
    labels = {c: run.exact_label() for c in _EXACT}
    labels["quartile_skew"] = run.sample_label() if keep else run.exact_label("quantile")
    labels["mean_minus_median"] = run.sample_label() if keep else run.exact_label("quantile")
    if not run.sample_is_all:
        labels["normality_test"] = labels["normality_stat"] = labels["normality_p"] = (
            f"all rows (D'Agostino-Pearson K2 from n, G1, G2) when n > {SAMPLE_MAX}; else "
            f"Shapiro-Wilk on the {run.sample_label()}"
        )
        labels["reading"] = ("skew, tails and distinct values from all rows; piling at a limit and "
                             f"density peaks from the {run.sample_label()}")
    else:
        for k in ("normality_test", "normality_stat", "normality_p", "reading"):
            labels[k] = run.sample_label()
    return labels


def code(run: Any, result: Any) -> str:
    names = _names(result)
    level_names = _level_names(run, result)
    lines = []
    if level_names:
        lines = [
            "# Level counts of the categorical columns over all rows replace the sample's:",
            "import ibis\n",
            function_source(level_counts_engine),
            function_source(exact_levels),
            f"level_counts = level_counts_engine(t, {level_names!r})",
            "shape_levels, shape_frequencies = exact_levels(shape_levels, shape_frequencies, level_counts,",
            "                                               level_row, frequency_table)",
        ]
    if not names:
        return "\n".join(lines)
    return "\n".join(lines + [
        "# The numbers the engine computes over all rows replace the sample's:",
        "import ibis\n",
        function_source(aggregates.column_stats),
        function_source(aggregates.column_quantiles),
        function_source(scaled_moments),
        function_source(exact_shape),
        f"names = {names!r}",
        f"agg = scaled_moments(t, column_stats(t, names, exact={run.exact!r}))",
        ("quartiles = None  # the engine's quantiles are approximate; the sample (every row) gives exact ones"
         if _sample_quantiles(run) else
         f"quartiles = column_quantiles(t, names, (0.25, 0.5, 0.75), exact={run.exact!r})"),
        f"shape = exact_shape(shape, agg, quartiles, dagostino_k2, sample_max={SAMPLE_MAX})",
    ])
