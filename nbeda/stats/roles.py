"""Roles: what each column is.

The rules live in one self-contained function, :func:`role_of`, written in
plain pandas/numpy so that the emitted code embeds exactly the same rules.

Rules, in order (each produces the ``reason`` text):

1. no non-missing value → ``empty``;
2. values that cannot be hashed (lists, dicts) → ``text``;
3. a single distinct value → ``constant``;
4. boolean dtype → ``boolean``;
5. categorical dtype: ordered → ``ordinal``; two yes/no-like levels → ``boolean``;
   otherwise ``nominal``;
6. datetime, tz-aware datetime and period dtypes → ``datetime``;
   durations (timedelta) → ``continuous`` (analysed in seconds);
7. numbers:
   - only the values 0 and 1 → ``boolean``;
   - integer values, all distinct, in monotone order (≥ 3 values) → ``identifier``;
   - integer values on a short contiguous scale starting at 0 or 1 with 4–11
     levels and repeated values (e.g. 1–5, 1–7, 0–10) → ``ordinal``, read from a
     rating-like scale (override to ``discrete`` for counts);
   - integer values with at most 20 distinct levels (common practice) → ``discrete``;
   - other integer values → ``continuous`` (many levels);
   - non-integer numbers → ``continuous``;
8. strings and mixed objects:
   - values that reduce to two levels from yes/no, y/n, true/false, t/f, 0/1
     (ignoring case and surrounding spaces) → ``boolean``;
   - ≥ 95% of a spread-out sample of ≤ 200 values look like dates and parse → ``datetime``;
   - mean length ≥ 30 characters and ≥ 50% distinct → ``text``;
   - all distinct (≥ 3 values) → ``identifier``;
   - otherwise → ``nominal``.

User overrides (``roles={...}``) replace the inferred role; the reason then says
so and keeps the inferred role for reference.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np
import pandas as pd

from nbeda._context import Context
from nbeda.stats._codegen import function_source, header, join_blocks, lit

__all__ = ["role_of", "role_row", "compute_roles", "roles_code", "ROLES_COLUMNS"]

ROLES_COLUMNS = ["role", "dtype", "count", "missing", "unique", "example", "reason"]


def role_row(s):
    """One Roles row for one column: role, dtype, count, missing, unique, example, reason."""
    values = s.dropna()
    count = len(values)
    row = {"role": "", "dtype": str(s.dtype), "count": count, "missing": len(s) - count,
           "unique": 0, "example": str(values.iloc[0])[:40] if count else "", "reason": ""}
    dtype = s.dtype
    if count == 0:
        row["role"], row["reason"] = "empty", "no rows" if len(s) == 0 else "every value is missing"
        return row
    numeric = pd.api.types.is_numeric_dtype(dtype) and not pd.api.types.is_bool_dtype(dtype)
    levels = None  # sorted distinct values of a plain numeric column
    try:
        if numeric and not isinstance(dtype, pd.CategoricalDtype):
            levels = np.unique(values.to_numpy())  # one sort, reused below (exact for int64)
            unique = int(levels.size)
        else:
            unique = int(values.nunique())
    except TypeError:
        row["unique"] = int(values.map(str).nunique())
        row["role"], row["reason"] = "text", "values are containers (lists, dicts, sets): treated as text"
        return row
    row["unique"] = unique
    row["role"], row["reason"] = _role_rules(values, dtype, count, unique, levels)
    return row


def _role_rules(values, dtype, count, unique, levels):
    """The documented role rules, given the non-missing values and their distinct count."""
    if unique == 1:
        return "constant", f"a single distinct value in {count} non-missing rows"
    if pd.api.types.is_bool_dtype(dtype):
        return "boolean", "boolean dtype"
    bool_words = [{"yes", "no"}, {"y", "n"}, {"true", "false"}, {"t", "f"}, {"0", "1"}]
    if isinstance(dtype, pd.CategoricalDtype):
        if dtype.ordered:
            return "ordinal", "ordered categorical: its levels carry an order"
        words = {str(w).strip().lower() for w in values.unique()} if unique <= 8 else set()
        if words in bool_words:
            return "boolean", "two yes/no-like levels: " + " / ".join(sorted(words))
        return "nominal", f"unordered categorical with {unique} levels"
    if pd.api.types.is_datetime64_any_dtype(dtype) or isinstance(dtype, pd.PeriodDtype):
        return "datetime", f"{dtype} values"
    if pd.api.types.is_timedelta64_dtype(dtype):
        return "continuous", "durations: analysed in seconds"
    if levels is not None:
        finite = levels[np.isfinite(levels)]
        if finite.size and np.all(finite == np.round(finite)):
            lo, hi = float(finite[0]), float(finite[-1])
            if levels.size == 2 and lo == 0 and hi == 1:
                return "boolean", "only the values 0 and 1"
            if count >= 3 and unique == count:
                a = values.to_numpy()
                if np.all(a[1:] > a[:-1]) or np.all(a[1:] < a[:-1]):
                    return "identifier", "distinct integers in monotone order (a row number or key)"
            if lo in (0, 1) and 4 <= finite.size <= 11 and finite.size == hi - lo + 1 and count > unique:
                return "ordinal", (
                    f"integers on a short contiguous {lo:g}–{hi:g} scale: read as a rating-like "
                    "ordinal scale (override to 'discrete' if they are counts)"
                )
            if unique <= 20:
                return "discrete", f"integer values with few distinct levels ({unique})"
            return "continuous", f"integer values with many distinct levels ({unique})"
        return "continuous", "numbers with fractional values"
    words = {str(w).strip().lower() for w in values.unique()} if unique <= 8 else set()
    if words in bool_words:
        return "boolean", "two yes/no-like values: " + " / ".join(sorted(words))
    pick = np.unique(np.linspace(0, len(values) - 1, min(len(values), 200)).astype(np.int64))  # a spread of the values given
    sample = values.iloc[pick].map(str).astype(str).str.strip()  # map(str): bytes that are not UTF-8 stay b'..' 
    date_like = sample.str.fullmatch(
        r"\d{4}-\d{1,2}-\d{1,2}([ T]\d{1,2}:\d{2}(:\d{2}(\.\d+)?)?)?(Z|[+-]\d{2}:?\d{2})?"
        r"|\d{1,2}[/.]\d{1,2}[/.]\d{2,4}"
    )
    if date_like.mean() >= 0.95:
        parsed = pd.to_datetime(sample, errors="coerce", format="mixed")
        if parsed.notna().mean() >= 0.95:
            return "datetime", "strings that parse as dates (checked on a sample of up to 200)"
    text = values if pd.api.types.is_string_dtype(dtype) and not pd.api.types.is_object_dtype(dtype) else values.map(str).astype(str)
    mean_len = float(text.str.len().mean())
    if mean_len >= 30 and unique / count >= 0.5:
        return "text", f"long, mostly distinct strings (mean length {mean_len:.0f} characters)"
    if count >= 3 and unique == count:
        return "identifier", "every value is distinct (a key or label)"
    return "nominal", f"{unique} distinct labels"


def role_of(s):
    """(role, reason) of one column."""
    row = role_row(s)
    return row["role"], row["reason"]


def compute_roles(frame: pd.DataFrame, overrides: Mapping[Any, str] | None = None) -> pd.DataFrame:
    """The Roles table, one row per column (index ``column``)."""
    overrides = dict(overrides or {})
    rows = []
    for i in range(frame.shape[1]):
        s = frame.iloc[:, i]
        row = role_row(s)
        label = frame.columns[i]
        if label in overrides and overrides[label] != row["role"]:
            row["reason"] = f"set by the user (inferred: {row['role']}; {row['reason']})"
            row["role"] = overrides[label]
        rows.append(row)
    index = pd.Index(list(frame.columns), name="column", tupleize_cols=False, dtype=object)
    table = pd.DataFrame(rows, index=index, columns=ROLES_COLUMNS)
    return table.astype({"count": "int64", "missing": "int64", "unique": "int64"})


def roles_code(ctx: Context, frame_name: str = "df") -> str:
    """Plain pandas code that rebuilds the Roles table (the rules are embedded)."""
    overrides = "{" + ", ".join(f"{lit(k)}: {lit(v)}" for k, v in ctx.options.roles.items()) + "}"
    body = f"""\
# Role overrides chosen by the analyst (they replace the inferred role).
overrides = {overrides}

rows = []
for i in range({frame_name}.shape[1]):
    s = {frame_name}.iloc[:, i]
    row = role_row(s)
    label = {frame_name}.columns[i]
    if label in overrides and overrides[label] != row["role"]:
        row["reason"] = f"set by the user (inferred: {{row['role']}}; {{row['reason']}})"
        row["role"] = overrides[label]
    rows.append(row)
roles = pd.DataFrame(
    rows,
    index=pd.Index(list({frame_name}.columns), name="column", tupleize_cols=False, dtype=object),
    columns={ROLES_COLUMNS!r},
).astype({{"count": "int64", "missing": "int64", "unique": "int64"}})
"""
    return join_blocks(
        header("Roles: what each column is", ctx, frame_name, casts=False),
        "# The role rules, one column at a time.",
        function_source(role_row),
        function_source(_role_rules),
        body,
    )
