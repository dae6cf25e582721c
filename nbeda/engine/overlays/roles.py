"""Roles on the engine path: count, missing and distinct values over all rows; roles re-derived.

Exact (or, on approximate engines, labelled approximate) columns: count,
missing, unique.  ``role`` and ``reason`` come from the same rules as the
in-memory path (:func:`nbeda.stats.roles._role_rules`) fed with the all-row
count and distinct count and the sample's values (plus, from the engine, the
distinct values of few-level columns the sample happens to miss, and a few
values of columns the sample holds no value of).  So a column that is
all-distinct in the sample but repeats values overall is not called an
identifier.  ``dtype`` and ``example`` come from the sample.

Counting follows pandas: ``count`` = non-missing values (±inf included),
``unique`` = distinct non-missing values, each of +inf and −inf counting once
(the engine's distinct count covers finite values; the infinities are added).
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from nbeda.engine import aggregates
from nbeda.stats._codegen import function_source
from nbeda.stats.roles import _role_rules

__all__ = ["role_levels", "exact_roles", "apply", "code"]


def role_levels(t, sample, agg, max_levels=20, run=None):
    """Distinct values the role rules need that the sample lacks, from all rows of ibis table ``t``.

    For every column of ``agg`` (``column_stats``) with at most ``max_levels`` distinct
    values of which the sample holds fewer, and every column the sample holds no value
    of although the table does: up to 200 distinct non-missing values (sorted).
    Returns {column name: list of values}.
    """
    run = run or (lambda expr, what: expr.to_pandas())
    out = {}
    for c in agg.index:
        a = agg.loc[c]
        if not a["distinct"] == a["distinct"]:  # a type the engine cannot count distinct values of
            continue
        present = int(a["rows"]) - int(a["missing"])
        unique = int(a["distinct"]) + int(a["n_pinf"] > 0) + int(a["n_ninf"] > 0)
        held = sample[c].dropna()
        if present == 0 or (len(held) and unique > max_levels):
            continue
        try:
            if len(held) and int(held.nunique()) >= unique:
                continue
        except TypeError:  # containers (lists, dicts): the rules call them text anyway
            continue
        col = t[c]
        keep = col.notnull()
        if t.schema()[c].is_floating():
            keep = keep & ~col.isnan()
        expr = t.filter(keep).select(value=col).distinct().order_by("value").limit(200)
        out[c] = list(run(expr, f"distinct values of {c}")["value"])
    return out


def exact_roles(roles, agg, sample, levels, overrides, rules, exact=True):
    """The Roles table with all-row counts, and roles re-derived from them by ``rules``.

    ``agg`` is ``column_stats``; ``levels`` is ``role_levels``; ``rules`` is the role
    rules function ``_role_rules(values, dtype, count, unique, levels)``; ``overrides``
    the roles the analyst set (they replace the inferred role, as in the Roles code).
    ``roles`` is the Roles table of the sample.  With approximate distinct counts
    (``exact=False``) the count is kept between the sample's distinct count and the
    non-missing count, and the sample's own (exact) count is used when the sample
    holds every row.
    """
    out = roles.copy()
    a = agg.reindex(out.index)
    role_col, reason_col, example_col = [], [], []
    counts, missing, uniques = [], [], []
    for c in out.index:
        rows, miss = int(a.at[c, "rows"]), int(a.at[c, "missing"])
        count = rows - miss  # non-missing, +/-inf included (as pandas counts them)
        distinct = a.at[c, "distinct"]
        if distinct == distinct:
            unique = int(distinct) + int(a.at[c, "n_pinf"] > 0) + int(a.at[c, "n_ninf"] > 0)
        else:  # a type the engine cannot count distinct values of (lists, structs): the sample's count
            unique = int(out.at[c, "unique"])
        if not exact:  # HyperLogLog: bounded by what is known for sure
            unique = int(out.at[c, "unique"]) if len(sample) == rows else max(min(unique, count), int(out.at[c, "unique"]))
        s = sample[c]
        values = s.dropna()
        extra = levels.get(c, [])
        role, reason, example = out.at[c, "role"], out.at[c, "reason"], out.at[c, "example"]
        if count == 0:
            unique = 0
            role, reason, example = "empty", "no rows" if rows == 0 else "every value is missing", ""
        elif "values are containers" not in str(reason):  # containers: the sample's reading (text) stands
            if extra:  # values the sample lacks, from the engine
                seen = set(values)
                new = [v for v in extra if v not in seen]
                if new:
                    values = pd.concat([values, pd.Series(new).astype(s.dtype)], ignore_index=True)
            dtype = s.dtype
            numeric = pd.api.types.is_numeric_dtype(dtype) and not pd.api.types.is_bool_dtype(dtype)
            lv = None
            if numeric and not isinstance(dtype, pd.CategoricalDtype):
                lv = np.unique(values.to_numpy())  # sorted distinct values, as the Roles rules use them
            role, reason = rules(values, dtype, count, unique, lv)
            if example == "" and len(values):
                example = str(values.iloc[0])[:40]
        if c in overrides and overrides[c] != role and not str(reason).startswith("set by the user"):
            reason = f"set by the user (inferred: {role}; {reason})"
            role = overrides[c]
        role_col.append(role)
        reason_col.append(reason)
        example_col.append(example)
        counts.append(count)
        missing.append(miss)
        uniques.append(unique)
    out["role"], out["reason"], out["example"] = role_col, reason_col, example_col
    out["count"] = np.asarray(counts, dtype="int64")
    out["missing"] = np.asarray(missing, dtype="int64")
    out["unique"] = np.asarray(uniques, dtype="int64")
    return out


def _names(result: Any) -> list[str]:
    return [str(c) for c in result.table.index]


def apply(run: Any, result: Any) -> dict[str, str]:
    names = _names(result)
    if not names:
        return {}
    agg = run.stats().loc[names]
    sample = run.sample()
    levels = role_levels(run.t, sample, agg, run=run.execute)
    overrides = dict(result.ctx.options.roles)
    result.table = exact_roles(result.table, agg, sample, levels, overrides, _role_rules, exact=run.exact)
    labels = {"count": run.exact_label(), "missing": run.exact_label(), "unique": run.exact_label("distinct")}
    if run.sample_is_all:
        if not run.exact:  # the sample's own distinct counts are exact
            labels["unique"] = run.sample_label()
        rule_label = labels["unique"]
    else:
        how = "exact" if run.exact else "approximate"
        rule_label = (f"rules applied to the all-row counts ({how} distinct count) and the sample's values "
                      "(few-level columns: all their levels, from the engine)")
    labels["role"] = labels["reason"] = rule_label
    # every other tab follows the all-row roles (the report hands them to its context); say
    # where the sample alone would have read a column differently
    before = result.ctx.roles_table["role"]
    differ = [str(c) for c, r0, r1 in zip(result.table.index, before, result.table["role"], strict=True) if r0 != r1]
    if differ:
        result.notes.append(
            "Over all rows these columns take another role than the sample alone suggests; every tab "
            "follows the all-row role: "
            + ", ".join(differ[:10]) + (f" and {len(differ) - 10} more" if len(differ) > 10 else "") + "."
        )
    return labels


def code(run: Any, result: Any) -> str:
    names = _names(result)
    if not names:
        return ""
    return "\n".join([
        "# The counts the engine computes over all rows replace the sample's, and the roles are",
        "# re-derived from them by the same rules (so a column unique only in the sample is no identifier):",
        "import ibis\n",
        function_source(aggregates.column_stats),
        function_source(role_levels),
        function_source(exact_roles),
        f"names = {names!r}",
        f"agg = column_stats(t, names, exact={run.exact!r})",
        "levels = role_levels(t, sample, agg)",
        f"roles = exact_roles(roles, agg, sample, levels, overrides, _role_rules, exact={run.exact!r})",
    ])
