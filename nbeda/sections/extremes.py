"""Extremes section: extreme values per column by a stated rule, a robust joint distance,
the flagged rows with their full records, charts, and code (table + actions on a copy)."""

from __future__ import annotations

import math
from typing import Any

import numpy as np
import pandas as pd

from nbeda._context import Context
from nbeda._html import code_html, table_html
from nbeda.sections._base import SectionResult
from nbeda.stats.extremes import action_code, compute_extremes, extremes_code

__all__ = ["ExtremesResult", "build", "JOINT_RULE"]

#: The ``rule`` name of multivariate flags in ``.rows``.
JOINT_RULE = "robust_distance_ogk"
ROWS_COLUMNS = ["row", "column", "value", "rule", "score", "fence", "side"]
#: At most this many columns are drawn in the box chart, and this many flagged points per column.
CHART_COLUMNS = 12
CHART_POINTS = 100


class ExtremesResult(SectionResult):
    name = "extremes"
    title = "Extremes"

    def __init__(self, ctx: Context, parts: dict[str, Any], **kw: Any) -> None:
        super().__init__(ctx, parts["table"], **kw)
        self.parts = parts
        self.rows = _rows_table(ctx, parts)
        #: one row per row flagged by the robust distance, most distant first
        self.multivariate: pd.DataFrame = parts["joint_table"]

    # ------------------------------------------------------------------ tables
    def flagged_positions(self, joint: bool = True) -> np.ndarray:
        """Row positions flagged by any column's rule (incl. ±inf) or, with ``joint``, the robust distance."""
        scan = self.parts["scan"]
        n = self.ctx.n_rows
        any_cell = np.zeros(n, dtype=bool)
        if len(self.parts["positions"]):
            any_cell = scan["flag_low"].any(axis=1) | scan["flag_high"].any(axis=1) | scan["flag_inf"].any(axis=1)
        if joint:
            any_cell = any_cell | self.parts["joint"]["flagged"]
        return np.flatnonzero(any_cell)

    def records(self, column: Any = None, joint: bool = True, limit: int | None = None) -> pd.DataFrame:
        """The flagged rows with their full records (a copy), led by a ``flagged by`` column.

        ``column``: only rows flagged in that column (its label), or ``"joint"`` for the robust
        distance; default: every flagged row.
        """
        reasons = self._reasons()
        if column is None:
            pos = self.flagged_positions(joint=joint)
        elif isinstance(column, str) and column == "joint" and "joint" not in self.ctx.labels:
            pos = np.asarray(self.parts["joint"]["rows"], dtype=np.int64)
            pos = np.sort(pos)
        else:
            wanted = set(self.ctx.positions_of(column))
            if not wanted:
                raise KeyError(f"no column named {column!r}")
            numeric = self.parts["positions"]
            cols = [k for k, p in enumerate(numeric) if p in wanted]
            scan = self.parts["scan"]
            mask = np.zeros(self.ctx.n_rows, dtype=bool)
            for k in cols:
                mask |= scan["flag_low"][:, k] | scan["flag_high"][:, k] | scan["flag_inf"][:, k]
            pos = np.flatnonzero(mask)
        if limit is not None:
            pos = pos[:limit]
        out = self.ctx.frame.iloc[pos].copy()
        if isinstance(out.columns, pd.MultiIndex):
            out.columns = [" / ".join(map(str, c)) for c in out.columns]
        name = "flagged by"
        taken = {str(c) for c in out.columns}
        while name in taken:
            name = "_" + name
        out.insert(0, name, [reasons.get(int(p), "") for p in pos], allow_duplicates=True)
        return out

    def _reasons(self) -> dict[int, str]:
        """Row position → short text naming every rule that flagged it."""
        cached = getattr(self, "_reason_cache", None)
        if cached is not None:
            return cached
        scan = self.parts["scan"]
        labels = [self.ctx.labels[i] for i in self.parts["positions"]]
        rules = scan["rule"]
        text: dict[int, list[str]] = {}
        for r, c, sc in zip(scan["cell_row"].tolist(), scan["cell_col"].tolist(), scan["cell_score"].tolist()):
            what = "±inf" if math.isinf(sc) else f"{rules[c]} {sc:+.2f}"
            text.setdefault(r, []).append(f"{labels[c]}: {what}")
        joint = self.parts["joint"]
        d2 = joint["d2"]
        for r in joint["rows"].tolist():
            text.setdefault(r, []).append(f"robust distance² {d2[r]:.1f} > {joint['cutoff']:.1f}")
        self._reason_cache = {k: "; ".join(v) for k, v in text.items()}
        return self._reason_cache

    def tables(self) -> dict[str, pd.DataFrame]:
        out = {self.title: self.table}
        if len(self.rows):
            out["Flagged values (one row per row × column × rule)"] = self.rows
        if len(self.multivariate):
            out["Rows far from the bulk jointly (robust distance)"] = self.multivariate
        if len(self.rows):
            out["Flagged rows, full records"] = self.records(limit=500)
        return out

    # ------------------------------------------------------------------ code
    def code(self, frame_name: str = "df") -> str:
        return extremes_code(self.ctx, self.parts, frame_name)

    def code_action(self, kind: str = "filter", frame_name: str = "df", joint: bool = True) -> str:
        """Code that filters the flagged rows, caps values at the fences, or adds a flag column.

        The code works on a copy (``<frame>_filtered``, ``<frame>_capped``, ``<frame>_flagged``)
        and is never run by nbeda.  ``joint``: also use the robust-distance flags (filter, flag).
        """
        return action_code(self.ctx, self.parts, kind, frame_name, joint=joint)

    # ------------------------------------------------------------------ charts
    def chart(self) -> Any:
        import altair as alt

        parts = []
        box = self._box_chart(alt)
        if box is not None:
            parts.append(box)
        dist = self._distance_chart(alt)
        if dist is not None:
            parts.append(dist)
        if not parts:
            return None
        return alt.vconcat(*parts).resolve_scale(x="independent", y="independent")

    def _chart_columns(self) -> list[int]:
        t = self.table
        usable = np.flatnonzero(np.isfinite(t["lower"].to_numpy()) & np.isfinite(t["upper"].to_numpy()))
        flagged = (t["n_low"] + t["n_high"]).to_numpy()
        order = sorted(usable.tolist(), key=lambda k: (-flagged[k], k))
        return order[:CHART_COLUMNS]

    def _box_chart(self, alt: Any) -> Any:
        scan = self.parts["scan"]
        ks = self._chart_columns()
        if not ks:
            return None
        values = self.ctx.float_frame([self.parts["positions"][k] for k in ks])
        charts = []
        for m, k in enumerate(ks):
            label = self.ctx.labels[self.parts["positions"][k]]
            lo, hi = float(scan["lower"][k]), float(scan["upper"][k])
            v = values[:, m]
            v = v[np.isfinite(v)]
            inside = v[(v >= lo) & (v <= hi)]
            log = scan["rule"][k] == "tukey_log"
            box = pd.DataFrame(
                {
                    "q1": [float(scan["q1"][k])], "median": [float(scan["median"][k])], "q3": [float(scan["q3"][k])],
                    "whisker_low": [float(inside.min()) if inside.size else np.nan],
                    "whisker_high": [float(inside.max()) if inside.size else np.nan],
                    "lower fence": [lo], "upper fence": [hi],
                }
            )
            fences = pd.DataFrame({"fence": [lo, hi], "which": ["lower fence", "upper fence"]})
            fences = fences[np.isfinite(fences["fence"]) & ((fences["fence"] > 0) | (not log))]
            sel = scan["cell_col"] == k
            pts = pd.DataFrame(
                {
                    "value": scan_values(self.ctx, self.parts, k, scan["cell_row"][sel]),
                    "score": scan["cell_score"][sel],
                    "row": [str(r) for r in self.ctx.frame.index[scan["cell_row"][sel]]],
                }
            )
            pts = pts[np.isfinite(pts["value"])]
            if log:
                pts = pts[pts["value"] > 0]
            pts = pts.reindex(pts["score"].abs().sort_values(ascending=False).index).head(CHART_POINTS)
            pts = pts.assign(y=0.0)
            scale = alt.Scale(type="log") if log else alt.Scale(zero=False)
            x_title = f"{label} — {scan['rule'][k]}" + (" (log axis)" if log else "")
            axis = alt.Axis(labelOverlap=True, tickCount=6)
            if log and v.size and v.max() > 0:
                axis = alt.Axis(labelOverlap=True, values=_decades(min(v[v > 0].min(), lo), max(v.max(), hi)))
            base = alt.Chart(box)
            whisker = base.mark_rule(color="#555").encode(
                x=alt.X("whisker_low:Q", scale=scale, title=x_title, axis=axis), x2="whisker_high:Q"
            )
            iqr_bar = base.mark_bar(size=14, color="#b9c7d6").encode(x="q1:Q", x2="q3:Q")
            mid = base.mark_tick(color="#1f3b57", size=14, thickness=2).encode(x="median:Q")
            fence = (
                alt.Chart(fences)
                .mark_rule(color="#8a1c1c", strokeDash=[4, 3])
                .encode(x="fence:Q", tooltip=["which:N", alt.Tooltip("fence:Q", format=".4g")])
            )
            layers = [whisker, iqr_bar, mid, fence]
            if len(pts):
                layers.append(
                    alt.Chart(pts)
                    .mark_circle(color="#8a1c1c", size=36, opacity=0.7)
                    .encode(
                        x="value:Q",
                        yOffset=alt.YOffset("y:Q"),
                        tooltip=["row:N", alt.Tooltip("value:Q", format=".4g"), alt.Tooltip("score:Q", format=".2f")],
                    )
                )
            charts.append(alt.layer(*layers).properties(width=420, height=28))
        title = "Box summary per column: box = quartiles, whiskers = furthest values inside the fences, dashed = fences, dots = flagged values"
        return alt.vconcat(*charts, title=alt.Title(title, fontSize=11)).resolve_scale(x="independent")

    def _distance_chart(self, alt: Any) -> Any:
        joint = self.parts["joint"]
        d2 = joint["d2"]
        d = np.sqrt(d2[np.isfinite(d2)])
        if d.size == 0 or not math.isfinite(joint["cutoff"]):
            return None
        d = np.maximum(d, 1e-3)
        edges = np.logspace(np.log10(d.min()), np.log10(d.max() * 1.0001), 31)
        counts, edges = np.histogram(d, bins=edges)
        bins = pd.DataFrame({"from": edges[:-1], "to": edges[1:], "rows": counts})
        bins = bins[bins["rows"] > 0]
        cut = pd.DataFrame({"cutoff": [math.sqrt(joint["cutoff"])]})
        mv = self.multivariate.head(CHART_POINTS)
        pts = pd.DataFrame(
            {"distance": np.sqrt(mv["distance2"].to_numpy(dtype="float64")), "row": [str(r) for r in mv["row"]],
             "top columns": mv["top_columns"].astype(str).to_numpy(), "rows": 0}
        )
        x = alt.X(
            "from:Q", scale=alt.Scale(type="log"), title="robust distance (log axis)",
            axis=alt.Axis(labelOverlap=True, values=_decades(float(edges[0]), float(edges[-1]))),
        )
        bars = alt.Chart(bins).mark_bar(color="#b9c7d6").encode(
            x=x, x2="to:Q", y=alt.Y("rows:Q", title="rows"), y2=alt.datum(0), tooltip=["rows:Q"]
        )
        rule = alt.Chart(cut).mark_rule(color="#8a1c1c", strokeDash=[4, 3]).encode(x="cutoff:Q")
        dots = alt.Chart(pts).mark_tick(color="#8a1c1c", thickness=2).encode(
            x="distance:Q", y="rows:Q", tooltip=["row:N", alt.Tooltip("distance:Q", format=".2f"), "top columns:N"]
        )
        return alt.layer(bars, rule, dots).properties(
            width=420, height=140,
            title=alt.Title(
                "Robust distance of each complete row (binned); dashed = √χ²(p) 0.975 cutoff; ticks = flagged rows",
                fontSize=11,
            ),
        )

    # ------------------------------------------------------------------ panel
    def panel(self) -> Any:
        import ipywidgets as w

        choices: list[tuple[str, Any]] = [("every flagged row", None)]
        t = self.table
        for k, p in enumerate(self.parts["positions"]):
            if t["n_low"].iloc[k] + t["n_high"].iloc[k] + t["n_inf"].iloc[k] > 0:
                choices.append((f"{self.ctx.labels[p]} ({t['rule'].iloc[k]})", ("col", p)))
        if len(self.multivariate):
            choices.append(("robust distance (joint)", ("joint", None)))
        pick = w.Dropdown(options=[(label, i) for i, (label, _) in enumerate(choices)], description="rows")
        action = w.ToggleButtons(options=["filter", "cap", "flag"], description="code")
        head = w.HTML(self.body_html(with_chart=True))
        out = w.HTML()
        code = w.HTML()

        def show(_: Any = None) -> None:
            what = choices[pick.value][1]
            if what is None:
                rec = self.records(limit=500)
            elif what[0] == "joint":
                rec = self.records(column="joint", limit=500)
            else:
                rec = self.records(column=self.ctx.labels[what[1]], limit=500)
            out.value = table_html(rec, caption="Flagged rows, full records")
            code.value = code_html(self.code_action(action.value))

        pick.observe(show, names="value")
        action.observe(show, names="value")
        show()
        return w.VBox([head, pick, out, action, code])


def _decades(lo: float, hi: float) -> list[float]:
    """Powers of ten spanning [lo, hi] (tick values of a log axis)."""
    lo, hi = max(lo, 1e-300), max(hi, 1e-300)
    return [10.0**k for k in range(math.floor(math.log10(lo)), math.ceil(math.log10(hi)) + 1)]


def scan_values(ctx: Context, parts: dict[str, Any], k: int, rows: np.ndarray) -> np.ndarray:
    return ctx.float_values(parts["positions"][k])[rows]


def _rows_table(ctx: Context, parts: dict[str, Any]) -> pd.DataFrame:
    scan = parts["scan"]
    positions = parts["positions"]
    index = ctx.frame.index
    r, c = scan["cell_row"], scan["cell_col"]
    values = np.full(r.size, np.nan)
    for k in np.unique(c).tolist():  # one gather per flagged column
        sel = c == k
        values[sel] = ctx.float_values(positions[k])[r[sel]]
    rule_arr = np.asarray(scan["rule"], dtype=object)
    rules = np.where(np.isinf(values), "infinite", rule_arr[c] if c.size else np.zeros(0, dtype=object))
    uni = pd.DataFrame(
        {
            "row": pd.Series(list(index[r]), dtype=object),
            "column": pd.Series([ctx.labels[positions[k]] for k in c.tolist()], dtype=object),
            "value": values,
            "rule": pd.Series(list(rules), dtype=object),
            "score": scan["cell_score"].astype("float64"),
            "fence": scan["cell_fence"].astype("float64"),
            "side": pd.Series(["high" if h else "low" for h in scan["cell_high"].tolist()], dtype=object),
        },
        columns=ROWS_COLUMNS,
    )
    joint = parts["joint"]
    jr = joint["rows"]
    if jr.size:
        cols = tuple(ctx.labels[positions[k]] for k in joint["columns"])
        multi = pd.DataFrame(
            {
                "row": pd.Series(list(index[jr]), dtype=object),
                "column": pd.Series([cols] * jr.size, dtype=object),
                "value": np.sqrt(joint["d2"][jr]),
                "rule": JOINT_RULE,
                "score": joint["d2"][jr],
                "fence": np.full(jr.size, joint["cutoff"]),
                "side": "joint",
            },
            columns=ROWS_COLUMNS,
        )
        uni = pd.concat([uni, multi], ignore_index=True) if len(uni) else multi
    return uni.astype({"row": object, "column": object, "rule": object, "side": object})


def build(
    ctx: Context, rule: Any = None, alpha: float = 0.05, max_outliers: int = 10, **_: Any
) -> ExtremesResult:
    """The Extremes section.

    ``rule``: None (a documented policy chooses per column), one of ``"tukey"``, ``"tukey_far"``,
    ``"tukey_log"``, ``"modified_z"``, ``"esd"``, ``"zscore"``, or a ``{column: rule}`` mapping.
    ``alpha`` and ``max_outliers`` set the generalized ESD test.
    """
    parts = compute_extremes(ctx, rule=rule, alpha=alpha, max_outliers=max_outliers)
    t = parts["table"]
    joint = parts["joint"]
    notes = [
        "Each column's rule and why it was chosen are in `rule` and `reason`; `basis` states the fences "
        "(quartiles by linear interpolation, the pandas default). Fences use finite values only; ±inf is "
        "always flagged and counted in n_inf; missing values are never flagged. `share` = flagged / non-missing.",
        "`most_extreme` is the value furthest from the centre on the rule's scale, `most_extreme_score` its "
        "score (Tukey: IQRs beyond the quartile; modified z; ESD: R₁; z-score).",
    ]
    if joint["note"]:
        notes.append(joint["note"] + ("; shares of each row's squared distance name the columns behind it"
                                      if joint["rows"].size else ""))
    if not parts["positions"]:
        notes.append("No numeric columns: nothing to check.")
    cautions = [
        "An extreme value may be a real, important case — the signal you are looking for — rather than an "
        "error. Investigate each flagged row before removing or capping it; the filter/cap/flag actions are "
        "code for you to run on a copy and are never applied by nbeda.",
        "Rules flag by design: Tukey fences flag about 0.7% of normal data, and the χ² 0.975 cutoff flags about "
        "2.5% of rows by chance under multivariate normality — with many columns and rows expect some false "
        "flags (a multiple-testing effect).",
    ]
    if (t["rule"] == "zscore").any():
        cautions.append("The z-score rule uses the mean and SD, which the extremes inflate: it can hide them (masking).")
    flags = []
    for label, row in t.iterrows():
        n_flag = int(row["n_low"] + row["n_high"])
        bits = []
        if n_flag:
            bits.append(f"{n_flag} extreme value(s) by {row['rule']} (low {int(row['n_low'])}, high {int(row['n_high'])})")
        if row["n_inf"]:
            bits.append(f"{int(row['n_inf'])} infinite value(s)")
        special = [s for s in str(row["note"]).split("; ") if s.startswith(("possible unit error", "the value "))]
        if bits or special:
            flags.append(f"{label}: " + "; ".join(bits + special))
    if joint["rows"].size:
        flags.append(f"{joint['rows'].size} row(s) far from the bulk jointly (robust distance)")
    return ExtremesResult(ctx, parts, notes=notes, cautions=cautions, flags=flags)
