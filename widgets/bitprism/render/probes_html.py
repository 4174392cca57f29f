"""Static HTML of the probes: a trace's timeline, a watch's module table, a probe case (and its
exported page). Escaped text, inline styles, no scripts; the rows and words are those of
``probes_text``, the outcome colours those of ``render.vocabulary`` (through ``palette``), and
every count that wears a colour also says its word or mark, so colour is never the only cue.
"""

from __future__ import annotations

from html import escape
from typing import Any, Sequence

from .case_page import case_page
from .palette import badge_style, outcome_style, theme_css
from .probes_text import (
    EVENT_WORDS,
    firsts_lines,
    timeline_rows,
    trace_header,
    watch_header,
    watch_rows,
    window_value,
)

__all__ = ["probe_case_html", "trace_html", "watch_html"]

_BOX = (
    "font-family:ui-monospace,SFMono-Regular,Menlo,Consolas,monospace;font-size:12px;"
    "color:var(--jp-ui-font-color0,#1f2328);background:var(--jp-layout-color0,#ffffff);"
    "border:1px solid var(--jp-border-color1,#d0d7de);border-radius:6px;"
    "padding:8px 10px;display:inline-block;max-width:100%;overflow-x:auto;line-height:1.4"
)
_TH = ("text-align:left;padding:2px 6px;border-bottom:1px solid var(--jp-border-color1,#d0d7de);"
       "font-weight:600;white-space:nowrap")
_TD = "text-align:left;padding:2px 6px;white-space:nowrap"
_GAP = "padding:2px 6px;font-style:italic;opacity:0.75"
_ROLE = {"nan": "nan", "inf": "inf", "overflow": "overflow", "underflow": "underflow"}


def _badge(role: str, text: str) -> str:
    return f'<span style="{badge_style(role)}">{escape(text)}</span>'


def _first_badges(text: str) -> str:
    """The 'first' cell: one badge per event named in it."""
    if not text:
        return ""
    out = []
    for part in text.split(", "):
        role = next((k for k, w in EVENT_WORDS.items() if f"first {w}" in part), None)
        out.append(_badge(_ROLE[role], part) if role else escape(part))
    return " ".join(out)


def _cells(cols: Sequence[str], row: list[str], formats: set[str]) -> str:
    cells = []
    for name, text in zip(cols, row):
        if name == "first":
            body = _first_badges(text)
        elif name in formats and text != "·":
            body = _badge("underflow" if text.startswith("→") else "overflow", text)
        elif name in ("NaN", "Inf") and text != "·":
            body = _badge("nan" if name == "NaN" else "inf", text)
        else:
            body = escape(text)
        cells.append(f'<td style="{_TD}">{body}</td>')
    return "<tr>" + "".join(cells) + "</tr>"


def _table(cols: Sequence[str], rows: Sequence[list[str] | int], formats: set[str],
           what: str) -> str:
    head = "".join(f'<th style="{_TH}">{escape(c)}</th>' for c in cols)
    body = []
    for row in rows:
        if isinstance(row, int):
            body.append(f'<tr><td colspan="{len(cols)}" style="{_GAP}">… {row} {what}'
                        f'{"" if row == 1 else "s"} left out …</td></tr>')
        else:
            body.append(_cells(cols, row, formats))
    return (f'<table style="border-collapse:collapse;margin-top:6px"><thead><tr>{head}</tr>'
            f"</thead><tbody>{''.join(body)}</tbody></table>")


def _box(kind: str, lines: Sequence[str], firsts: Sequence[str], table: str) -> str:
    parts = [f'<div class="bitprism bitprism-{kind}" style="{_BOX}">{theme_css()}']
    parts.append(f'<div style="font-weight:600">{escape(lines[0])}</div>')
    parts += [f"<div>{escape(line)}</div>" for line in lines[1:]]
    parts += [f"<div>{_first_badges(line.split(':', 1)[0])}"
              f"{escape(':' + line.split(':', 1)[1]) if ':' in line else ''}</div>"
              if line.startswith("first ") else f"<div>{escape(line)}</div>" for line in firsts]
    parts.append(table)
    parts.append("</div>")
    return "".join(parts)


def trace_html(t: Any) -> str:
    """A trace as a self-contained HTML fragment."""
    table = ""
    if t.ops:
        cols, rows = timeline_rows(t)
        table = _table(cols, rows, {f.name for f in t.formats}, "operation")
    return _box("trace", trace_header(t), firsts_lines(t.first_events(), "trace"), table)


def watch_html(w: Any) -> str:
    """A watch as a self-contained HTML fragment."""
    from .probes_text import watch_text

    firsts = watch_text(w).split("\n")[1:]
    firsts = firsts[: firsts.index("")] if "" in firsts else firsts
    table = ""
    if w.records:
        cols, rows = watch_rows(w)
        table = _table(cols, rows, {f.name for f in w.formats}, "row")
    return _box("watch", watch_header(w), firsts, table)


def _window_html(w: Any, event: str) -> str:
    vals = w.values()
    nrows, ncols = vals.shape if vals.size else (0, 0)
    head = "".join(f'<th style="{_TH};text-align:right">{w.col + j}</th>' for j in range(ncols))
    rows = []
    for i in range(nrows):
        cells = [f'<th style="{_TH};text-align:right">{w.row + i}</th>']
        for j in range(ncols):
            text = window_value(float(vals[i, j]))
            if w.mark == (i, j):
                style = outcome_style(_ROLE[event]) or "outline:2px solid currentColor"
                cells.append(f'<td style="{_TD};text-align:right;{style};font-weight:600" '
                             f'title="the first element where the event is">{escape(text)} ◀</td>')
            else:
                cells.append(f'<td style="{_TD};text-align:right">{escape(text)}</td>')
        rows.append("<tr>" + "".join(cells) + "</tr>")
    caption = (f"{w.label}: {w.shape} {w.dtype}, rows {w.row}..{w.row + nrows - 1}, "
               f"columns {w.col}..{w.col + ncols - 1}")
    return (f'<div style="margin-top:8px"><div style="font-weight:600">{escape(caption)}</div>'
            f'<table style="border-collapse:collapse"><thead><tr><th style="{_TH}"></th>{head}'
            f"</tr></thead><tbody>{''.join(rows)}</tbody></table></div>")


def probe_case_html(case: Any, page: bool = False) -> str:
    """A probe case as an HTML fragment, or (``page=True``) the whole exported page with the
    case inside it for ``bitprism.open_case``."""
    parts = [f'<div class="bitprism bitprism-probe-case" style="{_BOX}">{theme_css()}']
    where = f" in {case.format}" if case.format else ""
    joint = ", " if case.source == "watch" else " at "
    at = joint + case.location if case.location else ""
    parts.append(f'<div style="font-weight:600">{_badge(_ROLE[case.event], EVENT_WORDS[case.event])}'
                 f"{escape(where)}: {escape(case.operation + at)}</div>")
    facts = "".join(f'<tr><th style="{_TH}">{escape(k)}</th><td style="{_TD}">{escape(v)}</td>'
                    "</tr>" for k, v in case.facts)
    parts.append(f'<table style="border-collapse:collapse;margin-top:4px">{facts}</table>')
    if not page and case.note.strip():
        parts.append(f'<div style="white-space:pre-wrap;margin-top:6px">{escape(case.note)}</div>')
    parts += [_window_html(w, case.event) for w in case.windows]
    parts.append("</div>")
    fragment = "".join(parts)
    if not page:
        return fragment
    summary = [("event", case.title), ("formats", ", ".join(case.formats))]
    return case_page(case.envelope(), fragment, summary)
