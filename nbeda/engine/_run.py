"""One report computed by an engine: exact aggregates from the engine, row-level parts on a sample.

:class:`EngineRun` is what a :class:`nbeda.report.Report` holds when its data
live in an engine.  The sections are computed by the usual in-memory code on a
bounded, seeded sample pulled from the engine; then each section's *overlay*
(``nbeda/engine/overlays/<section>.py``) replaces the numbers the engine can
compute over all rows (counts, moments, quantiles, ...) and labels every column
of the table as exact, approximate or sample-based.
"""

from __future__ import annotations

import importlib
import sys
import time
import warnings
from collections.abc import Callable
from typing import Any

import pandas as pd

from nbeda.engine import aggregates
from nbeda.engine._source import EngineError, EngineSource
from nbeda.stats._codegen import function_source

__all__ = ["EngineRun", "EngineMemoryError", "EXACT", "ALL_ROWS"]

EXACT = "exact (all rows, by the engine)"
ALL_ROWS = "exact (all rows: the sample is the whole table)"
EXACTNESS_CAPTION = "How each number was computed"


class EngineMemoryError(EngineError):
    """The engine ran out of memory on one query."""


def _is_memory_error(exc: BaseException) -> bool:
    text = f"{type(exc).__name__} {exc}".lower()
    return "outofmemory" in text.replace(" ", "") or "out of memory" in text or "java heap space" in text


class EngineRun:
    """The engine side of one report: the source, cached aggregates and the row sample."""

    def __init__(self, source: EngineSource, *, seed: int = 0) -> None:
        self.source = source
        self.t = source.table
        self.seed = int(seed)
        #: called with a short text before every engine query (the widget and the CLI show it)
        self.progress: Callable[[str], None] | None = None
        self.log: list[tuple[str, float]] = []
        self.notes: list[str] = []
        self._cache: dict[Any, Any] = {}
        self.names: list[str] = list(self.t.columns)

    # ------------------------------------------------------------- execution
    def execute(self, expr: Any, what: str) -> pd.DataFrame:
        """Run one ibis expression, reporting progress; memory errors become EngineMemoryError."""
        if self.progress is not None:
            self.progress(what)
        start = time.perf_counter()
        try:
            with warnings.catch_warnings():  # ibis 12 under pandas 3 / duckdb 2 warns about its own calls
                warnings.filterwarnings("ignore", message=".*infer_string.*")
                warnings.filterwarnings("ignore", message=".*fetch_arrow_table.*", category=DeprecationWarning)
                out = expr.to_pandas()
        except Exception as exc:
            if _is_memory_error(exc):
                raise EngineMemoryError(f"the engine ran out of memory computing {what}: {exc}") from exc
            raise
        self.log.append((what, time.perf_counter() - start))
        return out

    def _per_column(self, fn: Callable[..., pd.DataFrame], names: list[str], what: str,
                    **kw: Any) -> pd.DataFrame:
        """``fn(t, names)``; on a memory error, retried one column at a time (and said so)."""
        try:
            return fn(self.t, names, run=self.execute, **kw)
        except EngineMemoryError:
            self.notes.append(
                f"{what}: the engine ran out of memory with all columns in one query; "
                "retried one column at a time."
            )
            parts = []
            for c in names:
                try:
                    parts.append(fn(self.t, [c], run=self.execute, **kw))
                except EngineMemoryError as exc:
                    raise EngineMemoryError(
                        f"{what} of column {c!r} does not fit the engine's memory limit "
                        f"({self.source.memory_limit or 'engine default'}); raise it with "
                        f"memory_limit=... (or --memory-limit) or analyse fewer columns. ({exc})"
                    ) from exc
            return pd.concat(parts)

    # -------------------------------------------------------------- aggregates
    @property
    def exact(self) -> bool:
        return self.source.exact

    def stats(self) -> pd.DataFrame:
        """:func:`aggregates.column_stats` of every column (cached)."""
        if "stats" not in self._cache:
            self._cache["stats"] = self._per_column(
                aggregates.column_stats, self.names, "column statistics", exact=self.exact)
        return self._cache["stats"]

    @property
    def n_rows(self) -> int:
        if "rows" not in self._cache:
            self._cache["rows"] = int(self.execute(self.t.aggregate(rows=self.t.count()), "row count")
                                      ["rows"].iloc[0])
        return self._cache["rows"]

    def numeric_names(self) -> list[str]:
        kinds = aggregates.column_kinds(self.t)
        return [c for c in self.names if kinds[c] == "number"]

    def quantiles(self, names: list[str], probs: tuple[float, ...] = (0.25, 0.5, 0.75)) -> pd.DataFrame:
        """Quantiles of numeric columns, one query per column (cached per column and probs)."""
        missing = [c for c in names if ("q", c, probs) not in self._cache]
        if missing:
            got = aggregates.column_quantiles(self.t, missing, probs, exact=self.exact, run=self.execute)
            for c in missing:
                self._cache[("q", c, probs)] = got.loc[[c]]
        if not names:
            return pd.DataFrame(columns=[float(p) for p in probs], index=pd.Index([], name="column"))
        return pd.concat([self._cache[("q", c, probs)] for c in names])

    # ------------------------------------------------------------------ sample
    @property
    def sample_rows(self) -> int:
        return self.source.sample_rows

    @property
    def sample_is_all(self) -> bool:
        return self.n_rows <= self.sample_rows

    def sample(self) -> pd.DataFrame:
        if "sample" not in self._cache:
            self._cache["sample"] = aggregates.sample_rows(
                self.t, self.n_rows, self.sample_rows, seed=self.seed, run=self.execute)
        return self._cache["sample"]

    def sample_label(self) -> str:
        if self.sample_is_all:
            return ALL_ROWS
        return f"sample ({len(self.sample()):,} of {self.n_rows:,} rows, seeded)"

    def exact_label(self, kind: str = "") -> str:
        """Label of an engine number: exact, or approximate with the method named."""
        if self.exact or kind == "":
            return EXACT
        if kind == "distinct":
            return "approximate (HyperLogLog distinct count, error of a few per cent)"
        if kind == "quantile":
            return "approximate (engine's approximate quantile; rank error ≈ 1e-4 on Spark)"
        return EXACT

    # --------------------------------------------------------------- overlays
    def overlay(self, key: str, result: Any) -> Any:
        """Patch a section computed on the sample with the engine's numbers; label every column."""
        try:
            module = importlib.import_module(f"nbeda.engine.overlays.{key}")
        except ModuleNotFoundError as exc:
            if exc.name != f"nbeda.engine.overlays.{key}":
                raise
            module = None
        labels: dict[str, str] = {}
        if module is not None:
            labels = module.apply(self, result) or {}
        for note in self.notes:  # e.g. an out-of-memory retry, one column at a time
            if note not in result.notes:
                result.notes.append(note)
        if not self.sample_is_all:
            result.notes.append(
                f"Data in {self.source.backend}: numbers marked exact are computed over all "
                f"{self.n_rows:,} rows by the engine; the rest on a seeded Bernoulli sample of "
                f"{len(self.sample()):,} rows (see 'How each number was computed')."
            )
        table = result.table
        how = [labels.get(str(c), self.sample_label()) for c in table.columns]
        result.exactness = pd.DataFrame(
            {"how": how}, index=pd.Index([str(c) for c in table.columns], name="number", dtype=object)
        )
        # Every display of the result (each tab's own body_html and panel use tables()) shows
        # how its numbers were computed.
        shown = result.tables

        def tables_with_exactness() -> dict[str, pd.DataFrame]:
            return {**shown(), EXACTNESS_CAPTION: result.exactness}

        result.tables = tables_with_exactness
        if key == "segments":  # its pickers recompute on the sample alone: show the engine's tables only
            result.panel = lambda: None
        pandas_code = result.code
        result.pandas_code = pandas_code
        result.code = lambda frame_name="t": self.code(key, result, module, pandas_code, frame_name)
        return result

    def code(self, key: str, result: Any, module: Any, pandas_code: Callable[[str], str],
             frame_name: str) -> str:
        """ibis code for the engine numbers + the section's pandas code on the same sample."""
        src = self.source
        lines = [
            f"# {result.title} computed on {src.description} by {src.backend} through ibis; only "
            "aggregates and a seeded sample",
            "# come back to Python (the data are never loaded whole).",
            "import numpy as np",
            "import pandas as pd",
        ]
        blocks = ["\n".join(lines) + "\n", src.open_code(frame_name)]
        blocks.append(function_source(aggregates.column_kinds))
        blocks.append(function_source(aggregates.sample_rows))
        n = self.n_rows
        blocks.append(
            f"# The seeded sample the row-level parts use ({'all rows' if self.sample_is_all else 'Bernoulli'}):\n"
            f"sample = sample_rows(t, n_rows={n}, n={self.sample_rows}, seed={self.seed})\n"
        )
        blocks.append(pandas_code("sample"))
        if module is not None and hasattr(module, "code"):
            blocks.append(module.code(self, result))
        return "\n".join(b.rstrip("\n") + "\n" for b in blocks if b)

    # ----------------------------------------------------------------- header
    def header_text(self) -> str:
        st = self.stats()
        parts = [f"{self.n_rows:,} rows × {len(self.names):,} columns", self.source.description,
                 f"engine {self.source.backend}"
                 + (f" (memory limit {self.source.memory_limit})" if self.source.memory_limit else "")]
        parts.append("exact aggregates" if self.exact else "approximate quantiles and distinct counts")
        if not self.sample_is_all:
            parts.append(f"row-level parts on a seeded sample of {len(self.sample()):,} rows")
        if self.notes:
            parts.append("out of memory once: retried one column at a time")
        del st
        return " · ".join(parts)


def cli_progress(text: str) -> None:
    print(f"[nbeda] {text} …", file=sys.stderr, flush=True)
