"""Static HTML of the scale-choice results: escaped text, inline CSS, no scripts.

The same cells as ``scaling_text``, in the scan table's box (JupyterLab's theme variables, so
it reads in the light and the dark theme). Counts of an outcome wear that outcome's badge
from ``render.vocabulary`` when they are not zero; the marked row of a sweep (the choice) is
bold and says so in its last cell, so colour is never the only cue.
"""

from __future__ import annotations

from html import escape
from typing import Any, Sequence

from .palette import TABLE_BOX, TABLE_TD, TABLE_TH, badge_style, theme_css
from .scaling_text import (
    COMPARISON_COLUMNS,
    REPLAY_COLUMNS,
    SWEEP_COLUMNS,
    comparison_cells,
    comparison_header,
    replay_cells,
    replay_header,
    replay_steps,
    sweep_cells,
    sweep_header,
    sweep_window,
)

__all__ = ["replay_html", "scaling_comparison_html", "sweep_html"]

_BOX, _TH, _TD = TABLE_BOX, TABLE_TH, TABLE_TD


def _table(
    columns: Sequence[str], rows: Sequence[Sequence[str]], badges: dict[int, str],
    bold: Sequence[bool] | None = None,
) -> str:
    """A table; column ``i`` in ``badges`` wears that outcome badge where its count is not 0."""
    head = "".join(
        f'<th style="{_TH}{";text-align:left" if i == 0 else ""}">{escape(c)}</th>'
        for i, c in enumerate(columns)
    )
    out = [f'<table style="border-collapse:collapse;margin-top:6px"><thead><tr>{head}</tr></thead><tbody>']
    for r, row in enumerate(rows):
        weight = ";font-weight:600" if bold is not None and bold[r] else ""
        cells = []
        for i, text in enumerate(row):
            align = ";text-align:left" if i == 0 else ""
            body = escape(text)
            if i in badges and text not in ("0", "-", ""):
                body = f'<span style="{badge_style(badges[i])}">{body}</span>'
            cells.append(f'<td style="{_TD}{align}{weight}">{body}</td>')
        out.append("<tr>" + "".join(cells) + "</tr>")
    out.append("</tbody></table>")
    return "".join(out)


def _box(kind: str, lines: Sequence[str], table: str) -> str:
    bold = ' style="font-weight:600"'
    head = "".join(
        f"<div{bold if i == 0 else ''}>{escape(line)}</div>" for i, line in enumerate(lines)
    )
    return f'<div class="bitprism bitprism-{kind}" style="{_BOX}">{theme_css()}{head}{table}</div>'


def sweep_html(sweep: Any, marks: dict[int, str] | None = None) -> str:
    """The sweep (its rows as ``sweep_text`` picks them) as an HTML fragment."""
    known = {int(e) for e in sweep.exponents}
    marks = {k: v for k, v in (marks or {}).items() if k in known}
    ks = sweep_window(sweep, marks)
    rows = sweep_cells(sweep, ks, marks)
    chosen = [m.startswith("chosen") for m in (marks.get(k, "") for k in ks)]
    badges = {1: "overflow", 2: "underflow", 3: "subnormal", 4: "nan"}
    return _box("sweep", [sweep_header(sweep)], _table(SWEEP_COLUMNS, rows, badges, chosen))


def scaling_comparison_html(c: Any) -> str:
    badges = {5: "overflow", 6: "underflow", 7: "subnormal", 8: "nan"}
    lines = comparison_header(c) + [f"{r.granularity}: {r.rule}" for r in c.rows if r.granularity != "none"]
    lines += [f"note: {n}" for n in c.notes]
    return _box("scaling", lines, _table(COMPARISON_COLUMNS, comparison_cells(c), badges))


def replay_html(r: Any) -> str:
    steps = replay_steps(r)
    badges = {3: "overflow", 4: "underflow", 5: "nan"}
    return _box("replay", [replay_header(r)], _table(REPLAY_COLUMNS, replay_cells(r, steps), badges))
