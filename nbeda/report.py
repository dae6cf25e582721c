"""The report object: the one path that the magic, the accessor and the CLI share.

A :class:`Report` holds one frame and its options, computes each section on
first request (and caches it), and hands out the widget, the code and the
standalone HTML.
"""

from __future__ import annotations

import ast
from collections.abc import Hashable, Mapping
from typing import Any

import pandas as pd

from nbeda._context import Context, Options
from nbeda.sections import SECTIONS, TITLES, builder

__all__ = ["Report", "normalise_tab"]


def normalise_tab(name: str) -> str:
    """Map a user-typed tab name ("Spread", "spread") to its section key; KeyError if unknown."""
    key = str(name).strip().lower()
    if key not in SECTIONS:
        raise KeyError(f"unknown tab {name!r}; tabs are: {', '.join(TITLES[s] for s in SECTIONS)}")
    return key


class Report:
    """Exploratory report of one DataFrame (sections computed lazily, then cached)."""

    def __init__(
        self,
        frame: pd.DataFrame | pd.Series,
        *,
        roles: Mapping[Any, str] | None = None,
        by: Hashable | None = None,
        target: Hashable | None = None,
        sample: int | None = None,
        confidence: float = 0.95,
        seed: int = 0,
        tab: str | None = None,
        frame_name: str = "df",
        frame_expr: str | None = None,
    ) -> None:
        if isinstance(frame, pd.Series):
            frame = frame.to_frame(name=frame.name if frame.name is not None else 0)
        #: the engine side when the data live in an engine (``nbeda.source``), else None
        self.engine: Any = None
        if not isinstance(frame, pd.DataFrame):
            from nbeda.engine._source import EngineSource

            if not isinstance(frame, EngineSource):
                raise TypeError(f"nbeda reports on a pandas DataFrame, not {type(frame).__name__}")
            from nbeda.engine._run import EngineRun

            self.engine = EngineRun(frame, seed=seed)
            frame = self.engine.sample()  # bounded by the source's sample_rows
            sample = None  # the sample is already drawn: sections use all of it
        options = Options(
            roles=dict(roles or {}), by=by, target=target, sample=sample, confidence=confidence, seed=seed
        )
        self.ctx = Context(frame, options)
        self.frame_name = frame_name
        #: the expression the frame came from (``%eda df[df.site == "Northgate"]``); when set,
        #: the code of the report starts by assigning it to ``frame_name``
        self.frame_expr = frame_expr
        self.initial_tab = normalise_tab(tab) if tab else "roles"
        self._cache: dict[tuple[str, tuple[tuple[str, Any], ...]], Any] = {}
        if self.engine is not None:
            # Every tab works from the roles read over all rows (a column all-distinct in the
            # sample but not overall is no identifier), not from the sample's own reading.
            self.ctx._roles = self.section("roles").table.copy()

    @property
    def frame(self) -> pd.DataFrame:
        return self.ctx.frame

    @property
    def options(self) -> Options:
        return self.ctx.options

    # ----------------------------------------------------------------- sections
    def section(self, name: str, **kwargs: Any) -> Any:
        """The result of one section (computed on first request, then cached)."""
        key = normalise_tab(name)
        cache_key = (key, tuple(sorted((k, _hashable(v)) for k, v in kwargs.items())))
        if cache_key not in self._cache:
            result = builder(key)(self.ctx, **kwargs)
            if self.engine is not None:
                result = self.engine.overlay(key, result)
            self._cache[cache_key] = result
        return self._cache[cache_key]

    def roles(self) -> Any:
        return self.section("roles")

    def spread(self, **kwargs: Any) -> Any:
        return self.section("spread", **kwargs)

    def shape(self, **kwargs: Any) -> Any:
        return self.section("shape", **kwargs)

    def gaps(self, **kwargs: Any) -> Any:
        return self.section("gaps", **kwargs)

    def extremes(self, **kwargs: Any) -> Any:
        return self.section("extremes", **kwargs)

    def links(self, **kwargs: Any) -> Any:
        return self.section("links", **kwargs)

    def segments(self, by: Hashable | None = None, **kwargs: Any) -> Any:
        return self.section("segments", by=by, **kwargs)

    def trend(self, x: Hashable, y: Hashable, by: Hashable | None = None) -> Any:
        try:
            from nbeda.sections.links import build_trend
        except ModuleNotFoundError:
            raise NotImplementedError("trend() arrives with the Links tab (see the Links issue).") from None
        result = build_trend(self.ctx, x, y, by=by)
        if self.engine is not None and not self.engine.sample_is_all:
            result.notes.append(
                f"Computed on the report's seeded sample ({self.engine.sample_label()}): the fit, "
                "Cook's distances and the reversal check use sampled rows only."
            )
        return result

    # --------------------------------------------------------------------- code
    def code(self, tab: str, frame_name: str | None = None) -> str:
        """Plain pandas code of one tab."""
        return self._frame_line(frame_name) + str(self.section(tab).code(frame_name or self.frame_name))

    def all_code(self, frame_name: str | None = None) -> str:
        """The whole analysis as one cell: every available section's code in tab order."""
        blocks = [self._frame_line(frame_name).rstrip("\n")] if self._frame_line(frame_name) else []
        for name in SECTIONS:
            try:
                code = keep_results_apart(str(self.section(name).code(frame_name or self.frame_name)), name)
                blocks.append(f"# ===== {TITLES[name]} =====\n" + code)
            except NotImplementedError as exc:
                blocks.append(f"# ===== {TITLES[name]} =====\n# {exc}\n")
            except Exception as exc:  # one broken tab must not lose the others' code
                blocks.append(f"# ===== {TITLES[name]} =====\n# code unavailable: {type(exc).__name__}: {exc}\n")
        return "\n".join(blocks)

    def _frame_line(self, frame_name: str | None) -> str:
        if not self.frame_expr or frame_name not in (None, self.frame_name):
            return ""
        return f"# The frame this analysis is about:\n{self.frame_name} = {self.frame_expr}\n\n"

    # ------------------------------------------------------------------ display
    def header_text(self) -> str:
        if self.engine is not None:
            return str(self.engine.header_text())
        f = self.frame
        try:
            dup = int(f.duplicated().sum()) if f.shape[1] else 0
            dup_text = f"{dup:,} duplicate rows"
        except TypeError:  # unhashable cells (lists, dicts)
            dup_text = "duplicate rows not counted (unhashable values)"
        mem = f.memory_usage(deep=True).sum() / 2**20
        sampled = (
            f"; row-heavy parts use a seeded sample of {self.options.sample:,} rows"
            if self.options.sample and self.options.sample < f.shape[0]
            else ""
        )
        return f"{f.shape[0]:,} rows × {f.shape[1]:,} columns · {mem:,.1f} MiB · {dup_text}{sampled}"

    def widget(self) -> Any:
        """The tabbed ipywidgets report (tabs computed when first opened)."""
        from nbeda.widget import ReportWidget

        return ReportWidget(self)

    def to_html(self, path: str | None = None) -> str:
        """One self-contained HTML file (all tabs, inline CSS and SVG, no network)."""
        from nbeda.standalone import report_html

        text = report_html(self)
        if path is not None:
            with open(path, "w", encoding="utf-8") as fh:
                fh.write(text)
        return text

    def _ipython_display_(self) -> None:
        from IPython.display import display

        display(self.widget())

    def __repr__(self) -> str:
        return f"<nbeda Report: {self.header_text()}>"


def _module_level_stores(tree: ast.Module) -> set[str]:
    """Names a piece of code binds at module level (not inside functions, classes, lambdas
    or comprehensions, whose names do not leak)."""
    names: set[str] = set()
    scopes = (ast.FunctionDef, ast.AsyncFunctionDef, ast.ClassDef, ast.Lambda,
              ast.ListComp, ast.SetComp, ast.DictComp, ast.GeneratorExp)  # fmt: skip
    stack: list[ast.AST] = list(tree.body)
    while stack:
        node = stack.pop()
        if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef, ast.ClassDef)):
            names.add(node.name)
            continue
        if isinstance(node, scopes):
            continue
        if isinstance(node, ast.Name) and isinstance(node.ctx, ast.Store):
            names.add(node.id)
        elif isinstance(node, ast.alias):
            names.add((node.asname or node.name).split(".")[0])
        stack.extend(ast.iter_child_nodes(node))
    return names


def keep_results_apart(code: str, own: str) -> str:
    """Make one section's code safe to run after the others in a single cell.

    Each section's code runs on its own; run one after another (``all_code``), a block
    that uses another section's result name (say ``roles``) as a working variable would
    overwrite that table.  Such names are renamed inside this block only (``gaps_roles``),
    every occurrence: variables, function parameters and keywords of calls to functions
    the block defines.  Attributes, strings and library keywords are left alone.
    """
    try:
        tree = ast.parse(code)
    except SyntaxError:
        return code
    clash = (_module_level_stores(tree) & set(SECTIONS)) - {own}
    if not clash:
        return code
    used = {n.id for n in ast.walk(tree) if isinstance(n, ast.Name)} | _module_level_stores(tree)
    new: dict[str, str] = {}
    for name in sorted(clash):
        candidate = f"{own}_{name}"
        while candidate in used:
            candidate += "_"
        new[name] = candidate
    local_funcs = {n.name for n in ast.walk(tree) if isinstance(n, (ast.FunctionDef, ast.AsyncFunctionDef))}
    edits: list[tuple[int, int, str]] = []  # (line, byte column, old name)
    for node in ast.walk(tree):
        if isinstance(node, ast.Name) and node.id in new:
            edits.append((node.lineno, node.col_offset, node.id))
        elif isinstance(node, ast.arg) and node.arg in new:
            edits.append((node.lineno, node.col_offset, node.arg))
        elif isinstance(node, ast.Call) and isinstance(node.func, ast.Name) and node.func.id in local_funcs:
            edits.extend((kw.lineno, kw.col_offset, kw.arg) for kw in node.keywords if kw.arg in new)
    lines = [line.encode("utf-8") for line in code.split("\n")]
    for lineno, col, old in sorted(set(edits), reverse=True):
        raw = lines[lineno - 1]
        if raw[col : col + len(old)] == old.encode():
            lines[lineno - 1] = raw[:col] + new[old].encode() + raw[col + len(old) :]
    note = "".join(
        f"# (in this combined cell, this block's working variable `{a}` is called `{b}`, "
        f"so that the {TITLES[a]} table is kept)\n"
        for a, b in sorted(new.items())
    )
    return note + "\n".join(line.decode("utf-8") for line in lines)


def _hashable(v: Any) -> Any:
    try:
        hash(v)
        return v
    except TypeError:
        return repr(v)
