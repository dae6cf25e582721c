"""Links on the engine path: pairwise-complete Pearson r of every numeric pair over all rows.

For every Pearson row of the links table whose two columns are numbers in the engine, the
engine computes over **all rows** (pairwise complete: both values finite):

* ``n`` and r from two-pass sums: the pair's means over its complete rows first (one
  aggregate query for all pairs), then Σdx·dy, Σdx², Σdy² and the residual sums Σdx, Σdy
  about those means (a second query for all pairs; cov = Σdx·dy − Σdx·Σdy/n).  Each
  column is multiplied by a power of two near 1/max|x| first (exact in floating point,
  r unchanged) so squares never overflow.  A column constant over the pair's complete
  rows (its variance there lost to rounding) gives no r, as on the pandas path.  Pairs
  are summed without filtered aggregates (u + 0·v is NULL where v is): on DuckDB that
  ran about ten times faster than one ``FILTER`` clause per aggregate.

  Why not the engine's own ``corr``: measured against exact rational arithmetic on the
  same float64 data, DuckDB's ``corr(x, y)`` (one-pass updates) was off by 1.1e-7
  relative for r ≈ 0.009 on columns centred near 1e7 and 5.9e-11 on NIST Norris shifted
  by 1e10, while these two-pass sums stayed within 1e-15 (numpy: within 1e-15).  The
  agreement rule is 1e-9, so the two-pass sums are used.

* from r and n, exactly as the pandas path (same functions): the Fisher-z interval
  (SE = 1/√(n − 3)) at the report's confidence, the two-sided t-test p-value (n − 2 df),
  ``strength`` (common-practice thresholds) and ``share_explained`` = r²; then
  ``p_adjusted`` (Benjamini–Hochberg) is recomputed over the whole table, and the note
  "Pearson and Spearman differ by 0.2 or more" is re-evaluated.

Spearman, Kendall, Cramér's V, η and mutual information stay on the seeded sample
(labelled).  A link is not a cause.
"""

from __future__ import annotations

from typing import Any

import ibis
import numpy as np
import pandas as pd

from nbeda.engine import aggregates
from nbeda.stats._codegen import function_source
from nbeda.stats.links import bh_adjust, corr_p_value, fisher_ci, strength_label

__all__ = ["pair_pearson", "exact_links", "apply", "code"]

DIFFER = "Pearson and Spearman differ by 0.2 or more: a non-linear or outlier-driven link"


# ----------------------------------------------------------------------------------------------
# Embedded functions (their source goes into the emitted code)
# ----------------------------------------------------------------------------------------------
def pair_pearson(t, pairs, agg, run=None):
    """Pairwise-complete Pearson r of each pair ``(x, y)`` of numeric columns of ibis table ``t``.

    Two-pass sums over the rows where both values are finite.  Pass 1 (one query for all
    pairs): n and the sums of each side (hence the pair's means).  Pass 2 (one query):
    Σdx·dy, Σdx², Σdy² and the residual sums Σdx, Σdy of deviations from those means;
    cov = Σdx·dy − Σdx·Σdy/n, var = Σdx² − (Σdx)²/n.  A side whose variance is lost to
    rounding (var ≤ 1e-12·Σdx²: every deviation is the same rounding error of the mean)
    is constant over the pair's rows.  ``agg`` is ``column_stats`` of the columns: min/max
    give a power-of-two scale per column (exact in floating point, so squares cannot
    overflow), and for a column with no missing or infinite value its all-row mean is the
    pair mean (no pass-1 sums needed; its deviations are shared by all its pairs).
    Returns one row per pair: x, y, n, r (NaN when n < 2 or a side is constant over the
    pair's rows).
    """
    import math

    run = run or (lambda expr, what: expr.to_pandas())
    columns = sorted({c for pair in pairs for c in pair})
    inf = ibis.literal(float("inf"), type="float64")  # explicit: isinf() is FALSE on Spark
    zero = ibis.literal(0.0, type="float64")
    cols, scale, complete = {}, {}, {}
    for j, c in enumerate(columns):
        x = t[c].cast("float64")
        if t.schema()[c].is_floating():
            x = (x.isnan() | (x == inf) | (x == -inf)).ifelse(ibis.null("float64"), x)
        lo, hi = agg.loc[c, "min"], agg.loc[c, "max"]
        big = max(abs(float(lo)), abs(float(hi))) if lo is not None and hi is not None else 0.0
        big = big if big == big and 0.0 < big < float("inf") else 1.0
        scale[c] = math.ldexp(1.0, -math.frexp(big)[1])
        complete[c] = int(agg.loc[c, "count"]) == int(agg.loc[c, "rows"])
        cols[f"c{j}"] = x * ibis.literal(scale[c], type="float64")
    # one projection (finite values, scaled; NULL otherwise), then plain column references
    p = t.select(**cols)
    scaled = {c: p[f"c{j}"] for j, c in enumerate(columns)}

    def both(u, v):
        # u where v is present too: NULL propagates through u + 0·v (and u + 0 is exactly u),
        # which engines run much faster than one filtered aggregate per pair
        return u + v * zero

    def value(got, key):
        v = got[key]
        return float(v) if v is not None and v == v else float("nan")

    # pass 1: n and means of each pair (columns with no missing value: from agg)
    first = {}
    for i, (a, b) in enumerate(pairs):
        if complete[a] and complete[b]:
            continue
        xa, xb = both(scaled[a], scaled[b]), both(scaled[b], scaled[a])
        first[f"n_{i}"] = xa.count()
        first[f"sa_{i}"], first[f"sb_{i}"] = xa.sum(), xb.sum()
    got = run(p.aggregate(**first), "pair counts and means").iloc[0] if first else {}
    n, mean_a, mean_b, const = [], [], [], []
    for i, (a, b) in enumerate(pairs):
        if f"n_{i}" in first:
            k = int(value(got, f"n_{i}")) if value(got, f"n_{i}") == value(got, f"n_{i}") else 0
            n.append(k)
            mean_a.append(value(got, f"sa_{i}") / k if k else float("nan"))
            mean_b.append(value(got, f"sb_{i}") / k if k else float("nan"))
            const.append(False)  # decided from the second pass
        else:
            n.append(int(agg.loc[a, "rows"]))
            mean_a.append(float(agg.loc[a, "mean"]) * scale[a])
            mean_b.append(float(agg.loc[b, "mean"]) * scale[b])
            const.append(float(agg.loc[a, "min"]) == float(agg.loc[a, "max"])
                         or float(agg.loc[b, "min"]) == float(agg.loc[b, "max"]))
    # pass 2: sums of products of deviations from the pair means.  The deviations are one
    # projection (each computed once per row), the sums plain column references.
    devs = {}  # projected name -> expression
    pair_cols = {}  # pair -> (name of its x deviations, name of its y deviations)
    for i, (a, b) in enumerate(pairs):
        if n[i] < 2 or const[i]:
            continue
        if f"n_{i}" not in first:
            # complete columns: deviations from the all-row mean, shared by all their pairs
            for c, m in ((a, mean_a[i]), (b, mean_b[i])):
                devs.setdefault(f"s{columns.index(c)}", scaled[c] - ibis.literal(m, type="float64"))
            pair_cols[i] = (f"s{columns.index(a)}", f"s{columns.index(b)}")
        else:
            devs[f"a{i}"] = both(scaled[a] - ibis.literal(mean_a[i], type="float64"), scaled[b])
            devs[f"b{i}"] = both(scaled[b] - ibis.literal(mean_b[i], type="float64"), scaled[a])
            pair_cols[i] = (f"a{i}", f"b{i}")
    second = {}
    if devs:
        q = p.select(**devs)
        for name in devs:
            second[f"d_{name}"] = q[name].sum()
            second[f"dd_{name}"] = (q[name] * q[name]).sum()
        for i, (u, v) in pair_cols.items():
            second[f"dab_{i}"] = (q[u] * q[v]).sum()
        sums = run(q.aggregate(**second), "pair sums of products (second pass)").iloc[0]
    r = []
    for i in range(len(pairs)):
        if i not in pair_cols:
            r.append(float("nan"))
            continue
        u, v = pair_cols[i]
        s = {"da": value(sums, f"d_{u}"), "db": value(sums, f"d_{v}"), "dab": value(sums, f"dab_{i}"),
             "daa": value(sums, f"dd_{u}"), "dbb": value(sums, f"dd_{v}")}
        cov = s["dab"] - s["da"] * s["db"] / n[i]
        va = s["daa"] - s["da"] ** 2 / n[i]
        vb = s["dbb"] - s["db"] ** 2 / n[i]
        if va > 1e-12 * s["daa"] and vb > 1e-12 * s["dbb"]:
            r.append(min(max(cov / (math.sqrt(va) * math.sqrt(vb)), -1.0), 1.0))
        else:
            r.append(float("nan"))
    return pd.DataFrame({"x": [a for a, _ in pairs], "y": [b for _, b in pairs], "n": n, "r": r})


def exact_links(links, pearson, confidence=0.95):
    """The links table with the engine's all-row Pearson r in place of the sample's.

    ``pearson`` (``pair_pearson``) holds x, y, n, r for the pairs the engine computed.  On
    those rows: estimate, n, the Fisher-z interval, the t-test p-value, strength and
    share_explained = r², and the notes, as on the pandas path (``fisher_ci``,
    ``corr_p_value``, ``strength_label``); then p_adjusted (Benjamini–Hochberg) over the
    whole table.
    """
    out = links.copy()
    differ = "Pearson and Spearman differ by 0.2 or more: a non-linear or outlier-driven link"
    measure = out["measure"].to_numpy(dtype=object)
    xs = [str(v) for v in out["x"]]
    ys = [str(v) for v in out["y"]]
    found = {(str(x), str(y)): (int(n), float(r)) for x, y, n, r in
             zip(pearson["x"], pearson["y"], pearson["n"], pearson["r"])}
    rows = [i for i in range(len(out)) if measure[i] == "pearson" and (xs[i], ys[i]) in found]
    if not rows:
        return out
    est = out["estimate"].to_numpy(dtype="float64").copy()
    n = out["n"].to_numpy(dtype="int64").copy()
    low = out["ci_low"].to_numpy(dtype="float64").copy()
    high = out["ci_high"].to_numpy(dtype="float64").copy()
    p = out["p_value"].to_numpy(dtype="float64").copy()
    share = out["share_explained"].to_numpy(dtype="float64").copy()
    strength = out["strength"].to_numpy(dtype=object).copy()
    notes = out["note"].to_numpy(dtype=object).copy()
    for i in rows:
        n[i], est[i] = found[(xs[i], ys[i])]
        if n[i] < 3:
            est[i] = np.nan
            notes[i] = "fewer than 3 complete rows: not computed"
        elif np.isnan(est[i]):
            notes[i] = "a column is constant over the complete rows: the measure is undefined"
        else:
            notes[i] = ""
    sel = np.asarray(rows)
    ok = sel[~np.isnan(est[sel])]
    bad = sel[np.isnan(est[sel])]
    low[bad] = high[bad] = p[bad] = share[bad] = np.nan
    low[ok], high[ok] = fisher_ci(est[ok], n[ok].astype("float64"), "pearson", confidence)
    p[ok] = corr_p_value(est[ok], n[ok].astype("float64"))
    share[sel] = est[sel] ** 2
    strength[sel] = strength_label(est[sel])
    # Pearson and Spearman of the same pair differing by 0.2 or more: say so on both rows
    spear = {(xs[i], ys[i]): i for i in range(len(out)) if measure[i] == "spearman"}
    for i in rows:
        j = spear.get((xs[i], ys[i]))
        if j is None:
            continue
        if notes[j] == differ:
            notes[j] = ""
        if abs(est[i] - est[j]) >= 0.2:
            notes[i] = notes[j] = differ
    out["estimate"], out["n"] = est, n
    out["ci_low"], out["ci_high"] = low, high
    out["p_value"] = p
    out["p_adjusted"] = bh_adjust(p)
    out["strength"] = strength
    out["share_explained"] = share
    out["note"] = notes
    return out


# ----------------------------------------------------------------------------------------------
# Library side
# ----------------------------------------------------------------------------------------------
def _pairs(run: Any, table: pd.DataFrame) -> list[tuple[str, str]]:
    """Pearson pairs whose two columns are numbers in the engine (in table order, no repeats)."""
    kinds = aggregates.column_kinds(run.t)
    out: list[tuple[str, str]] = []
    seen = set()
    for x, y, m in zip(table["x"], table["y"], table["measure"], strict=True):
        pair = (str(x), str(y))
        if m == "pearson" and kinds.get(pair[0]) == "number" and kinds.get(pair[1]) == "number" \
                and pair not in seen:
            seen.add(pair)
            out.append(pair)
    return out


def apply(run: Any, result: Any) -> dict[str, str]:
    table = result.table
    if table.empty:
        return {}
    pairs = _pairs(run, table)
    if not pairs:
        return {}
    columns = sorted({c for pair in pairs for c in pair})
    agg = run.stats().loc[columns]
    pearson = pair_pearson(run.t, pairs, agg, run=run.execute)
    conf = result.ctx.options.confidence
    result.table = exact_links(table, pearson, confidence=conf)
    _restate(run, result, len(pairs))
    exact = run.exact_label()
    sample = run.sample_label()
    n_pearson = int((result.table["measure"] == "pearson").sum())
    others = bool((result.table["measure"] != "pearson").any()) or len(pairs) < n_pearson

    def mixed(what: str) -> str:
        return f"Pearson rows: {what}" + (f"; other rows: {sample}" if others else "")

    read = sample if run.sample_is_all else f"read on the {sample}"
    labels = {
        "x": "column name", "y": "column name", "x_role": read, "y_role": read,
        "measure": "the measure for the pair's roles",
        "estimate": mixed(f"{exact}, pairwise complete, two-pass sums"),
        "n": mixed(f"{exact} (rows where both values are finite)"),
        "ci_low": mixed("Fisher z from the engine's all-row r and n"),
        "ci_high": mixed("Fisher z from the engine's all-row r and n"),
        "p_value": mixed("t-test from the engine's all-row r and n"),
        "strength": mixed("from the engine's all-row r"),
        "share_explained": mixed("r² from the engine's all-row r"),
        "p_adjusted": "Benjamini–Hochberg over every p-value of the table (as above)",
        "note": mixed("recomputed from the engine's r and n"),
    }
    return labels


def _restate(run: Any, result: Any, n_pairs: int) -> None:
    t = result.table
    if not run.sample_is_all:
        result.notes.append(
            f"Engine path: Pearson r, its n, interval and p-value come from all {run.n_rows:,} rows "
            f"({n_pairs} pair(s), pairwise complete); Spearman, Kendall, Cramér's V, η and mutual "
            f"information are computed on a seeded sample of {len(run.sample()):,} rows; p_adjusted "
            "(Benjamini–Hochberg) is recomputed over the whole table."
        )
    if not any("not a cause" in c for c in result.cautions):
        result.cautions.insert(0, "A link is not a cause: correlation is not causation.")
    disagree = int((t["note"] == DIFFER).sum()) // 2
    flags = [f for f in result.flags if "Pearson and Spearman differ" not in f]
    if disagree:
        flags.insert(0, f"{disagree} numeric pair(s) where Pearson and Spearman differ by 0.2 or more "
                        "(a bend or outliers drive the link)"
                     + ("." if run.sample_is_all else "; Pearson over all rows, Spearman on the sample."))
    result.flags = flags


def code(run: Any, result: Any) -> str:
    table = result.table
    if table.empty:
        return ""
    pairs = _pairs(run, table)
    if not pairs:
        return ""
    columns = sorted({c for pair in pairs for c in pair})
    conf = result.ctx.options.confidence
    return "\n".join([
        "# Pearson r of every numeric pair over all rows (pairwise complete, two-pass sums), with its",
        "# interval, p-value and strength as above; p_adjusted recomputed over the whole table.",
        "# A link is not a cause.",
        "import ibis",
        "from scipy import stats",
        function_source(aggregates.column_stats),
        function_source(pair_pearson),
        function_source(fisher_ci),
        function_source(corr_p_value),
        function_source(bh_adjust),
        function_source(strength_label),
        function_source(exact_links),
        f"agg = column_stats(t, {columns!r}, exact={run.exact!r})",
        f"pairs = {pairs!r}",
        "pearson = pair_pearson(t, pairs, agg)",
        f"links = exact_links(links, pearson, confidence={conf!r})",
    ])
