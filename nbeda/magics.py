"""IPython magics ``%eda`` and ``%%eda`` (same report object as ``df.eda``)."""

from __future__ import annotations

import ast
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

__all__ = ["EdaMagics", "split_line", "parse_roles", "FRAME_NAME"]

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
        """
        expr, opts = split_line(line)
        if not expr:
            raise UsageError("usage: %eda <DataFrame expression> [options]; see %eda?")
        frame = self._evaluate(expr)
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
    def _evaluate(self, expr: str) -> pd.DataFrame:
        try:
            value = self.shell.ev(expr)
        except NameError as exc:
            raise UsageError(f"unknown variable in {expr!r}: {exc}") from None
        except Exception as exc:
            raise UsageError(f"could not evaluate {expr!r}: {type(exc).__name__}: {exc}") from None
        return self._check_frame(value, repr(expr))

    @staticmethod
    def _check_frame(value: Any, what: str) -> pd.DataFrame:
        if isinstance(value, pd.Series):
            return value.to_frame(name=value.name if value.name is not None else 0)
        if not isinstance(value, pd.DataFrame):
            raise UsageError(f"{what} is a {type(value).__name__}, not a pandas DataFrame")
        return value

    def _run(self, frame: pd.DataFrame, opts: str, frame_name: str, frame_expr: str | None = None) -> Any:
        try:
            args = parse_argstring(self.eda, opts)
        except UsageError:
            raise
        except SystemExit:  # argparse's own exit on bad input
            raise UsageError(f"bad options: {opts!r}; see %eda?") from None
        try:
            options = report_options(frame, args)
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
