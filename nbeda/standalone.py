"""One self-contained HTML file of a report, plus the HTML pieces the widget shares.

The file has inline CSS and inline SVG charts (drawn by vl-convert in-process);
tabs switch with CSS alone (radio buttons), so the page works with JavaScript
disabled; the only script is the inline ``onclick`` of each Copy button.  A
Content-Security-Policy forbids every network request, and the file contains no
``http(s)://`` reference at all (the SVG namespace declarations, which HTML does
not need, are removed).
"""

from __future__ import annotations

import datetime as _dt
import itertools
import re
import traceback
import uuid
from collections.abc import Callable
from typing import Any

from nbeda._html import CSS, esc
from nbeda.sections import SECTIONS, TITLES

__all__ = [
    "report_html",
    "tab_body",
    "code_panel_html",
    "status_html",
    "tabs_html",
    "offline_svg",
    "EXTRA_CSS",
]

#: CSS of the tab strip, the code panel and the status boxes (added to ``nbeda._html.CSS``).
EXTRA_CSS = """
.nbeda .nb-header { color: #333; margin: 2px 0 6px 0; }
.nbeda .nb-codepanel { position: relative; margin: 10px 0 4px 0; }
.nbeda .nb-codebar { display: flex; flex-wrap: wrap; gap: 8px; align-items: center; margin-bottom: 4px; }
.nbeda .nb-btn { font: inherit; font-size: 12px; padding: 2px 10px; border: 1px solid #9aa3ad; border-radius: 3px;
  background: #fff; cursor: pointer; }
.nbeda .nb-btn:hover { background: #eef1f4; }
.nbeda .nb-btn[disabled] { color: #888; cursor: default; }
.nbeda .nb-hint { color: #555; font-size: 12px; }
.nbeda .nb-hint code { background: #f1f3f5; padding: 0 3px; }
.nbeda .nb-hint.nb-hint-strong { color: #7a4b00; font-weight: 600; }
.nbeda textarea.nb-copysrc { position: absolute; left: -10000px; top: 0; width: 2px; height: 2px; opacity: 0; }
.nbeda .nb-status { padding: 10px 12px; border: 1px solid #d0d4da; background: #f7f8fa; margin: 6px 0; }
.nbeda .nb-status.nb-error { border-color: #d9a3a3; background: #fbf3f3; color: #6d1616; }
.nbeda .nb-status pre { white-space: pre-wrap; font-size: 11px; max-height: 240px; overflow: auto; }
.nbeda .nb-spinner { display: inline-block; width: 12px; height: 12px; margin-right: 8px; vertical-align: -1px;
  border: 2px solid #c4ccd4; border-top-color: #3b6ea8; border-radius: 50%; animation: nb-spin 0.8s linear infinite; }
@keyframes nb-spin { to { transform: rotate(360deg); } }
.nbeda .nb-tabs { position: relative; }
.nbeda .nb-tabs > input.nb-radio { position: absolute; opacity: 0; width: 1px; height: 1px; margin: 0; }
.nbeda .nb-tabs > label.nb-tablabel { display: inline-block; padding: 5px 14px; border: 1px solid #d0d4da;
  border-bottom: none; background: #f4f6f8; cursor: pointer; margin-right: -1px; user-select: none; }
.nbeda .nb-tabs > input.nb-radio:checked + label.nb-tablabel { background: #fff; font-weight: 600;
  box-shadow: inset 0 2px 0 #3b6ea8; }
.nbeda .nb-tabs > input.nb-radio:focus-visible + label.nb-tablabel { outline: 2px solid #3b6ea8; }
.nbeda .nb-panels { border: 1px solid #d0d4da; padding: 8px 12px; }
.nbeda .nb-panel { display: none; }
.nbeda .nb-panel > h3 { margin: 4px 0 8px 0; font-size: 15px; }
.nbeda .nb-options { color: #555; font-size: 12px; }
.nbeda iframe.nb-iframe { display: block; max-width: 100%; border: 0; }
"""

_TAB_IDS = itertools.count()


# ----------------------------------------------------------------- pieces
def offline_svg(markup: str, prefix: str) -> str:
    """Make chart SVG safe to place many times in one page, with no URL in it.

    Drops the ``xmlns`` declarations (inline SVG in HTML does not need them) and
    prefixes every ``id`` (vl-convert names clip paths ``clip1``, ``clip2``… in each
    chart; duplicates across charts would make a hidden tab's clip path win).
    """
    out = re.sub(r'\s+xmlns(?::\w+)?="https?://[^"]*"', "", markup)
    ids = set(re.findall(r'\sid="([^"]+)"', out))
    for name in sorted(ids, key=len, reverse=True):
        new = f"{prefix}-{name}"
        out = out.replace(f'id="{name}"', f'id="{new}"')
        out = out.replace(f"url(#{name})", f"url(#{new})")
        out = out.replace(f'href="#{name}"', f'href="#{new}"')
    return out


def _copy_js() -> str:
    # Clipboard API first; without permission (or outside a secure context) select a
    # hidden textarea and use execCommand('copy'); if even that fails, select the code
    # so that Ctrl+C / Cmd+C copies it.
    return (
        "(function(b){var p=b.closest('.nb-codepanel');var t=p.querySelector('textarea.nb-copysrc');"
        "var s=t.value;"
        "function done(ok){b.textContent=ok?'Copied':'Press Ctrl+C';"
        "if(!ok){try{var r=document.createRange();r.selectNodeContents(p.querySelector('pre.nb-code'));"
        "var g=window.getSelection();g.removeAllRanges();g.addRange(r);}catch(e){}}"
        "setTimeout(function(){b.textContent='Copy';},1800);}"
        "function legacy(){var ok=false;try{t.focus({preventScroll:true});t.select();"
        "t.setSelectionRange(0,s.length);ok=document.execCommand('copy');}catch(e){ok=false;}"
        "try{t.blur();}catch(e){}done(ok);}"
        "try{if(navigator.clipboard&&window.isSecureContext){navigator.clipboard.writeText(s)"
        ".then(function(){done(true);},legacy);}else{legacy();}}catch(e){legacy();}"
        "})(this)"
    )


def _insert_js() -> str:
    # Inserting a cell needs the notebook application.  The classic Notebook (and
    # nbclassic) expose it as window.Jupyter; JupyterLab / Notebook 7 only when started
    # with exposeAppInBrowser (window.jupyterapp).  Anywhere else: copy the code instead,
    # say how to paste it into a new cell, and point to the magic, which always works.
    return (
        "(function(b){var p=b.closest('.nb-codepanel');var s=p.querySelector('textarea.nb-copysrc').value;"
        "var ok=false;"
        "try{var J=window.Jupyter;if(J&&J.notebook&&J.notebook.insert_cell_below){"
        "var c=J.notebook.insert_cell_below('code');c.set_text(s);ok=true;}}catch(e){}"
        "if(!ok){try{var a=window.jupyterapp;var w=a&&a.shell&&a.shell.currentWidget;"
        "if(w&&w.content&&w.content.activeCell&&a.commands.hasCommand('notebook:insert-cell-below')){"
        "a.commands.execute('notebook:insert-cell-below').then(function(){"
        "var c=a.shell.currentWidget.content.activeCell;c.model.sharedModel.setSource(s);});ok=true;}}"
        "catch(e){ok=false;}}"
        "if(ok){b.textContent='Inserted';setTimeout(function(){b.textContent='Insert below';},1800);}"
        "else{var k=p.querySelector('button.nb-copy');if(k){k.click();}"
        "b.textContent='Copied instead: add a cell below (Esc, B) and paste';"
        "var h=p.querySelector('.nb-hint');if(h){h.classList.add('nb-hint-strong');}"
        "setTimeout(function(){b.textContent='Insert below';},6000);}"
        "})(this)"
    )


def code_panel_html(code: str, tab: str, frame_name: str = "df", *, live: bool = True) -> str:
    """The code box of one tab: the code, a Copy button and (in a live notebook) Insert below.

    ``live=False`` (standalone file, saved output) leaves out the notebook affordances.
    """
    copy = f'<button type="button" class="nb-btn nb-copy" title="Copy this code" onclick="{esc(_copy_js())}">Copy</button>'
    if live:
        insert = (
            '<button type="button" class="nb-btn nb-insert" title="Insert this code as a new cell below"'
            f' onclick="{esc(_insert_js())}">Insert below</button>'
        )
        hint = (
            f"<span class='nb-hint'>or run <code>%eda {esc(frame_name)} --code {esc(tab)}</code>"
            " to get it as a new cell below (always works)</span>"
        )
    else:
        insert = ""
        hint = (
            f"<span class='nb-hint'>plain pandas: runs on its own with the data frame named "
            f"<code>{esc(frame_name)}</code></span>"
        )
    return (
        f"<div class='nbeda nb-codepanel' data-tab='{esc(tab)}'>"
        f"<div class='nb-codebar'><b>Code</b>{copy}{insert}{hint}</div>"
        f"<pre class='nb-code'>{esc(code)}</pre>"
        f"<textarea class='nb-copysrc' readonly tabindex='-1' aria-hidden='true'>{esc(code)}</textarea>"
        "</div>"
    )


def status_html(kind: str, title: str, exc: BaseException | None = None, message: str = "") -> str:
    """A status box: ``kind`` is ``computing``, ``unavailable`` or ``error``."""
    if kind == "computing":
        what = esc(message) if message else f"Computing {esc(title)}…"
        return f"<div class='nbeda nb-status'><span class='nb-spinner'></span>{what}</div>"
    if kind == "unavailable":
        text = message or (str(exc) if exc is not None else "")
        return (
            f"<div class='nbeda nb-status nb-unavailable'><b>{esc(title)}</b> is coming in a later release."
            + (f"<div class='nb-hint'>{esc(text)}</div>" if text else "")
            + "</div>"
        )
    if kind == "pending":
        return f"<div class='nbeda nb-status nb-pending'>{esc(message or title)}</div>"
    tb = "".join(traceback.format_exception(exc)) if exc is not None else ""
    kind_name = type(exc).__name__ if exc is not None else "Error"
    return (
        f"<div class='nbeda nb-status nb-error'><b>{esc(title)} could not be computed</b> — "
        f"{esc(kind_name)}: {esc(exc if exc is not None else message)}"
        "<div class='nb-hint'>The other tabs are unaffected. Please report this with the traceback.</div>"
        f"<details><summary>traceback</summary><pre>{esc(tb)}</pre></details></div>"
    )


def tab_body(report: Any, name: str, *, compute: bool = True, svg_prefix: str | None = None) -> tuple[str, str]:
    """``(state, html)`` of one tab's results (without the code panel).

    ``state`` is ``done``, ``unavailable``, ``error`` or (``compute=False`` and not yet
    computed) ``pending``.
    """
    title = TITLES[name]
    if not compute and not report_has(report, name):
        return "pending", status_html(
            "pending",
            title,
            message=(
                f"{title} was not computed when this copy was made. Open it in a live notebook, "
                "or write every tab to one file with df.eda.report().to_html('report.html')."
            ),
        )
    try:
        result = report.section(name)
    except NotImplementedError as exc:
        return "unavailable", status_html("unavailable", title, exc)
    except Exception as exc:
        return "error", status_html("error", title, exc)
    try:
        body = result.body_html()
    except Exception as exc:
        return "error", status_html("error", title, exc)
    return "done", offline_svg(body, svg_prefix or f"nb{next(_TAB_IDS)}-{name}")


def report_has(report: Any, name: str) -> bool:
    """Whether the report already computed (cached) the default view of a tab."""
    cache = getattr(report, "_cache", {})
    return any(key[0] == name for key in cache)


def _code_block(report: Any, name: str, *, compute: bool, live: bool) -> str:
    if not compute and not report_has(report, name):
        return ""
    try:
        code = report.code(name)
    except NotImplementedError:
        return ""
    except Exception as exc:
        return f"<div class='nbeda nb-flag'>code unavailable: {esc(type(exc).__name__)}: {esc(exc)}</div>"
    return code_panel_html(code, name, report.frame_name, live=live)


def tabs_html(panels: dict[str, str], *, group: str, initial: str) -> str:
    """CSS-only tabs (radio buttons + labels): works with no script at all."""
    inputs = []
    sections = []
    rules = []
    for name, body in panels.items():
        rid = f"{group}-{name}"
        checked = " checked" if name == initial else ""
        inputs.append(
            f"<input type='radio' class='nb-radio' name='{group}' id='{rid}'{checked}>"
            f"<label class='nb-tablabel' for='{rid}'>{esc(TITLES.get(name, name))}</label>"
        )
        sections.append(f"<section class='nb-panel' id='{rid}-panel' data-tab='{esc(name)}'>{body}</section>")
        rules.append(f"#{rid}:checked ~ .nb-panels > #{rid}-panel {{ display: block; }}")
    return (
        f"<style>{' '.join(rules)}</style>"
        f"<div class='nb-tabs' id='{group}'>{''.join(inputs)}"
        f"<div class='nb-panels'>{''.join(sections)}</div></div>"
    )


def _options_line(report: Any) -> str:
    o = report.options
    parts = []
    if o.roles:
        parts.append("roles " + ", ".join(f"{k}={v}" for k, v in o.roles.items()))
    if o.by is not None:
        parts.append(f"by {o.by}")
    if o.target is not None:
        parts.append(f"target {o.target}")
    if o.sample:
        parts.append(f"sample {o.sample:,} rows")
    parts.append(f"confidence {o.confidence:g}")
    parts.append(f"seed {o.seed}")
    return "Options: " + "; ".join(parts)


def _safe_header(report: Any) -> str:
    try:
        return str(report.header_text())
    except Exception as exc:  # the header must never take the report down
        return f"{report.frame.shape[0]:,} rows × {report.frame.shape[1]:,} columns (header: {type(exc).__name__})"


def report_fragment(
    report: Any,
    *,
    compute: bool = True,
    live: bool = False,
    bodies: dict[str, str] | None = None,
    group: str | None = None,
    progress: Callable[[int, int, str], None] | None = None,
) -> str:
    """The report as one ``<div class="nbeda">`` with CSS-only tabs (no ``<html>`` wrapper).

    ``compute=False`` shows only the tabs already computed (the widget's saved fallback);
    ``bodies`` supplies ready tab bodies by name.
    """
    group = group or f"nbr{uuid.uuid4().hex[:8]}"
    panels = {}
    for k, name in enumerate(SECTIONS):
        if progress is not None:
            progress(k, len(SECTIONS), TITLES[name])
        if bodies and name in bodies:
            body = bodies[name]
        else:
            _, body = tab_body(report, name, compute=compute, svg_prefix=f"{group}-{name}")
        body = f"<h3>{esc(TITLES[name])}</h3>{body}" + _code_block(report, name, compute=compute, live=live)
        panels[name] = body
    if progress is not None:
        progress(len(SECTIONS), len(SECTIONS), "done")
    return (
        f"<style>{CSS}{EXTRA_CSS}</style><div class='nbeda nb-report'>"
        f"<div class='nb-header'>{esc(_safe_header(report))}</div>"
        f"<div class='nb-options'>{esc(_options_line(report))}</div>"
        f"{tabs_html(panels, group=group, initial=report.initial_tab)}</div>"
    )


def report_html(
    report: Any,
    *,
    title: str | None = None,
    source: str | None = None,
    progress: Callable[[int, int, str], None] | None = None,
) -> str:
    """ONE self-contained HTML document of the whole report (all seven tabs computed).

    No external resource of any kind: inline CSS, inline SVG, tab switching in CSS,
    and a Content-Security-Policy that blocks every network request.
    """
    from nbeda import __version__

    body = report_fragment(report, compute=True, live=False, group="nbr", progress=progress)
    heading = title or "Exploratory report"
    src = f"<div class='nb-options'>Data: {esc(source)}</div>" if source else ""
    stamp = _dt.datetime.now(_dt.UTC).strftime("%Y-%m-%d %H:%M UTC")
    return (
        "<!DOCTYPE html>\n<html lang='en'>\n<head>\n<meta charset='utf-8'>\n"
        "<meta http-equiv='Content-Security-Policy' content=\"default-src 'none'; "
        "style-src 'unsafe-inline'; script-src 'unsafe-inline'; img-src data:; font-src data:\">\n"
        "<meta name='viewport' content='width=device-width, initial-scale=1'>\n"
        f"<title>{esc(heading)}</title>\n"
        "<style>body { margin: 16px 24px; background: #fff; color: #1d232a; }"
        " .nbeda h1 { font-size: 20px; margin: 0 0 4px 0; } footer { color: #777; font-size: 11px; margin-top: 14px; }"
        "</style>\n</head>\n<body>\n"
        f"<div class='nbeda'><h1>{esc(heading)}</h1>{src}</div>\n{body}\n"
        f"<footer class='nbeda'>Made with nbeda {esc(__version__)} on {esc(stamp)}. Every table can be "
        "rebuilt with the plain pandas code shown under it.</footer>\n</body>\n</html>\n"
    )
