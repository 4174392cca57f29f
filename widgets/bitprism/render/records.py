"""Records shown as label/value rows: an MX conversion and a scale advice.

Text: one line per row, labels padded to the longest. HTML: a two-column table, escaped.
"""

from __future__ import annotations

import html
from typing import Any, Sequence

from .scaling_html import sweep_html
from .scaling_text import sweep_marks, sweep_text

__all__ = [
    "advice_html",
    "advice_rows",
    "advice_text",
    "mx_html",
    "mx_rows",
    "mx_text",
    "rows_html",
    "rows_text",
]

Rows = Sequence[tuple[str, str]]


def rows_text(rows: Rows) -> str:
    width = max(len(k) for k, _ in rows)
    return "\n".join(f"{k:<{width}}  {v}" for k, v in rows)


def rows_html(rows: Rows) -> str:
    return "".join(
        f"<tr><th style='text-align:left'>{html.escape(k)}</th><td>{html.escape(v)}</td></tr>"
        for k, v in rows
    )


# ----- MXResult -------------------------------------------------------------------------------


def mx_rows(result: Any) -> list[tuple[str, str]]:
    short = (
        f"yes, {result.short_last_block} of {result.block_size} elements"
        if result.short_last_block
        else "no"
    )
    return [
        ("format", result.format.describe()),
        ("shape", "x".join(str(d) for d in result.shape) or "()"),
        ("axis", str(result.axis)),
        ("blocks", f"{result.blocks} of {result.block_size}"),
        ("short last block", short),
        ("rounding", result.rounding),
        ("clamped to max normal", str(result.clamped)),
        ("flushed to zero", str(result.flushed)),
        ("NaN scale (0xFF) blocks", str(result.nan_blocks)),
    ]


def mx_text(result: Any) -> str:
    return rows_text(mx_rows(result))


def mx_html(result: Any) -> str:
    return f"<table class='bitprism-mx'>{rows_html(mx_rows(result))}</table>"


# ----- ScaleAdvice ----------------------------------------------------------------------------

_OBJECTIVE_WORDS = {
    "sqnr": "the highest SQNR among the scales that make no finite value NaN or Inf",
    "no_overflow": "the highest SQNR among the scales that overflow nothing",
    "amax": "the amax rule: amax x scale <= max finite / 2^margin",
}


def _scale_text(advice: Any) -> str:
    if advice.scale is None:
        ex = advice.exponents
        span = f"2^{int(ex.min())} .. 2^{int(ex.max())}" if ex is not None and ex.size else "-"
        where = f"along axis {advice.axis}" + (
            f", blocks of {advice.block_size}" if advice.granularity == "block" else "")
        return f"{0 if ex is None else ex.size:,} per-{advice.granularity} scales {span} ({where})"
    scale = f"{advice.scale!r}"
    if advice.exponent is not None:
        scale += f" = 2^{advice.exponent}"
    return scale


def advice_rows(advice: Any) -> list[tuple[str, str]]:
    rows = [
        ("format", f"{advice.format.name} (max finite {float(advice.format.max_finite):g})"),
        ("objective", f"{advice.objective}: {_OBJECTIVE_WORDS[advice.objective]}"),
        ("margin", f"{advice.margin} (target amax {float(advice.target):g})"),
        ("amax", f"{advice.amax!r}"),
        ("scale", _scale_text(advice)),
    ]
    if advice.scale is not None:
        rows.append(("amax x scale", f"{advice.amax * advice.scale!r}"))
    if advice.sqnr_db is not None:
        rows.append(("SQNR", f"{advice.sqnr_db:.4g} dB at the choice"))
    if advice.nan_count or advice.inf_count:
        counts = f"{advice.nan_count} NaN, {advice.inf_count} Inf (left as they are)"
        rows.append(("not finite", counts))
    rows.append(("advice", advice.message))
    rows += [("note", n) for n in advice.notes]
    return rows


def advice_text(advice: Any) -> str:
    parts = [rows_text(advice_rows(advice))]
    if advice.sweep is not None:
        parts.append(sweep_text(advice.sweep, sweep_marks(advice)))
    if advice.before is not None:
        parts.append("-- without scaling --\n" + str(advice.before))
    if advice.after is not None:
        label = f"multiplied by {advice.scale!r}" if advice.scale is not None else (
            "multiplied by the per-group scales (SQNR and max abs err: scales divided out)")
        parts.append(f"-- {label} --\n" + str(advice.after))
    return "\n\n".join(parts)


def advice_html(advice: Any) -> str:
    out = f"<div class='bitprism-advice'><table>{rows_html(advice_rows(advice))}</table>"
    if advice.sweep is not None:
        out += sweep_html(advice.sweep, sweep_marks(advice))
    if advice.before is not None and advice.after is not None:
        label = f"multiplied by {advice.scale!r}" if advice.scale is not None else (
            "multiplied by the per-group scales (SQNR, max abs err: scales divided out)")
        out += (
            "<table><tr><th>without scaling</th>"
            f"<th>{html.escape(label)}</th></tr>"
            f"<tr><td style='vertical-align:top'>{advice.before.to_html()}</td>"
            f"<td style='vertical-align:top'>{advice.after.to_html()}</td></tr></table>"
        )
    return out + "</div>"
