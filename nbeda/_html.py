"""Escaped HTML fragments shared by the widget, the section reprs and the standalone report.

Every column name and every value that reaches HTML goes through :func:`esc`.
"""

from __future__ import annotations

import html
import math
from collections.abc import Iterable
from typing import Any

import numpy as np
import pandas as pd

__all__ = ["esc", "fmt", "table_html", "notes_html", "code_html", "CSS"]

#: Our own small stylesheet (scoped to .nbeda); colours are plain and neutral.
CSS = """
.nbeda { font-family: system-ui, -apple-system, "Segoe UI", sans-serif; font-size: 13px; }
.nbeda .nb-scroll { max-height: 420px; overflow: auto; border: 1px solid #d0d4da; margin: 4px 0 10px 0; }
.nbeda table.nb-table { border-collapse: collapse; }
.nbeda table.nb-table th, .nbeda table.nb-table td { padding: 2px 8px; border-bottom: 1px solid #eceff3; text-align: right; white-space: nowrap; }
.nbeda table.nb-table th { position: sticky; top: 0; background: #f4f6f8; }
.nbeda table.nb-table td.nb-text, .nbeda table.nb-table th.nb-row { text-align: left; }
.nbeda .nb-notes { margin: 4px 0; padding-left: 18px; }
.nbeda .nb-caution { color: #7a4b00; }
.nbeda .nb-flag { color: #8a1c1c; }
.nbeda pre.nb-code { background: #f7f7f9; border: 1px solid #d0d4da; padding: 8px; max-height: 360px; overflow: auto; font-size: 12px; }
.nbeda .nb-chart { margin: 6px 0; }
.nbeda h4 { margin: 10px 0 4px 0; }
"""


def esc(value: Any) -> str:
    """HTML-escape anything (labels may be tuples, numbers or hostile strings)."""
    return html.escape(value if isinstance(value, str) else str(value), quote=True)


def fmt(value: Any, digits: int = 4) -> str:
    """Short display text for one cell (escaped by the caller)."""
    if value is None or value is pd.NA or value is pd.NaT:
        return ""
    if isinstance(value, (float, np.floating)):
        v = float(value)
        if math.isnan(v):
            return ""
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
        if v != 0 and (abs(v) >= 1e7 or abs(v) < 1e-4):
            return f"{v:.{digits}g}"
        return f"{v:,.{digits}f}".rstrip("0").rstrip(".") if abs(v) < 1e15 else f"{v:.{digits}g}"
    if isinstance(value, (int, np.integer)) and not isinstance(value, bool):
        return f"{int(value):,}"
    return str(value)


def table_html(table: pd.DataFrame, max_rows: int = 500, caption: str | None = None) -> str:
    """A scrollable, fully escaped HTML table (index shown as the first column)."""
    t = table.head(max_rows)
    index_name = t.index.name if t.index.name is not None else ""
    head = "".join(f"<th>{esc(c)}</th>" for c in t.columns)
    rows = []
    text_cols = {j for j, dt in enumerate(t.dtypes) if not pd.api.types.is_numeric_dtype(dt)}
    values = t.to_numpy(dtype=object)
    for label, row in zip(t.index, values, strict=True):
        cells = "".join(
            f'<td class="nb-text">{esc(fmt(v))}</td>' if j in text_cols else f"<td>{esc(fmt(v))}</td>"
            for j, v in enumerate(row)
        )
        rows.append(f'<tr><th class="nb-row">{esc(label)}</th>{cells}</tr>')
    more = (
        f"<div class='nb-notes'>showing {max_rows:,} of {len(table):,} rows</div>"
        if len(table) > max_rows
        else ""
    )
    cap = f"<h4>{esc(caption)}</h4>" if caption else ""
    return (
        f"{cap}<div class='nb-scroll'><table class='nb-table'><thead><tr><th class='nb-row'>"
        f"{esc(index_name)}</th>{head}</tr></thead><tbody>{''.join(rows)}</tbody></table></div>{more}"
    )


def notes_html(items: Iterable[str], css_class: str = "") -> str:
    lis = "".join(f"<li class='{css_class}'>{esc(n)}</li>" for n in items)
    return f"<ul class='nb-notes'>{lis}</ul>" if lis else ""


def code_html(code: str) -> str:
    return f"<pre class='nb-code'>{esc(code)}</pre>"
