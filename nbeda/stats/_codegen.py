"""Helpers for writing the plain pandas/numpy/scipy code each section hands back.

The emitted code is a contract: run in a fresh namespace holding the frame under
``frame_name`` it must rebuild the section's table.  Column labels are always
written with :func:`repr` (never pasted raw), so hostile names are harmless.
"""

from __future__ import annotations

import inspect
import textwrap
from collections.abc import Callable, Iterable
from typing import Any

import pandas as pd

from nbeda._context import Context

__all__ = [
    "lit",
    "header",
    "col_expr",
    "labels_list",
    "float_frame_code",
    "function_source",
    "join_blocks",
]


def lit(value: Any) -> str:
    """A Python literal for ``value`` (labels, numbers, strings) via ``repr``."""
    if isinstance(value, float) and value != value:
        return "float('nan')"
    if isinstance(value, (pd.Timestamp,)):
        return f"pd.Timestamp({value.isoformat()!r})"
    return repr(value)


def header(
    title: str, ctx: Context, frame_name: str, extra: Iterable[str] = (), *, casts: bool = True
) -> str:
    """Comment block + imports that open every section's code (+ the ordinal casts, unless ``casts=False``)."""
    o = ctx.options
    lines = [
        f"# {title} — plain pandas/numpy/scipy code; expects the frame in `{frame_name}`.",
        f"# Options in force: confidence={o.confidence!r}, sample={o.sample!r}, seed={o.seed!r}"
        + (f", by={o.by!r}" if o.by is not None else "")
        + (f", target={o.target!r}" if o.target is not None else ""),
    ]
    if o.roles:
        lines.append(f"# Role overrides in force: {dict(o.roles)!r}")
    lines += [f"# {e}" for e in extra]
    lines += ["import numpy as np", "import pandas as pd", "from scipy import stats"]
    if casts and ctx.ordinal_casts:
        lines.append(
            f"# Columns declared ordinal become ordered Categoricals (levels in sorted order), on a "
            f"shallow copy bound to `{frame_name}` — the original frame is not changed."
        )
        lines.append(f"{frame_name} = {frame_name}.copy(deep=False)")
        for i, levels in ctx.ordinal_casts.items():
            lines.append(
                f"{frame_name}.isetitem({i}, pd.Categorical({frame_name}.iloc[:, {i}], "
                f"categories={levels!r}, ordered=True))  # {lit(ctx.labels[i])}"
            )
    return "\n".join(lines) + "\n"


def col_expr(ctx: Context, i: int, frame_name: str) -> str:
    """Expression selecting column ``i``: by label when labels are unique, else by position."""
    if ctx.unique_labels:
        return f"{frame_name}[{lit(ctx.labels[i])}]"
    return f"{frame_name}.iloc[:, {i}]"


def labels_list(ctx: Context, positions: Iterable[int]) -> str:
    return "[" + ", ".join(lit(ctx.labels[i]) for i in positions) + "]"


def float_frame_code(ctx: Context, positions: list[int], frame_name: str, var: str = "x") -> str:
    """Code assigning ``var`` = the given numeric-coded columns as float64.

    Mirrors :func:`nbeda._context.to_float`: durations in seconds, missing as NaN.
    """
    if not positions:
        return f"{var} = pd.DataFrame(index={frame_name}.index)\n"
    durations = [i for i in positions if pd.api.types.is_timedelta64_dtype(ctx.series(i).dtype)]
    if ctx.unique_labels and not durations:
        return f"{var} = {frame_name}[{labels_list(ctx, positions)}].astype('float64')\n"
    parts = []
    for i in positions:
        e = col_expr(ctx, i, frame_name)
        if i in durations:
            e += ".dt.total_seconds()"
        parts.append(f"    {e},")
    return f"{var} = pd.concat([\n" + "\n".join(parts) + "\n], axis=1).astype('float64')\n"


def function_source(fn: Callable[..., Any]) -> str:
    """Source of a self-contained plain-pandas function, to embed in emitted code."""
    return textwrap.dedent(inspect.getsource(fn))


def join_blocks(*blocks: str) -> str:
    return "\n".join(b.rstrip("\n") + "\n" for b in blocks if b)
