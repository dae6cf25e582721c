"""Display options of nbeda (process-wide, read when a report widget is built).

``nbeda.options.charts``
    ``"static"`` (default): every chart is drawn to SVG in the kernel by vl-convert
    and shown as plain markup.  Works with no network in JupyterLab, Notebook,
    VS Code, exported HTML and the standalone report; no JavaScript involved.

    ``"interactive"``: charts in the widget are drawn by Vega-Embed (tooltips,
    zoom where the chart allows it) inside a small inline frame whose page
    carries the Vega, Vega-Lite and Vega-Embed JavaScript *inline* — taken from
    the bundle shipped in the installed ``vl-convert-python`` wheel (via
    ``altair``'s ``to_html(inline=True)``), so nothing is fetched from the
    network.  The price is about 0.9 MB of script per chart in the notebook, which
    is why it is opt-in.  The standalone report always uses static SVG.

nbeda never changes the user's global altair renderer in either mode.
"""

from __future__ import annotations

import sys
import types

__all__ = ["CHART_MODES", "charts"]

#: The accepted values of :data:`charts`.
CHART_MODES: tuple[str, ...] = ("static", "interactive")

charts: str = "static"


class _OptionsModule(types.ModuleType):
    """Validates assignments such as ``nbeda.options.charts = "interactive"``."""

    def __setattr__(self, name: str, value: object) -> None:
        if name == "charts":
            text = str(value).strip().lower()
            if text not in CHART_MODES:
                raise ValueError(f"nbeda.options.charts must be one of {CHART_MODES}, got {value!r}")
            value = text
        super().__setattr__(name, value)


sys.modules[__name__].__class__ = _OptionsModule
