"""IPython magics ``%eda`` and ``%%eda`` (same report object as ``df.eda``)."""

from __future__ import annotations

import ast
import os
from typing import Any

import pandas as pd
from IPython.core.error import UsageError
from IPython.core.magic import Magics, cell_magic, line_magic, magics_class
from IPython.core.magic_arguments import argument, magic_arguments, parse_argstring
from IPython.display import display

from nbeda._parse import OptionError, report_options
from nbeda._parse import parse_roles as _parse_roles
from nbeda.report import Report, normalise_tab
from nbeda.sections import SECTIONS

__all__ = ["EdaMagics", "split_line", "parse_roles", "looks_like_path", "is_engine_table", "FRAME_NAME"]

#: Name the emitted code gives a frame that came from an expression (``%eda df[df.x > 0]``).
FRAME_NAME = "eda_frame"


def split_line(line: str) -> tuple[str, str]:
    """Split ``"<expression> --opt ..."`` at the first top-level `` --`` (outside brackets/quotes)."""
    depth, quote, i = 0, "", 0
    while i < len(line):
        ch = line[i]
        if quote:
            if ch == "\\":
                i += 2
                continue
            if ch == quote:
                quote = ""
        elif ch in "'\"":
            quote = ch
        elif ch in "([{":
            depth += 1
        elif ch in ")]}":
            depth -= 1
        elif depth == 0 and line.startswith("--", i) and (i == 0 or line[i - 1].isspace()):
            return line[:i].strip(), line[i:].strip()
        i += 1
    return line.strip(), ""


def parse_roles(text: str | None, frame: pd.DataFrame) -> dict[Any, str]:
    """``"col=role,col2=role"`` → ``{col: role}`` with columns and roles checked."""
    try:
        return _parse_roles(text, frame)
    except OptionError as exc:
        raise UsageError(str(exc)) from None


@magics_class
class EdaMagics(Magics):
    """The ``%eda`` line magic and ``%%eda`` cell magic."""

    @magic_arguments()
    @argument("--tab", default=None, help="open on this tab: " + ", ".join(SECTIONS) + " (e.g. --tab spread)")
    @argument("--by", default=None, help="default segment column (e.g. --by site)")
    @argument("--target", default=None, help="metric of interest (e.g. --target yield_kg)")
    @argument("--roles", default=None, help="role overrides, e.g. --roles pest_score=discrete,site=nominal")
    @argument("--sample", type=int, default=None, help="row cap for row-heavy parts (e.g. --sample 100000)")
    @argument("--confidence", type=float, default=0.95, help="confidence level of intervals (default 0.95)")
    @argument("--seed", type=int, default=0, help="seed for every random sample (default 0)")
    @argument("--code", default=None, metavar="TAB", help="put that tab's plain pandas code in a new cell below")
    @argument("--all-code", action="store_true", help="put the whole analysis as one cell below")
    @argument(
        "--charts",
        default=None,
        choices=("static", "interactive"),
        help="static SVG charts (default) or interactive ones, both offline (e.g. --charts interactive)",
    )
    @argument("--memory-limit", default=None, help="engine sources: DuckDB memory limit (default 1GB)")
    @argument("--approximate", action="store_true", help="engine sources: approximate quantiles and distinct counts")
    @argument("--exact", action="store_true", help="engine sources: exact quantiles and distinct counts (Spark)")
    @line_magic
    def eda(self, line: str = "") -> Any:
        """Exploratory report of a DataFrame: ``%eda df [options]``.

        The expression may be any Python expression giving a DataFrame (a Series
        becomes a one-column frame), e.g. ``%eda df[df.site == "Northgate"] --by crop``.

        Examples::

            %eda df
            %eda df --tab links --target yield_kg
            %eda df --roles pest_score=discrete --by site
            %eda df --code spread        # code of the Spread tab in a new cell
            %eda df --all-code           # the whole analysis as one cell
            %eda df --charts interactive # charts with tooltips (still offline)

        Data too big for memory stay in an engine (needs ``nbeda[duckdb]``)::

            %eda readings/*.parquet      # Parquet or CSV files, a glob or a folder
            %eda tbl                     # an ibis table or a PySpark DataFrame
            %eda readings.parquet --memory-limit 2GB --sample 200000
        """
        expr, opts = split_line(line)
        if not expr:
            raise UsageError("usage: %eda <DataFrame expression> [options]; see %eda?")
        if looks_like_path(expr):
            return self._run(_unquote(expr), opts, frame_name="t")
        frame = self._evaluate(expr)
        if not isinstance(frame, pd.DataFrame):  # a path held in a variable, an ibis table, a Spark frame
            return self._run(frame, opts, frame_name=expr if expr.isidentifier() else "t")
        if expr.isidentifier():
            return self._run(frame, opts, frame_name=expr)
        # An expression: the code first assigns it to a name of its own (never over the user's df).
        return self._run(frame, opts, frame_name=FRAME_NAME, frame_expr=expr)

    @magic_arguments()
    @argument("--tab", default=None)
    @argument("--by", default=None)
    @argument("--target", default=None)
    @argument("--roles", default=None)
    @argument("--sample", type=int, default=None)
    @argument("--confidence", type=float, default=0.95)
    @argument("--seed", type=int, default=0)
    @argument("--code", default=None, metavar="TAB")
    @argument("--all-code", action="store_true")
    @argument("--charts", default=None, choices=("static", "interactive"))
    @argument("--memory-limit", default=None)
    @argument("--approximate", action="store_true")
    @argument("--exact", action="store_true")
    @cell_magic("eda")
    def eda_cell(self, line: str, cell: str) -> Any:
        """``%%eda [options]``: run the cell and report on the frame its last expression returns."""
        try:
            tree = ast.parse(cell)
        except SyntaxError as exc:
            raise UsageError(f"%%eda: the cell does not parse: {exc}") from None
        if not tree.body or not isinstance(tree.body[-1], ast.Expr):
            raise UsageError("%%eda: the cell must end with an expression giving a DataFrame")
        last_node = tree.body.pop().value
        last = ast.Expression(last_node)
        ns = self.shell.user_ns
        exec(compile(tree, "<%%eda cell>", "exec"), ns)  # noqa: S102 - the user's own cell
        value = eval(compile(last, "<%%eda cell>", "eval"), ns)  # noqa: S307
        frame = self._check_frame(value, "the cell's last expression")
        if isinstance(last_node, ast.Name):
            return self._run(frame, line, frame_name=last_node.id)
        source = ast.get_source_segment(cell, last_node) or ast.unparse(last_node)
        return self._run(frame, line, frame_name=FRAME_NAME, frame_expr=" ".join(source.split()))

    # ------------------------------------------------------------------ helpers
    def _evaluate(self, expr: str) -> Any:
        try:
            value = self.shell.ev(expr)
        except NameError as exc:
            raise UsageError(f"unknown variable in {expr!r}: {exc}") from None
        except Exception as exc:
            raise UsageError(f"could not evaluate {expr!r}: {type(exc).__name__}: {exc}") from None
        return self._check_frame(value, repr(expr))

    @staticmethod
    def _check_frame(value: Any, what: str) -> Any:
        if isinstance(value, pd.Series):
            return value.to_frame(name=value.name if value.name is not None else 0)
        if isinstance(value, (str, os.PathLike)) or is_engine_table(value):
            return value
        if not isinstance(value, pd.DataFrame):
            raise UsageError(
                f"{what} is a {type(value).__name__}, not a pandas DataFrame "
                "(nor a file path, an ibis table or a PySpark DataFrame)"
            )
        return value

    def _run(self, frame: Any, opts: str, frame_name: str, frame_expr: str | None = None) -> Any:
        try:
            args = parse_argstring(self.eda, opts)
        except UsageError:
            raise
        except SystemExit:  # argparse's own exit on bad input
            raise UsageError(f"bad options: {opts!r}; see %eda?") from None
        if not isinstance(frame, pd.DataFrame):
            frame = self._open(frame, args)
            frame_expr = None
        elif args.memory_limit or args.approximate or args.exact:
            raise UsageError("--memory-limit, --approximate and --exact apply to engine sources "
                             "(a file path, an ibis table or a PySpark DataFrame), not to a pandas DataFrame")
        try:
            options = report_options(frame if isinstance(frame, pd.DataFrame) else frame.columns_frame(), args)
        except OptionError as exc:
            raise UsageError(str(exc)) from None
        try:
            tab = normalise_tab(args.tab) if args.tab else None
            code_tab = normalise_tab(args.code) if args.code else None
        except KeyError as exc:
            raise UsageError(str(exc.args[0])) from None
        try:
            report = Report(
                frame,
                **options,
                tab=tab,
                frame_name=frame_name,
                frame_expr=frame_expr,
            )
        except (KeyError, ValueError) as exc:
            raise UsageError(str(exc.args[0] if exc.args else exc)) from None
        if code_tab is not None or args.all_code:
            try:
                code = report.all_code() if args.all_code else report.code(code_tab)  # type: ignore[arg-type]
            except NotImplementedError as exc:
                raise UsageError(str(exc)) from None
            self.shell.set_next_input(code, replace=False)
            return None
        from nbeda.widget import ReportWidget

        display(ReportWidget(report, charts=args.charts))
        return None

    @staticmethod
    def _open(value: Any, args: Any) -> Any:
        """An engine source for a path, an ibis table or a Spark frame (UsageError when it fails)."""
        from nbeda.engine._source import EngineError, open_source

        if args.approximate and args.exact:
            raise UsageError("give --approximate or --exact, not both")
        exact = False if args.approximate else (True if args.exact else None)
        try:
            return open_source(value, memory_limit=args.memory_limit, exact=exact, sample_rows=args.sample)
        except (EngineError, ModuleNotFoundError, TypeError, ValueError) as exc:
            raise UsageError(str(exc)) from None


_PATH_SUFFIXES = (".parquet", ".pq", ".parq", ".csv", ".tsv", ".csv.gz", ".tsv.gz")


def _unquote(expr: str) -> str:
    e = expr.strip()
    if len(e) >= 2 and e[0] == e[-1] and e[0] in "'\"":
        return e[1:-1]
    return e


def looks_like_path(expr: str) -> bool:
    """True for ``data/x.parquet``, ``'x.csv'``, ``readings/*.parquet`` or an existing folder."""
    e = _unquote(expr)
    if not e or any(ch in e for ch in "()[]{}=,"):
        return False
    low = e.lower()
    return low.endswith(_PATH_SUFFIXES) or "*" in e or (os.sep in e and os.path.exists(e))


def is_engine_table(value: Any) -> bool:
    """An ibis table or a PySpark DataFrame (checked by module name: neither is imported here)."""
    mod = type(value).__module__ or ""
    return (mod.startswith("ibis.") and hasattr(value, "schema")) or (
        mod.startswith("pyspark.") and hasattr(value, "sparkSession")
    )
