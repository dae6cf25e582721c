"""Spread section: centre, dispersion and their uncertainty, plus level summaries.

``.table`` is the numeric table (one row per continuous, discrete or
numeric-coded ordinal column); ``.levels`` summarises nominal, boolean and
non-numeric ordinal columns. The definitions live in :mod:`nbeda.stats.spread`.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from nbeda._context import Context
from nbeda._html import fmt
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
        if len(self.table):
            out["Reading of numeric columns"] = self.table[["count", "median", "mean", "reading"]]
        if len(self.levels):
            out["Levels of nominal, boolean and ordinal columns"] = self.levels
        return out

    def chart_data(self) -> pd.DataFrame:
        """The small pre-aggregated frame behind :meth:`chart` (one row per drawn column).

        Whiskers reach the 1.5·IQR fences (common practice), clipped to min/max; a min, max
        or mean beyond the whiskers is named in ``beyond`` instead of stretching the axis.
        """
        t = self.table[self.table["count"] > 0].head(CHART_MAX_COLUMNS)
        seen: dict[str, int] = {}
        shown = []
        for label in (str(c) for c in t.index):  # keep duplicated labels apart in the chart
            seen[label] = seen.get(label, 0) + 1
            shown.append(label if seen[label] == 1 else f"{label} ({seen[label]})")
        num = {c: t[c].to_numpy(dtype="float64") for c in t.columns if c not in ("reading",)}
        lo = np.fmax(num["min"], num["q1"] - 1.5 * num["iqr"])
        hi = np.fmin(num["max"], num["q3"] + 1.5 * num["iqr"])
        inside = (num["mean"] >= lo) & (num["mean"] <= hi)
        beyond = []
        for j in range(len(t)):
            words = []
            if num["min"][j] < lo[j]:
                words.append(f"min {fmt(num['min'][j])}")
            if num["max"][j] > hi[j]:
                words.append(f"max {fmt(num['max'][j])}")
            if not inside[j]:
                words.append(f"mean {fmt(num['mean'][j])}")
            beyond.append(("beyond whiskers: " + ", ".join(words)) if words else "")
        return pd.DataFrame(
            {
                "column": shown,
                "whisker_low": lo,
                "q1": num["q1"],
                "median": num["median"],
                "q3": num["q3"],
                "whisker_high": hi,
                "mean": np.where(inside, num["mean"], np.nan),
                "median_ci_low": num["median_ci_low"],
                "median_ci_high": num["median_ci_high"],
                "min": num["min"],
                "max": num["max"],
                "beyond": beyond,
            }
        )

    def chart(self) -> Any:
        import altair as alt

        data = self.chart_data()
        if data.empty:
            return None
        base = alt.Chart(data)
        y = alt.Y("column:N", title=None, axis=None)
        tip = [
            "column",
            *[alt.Tooltip(f"{c}:Q", format=",.4~g") for c in ("min", "q1", "median", "q3", "max", "mean")],
        ]
        x = alt.X("whisker_low:Q", title=None, scale=alt.Scale(zero=False, nice=False))
        whisker = base.mark_rule(color="#6b7280").encode(y=y, x=x, x2="whisker_high:Q", tooltip=tip)
        box = base.mark_bar(color="#9db4cf", size=14).encode(y=y, x="q1:Q", x2="q3:Q", tooltip=tip)
        band = base.mark_bar(color="#3b5b7e", size=5).encode(y=y, x="median_ci_low:Q", x2="median_ci_high:Q")
        med = base.mark_tick(color="#1f2937", thickness=2, size=18).encode(y=y, x="median:Q")
        mean = base.mark_point(color="#b45309", shape="diamond", filled=True, size=40).encode(y=y, x="mean:Q")
        note = base.mark_text(align="left", dx=8, fontSize=10, color="#8a1c1c").encode(
            y=y, x="whisker_high:Q", text="beyond:N"
        )
        layered = alt.layer(whisker, box, band, med, mean, note).properties(width=320, height=22)
        return (
            layered.facet(
                row=alt.Row(
                    "column:N",
                    title=None,
                    sort=list(data["column"]),
                    header=alt.Header(labelAngle=0, labelAlign="left", labelLimit=160),
                )
            )
            .resolve_scale(x="independent", y="independent")
            .properties(
                title=alt.TitleParams(
                    "Box summary per column (each on its own scale)",
                    subtitle=[
                        "box: q1–q3 · tick: median · dark band: median CI · diamond: mean",
                        "whiskers: 1.5·IQR fences clipped to min/max (common practice)",
                    ],
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
        "interval and the quartiles lean the same way (quartile_skew beyond ±0.05); not read on "
        "scales with ≤ 20 distinct values; heavy tails when std > 1.5 × mad_scaled; a min/max of "
        "±999, ±9999 or ±99999 beyond 3·IQR is named as a likely missing-value code.",
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
        for label, reading in zip(table.index, table["reading"], strict=True):
            for part in reading.split("; "):
                if part.endswith("looks like a missing-value code"):
                    flags.append(f"{label}: {part} (common practice) — it distorts mean and std")
        empty = [str(c) for c, v in zip(table.index, table["count"], strict=True) if v == 0]
        if empty:
            flags.append(f"no finite values in: {', '.join(empty[:10])}")
    if int((table["count"] > 0).sum()) > CHART_MAX_COLUMNS:
        notes.append(f"The chart draws the first {CHART_MAX_COLUMNS} numeric columns; the table has them all.")
    notes.append(
        "Identifier, text, datetime, constant and empty columns are not summarised here (see Roles)."
    )
    skipped = [
        i for i, r in enumerate(ctx.roles) if r in ("continuous", "discrete") and not ctx.is_numeric_coded(i)
    ]
    if skipped:
        notes.append(
            "Not summarised (role set to a numeric role but the values are not numbers): "
            + ", ".join(str(ctx.labels[i]) for i in skipped[:10])
        )
    return SpreadResult(ctx, table, levels, notes=notes, cautions=cautions, flags=flags)
