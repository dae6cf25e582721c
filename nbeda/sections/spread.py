"""Spread section: centre, dispersion and their uncertainty, plus level summaries.

``.table`` is the numeric table (one row per continuous, discrete or
numeric-coded ordinal column); ``.levels`` summarises nominal, boolean and
non-numeric ordinal columns. The definitions live in :mod:`nbeda.stats.spread`.
"""

from __future__ import annotations

from typing import Any

import pandas as pd

from nbeda._context import Context
from nbeda.sections._base import SectionResult
from nbeda.stats.spread import compute_levels, compute_spread, spread_code

__all__ = ["SpreadResult", "build"]

#: At most this many columns are drawn in the box-summary chart (the table has them all).
CHART_MAX_COLUMNS = 30


class SpreadResult(SectionResult):
    name = "spread"
    title = "Spread"

    def __init__(self, ctx: Context, table: pd.DataFrame, levels: pd.DataFrame, **kw: Any) -> None:
        super().__init__(ctx, table, **kw)
        #: level summary of nominal, boolean and non-numeric ordinal columns
        self.levels = levels

    def tables(self) -> dict[str, pd.DataFrame]:
        out = {"Spread of numeric columns": self.table}
        if len(self.levels):
            out["Levels of nominal, boolean and ordinal columns"] = self.levels
        return out

    def chart_data(self) -> pd.DataFrame:
        """The small pre-aggregated frame behind :meth:`chart` (one row per drawn column)."""
        t = self.table[self.table["count"] > 0].head(CHART_MAX_COLUMNS)
        labels = [str(c) for c in t.index]
        seen: dict[str, int] = {}
        shown = []
        for lab in labels:  # keep duplicated labels apart in the chart
            seen[lab] = seen.get(lab, 0) + 1
            shown.append(lab if seen[lab] == 1 else f"{lab} ({seen[lab]})")
        keep = ["min", "q1", "median", "q3", "max", "mean", "median_ci_low", "median_ci_high"]
        data = pd.DataFrame(t[keep].to_numpy(dtype="float64"), columns=keep)
        data.insert(0, "column", shown)
        return data

    def chart(self) -> Any:
        import altair as alt

        data = self.chart_data()
        if data.empty:
            return None
        base = alt.Chart(data)
        y = alt.Y("column:N", title=None, sort=None, axis=alt.Axis(labelLimit=180))
        tip = [alt.Tooltip(c, format=".4g") if c != "column" else "column" for c in data.columns]
        line = base.mark_rule(color="#6b7280").encode(
            y=y, x=alt.X("min:Q", title="value (each row on its own scale)", scale=alt.Scale(zero=False)),
            x2="max:Q", tooltip=tip,
        )
        box = base.mark_bar(color="#9db4cf", size=14).encode(y=y, x="q1:Q", x2="q3:Q", tooltip=tip)
        ci = base.mark_bar(color="#3b5b7e", size=5).encode(y=y, x="median_ci_low:Q", x2="median_ci_high:Q")
        med = base.mark_tick(color="#1f2937", thickness=2, size=18).encode(y=y, x="median:Q")
        mean = base.mark_point(color="#b45309", shape="diamond", filled=True, size=40).encode(y=y, x="mean:Q")
        layered = alt.layer(line, box, ci, med, mean).properties(width=360, height=24)
        return (
            layered.facet(row=alt.Row("column:N", title=None, sort=list(data["column"]), header=alt.Header(labelAngle=0, labelAlign="left")))
            .resolve_scale(x="independent", y="independent")
            .properties(
                title=alt.TitleParams(
                    "Five-number summary per column",
                    subtitle="line: min–max · box: q1–q3 · dark band: median CI · tick: median · diamond: mean",
                )
            )
        )

    def code(self, frame_name: str = "df") -> str:
        return spread_code(self.ctx, frame_name)


def build(ctx: Context, **_: Any) -> SpreadResult:
    table = compute_spread(ctx)
    levels = compute_levels(ctx)
    conf = ctx.options.confidence
    pct = f"{100 * conf:g}%"
    notes = [
        f"{len(table)} numeric column(s) (continuous, discrete, numeric-coded ordinal) and "
        f"{len(levels)} nominal/boolean/ordinal column(s) summarised; every row is used (no sampling).",
        "Missing values and ±inf are set aside before anything is computed: count is the number of "
        "finite values, n_inf counts the infinite ones.",
        f"mean_ci: t-interval at {pct}; median_ci: distribution-free interval between two order "
        "statistics chosen from Binomial(n, ½) so that its coverage is at least "
        f"{pct} (blank when even min–max falls short, e.g. n ≤ 5 at 95%).",
        "median, q1, q3: linear interpolation (pandas' default); trimmed_mean cuts 10% from each end; "
        "mad is the raw median absolute deviation, mad_scaled = 1.4826 × mad estimates the std for "
        "normal data; mode ties go to the smallest value and mode is blank when no value repeats.",
        "Levels: entropy is in bits (0 = one level, log₂(unique) = all levels equally common); "
        "evenness = entropy / log₂(unique).",
        "Reading rules (common practice): right/left skew when the mean lies outside the median's "
        "interval and differs from the median by more than 0.1·std; heavy tails when std > 1.5 × mad_scaled.",
    ]
    cautions = [
        "The median CI is distribution-free; the mean CI assumes the sample mean is roughly normal "
        "(large n or near-normal data) — with strong skew or few values prefer the median CI.",
        "Both intervals assume independent rows; clustered or time-ordered rows make them too narrow.",
        "cv (std/mean) is meaningful only for positive, ratio-scale measurements.",
    ]
    if any(ctx.roles[i] == "ordinal" for i in ctx.numeric_positions()):
        cautions.append(
            "Ordinal codes are analysed as numbers here: mean and std treat the steps between "
            "levels as equal; the median and quartiles do not."
        )
    flags = []
    if len(table):
        inf_cols = [str(c) for c, v in zip(table.index, table["n_inf"], strict=True) if v > 0]
        if inf_cols:
            flags.append(f"infinite values set aside in: {', '.join(inf_cols[:10])}")
        empty = [str(c) for c, v in zip(table.index, table["count"], strict=True) if v == 0]
        if empty:
            flags.append(f"no finite values in: {', '.join(empty[:10])}")
    skipped = [
        i for i, r in enumerate(ctx.roles) if r in ("continuous", "discrete") and not ctx.is_numeric_coded(i)
    ]
    if skipped:
        notes.append(
            "Not summarised (role set to a numeric role but the values are not numbers): "
            + ", ".join(str(ctx.labels[i]) for i in skipped[:10])
        )
    return SpreadResult(ctx, table, levels, notes=notes, cautions=cautions, flags=flags)
