"""The section result: ``.table``, ``.chart()``, ``.code()`` and a display of its own.

Modelled on "compute, then display": the numbers are computed once by
``nbeda.stats``; this object only presents them.
"""

from __future__ import annotations

from typing import Any, ClassVar

import pandas as pd

from nbeda._context import Context
from nbeda._html import CSS, code_html, esc, notes_html, table_html

__all__ = ["SectionResult"]


class SectionResult:
    """Base class of every section's result.

    Subclasses set ``name`` (the variable the emitted code assigns, e.g. ``spread``)
    and ``title`` (the tab name), and implement :meth:`chart` and :meth:`code`.
    """

    name: ClassVar[str] = ""
    title: ClassVar[str] = ""

    def __init__(
        self,
        ctx: Context,
        table: pd.DataFrame,
        *,
        notes: list[str] | None = None,
        cautions: list[str] | None = None,
        flags: list[str] | None = None,
    ) -> None:
        self.ctx = ctx
        self.table = table
        #: plain remarks about what was computed and how (sampling, skipped columns)
        self.notes: list[str] = list(notes or [])
        #: cautions against a misleading reading (always shown)
        self.cautions: list[str] = list(cautions or [])
        #: data-quality flags found by this section
        self.flags: list[str] = list(flags or [])

    # ----------------------------------------------------------- to override
    def chart(self) -> Any:
        """An altair chart built from small pre-aggregated frames."""
        raise NotImplementedError

    def code(self, frame_name: str = "df") -> str:
        """Plain pandas/numpy/scipy code assigning ``<name> = ...`` equal to :attr:`table`."""
        raise NotImplementedError

    def panel(self) -> Any:
        """Optional interactive ipywidgets panel (pickers); ``None`` → the shell shows :meth:`body_html`."""
        return None

    def tables(self) -> dict[str, pd.DataFrame]:
        """Named tables to display (the main table first)."""
        return {self.title: self.table}

    # ------------------------------------------------------------- display
    def chart_html(self) -> str:
        from nbeda._render import chart_html

        try:
            chart = self.chart()
        except Exception as exc:  # a chart failure never hides the numbers
            return f"<div class='nb-flag'>chart unavailable: {esc(type(exc).__name__)}: {esc(exc)}</div>"
        if chart is None:
            return ""
        return chart_html(chart)

    def body_html(self, *, with_chart: bool = True) -> str:
        """Escaped HTML of this section: flags, tables, chart, notes and cautions."""
        parts = [notes_html(self.flags, "nb-flag")]
        for caption, t in self.tables().items():
            parts.append(table_html(t, caption=caption))
        if with_chart:
            parts.append(self.chart_html())
        parts.append(notes_html(self.notes))
        parts.append(notes_html(self.cautions, "nb-caution"))
        return "".join(parts)

    def to_html(self, *, with_code: bool = True, with_chart: bool = True) -> str:
        parts = [f"<style>{CSS}</style><div class='nbeda'>", self.body_html(with_chart=with_chart)]
        if with_code:
            try:
                parts.append("<h4>Code</h4>" + code_html(self.code()))
            except Exception as exc:
                parts.append(f"<div class='nb-flag'>code unavailable: {esc(exc)}</div>")
        parts.append("</div>")
        return "".join(parts)

    def _repr_html_(self) -> str:
        return self.to_html()

    def __repr__(self) -> str:
        return f"<{type(self).__name__}: {self.title}, table {self.table.shape[0]}×{self.table.shape[1]}>"
