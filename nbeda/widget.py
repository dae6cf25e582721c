"""The tabbed report widget: a header line and seven lazily computed tabs.

Each tab is computed the first time it is opened (the initial tab at once), with a
spinner while the kernel works.  A failure stays inside its tab (escaped, with the
exception type); a tab whose section has not been released yet says so.  Every tab
ends with its code panel (Copy, Insert below, and the ``%eda df --code TAB`` hint).

Charts are SVG drawn in the kernel by vl-convert (offline everywhere) unless
``nbeda.options.charts == "interactive"`` (see :mod:`nbeda.options`); the
user's global altair renderer is never touched.  The display also carries a
static copy of every tab computed so far, for notebooks read without a kernel
(see :meth:`ReportWidget._ipython_display_`).
"""

from __future__ import annotations

import html
from typing import Any

import ipywidgets as widgets

from nbeda import options
from nbeda._html import CSS, esc
from nbeda.sections import SECTIONS, TITLES
from nbeda.standalone import (
    EXTRA_CSS,
    code_panel_html,
    offline_svg,
    report_fragment,
    status_html,
    tab_body,
)

__all__ = ["ReportWidget", "interactive_chart_html"]

_STYLE = f"<style>{CSS}{EXTRA_CSS}</style>"

#: States a tab goes through: pending → computing → done | unavailable | error.
STATES = ("pending", "computing", "done", "unavailable", "error")

_FIT_SCRIPT = (
    "<script>(function(){function fit(){var f=window.frameElement;if(!f){return;}"
    "var e=document.querySelector('.vega-embed svg, .vega-embed canvas');if(!e){return;}"
    "var r=e.getBoundingClientRect();if(r.width>0&&r.height>0){"
    "f.style.width=Math.ceil(r.width+r.left+16)+'px';f.style.height=Math.ceil(r.height+r.top+16)+'px';}}"
    "window.addEventListener('load',fit);setTimeout(fit,200);setTimeout(fit,1000);"
    "if(window.ResizeObserver){new ResizeObserver(fit).observe(document.body);}})();</script>"
)


def interactive_chart_html(chart: Any) -> str:
    """An interactive chart in an inline frame carrying Vega's JavaScript inline (no network).

    ``altair``'s ``to_html(inline=True)`` takes the Vega/Vega-Lite/Vega-Embed bundle
    from the installed vl-convert wheel; the page sits in a ``srcdoc`` frame (scripts
    run there even though the widget sets its HTML through ``innerHTML``) that sizes
    itself to the chart.  Falls back to static SVG if the bundle is unavailable.
    """
    from nbeda._render import chart_html

    try:
        page = chart.to_html(inline=True, embed_options={"actions": False})
    except Exception:  # no bundle available: static SVG still works offline
        return chart_html(chart)
    head, sep, tail = page.rpartition("</body>")  # the last one: the bundle's JS has "</body>" in a string
    page = head + _FIT_SCRIPT + sep + tail if sep else page + _FIT_SCRIPT
    height = 60
    try:
        spec = chart.to_dict()
        height += int(spec.get("height", 300)) if isinstance(spec.get("height"), (int, float)) else 300
    except Exception:
        height = 360
    return (
        f"<div class='nb-chart'><iframe class='nb-iframe' title='chart' style='width:640px;height:{height}px'"
        f" srcdoc=\"{html.escape(page, quote=True)}\"></iframe></div>"
    )


class ReportWidget(widgets.VBox):  # type: ignore[misc]
    """The report as an ipywidgets VBox: header line + ``ipywidgets.Tab`` of seven tabs.

    For tests and power users: :attr:`tab` (the Tab), :meth:`select` (open a tab by
    name), :attr:`contents` (each tab's container box), :attr:`state` (each tab's state),
    :attr:`bodies` (the HTML shown in each computed tab) and :attr:`codes` (its code).
    """

    def __init__(self, report: Any, *, charts: str | None = None) -> None:
        self.report = report
        mode = (charts or options.charts).strip().lower()
        if mode not in options.CHART_MODES:
            raise ValueError(f"charts must be one of {options.CHART_MODES}, got {charts!r}")
        self.charts = mode
        self.names: tuple[str, ...] = tuple(SECTIONS)
        self.state: dict[str, str] = dict.fromkeys(self.names, "pending")
        self.errors: dict[str, BaseException] = {}
        self.results: dict[str, Any] = {}
        self.bodies: dict[str, str] = {}
        self.codes: dict[str, str] = {}
        self._static: dict[str, str] = {}  # static (SVG) body per tab, for the saved fallback
        self._ids = 0
        self.contents: dict[str, widgets.VBox] = {
            name: widgets.VBox(
                [widgets.HTML(status_html("pending", TITLES[name], message=f"{TITLES[name]}: open to compute"))],
                layout=widgets.Layout(width="100%"),
            )
            for name in self.names
        }
        self.header = widgets.HTML(self._header_html())
        self.tab = widgets.Tab(
            children=[self.contents[n] for n in self.names],
            titles=[TITLES[n] for n in self.names],
        )
        initial = report.initial_tab if report.initial_tab in self.names else self.names[0]
        self.tab.selected_index = self.names.index(initial)
        super().__init__([self.header, self.tab])
        self.add_class("nbeda-live")
        self.add_class(f"nbeda-live-{self.model_id}")
        self.tab.observe(self._on_select, names="selected_index")
        self.compute(initial)

    # ---------------------------------------------------------------- public
    @property
    def selected(self) -> str:
        """Name of the tab on show."""
        idx = self.tab.selected_index
        return self.names[idx if idx is not None else 0]

    def select(self, name: str) -> ReportWidget:
        """Open a tab by name (``"spread"`` or ``"Spread"``); computes it on first opening."""
        from nbeda.report import normalise_tab

        key = normalise_tab(name)
        self.tab.selected_index = self.names.index(key)
        self.compute(key)  # no-op when the observer already did it
        return self

    @property
    def computed(self) -> set[str]:
        """Tabs already computed (successfully or not)."""
        return {n for n, s in self.state.items() if s in ("done", "unavailable", "error")}

    def compute(self, name: str) -> str:
        """Compute one tab now (once); returns its state."""
        if self.state[name] != "pending":
            return self.state[name]
        box = self.contents[name]
        title = TITLES[name]
        self.state[name] = "computing"
        box.children = [widgets.HTML(_STYLE + status_html("computing", title))]
        engine = getattr(self.report, "engine", None)
        if engine is not None:  # long engine queries: say which one is running

            def progress(text: str) -> None:
                box.children = [widgets.HTML(_STYLE + status_html("computing", title, message=f"{title}: {text} …"))]

            engine.progress = progress
        try:
            result = self.report.section(name)
        except KeyboardInterrupt:  # the user stopped the kernel: leave the tab ready for another try
            self.state[name] = "pending"
            box.children = [
                widgets.HTML(
                    _STYLE
                    + status_html(
                        "pending", title, message=f"{title} was interrupted; open another tab and come back to retry."
                    )
                )
            ]
            raise
        except NotImplementedError as exc:
            self.errors[name] = exc
            self.state[name] = "unavailable"
            box.children = [widgets.HTML(_STYLE + status_html("unavailable", title, exc))]
            return self.state[name]
        except Exception as exc:  # shown inside the tab; the other tabs keep working
            self.errors[name] = exc
            self.state[name] = "error"
            box.children = [widgets.HTML(_STYLE + status_html("error", title, exc))]
            return self.state[name]
        self.results[name] = result
        try:
            body = self._body(name, result)
        except Exception as exc:
            self.errors[name] = exc
            self.state[name] = "error"
            box.children = [widgets.HTML(_STYLE + status_html("error", title, exc))]
            return self.state[name]
        box.children = [body, self._code_panel(name)]
        self.state[name] = "done"
        return self.state[name]

    def compute_all(self) -> ReportWidget:
        """Compute every tab (e.g. before saving a notebook for readers without a kernel)."""
        for name in self.names:
            self.compute(name)
        return self

    def static_html(self) -> str:
        """Static HTML of the report with every tab computed so far (the saved fallback)."""
        bodies = {}
        for name in self.names:
            if self.state[name] in ("done", "unavailable", "error"):
                bodies[name] = self._static_body(name)
        return report_fragment(self.report, compute=False, live=False, bodies=bodies)

    def fallback_html(self, *, second: bool = False) -> str:
        """The saved static copy of the report (every tab computed so far).

        The display carries it twice (see :meth:`_ipython_display_`): as the ``text/html``
        of the widget's own bundle (used by nbconvert/nbviewer when no widget state was
        saved, and by viewers without widget support) and, with ``second=True``, as an
        output of its own — JupyterLab always picks the widget view of a bundle, even when
        the model is gone ("model not found" in a reopened notebook), so only a separate
        output shows there.  The second copy hides itself by CSS whenever the live widget
        or the first copy is on the page, so a reader never sees the report twice.
        """
        mid = esc(self.model_id)
        try:
            body = self.static_html()
        except Exception as exc:  # the live widget must show even if the fallback fails
            body = f"<pre>{esc(type(exc).__name__)}: {esc(exc)}</pre>"
        note = (
            "<div class='nbeda'><div class='nb-hint'>Static copy of the nbeda report (the live widget "
            "needs a running kernel); tabs opened after it was shown are not included.</div></div>"
        )
        if not second:
            return f"<div class='nbeda-fallback nbeda-copy-{mid}'>{note}{body}</div>"
        hide = " ".join(
            f"body:has({cond}) {target} {{ display: none !important; }}"
            for cond in (f".nbeda-live-{mid}", f".nbeda-copy-{mid}")
            for target in (f".nbeda-second-{mid}", f".jp-OutputArea-child:has(.nbeda-second-{mid})")
        )
        return f"<div class='nbeda-fallback nbeda-second-{mid}'><style>{hide}</style>{note}{body}</div>"

    def _repr_mimebundle_(self, **kwargs: Any) -> dict[str, Any]:
        """Widget view plus the static copy as ``text/html``."""
        data: dict[str, Any] = super()._repr_mimebundle_(**kwargs)
        data["text/html"] = self.fallback_html()
        return data

    def _ipython_display_(self) -> None:
        """Two outputs: the widget bundle (with its static copy) and a second, self-hiding copy.

        Live widget: the second copy hides (the widget carries ``nbeda-live-<id>``).
        Reopened in JupyterLab with no widget state: the widget says "model not found" and
        the second copy shows.  nbconvert/nbviewer without state: the first copy shows and
        the second hides.
        """
        from IPython.display import display

        display(self._repr_mimebundle_(), raw=True)
        display(
            {
                "text/html": self.fallback_html(second=True),
                "text/plain": f"(static copy of the nbeda report: {self._header_text()})",
            },
            raw=True,
        )

    def __repr__(self) -> str:
        done = sorted(self.computed, key=self.names.index)
        return f"<nbeda ReportWidget: {self._header_text()}; computed: {', '.join(done) or 'none'}>"

    # --------------------------------------------------------------- helpers
    def _on_select(self, change: dict[str, Any]) -> None:
        idx = change.get("new")
        if idx is None or not 0 <= idx < len(self.names):
            return
        self.compute(self.names[idx])

    def _header_text(self) -> str:
        try:
            return str(self.report.header_text())
        except Exception as exc:
            f = self.report.frame
            return f"{f.shape[0]:,} rows × {f.shape[1]:,} columns (header: {type(exc).__name__})"

    def _header_html(self) -> str:
        return f"{_STYLE}<div class='nbeda nb-header'>{esc(self._header_text())}</div>"

    def _next_prefix(self, name: str) -> str:
        self._ids += 1
        return f"nbw{id(self) % 100000}-{self._ids}-{name}"

    def _body(self, name: str, result: Any) -> widgets.Widget:
        panel = None
        panel_error = None
        try:
            panel = result.panel()
        except Exception as exc:  # a broken picker falls back to the static body
            panel_error = exc
        if isinstance(panel, widgets.Widget):
            self.bodies[name] = ""
            return panel
        if self.charts == "interactive":
            body = self._interactive_body(result)
        else:
            body = offline_svg(result.body_html(), self._next_prefix(name))
            self._static[name] = body
        if panel_error is not None:
            body = (
                f"<div class='nb-flag'>interactive panel unavailable "
                f"({esc(type(panel_error).__name__)}: {esc(panel_error)})</div>" + body
            )
        self.bodies[name] = body
        return widgets.HTML(f"{_STYLE}<div class='nbeda'>{body}</div>", layout=widgets.Layout(width="100%"))

    def _interactive_body(self, result: Any) -> str:
        body = result.body_html(with_chart=False)
        try:
            chart = result.chart()
        except Exception as exc:
            return body + f"<div class='nb-flag'>chart unavailable: {esc(type(exc).__name__)}: {esc(exc)}</div>"
        if chart is None:
            return body
        return body + interactive_chart_html(chart)

    def _static_body(self, name: str) -> str:
        if name not in self._static:
            _, self._static[name] = tab_body(self.report, name, svg_prefix=self._next_prefix(name))
        return self._static[name]

    def _code_panel(self, name: str) -> widgets.Widget:
        try:
            code = self.report.code(name)
        except Exception as exc:
            return widgets.HTML(
                f"{_STYLE}<div class='nbeda nb-flag'>code unavailable: {esc(type(exc).__name__)}: {esc(exc)}</div>"
            )
        self.codes[name] = code
        return widgets.HTML(
            _STYLE + code_panel_html(code, name, getattr(self.report, "frame_expr", None) or self.report.frame_name, live=True),
            layout=widgets.Layout(width="100%"),
        )

