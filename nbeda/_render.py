"""Turn an altair chart into SVG locally (vl-convert), so charts show with no network.

We never touch the user's global altair renderer.  Charts are built from small
pre-aggregated frames only.
"""

from __future__ import annotations

from typing import Any

__all__ = ["chart_svg", "chart_html"]


def chart_svg(chart: Any) -> str:
    """SVG text of an altair chart, rendered in-process by vl-convert (no CDN)."""
    import vl_convert as vlc

    spec = chart.to_dict()
    schema = str(spec.get("$schema", ""))
    version = None
    for v in ("v6", "v5"):
        if f"/{v}." in schema or f"/{v}/" in schema or schema.endswith(f"{v}.json"):
            version = v
    try:
        if version == "v5":
            return str(vlc.vegalite_to_svg(spec, vl_version="5.20"))
        return str(vlc.vegalite_to_svg(spec))
    except Exception as exc:  # a chart must never take its tab down
        from nbeda._html import esc

        return f"<div class='nb-flag'>chart could not be drawn: {esc(exc)}</div>"


def chart_html(chart: Any) -> str:
    return f"<div class='nb-chart'>{chart_svg(chart)}</div>"
