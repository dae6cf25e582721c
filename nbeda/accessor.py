"""``df.eda``: the DataFrame accessor (same report object as the magic)."""

from __future__ import annotations

from collections.abc import Hashable
from typing import Any

import pandas as pd

from nbeda.report import Report

__all__ = ["EdaAccessor"]

_REPORT_KEYS = ("roles", "by", "target", "sample", "confidence", "seed")


def _split(kwargs: dict[str, Any]) -> tuple[dict[str, Any], dict[str, Any]]:
    report = {k: kwargs.pop(k) for k in _REPORT_KEYS if k in kwargs}
    return report, kwargs


@pd.api.extensions.register_dataframe_accessor("eda")
class EdaAccessor:
    """Exploratory analysis of this frame: ``df.eda()`` shows the tabbed report.

    Each section — ``roles() spread() shape() gaps() extremes() links() segments(by=...)
    trend(x, y)`` — returns a result with ``.table``, ``.chart()`` and ``.code()``.
    Report options (``roles={...}``, ``by``, ``target``, ``sample``, ``confidence``,
    ``seed``) may be given to any of them.
    """

    def __init__(self, frame: pd.DataFrame) -> None:
        self._frame = frame  # cheap: pandas builds an accessor per attribute access

    def report(self, **options: Any) -> Report:
        """The report object (sections computed lazily)."""
        return Report(self._frame, **options)

    def __call__(self, tab: str | None = None, **options: Any) -> Any:
        """The tabbed report widget."""
        return Report(self._frame, tab=tab, **options).widget()

    def _section(self, name: str, kwargs: dict[str, Any]) -> Any:
        report_opts, section_opts = _split(dict(kwargs))
        return Report(self._frame, **report_opts).section(name, **section_opts)

    def roles(self, **options: Any) -> Any:
        return self._section("roles", options)

    def spread(self, **options: Any) -> Any:
        return self._section("spread", options)

    def shape(self, **options: Any) -> Any:
        return self._section("shape", options)

    def gaps(self, **options: Any) -> Any:
        return self._section("gaps", options)

    def extremes(self, **options: Any) -> Any:
        return self._section("extremes", options)

    def links(self, **options: Any) -> Any:
        return self._section("links", options)

    def segments(self, by: Hashable | None = None, **options: Any) -> Any:
        report_opts, section_opts = _split(dict(options))
        return Report(self._frame, **report_opts).segments(by=by, **section_opts)

    def trend(self, x: Hashable, y: Hashable, by: Hashable | None = None, **options: Any) -> Any:
        return Report(self._frame, **options).trend(x, y, by=by)
