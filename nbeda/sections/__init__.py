"""Section registry: one module per tab, each exposing ``build(ctx, **options)``."""

from __future__ import annotations

import importlib
from collections.abc import Callable
from typing import Any

__all__ = ["SECTIONS", "TITLES", "builder"]

#: Tab order in the widget; each name is also the variable its code assigns.
SECTIONS: tuple[str, ...] = ("roles", "spread", "shape", "gaps", "extremes", "links", "segments")
TITLES: dict[str, str] = {s: s.capitalize() for s in SECTIONS}


def builder(name: str) -> Callable[..., Any]:
    """The ``build(ctx, **options)`` function of a section."""
    if name not in SECTIONS:
        raise KeyError(f"unknown tab {name!r}; tabs are: {', '.join(SECTIONS)}")
    try:
        module = importlib.import_module(f"nbeda.sections.{name}")
    except ModuleNotFoundError as exc:
        if exc.name != f"nbeda.sections.{name}":
            raise
        raise NotImplementedError(
            f"The {TITLES[name]} tab is coming in a later release (see the {TITLES[name]} issue)."
        ) from None
    return module.build  # type: ignore[no-any-return]
