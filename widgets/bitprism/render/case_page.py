"""The exported case page: one self-contained HTML file (no network, no external files) with the
static view, the note, a summary and the case itself as a JSON data block.

``ui/case_envelope.py`` reads the case back from the block whose id is ``CASE_ELEMENT_ID``.
"""

from __future__ import annotations

import json
from html import escape
from typing import Any, Mapping, Sequence

__all__ = ["CASE_ELEMENT_ID", "case_page"]

CASE_ELEMENT_ID = "bitprism-case"  # id of the <script type="application/json"> data block

_PAGE_CSS = """
body{font-family:system-ui,-apple-system,'Segoe UI',sans-serif;margin:2em auto;max-width:70em;
color:#1d1d24;background:#fff;padding:0 1em}
h1{font-size:1.3em;margin:0 0 .4em}
.bitprism-note{white-space:pre-wrap;border-left:4px solid #6f51b4;padding:.5em 1em;
background:#f6f3fc;margin:1em 0}
.bitprism-meta{border-collapse:collapse;font-size:.9em;margin:1em 0}
.bitprism-meta th{text-align:left;padding:.15em 1em .15em 0;color:#555;font-weight:600}
.bitprism-meta td{padding:.15em 0;font-family:ui-monospace,Menlo,Consolas,monospace}
.bitprism-view{overflow-x:auto;margin:1em 0}
footer{color:#666;font-size:.8em;margin-top:2em}
"""


def _script_safe_json(case: Mapping[str, Any]) -> str:
    """Case JSON for a ``<script type="application/json">`` block: ``</`` and ``<!--`` cannot
    end or comment the block because every ``<`` (and ``>``, ``&``) is a JSON unicode escape."""
    text = json.dumps(case, indent=1, ensure_ascii=False, allow_nan=False)
    return text.replace("<", "\\u003c").replace(">", "\\u003e").replace("&", "\\u0026")


def case_page(case: Mapping[str, Any], view_html: str, summary: Sequence[tuple[str, str]]) -> str:
    """One self-contained page: the view, the note, a summary, and the case as a data block."""
    note = str(case.get("note", ""))
    versions = case.get("versions", {})
    rows = list(summary) + [
        ("bitprism", str(versions.get("bitprism", ""))),
        ("saved (UTC)", str(case.get("created", ""))),
    ]
    meta = "".join(
        f"<tr><th>{escape(k)}</th><td>{escape(v)}</td></tr>" for k, v in rows
    )
    note_html = (
        f'<div class="bitprism-note">{escape(note)}</div>' if note.strip() else ""
    )
    title = f"bitprism {case.get('kind', '')} case"
    return (
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
        f"<title>{escape(title)}</title>\n<style>{_PAGE_CSS}</style>\n</head>\n<body>\n"
        f"<h1>{escape(title)}</h1>\n{note_html}\n"
        f'<table class="bitprism-meta">{meta}</table>\n'
        f'<div class="bitprism-view">{view_html}</div>\n'
        "<footer>Reopen this view with <code>bitprism.open_case(&quot;this-page.html&quot;)"
        "</code>; the case is stored in this page as JSON data.</footer>\n"
        f'<script type="application/json" id="{CASE_ELEMENT_ID}">\n'
        f"{_script_safe_json(case)}\n</script>\n</body>\n</html>\n"
    )
