"""Shape section: distributions, skew, normality, transforms, levels and dates.

The numbers come from :mod:`nbeda.stats.shape`; this module presents them: the
Shape table (one row per numeric column), extra tables for categorical levels
and dates, charts built from small pre-binned frames, a column picker and the
plain code.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from nbeda._context import Context
from nbeda.sections._base import SectionResult
from nbeda.stats.shape import (
    box_summary,
    categorical_positions,
    compute_shape,
    date_counts,
    date_summary,
    fd_histogram,
    level_counts,
    level_tables,
    quantile_points,
    sample_rows,
    shape_code,
)

__all__ = ["ShapeResult", "build"]

#: At most this many numeric columns in the small-multiples overview.
OVERVIEW_MAX = 24

CAUTIONS = [
    "A transform changes what a mean means: the mean of log values back-transforms to a geometric "
    "mean (closer to the median), not the arithmetic mean; report on the scale your readers use.",
    "With thousands of rows normality tests reject even harmless departures, and with a few dozen "
    "they miss real ones: judge by the size of skew and kurtosis and by the Q-Q plot, not the p-value alone.",
    "One normality test per column means many tests at once: control for multiple testing "
    "(e.g. Holm) before calling any single column non-normal.",
    "Skew and kurtosis are driven by a few extreme values: an extreme value may be a real case or an "
    "error (see Extremes) — check before transforming it away.",
    "A second density peak often means two groups mixed together (check by segment); peak counts "
    "also depend on the smoothing bandwidth.",
]


class ShapeResult(SectionResult):
    name = "shape"
    title = "Shape"

    def __init__(
        self,
        ctx: Context,
        table: pd.DataFrame,
        *,
        levels: pd.DataFrame,
        frequencies: pd.DataFrame,
        dates: pd.DataFrame,
        level_positions: list[int],
        date_positions: list[int],
        **kw: Any,
    ) -> None:
        super().__init__(ctx, table, **kw)
        #: per categorical column: levels, top share, imbalance ratio, normalised entropy
        self.levels = levels
        #: long table of level frequencies (top 10 + "other"; ordinal levels all, in order), index ``column``
        self.frequencies = frequencies
        #: per datetime column: first/last, span, median step, largest gap, top timestamp
        self.dates = dates
        self.numeric_positions = ctx.numeric_positions()
        self.level_positions = level_positions
        self.date_positions = date_positions
        self._rows = sample_rows(ctx.n_rows, ctx.options.sample, ctx.options.seed)

    # --------------------------------------------------------------- tables
    def tables(self) -> dict[str, pd.DataFrame]:
        out = {self.title: self.table}
        if len(self.levels):
            out["Levels (categorical columns)"] = self.levels
            out["Level frequencies (top 10 + other; ordinal levels in order)"] = self.frequencies
        if len(self.dates):
            out["Dates (datetime columns)"] = self.dates
        return out

    # ------------------------------------------------------------- columns
    def _position(self, column: Any) -> int | None:
        """Position of the column to show (default: the first numeric, else any other)."""
        if column is None:
            for group in (self.numeric_positions, self.level_positions, self.date_positions):
                if group:
                    return group[0]
            return None
        pos = self.ctx.positions_of(column)
        if not pos:
            raise KeyError(f"no column named {column!r}")
        shown = [p for p in pos if p in self.numeric_positions + self.level_positions + self.date_positions]
        if not shown:
            raise KeyError(f"column {column!r} has no Shape view (role {self.ctx.roles[pos[0]]})")
        return shown[0]

    def _values(self, i: int) -> np.ndarray:
        x = self.ctx.float_values(i)
        return x if self._rows is None else x[self._rows]

    def hist(self, column: Any = None) -> tuple[pd.DataFrame, int, int]:
        """Freedman–Diaconis histogram of a numeric column: (bins, count below, count above the range)."""
        i = self._position(column)
        if i is None or i not in self.numeric_positions:
            raise KeyError(f"column {column!r} is not numeric")
        return self._histogram(i)

    #: set on the engine path: position -> (bins, below, above) over all rows, and a title note
    histogram_of: Any = None
    histogram_note: str = ""

    def _histogram(self, i: int) -> tuple[pd.DataFrame, int, int]:
        if self.histogram_of is not None:
            return self.histogram_of(i)  # type: ignore[no-any-return]
        return fd_histogram(self._values(i))

    def level_counts(self, column: Any) -> pd.DataFrame:
        """Frequency table (top 10 + "other"; ordinal levels all kept, in order) of a categorical column."""
        i = self._position(column)
        if i not in self.level_positions:
            raise KeyError(f"column {column!r} is not categorical")
        return level_counts(self.ctx, i)

    def date_counts(self, column: Any) -> tuple[pd.DataFrame, pd.DataFrame]:
        """Counts per month (or year) and per weekday of a datetime column."""
        i = self._position(column)
        if i not in self.date_positions:
            raise KeyError(f"column {column!r} is not a datetime column")
        return date_counts(self.ctx, i)

    def _name(self, i: int) -> str:
        label = str(self.ctx.labels[i])
        return label if self.ctx.unique_labels else f"{label} (column {i})"

    # --------------------------------------------------------------- charts
    def chart(self, column: Any = None) -> Any:
        """Charts of one column: numeric → histogram, box, ECDF, Q-Q; categorical → level bars; dates → profile."""
        i = self._position(column)
        return None if i is None else self._chart_at(i)

    def _numeric_chart(self, i: int) -> Any:
        import altair as alt

        x = self._values(i)
        name = self._name(i)
        bins, below, above = self._histogram(i)
        extra = f" ({below} below, {above} above the shown range)" if below or above else ""
        extra += self.histogram_note
        hist = (
            alt.Chart(bins, title=f"{name}: histogram, Freedman–Diaconis bins{extra}")
            .mark_bar(color="#5b7fa6", stroke="white", strokeWidth=0.3)
            .encode(
                x=alt.X("bin_start:Q", title=name, bin="binned"),
                x2="bin_end:Q",
                y=alt.Y("count:Q", title="rows"),
                tooltip=["bin_start:Q", "bin_end:Q", "count:Q"],
            )
            .properties(width=300, height=170)
        )
        box = box_summary(x)
        if box:
            b = pd.DataFrame([box])
            base = alt.Chart(b)
            boxes = alt.layer(
                base.mark_rule(color="#333").encode(x=alt.X("whisker_low:Q", title=name), x2="whisker_high:Q"),
                base.mark_bar(size=26, color="#c9d6e6", stroke="#333").encode(x="q1:Q", x2="q3:Q"),
                base.mark_tick(size=26, thickness=2, color="#1b3a5c").encode(x="median:Q"),
                base.mark_point(shape="diamond", filled=True, size=70, color="#b5472f").encode(
                    x="mean:Q", tooltip=list(box)
                ),
                title=f"box: Tukey whiskers (1.5 IQR), mean = diamond; {box['outside']} beyond the whiskers",
            ).properties(width=300, height=60)
        else:
            boxes = None
        q = quantile_points(x)
        ecdf = (
            alt.Chart(q, title="ECDF (≤ 500 quantile points)")
            .mark_line(interpolate="step-after", color="#5b7fa6")
            .encode(x=alt.X("value:Q", title=name), y=alt.Y("p:Q", title="share of values ≤ x"))
            .properties(width=300, height=170)
        )
        qq_points = (
            alt.Chart(q)
            .mark_circle(size=12, color="#5b7fa6")
            .encode(
                x=alt.X("normal_q:Q", title="standard normal quantile"),
                y=alt.Y("value:Q", title=name),
            )
        )
        layers = [qq_points]
        if box and box["q3"] > box["q1"] and len(q):
            from scipy import stats

            z25, z75 = stats.norm.ppf([0.25, 0.75])
            slope = (box["q3"] - box["q1"]) / (z75 - z25)
            zs = np.array([q["normal_q"].min(), q["normal_q"].max()])
            line = pd.DataFrame({"normal_q": zs, "value": box["q1"] + slope * (zs - z25)})
            layers.append(alt.Chart(line).mark_line(color="#b5472f", strokeDash=[4, 3]).encode(x="normal_q:Q", y="value:Q"))
        qq = alt.layer(*layers, title="normal Q-Q (line through the quartiles)").properties(width=300, height=170)
        left = alt.vconcat(hist, boxes) if boxes is not None else hist
        return alt.hconcat(left, alt.vconcat(ecdf, qq))

    def _level_chart(self, i: int) -> Any:
        import altair as alt

        counts = level_counts(self.ctx, i)
        return (
            alt.Chart(counts, title=f"{self._name(i)}: share of rows per level")
            .mark_bar(color="#5b7fa6")
            .encode(
                y=alt.Y("level:N", sort=list(counts["level"]), title=None),
                x=alt.X("share:Q", title="share of non-missing rows", axis=alt.Axis(format="%")),
                tooltip=["level:N", "count:Q", alt.Tooltip("share:Q", format=".1%")],
            )
            .properties(width=320, height=max(40, 20 * len(counts)))
        )

    def _date_chart(self, i: int) -> Any:
        import altair as alt

        per_period, per_weekday = date_counts(self.ctx, i)
        unit = "year" if len(per_period) and len(str(per_period["period"].iloc[0])) == 4 else "month"
        timeline = (
            alt.Chart(per_period, title=f"{self._name(i)}: records per {unit}")
            .mark_bar(color="#5b7fa6")
            .encode(
                x=alt.X("period:O", title=unit, sort=list(per_period["period"])),
                y=alt.Y("count:Q", title="records"),
                tooltip=["period:O", "count:Q"],
            )
            .properties(width=max(240, min(720, 12 * len(per_period))), height=160)
        )
        weekdays = (
            alt.Chart(per_weekday, title="records per weekday")
            .mark_bar(color="#8aa4c2")
            .encode(
                x=alt.X("weekday:N", sort=list(per_weekday["weekday"]), title=None),
                y=alt.Y("count:Q", title="records"),
                tooltip=["weekday:N", "count:Q"],
            )
            .properties(width=220, height=160)
        )
        return alt.hconcat(timeline, weekdays)

    def overview_chart(self) -> Any:
        """Small multiples: the histogram of every numeric column (first 24)."""
        import altair as alt

        shown = self.numeric_positions[:OVERVIEW_MAX]
        if not shown:
            return None
        frames, order = [], []
        for i in shown:
            bins, _, _ = self._histogram(i)
            name = self._name(i)
            if name in order:
                name = f"{name} (column {i})"
            order.append(name)
            frames.append(bins.assign(panel=name))
        data = pd.concat(frames, ignore_index=True)
        more = len(self.numeric_positions) - len(shown)
        title = "Histograms of the numeric columns" + (f" (first {OVERVIEW_MAX}; {more} more)" if more else "")
        return (
            alt.Chart(data)
            .mark_bar(color="#5b7fa6")
            .encode(
                x=alt.X("bin_start:Q", bin="binned", title=None),
                x2="bin_end:Q",
                y=alt.Y("count:Q", title=None),
            )
            .properties(width=150, height=80)
            .facet(facet=alt.Facet("panel:N", sort=order, title=None), columns=4, title=title)
            .resolve_scale(x="independent", y="independent")
        )

    def chart_html(self) -> str:
        """The overview of all numeric columns, then the charts of the default column."""
        parts = [self._chart_for(-1)] if len(self.numeric_positions) > 1 else []
        first = self._position(None)
        if first is not None:
            parts.append(self._chart_for(first))
        return "".join(parts)

    # ----------------------------------------------------------------- code
    def code(self, frame_name: str = "df", column: Any = None) -> str:
        """Plain code rebuilding ``shape``, the histogram of one numeric column (``shape_hist``,
        ``shape_hist_edges``; default: the first numeric column) and the ``shape_levels`` and
        ``shape_dates`` tables."""
        pos = None
        try:
            pos = self._position(column)
        except KeyError:
            if column is not None:
                raise
        return shape_code(self.ctx, frame_name, pos if pos in self.numeric_positions else None)

    # ---------------------------------------------------------------- panel
    def _choices(self) -> list[tuple[str, int]]:
        out = [("overview: all numeric columns", -1)] if self.numeric_positions else []
        for kind, group in (("numeric", self.numeric_positions), ("levels", self.level_positions), ("dates", self.date_positions)):
            out += [(f"{self._name(i)} ({kind})", i) for i in group]
        return out

    def _chart_for(self, i: int) -> str:
        from nbeda._html import esc
        from nbeda._render import chart_html

        try:
            chart = self.overview_chart() if i == -1 else self._chart_at(i)
        except Exception as exc:  # a chart failure never hides the numbers
            return f"<div class='nb-flag'>chart unavailable: {esc(type(exc).__name__)}: {esc(exc)}</div>"
        if chart is None:
            return ""
        try:  # unique SVG ids, so several charts can share one page
            from nbeda.standalone import offline_svg
        except ImportError:
            return chart_html(chart)
        self._draws = getattr(self, "_draws", 0) + 1
        return offline_svg(chart_html(chart), f"shape{id(self) % 100000}-{self._draws}")

    def _chart_at(self, i: int) -> Any:
        if i in self.numeric_positions:
            return self._numeric_chart(i)
        if i in self.level_positions:
            return self._level_chart(i)
        return self._date_chart(i)

    def panel(self) -> Any:
        """Tables, a column picker and the picked column's charts (redrawn as SVG on change)."""
        import ipywidgets as widgets

        from nbeda._html import CSS

        body = widgets.HTML(f"<style>{CSS}</style><div class='nbeda'>{self.body_html(with_chart=False)}</div>")
        choices = self._choices()
        if not choices:
            return widgets.VBox([body])
        first = choices[1][1] if len(choices) > 1 and choices[0][1] == -1 else choices[0][1]
        picker = widgets.Dropdown(options=choices, value=first, description="column", layout={"width": "420px"})
        out = widgets.HTML(f"<div class='nbeda'>{self._chart_for(first)}</div>")

        def redraw(change: dict[str, Any]) -> None:
            out.value = f"<div class='nbeda'>{self._chart_for(change['new'])}</div>"

        picker.observe(redraw, names="value")
        return widgets.VBox([picker, out, body])


def build(ctx: Context, **_: Any) -> ShapeResult:
    table = compute_shape(ctx)
    level_positions = categorical_positions(ctx)
    date_positions = ctx.with_role("datetime")
    levels, frequencies = level_tables(ctx, level_positions)
    dates = date_summary(ctx, date_positions)

    notes = [
        "Numeric columns: skew = adjusted Fisher–Pearson G1, kurtosis = excess G2, with small-sample "
        "standard errors; quartile skew is Bowley's. Headline normality test: Shapiro–Wilk for n ≤ 5000, "
        "else D'Agostino–Pearson K² on all values; Anderson–Darling A² with its 5% critical value "
        "alongside. Above 5000 values, Shapiro–Wilk, Anderson–Darling, density peaks and λ fits use a "
        "seeded random sample of 5000 (disclosed in the note column).",
        "Transforms are suggested only when |skew| ≥ 0.5 (common practice): log or Box–Cox (λ by maximum "
        "likelihood) for strictly positive data, Yeo–Johnson (on values divided by their SD) otherwise.",
        "modes = peaks of a Gaussian kernel density (Silverman's robust bandwidth, 512-point grid, "
        "a peak counts when its prominence is ≥ 10% of the highest; needs n ≥ 20).",
    ]
    if ctx.options.sample and ctx.options.sample < ctx.n_rows:
        notes.append(
            f"Numeric columns computed on a seeded random sample of {int(ctx.options.sample):,} rows "
            f"(seed {ctx.options.seed}); the levels and dates tables use all rows."
        )
    skipped = [str(ctx.labels[i]) for i in ctx.with_role("identifier", "text", "constant", "empty")]
    if skipped:
        notes.append(f"Not described here (identifier, text, constant or empty): {', '.join(skipped[:10])}"
                     + (f" and {len(skipped) - 10} more" if len(skipped) > 10 else ""))
    for label, note in zip(table.index, table["note"], strict=True):
        if isinstance(note, str) and note and ("no finite" in note or "constant" in note or "fewer than" in note or "2**53" in note):
            notes.append(f"{label}: {note}")
    notes = notes[:40]

    flags = []
    multi = table.index[table["modes"].fillna(0).to_numpy(dtype="int64") >= 2]
    if len(multi):
        flags.append(f"{len(multi)} column(s) with two or more density peaks (a mixture of groups?): "
                     + ", ".join(str(c) for c in multi[:10]))
    for label, reading in zip(table.index, table["reading"], strict=True):
        if isinstance(reading, str) and "piled at its" in reading:
            part = next(p for p in reading.split("; ") if p.startswith("piled at its"))
            flags.append(f"{label}: {part} — a floor or ceiling, a censored measurement or a default value?")
    for label, row in dates.iterrows():
        share = row["top_share"]
        # our rule: >= 5% of records on one timestamp holding >= 5x the median count per timestamp
        if row["n"] >= 20 and share == share and share >= 0.05 and row["top_vs_median"] >= 5:
            flags.append(f"{label}: {share:.0%} of records share one timestamp ({row['top_timestamp']}) — a default or placeholder date?")
        elif isinstance(row["top_timestamp"], str) and row["top_timestamp"][:10] in ("1970-01-01", "1900-01-01"):
            flags.append(f"{label}: the most common timestamp is {row['top_timestamp']}, a usual default date")
    return ShapeResult(
        ctx,
        table,
        notes=notes,
        cautions=list(CAUTIONS),
        flags=flags,
        levels=levels,
        frequencies=frequencies,
        dates=dates,
        level_positions=level_positions,
        date_positions=date_positions,
    )
