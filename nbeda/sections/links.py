"""Links section: how columns move together (``df.eda.links()``) and ``df.eda.trend(x, y)``.

The computation and its code writer live in :mod:`nbeda.stats.links` (measures per pair
of roles, intervals, tests, Benjamini–Hochberg, the fast pairwise-complete Spearman).

Chart: a heatmap of one measure (colour centred on 0; cells whose ``p_adjusted`` is
0.05 or more are muted) over at most :data:`HEATMAP_COLUMNS` columns — those with the
strongest links when more are paired (said in the title) — beside a ranked list of the
strongest links with their confidence intervals.

Trend picker (``panel()``): a pair of numeric columns, its scatter with the fitted line,
equation, R² and warnings.  Segments for the reversal check come from the report's
``by`` option when set, else from the first ``nominal`` column with 2–12 levels (our default).
"""

from __future__ import annotations

from collections.abc import Hashable
from typing import Any

import numpy as np
import pandas as pd

from nbeda._context import Context
from nbeda._html import esc, notes_html, table_html
from nbeda.sections._base import SectionResult
from nbeda.stats import links as L
from nbeda.stats._codegen import header, join_blocks, lit

__all__ = ["LinksResult", "TrendResult", "build", "build_trend", "HEATMAP_COLUMNS", "MAX_POINTS"]

#: Columns drawn in the heatmap at most (those with the strongest links).
HEATMAP_COLUMNS = 20
#: Links in the ranked list.
RANKED = 15
#: Points drawn in a trend scatter at most (a seeded sample above it, over a binned density).
MAX_POINTS = 5000
_CORR = ("pearson", "spearman", "kendall")


class LinksResult(SectionResult):
    name = "links"
    title = "Links"

    def __init__(self, ctx: Context, table: pd.DataFrame, info: dict[str, Any], **kw: Any) -> None:
        super().__init__(ctx, table, **kw)
        self.info = info

    # ------------------------------------------------------------------ views
    def matrix(self, measure: str | None = None, top: int | None = None) -> pd.DataFrame:
        """Wide form of one measure: paired columns × paired columns (NaN where not measured).

        ``top`` keeps only the ``top`` columns with the strongest links of that measure.
        """
        measure = measure or self.default_measure()
        t = self.table[self.table["measure"] == measure]
        pos = self.info["positions"]
        labels = [self.ctx.labels[i] for i in pos]
        k = len(pos)
        m = np.full((k, k), np.nan)
        where = {}
        for a in range(k):
            for b in range(a + 1, k):
                where[(a, b)] = None
        # rows are in pair order (a < b), one per pair for a given measure
        pairs = [(a, b) for a in range(k) for b in range(a + 1, k)
                 if measure in _measures(self.info["kinds"][a], self.info["kinds"][b], self.info)]
        est = t["estimate"].to_numpy(dtype="float64")
        for (a, b), v in zip(pairs, est, strict=True):
            m[a, b] = m[b, a] = v
        if measure in _CORR:
            for a in range(k):
                if self.info["kinds"][a] in ("numeric", "ordinal"):
                    m[a, a] = 1.0
        keep = list(range(k))
        if top is not None and k > top:
            off = np.where(np.eye(k, dtype=bool), np.nan, np.abs(m))
            with np.errstate(all="ignore"):
                best = np.nan_to_num(np.nanmax(np.where(np.isnan(off), -1, off), axis=1), nan=-1)
            keep = sorted(np.argsort(-best, kind="stable")[:top].tolist())
        idx = pd.Index([labels[i] for i in keep], name="column", dtype=object, tupleize_cols=False)
        cols = pd.Index([labels[i] for i in keep], dtype=object, tupleize_cols=False)
        return pd.DataFrame(m[np.ix_(keep, keep)], index=idx, columns=cols)

    def default_measure(self) -> str:
        present = list(dict.fromkeys(self.table["measure"]))
        for m in ("spearman", "pearson", "kendall", "cramers_v", "eta", "mutual_info"):
            if m in present:
                return m
        return "spearman"

    def ranked(self, top: int = RANKED) -> pd.DataFrame:
        """The strongest links (largest |estimate|, mutual information left out), strongest first."""
        t = self.table[(self.table["measure"] != "mutual_info") & self.table["estimate"].notna()]
        order = np.argsort(-np.abs(t["estimate"].to_numpy(dtype="float64")), kind="stable")
        return t.iloc[order[:top]]

    def tables(self) -> dict[str, pd.DataFrame]:
        out = {"Strongest links": self.ranked(), self.title: self.table}
        return out

    # ------------------------------------------------------------------ chart
    def chart(self, measure: str | None = None) -> Any:
        import altair as alt

        measure = measure or self.default_measure()
        if self.table.empty:
            return None
        k = len(self.info["positions"])
        mat = self.matrix(measure, top=HEATMAP_COLUMNS)
        limited = k > HEATMAP_COLUMNS
        t = self.table[self.table["measure"] == measure]
        padj = {}
        for x, y, p in zip(t["x"], t["y"], t["p_adjusted"], strict=True):
            padj[(str(x), str(y))] = padj[(str(y), str(x))] = p
        names = [str(c) for c in mat.columns]
        cells = []
        vals = mat.to_numpy()
        for i, a in enumerate(names):
            for j, b in enumerate(names):
                v = vals[i, j]
                if np.isnan(v):
                    continue
                p = padj.get((a, b), 0.0 if i == j else np.nan)
                cells.append({"row": a, "col": b, "value": float(v),
                              "clear": bool(np.isfinite(p) and p < 0.05)})
        data = pd.DataFrame(cells, columns=["row", "col", "value", "clear"])
        title = f"{measure} between columns (faded: p_adjusted ≥ 0.05)"
        if limited:
            title += f" (the {HEATMAP_COLUMNS} columns with the strongest links of {k})"
        heat = (
            alt.Chart(data, title=title)
            .mark_rect()
            .encode(
                x=alt.X("col:N", sort=names, title=None),
                y=alt.Y("row:N", sort=names, title=None),
                color=alt.Color("value:Q", title=measure,
                                scale=alt.Scale(domain=[-1, 1], domainMid=0,
                                                range=["#b2182b", "#f7f7f7", "#2166ac"])),
                opacity=alt.condition("datum.clear", alt.value(1.0), alt.value(0.3)),
                tooltip=["row", "col", alt.Tooltip("value:Q", format=".3f"), "clear"],
            )
            .properties(width=max(120, 16 * len(names)), height=max(120, 16 * len(names)))
        )
        r = self.ranked()
        ranked = pd.DataFrame({
            "pair": [f"{x} ~ {y} ({m})" for x, y, m in zip(r["x"], r["y"], r["measure"], strict=True)],
            "estimate": r["estimate"].to_numpy(dtype="float64"),
            "low": r["ci_low"].to_numpy(dtype="float64"),
            "high": r["ci_high"].to_numpy(dtype="float64"),
        })
        order = list(ranked["pair"])
        base = alt.Chart(ranked, title="Strongest links (bars: confidence interval)")
        bars = base.mark_rule().encode(
            y=alt.Y("pair:N", sort=order, title=None), x=alt.X("low:Q", title="estimate"), x2="high:Q"
        )
        dots = base.mark_point(filled=True).encode(
            y=alt.Y("pair:N", sort=order), x=alt.X("estimate:Q", scale=alt.Scale(domain=[-1, 1])),
            tooltip=["pair", alt.Tooltip("estimate:Q", format=".3f")],
        )
        ranked_chart = (bars + dots).properties(width=260, height=max(60, 18 * len(ranked)))
        if data.empty:
            return ranked_chart
        return alt.hconcat(heat, ranked_chart)

    # ------------------------------------------------------------------- code
    def code(self, frame_name: str = "df") -> str:
        return L.links_code(self.ctx, self.info, frame_name)

    # ------------------------------------------------------------------ panel
    def trend_pairs(self, top: int = 50) -> list[tuple[int, int]]:
        """Pairs of numeric/ordinal columns offered by the trend picker, strongest first."""
        pos, kinds = self.info["positions"], self.info["kinds"]
        out: list[tuple[int, int]] = []
        k = len(pos)
        scored = []
        for a in range(k):
            for b in range(a + 1, k):
                if kinds[a] != "nominal" and kinds[b] != "nominal":
                    scored.append((a, b))
        t = self.table[self.table["measure"].isin(_CORR)]
        best: dict[tuple[str, str], float] = {}
        for x, y, e in zip(t["x"].map(repr), t["y"].map(repr), t["estimate"], strict=True):
            if np.isfinite(e):
                best[(x, y)] = max(best.get((x, y), 0.0), abs(float(e)))
        labels = [repr(self.ctx.labels[i]) for i in pos]
        scored.sort(key=lambda ab: -best.get((labels[ab[0]], labels[ab[1]]), -1.0))
        for a, b in scored[:top]:
            out.append((pos[a], pos[b]))
        return out

    def panel(self) -> Any:
        import ipywidgets as widgets

        pairs = self.trend_pairs()
        summary = widgets.HTML(self.body_html())
        if not pairs:
            return summary
        by = default_by(self.ctx)
        options = [(f"{self.ctx.labels[a]} → {self.ctx.labels[b]}", (a, b)) for a, b in pairs]
        pick = widgets.Dropdown(options=options, description="pair", layout={"width": "520px"})
        out = widgets.HTML()

        def draw(change: Any = None) -> None:
            a, b = pick.value
            try:
                res = trend_from_positions(self.ctx, a, b, by)
                out.value = res.to_html(with_code=False)
            except Exception as exc:  # the picker never takes the tab down
                out.value = f"<div class='nb-flag'>trend unavailable: {esc(exc)}</div>"

        pick.observe(draw, names="value")
        draw()
        return widgets.VBox([summary, widgets.HTML("<h4>Trend of a pair</h4>"), pick, out])


def _measures(kind_a: str, kind_b: str, info: dict[str, Any]) -> list[str]:
    ms = list(L.measures_for(kind_a, kind_b, info["method"]))
    if info["mutual_info"]:
        ms.append("mutual_info")
    return ms


def build(ctx: Context, method: str = "auto", mutual_info: bool = False, **_: Any) -> LinksResult:
    table, info = L.compute_links(ctx, method=method, mutual_info=bool(mutual_info))
    notes = list(info["notes"])
    k = len(info["positions"])
    if k < 2:
        notes.append("Fewer than two columns can be paired: no links to show.")
    if info["sample_rows"] is not None:
        notes.append(f"Computed on a seeded sample of {len(info['sample_rows']):,} rows "
                     f"(seed {ctx.options.seed}).")
    n_used = ctx.n_rows if info["sample_rows"] is None else len(info["sample_rows"])
    if n_used > L.KENDALL_MAX_ROWS and (table["measure"] == "kendall").any():
        notes.append(f"Kendall's τ-b runs on a seeded sample of {L.KENDALL_MAX_ROWS:,} rows "
                     f"(seed {ctx.options.seed}).")
    if k > HEATMAP_COLUMNS:
        notes.append(f"The heatmap shows the {HEATMAP_COLUMNS} columns with the strongest links "
                     f"of the {k} paired; the table lists every pair.")
    notes += [
        "Measures: Pearson r and Spearman ρ for numeric pairs; Spearman ρ and Kendall τ-b for "
        "ordinal pairs; Cramér's V (bias-corrected, Bergsma 2013) for categories; correlation "
        "ratio η for numbers across categories. Pairwise-complete rows (n per pair); ±inf as missing.",
        "Intervals by Fisher's z (Spearman: Bonett–Wright SE; Kendall: Fieller–Hartley–Pearson SE); "
        "χ² tests without Yates' correction; η tested by one-way ANOVA.",
        "strength (common practice, after Cohen 1988): |estimate| < 0.1 negligible, < 0.3 weak, "
        "< 0.5 moderate, < 0.7 strong, otherwise very strong.",
    ]
    cautions = [
        "A link is not a cause: a third variable, the way rows were collected, or chance can "
        "produce it.",
        "Many pairs are tested at once: read p_adjusted (Benjamini–Hochberg), not p_value.",
        "χ² p-values need adequate expected counts (see note where they are sparse).",
        "A link can reverse inside segments (Simpson's paradox): check the trend of a pair by segment.",
    ]
    flags = []
    disagree = table["note"].str.startswith("Pearson and Spearman differ").sum() // 2
    if disagree:
        flags.append(f"{disagree} numeric pair(s) where Pearson and Spearman differ by 0.2 or more "
                     "(a bend or outliers drive the link).")
    return LinksResult(ctx, table.reset_index(drop=True), info, notes=notes, cautions=cautions,
                       flags=flags)


# ---------------------------------------------------------------------------
# Trend
# ---------------------------------------------------------------------------
def default_by(ctx: Context) -> int | None:
    """Segments for the reversal check: the ``by`` option, else the first nominal column with
    2–12 levels (our default), else none."""
    if ctx.options.by is not None:
        return ctx.positions_of(ctx.options.by)[0]
    table = ctx.roles_table
    for i, role in enumerate(ctx.roles):
        if role == "nominal" and 2 <= int(table["unique"].iloc[i]) <= 12:
            return i
    return None


class TrendResult(SectionResult):
    name = "trend"
    title = "Trend"

    def __init__(self, ctx: Context, table: pd.DataFrame, ix: int, iy: int, iby: int | None,
                 warnings: list[str], **kw: Any) -> None:
        super().__init__(ctx, table, **kw)
        self.ix, self.iy, self.iby = ix, iy, iby
        #: plain-words warnings about the fit (always includes "a link is not a cause")
        self.warnings = list(warnings)

    def body_html(self, *, with_chart: bool = True) -> str:
        parts = [notes_html(self.warnings, "nb-flag"), table_html(self.table, caption=self.title)]
        if with_chart:
            parts.append(self.chart_html())
        parts.append(notes_html(self.notes))
        return "".join(parts)

    def _xy(self) -> tuple[np.ndarray, np.ndarray, np.ndarray | None]:
        x = _floats(self.ctx, self.ix)
        y = _floats(self.ctx, self.iy)
        g = self.ctx.series(self.iby).to_numpy(dtype=object) if self.iby is not None else None
        return x, y, g

    def chart(self) -> Any:
        import altair as alt

        x, y, g = self._xy()
        ok = np.isfinite(x) & np.isfinite(y)
        xs, ys = x[ok], y[ok]
        n = xs.size
        xn, yn = "x", "y"
        xt, yt = str(self.ctx.labels[self.ix]), str(self.ctx.labels[self.iy])
        if n == 0:
            return None
        seg = None
        if g is not None:
            seg = pd.Series(g[ok], dtype=object).astype(str).to_numpy()
            if pd.unique(seg).size > 10:
                seg = None
        layers = []
        title = f"{yt} against {xt}"
        if n > MAX_POINTS:
            hx, ex = np.histogram(xs, bins=40)
            h2, ex, ey = np.histogram2d(xs, ys, bins=40)
            ii, jj = np.nonzero(h2)
            dens = pd.DataFrame({"x0": ex[ii], "x1": ex[ii + 1], "y0": ey[jj], "y1": ey[jj + 1],
                                 "rows": h2[ii, jj]})
            layers.append(
                alt.Chart(dens).mark_rect().encode(
                    x=alt.X("x0:Q", title=xt), x2="x1:Q", y=alt.Y("y0:Q", title=yt), y2="y1:Q",
                    color=alt.Color("rows:Q", scale=alt.Scale(scheme="greys"), title="rows per cell"),
                )
            )
            pick = np.sort(np.random.default_rng(self.ctx.options.seed).choice(n, MAX_POINTS, replace=False))
            title += f" — binned density of all {n:,} rows + a seeded sample of {MAX_POINTS:,} points"
        else:
            pick = np.arange(n)
        pts = pd.DataFrame({xn: xs[pick], yn: ys[pick]})
        enc: dict[str, Any] = {"x": alt.X(f"{xn}:Q", title=xt), "y": alt.Y(f"{yn}:Q", title=yt)}
        if seg is not None:
            pts["segment"] = seg[pick]
            enc["color"] = alt.Color("segment:N", title=str(self.ctx.labels[self.iby]))
        layers.append(alt.Chart(pts).mark_circle(size=14, opacity=0.45).encode(**enc))
        lines = []
        lo, hi = float(xs.min()), float(xs.max())
        for name, row in self.table.iterrows():
            if not np.isfinite(row["slope"]):
                continue
            if name == L.ALL_ROWS:
                seg_name = "all rows"
            elif seg is None:
                continue
            else:
                seg_name = str(name)
                inside = xs[seg == seg_name]
                if inside.size == 0:
                    continue
                lo_s, hi_s = float(inside.min()), float(inside.max())
            span = (lo, hi) if seg_name == "all rows" else (lo_s, hi_s)
            for xv in span:
                lines.append({"x": xv, "y": row["intercept"] + row["slope"] * xv, "line": seg_name,
                              "overall": seg_name == "all rows"})
        if lines:
            ld = pd.DataFrame(lines)
            layers.append(
                alt.Chart(ld).mark_line().encode(
                    x="x:Q", y="y:Q", detail="line:N",
                    strokeWidth=alt.condition("datum.overall", alt.value(3), alt.value(1)),
                    strokeDash=alt.condition("datum.overall", alt.value([1, 0]), alt.value([4, 3])),
                    color=alt.value("#222222"),
                )
            )
        eq = self.table["equation"].iloc[0]
        r2 = self.table["r2"].iloc[0]
        sub = f"{eq}   R² = {r2:.3f}" if eq else ""
        return alt.layer(*layers).properties(
            title=alt.TitleParams(title, subtitle=sub), width=420, height=300
        )

    def code(self, frame_name: str = "df") -> str:
        ctx = self.ctx

        def col(i: int) -> str:
            e = f"{frame_name}.iloc[:, {i}]"
            dtype = ctx.series(i).dtype
            if isinstance(dtype, pd.CategoricalDtype) and dtype.ordered:
                return f"{e}.cat.codes.astype('float64').where({e}.cat.codes >= 0).to_numpy()"
            if pd.api.types.is_timedelta64_dtype(dtype):
                return f"{e}.dt.total_seconds().to_numpy(dtype='float64', na_value=np.nan)"
            return f"{e}.astype('float64').to_numpy(dtype='float64', na_value=np.nan)"

        by_line = (f"groups = {frame_name}.iloc[:, {self.iby}].to_numpy(dtype=object)  # "
                   f"segments: {ctx.labels[self.iby]!r}" if self.iby is not None else "groups = None")
        body = f"""\
x = {col(self.ix)}  # {ctx.labels[self.ix]!r}
y = {col(self.iy)}  # {ctx.labels[self.iy]!r}
{by_line}
trend = trend_table(x, y, groups, {lit(str(ctx.labels[self.ix]))}, {lit(str(ctx.labels[self.iy]))})
"""
        return join_blocks(
            header("Trend: a straight-line fit (ordinary least squares)", ctx, frame_name,
                   extra=["Rows with a missing or infinite x or y are left out.",
                          "A link is not a cause."]),
            L.function_source(L.ols_fit),
            L.function_source(L.trend_table),
            body,
        )


def _floats(ctx: Context, i: int) -> np.ndarray:
    s = ctx.series(i)
    if isinstance(s.dtype, pd.CategoricalDtype) and s.dtype.ordered:
        c = s.cat.codes.to_numpy(dtype="float64")
        return np.where(c >= 0, c, np.nan)
    return ctx.float_values(i)


def trend_from_positions(ctx: Context, ix: int, iy: int, iby: int | None) -> TrendResult:
    if iby is not None and iby in (ix, iy):
        iby = None
    for i in (ix, iy):
        s = ctx.series(i)
        if not (ctx.is_numeric_coded(i) or (isinstance(s.dtype, pd.CategoricalDtype) and s.dtype.ordered)):
            raise TypeError(f"trend needs numeric columns; {ctx.labels[i]!r} is {s.dtype}")
    x, y = _floats(ctx, ix), _floats(ctx, iy)
    g = ctx.series(iby).to_numpy(dtype=object) if iby is not None else None
    xn, yn = str(ctx.labels[ix]), str(ctx.labels[iy])
    with np.errstate(all="ignore"):
        table = L.trend_table(x, y, g, xn, yn)
        ok = np.isfinite(x) & np.isfinite(y)
        row_labels = list(ctx.frame.index[ok])
        warnings = L.trend_warnings(x[ok], y[ok], row_labels, xn, yn)
        notes = []
        if iby is not None:
            pooled = L.pooled_within_slope(x, y, g)
            w = L.simpson_warning(table, str(ctx.labels[iby]), xn, yn, pooled)
            if w:
                warnings.append(w)
            notes.append(f"Segments: {ctx.labels[iby]!r}; pooled within-segment slope {pooled:.4g}.")
    n_drop = int((~ok).sum())
    if n_drop:
        notes.append(f"{n_drop:,} rows with a missing or infinite value left out.")
    warnings.append("A link is not a cause: the fit describes how the columns move together, "
                    "not what would happen if one were changed.")
    return TrendResult(ctx, table, ix, iy, iby, warnings, notes=notes,
                       cautions=["A link is not a cause."])


def build_trend(ctx: Context, x: Hashable, y: Hashable, by: Hashable | None = None) -> TrendResult:
    """``df.eda.trend(x, y, by=None)``: OLS of y on x, overall and (with ``by``) per segment."""
    ix, iy = ctx.position(x), ctx.position(y)
    iby = ctx.position(by) if by is not None else None
    return trend_from_positions(ctx, ix, iy, iby)
