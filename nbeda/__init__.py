"""nbeda: exploratory data analysis in Jupyter.

``%load_ext nbeda`` then ``%eda df``; or ``import nbeda`` and ``df.eda()``.
"""

from __future__ import annotations

from typing import Any

from nbeda import accessor as _accessor  # noqa: F401  (registers df.eda)
from nbeda import demo
from nbeda import options  # noqa: F401  (nbeda.options.charts)
from nbeda._context import ROLES
from nbeda.report import Report
from nbeda.sections import SECTIONS

__all__ = ["ROLES", "SECTIONS", "Report", "demo", "options", "source", "load_ipython_extension", "__version__"]

__version__ = "0.1.0"


def source(data: Any, **options: Any) -> Report:
    """The report of data that stay in an engine: a Parquet/CSV path or glob (embedded DuckDB),
    an ibis table or a PySpark DataFrame. See :func:`nbeda.engine.source`."""
    from nbeda.engine import source as _source

    return _source(data, **options)  # type: ignore[no-any-return]


def load_ipython_extension(ipython: Any) -> None:
    """``%load_ext nbeda``: registers ``%eda`` and ``%%eda``."""
    from nbeda.magics import EdaMagics

    ipython.register_magics(EdaMagics)
