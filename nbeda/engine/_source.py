"""Opening a data source for the engine path: files (Parquet, CSV, globs), ibis tables, Spark frames.

Nothing here loads the data into memory: a source is an ibis table plus the
facts needed to reopen it in emitted code.
"""

from __future__ import annotations

import glob as _glob
import os
from dataclasses import dataclass, field
from typing import Any

__all__ = ["EngineSource", "EngineError", "open_source", "require_extra", "DEFAULT_MEMORY_LIMIT",
           "DEFAULT_SAMPLE_ROWS"]

#: DuckDB's memory limit unless the user gives one (DuckDB spills to disk beyond it).
DEFAULT_MEMORY_LIMIT = "1GB"
#: Rows pulled back for the parts that need rows (normality tests, ESD, Little's test, ...).
DEFAULT_SAMPLE_ROWS = 100_000

_PARQUET = (".parquet", ".pq", ".parq")
_CSV = (".csv", ".tsv", ".txt", ".csv.gz", ".tsv.gz")


class EngineError(RuntimeError):
    """A data source that cannot be read or aggregated, with a message meant for the analyst."""


def require_extra(module: str, extra: str) -> Any:
    """Import ``module`` or explain which optional extra installs it."""
    import importlib

    try:
        return importlib.import_module(module)
    except ModuleNotFoundError as exc:
        raise ModuleNotFoundError(
            f"this needs the optional package {exc.name!r}: install it with "
            f"`pip install \"nbeda[{extra}]\"`"
        ) from None


@dataclass
class EngineSource:
    """An ibis table and how to reopen it."""

    table: Any  # ibis Table
    backend: str  # "duckdb", "pyspark", ...
    description: str
    #: exact quantiles and distinct counts (default: exact on DuckDB, approximate on Spark)
    exact: bool = True
    memory_limit: str | None = None
    sample_rows: int = DEFAULT_SAMPLE_ROWS
    #: code lines that bind ``t`` (the ibis table) in a fresh namespace; ``{name}`` is the
    #: variable the user holds the object in (ibis tables and Spark frames)
    open_lines: list[str] = field(default_factory=list)
    paths: list[str] = field(default_factory=list)

    def columns_frame(self) -> Any:
        """An empty pandas frame with the source's columns (to check column options against)."""
        import pandas as pd

        return pd.DataFrame(columns=list(self.table.columns))

    def open_code(self, frame_name: str) -> str:
        return "\n".join(line.replace("{name}", frame_name) for line in self.open_lines) + "\n"


def _expand(path: str) -> list[str]:
    path = os.path.expanduser(str(path))
    if any(ch in path for ch in "*?["):
        found = sorted(_glob.glob(path, recursive=True))
        found = [p for p in found if os.path.isfile(p)]
        if not found:
            raise EngineError(f"no file matches {path!r}")
        return found
    if os.path.isdir(path):
        found = sorted(p for p in _glob.glob(os.path.join(path, "**", "*"), recursive=True)
                       if p.lower().endswith(_PARQUET) and os.path.isfile(p))
        if not found:
            raise EngineError(f"the folder {path!r} holds no Parquet files")
        return found
    if not os.path.exists(path):
        raise EngineError(f"no such file: {path!r}")
    return [path]


def _kind(paths: list[str]) -> str:
    low = [p.lower() for p in paths]
    if all(p.endswith(_PARQUET) for p in low):
        return "parquet"
    if all(p.endswith(_CSV) for p in low):
        return "csv"
    raise EngineError(
        "files must all be Parquet (.parquet) or all CSV (.csv, .tsv); got: "
        + ", ".join(sorted({os.path.splitext(p)[1] or "(no extension)" for p in paths}))
    )


def _check_parquet(paths: list[str]) -> None:
    """Clear errors for empty, unreadable and mixed-schema Parquet files (footers only are read)."""
    import pyarrow.parquet as pq

    first = None
    for p in paths:
        if os.path.getsize(p) == 0:
            raise EngineError(f"the file {p!r} is empty (0 bytes)")
        try:
            schema = pq.read_schema(p)
        except Exception as exc:
            raise EngineError(f"cannot read {p!r} as Parquet: {exc}") from None
        schema = schema.remove_metadata()
        if first is None:
            first = (p, schema)
        elif not schema.equals(first[1]):
            a = {f.name: str(f.type) for f in first[1]}
            b = {f.name: str(f.type) for f in schema}
            diff = sorted(set(a.items()) ^ set(b.items()))
            raise EngineError(
                f"the files do not share one schema: {os.path.basename(first[0])!r} and "
                f"{os.path.basename(p)!r} differ in {', '.join(f'{k} ({v})' for k, v in diff[:6])}"
                " — read them separately or align their columns first"
            )


def open_source(
    obj: Any,
    *,
    memory_limit: str | None = None,
    exact: bool | None = None,
    sample_rows: int | None = None,
    threads: int | None = None,
) -> EngineSource:
    """An :class:`EngineSource` for a path/glob, an ibis table or a PySpark DataFrame."""
    sample_rows = int(sample_rows or DEFAULT_SAMPLE_ROWS)
    if sample_rows < 1:
        raise ValueError(f"sample_rows must be a positive row count, got {sample_rows!r}")
    if isinstance(obj, (str, os.PathLike)):
        return _open_path(os.fspath(obj), memory_limit or DEFAULT_MEMORY_LIMIT, exact, sample_rows, threads)
    mod = type(obj).__module__ or ""
    if mod.startswith("pyspark."):
        return _open_spark(obj, exact, sample_rows)
    if mod.startswith("ibis."):
        backend = obj._find_backend()
        name = getattr(backend, "name", "ibis")
        return EngineSource(
            table=obj, backend=name, description=f"ibis table on {name}",
            exact=(name != "pyspark") if exact is None else bool(exact),
            memory_limit=None, sample_rows=sample_rows,
            open_lines=["import ibis", "t = {name}  # the ibis table the report was made from"],
        )
    raise TypeError(
        f"nbeda reads a pandas DataFrame, a file path or glob (Parquet, CSV), an ibis table or a "
        f"PySpark DataFrame, not {type(obj).__name__}"
    )


def _open_path(path: str, memory_limit: str, exact: bool | None, sample_rows: int,
               threads: int | None) -> EngineSource:
    ibis = require_extra("ibis", "duckdb")
    require_extra("duckdb", "duckdb")
    paths = _expand(path)
    kind = _kind(paths)
    if kind == "parquet":
        _check_parquet(paths)
    else:
        for p in paths:
            if os.path.getsize(p) == 0:
                raise EngineError(f"the file {p!r} is empty (0 bytes)")
    # DuckDB spills beyond the limit to ``.tmp`` in the working directory unless told otherwise:
    # keep the user's folder clean.
    import tempfile

    spill = os.path.join(tempfile.gettempdir(), "duckdb-spill")
    kwargs: dict[str, Any] = {"memory_limit": memory_limit, "temp_directory": spill}
    if threads:
        kwargs["threads"] = int(threads)
    con = ibis.duckdb.connect(**kwargs)
    target: Any = paths if len(paths) > 1 else paths[0]
    try:
        t = con.read_parquet(target) if kind == "parquet" else con.read_csv(target)
    except Exception as exc:
        raise EngineError(f"cannot read {path!r}: {type(exc).__name__}: {exc}") from None
    if not len(t.columns):
        raise EngineError(f"{path!r} has no columns")
    kw = ", ".join(f"{k}={v!r}" for k, v in kwargs.items())
    reader = "read_parquet" if kind == "parquet" else "read_csv"
    return EngineSource(
        table=t, backend="duckdb", description=f"{kind.capitalize()} · {len(paths)} file(s) · {path}",
        exact=True if exact is None else bool(exact), memory_limit=memory_limit,
        sample_rows=sample_rows, paths=paths,
        open_lines=["import ibis", f"con = ibis.duckdb.connect({kw})", f"t = con.{reader}({target!r})"],
    )


def _open_spark(df: Any, exact: bool | None, sample_rows: int) -> EngineSource:
    """A Spark DataFrame as an ibis table (a temporary view in its own session).

    Approximate quantiles and distinct counts by default: Spark's exact ones
    gather every value (or every distinct value) of a column in one place.
    Note that ibis sets the session's time zone to UTC when it connects.
    """
    ibis = require_extra("ibis", "spark")
    require_extra("pyspark", "spark")
    names = list(df.columns)
    if not names:
        raise EngineError("the Spark DataFrame has no columns")
    dup = sorted({c for c in names if names.count(c) > 1})
    if dup:
        raise EngineError(
            "the Spark DataFrame has duplicate column names (" + ", ".join(map(repr, dup[:6]))
            + "): rename them first, e.g. with df.toDF(*new_names)"
        )
    view = f"eda_source_{id(df):x}"
    try:
        df.createOrReplaceTempView(view)
        con = ibis.pyspark.connect(session=df.sparkSession)
        t = con.table(view)
    except Exception as exc:
        raise EngineError(f"cannot read the Spark DataFrame through ibis: {type(exc).__name__}: {exc}") from None
    return EngineSource(
        table=t, backend="pyspark", description="Spark DataFrame",
        exact=False if exact is None else bool(exact), memory_limit=None, sample_rows=sample_rows,
        open_lines=[
            "import ibis",
            f"{{name}}.createOrReplaceTempView({view!r})",
            "con = ibis.pyspark.connect(session={name}.sparkSession)",
            f"t = con.table({view!r})",
        ],
    )
