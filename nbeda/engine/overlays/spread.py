"""Spread on the engine path: counts, moments, min/max, sum and quartiles over all rows.

Exact (or, on approximate engines, labelled approximate) columns: count, mean,
mean_ci_low/high, std, var, sem, min, max, range, sum, n_inf, distinct, median,
q1, q3, iqr, cv, quartile_skew.  The rest (mode, trimmed mean, MAD, median
interval, reading, levels table) come from the seeded sample and say so.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd
from scipy import stats

from nbeda.engine import aggregates
from nbeda.stats._codegen import function_source

__all__ = ["exact_spread", "apply", "code"]

_MOMENTS = ["count", "mean", "mean_ci_low", "mean_ci_high", "std", "var", "sem", "min", "max",
            "range", "sum", "n_inf", "cv"]
_QUANTILES = ["median", "q1", "q3", "iqr", "quartile_skew"]


def exact_spread(spread, agg, quartiles, confidence=0.95):
    """The spread table with the engine's all-row numbers in place of the sample's.

    ``agg`` is ``column_stats`` (two-pass moments: var = (m2 − s1²/n)/(n − 1));
    ``quartiles`` is ``column_quantiles`` at 0.25, 0.5, 0.75 (linear interpolation).
    """
    out = spread.copy()
    a = agg.reindex(out.index)
    q = quartiles.reindex(out.index)
    n = a["count"].astype("float64")
    with np.errstate(all="ignore"):
        var = ((a["m2"] - a["s1"] ** 2 / n) / (n - 1)).where(n > 1)
        std = np.sqrt(var)
        sem = std / np.sqrt(n)
        half = stats.t.ppf(0.5 + confidence / 2, n - 1) * sem
        mean = a["mean"].where(n > 0)
        out["count"] = a["count"].astype(out["count"].dtype)
        out["mean"] = mean
        out["std"], out["var"], out["sem"] = std, var, sem
        out["mean_ci_low"], out["mean_ci_high"] = mean - half, mean + half
        out["min"], out["max"] = a["min"].astype("float64"), a["max"].astype("float64")
        out["range"] = out["max"] - out["min"]
        out["sum"] = a["sum"].astype("float64")
        out["n_inf"] = a["n_inf"].astype(out["n_inf"].dtype)
        out["distinct"] = a["distinct"].astype(out["distinct"].dtype)
        out["cv"] = (std / mean).where(mean != 0)
        q1, med, q3 = q[0.25], q[0.5], q[0.75]
        out["median"], out["q1"], out["q3"] = med, q1, q3
        out["iqr"] = q3 - q1
        out["quartile_skew"] = ((q3 - med) - (med - q1)) / (q3 - q1).where(q3 > q1)
    return out


def apply(run: Any, result: Any) -> dict[str, str]:
    names = [str(c) for c in result.table.index]
    if not names:
        return {}
    agg = run.stats().loc[names]
    quartiles = run.quantiles(names)
    result.table = exact_spread(result.table, agg, quartiles, confidence=result.ctx.options.confidence)
    labels = {c: run.exact_label() for c in _MOMENTS}
    labels["distinct"] = run.exact_label("distinct")
    labels.update({c: run.exact_label("quantile") for c in _QUANTILES})
    return labels


def code(run: Any, result: Any) -> str:
    names = [str(c) for c in result.table.index]
    if not names:
        return ""
    conf = result.ctx.options.confidence
    return "\n".join([
        "# The numbers the engine computes over all rows replace the sample's:",
        "import ibis",
        "from scipy import stats",
        function_source(aggregates.column_stats),
        function_source(aggregates.column_quantiles),
        function_source(exact_spread),
        f"names = {names!r}",
        f"agg = column_stats(t, names, exact={run.exact!r})",
        f"quartiles = column_quantiles(t, names, (0.25, 0.5, 0.75), exact={run.exact!r})",
        f"spread = exact_spread(spread, agg, quartiles, confidence={conf!r})",
    ])
