"""Static HTML for a ``ScanResult``: escaped text, inline CSS, no scripts.

Counts of an outcome wear that outcome's colour from ``render.vocabulary`` (overflow,
underflow to zero, subnormal; the input's own NaN and Inf too); the column and the badge say
the word, so colour is never the only cue. The box takes the page's own colours (JupyterLab's
theme variables), so it reads in the light and the dark theme."""

from __future__ import annotations

from html import escape
from typing import Any

from .palette import TABLE_BOX, TABLE_TD, TABLE_TH, badge_style, theme_css
from .scan_text import COLUMNS, block_nan_note, fmt_count, scan_header, scan_rows
from .vocabulary import OUTCOMES

__all__ = ["scan_html", "scan_summary_html"]

# table column -> palette badge
_ROLE = {"overflow": "overflow", "underflow": "underflow", "subnormal": "subnormal", "nan": "nan",
         "inf": "inf", "zero": "zero"}

_BOX, _TH, _TD = TABLE_BOX, TABLE_TH, TABLE_TD


def _badge(kind: str, text: str) -> str:
    return f'<span style="{badge_style(_ROLE[kind])}">{escape(text)}</span>'


def _cell(kind: str | None, text: str, nonzero: bool) -> str:
    body = _badge(kind, text) if kind and nonzero else escape(text)
    return f'<td style="{_TD}">{body}</td>'


def scan_html(result: Any) -> str:
    """The result as a self-contained HTML fragment."""
    head = scan_header(result)
    badges = " ".join(
        _badge(kind, f"{label} {fmt_count(n, result.size)}") for kind, label, n in head.classes if n
    )
    parts = [f'<div class="bitprism bitprism-scan" style="{_BOX}">{theme_css()}']
    parts.append(f'<div style="font-weight:600">{escape(head.title)}</div>')
    parts.append(f"<div>{escape(head.extrema)}</div>")
    if badges:
        parts.append(f'<div style="margin:2px 0">{badges}</div>')
    for line in (head.exponents, head.options):
        if line is not None:
            parts.append(f"<div>{escape(line)}</div>")
    parts.append('<table style="border-collapse:collapse;margin-top:6px">')
    parts.append(
        "<thead><tr>"
        + "".join(
            f'<th style="{_TH}{";text-align:left" if i == 0 else ""}">{escape(c)}</th>'
            for i, c in enumerate(COLUMNS)
        )
        + "</tr></thead><tbody>"
    )
    kinds = (None, "overflow", "underflow", "subnormal", None)
    for f, row in zip(result.formats, scan_rows(result)):
        counts = (None, f.overflow, f.underflow, f.subnormal, f.exact)
        cells = [f'<td style="{_TD};text-align:left;font-weight:600">{escape(row[0])}</td>']
        for i, text in enumerate(row[1:], start=1):
            kind = kinds[i] if i < len(kinds) else None
            cells.append(_cell(kind, text, bool(counts[i]) if i < len(counts) else False))
        parts.append("<tr>" + "".join(cells) + "</tr>")
    parts.append("</tbody></table>")
    note = block_nan_note(result)
    if note is not None:
        parts.append(f'<div style="margin-top:4px">{escape(note)}</div>')
    parts.append("</div>")
    return "".join(parts)


_ITEM = "display:inline-block;white-space:nowrap;margin-right:10px"
_WRAP_BOX = _BOX.replace("display:inline-block;", "display:block;box-sizing:border-box;")


def scan_summary_html(result: Any) -> str:
    """The same figures as ``scan_html`` laid out to wrap: each format on its own line of
    items ("overflow 3 (0.1%)") that break between items, so a narrow column (TensorPrism in a
    468-px output) shows all of it with no table to cut off or scroll."""
    head = scan_header(result)
    size = result.size
    badges = " ".join(
        _badge(kind, f"{label} {fmt_count(n, size)}") for kind, label, n in head.classes if n
    )
    parts = [f'<div class="bitprism bitprism-scan bitprism-scan-summary" style="{_WRAP_BOX}">'
             f"{theme_css()}"]
    parts.append(f'<div style="font-weight:600">{escape(head.title)}</div>')
    parts.append(f"<div>{escape(head.extrema)}</div>")
    if badges:
        parts.append(f'<div style="margin:2px 0;line-height:1.8">{badges}</div>')
    for f, row in zip(result.formats, scan_rows(result)):
        items = [f'<span style="{_ITEM};font-weight:600">{escape(row[0])}</span>']
        counts = ((OUTCOMES["overflow"].name, "overflow", f.overflow, row[1]),
                  (OUTCOMES["underflow"].name, "underflow", f.underflow, row[2]),
                  (OUTCOMES["subnormal"].name, "subnormal", f.subnormal, row[3]),
                  ("exact", None, f.exact, row[4]))
        for label, kind, n, text in counts:
            body = _badge(kind, f"{label} {text}") if kind and n else escape(f"{label} {text}")
            items.append(f'<span style="{_ITEM}">{body}</span>')
        for i in range(5, len(COLUMNS)):
            if row[i] != "-":
                items.append(f'<span style="{_ITEM}">{escape(COLUMNS[i])} {escape(row[i])}</span>')
        parts.append(f'<div style="margin-top:4px;line-height:1.7">{"".join(items)}</div>')
    for line in (head.exponents, head.options):
        if line is not None:
            parts.append(f'<div style="overflow-wrap:anywhere">{escape(line)}</div>')
    note = block_nan_note(result)
    if note is not None:
        parts.append(f'<div style="margin-top:4px">{escape(note)}</div>')
    parts.append("</div>")
    return "".join(parts)
