"""Segments section: balance of a column, a metric across its levels, and a cross-tab.

``build(ctx, by=None, metric=None, against=None)``:

* ``by`` — the column whose levels form the segments.  Default: the report's
  ``by`` option, else the best candidate: a nominal, ordinal or boolean column
  with 2–20 distinct values (nominal before ordinal before boolean, then fewer
  missing values, then the leftmost).  Numeric columns with more than 20
  distinct values are cut into five quantile bins (see :mod:`nbeda.stats.segments`).
* ``metric`` — a numeric column compared across the segments.  Default: the
  report's ``target``, else the first continuous column.  ``metric=False``: none.
* ``against`` — a second column for a cross-tab.  Default: among the other
  candidates (same rule as ``by``), the one most associated with ``by``
  (largest bias-corrected Cramér's V); ``against=False``: no cross-tab.

``.table``: one row per segment (index = the segment labels, index name = the
``by`` column's label as text, or ``"segment"`` when there is no ``by``).  With a
metric its columns are ``n, mean, ci_low, ci_high, median, std, sum,
share_of_total``; without one it is the balance table ``n, share, expected_n,
pearson_residual`` (rows, share of rows, the count expected if the real levels
were equally common, and the Pearson residual (n − expected)/√expected).

Other tables: ``.balance``, ``.tests`` (indexed by test name — ``anova``,
``welch_anova``, ``kruskal``, ``balance_chi2``, ``chi2``, ``fisher_exact``, those
that apply — with columns ``statistic, dof, p_value, effect_size,
effect_measure``; ``dof`` of the F tests is the numerator df, the denominator df
is in ``.anova_table`` and the words; effect sizes: η² on the ``anova`` row, ω²
(the less biased estimate of the same share, from the classic sums of squares)
on the ``welch_anova`` row, the rank ε² = H/(n − 1) on ``kruskal``, Cohen's w on
``balance_chi2``, plain Cramér's V on ``chi2``, the odds ratio on
``fisher_exact``),
``.anova_table``, ``.effects``, ``.pairs`` (Tukey HSD, computed on first use),
``.crosstab``, ``.row_pct``, ``.col_pct``, ``.expected``, ``.residuals``,
``.pivot``; the plain-words reading in ``.summary`` and the leader in ``.leader``
(the segment with the highest mean; its lead over the runner-up is "supported"
when their Tukey HSD adjusted p-value is below 1 − confidence, 0.05 by default).
Segments smaller than 5 values are called tiny (common practice).
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from nbeda._context import Context
from nbeda._html import esc, notes_html, table_html
from nbeda.sections._base import SectionResult
from nbeda.stats import segments as S

__all__ = ["SegmentsResult", "build"]

TINY = 5  # segments smaller than this are "tiny" (common practice)


def _a(word: str) -> str:
    """The word with its indefinite article ("a nominal", "an identifier")."""
    return f"{'an' if word[:1] in 'aeiou' else 'a'} {word}"


def _pct(x: float) -> str:
    return f"{100 * x:.0f}%"


def _p(p: float) -> str:
    if p is None or not np.isfinite(p):
        return "p not available"
    return "p < 0.001" if p < 0.001 else f"p = {p:.3f}"


def _num(x: float) -> str:
    if x is None or np.isnan(x):
        return "n/a"
    if np.isinf(x):
        return "∞" if x > 0 else "-∞"
    return f"{x:.4g}"


class SegmentsResult(SectionResult):
    name = "segments"
    title = "Segments"

    def __init__(self, ctx: Context, res: dict[str, Any], **kw: Any) -> None:
        super().__init__(ctx, res["table"], **kw)
        self._res = res
        self.by_pos: int | None = res["by_pos"]
        self.metric_pos: int | None = res["metric_pos"]
        self.against_pos: int | None = res["against_pos"]
        self.by = None if self.by_pos is None else ctx.labels[self.by_pos]
        self.metric = None if self.metric_pos is None else ctx.labels[self.metric_pos]
        self.against = None if self.against_pos is None else ctx.labels[self.against_pos]
        self.balance: pd.DataFrame | None = res.get("balance")
        self.tests: pd.DataFrame = res["tests"]
        self.summary: list[str] = []
        self.leader: dict[str, Any] | None = None
        self._pairs: pd.DataFrame | None = None
        cross = res.get("cross") or {}
        self.crosstab: pd.DataFrame | None = cross.get("crosstab")
        self.row_pct: pd.DataFrame | None = cross.get("row_pct")
        self.col_pct: pd.DataFrame | None = cross.get("col_pct")
        self.expected: pd.DataFrame | None = cross.get("expected")
        self.residuals: pd.DataFrame | None = cross.get("residuals")
        self.cramers_v: float | None = cross.get("cramers_v")
        self.cramers_v_corrected: float | None = cross.get("cramers_v_corrected")
        self.cochran_ok: bool | None = cross.get("cochran_ok")
        self.pivot: pd.DataFrame | None = res.get("pivot")
        anova = res.get("anova")
        self.anova_table: pd.DataFrame | None = None
        self.effects: pd.DataFrame | None = None
        if anova is not None:
            self.anova_table = pd.DataFrame(
                {
                    "df": [anova["df_between"], anova["df_within"], anova["df_between"] + anova["df_within"]],
                    "sum_sq": [anova["ss_between"], anova["ss_within"], anova["ss_between"] + anova["ss_within"]],
                    "mean_sq": [anova["ms_between"], anova["ms_within"], np.nan],
                    "F": [anova["f"], np.nan, np.nan],
                    "p_value": [anova["p_value"], np.nan, np.nan],
                },
                index=pd.Index(["between", "within", "total"], name="source"),
            ).astype({"df": "int64"})
            h = self.tests.loc["kruskal", "effect_size"] if "kruskal" in self.tests.index else np.nan
            self.effects = pd.DataFrame(
                {
                    "value": [anova["eta_squared"], anova["omega_squared"], anova["epsilon_squared"], h],
                    "meaning": [
                        "share of the metric's variance between segments in this sample (R²)",
                        "η² corrected for bias: the estimate for the population (preferred)",
                        "another bias-corrected η² (Kelley); close to ω²",
                        "rank-based ε² = H/(n−1) from Kruskal–Wallis (Tomczak & Tomczak 2014)",
                    ],
                },
                index=pd.Index(["eta_squared", "omega_squared", "epsilon_squared", "epsilon_squared_ranks"],
                               name="effect"),
            )

    # ------------------------------------------------------------------ pairs
    @property
    def pairs(self) -> pd.DataFrame:
        """Tukey HSD for every pair of segments (computed on first use: it integrates numerically)."""
        if self._pairs is None:
            groups = self._res.get("groups") or []
            if self.metric_pos is not None and len(groups) >= 2:
                self._pairs = S.tukey_pairs(self._res["y"], self._res["labels"], groups,
                                            self.ctx.options.confidence)
            else:
                self._pairs = pd.DataFrame(
                    {c: pd.Series(dtype=object if c in ("a", "b") else "float64") for c in S.PAIR_COLUMNS},
                    index=pd.RangeIndex(0, name="pair"),
                )
        return self._pairs

    # ----------------------------------------------------------------- code
    def code(self, frame_name: str = "df") -> str:
        return S.segments_code(self.ctx, self._res, frame_name)

    # --------------------------------------------------------------- tables
    def tables(self) -> dict[str, pd.DataFrame]:
        out: dict[str, pd.DataFrame] = {}
        if self.metric_pos is not None:
            out[f"{self.metric} by {self.by}"] = self.table
            if self.balance is not None:
                out[f"Balance of {self.by}"] = self.balance
        else:
            out["Balance" if self.by is None else f"Balance of {self.by}"] = self.table
        if len(self.tests):
            out["Tests"] = self.tests
        if self.anova_table is not None:
            out["ANOVA table"] = self.anova_table
        if self.effects is not None:
            out["Effect sizes"] = self.effects
        if self.metric_pos is not None and len(self._res.get("groups") or []) >= 2:
            out["Tukey HSD pairs (familywise adjusted)"] = self.pairs
        if self.crosstab is not None:
            out[f"Cross-tab counts: {self.by} × {self.against}"] = self.crosstab
            out["Row %"] = self.row_pct
            out["Column %"] = self.col_pct
            out["Adjusted standardized residuals"] = self.residuals
        if self.pivot is not None:
            flat = self.pivot.copy()
            flat.columns = [f"{a} | {b}" for a, b in flat.columns]
            out[f"Pivot of {self.metric}: mean and n per cell"] = flat
        return out

    # --------------------------------------------------------------- charts
    def chart(self) -> Any:
        """Segment means with CI error bars (with a metric), else the stacked shares."""
        if self.by_pos is None:
            return None
        if self.metric_pos is not None:
            return self.means_chart()
        return self.shares_chart()

    def means_chart(self) -> Any:
        import altair as alt

        t = self.table
        data = pd.DataFrame(
            {
                "segment": [str(v) for v in t.index],
                "mean": t["mean"].to_numpy(),
                "ci_low": t["ci_low"].to_numpy(),
                "ci_high": t["ci_high"].to_numpy(),
                "n": t["n"].to_numpy(),
            }
        ).dropna(subset=["mean"])
        order = list(data["segment"])
        base = alt.Chart(data, title=f"Mean of {self.metric} by {self.by} ({_pct(self.ctx.options.confidence)} CI)")
        bars = base.mark_bar(color="#5b7fa6").encode(
            y=alt.Y("segment:N", sort=order, title=str(self.by)),
            x=alt.X("mean:Q", title=f"mean of {self.metric}"),
            tooltip=["segment", "mean", "ci_low", "ci_high", "n"],
        )
        rules = base.mark_rule(color="#222222", strokeWidth=1.5).encode(
            y=alt.Y("segment:N", sort=order), x="ci_low:Q", x2="ci_high:Q"
        )
        return (bars + rules).properties(width=360, height=max(60, 22 * len(data)))

    def shares_chart(self) -> Any:
        """Stacked 100% bars: the share of each segment (or, with a cross-tab, of each
        ``against`` level within every segment)."""
        import altair as alt

        if self.crosstab is not None:
            rp = self.row_pct
            data = pd.DataFrame(
                {
                    "segment": np.repeat([str(v) for v in rp.index], rp.shape[1]),
                    "level": np.tile([str(v) for v in rp.columns], rp.shape[0]),
                    "percent": rp.to_numpy().ravel(),
                }
            )
            y_title, colour_title = str(self.by), str(self.against)
            title = f"{self.against} within each {self.by} (row %)"
            y_order = [str(v) for v in rp.index]
            levels = [str(v) for v in rp.columns]
        else:
            b = self.balance
            data = pd.DataFrame(
                {"segment": "all rows", "level": [str(v) for v in b.index], "percent": 100 * b["share"].to_numpy()}
            )
            y_title, colour_title, title, y_order = "", str(self.by), f"Share of rows by {self.by}", ["all rows"]
            levels = [str(v) for v in b.index]
        data["order"] = data["level"].map({v: i for i, v in enumerate(levels)})
        return (
            alt.Chart(data, title=title)
            .mark_bar()
            .encode(
                y=alt.Y("segment:N", sort=y_order, title=y_title),
                x=alt.X("percent:Q", stack="normalize", title="share", axis=alt.Axis(format="%")),
                color=alt.Color("level:N", sort=levels, title=colour_title,
                                scale=alt.Scale(scheme="tableau20")),
                order=alt.Order("order:Q"),
                tooltip=["segment", "level", alt.Tooltip("percent:Q", format=".1f")],
            )
            .properties(width=360, height=max(40, 24 * len(y_order)))
        )

    def residuals_chart(self) -> Any:
        """Heatmap of adjusted standardized residuals; cells beyond ±2 are outlined and bold."""
        import altair as alt

        if self.residuals is None:
            return None
        r = self.residuals
        values = r.to_numpy(dtype="float64")
        data = pd.DataFrame(
            {
                "segment": np.repeat([str(v) for v in r.index], r.shape[1]),
                "level": np.tile([str(v) for v in r.columns], r.shape[0]),
                "residual": values.ravel(),
                "count": self.crosstab.to_numpy().ravel(),
            }
        )
        data["beyond_2"] = data["residual"].abs() > 2
        data["text"] = data["residual"].map(lambda v: f"{v:+.1f}" if np.isfinite(v) else "")
        lim = float(np.nanmax(np.abs(values))) if np.isfinite(values).any() else 2.0
        lim = max(lim, 2.5)
        base = alt.Chart(data, title=f"{self.by} × {self.against}: adjusted residuals (|r| > 2 outlined)")
        x = alt.X("level:N", sort=[str(v) for v in r.columns], title=str(self.against),
                  axis=alt.Axis(labelAngle=0))
        y = alt.Y("segment:N", sort=[str(v) for v in r.index], title=str(self.by))
        cells = base.mark_rect().encode(
            x=x,
            y=y,
            color=alt.Color("residual:Q", scale=alt.Scale(scheme="redblue", domain=[-lim, lim], reverse=True)),
            stroke=alt.condition("datum.beyond_2", alt.value("#111111"), alt.value(None)),
            strokeWidth=alt.condition("datum.beyond_2", alt.value(2), alt.value(0)),
            tooltip=["segment", "level", "count", alt.Tooltip("residual:Q", format="+.2f")],
        )
        plain = base.transform_filter("!datum.beyond_2").mark_text(fontSize=11).encode(x=x, y=y, text="text:N")
        bold = base.transform_filter("datum.beyond_2").mark_text(fontSize=12, fontWeight="bold").encode(
            x=x, y=y, text="text:N"
        )
        return (cells + plain + bold).properties(width=max(120, 46 * r.shape[1]), height=max(60, 24 * r.shape[0]))

    def charts(self) -> list[Any]:
        """Builders of every chart of the tab: means with CIs, stacked shares, residual heatmap."""
        if self.by_pos is None:
            return []
        makers = [self.means_chart] if self.metric_pos is not None else []
        makers.append(self.shares_chart)
        if self.residuals is not None:
            makers.append(self.residuals_chart)
        return list(makers)

    # -------------------------------------------------------------- display
    def body_html(self, *, with_chart: bool = True) -> str:
        """Flags and the reading in words first; each chart beside the tables it draws."""
        from nbeda._render import chart_html

        def draw(make: Any) -> str:
            if not with_chart:
                return ""
            try:
                return chart_html(make())
            except Exception as exc:  # a chart failure never hides the numbers
                return f"<div class='nb-flag'>chart unavailable: {esc(type(exc).__name__)}: {esc(exc)}</div>"

        tables = self.tables()
        charts_after = {}
        if self.by_pos is not None:
            keys = list(tables)
            if self.metric_pos is not None:
                charts_after[keys[0]] = self.means_chart
            balance_key = next((k for k in keys if k.startswith("Balance")), None)
            if self.crosstab is not None:
                charts_after["Row %"] = self.shares_chart
                charts_after["Adjusted standardized residuals"] = self.residuals_chart
            elif balance_key is not None:
                charts_after[balance_key] = self.shares_chart
        parts = [notes_html(self.flags, "nb-flag"), notes_html(self.summary)]
        for caption, t in tables.items():
            parts.append(table_html(t, caption=caption))
            if caption == "Adjusted standardized residuals" and self.cramers_v is not None:
                parts.append(
                    "<div class='nb-notes'>"
                    + esc(f"Cramér's V = {self.cramers_v:.3f}; bias-corrected V (Bergsma 2013) = "
                          f"{_num(self.cramers_v_corrected)}")
                    + "</div>"
                )
            if caption in charts_after:
                parts.append(draw(charts_after[caption]))
        parts.append(notes_html(self.notes))
        parts.append(notes_html(self.cautions, "nb-caution"))
        return "".join(parts)

    def panel(self) -> Any:
        """Pickers for ``by``, ``against`` and ``metric``; the tables and charts redraw on change."""
        import ipywidgets as widgets

        from nbeda._html import CSS

        ctx = self.ctx
        roles = ctx.roles
        by_opts = [(f"{ctx.labels[i]} ({roles[i]})", i) for i in _by_choices(ctx)]
        if self.by_pos is not None and self.by_pos not in [v for _, v in by_opts]:
            by_opts.insert(0, (f"{self.by} ({roles[self.by_pos]})", self.by_pos))
        none = [("(none)", -1)]
        against_opts = none + by_opts
        metric_opts = none + [
            (f"{ctx.labels[i]} ({roles[i]})", i) for i in range(ctx.n_cols) if S.metric_allowed(ctx, i)
        ]
        by_dd = widgets.Dropdown(options=by_opts or none, value=self.by_pos if self.by_pos is not None else
                                 (by_opts or none)[0][1], description="by")
        against_dd = widgets.Dropdown(options=against_opts, description="against",
                                      value=self.against_pos if self.against_pos is not None else -1)
        metric_dd = widgets.Dropdown(options=metric_opts, description="metric",
                                     value=self.metric_pos if self.metric_pos is not None else -1)
        out = widgets.HTML(value=self._panel_html(self))

        def redraw(_: Any = None) -> None:
            b, a, m = by_dd.value, against_dd.value, metric_dd.value
            try:
                res = _build_positions(
                    ctx,
                    None if b == -1 else b,
                    None if m == -1 else m,
                    None if a == -1 or a == b else a,
                    choice_notes=[],
                )

                def arg(pos: int) -> str:
                    return "False" if pos == -1 or pos is None else repr(ctx.labels[pos])

                res.notes.insert(0, (
                    "The code panel shows the tab's defaults; the code of this selection is "
                    f"df.eda.segments(by={arg(b)}, against={arg(a if a != b else -1)}, metric={arg(m)}).code()"
                ))
                out.value = self._panel_html(res)
            except ValueError as exc:
                out.value = f"<style>{CSS}</style><div class='nbeda nb-flag'>{esc(exc)}</div>"

        for dd in (by_dd, against_dd, metric_dd):
            dd.observe(redraw, names="value")
        return widgets.VBox([widgets.HBox([by_dd, against_dd, metric_dd]), out])

    _redraws = 0

    @classmethod
    def _panel_html(cls, res: SegmentsResult) -> str:
        """Escaped HTML of one state of the panel; chart ids made unique (several SVGs per page)."""
        from nbeda._html import CSS

        body = res.body_html()
        try:
            from nbeda.standalone import offline_svg

            cls._redraws += 1
            body = offline_svg(body, f"nbseg{id(res) % 100000}-{cls._redraws}")
        except ImportError:  # pragma: no cover - the standalone module ships with the package
            pass
        return f"<style>{CSS}</style><div class='nbeda'>{body}</div>"


# ---------------------------------------------------------------------- build
def _by_choices(ctx: Context) -> list[int]:
    """Columns offered in the ``by`` picker: the candidates, then binnable numeric columns."""
    cands = S.by_candidates(ctx)
    numeric = [i for i in ctx.with_role("continuous", "discrete") if ctx.is_numeric_coded(i) and i not in cands]
    return cands + numeric


def _resolve(ctx: Context, label: Any, what: str) -> int:
    pos = ctx.positions_of(label)
    if not pos:
        raise KeyError(f"{what}: no column named {label!r}")
    return pos[0]


def build(ctx: Context, by: Any = None, metric: Any = None, against: Any = None, **_: Any) -> SegmentsResult:
    """The Segments section (see the module docstring for the defaults)."""
    choice_notes: list[str] = []
    # by
    if by is None:
        by = ctx.options.by
    if by is not None:
        by_pos: int | None = _resolve(ctx, by, "by")
        if ctx.options.by is not None and by == ctx.options.by:
            choice_notes.append(f"segments of {ctx.labels[by_pos]!r} (the report's by option)")
    else:
        cands = S.by_candidates(ctx)
        by_pos = cands[0] if cands else None
        if by_pos is not None:
            choice_notes.append(
                f"segments of {ctx.labels[by_pos]!r}: chosen as the first {ctx.roles[by_pos]} column with "
                "2-20 levels and the fewest missing values (rule: nominal, then ordinal, then boolean; "
                "pick another with by=…)"
            )
    # metric
    if metric is False or by_pos is None:
        metric_pos: int | None = None
    elif metric is not None:
        metric_pos = _resolve(ctx, metric, "metric")
        if not S.metric_allowed(ctx, metric_pos):
            raise ValueError(
                f"metric {metric!r} is {_a(ctx.roles[metric_pos])} column; the metric must be numeric "
                "(continuous, discrete, numeric-coded ordinal or 0/1 boolean). "
                "Use it as by= or against= instead."
            )
    else:
        metric_pos, why = S.metric_default(ctx, by_pos)
        choice_notes.append(why)
    # against
    if against is False or by_pos is None:
        against_pos: int | None = None
    elif against is not None:
        against_pos = _resolve(ctx, against, "against")
        if against_pos == by_pos:
            raise ValueError(f"against {against!r} is the by column itself; pick a second column")
    else:
        against_pos, v = S.against_default(ctx, by_pos)
        if against_pos is not None:
            choice_notes.append(
                f"cross-tab against {ctx.labels[against_pos]!r}: the candidate column most associated with "
                f"{ctx.labels[by_pos]!r} (bias-corrected Cramér's V {v:.3f}). It was chosen by looking at the "
                "data, so read its p-value as exploratory; pick another with against=… or none with against=False"
            )
    return _build_positions(ctx, by_pos, metric_pos, against_pos, choice_notes)


def _build_positions(
    ctx: Context,
    by_pos: int | None,
    metric_pos: int | None,
    against_pos: int | None,
    choice_notes: list[str],
) -> SegmentsResult:
    if metric_pos is not None and not S.metric_allowed(ctx, metric_pos):
        raise ValueError(
            f"metric {ctx.labels[metric_pos]!r} is {_a(ctx.roles[metric_pos])} column; the metric must be numeric"
        )
    if by_pos is None:
        metric_pos = against_pos = None
    res = S.compute_segments(ctx, by_pos, metric_pos, against_pos)
    result = SegmentsResult(ctx, res, notes=list(choice_notes))
    if ctx.options.sample is not None and ctx.options.sample < ctx.n_rows:
        result.notes.append("Segments use every row (group summaries are cheap): the sample option does not apply.")
    if by_pos is None:
        result.notes.insert(
            0,
            "No column to split the rows by: no nominal, ordinal or boolean column with 2-20 levels. "
            "Pass by=… (any column; numeric ones are cut into quantile bins). The table is empty.",
        )
        return result
    _words(ctx, res, result)
    return result


def _words(ctx: Context, res: dict[str, Any], r: SegmentsResult) -> None:
    """Plain-words reading, notes and cautions."""
    alpha = 1.0 - ctx.options.confidence
    by = str(r.by)
    order, named, mode = res["order"], res["named"], res["mode"]
    bal = res["balance"]
    tests = r.tests
    # --- how the segments were formed
    if mode == "bins":
        r.notes.append(f"{by} is numeric with many values: cut into {len(named)} equal-count quantile bins.")
    if any(str(v).startswith("other (") for v in order if v not in named and v != S.MISSING):
        pooled = [v for v in order if v not in named and v != S.MISSING][0]
        r.notes.append(
            f"{by} has more than {S.MAX_LEVELS} levels: the {S.MAX_LEVELS} most frequent are shown and the "
            f"rest are pooled as {pooled!r}."
        )
        r.flags.append(f"{by} has many levels ({pooled}); a high-cardinality column may be an identifier.")
    if S.MISSING in order:
        n_miss = int(bal.loc[S.MISSING, "n"])
        r.notes.append(f"{n_miss:,} rows with {by} missing form their own segment {S.MISSING!r} (never dropped).")
    if len(named) < 2:
        r.summary.append(f"{by} has a single level ({named[0] if named else 'none'}): there is nothing to compare.")
        r.flags.append(f"{by} has fewer than 2 levels")
    # --- balance
    if len(named) >= 2:
        shares = bal.loc[named, "share"]
        top = shares.idxmax()
        if "balance_chi2" in tests.index:
            p = tests.loc["balance_chi2", "p_value"]
            w = tests.loc["balance_chi2", "effect_size"]
            if p >= alpha:
                r.summary.append(
                    f"The levels of {by} are evenly represented (χ² against equal shares: {_p(p)}); "
                    f"the largest, {top}, holds {_pct(shares.max())} of rows."
                )
            else:
                r.summary.append(
                    f"{top} holds {_pct(shares[top])} of rows; the levels of {by} are not evenly represented "
                    f"(χ² against equal shares: {_p(p)}, Cohen's w = {w:.2f}; smallest: "
                    f"{shares.idxmin()}, {_pct(shares.min())})."
                )
        else:
            r.summary.append(f"The largest segment, {top}, holds {_pct(shares[top])} of rows.")
    # --- metric
    if r.metric_pos is not None:
        _metric_words(ctx, res, r, alpha)
    # --- cross-tab
    if r.crosstab is not None:
        _cross_words(res, r, alpha)


def _metric_words(ctx: Context, res: dict[str, Any], r: SegmentsResult, alpha: float) -> None:
    t = r.table
    metric, by = str(r.metric), str(r.by)
    groups = res["groups"]
    y = res["y"]
    n_inf = int(np.isinf(y).sum())
    if n_inf:
        r.notes.append(f"{n_inf:,} infinite values of {metric} are treated as missing.")
    small = [str(g) for g in t.index[(t["n"] > 0) & (t["n"] < TINY)]]
    if small:
        r.cautions.append(
            f"Tiny segments (fewer than {TINY} values, common practice): {', '.join(small[:8])}"
            f"{'…' if len(small) > 8 else ''}. Their means and intervals are unreliable."
        )
    left_out = [str(g) for g in t.index if g not in groups]
    if left_out and len(groups) >= 2:
        r.notes.append(
            f"Segments with fewer than 2 values of {metric} are left out of the tests: {', '.join(left_out[:8])}."
        )
    if len(groups) < 2:
        r.summary.append(f"Fewer than two segments hold 2 or more values of {metric}: no tests.")
        return
    tests = r.tests
    sub = t.loc[groups]
    ranked = sub["mean"].sort_values(ascending=False, kind="stable")
    lead, second = ranked.index[0], ranked.index[1]
    anova = res["anova"]
    p_pair = S.tukey_pair_p(
        float(sub.loc[lead, "mean"]), float(sub.loc[second, "mean"]), float(sub.loc[lead, "n"]),
        float(sub.loc[second, "n"]), anova["ms_within"], len(groups), anova["df_within"],
    )
    supported = bool(np.isfinite(p_pair) and p_pair < alpha)
    r.leader = {
        "segment": lead,
        "mean": float(ranked.iloc[0]),
        "runner_up": second,
        "runner_up_mean": float(ranked.iloc[1]),
        "diff": float(ranked.iloc[0] - ranked.iloc[1]),
        "p_adjusted": p_pair,
        "supported": supported,
    }
    lead_text = (
        f"{lead} has the highest mean {metric} ({_num(ranked.iloc[0])}; runner-up {second}, "
        f"{_num(ranked.iloc[1])}). "
    )
    if supported:
        lead_text += f"Its lead over {second} is statistically supported (Tukey HSD, adjusted {_p(p_pair)})."
    else:
        lead_text += (
            f"Its lead over {second} is not statistically supported (Tukey HSD, adjusted {_p(p_pair)}): "
            "the top two may be tied."
        )
    r.summary.append(lead_text)
    a = tests.loc["anova"]
    wl = tests.loc["welch_anova"]
    kw = tests.loc["kruskal"]
    eta = a["effect_size"]
    size = "negligible" if eta < 0.01 else "small" if eta < 0.06 else "medium" if eta < 0.14 else "large"
    r.summary.append(
        f"Across {len(groups)} segments: ANOVA F({int(a['dof'])}, {anova['df_within']}) = {_num(a['statistic'])}, "
        f"{_p(a['p_value'])}; Welch's F({int(wl['dof'])}, {_num(anova['welch_df_within'])}) = {_num(wl['statistic'])}, "
        f"{_p(wl['p_value'])}; Kruskal–Wallis H = {_num(kw['statistic'])}, {_p(kw['p_value'])}. "
        f"η² = {_num(eta)} ({size} by Cohen's 1988 benchmarks 0.01/0.06/0.14, common practice), "
        f"ω² = {_num(anova['omega_squared'])}."
    )
    med_lead = sub["median"].idxmax()
    if med_lead != lead and kw["p_value"] < alpha:
        r.cautions.append(
            f"{lead} has the highest mean but {med_lead} the highest median: a few extreme values may be "
            "driving the means (check the Extremes tab); Kruskal–Wallis compares the whole distributions."
        )
    sum_lead = sub["sum"].idxmax()
    if sum_lead != lead:
        r.cautions.append(
            f"{sum_lead} holds the largest total of {metric} ({_pct(t.loc[sum_lead, 'share_of_total'])} of it) "
            f"but not the highest mean: it is simply larger ({int(t.loc[sum_lead, 'n']):,} values)."
        )
    sd = sub["std"].to_numpy(dtype="float64")
    if np.all(sd > 0) and sd.max() / sd.min() > 2:
        r.cautions.append(
            "The segments' standard deviations differ by more than a factor of 2 (common practice): "
            "read Welch's ANOVA rather than the classic F test."
        )
    if anova["ss_within"] == 0:
        r.notes.append(
            f"Every segment's values of {metric} are identical within the segment: the within-segment "
            "variation is zero, so F is infinite and the pairwise intervals cannot be computed."
        )
    if len(groups) > 2:
        r.cautions.append(
            f"Pairwise differences come from Tukey's HSD, which keeps the familywise error rate at "
            f"{_pct(alpha)} across all {len(groups) * (len(groups) - 1) // 2} comparisons; unadjusted "
            "pairwise tests would flag differences by chance."
        )
    r.cautions.append(
        "A difference between segments is an association, not proof that the segment causes it: "
        "segments may differ in other ways too."
    )


def _cross_words(res: dict[str, Any], r: SegmentsResult, alpha: float) -> None:
    by, ag = str(r.by), str(r.against)
    cross = res["cross"]
    tests = r.tests
    r.notes.append(
        "The χ² test of independence is computed without Yates' continuity correction; missing values of "
        "either column are kept as a '(missing)' level."
    )
    if "chi2" not in tests.index:
        r.summary.append(f"{by} × {ag}: one of the two has a single level, so there is no test of independence.")
        return
    c = tests.loc["chi2"]
    resid = r.residuals
    big = resid.stack()
    big = big[big.abs() > 2].sort_values(key=np.abs, ascending=False)
    cells = "; ".join(f"{i} × {j}: {v:+.1f}" for (i, j), v in big.head(4).items())
    if c["p_value"] < alpha:
        text = (
            f"{ag} depends on {by} (χ²({int(c['dof'])}) = {_num(c['statistic'])}, {_p(c['p_value'])}; "
            f"Cramér's V = {c['effect_size']:.3f}, bias-corrected {_num(r.cramers_v_corrected)})."
        )
        if cells:
            text += f" Cells furthest from independence (adjusted residuals beyond ±2): {cells}."
    else:
        text = (
            f"No evidence that {ag} depends on {by} (χ²({int(c['dof'])}) = {_num(c['statistic'])}, "
            f"{_p(c['p_value'])}; Cramér's V = {c['effect_size']:.3f})."
        )
    r.summary.append(text)
    if not cross["cochran_ok"]:
        msg = (
            f"Expected counts are too small for the χ² approximation (Cochran's rule, common practice: "
            f"{_pct(cross['share_expected_ge_5'])} of cells have expected ≥ 5, smallest {cross['min_expected']:.2f})."
        )
        msg += (
            " Fisher's exact test is given for this 2×2 table." if "fisher_exact" in tests.index
            else " Pool sparse levels or use an exact/permutation test before trusting the p-value."
        )
        r.cautions.append(msg)
    if "fisher_exact" in tests.index:
        f = tests.loc["fisher_exact"]
        r.summary.append(f"Fisher's exact test (2×2): odds ratio {_num(f['statistic'])}, {_p(f['p_value'])}.")
    r.cautions.append(
        "χ² needs adequate expected counts; with many cells, a few residuals beyond ±2 are expected by chance "
        "(about 5% of cells)."
    )
