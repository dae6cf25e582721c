"""The aggregate layer, written once against ibis (runs on DuckDB, Spark or any ibis backend).

Every function here is self-contained (it uses only ``ibis``, ``numpy`` and
``pandas`` names bound at module level of the emitted code) so the code a
report hands back embeds exactly these functions: the numbers a user re-runs
are computed by the same expressions.

Conventions (the same as the in-memory path):

* numeric columns are analysed as float64; NaN counts as missing; ±inf are not
  missing but are set aside from every statistic (``n_inf`` counts them);
* moments are two-pass: the mean first, then sums of powers of deviations from
  it (no one-pass "sum of squares" formula, which loses digits);
* exact quantiles interpolate linearly between order statistics (pandas'
  default), computed one column at a time (all columns in one query can exhaust
  memory); approximate ones are small sketches, all columns in one query;
* float literals are typed float64 and ±inf found by comparison (on Spark an
  untyped float literal is DECIMAL and ibis' ``isinf()`` compiles to FALSE);
* distinct counts are exact (``COUNT(DISTINCT)``) or, when ``exact=False``,
  approximate (HyperLogLog, a few per cent error).
"""

from __future__ import annotations


import ibis
import pandas as pd

__all__ = ["column_kinds", "column_stats", "column_quantiles", "value_counts", "histogram_counts",
           "sample_rows"]


def column_kinds(t):
    """Kind of every column of ibis table ``t``.

    'number', 'boolean', 'datetime', 'other' (strings and other scalars), or
    'unsupported' for values an engine cannot aggregate portably (arrays, maps,
    structs, binary, JSON, geometries, unknown types): those are only counted.
    """
    kinds = {}
    for name, dtype in t.schema().items():
        if dtype.is_boolean():
            kinds[name] = "boolean"
        elif dtype.is_numeric():
            kinds[name] = "number"
        elif dtype.is_timestamp() or dtype.is_date():
            kinds[name] = "datetime"
        elif (dtype.is_nested() or dtype.is_binary() or dtype.is_json() or dtype.is_geospatial()
              or dtype.is_unknown()):
            kinds[name] = "unsupported"
        else:
            kinds[name] = "other"
    return kinds


def column_stats(t, names, exact=True, run=None):
    """Counts, distinct values, min/max and two-pass moments of the columns ``names`` of ``t``.

    One row per column: rows, count (non-missing; finite for numbers), missing,
    n_inf (= n_pinf + n_ninf), distinct (finite values for numbers, else non-missing
    values), min, max, sum, mean,
    s1 = Σ(x − mean₀), m2, m3, m4 = Σ(x − mean₀)^k over finite values (mean₀ the
    first-pass mean; the refined mean is mean₀ + s1/count). ``run`` executes an
    expression (default: ``expr.to_pandas()``).

    Columns of kind 'unsupported' (arrays, maps, structs, binary, ...) are only
    counted (rows, count, missing); their ``note`` says so. Approximate distinct
    counts use HyperLogLog (Spark's relative standard deviation is 5%; a finer
    one makes its aggregation buffers, and the query, many times slower).
    """
    run = run or (lambda expr, what: expr.to_pandas())
    kinds = column_kinds(t)
    schema = t.schema()
    numbers = [c for c in names if kinds[c] == "number"]
    # explicit comparisons: ibis' isinf() compiles to FALSE on Spark
    inf = ibis.literal(float("inf"), type="float64")

    def finite(c):
        x = t[c].cast("float64")
        if schema[c].is_floating():
            x = (x.isnan() | (x == inf) | (x == -inf)).ifelse(ibis.null("float64"), x)
        return x

    aggs = {"rows": t.count()}
    # exact distinct counts get a query of their own: DuckDB runs a query mixing
    # COUNT(DISTINCT ...) with plain aggregates about 2.5 times slower than the two apart
    distinct = {} if exact else aggs
    for i, c in enumerate(names):
        col = t[c]
        present = col.notnull()
        if kinds[c] == "unsupported":
            aggs[f"present_{i}"] = present.sum()
            continue
        if kinds[c] == "number" and schema[c].is_floating():
            present = present & ~col.isnan()
            aggs[f"n_pinf_{i}"] = (present & (col == inf)).sum()
            aggs[f"n_ninf_{i}"] = (present & (col == -inf)).sum()
        aggs[f"present_{i}"] = present.sum()
        kept = finite(c) if kinds[c] == "number" else present.ifelse(col, ibis.null(col.type()))
        distinct[f"distinct_{i}"] = kept.nunique() if exact else kept.approx_nunique()
        if kinds[c] == "number":
            x = finite(c)
            aggs[f"sum_{i}"] = x.sum()
            aggs[f"min_{i}"] = x.min()
            aggs[f"max_{i}"] = x.max()
        elif kinds[c] == "datetime":
            aggs[f"min_{i}"] = col.min()
            aggs[f"max_{i}"] = col.max()
    first = run(t.aggregate(**aggs), "counts, min and max" if exact else "counts, distinct values, min and max")
    first = first.iloc[0].to_dict()
    if exact and distinct:
        first.update(run(t.aggregate(**distinct), "distinct values").iloc[0].to_dict())
    rows = int(first["rows"])
    out = {}
    for i, c in enumerate(names):
        present = int(first[f"present_{i}"] or 0)
        n_pinf = int(first.get(f"n_pinf_{i}", 0) or 0)
        n_ninf = int(first.get(f"n_ninf_{i}", 0) or 0)
        n_inf = n_pinf + n_ninf
        rec = {"kind": kinds[c], "rows": rows, "missing": rows - present, "n_inf": n_inf,
               "n_pinf": n_pinf, "n_ninf": n_ninf, "count": present - n_inf, "note": ""}
        if kinds[c] == "unsupported":
            rec["distinct"] = float("nan")
            rec["note"] = f"type {schema[c]} cannot be aggregated by the engine: counted only"
            out[c] = rec
            continue
        rec["distinct"] = int(first[f"distinct_{i}"] or 0)
        if kinds[c] in ("number", "datetime"):
            rec["min"], rec["max"] = first[f"min_{i}"], first[f"max_{i}"]
        if kinds[c] == "number":
            total = first[f"sum_{i}"]
            rec["sum"] = float(total) if total is not None and total == total else 0.0
            rec["mean0"] = rec["sum"] / rec["count"] if rec["count"] else float("nan")
        out[c] = rec
    deviations = {}
    for i, c in enumerate(numbers):
        m = out[c]["mean0"]
        if m == m:
            deviations[f"d_{i}"] = finite(c) - ibis.literal(float(m), type="float64")
    if deviations:
        # each deviation computed once (a projection), then its powers summed: a short query
        dev = t.select(**deviations)
        second = {}
        for key in deviations:
            d, i = dev[key], key[2:]
            second[f"s1_{i}"] = d.sum()
            second[f"m2_{i}"] = (d * d).sum()
            second[f"m3_{i}"] = (d * d * d).sum()
            second[f"m4_{i}"] = (d * d * d * d).sum()
        moments = run(dev.aggregate(**second), "moments (second pass)").iloc[0]
        for i, c in enumerate(numbers):
            if f"d_{i}" in deviations:
                for k in ("s1", "m2", "m3", "m4"):
                    out[c][k] = float(moments[f"{k}_{i}"])
    table = pd.DataFrame.from_dict(out, orient="index")
    table.index = pd.Index(list(table.index), name="column", dtype=object)
    if "s1" in table:
        table["mean"] = table["mean0"] + table["s1"] / table["count"]
    return table


def column_quantiles(t, names, probs=(0.25, 0.5, 0.75), exact=True, run=None):
    """Quantiles of finite values; one row per column, one column per probability.

    Exact quantiles interpolate linearly between order statistics (pandas'
    default) and take one query per column (all columns in one query can exhaust
    memory). Approximate quantiles (``exact=False``: DuckDB's t-digest, Spark's
    percentile_approx with rank error ≈ 1e-4) are one small sketch per column,
    so all columns share one query.
    """
    run = run or (lambda expr, what: expr.to_pandas())
    schema = t.schema()
    inf = ibis.literal(float("inf"), type="float64")

    def finite(c):
        x = t[c].cast("float64")
        if schema[c].is_floating():  # explicit comparisons: ibis' isinf() compiles to FALSE on Spark
            x = (x.isnan() | (x == inf) | (x == -inf)).ifelse(ibis.null("float64"), x)
        return x

    def value(v):
        return float(v) if v is not None and v == v else float("nan")

    groups = [[c] for c in names] if exact else ([list(names)] if len(names) else [])
    rows = {}
    for group in groups:
        aggs = {}
        for i, c in enumerate(group):
            x = finite(c)
            # all probabilities in one aggregate: one sorted copy of the column (or one
            # sketch) answers them all; one aggregate per probability would sort it again each time
            ps = [float(p) for p in probs]
            aggs[f"q{i}"] = x.quantile(ps) if exact else x.approx_quantile(ps)
        what = f"quantiles of {group[0]}" if exact else f"approximate quantiles of {len(group)} columns"
        got = run(t.aggregate(**aggs), what).iloc[0]
        for i, c in enumerate(group):
            qs = got[f"q{i}"]
            rows[c] = [value(v) for v in qs] if qs is not None and len(qs) else [float("nan")] * len(probs)
    table = pd.DataFrame.from_dict(rows, orient="index", columns=[float(p) for p in probs])
    table = table.reindex(list(names))
    table.index = pd.Index(list(names), name="column", dtype=object)
    return table


def value_counts(t, name, run=None):
    """Counts of every non-missing value of one column (a group-by; sorted by count, then value)."""
    run = run or (lambda expr, what: expr.to_pandas())
    col = t[name]
    expr = t.filter(col.notnull()).group_by(value=col).aggregate(count=ibis._.count())
    got = run(expr, f"value counts of {name}")
    return got.sort_values(["count", "value"], ascending=[False, True], kind="stable").reset_index(drop=True)


def histogram_counts(t, name, edges, run=None):
    """Counts of the finite values of one column in the bins of ``edges`` (numpy.histogram's bins:
    [e0, e1), ..., [e(k-1), ek], the last closed), plus the counts below e0 and above ek.

    One group-by over the bucket index; returns (counts as int64 array of k, below, above).
    """
    run = run or (lambda expr, what: expr.to_pandas())
    inf = ibis.literal(float("inf"), type="float64")
    x = t[name].cast("float64")
    if t.schema()[name].is_floating():
        x = (x.isnan() | (x == inf) | (x == -inf)).ifelse(ibis.null("float64"), x)
    edges = [float(e) for e in edges]
    k = len(edges) - 1
    b = x.bucket(edges, closed="left", close_extreme=True, include_under=True, include_over=True)
    got = run(t.filter(x.notnull()).group_by(b=b).aggregate(n=ibis._.count()), f"histogram of {name}")
    counts = [0] * (k + 2)  # under, the k bins, over
    for bucket, count in zip(got["b"], got["n"]):
        if bucket == bucket and bucket is not None:
            counts[int(bucket)] += int(count)
    import numpy

    return numpy.asarray(counts[1:k + 1], dtype="int64"), counts[0], counts[k + 1]


def sample_rows(t, n_rows, n, seed=0, run=None):
    """A seeded random sample of about ``n`` rows, as pandas (all rows when ``n_rows <= n``).

    Each row is kept with probability n / n_rows (Bernoulli), so every part of the
    table is equally likely to be drawn; the size varies by about ±2·√n (a cap at
    1.1·n only guards against a backend that ignores the fraction). On Spark the
    sample is the DataFrame's own seeded ``sample(fraction, seed)`` (SQL's
    ``TABLESAMPLE (n ROWS)`` takes the first rows, not a random sample).

    Integer columns with missing values come back as nullable ``Int64`` and
    booleans with missing values as ``boolean``, as pandas would hold them.
    """
    run = run or (lambda expr, what: expr.to_pandas())
    cap = int(1.1 * n) + 10
    if n_rows <= n:
        expr = t
    elif ibis.get_backend(t).name == "pyspark":
        con = ibis.get_backend(t)
        sampled = con.raw_sql(str(ibis.to_sql(t))).sample(withReplacement=False, fraction=n / n_rows,
                                                          seed=int(seed))
        view = f"eda_sample_{id(sampled):x}"
        sampled.limit(cap).createOrReplaceTempView(view)
        expr = con.table(view)
    else:
        expr = t.sample(n / n_rows, seed=seed).limit(cap)
    frame = run(expr, "the row sample")
    for name, dtype in t.schema().items():
        s = frame[name]
        if dtype.is_integer() and s.dtype.kind == "f":
            frame[name] = s.astype("Int64")
        elif dtype.is_boolean() and s.dtype == object:
            frame[name] = s.astype("boolean")
    return frame.reset_index(drop=True)
