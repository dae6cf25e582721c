"""Extremes on the engine path: every rule's counts over all rows, Tukey fences from all-row quartiles.

How each number is computed when the data live in an engine:

* the **rule** of each column (and its reason) is chosen on the seeded sample, as are the
  fences of the rules that need the values themselves (``tukey_log``, ``modified_z``,
  ``esd``, ``zscore``);
* **Tukey fences** (``tukey``: Q1 − 1.5·IQR, Q3 + 1.5·IQR; ``tukey_far``: k = 3) are
  recomputed from the engine's quartiles of all rows (linear interpolation, as pandas),
  with the same usability test as the sample path (n ≥ 5 finite values and IQR > 0);
* **n, n_low, n_high, n_inf, share** are counted by the engine over all rows against those
  fences: one aggregate query counts the finite values below ``lower`` and above ``upper``
  of every column (:func:`count_beyond`); ``n`` and ``n_inf`` come from ``column_stats``.
  For ``esd`` columns this counts the values beyond the sample's band (mean ± λ·SD of the
  data left after the test) — the test itself ran on the sample.  When the sample is the
  whole table the test's own counts are kept (they are then exact);
* **most_extreme** (when the table is larger than the sample) is the engine's minimum or
  maximum, whichever scores further out on the rule's scale: Tukey anchors at the all-row
  quartiles (unit IQR), ESD scores R₁ = (x − mean)/SD with the all-row mean and SD, the
  other rules use the anchors of their sample fences;
* the flagged-values, robust-distance and full-record tables stay on the sample (their row
  numbers are positions in the sample).
"""

from __future__ import annotations

from typing import Any

import ibis
import numpy as np
import pandas as pd

from nbeda.engine import aggregates
from nbeda.stats._codegen import function_source

__all__ = ["count_beyond", "tukey_fences", "exact_extremes", "apply", "code"]

_TUKEY_K = {"tukey": 1.5, "tukey_far": 3.0}


# ----------------------------------------------------------------------------------------------
# Embedded functions (their source goes into the emitted code)
# ----------------------------------------------------------------------------------------------
def count_beyond(t, names, lower, upper, run=None):
    """Finite values below ``lower[i]`` and above ``upper[i]`` of each column ``names[i]`` of
    ibis table ``t``, over all rows, in one aggregate query.

    NaN and ±inf are not counted (they are missing or counted apart); a fence that is NaN or
    infinite counts nothing.  Returns a frame indexed by column with ``n_low`` and ``n_high``.
    """
    run = run or (lambda expr, what: expr.to_pandas())
    aggs = {}
    for i, c in enumerate(names):
        x = t[c].cast("float64")
        if t.schema()[c].is_floating():
            inf = ibis.literal(float("inf"), type="float64")  # explicit: isinf() is FALSE on Spark
            x = (x.isnan() | (x == inf) | (x == -inf)).ifelse(ibis.null("float64"), x)
        lo, hi = float(lower[i]), float(upper[i])
        if lo == lo and abs(lo) != float("inf"):
            aggs[f"low_{i}"] = (x < ibis.literal(lo, type="float64")).sum()
        if hi == hi and abs(hi) != float("inf"):
            aggs[f"high_{i}"] = (x > ibis.literal(hi, type="float64")).sum()
    got = run(t.aggregate(**aggs), "values beyond the fences").iloc[0] if aggs else {}

    def count(key):
        v = got[key] if key in aggs else 0
        return int(v) if v is not None and v == v else 0

    table = pd.DataFrame(
        {"n_low": [count(f"low_{i}") for i in range(len(names))],
         "n_high": [count(f"high_{i}") for i in range(len(names))]},
        index=pd.Index(list(names), name="column", dtype=object),
    )
    return table


def tukey_fences(extremes, agg, quartiles):
    """The fences of the extremes table, with Tukey fences recomputed from all-row quartiles.

    ``tukey``: Q1 − 1.5·IQR, Q3 + 1.5·IQR; ``tukey_far``: k = 3 (Tukey 1977), from
    ``quartiles`` (``column_quantiles`` at 0.25, 0.5, 0.75; linear interpolation) and usable
    when the column has at least 5 finite values (``agg["count"]``) and IQR > 0, as on the
    sample path.  Other rules keep the fences chosen on the sample.
    """
    names = [str(c) for c in extremes.index]
    out = pd.DataFrame({"lower": extremes["lower"].to_numpy(dtype="float64"),
                        "upper": extremes["upper"].to_numpy(dtype="float64")},
                       index=pd.Index(names, name="column", dtype=object))
    rule = extremes["rule"].to_numpy(dtype=object)
    k = np.array([{"tukey": 1.5, "tukey_far": 3.0}.get(r, np.nan) for r in rule], dtype="float64")
    tukey = ~np.isnan(k)
    if not tukey.any():
        return out
    q = quartiles.reindex(names)
    q1 = q[0.25].to_numpy(dtype="float64")
    q3 = q[0.75].to_numpy(dtype="float64")
    n = agg.reindex(names)["count"].to_numpy(dtype="float64")
    with np.errstate(invalid="ignore", over="ignore"):
        iqr = q3 - q1
        usable = tukey & (n >= 5) & (iqr > 0)
        out["lower"] = np.where(tukey, np.where(usable, q1 - k * iqr, np.nan), out["lower"])
        out["upper"] = np.where(tukey, np.where(usable, q3 + k * iqr, np.nan), out["upper"])
    return out


def exact_extremes(extremes, agg, fences, counts, quartiles, whole=False):
    """The extremes table with the engine's all-row numbers in place of the sample's.

    ``agg``: ``column_stats`` (n = finite values, n_inf, min, max, two-pass moments);
    ``fences``: ``tukey_fences``; ``counts``: ``count_beyond`` against those fences;
    ``quartiles``: ``column_quantiles`` (Tukey anchors of the score).  ``whole``: the sample
    is the whole table — the generalized ESD test's own counts and the most extreme values
    found on it are then exact and kept.
    share = (n_low + n_high + n_inf) / (n + n_inf), as on the sample path.
    """
    out = extremes.copy()
    names = [str(c) for c in out.index]
    a = agg.reindex(names)
    f = fences.reindex(names)
    c = counts.reindex(names)
    rule = out["rule"].to_numpy(dtype=object)
    is_esd = rule == "esd"
    n = a["count"].to_numpy(dtype="int64")
    n_inf = a["n_inf"].to_numpy(dtype="int64")
    lower = f["lower"].to_numpy(dtype="float64")
    upper = f["upper"].to_numpy(dtype="float64")
    n_low = c["n_low"].to_numpy(dtype="int64")
    n_high = c["n_high"].to_numpy(dtype="int64")
    if whole:
        n_low = np.where(is_esd, out["n_low"].to_numpy(dtype="int64"), n_low)
        n_high = np.where(is_esd, out["n_high"].to_numpy(dtype="int64"), n_high)
    out["n"] = n
    out["lower"], out["upper"] = lower, upper
    out["n_low"], out["n_high"], out["n_inf"] = n_low, n_high, n_inf
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        out["share"] = np.where(n + n_inf > 0, (n_low + n_high + n_inf) / np.maximum(n + n_inf, 1), np.nan)
        if not whole:
            # the most extreme value of all rows is the minimum or the maximum: score both on
            # the rule's scale (anchors and unit as the fences: lower = anchor_lo − c·unit, ...)
            lo_val = pd.to_numeric(a["min"], errors="coerce").to_numpy(dtype="float64")
            hi_val = pd.to_numeric(a["max"], errors="coerce").to_numpy(dtype="float64")
            q = quartiles.reindex(names)
            q1, q3 = q[0.25].to_numpy(dtype="float64"), q[0.75].to_numpy(dtype="float64")
            cnt = n.astype("float64")
            sd = np.sqrt(((a["m2"] - a["s1"] ** 2 / cnt) / (cnt - 1)).to_numpy(dtype="float64"))
            mean = a["mean"].to_numpy(dtype="float64")
            is_tukey = np.isin(rule, ["tukey", "tukey_far"])
            is_log = rule == "tukey_log"
            is_modz = rule == "modified_z"
            ll, lu = np.log(np.where(is_log, lower, 1.0)), np.log(np.where(is_log, upper, 1.0))
            d = (lu - ll) / 4.0  # tukey_log: lower = exp(lq1 − 1.5·d), upper = exp(lq3 + 1.5·d)
            mid = (lower + upper) / 2.0
            anchor_lo = np.select([is_tukey, is_log, is_esd], [q1, ll + 1.5 * d, mean], mid)
            anchor_hi = np.select([is_tukey, is_log, is_esd], [q3, lu - 1.5 * d, mean], mid)
            unit = np.select([is_tukey, is_log, is_modz, is_esd], [q3 - q1, d, (upper - lower) / 7.0, sd],
                             (upper - lower) / 6.0)

            def score(v, anchor):
                base = np.where(is_log, np.log(np.where(is_log & (v > 0), v, np.nan)), v)
                return (base - anchor) / unit

            s_lo, s_hi = score(lo_val, anchor_lo), score(hi_val, anchor_hi)
            top_hi = ~(np.abs(s_lo) > np.abs(s_hi))  # a minimum ≤ 0 has no log score: the maximum
            most = np.where(top_hi, hi_val, lo_val)
            most_score = np.where(top_hi, s_hi, s_lo)
            ok = np.isfinite(lower) & np.isfinite(upper) & np.isfinite(most_score) & (n >= 5)
            out["most_extreme"] = np.where(ok, most, np.nan)
            out["most_extreme_score"] = np.where(ok, most_score, np.nan)
    return out


# ----------------------------------------------------------------------------------------------
# Library side
# ----------------------------------------------------------------------------------------------
def _tukey_names(table: pd.DataFrame, names: list[str]) -> list[str]:
    rules = dict(zip([str(c) for c in table.index], table["rule"]))
    return [c for c in names if rules.get(c) in _TUKEY_K]


def _names(run: Any, table: pd.DataFrame) -> list[str]:
    """The table's columns when every one is a number in the engine (else [], all sample-based)."""
    names = [str(c) for c in table.index]
    kinds = aggregates.column_kinds(run.t)
    if len(set(names)) != len(names) or any(kinds.get(c) != "number" for c in names):
        return []
    return names


def apply(run: Any, result: Any) -> dict[str, str]:
    table = result.table
    names = _names(run, table)
    if not names:
        return {}
    whole = bool(run.sample_is_all)
    agg = run.stats().loc[names]
    tukey = _tukey_names(table, names)
    quartiles = run.quantiles(tukey) if tukey else pd.DataFrame(columns=[0.25, 0.5, 0.75])
    fences = tukey_fences(table, agg, quartiles)
    counts = count_beyond(run.t, names, fences["lower"].tolist(), fences["upper"].tolist(), run=run.execute)
    result.table = exact_extremes(table, agg, fences, counts, quartiles, whole=whole)
    _restate(run, result, whole, tukey, names)
    return _labels(run, result.table, names, tukey, whole)


def _labels(run: Any, table: pd.DataFrame, names: list[str], tukey: list[str], whole: bool) -> dict[str, str]:
    exact = run.exact_label()
    sample = run.sample_label()
    on_sample = sample if whole else f"the {sample}"
    rules = set(table.loc[names, "rule"])
    others = rules - set(_TUKEY_K) - {"none"}
    fence_kinds = []
    if tukey:
        fence_kinds.append("tukey/tukey_far columns: " + run.exact_label("quantile")
                           + ", Tukey fences from the engine's quartiles of all rows")
    if others:
        fence_kinds.append(f"{', '.join(sorted(others))} columns: fences chosen on {on_sample}")
    fence_label = "; ".join(fence_kinds) if fence_kinds else "no fences (rule none)"
    counted = f"{exact}, counted against the fences"
    if "esd" in rules:
        counted += ("; esd columns: " + ("the test's own count (the sample is the whole table)" if whole
                                         else "values beyond the sample's ESD band"))
    labels = {
        "n": exact, "n_inf": exact, "lower": fence_label, "upper": fence_label,
        "n_low": counted, "n_high": counted, "share": counted,
        "rule": sample if whole else f"chosen on {on_sample}",
        "reason": sample if whole else f"chosen on {on_sample}",
        "basis": "the rule's definition",
    }
    if whole:
        labels["most_extreme"] = labels["most_extreme_score"] = sample
    else:
        labels["most_extreme"] = f"{exact} (the all-row minimum or maximum)"
        labels["most_extreme_score"] = (f"{exact} for the value; scored against the fences' anchors "
                                        "(tukey: all-row quartiles; esd: all-row mean and SD; "
                                        "other rules: anchors chosen on the sample)")
    return labels


def _restate(run: Any, result: Any, whole: bool, tukey: list[str], names: list[str]) -> None:
    """Notes, cautions and flags that match the all-row table."""
    t = result.table
    if not whole:
        result.notes.append(
            f"Engine path: rules chosen on a seeded sample of {len(run.sample()):,} of {run.n_rows:,} rows; "
            "n, n_low, n_high, n_inf and share count all rows against the fences"
            + (" (Tukey fences from the all-row quartiles)" if tukey else "")
            + "; the `note` column describes the sample."
        )
        result.notes.append(
            "The flagged-values, robust-distance and full-record tables are computed on the sample: "
            "their row numbers are positions in the sample, not in the full table."
        )
    if not any("real" in c and "case" in c for c in result.cautions):
        result.cautions.insert(0, "An extreme value may be a real, important case rather than an error: "
                                  "investigate before removing or capping it.")
    joint = [f for f in result.flags if "far from the bulk jointly" in f]
    flags = []
    for label, row in t.iterrows():
        n_flag = int(row["n_low"] + row["n_high"])
        bits = []
        if n_flag:
            bits.append(f"{n_flag} extreme value(s) by {row['rule']} (low {int(row['n_low'])}, "
                        f"high {int(row['n_high'])})" + ("" if whole else " over all rows"))
        if row["n_inf"]:
            bits.append(f"{int(row['n_inf'])} infinite value(s)")
        special = [s for s in str(row["note"]).split("; ") if s.startswith(("possible unit error", "the value "))]
        if special and not whole:
            special = [s + " (in the sample)" for s in special]
        if bits or special:
            flags.append(f"{label}: " + "; ".join(bits + special))
    flags += [f if whole else f + " in the sample" for f in joint]
    result.flags = flags


def code(run: Any, result: Any) -> str:
    names = _names(run, result.table)
    if not names:
        return ""
    tukey = _tukey_names(result.table, names)
    return "\n".join([
        "# The numbers the engine computes over all rows replace the sample's: Tukey fences from the",
        "# all-row quartiles; n, n_low, n_high, n_inf and share counted over all rows against the fences.",
        "# An extreme value may be a real, important case: investigate before removing anything.",
        "import ibis",
        function_source(aggregates.column_stats),
        function_source(aggregates.column_quantiles),
        function_source(count_beyond),
        function_source(tukey_fences),
        function_source(exact_extremes),
        f"names = {names!r}",
        f"agg = column_stats(t, names, exact={run.exact!r})",
        f"quartiles = column_quantiles(t, {tukey!r}, (0.25, 0.5, 0.75), exact={run.exact!r})",
        "fences = tukey_fences(extremes, agg, quartiles)",
        'counts = count_beyond(t, names, fences["lower"].tolist(), fences["upper"].tolist())',
        f"extremes = exact_extremes(extremes, agg, fences, counts, quartiles, whole={bool(run.sample_is_all)!r})",
    ])
