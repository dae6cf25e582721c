"""Turn an altair chart into SVG locally (vl-convert), so charts show with no network.

We never touch the user's global altair renderer.  Charts are built from small
pre-aggregated frames only.
"""

from __future__ import annotations

from typing import Any

__all__ = ["chart_svg", "chart_html"]


_CONTROL = dict.fromkeys([*range(0x00, 0x09), 0x0B, 0x0C, *range(0x0E, 0x20), 0x7F], "\ufffd")


def _clean(obj: Any) -> Any:
    """The spec with control characters in every string (keys too) replaced by U+FFFD.

    vl-convert aborts the whole process on a NUL in a label; field names and the data
    values naming them are replaced alike, so encodings still find their fields.
    """
    if isinstance(obj, str):
        return obj.translate(_CONTROL)
    if isinstance(obj, dict):
        return {_clean(k): _clean(v) for k, v in obj.items()}
    if isinstance(obj, list):
        return [_clean(v) for v in obj]
    return obj


def chart_svg(chart: Any) -> str:
    """SVG text of an altair chart, rendered in-process by vl-convert (no CDN)."""
    import vl_convert as vlc

    spec = _clean(chart.to_dict())
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
