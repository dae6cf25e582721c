"""The engine path: the same report for data that stay in an engine (DuckDB, Spark, any ibis backend).

Only aggregates and a bounded, seeded sample come back to Python.  Needs the
optional extras ``nbeda[duckdb]`` (ibis + DuckDB) or ``nbeda[spark]``.
"""

from __future__ import annotations

from typing import Any

from nbeda.engine._source import DEFAULT_MEMORY_LIMIT, DEFAULT_SAMPLE_ROWS, EngineError, EngineSource, open_source

__all__ = ["source", "EngineSource", "EngineError", "DEFAULT_MEMORY_LIMIT", "DEFAULT_SAMPLE_ROWS"]


def source(
    data: Any,
    *,
    memory_limit: str | None = None,
    exact: bool | None = None,
    sample: int | None = None,
    threads: int | None = None,
    **report_options: Any,
) -> Any:
    """A :class:`nbeda.Report` of data that stay in an engine.

    ``data`` is a path or glob of Parquet or CSV files (read by embedded DuckDB
    under ``memory_limit``, default 1GB), an ibis table, or a PySpark DataFrame
    (its session is used as is).  ``exact`` chooses exact or approximate
    quantiles and distinct counts (default: exact on DuckDB, approximate on
    Spark).  ``sample`` caps the rows pulled back for row-level parts (default
    100,000).  Other keywords are report options (``roles``, ``by``, ``target``,
    ``confidence``, ``seed``, ``tab``).
    """
    from nbeda.report import Report

    if isinstance(data, EngineSource):
        src = data
    else:
        src = open_source(data, memory_limit=memory_limit, exact=exact, sample_rows=sample, threads=threads)
    report_options.setdefault("frame_name", "t")
    return Report(src, **report_options)
