"""Gaps on the engine path: missing counts, disguised-value counts and missingness patterns over all rows.

Exact columns: missing, missing_pct, pattern_count; disguised,
disguised_values and effective_missing_pct count over all rows the values the
rules flag (text tokens such as 'N/A' are found in every row; numeric codes
such as -999 are chosen by the rules on the sample, then counted in every row).
The missingness-pattern table is rebuilt from one engine group-by over the
columns' is-missing flags (NaN counts as missing in float columns, as
``pandas.isna`` does).  Little's test, the MAR hints and the fill comparison
stay on the seeded sample and say so.
"""

from __future__ import annotations

import re
from typing import Any

import ibis
import numpy as np
import pandas as pd

from nbeda.engine import aggregates
from nbeda.stats._codegen import function_source

__all__ = ["missing_patterns_engine", "disguised_counts", "exact_gaps", "apply", "code"]


def missing_patterns_engine(t, names, agg, top=20, run=None):
    """Missingness patterns of ibis table ``t`` over all rows, by one group-by of is-missing flags.

    Only the columns of ``names`` with gaps (``agg`` = ``column_stats``) enter the
    group-by; NaN counts as missing in float columns.  Returns (top, summary): the
    ``top`` largest patterns (columns = names with gaps, True = missing, plus ``rows``;
    ties in the order of the flags, False before True) and one row with ``patterns``
    (how many), ``complete`` (rows with no gap) and ``p_<i>`` (patterns in which the
    i-th column with gaps is missing).
    """
    run = run or (lambda expr, what: expr.to_pandas())
    gap = [c for c in names if int(agg.at[c, "missing"]) > 0]
    flags = {}
    for i, c in enumerate(gap):
        miss = t[c].isnull()
        if t.schema()[c].is_floating():
            miss = miss | t[c].isnan()
        flags[f"f_{i}"] = miss
    if not flags:  # no gaps: a single pattern (complete rows) when there are rows
        rows = int(agg["rows"].iloc[0]) if len(agg) else 0
        top_rows = pd.DataFrame({"rows": [rows] if rows else []}, dtype="int64")
        summary = pd.DataFrame({"patterns": [1 if rows else 0], "complete": [rows]})
        return top_rows, summary
    g = t.group_by(**flags).aggregate(rows=ibis._.count())
    order = [ibis.desc("rows")] + list(flags)
    top_rows = run(g.order_by(order).limit(top), "missingness patterns (top)")
    none = ~ibis.or_(*[g[f] for f in flags]) if len(flags) > 1 else ~g[next(iter(flags))]
    aggs = {"patterns": g.count(), "complete": none.ifelse(g["rows"], 0).sum()}
    aggs.update({f"p_{i}": g[f].cast("int64").sum() for i, f in enumerate(flags)})
    summary = run(g.aggregate(**aggs), "missingness patterns (summary)")
    top_rows = top_rows.rename(columns={f"f_{i}": c for i, c in enumerate(gap)})
    summary = summary.rename(columns={f"p_{i}": c for i, c in enumerate(gap)})
    return top_rows, summary


def disguised_counts(t, flagged, run=None):
    """All-row counts of disguised missing values; returns {column: [(value, rows), ...]}.

    Text columns (string type): every value that is '', 'na', 'n/a', 'null', 'none',
    'nan', '?', '-', 'missing' or 'unknown' after stripping whitespace and lower-casing
    (the engine pre-selects candidates with a regular expression; the rule itself is
    applied here in Python to the few distinct candidates).  ``flagged`` = {numeric
    column: [values]}: the values the rules flag (chosen on the sample), counted here.
    """
    run = run or (lambda expr, what: expr.to_pandas())
    tokens = {"", "na", "n/a", "null", "none", "nan", "?", "-", "missing", "unknown"}
    space = r"[\s\p{Z}\x{85}\x{1c}-\x{1f}]*"
    pattern = f"(?i)^{space}(na|n/a|null|none|nan|\\?|-|missing|unknown)?{space}$"
    text = [c for c, dt in t.schema().items() if dt.is_string()]
    aggs = {}
    for i, c in enumerate(text):
        aggs[f"t_{i}"] = t[c].re_search(pattern).cast("int64").sum()
    numbers = [c for c in flagged if flagged[c]]
    for i, c in enumerate(numbers):
        x = t[c].cast("float64")
        for j, v in enumerate(flagged[c]):
            aggs[f"n_{i}_{j}"] = (x == ibis.literal(float(v), type="float64")).cast("int64").sum()
    out = {}
    if not aggs:
        return out
    got = run(t.aggregate(**aggs), "disguised missing values").iloc[0]
    for i, c in enumerate(numbers):
        found = [(float(v), int(got[f"n_{i}_{j}"] or 0)) for j, v in enumerate(flagged[c])]
        out[c] = [f for f in found if f[1] > 0]
    for i, c in enumerate(text):
        out[c] = []
        if int(got[f"t_{i}"] or 0) == 0:
            continue
        cand = run(t.filter(t[c].re_search(pattern)).group_by(value=t[c]).aggregate(rows=ibis._.count()),
                   f"disguised values of {c}")
        keep = [(v, int(r)) for v, r in zip(cand["value"], cand["rows"]) if isinstance(v, str) and v.strip().lower() in tokens]
        out[c] = sorted(keep, key=lambda kv: kv[0])
    return out


def exact_gaps(gaps, patterns, agg, top_rows, summary, disguised, top=20):
    """The Gaps table and its pattern table with the engine's all-row numbers.

    ``agg`` is ``column_stats``; ``top_rows``/``summary`` come from
    ``missing_patterns_engine``; ``disguised`` from ``disguised_counts``.  The pattern
    table has the columns of the in-memory one (top ``top`` patterns + 'other').
    """
    out = gaps.copy()
    a = agg.reindex(out.index)
    n = int(a["rows"].iloc[0]) if len(a) else 0
    miss = a["missing"].astype("int64")
    out["missing"] = miss.to_numpy()
    out["missing_pct"] = (100.0 * miss / n).to_numpy(dtype="float64") if n else np.nan
    for c, found in disguised.items():
        if c in out.index:
            out.loc[c, "disguised"] = int(sum(k for _, k in found))
            out.loc[c, "disguised_values"] = ", ".join(
                (repr(v) if isinstance(v, str) else f"{v:g}" if isinstance(v, float) else str(v)) + f" ({k})"
                for v, k in found
            )
    if n:
        out["effective_missing_pct"] = (100.0 * (out["missing"] + out["disguised"]) / n).astype("float64")
    out["pattern_count"] = [int(summary[c].iloc[0]) if c in summary.columns else 0 for c in out.index]
    out = out.astype({"missing": "int64", "disguised": "int64", "pattern_count": "int64"})
    rows, labels = [], []
    gap_cols = [c for c in top_rows.columns if c != "rows"]
    for g in range(len(top_rows)):
        cols = [c for c in gap_cols if bool(top_rows[c].iloc[g])]
        text = [str(c) for c in cols[:12]]
        if len(cols) > 12:
            text.append(f"… (+{len(cols) - 12} more)")
        k = int(top_rows["rows"].iloc[g])
        rows.append([k, 100.0 * k / n, len(cols), ", ".join(text) or "(none: complete rows)"])
        labels.append(str(g + 1))
    total = int(summary["patterns"].iloc[0])
    if total > top:
        rest = n - int(top_rows["rows"].sum())
        rows.append([rest, 100.0 * rest / n, pd.NA, f"{total - top} other patterns"])
        labels.append("other")
    table = pd.DataFrame(rows, index=pd.Index(labels, name="pattern", dtype=object), columns=list(patterns.columns))
    table = table.astype({"rows": "int64", "rows_pct": "float64", "gap_columns": "Int64", "missing_in": object})
    return out, table


def _names(result: Any) -> list[str]:
    return [str(c) for c in result.table.index]


def _flagged(run: Any, result: Any) -> dict[str, list[float]]:
    """Numeric values the disguised-missing rules flag on the sample (found there)."""
    kinds = aggregates.column_kinds(run.t)
    labels = list(result.ctx.labels)
    out = {}
    for j, found in result._disguised.items():
        c = str(labels[j])
        if kinds.get(c) == "number":
            out[c] = [float(v) for v, _ in found]
    return out


def apply(run: Any, result: Any) -> dict[str, str]:
    names = _names(result)
    if not names:
        return {}
    agg = run.stats().loc[names]
    top_rows, summary = missing_patterns_engine(run.t, names, agg, run=run.execute)
    disguised = disguised_counts(run.t, _flagged(run, result), run=run.execute)
    result.table, result.patterns = exact_gaps(result.table, result.patterns, agg, top_rows, summary, disguised)
    # the pattern chart and the summary note follow the all-row patterns
    gap_cols = [c for c in top_rows.columns if c != "rows"]
    pm = np.zeros((len(top_rows), len(names)), dtype=bool)
    for c in gap_cols:
        pm[:, names.index(c)] = top_rows[c].to_numpy(dtype=bool)
    result._pattern_matrix, result._pattern_counts = pm, top_rows["rows"].to_numpy(dtype="int64")
    n, k = int(agg["rows"].iloc[0]), len(names)
    total = int(agg["missing"].sum())
    complete, patterns = int(summary["complete"].iloc[0]), int(summary["patterns"].iloc[0])
    if n and total:
        text = (
            f"{complete:,} complete rows ({100 * complete / n:.1f}%); {n - complete:,} rows with at least one "
            f"gap; {total:,} missing cells ({100 * total / (n * k):.2f}% of all cells); {patterns:,} distinct "
            "missingness patterns" + (" (top 20 shown, the rest pooled as 'other')." if patterns > 20 else ".")
            + " (All rows, by the engine.)"
        )
    elif n:
        text = f"No gaps: all {n:,} rows are complete (no missing value in any of the {k:,} columns)."
    else:
        text = None
    found = [i for i, s in enumerate(result.notes) if re.match(r"^(No gaps: all|[\d,]+ complete rows \()", s)]
    if text is not None:
        if found:
            result.notes[found[0]] = text
        else:
            result.notes.insert(0, text)
    if not run.sample_is_all:
        result.notes.append(
            f"Little's MCAR test, the MAR hints and the fill comparison use the {run.sample_label()}; "
            "gap counts and missingness patterns use all rows."
        )
    labels = {c: run.exact_label() for c in ("missing", "missing_pct", "pattern_count")}
    if run.sample_is_all:
        disg = run.exact_label()
    else:
        disg = ("all rows: text tokens found in every row; numeric codes chosen by the rules on the "
                f"{run.sample_label()}, then counted in every row")
    for c in ("disguised", "disguised_values", "effective_missing_pct"):
        labels[c] = disg
    return labels


def code(run: Any, result: Any) -> str:
    names = _names(result)
    if not names:
        return ""
    return "\n".join([
        "# The numbers the engine computes over all rows replace the sample's:",
        "import ibis\n",
        function_source(aggregates.column_kinds),
        function_source(aggregates.column_stats),
        function_source(missing_patterns_engine),
        function_source(disguised_counts),
        function_source(exact_gaps),
        f"names = {names!r}",
        f"agg = column_stats(t, names, exact={run.exact!r})",
        "patterns_top, patterns_summary = missing_patterns_engine(t, names, agg)",
        "# numeric codes (such as -999) are chosen by the rules on the sample (disguised_missing, above),",
        "# then counted in every row",
        "kinds = column_kinds(t)",
        "with np.errstate(all=\"ignore\"):",
        "    flagged = {c: [float(v) for v, _ in disguised_missing(sample[c])[1]] for c in names if kinds[c] == \"number\"}",
        "disguised = disguised_counts(t, flagged)",
        "gaps, gaps_patterns = exact_gaps(gaps, gaps_patterns, agg, patterns_top, patterns_summary, disguised)",
    ])
