"""Segments on the engine path: the segments, their metric summaries, the balance, the ANOVA and
the cross-tab over all rows.

The segments themselves are formed over all rows by the rules of the Segments tab
(:func:`nbeda.stats.segments.segment_labels`): the values of ``by`` counted by the
engine (most frequent first, or in natural order; beyond 20 levels the rest pooled as
"other (K levels)"; missing values as "(missing)"), or, for a numeric ``by`` with many
values, five equal-count bins whose edges are the engine's quantiles of all rows.

Exact (or, on approximate engines, labelled approximate) over all rows, from group-by
queries: per segment ``n``, ``mean`` (two passes: the group means first, then the sums
of deviations from them, which also corrects the means), ``std``, ``sum``,
``share_of_total``, the t-interval ``ci_low``/``ci_high``, ``median`` (the engine's
quantile per group); the balance table; the one-way ANOVA table (centred on one group's
mean so that the between-groups sum of squares keeps its digits), Welch's ANOVA, η², ω²,
ε²; the balance χ²; the cross-tab counts, row/column %, expected counts, adjusted
standardized residuals, χ² (with Cochran's expected-count check), Fisher's exact test
(2×2) and the pivot of the metric (mean and n per cell).

Kruskal–Wallis and Tukey's HSD need every value of every group (ranks, the
studentized range of each pair): they stay on the seeded sample, with the sample's
rows labelled by the all-row segments, and say so.
"""

from __future__ import annotations

from typing import Any

import ibis
import numpy as np
import pandas as pd
from scipy import stats

from nbeda.stats import segments as S
from nbeda.stats.segments import anova_from_summaries, counts_tables, welch_from_summaries
from nbeda.stats._codegen import col_expr, function_source

__all__ = [
    "segment_values",
    "engine_plan",
    "segment_plan",
    "segment_expr",
    "group_stats",
    "cross_stats",
    "plan_labels",
    "exact_segments",
    "apply",
    "code",
]

_METRIC_EXACT = ["n", "mean", "ci_low", "ci_high", "std", "sum", "share_of_total"]
_BALANCE = ["n", "share", "expected_n", "pearson_residual"]


# --------------------------------------------------------------------------- #
# Engine side (ibis): self-contained, embedded in the emitted code.            #
# --------------------------------------------------------------------------- #
def segment_values(t, name, limit=10_000, run=None):
    """Rows per distinct value of column ``name`` of ibis table ``t`` (missing values included).

    At most ``limit`` values come back: beyond that, the ``limit`` most frequent (ties by
    value), and ``attrs`` holds the number of distinct non-missing values ("levels") and
    of missing rows ("missing") from one more query — enough for the 20 kept levels and the
    size of the pooled rest, without pulling an identifier's millions of values.
    Integer columns with missing values come back as nullable ``Int64`` and booleans as
    ``boolean``, as the row sample holds them (so their text labels match).
    """
    run = run or (lambda expr, what: expr.to_pandas())
    col = t[name]
    counts = t.group_by(value=col).aggregate(count=ibis._.count())
    got = run(counts.order_by([ibis.desc("count"), ibis.asc("value")]).limit(limit + 1), f"value counts of {name}")
    dtype = t.schema()[name]
    if dtype.is_integer() and got["value"].dtype.kind == "f":
        got["value"] = got["value"].astype("Int64")
    elif dtype.is_boolean() and got["value"].dtype == object:
        got["value"] = got["value"].astype("boolean")
    if len(got) > limit:
        missing = col.isnull()
        present = col
        if dtype.is_floating():
            missing = missing | col.isnan()
            present = col.isnan().ifelse(ibis.null(col.type()), col)
        info = run(t.aggregate(levels=present.nunique(), missing=missing.sum()),
                   f"distinct values of {name}").iloc[0]
        got = got[got["value"].notna()].iloc[:limit].reset_index(drop=True)
        got.attrs = {"levels": int(info["levels"]), "missing": int(info["missing"] or 0)}
    return got


def segment_plan(values, mode, max_levels=20, n_bins=5, edges=None):
    """The segments of one column over all rows (the rules of the Segments tab).

    ``values``: rows per distinct value (``segment_values``), for modes "levels" and
    "ordered"; ``edges``: quantiles of the finite values at 0, 1/n_bins, ..., 1 for mode
    "bins".  Returns a dict: mode, order (display order; for bins the bins that hold rows
    are known only after counting), named (the real levels), labels (segment -> the raw
    values it holds), other (the pooled label or None), edges and names (bins).
    """
    if mode == "bins":
        e = np.asarray(edges, dtype="float64")
        e = np.unique(e[np.isfinite(e)])
        if len(e) == 1:
            e = np.r_[e, e]
        names = [f"{i + 1}: {'[' if i == 0 else '('}{e[i]:.4g}, {e[i + 1]:.4g}]" for i in range(len(e) - 1)]
        return {"mode": mode, "edges": [float(v) for v in e], "names": names, "order": None,
                "named": None, "labels": {}, "other": None}
    missing = values["value"].isna().to_numpy(dtype=bool)
    present = values[~missing]
    text = present["value"].astype(str).to_numpy(dtype=object)
    counts = pd.Series(present["count"].to_numpy(dtype="int64"), index=pd.Index(text, dtype=object))
    counts = counts.groupby(level=0, sort=False).sum()
    by_count = counts.sort_index(kind="stable").sort_values(ascending=False, kind="stable")
    levels = list(by_count.index)
    if mode == "ordered":
        try:
            natural = present["value"].sort_values().astype(str)
            levels = list(dict.fromkeys(natural.to_numpy(dtype=object)))
            seen = set(levels)
            levels += [v for v in by_count.index if v not in seen]
        except TypeError:  # values that cannot be compared: keep the frequency order
            pass
    other = None
    n_levels = values.attrs.get("levels", len(levels))  # all levels, when only the top ones came back
    if n_levels > max_levels:
        keep = set(by_count.index[:max_levels])
        other = f"other ({n_levels - max_levels} levels)"
        levels = [v for v in levels if v in keep]
    raw = {}
    for label, value in zip(text, present["value"].tolist()):
        raw.setdefault(label, []).append(value)
    has_missing = values.attrs["missing"] > 0 if "missing" in values.attrs else bool(missing.any())
    order = levels + ([other] if other else []) + (["(missing)"] if has_missing else [])
    return {"mode": mode, "order": order, "named": levels, "labels": {v: raw[v] for v in levels},
            "other": other, "edges": None, "names": None}


def engine_plan(t, name, mode, max_levels=20, n_bins=5, exact=True, run=None, limit=10_000):
    """``segment_plan`` of column ``name`` from one engine query (value counts, or quantile edges)."""
    inf = ibis.literal(float("inf"), type="float64")  # ±inf by comparison: isinf() is FALSE on Spark
    run = run or (lambda expr, what: expr.to_pandas())
    if mode != "bins":
        return segment_plan(segment_values(t, name, limit, run), mode, max_levels, n_bins)
    x = t[name].cast("float64")
    if t.schema()[name].is_floating():
        x = (x.isnan() | (x == inf) | (x == -inf)).ifelse(ibis.null("float64"), x)
    probs = np.linspace(0.0, 1.0, n_bins + 1)
    aggs = {f"q{j}": (x.quantile(float(p)) if exact else x.approx_quantile(float(p))) for j, p in enumerate(probs)}
    got = run(t.aggregate(**aggs), f"bin edges of {name}").iloc[0]
    edges = [float(got[f"q{j}"]) if got[f"q{j}"] is not None else float("nan") for j in range(len(probs))]
    return segment_plan(None, mode, max_levels, n_bins, edges=edges)


def segment_expr(t, name, plan):
    """ibis expression: the segment label of every row of ``t`` under ``plan``."""
    inf = ibis.literal(float("inf"), type="float64")  # ±inf by comparison: isinf() is FALSE on Spark
    col = t[name]
    if plan["mode"] == "bins":
        x = col.cast("float64")
        if t.schema()[name].is_floating():
            x = (x.isnan() | (x == inf) | (x == -inf)).ifelse(ibis.null("float64"), x)
        names, edges = plan["names"], plan["edges"]
        if not names:
            return ibis.literal("(missing)", type="string")
        branches = [(x.isnull(), "(missing)")]
        branches += [(x <= ibis.literal(e, type="float64"), names[i]) for i, e in enumerate(edges[1:-1])]
        return ibis.cases(*branches, else_=names[-1])
    missing = col.isnull()
    if t.schema()[name].is_floating():
        missing = missing | col.isnan()
    branches = [(missing, "(missing)")]
    for label, raw in plan["labels"].items():
        for v in raw:
            v = v.item() if isinstance(v, np.generic) else v
            branches.append((col == ibis.literal(v, type=col.type()), label))
    other = plan["other"]
    return ibis.cases(*branches, else_=ibis.literal(other, type="string") if other else ibis.null("string"))


def group_stats(t, by, plan, metric=None, exact=True, run=None):
    """Per segment of ``by``: rows and, with a metric, its two-pass summaries over all rows.

    The metric is analysed as float64; NaN counts as missing and ±inf are set aside
    (``n_inf`` counts them).  First pass per segment: rows, n, sum, min, max, median
    (exact quantile, or the engine's approximate one); mean0 = sum/n (the value itself
    when min == max).  Second pass: s1 = Σ(y − mean0), m2 = Σ(y − mean0)² per segment,
    so mean = mean0 + s1/n and Σ(y − mean)² = m2 − s1²/n.  One row per segment.
    """
    inf = ibis.literal(float("inf"), type="float64")  # ±inf by comparison: isinf() is FALSE on Spark
    run = run or (lambda expr, what: expr.to_pandas())
    cols = {"_seg": segment_expr(t, by, plan)}
    if metric is not None:
        raw = t[metric].cast("float64")
        cols["_y"] = raw
        if t.schema()[metric].is_floating():
            cols["_y"] = (raw.isnan() | (raw == inf) | (raw == -inf)).ifelse(ibis.null("float64"), raw)
            cols["_inf"] = (raw == inf) | (raw == -inf)
    lt = t.mutate(**cols)
    aggs = {"rows": lt.count()}
    if metric is not None:
        y = lt["_y"]
        aggs.update(n=y.count(), total=y.sum(), min=y.min(), max=y.max(),
                    median=y.quantile(0.5) if exact else y.approx_median())
        if "_inf" in cols:
            aggs["n_inf"] = lt["_inf"].sum()
    first = run(lt.group_by("_seg").aggregate(**aggs), f"group summaries by {by}")
    first = first.set_index("_seg")
    first.index = pd.Index(list(first.index), dtype=object, name="segment")
    if metric is None:
        return first[["rows"]]
    n = first["n"].to_numpy(dtype="float64")
    total = pd.to_numeric(first["total"], errors="coerce").to_numpy(dtype="float64")
    lo = pd.to_numeric(first["min"], errors="coerce").to_numpy(dtype="float64")
    hi = pd.to_numeric(first["max"], errors="coerce").to_numpy(dtype="float64")
    with np.errstate(invalid="ignore", divide="ignore"):
        mean0 = np.where(n > 0, np.where(lo == hi, lo, total / n), np.nan)
    first["mean0"] = mean0
    first["median"] = pd.to_numeric(first["median"], errors="coerce").astype("float64")
    if "n_inf" not in first:
        first["n_inf"] = 0
    first["n_inf"] = first["n_inf"].fillna(0).astype("int64")
    branches = [(lt["_seg"] == ibis.literal(s, type="string"), ibis.literal(float(m), type="float64"))
                for s, m in zip(first.index, mean0) if m == m]
    if branches:
        d = lt["_y"] - ibis.cases(*branches, else_=ibis.null("float64"))
        second = run(lt.mutate(_d=d).group_by("_seg").aggregate(s1=ibis._._d.sum(), m2=(ibis._._d * ibis._._d).sum()),
                     f"deviations from the group means by {by} (second pass)").set_index("_seg")
        first["s1"] = pd.to_numeric(second["s1"].reindex(first.index), errors="coerce").fillna(0.0)
        first["m2"] = pd.to_numeric(second["m2"].reindex(first.index), errors="coerce").fillna(0.0)
    else:
        first["s1"], first["m2"] = 0.0, 0.0
    first["s1"] = first["s1"].where(n > 0)
    first["m2"] = first["m2"].where(n > 0)
    return first[["rows", "n", "mean0", "s1", "m2", "median", "n_inf"]]


def cross_stats(t, by, plan, against, plan2, metric=None, means=None, run=None):
    """Rows per (segment of ``by``, segment of ``against``) cell and, with a metric, its n and
    s1 = Σ(y − mean0 of the ``by`` segment) per cell (``means``: ``group_stats``'s mean0)."""
    inf = ibis.literal(float("inf"), type="float64")  # ±inf by comparison: isinf() is FALSE on Spark
    run = run or (lambda expr, what: expr.to_pandas())
    cols = {"_a": segment_expr(t, by, plan), "_b": segment_expr(t, against, plan2)}
    if metric is not None and means is not None:
        y = t[metric].cast("float64")
        if t.schema()[metric].is_floating():
            y = (y.isnan() | (y == inf) | (y == -inf)).ifelse(ibis.null("float64"), y)
        cols["_y"] = y
    lt = t.mutate(**cols)
    aggs = {"count": lt.count()}
    if "_y" in cols:
        branches = [(lt["_a"] == ibis.literal(s, type="string"), ibis.literal(float(m), type="float64"))
                    for s, m in means.items() if m == m]
        centre = ibis.cases(*branches, else_=ibis.null("float64")) if branches else ibis.null("float64")
        lt = lt.mutate(_d=lt["_y"] - centre)
        aggs = {"count": lt.count(), "n": lt["_y"].count(), "s1": lt["_d"].sum()}
    got = run(lt.group_by("_a", "_b").aggregate(**aggs), f"cross-tab of {by} and {against}")
    got = got.rename(columns={"_a": "a", "_b": "b"})
    if "s1" in got:
        got["s1"] = pd.to_numeric(got["s1"], errors="coerce").astype("float64")
    return got.reset_index(drop=True)


# --------------------------------------------------------------------------- #
# pandas side: self-contained, embedded in the emitted code.                   #
# --------------------------------------------------------------------------- #
def plan_labels(s, plan):
    """The segment of every row of a pandas Series ``s`` under ``plan`` (a numpy object array)."""
    out = np.full(len(s), "(missing)", dtype=object)
    if plan["mode"] == "bins":
        if not plan["names"]:
            return out
        if pd.api.types.is_timedelta64_dtype(s.dtype):
            x = s.dt.total_seconds().to_numpy(dtype="float64", na_value=np.nan)
        else:
            x = s.astype("float64").to_numpy(dtype="float64", na_value=np.nan)
        ok = np.isfinite(x)
        edges = np.asarray(plan["edges"], dtype="float64")
        codes = np.clip(np.searchsorted(edges, x[ok], side="left") - 1, 0, len(plan["names"]) - 1)
        out[ok] = np.asarray(plan["names"], dtype=object)[codes]
        return out
    missing = s.isna().to_numpy(dtype=bool)
    text = s[~missing].astype(str).to_numpy(dtype=object, copy=True)
    kept = pd.Series(text, dtype=object).isin(list(plan["labels"])).to_numpy(dtype=bool)
    text[~kept] = plan["other"] if plan["other"] else "(missing)"
    out[~missing] = text
    return out


def exact_segments(plan, groups_all, confidence=0.95, name="segment", balance_test=True,
                   y=None, seg=None, cross=None, plan2=None, b_name="against"):
    """Every Segments table from the engine's all-row group summaries.

    ``groups_all``: ``group_stats`` (rows; with a metric n, mean0, s1, m2, median);
    ``cross``/``plan2``: ``cross_stats`` and the plan of the second column.  ``y`` and
    ``seg``: the metric and the segments (``plan_labels``) of the seeded sample, for the
    Kruskal–Wallis test (ranks need every value).  Returns a dict of tables.
    """
    def order_of(p, present):
        if p["mode"] == "bins":
            named = [v for v in p["names"] if v in present]
            return named + (["(missing)"] if "(missing)" in present else []), named
        return list(p["order"]), list(p["named"])

    order, named = order_of(plan, set(groups_all.index))
    g = groups_all.reindex(order)
    rows = g["rows"].fillna(0).to_numpy(dtype="float64")
    index = pd.Index(list(order), dtype=object, name=name)
    is_named = np.isin(np.asarray(order, dtype=object), np.asarray(named, dtype=object))
    expected = np.where(is_named, rows[is_named].sum() / max(int(is_named.sum()), 1), np.nan)
    with np.errstate(invalid="ignore", divide="ignore"):
        balance = pd.DataFrame(
            {"n": rows.astype("int64"),
             "share": rows / rows.sum() if rows.sum() > 0 else np.full(len(rows), np.nan),
             "expected_n": expected,
             "pearson_residual": (rows - expected) / np.sqrt(expected)},
            index=index,
        )
    out = {"order": order, "named": named, "balance": balance, "table": balance, "anova": None,
           "groups": [], "sample_groups": []}
    tests = {}
    if "n" in g:
        n = g["n"].fillna(0).to_numpy(dtype="float64")
        mean0, s1, m2 = (g[c].to_numpy(dtype="float64") for c in ("mean0", "s1", "m2"))
        with np.errstate(invalid="ignore", divide="ignore"):
            mean = np.where(n > 0, mean0 + s1 / n, np.nan)
            var = np.where(n > 1, np.maximum(m2 - s1 * s1 / n, 0.0) / (n - 1), np.nan)
            std = np.sqrt(var)
            sums = np.where(n > 0, n * mean, 0.0)
            t_crit = stats.t.ppf(0.5 + confidence / 2.0, np.where(n > 1, n - 1, np.nan))
            half = t_crit * std / np.sqrt(n)
            total = float(sums.sum())
            share = sums / total if total != 0 else np.full(len(n), np.nan)
        out["table"] = pd.DataFrame(
            {"n": n.astype("int64"), "mean": mean, "ci_low": mean - half, "ci_high": mean + half,
             "median": g["median"].to_numpy(dtype="float64"), "std": std, "sum": sums,
             "share_of_total": share},
            index=index,
        )
        keep = np.flatnonzero(n >= 2)
        groups = [order[i] for i in keep]
        out["groups"] = groups
        if len(groups) >= 2:
            ng, k = n[keep], len(groups)
            # group means centred on the first group's first-pass mean: differences of close
            # numbers are exact, and s1/n carries the second-pass correction
            cm = (mean0[keep] - mean0[keep][0]) + s1[keep] / ng
            ss_within = np.float64(np.sum(np.maximum(m2[keep] - s1[keep] ** 2 / ng, 0.0)))
            anova = anova_from_summaries(ng, cm, ss_within)
            vg = var[keep]  # Welch (1951) from the same group summaries
            wf, wdf2 = welch_from_summaries(ng, cm, vg)
            if np.all(vg > 0) and np.isfinite(wf):
                welch = (float(wf), float(k - 1), float(stats.f.sf(wf, k - 1, wdf2)), float(wdf2))
            else:
                welch = (np.nan, float(k - 1), np.nan, np.nan)
            anova["welch_df_within"] = welch[3]
            out["anova"] = anova
            tests["anova"] = (anova["f"], anova["df_between"], anova["p_value"], anova["eta_squared"],
                              "eta_squared")
            tests["welch_anova"] = (welch[0], welch[1], welch[2], anova["omega_squared"], "omega_squared")
            # Kruskal-Wallis on the seeded sample (ranks need every value)
            kw = (np.nan, np.nan, np.nan, np.nan, "epsilon_squared_ranks")
            if y is not None and seg is not None:
                yv = np.asarray(y, dtype="float64")
                codes = pd.Categorical(np.asarray(seg, dtype=object), categories=list(order)).codes.astype("int64")
                ok = np.isfinite(yv) & (codes >= 0)
                sizes = np.bincount(codes[ok], minlength=len(order))
                sg = np.flatnonzero(sizes >= 2)
                out["sample_groups"] = [order[i] for i in sg]
                if len(sg) >= 2:
                    sel = ok & np.isin(codes, sg)
                    values, c = yv[sel], codes[sel]
                    split = [values[c == i] for i in sg]
                    if np.ptp(values) > 0:
                        h, p = stats.kruskal(*split)
                        kw = (float(h), float(len(sg) - 1), float(p), float(h / (values.size - 1)),
                              "epsilon_squared_ranks")
                    else:
                        kw = (np.nan, float(len(sg) - 1), np.nan, np.nan, "epsilon_squared_ranks")
            tests["kruskal"] = kw
    if balance_test and len(named) >= 2:
        counts = balance["n"].reindex(named).to_numpy(dtype="float64")
        chi2, p = stats.chisquare(counts)
        tests["balance_chi2"] = (float(chi2), float(len(named) - 1), float(p),
                                 float(np.sqrt(chi2 / counts.sum())), "cohens_w")
    if cross is not None and plan2 is not None:
        b_order, _ = order_of(plan2, set(cross["b"]))
        ia = pd.Index(list(order), dtype=object).get_indexer(cross["a"].astype(object))
        ib = pd.Index(list(b_order), dtype=object).get_indexer(cross["b"].astype(object))
        o = np.zeros((len(order), len(b_order)), dtype="int64")
        np.add.at(o, (ia, ib), cross["count"].to_numpy(dtype="int64"))
        bindex = pd.Index(list(b_order), dtype=object, name=b_name)
        counts = pd.DataFrame(o, index=index.copy(), columns=bindex)
        tables = counts_tables(counts)  # the pandas path's own rules, on the all-row counts
        tests.update(tables.pop("tests"))
        out.update(tables, b_order=b_order)
        if "n" in cross and "n" in g:
            cn = np.zeros(o.shape, dtype="int64")
            cs = np.zeros(o.shape, dtype="float64")
            np.add.at(cn, (ia, ib), cross["n"].to_numpy(dtype="int64"))
            np.add.at(cs, (ia, ib), cross["s1"].fillna(0.0).to_numpy(dtype="float64"))
            with np.errstate(invalid="ignore", divide="ignore"):
                cell_mean = np.where(cn > 0, mean0[:, None] + cs / cn, np.nan)
            cols = pd.MultiIndex.from_tuples([("mean", b) for b in b_order] + [("n", b) for b in b_order],
                                             names=["statistic", b_name])
            out["pivot"] = pd.DataFrame(np.hstack([cell_mean, cn.astype("float64")]), index=index.copy(),
                                        columns=cols).astype({("n", b): "int64" for b in b_order})
    table = pd.DataFrame.from_dict(tests, orient="index", columns=["statistic", "dof", "p_value", "effect_size",
                                                                   "effect_measure"])
    table = table.astype({"statistic": "float64", "dof": "float64", "p_value": "float64",
                          "effect_size": "float64", "effect_measure": object})
    table.index = pd.Index(list(tests), dtype=object, name="test")
    out["tests"] = table
    return out


# --------------------------------------------------------------------------- #
# Overlay                                                                       #
# --------------------------------------------------------------------------- #
def _supported(t: Any, name: str, metric: bool) -> bool:
    dtype = t.schema()[name]
    if metric:
        return bool(dtype.is_numeric() or dtype.is_boolean())
    return bool(dtype.is_numeric() or dtype.is_boolean() or dtype.is_string() or dtype.is_date()
                or dtype.is_timestamp())


def _names(result: Any) -> tuple[str | None, str | None, str | None]:
    return (None if result.by_pos is None else str(result.by),
            None if result.metric_pos is None else str(result.metric),
            None if result.against_pos is None else str(result.against))


def _engine_results(run: Any, result: Any) -> dict[str, Any] | None:
    """The engine queries and ``exact_segments`` (the same calls as the emitted code)."""
    by, metric, against = _names(result)
    t = run.t
    res = result._res
    ok = _supported(t, by, False) and (metric is None or _supported(t, metric, True)) and (
        against is None or _supported(t, against, False))
    if not ok:
        return None
    exact = run.exact
    plan = engine_plan(t, by, res["mode"], S.MAX_LEVELS, S.N_BINS, exact=exact, run=run.execute)
    groups_all = group_stats(t, by, plan, metric, exact=exact, run=run.execute)
    cross = plan2 = None
    if against is not None:
        plan2 = engine_plan(t, against, res["against_mode"], S.MAX_LEVELS, S.N_BINS, exact=exact, run=run.execute)
        means = groups_all["mean0"] if metric is not None else None
        cross = cross_stats(t, by, plan, against, plan2, metric, means, run=run.execute)
    ctx = result.ctx
    seg = plan_labels(ctx.series(result.by_pos), plan)
    y = ctx.float_values(result.metric_pos) if metric is not None else None
    out = exact_segments(plan, groups_all, confidence=ctx.options.confidence, name=by,
                         balance_test=res["mode"] != "bins", y=y, seg=seg, cross=cross, plan2=plan2,
                         b_name=against if against is not None else "against")
    out.update(plan=plan, plan2=plan2, seg=seg, y=y, groups_all=groups_all)
    if against is not None:
        out["against_labels"] = plan_labels(ctx.series(result.against_pos), plan2)
    return out


def apply(run: Any, result: Any) -> dict[str, str]:
    from nbeda.sections import segments as sections_segments

    if result.by_pos is None:
        return {}
    got = _engine_results(run, result)
    if got is None:
        result.notes.append("Segments: a column's type cannot be summarised by the engine here; every number "
                            "comes from the seeded sample.")
        return {}
    ctx = result.ctx
    old = result._res
    # the notes the tab writes from its numbers (to tell them from the notes about choices)
    before = sections_segments.SegmentsResult(ctx, old)
    sections_segments._words(ctx, old, before)
    choice_notes = [n for n in result.notes if n not in before.notes]

    new = dict(old)
    new.update(order=got["order"], named=got["named"], labels=got["seg"], balance=got["balance"],
               table=got["table"], tests=got["tests"], anova=got["anova"], groups=got["sample_groups"],
               y=got["y"])
    if result.against_pos is not None:
        new["cross"] = {k: got[k] for k in ("crosstab", "row_pct", "col_pct", "expected", "residuals",
                                            "cramers_v", "cramers_v_corrected", "cochran_ok",
                                            "share_expected_ge_5", "min_expected") if k in got}
        new["against_labels"] = got["against_labels"]
        new["against_order"] = got["b_order"]
        if result.metric_pos is not None:
            new["pivot"] = got.get("pivot")
    fresh = sections_segments.SegmentsResult(ctx, new)
    # the tests use the segments with >= 2 values over all rows; the words need the ANOVA's groups
    words_res = dict(new, groups=got["groups"])
    sections_segments._words(ctx, words_res, fresh)
    for attr in ("table", "balance", "tests", "crosstab", "row_pct", "col_pct", "expected", "residuals",
                 "cramers_v", "cramers_v_corrected", "cochran_ok", "pivot", "anova_table", "effects",
                 "summary", "leader", "cautions", "flags"):
        setattr(result, attr, getattr(fresh, attr))
    result._res = new
    result._pairs = None
    metric = result.metric
    notes = [n for n in fresh.notes if "infinite values of" not in n]
    if metric is not None:
        n_inf = int(got["groups_all"]["n_inf"].sum())
        if n_inf:
            notes.append(f"{n_inf:,} infinite values of {metric} (all rows) are treated as missing.")
    binned = "bins" in (old.get("mode"), old.get("against_mode"))
    how = "the whole table (the sample is every row)" if run.sample_is_all else \
        f"the seeded sample ({len(run.sample()):,} of {run.n_rows:,} rows)"
    if metric is not None:
        what = ("the segments, their counts, means, standard deviations, sums, intervals and medians, the "
                "balance, the ANOVA table, Welch's ANOVA, η²/ω², the balance χ²"
                + (", the cross-tab and the pivot" if result.against_pos is not None else ""))
    else:
        what = "the segments, their counts and shares, the balance χ²" + (
            " and the cross-tab" if result.against_pos is not None else "")
    approx = ""
    if not run.exact:
        approx = " (medians approximate" if metric is not None else ""
        if binned:
            approx += (", and " if approx else " (") + "quantile bins cut at approximate quantiles"
        approx += ")" if approx else ""
    text = f"Engine path: {what} are computed over all {run.n_rows:,} rows by the engine{approx}."
    if metric is not None:
        text += (f" Kruskal–Wallis and Tukey's HSD need every value, so they use {how}, with its rows "
                 "labelled by the same segments.")
    notes.append(text)
    result.notes = choice_notes + notes
    if result.metric_pos is None:
        labels = {c: run.exact_label() for c in _BALANCE}
    else:
        labels = {c: run.exact_label() for c in _METRIC_EXACT}
        labels["median"] = run.exact_label("quantile")
    if old.get("mode") == "bins" and not run.exact:
        labels = {c: f"{v}; segments cut at the engine's approximate quantiles" for c, v in labels.items()}
    return labels


def code(run: Any, result: Any) -> str:
    if result.by_pos is None:
        return ""
    by, metric, against = _names(result)
    if not (_supported(run.t, by, False) and (metric is None or _supported(run.t, metric, True))
            and (against is None or _supported(run.t, against, False))):
        return ""
    ctx = result.ctx
    res = result._res
    exact = run.exact
    conf = ctx.options.confidence
    blocks = [
        "# The segments and the numbers the engine computes over all rows replace the sample's;",
        "# Kruskal-Wallis (ranks) stays on the sample, its rows labelled by the all-row segments.",
        "import ibis",
        "from scipy import stats",
        function_source(segment_values),
        function_source(segment_plan),
        function_source(engine_plan),
        function_source(segment_expr),
        function_source(group_stats),
    ]
    if against is not None:
        blocks.append(function_source(cross_stats))
    blocks += [function_source(plan_labels), function_source(S.counts_tables), function_source(S.anova_from_summaries),
               function_source(S.welch_from_summaries), function_source(exact_segments)]
    body = [
        f"plan = engine_plan(t, {by!r}, {res['mode']!r}, {S.MAX_LEVELS}, {S.N_BINS}, exact={exact!r})",
        f"groups_all = group_stats(t, {by!r}, plan, {metric!r}, exact={exact!r})",
        f"seg = plan_labels({col_expr(ctx, result.by_pos, 'sample')}, plan)",
    ]
    extra = ""
    if against is not None:
        means = "groups_all['mean0']" if metric is not None else "None"
        body += [
            f"plan2 = engine_plan(t, {against!r}, {res['against_mode']!r}, {S.MAX_LEVELS}, {S.N_BINS}, "
            f"exact={exact!r})",
            f"cross_all = cross_stats(t, {by!r}, plan, {against!r}, plan2, {metric!r}, "
            f"{means})",
        ]
        extra = f", cross=cross_all, plan2=plan2, b_name={against!r}"
    body += [
        f"out = exact_segments(plan, groups_all, confidence={conf!r}, name={by!r}, "
        f"balance_test={res['mode'] != 'bins'!r}, y={'y' if metric is not None else 'None'}, seg=seg{extra})",
        "segments = out['table']",
        "segments_balance = out['balance']",
        "segments_tests = out['tests']",
    ]
    if against is not None:
        body += [
            "segments_crosstab = out['crosstab']",
            "segments_residuals = out['residuals']  # adjusted standardized residuals; |r| > 2 stands out",
        ]
        if metric is not None:
            body.append("segments_pivot = out['pivot']")
    if metric is not None:
        body += [
            "if len(out['sample_groups']) >= 2:  # Tukey's HSD on the sample, all-row segments",
            f"    segments_pairs = tukey_pairs(y, seg, out['sample_groups'], confidence={conf!r})",
        ]
        blocks.append(function_source(S.tukey_pairs))
    return "\n".join(blocks + body) + "\n"
