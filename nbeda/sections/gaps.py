"""Gaps section: missing values, disguised gaps, patterns, mechanism tests and fill comparison.

The numbers come from :mod:`nbeda.stats.gaps`; this module presents them
(tables, flags, notes, cautions, charts, the interactive fill picker) and writes
the plain code.
"""

from __future__ import annotations

from collections.abc import Hashable
from typing import Any

import numpy as np
import pandas as pd

from nbeda._context import Context
from nbeda.sections._base import SectionResult
from nbeda.stats import gaps as G
from nbeda.stats._codegen import col_expr, function_source, header, join_blocks, lit

__all__ = ["GapsResult", "FillsResult", "MCARTest", "build"]

FILL_CAUTIONS = [
    "Every way of filling gaps shifts the results: report the choice you made and how many values were filled.",
    "Mean (and median, mode) filling puts one value in every gap: it shrinks the spread and weakens the "
    "column's links with other variables (see std_change_pct and the r change columns).",
    "Regression filling makes the links look stronger than they are (filled values sit on the line); "
    "hot-deck keeps the spread but adds noise. None of them recovers the missing information; "
    "for inference consider multiple imputation.",
]


class MCARTest:
    """Little's MCAR test: attributes (and keys) statistic, dof, p_value, patterns, applicable, reason, …"""

    def __init__(self, values: dict[str, Any]) -> None:
        self._values = dict(values)
        for k, v in self._values.items():
            setattr(self, k, v)

    def __getitem__(self, key: str) -> Any:
        return self._values[key]

    def keys(self) -> list[str]:
        return list(self._values)

    def summary(self) -> str:
        v = self._values
        if not v["applicable"]:
            return f"Little's MCAR test: {v['reason']}."
        p = v["p_value"]
        ptext = "p < 0.001" if p < 0.001 else f"p = {p:.3f}"
        verdict = (
            "the gaps in the numeric columns are unlikely to be completely at random"
            if p < 0.05
            else "no evidence against completely-at-random gaps in the numeric columns (which does not prove it)"
        )
        extra = f" ({v['reason']})" if v["reason"] else ""
        rows = f"a seeded random sample of {v['rows']:,} rows" if v["sampled"] else f"{v['rows']:,} rows"
        return (
            f"Little's MCAR test on {len(v['columns'])} numeric columns, {rows}, "
            f"{v['patterns']} patterns: d² = {v['statistic']:.2f} on {v['dof']} degrees of freedom, "
            f"{ptext}: {verdict}{extra}."
        )

    def to_frame(self) -> pd.DataFrame:
        v = self._values
        rows = {
            "statistic": v["statistic"],
            "dof": v["dof"],
            "p_value": v["p_value"],
            "patterns": v["patterns"],
            "rows": v["rows"],
            "complete_rows": v["complete_rows"],
            "columns": len(v["columns"]),
            "EM iterations": v["iterations"],
            "result": "applicable" if v["applicable"] else v["reason"],
        }
        return pd.DataFrame({"value": list(rows.values())}, index=pd.Index(list(rows), name="Little's MCAR test"), dtype=object)

    def __repr__(self) -> str:
        return f"<MCARTest: {self.summary()}>"


def _label(ctx: Context, j: int) -> str:
    """Display name of column j (position added when labels repeat)."""
    name = str(ctx.labels[j])
    if not ctx.unique_labels and [str(c) for c in ctx.labels].count(name) > 1:
        name = f"{name} [{j}]"
    return name


class GapsResult(SectionResult):
    name = "gaps"
    title = "Gaps"

    def __init__(
        self,
        ctx: Context,
        table: pd.DataFrame,
        *,
        patterns: pd.DataFrame,
        tests: pd.DataFrame,
        miss: np.ndarray,
        mcar: MCARTest,
        nullity_corr: pd.DataFrame,
        segment: int | None,
        notes: list[str],
        cautions: list[str],
        flags: list[str],
        pattern_matrix: np.ndarray,
        pattern_counts: np.ndarray,
        disguised_found: dict[int, list[tuple[Any, int]]],
    ) -> None:
        super().__init__(ctx, table, notes=notes, cautions=cautions, flags=flags)
        #: top missingness patterns (top 20 + "other"), the ``gaps_patterns`` table of the code
        self.patterns = patterns
        #: every MAR test run (column positions in ``x``/``y``), BH-adjusted across the frame
        self.tests = tests
        #: Little's MCAR test (``.statistic``, ``.dof``, ``.p_value``, ``.patterns``, ``.reason``)
        self.mcar = mcar
        #: correlation of the columns' 0/1 missing indicators (columns with some gaps)
        self.nullity_corr = nullity_corr
        self._miss = miss
        self._segment = segment
        self._pattern_matrix = pattern_matrix
        self._pattern_counts = pattern_counts
        self._disguised = disguised_found
        self._fills: dict[tuple[Any, Any], FillsResult] = {}

    # ------------------------------------------------------------------ tables
    @property
    def mar_tests(self) -> pd.DataFrame:
        """The MAR tests with column labels, strongest first."""
        t = self.tests
        if t.empty:
            return pd.DataFrame(columns=["gaps in", "compared with", "test", "statistic", "p_value", "p_adj", "effect"])
        out = pd.DataFrame(
            {
                "gaps in": [_label(self.ctx, int(j)) for j in t["x"]],
                "compared with": [_label(self.ctx, int(j)) for j in t["y"]],
                "test": t["test"].to_numpy(),
                "statistic": t["statistic"].to_numpy(),
                "p_value": t["p_value"].to_numpy(),
                "p_adj": t["p_adj"].to_numpy(),
                "effect": t["effect"].to_numpy(),
            }
        )
        return out.sort_values(["p_adj", "effect"], ascending=[True, False], kind="mergesort").reset_index(drop=True)

    def tables(self) -> dict[str, pd.DataFrame]:
        out: dict[str, pd.DataFrame] = {self.title: self.table}
        if self._miss.size and self._miss.any():
            out["Missingness patterns (top 20)"] = self.patterns
        out["Little's MCAR test"] = self.mcar.to_frame()
        if not self.tests.empty:
            out["Strongest MAR tests (BH-adjusted)"] = self.mar_tests.head(15)
        if 1 < len(self.nullity_corr) <= 30:
            out["Nullity correlation (missing indicators)"] = self.nullity_corr.round(3)
        return out

    # ------------------------------------------------------------------ charts
    def _share_data(self) -> pd.DataFrame:
        t = self.table
        n = self.ctx.n_rows
        rows = []
        for j in range(len(t)):
            m, d = int(t["missing"].iloc[j]), int(t["disguised"].iloc[j])
            if m or d:
                for kind, c in (("missing", m), ("disguised", d)):
                    if c:
                        rows.append({"column": _label(self.ctx, j), "kind": kind, "pct": 100.0 * c / n, "rows": c, "pos": j})
        data = pd.DataFrame(rows, columns=["column", "kind", "pct", "rows", "pos"])
        if data.empty:
            return data
        top = data.groupby("pos")["pct"].sum().sort_values(ascending=False).head(40).index
        return data[data["pos"].isin(top)].drop(columns="pos")

    def _segment_data(self) -> pd.DataFrame | None:
        j = self._segment
        if j is None:
            return None
        gap_cols = [i for i in range(self._miss.shape[1]) if 0 < self._miss[:, i].sum() < self.ctx.n_rows and i != j][:15]
        if not gap_cols:
            return None
        codes, levels = pd.factorize(self.ctx.series(j), sort=True)
        ok = codes >= 0
        size = np.bincount(codes[ok], minlength=len(levels))
        keep = np.argsort(-size, kind="mergesort")[:15]
        rows = []
        for i in gap_cols:
            hit = np.bincount(codes[ok & self._miss[:, i]], minlength=len(levels))
            for lv in keep:
                if size[lv]:
                    rows.append(
                        {"segment": str(levels[lv]), "column": _label(self.ctx, i), "pct": 100.0 * hit[lv] / size[lv], "rows": int(size[lv])}
                    )
        return pd.DataFrame(rows)

    def chart(self) -> Any:
        import altair as alt

        share = self._share_data()
        if share.empty:
            return None
        charts = [
            alt.Chart(share, title="Missing share per column")
            .mark_bar()
            .encode(
                y=alt.Y("column:N", sort="-x", title=None),
                x=alt.X("sum(pct):Q", title="% of rows"),
                color=alt.Color("kind:N", scale=alt.Scale(domain=["missing", "disguised"], range=["#4c6a92", "#c08a3e"])),
                tooltip=["column", "kind", alt.Tooltip("pct:Q", format=".2f"), "rows"],
            )
            .properties(width=320, height=max(40, 18 * share["column"].nunique()))
        ]
        pm, pc = self._pattern_matrix, self._pattern_counts
        gap_cols = [j for j in range(pm.shape[1]) if pm[:, j].any()][:30] if pm.size else []
        if gap_cols and pm.shape[0] > 1:
            top = min(20, pm.shape[0])
            cells = pd.DataFrame(
                [
                    {"pattern": g + 1, "column": _label(self.ctx, j), "state": "missing" if pm[g, j] else "present"}
                    for g in range(top)
                    for j in gap_cols
                ]
            )
            counts = pd.DataFrame({"pattern": np.arange(1, top + 1), "rows": pc[:top]})
            matrix = (
                alt.Chart(cells, title="Top missingness patterns")
                .mark_rect(stroke="white")
                .encode(
                    x=alt.X("column:N", title=None, sort=None),
                    y=alt.Y("pattern:O", title="pattern"),
                    color=alt.Color("state:N", scale=alt.Scale(domain=["missing", "present"], range=["#4c6a92", "#e6e9ee"])),
                    tooltip=["pattern", "column", "state"],
                )
                .properties(width=max(60, 22 * len(gap_cols)), height=16 * top)
            )
            bars = (
                alt.Chart(counts)
                .mark_bar(color="#7d8899")
                .encode(y=alt.Y("pattern:O", title=None, axis=None), x=alt.X("rows:Q", title="rows"), tooltip=["pattern", "rows"])
                .properties(width=140, height=16 * top)
            )
            charts.append(alt.hconcat(matrix, bars))
        seg = self._segment_data()
        if seg is not None and not seg.empty:
            charts.append(
                alt.Chart(seg, title=f"Missing share by {_label(self.ctx, self._segment)}")
                .mark_rect()
                .encode(
                    x=alt.X("segment:N", title=None),
                    y=alt.Y("column:N", title=None),
                    color=alt.Color("pct:Q", title="% missing", scale=alt.Scale(scheme="blues")),
                    tooltip=["segment", "column", alt.Tooltip("pct:Q", format=".1f"), "rows"],
                )
                .properties(width=max(80, 40 * seg["segment"].nunique()), height=max(30, 20 * seg["column"].nunique()))
            )
        return alt.vconcat(*charts) if len(charts) > 1 else charts[0]

    # -------------------------------------------------------------------- code
    def code(self, frame_name: str = "df") -> str:
        ctx = self.ctx
        if ctx.n_cols <= 200:  # one role per line, with the column it belongs to
            role_list = "[\n" + "".join(f"    {lit(r)},  # {lit(label)}\n" for r, label in zip(ctx.roles, ctx.labels, strict=True)) + "]"
        else:
            role_list = "[" + ", ".join(lit(r) for r in ctx.roles) + "]"
        body = f"""\
# Roles by column position, as inferred in the Roles tab (its code rebuilds them).
column_roles = {role_list}

# The Gaps table (one row per column), the top missingness patterns and every MAR test.
gaps, gaps_patterns, gaps_tests = gaps_tables({frame_name}, column_roles)

# Little's MCAR test on the numeric columns (ML mean and covariance by EM).
numeric, categorical = column_kinds({frame_name}, column_roles)
x = np.column_stack([as_float({frame_name}.iloc[:, j]) for j in numeric]) if numeric else np.empty((len({frame_name}), 0))
gaps_mcar = little_mcar(x, names=[{frame_name}.columns[j] for j in numeric], seed={ctx.options.seed!r})

# Which columns go missing together: correlation of the 0/1 missing indicators.
gaps_nullity = nullity_correlation({frame_name}.isna().to_numpy(dtype=bool), list({frame_name}.columns))
"""
        # Degenerate columns (constant, all missing) give undefined values, shown blank: keep
        # numpy quiet about them, as the tab itself does, without touching global settings.
        body = "with np.errstate(all=\"ignore\"):\n" + "\n".join(
            ("    " + line) if line else line for line in body.splitlines()
        ) + "\n"
        convert = self.code_convert(frame_name)
        convert = "\n".join(("# " + line) if line and not line.startswith("#") else line for line in convert.splitlines())
        return join_blocks(
            header(
                "Gaps: missing values, disguised gaps, patterns and their mechanism",
                ctx,
                frame_name,
                extra=[
                    "Disguised missing values are reported, not converted (see the last block).",
                    "P-values of the MAR tests are Benjamini-Hochberg adjusted across the whole frame.",
                ],
            ),
            "# ---- the rules, as plain functions ----",
            function_source(G.as_float),
            function_source(G.column_kinds),
            function_source(G.disguised_missing),
            function_source(G.missing_patterns),
            function_source(G.pattern_table),
            function_source(G.mar_tests),
            function_source(G.mar_hint),
            function_source(G.gaps_tables),
            function_source(G.em_normal),
            function_source(G.little_mcar),
            function_source(G.nullity_correlation),
            "# ---- the results ----",
            body,
            convert,
        )

    def code_convert(self, frame_name: str = "df") -> str:
        """Plain code turning the disguised missing values found here into NA (in a copy)."""
        ctx = self.ctx
        out = f"{frame_name}_clean"
        if not self._disguised:
            return f"# No disguised missing values were found: nothing to convert.\n{out} = {frame_name}.copy()\n"
        lines = [
            "# Turn the disguised missing values found by the Gaps tab into real gaps (NA), in a copy.",
            "# Review each one first: a sentinel can also be a genuine value.",
            f"{out} = {frame_name}.copy()",
        ]
        for j, found in sorted(self._disguised.items()):
            values = "[" + ", ".join(lit(v) for v, _ in found) + "]"
            src = col_expr(ctx, j, out)
            if ctx.unique_labels:
                lines.append(f"{src} = {src}.mask({src}.isin({values}))")
            else:
                lines.append(f"{out}.isetitem({j}, {src}.mask({src}.isin({values})))")
        return "\n".join(lines) + "\n"

    # ------------------------------------------------------------ fill compare
    def compare_fills(self, column: Hashable, by: Hashable | None = None) -> FillsResult:
        """What each way of filling the gaps of one numeric column does to its results."""
        key = (column, by)
        if key not in self._fills:
            self._fills[key] = build_fills(self, column, by)
        return self._fills[key]

    def fill_candidates(self) -> list[int]:
        """Positions of the numeric columns with some (not all) values missing."""
        numeric, _ = G.column_kinds(self.ctx.frame, self.ctx.roles)
        n = self.ctx.n_rows
        return [j for j in numeric if 0 < self._miss[:, j].sum() < n]

    def panel(self) -> Any:
        import ipywidgets as W

        from nbeda._html import CSS, code_html

        body = W.HTML(f"<style>{CSS}</style><div class='nbeda'>{self.body_html()}</div>")
        cands = self.fill_candidates()
        if not cands:
            return body
        _, cats = G.column_kinds(self.ctx.frame, self.ctx.roles)
        col = W.Dropdown(options=[(_label(self.ctx, j), j) for j in cands], description="fill column")
        by = W.Dropdown(options=[("(automatic)", None)] + [(_label(self.ctx, j), j) for j in cats], description="segment by")
        strategy = W.Dropdown(options=G.FILL_STRATEGIES, value="median", description="code for")
        out = W.HTML()

        def refresh(*_: Any) -> None:
            try:
                label = self.ctx.labels[col.value]
                seg = None if by.value is None else self.ctx.labels[by.value]
                res = self.compare_fills(label, by=seg)
                out.value = (
                    f"<style>{CSS}</style><div class='nbeda'>{res.body_html(with_chart=False)}"
                    f"<h4>Code: apply the {strategy.value} fill</h4>{code_html(res.code(strategy=strategy.value))}</div>"
                )
            except Exception as exc:  # the panel never hides the tab
                from nbeda._html import esc

                out.value = f"<div class='nb-flag'>{esc(type(exc).__name__)}: {esc(exc)}</div>"

        for w in (col, by, strategy):
            w.observe(refresh, names="value")
        refresh()
        return W.VBox([body, W.HTML("<h4>What each fill would change</h4>"), W.HBox([col, by, strategy]), out])


class FillsResult(SectionResult):
    """One numeric column: what each filling strategy does to its mean, spread, links and segments."""

    name = "fills"
    title = "Filling gaps"

    def __init__(
        self,
        ctx: Context,
        table: pd.DataFrame,
        *,
        position: int,
        by: int | None,
        predictor: int | None,
        linked: list[int],
        segment_means: pd.DataFrame | None,
        notes: list[str],
        cautions: list[str],
    ) -> None:
        super().__init__(ctx, table, notes=notes, cautions=cautions)
        self.position = position
        self.by = by
        self.predictor = predictor
        self.linked = linked
        #: mean of the column per segment under each strategy (None without a segment column)
        self.segment_means = segment_means
        self.title = f"Filling gaps in {_label(ctx, position)}"  # type: ignore[misc]

    def tables(self) -> dict[str, pd.DataFrame]:
        out = {self.title: self.table}
        if self.segment_means is not None:
            out[f"Mean of {_label(self.ctx, self.position)} by {_label(self.ctx, self.by)}"] = self.segment_means
        return out

    def chart(self) -> Any:
        import altair as alt

        t = self.table
        data = pd.DataFrame({"strategy": list(t.index), "mean": t["mean"].to_numpy(), "std": t["std"].to_numpy()}).dropna()
        if data.empty:
            return None
        return (
            alt.Chart(data, title=f"Spread of {_label(self.ctx, self.position)} after each fill")
            .mark_bar(color="#4c6a92")
            .encode(y=alt.Y("strategy:N", sort=None, title=None), x=alt.X("std:Q", title="standard deviation"), tooltip=["strategy", alt.Tooltip("mean:Q", format=".4g"), alt.Tooltip("std:Q", format=".4g")])
            .properties(width=320, height=22 * len(data))
        )

    def _series_code(self, j: int, frame_name: str) -> str:
        e = col_expr(self.ctx, j, frame_name)
        if pd.api.types.is_timedelta64_dtype(self.ctx.series(j).dtype):
            return f"{e}.dt.total_seconds()"
        return f"{e}.astype('float64')"

    def code(self, frame_name: str = "df", strategy: str | None = None) -> str:
        """Code rebuilding the comparison (``fills = ...``), or, with ``strategy``, applying that fill."""
        if strategy is not None:
            return self._apply_code(frame_name, strategy)
        ctx = self.ctx
        j = self.position
        lines = [
            f"# The column to fill, as float64 with a plain row number index.",
            f"y = pd.Series(as_float({frame_name}.iloc[:, {j}]))  # {ctx.labels[j]!r}",
            f"group = {frame_name}.iloc[:, {self.by}].reset_index(drop=True)  # {ctx.labels[self.by]!r}" if self.by is not None else "group = None",
            f"x = pd.Series(as_float({frame_name}.iloc[:, {self.predictor}]))  # {ctx.labels[self.predictor]!r}" if self.predictor is not None else "x = None",
            "linked = [",
            *[f"    ({_label(ctx, i)!r}, pd.Series(as_float({frame_name}.iloc[:, {i}])))," for i in self.linked],
            "]",
            f"fills, fills_segments = fill_comparison(y, group=group, x=x, linked=linked, seed={ctx.options.seed!r})",
        ]
        return join_blocks(
            header(f"What each way of filling the gaps in {_label(ctx, j)} changes", ctx, frame_name, extra=FILL_CAUTIONS[:1]),
            function_source(G.as_float),
            function_source(G.fill_column),
            function_source(G.fill_comparison),
            "\n".join(lines) + "\n",
        )

    def _apply_code(self, frame_name: str, strategy: str) -> str:
        if strategy not in G.FILL_STRATEGIES:
            raise ValueError(f"unknown strategy {strategy!r}; choose one of {', '.join(G.FILL_STRATEGIES)}")
        ctx, j = self.ctx, self.position
        out = f"{frame_name}_filled"
        target = col_expr(ctx, j, out)
        y = self._series_code(j, out)

        def assign(expr: str) -> str:
            if ctx.unique_labels:
                return f"{target} = {expr}"
            return f"{out}.isetitem({j}, {expr})"

        head = [
            f"# Fill the gaps in {_label(ctx, j)!r} with the {strategy!r} strategy, in a copy of the frame.",
            "# The filled column becomes float64. Report this choice: every fill shifts the results.",
            "import numpy as np",
            "import pandas as pd",
        ]
        if strategy == "drop_rows":
            return "\n".join(head + [f"{out} = {frame_name}[{col_expr(ctx, j, frame_name)}.notna()].copy()"]) + "\n"
        body = [f"{out} = {frame_name}.copy()", f"y = {y}"]
        if strategy in ("mean", "median"):
            body.append(assign(f"y.fillna(y.{strategy}())"))
        elif strategy == "mode":
            body.append("# the most frequent value (the smallest one when several tie)")
            body.append(assign("y.fillna(y.mode().min())"))
        elif strategy == "group_median":
            if self.by is None:
                raise ValueError("group_median needs a segment column: pass by=...")
            body.append(f"segment = {col_expr(ctx, self.by, out)}")
            body.append("# the median of the row's segment; the overall median where the segment has none")
            body.append(assign("y.fillna(y.groupby(segment, observed=True, dropna=True).transform('median')).fillna(y.median())"))
        elif strategy == "regression":
            if self.predictor is None:
                raise ValueError("regression filling needs a complete numeric column linked to this one; none was found")
            body += [
                f"x = {self._series_code(self.predictor, out)}",
                "ok = y.notna() & x.notna()",
                "xm, ym = x[ok].mean(), y[ok].mean()",
                "slope = ((x[ok] - xm) * (y[ok] - ym)).sum() / ((x[ok] - xm) ** 2).sum()",
                "# the least-squares line through the observed rows",
                assign("y.fillna(ym + slope * (x - xm))"),
            ]
        elif strategy == "hot_deck":
            body += [
                "# observed values drawn at random with replacement (seeded: the same draw every run)",
                f"rng = np.random.default_rng({ctx.options.seed!r})",
                "gone = y.isna().to_numpy()",
                "values = y.to_numpy(copy=True)",
                "values[gone] = rng.choice(y.dropna().to_numpy(), size=int(gone.sum()), replace=True)",
                assign("pd.Series(values, index=y.index)"),
            ]
        return "\n".join(head + body) + "\n"


def build_fills(gaps: GapsResult, column: Hashable, by: Hashable | None) -> FillsResult:
    ctx = gaps.ctx
    pos = ctx.positions_of(column)
    if not pos:
        raise KeyError(f"no column named {column!r}")
    j = pos[0]
    numeric, cats = G.column_kinds(ctx.frame, ctx.roles)
    if j not in numeric:
        raise ValueError(f"compare_fills works on numeric columns; {column!r} has role {ctx.roles[j]!r}")
    n_miss = int(gaps._miss[:, j].sum())
    if n_miss == 0:
        raise ValueError(f"{column!r} has no gaps: there is nothing to fill")
    if n_miss == ctx.n_rows:
        raise ValueError(f"every value of {column!r} is missing: there is nothing to fill from")
    notes: list[str] = []
    # segment column: the caller's, the report's --by, or the categorical most linked to the gaps
    if by is not None:
        b = ctx.position(by)
    elif ctx.options.by is not None:
        b = ctx.position(ctx.options.by)
    else:
        t = gaps.tests
        mine = t[(t["x"] == j) & (t["test"] == "chi-squared")].sort_values(["p_adj", "effect"], ascending=[True, False], kind="mergesort")
        if len(mine):
            b = int(mine["y"].iloc[0])
            notes.append(f"Segments: {_label(ctx, b)} (the categorical column most associated with the gaps).")
        else:
            few = [c for c in cats if 2 <= ctx.series(c).nunique() <= 20 and c != j]
            b = few[0] if few else None
            if b is not None:
                notes.append(f"Segments: {_label(ctx, b)} (first categorical column with 2–20 levels).")
    y = pd.Series(G.as_float(ctx.series(j)))
    ya = y.to_numpy()
    corr, finite = {}, {}
    with np.errstate(all="ignore"):
        for i in numeric:
            if i == j:
                continue
            va = G.as_float(ctx.series(i))
            finite[i] = bool(np.isfinite(va).all())
            ok = np.isfinite(ya) & np.isfinite(va)
            if ok.sum() >= 3 and np.ptp(ya[ok]) > 0 and np.ptp(va[ok]) > 0:
                r = float(np.corrcoef(ya[ok], va[ok])[0, 1])
                if np.isfinite(r):
                    corr[i] = r
    ranked = sorted(corr, key=lambda i: -abs(corr[i]))
    linked = ranked[:2]
    complete = [i for i in ranked if finite[i]]
    predictor = complete[0] if complete else None
    if predictor is None:
        notes.append("Regression filling not shown: no complete numeric column to predict from.")
    else:
        notes.append(f"Regression filling predicts from {_label(ctx, predictor)} (r = {corr[predictor]:.3f} on observed rows).")
    if b is None:
        notes.append("Group-median filling not shown: no segment column (pass by=...).")
    group = ctx.series(b).reset_index(drop=True) if b is not None else None
    x = pd.Series(G.as_float(ctx.series(predictor))) if predictor is not None else None
    lk = [(_label(ctx, i), pd.Series(G.as_float(ctx.series(i)))) for i in linked]
    with np.errstate(all="ignore"):
        table, segments = G.fill_comparison(y, group=group, x=x, linked=lk, seed=ctx.options.seed)
    notes.append(
        f"{n_miss:,} of {ctx.n_rows:,} values are missing. drop_rows is the baseline (observed values only); "
        "'r change' and segment shifts are measured against it."
    )
    if y.dropna().duplicated().sum() == 0:
        notes.append("No value repeats, so the mode is just the smallest value: mode filling is shown for completeness only.")
    return FillsResult(
        ctx, table, position=j, by=b, predictor=predictor, linked=linked, segment_means=segments, notes=notes, cautions=list(FILL_CAUTIONS)
    )


def _strongest_segment(ctx: Context, tests: pd.DataFrame) -> int | None:
    if ctx.options.by is not None:
        return ctx.position(ctx.options.by)
    chi = tests[(tests["test"] == "chi-squared") & (tests["p_adj"] < 0.05)]
    if chi.empty:
        return None
    return int(chi.sort_values(["effect", "p_adj"], ascending=[False, True], kind="mergesort")["y"].iloc[0])


def build(ctx: Context, **_: Any) -> GapsResult:
    frame = ctx.frame
    n, k = frame.shape
    roles = ctx.roles
    with np.errstate(all="ignore"):
        table, patterns, tests = G.gaps_tables(frame, roles)
        miss = frame.isna().to_numpy(dtype=bool) if k else np.zeros((n, 0), dtype=bool)
        pmat, pcounts, _ = G.missing_patterns(miss)
        numeric, _cats = G.column_kinds(frame, roles)
        x = np.column_stack([G.as_float(frame.iloc[:, j]) for j in numeric]) if numeric else np.empty((n, 0))
        mcar = MCARTest(G.little_mcar(x, names=[ctx.labels[j] for j in numeric], seed=ctx.options.seed))
        nullity = G.nullity_correlation(miss, ctx.labels)
        disguised = {}
        for j in np.flatnonzero(table["disguised"].to_numpy() > 0):
            disguised[int(j)] = G.disguised_missing(frame.iloc[:, j])[1]
    total = int(miss.sum())
    complete = int((~miss.any(axis=1)).sum()) if k else n
    flags: list[str] = []
    notes: list[str] = []
    n_disg = int(table["disguised"].sum()) if k else 0
    if n == 0 or k == 0:
        notes.append("The frame has no rows or no columns: there are no gaps to report.")
    elif total == 0:
        notes.append(f"No gaps: all {n:,} rows are complete (no missing value in any of the {k:,} columns).")
    else:
        notes.append(
            f"{complete:,} complete rows ({100 * complete / n:.1f}%); {n - complete:,} rows with at least one gap; "
            f"{total:,} missing cells ({100 * total / (n * k):.2f}% of all cells); {pcounts.size:,} distinct "
            "missingness patterns" + (" (top 20 shown, the rest pooled as 'other')." if pcounts.size > 20 else ".")
        )
    t_missing, t_disg = table["missing"].to_numpy(), table["disguised"].to_numpy()
    t_values, t_with, t_hint = (table[c].to_numpy(dtype=object) for c in ("disguised_values", "mar_with", "mar_hint"))
    for j in np.flatnonzero((t_missing == n) | (t_disg > 0) | (t_with != "")) if n else []:
        label = _label(ctx, j)
        if t_missing[j] == n:
            flags.append(f"{label}: every value is missing.")
        if t_disg[j]:
            flags.append(
                f"{label}: {t_disg[j]:,} disguised missing value(s): {t_values[j]} "
                "— reported, not converted (see .code_convert())."
            )
        if t_with[j] and not str(t_hint[j]).startswith("weak"):
            flags.append(str(t_hint[j]) + ".")
    if len(nullity) > 1:
        r = nullity.to_numpy()
        pairs = [
            f"{nullity.index[a]} & {nullity.index[b]} (r = {r[a, b]:.2f})"
            for a in range(len(r))
            for b in range(a + 1, len(r))
            if r[a, b] >= 0.9
        ]
        if pairs:
            notes.append(
                f"Columns that go missing together (nullity correlation ≥ 0.9): {', '.join(pairs[:10])}"
                + (f" and {len(pairs) - 10} more pairs." if len(pairs) > 10 else ".")
            )
    if n_disg and total == 0 and n and k:
        notes.append(f"…but {n_disg:,} disguised missing value(s) stand in for gaps (see the flags).")
    if ctx.options.sample and ctx.options.sample < n:
        notes.append("Gap counts and MAR tests use every row (the sample option does not apply here).")
    notes.append(mcar.summary())
    if numeric and mcar.applicable:
        notes.append(
            "Little's test sees only the numeric columns (as they are, disguised values included): gaps "
            "driven by a categorical column can pass it — read it together with the MAR hints."
        )
    if not tests.empty:
        notes.append(
            f"MAR hints: {len(tests):,} tests of 'gaps in X' against the other columns (Mann–Whitney U for "
            "numeric, χ² without continuity correction for categorical), Benjamini–Hochberg adjusted together."
        )
    if numeric and np.isinf(x).any():
        notes.append("±inf values are not counted as gaps (see Extremes); Little's test sets them aside.")
    cautions = [
        "A non-significant MCAR test does not show that gaps are random: gaps that depend on the missing "
        "values themselves (missing not at random) cannot be detected from the observed data.",
        "MAR hints are associations, not causes; with many tests some are found by chance (hence the "
        "Benjamini–Hochberg adjustment), and with many rows even negligible effects are 'significant' "
        "(hints below a small effect size say 'weak association').",
        "χ² tests are run only where expected counts are adequate (all ≥ 1, at most 20% below 5); others are skipped.",
        "Filling gaps can bias results: compare strategies with .compare_fills(column) and report the choice.",
    ]
    return GapsResult(
        ctx,
        table,
        patterns=patterns,
        tests=tests,
        miss=miss,
        mcar=mcar,
        nullity_corr=nullity,
        segment=_strongest_segment(ctx, tests),
        notes=notes,
        cautions=cautions,
        flags=flags,
        pattern_matrix=pmat,
        pattern_counts=pcounts,
        disguised_found=disguised,
    )
