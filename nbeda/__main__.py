"""Command line: ``python -m nbeda DATA -o report.html [options]``.

Reads CSV / TSV, Parquet (needs the optional ``pyarrow``) or JSON Lines, writes
the standalone HTML report (every tab computed, no network needed to view it)
and, with ``--code``, the whole analysis as a plain pandas script that loads the
data itself and runs on its own.

Exit codes: 0 done; 2 bad input (unreadable file, unknown column, bad role or
option) — in that case nothing is written.  Files are written to a temporary
file beside the target and renamed, so a target is never left half-written.
"""

from __future__ import annotations

import argparse
import os
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

from nbeda._parse import OptionError, report_options

__all__ = ["main", "read_data", "reader_for"]

_COMPRESSION = (".gz", ".bz2", ".zip", ".xz", ".zst", ".tar")


class CliError(Exception):
    """Bad input: reported on stderr with exit code 2."""


def reader_for(path: str | os.PathLike[str]) -> tuple[str, dict[str, Any]]:
    """``(pandas reader name, keyword arguments)`` chosen by the file extension."""
    suffixes = [s.lower() for s in Path(path).suffixes]
    while suffixes and suffixes[-1] in _COMPRESSION:
        suffixes.pop()
    ext = suffixes[-1] if suffixes else ""
    if ext in (".csv", ".txt"):
        return "read_csv", {}
    if ext in (".tsv", ".tab"):
        return "read_csv", {"sep": "\t"}
    if ext in (".parquet", ".pq"):
        return "read_parquet", {}
    if ext in (".jsonl", ".ndjson"):
        return "read_json", {"lines": True}
    if ext == ".json":
        return "read_json", {}
    raise CliError(
        f"cannot tell the format of {str(path)!r} from its extension; "
        "use .csv, .tsv, .parquet, .jsonl/.ndjson or .json"
    )


def read_data(path: str | os.PathLike[str]) -> Any:
    """Read a data file into a DataFrame (clear :class:`CliError` on failure)."""
    import pandas as pd

    reader, kwargs = reader_for(path)
    p = Path(path)
    if not p.exists():
        raise CliError(f"no such file: {str(path)!r}")
    if not p.is_file():
        raise CliError(f"not a file: {str(path)!r}")
    if reader == "read_parquet":
        try:
            import pyarrow  # noqa: F401
        except ImportError:
            raise CliError(
                "reading Parquet needs the optional package pyarrow: pip install 'nbeda[parquet]' "
                "(or pip install pyarrow)"
            ) from None
    try:
        frame = getattr(pd, reader)(p, **kwargs)
    except Exception as exc:
        raise CliError(f"could not read {str(path)!r}: {type(exc).__name__}: {exc}") from None
    if not isinstance(frame, pd.DataFrame):  # read_json may give a Series
        frame = pd.DataFrame(frame)
    return frame


def script_text(report: Any, data_path: str | os.PathLike[str]) -> str:
    """The whole analysis as a plain pandas script that loads ``data_path`` itself."""
    from nbeda import __version__

    if report.engine is not None:  # each block reopens the data in the engine itself
        return (
            f"# Exploratory analysis of {str(data_path)!r}, written by nbeda {__version__}.\n"
            "# ibis (over DuckDB) for the all-row numbers, pandas/numpy/scipy on a seeded sample for\n"
            "# the rest; nbeda is not needed to run it.\n\n" + report.all_code(frame_name="t").rstrip("\n") + "\n"
        )

    reader, kwargs = reader_for(data_path)
    path = str(Path(data_path).resolve())
    args = "".join(f", {k}={v!r}" for k, v in kwargs.items())
    load = f"df = pd.{reader}({path!r}{args})"
    return (
        f"# Exploratory analysis of {Path(data_path).name!r}, written by nbeda {__version__}.\n"
        "# Plain pandas/numpy/scipy: nbeda is not needed to run it.  Each block assigns one\n"
        "# table (roles, spread, ...) equal to the table of the same name in the report.\n\n"
        "import pandas as pd\n\n"
        "# Load the data exactly as the report did.\n"
        f"{load}\n\n" + report.all_code(frame_name="df").rstrip("\n") + "\n"
    )


def _write_all(files: list[tuple[Path, str]]) -> None:
    """Write every file to a temporary name beside its target, then rename them all."""
    umask = os.umask(0)
    os.umask(umask)
    temps: list[tuple[str, Path]] = []
    try:
        for target, text in files:
            if not target.parent.is_dir():
                raise OSError(f"no such directory: {str(target.parent)!r}")
            fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".part", dir=target.parent)
            temps.append((tmp, target))
            with os.fdopen(fd, "w", encoding="utf-8", newline="\n") as fh:
                fh.write(text)
            os.chmod(tmp, 0o666 & ~umask)
        for tmp, target in temps:
            os.replace(tmp, target)
    finally:
        for tmp, _ in temps:
            if os.path.exists(tmp):
                os.unlink(tmp)


def _parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(
        prog="python -m nbeda",
        description=(
            "Exploratory report of a data file as one self-contained HTML page (tabs Roles, Spread, "
            "Shape, Gaps, Extremes, Links, Segments), with the plain pandas code of every table."
        ),
        epilog="example: python -m nbeda beds.csv -o beds.html --by site --code beds_analysis.py",
    )
    p.add_argument("data", help="CSV, TSV, Parquet (needs pyarrow), JSON Lines (.jsonl/.ndjson) or JSON file")
    p.add_argument("-o", "--output", required=True, help="the HTML report to write")
    p.add_argument("--by", default=None, help="default segment column")
    p.add_argument("--target", default=None, help="metric of interest")
    p.add_argument("--roles", default=None, help="role overrides: col=role,col2=role")
    p.add_argument("--sample", type=int, default=None, help="row cap for row-heavy parts (seeded sample)")
    p.add_argument("--confidence", type=float, default=0.95, help="confidence level of intervals (default 0.95)")
    p.add_argument("--seed", type=int, default=0, help="seed of every random sample (default 0)")
    p.add_argument("--title", default=None, help="title of the report page")
    p.add_argument("--code", default=None, metavar="SCRIPT.py", help="also write the whole analysis as a pandas script")
    p.add_argument("-q", "--quiet", action="store_true", help="no progress on stderr")
    p.add_argument(
        "--engine", choices=("duckdb",), default=None,
        help="leave the data in embedded DuckDB (needs nbeda[duckdb]): only aggregates and a seeded "
        "sample are loaded; implied by a glob or a folder of Parquet files",
    )
    p.add_argument("--memory-limit", default=None, help="--engine: DuckDB memory limit (default 1GB)")
    p.add_argument("--approximate", action="store_true", help="--engine: approximate quantiles and distinct counts")
    return p


def _progress(quiet: bool) -> Any:
    start = time.perf_counter()

    def show(done: int, total: int, label: str) -> None:
        if quiet:
            return
        width = 21
        filled = int(round(width * done / total)) if total else width
        bar = "#" * filled + "-" * (width - filled)
        step = f"computing {label}" if done < total else "done"
        print(f"\r[{bar}] {done}/{total} {step:<22} {time.perf_counter() - start:6.1f} s", end="", file=sys.stderr)
        if done >= total:
            print(file=sys.stderr)
        sys.stderr.flush()

    return show


def main(argv: list[str] | None = None) -> int:
    """Run the command line; returns the exit code."""
    parser = _parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:  # argparse: --help (0) or a usage error (2)
        return int(exc.code or 0)
    say = (lambda *_: None) if args.quiet else (lambda msg: print(msg, file=sys.stderr, flush=True))
    try:
        out = Path(args.output)
        if out.exists() and out.is_dir():
            raise CliError(f"-o {args.output!r} is a directory; give a file name such as report.html")
        code_out = Path(args.code) if args.code else None
        if code_out is not None and code_out.resolve() == out.resolve():
            raise CliError("--code and -o must be different files")
        from nbeda._context import Options

        try:  # check the plain options before reading a possibly large file
            Options(sample=args.sample, confidence=args.confidence, seed=args.seed)
        except (ValueError, TypeError) as exc:
            raise CliError(str(exc)) from None
        engine = args.engine or ("*" in args.data or os.path.isdir(args.data))
        if not engine and (args.memory_limit or args.approximate):
            raise CliError("--memory-limit and --approximate apply with --engine duckdb")
        if engine:
            from nbeda.engine._run import cli_progress
            from nbeda.engine._source import EngineError, open_source

            try:
                frame: Any = open_source(args.data, memory_limit=args.memory_limit,
                                         exact=False if args.approximate else None, sample_rows=args.sample)
            except (EngineError, ModuleNotFoundError) as exc:
                raise CliError(str(exc)) from None
            columns = frame.columns_frame()
            say(f"opened {args.data} in DuckDB ({len(columns.columns):,} columns); the data stay there")
        else:
            say(f"reading {args.data} …")
            frame = read_data(args.data)
            say(f"read {frame.shape[0]:,} rows × {frame.shape[1]:,} columns")
            columns = frame
        try:
            options = report_options(columns, args)
        except OptionError as exc:
            raise CliError(str(exc)) from None

        from nbeda.report import Report
        from nbeda.standalone import report_html

        try:
            report = Report(frame, **options, frame_name="t" if engine else "df")
        except (KeyError, ValueError, TypeError) as exc:
            raise CliError(str(exc.args[0] if exc.args else exc)) from None
        if report.engine is not None and not args.quiet:
            report.engine.progress = lambda text: print(f"\n  engine: {text} …", end="", file=sys.stderr,
                                                        flush=True)
            del cli_progress
        page = report_html(
            report,
            title=args.title or f"Exploratory report: {Path(args.data).name}",
            source=str(Path(args.data).name),
            progress=_progress(args.quiet),
        )
        script = script_text(report, args.data) if code_out is not None else None
    except CliError as exc:
        print(f"nbeda: error: {exc}", file=sys.stderr)
        return 2
    # Everything is computed: only now touch the targets (each written atomically).
    files = [(out, page)] + ([(code_out, script)] if code_out is not None and script is not None else [])
    try:
        _write_all(files)
        for target, _ in files:
            say(f"wrote {target}")
    except OSError as exc:
        print(f"nbeda: error: cannot write: {exc}", file=sys.stderr)
        return 2
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
