"""Plain-text rendering of a ``ScanResult``: a header about the input and one row per format.

Pure function of the result (no I/O, no widgets); the HTML twin is ``scan_html``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

from .vocabulary import OUTCOMES, UNITS

__all__ = [
    "COLUMNS",
    "ScanHeader",
    "block_nan_note",
    "fmt_count",
    "fmt_float",
    "header_lines",
    "scan_header",
    "scan_rows",
    "scan_text",
]

COLUMNS = (
    "format",
    OUTCOMES["overflow"].name,
    OUTCOMES["underflow"].name,
    OUTCOMES["subnormal"].name,
    "exact",
    "max abs err",
    "rel p50",
    "rel p99",
    "rel max",
    f"{UNITS['ulp']} mean",
    f"{UNITS['ulp']} max",
    "SQNR dB",
)


def fmt_float(v: float | None, digits: int = 3) -> str:
    """Short text for a figure: '-' when not computed, 'inf', or %g with ``digits`` digits."""
    if v is None:
        return "-"
    if math.isnan(v):
        return "nan"
    if math.isinf(v):
        return "inf" if v > 0 else "-inf"
    return f"{v:.{digits}g}"


def fmt_count(n: int | None, size: int) -> str:
    """'1,234 (5.67%)', '0', or '-' when not computed."""
    if n is None:
        return "-"
    if n == 0 or size == 0:
        return f"{n:,}"
    pct = 100.0 * n / size
    share = f"{pct:.3g}%" if pct >= 0.001 else "<0.001%"
    return f"{n:,} ({share})"


def scan_rows(result: Any) -> list[list[str]]:
    """The table cells as text, one list per format (same order as ``COLUMNS``)."""
    rows = []
    for f in result.formats:
        rows.append(
            [
                f.name,
                fmt_count(f.overflow, f.size),
                fmt_count(f.underflow, f.size),
                fmt_count(f.subnormal, f.size),
                fmt_count(f.exact, f.size),
                fmt_float(f.max_abs_error),
                fmt_float(f.rel_error_p50),
                fmt_float(f.rel_error_p99),
                fmt_float(f.rel_error_max),
                fmt_float(f.ulp_error_mean),
                fmt_float(f.ulp_error_max),
                fmt_float(f.sqnr_db, 4),
            ]
        )
    return rows


@dataclass(frozen=True)
class ScanHeader:
    """The facts above a scan's table, in words: shared by the text and the HTML.

    ``classes``: (palette role, label, count) of the input's own NaN, Inf, zero and subnormal
    elements; the other fields are whole lines (without indentation)."""

    title: str
    extrema: str
    classes: tuple[tuple[str, str, int], ...]
    exponents: str | None
    options: str


def scan_header(result: Any) -> ScanHeader:
    shape = "x".join(str(s) for s in result.shape) or "scalar"
    h = result.histogram
    exponents = None
    if h.exponents:
        exponents = f"binary exponents {h.exponents[0]} .. {h.exponents[-1]}"
    elif not h.collected:
        exponents = "binary exponents not collected (a counts-only scan leaves them out)"
    opts = f"{result.rounding}, overflow={result.overflow}, subnormals={result.subnormals}"
    if result.scale is not None:
        opts += f", scale={result.scale!r} (errors against the scaled data)"
    opts += f", quantiles={result.quantiles}"
    return ScanHeader(
        title=f"scan of {result.dtype} [{shape}], {result.size:,} elements",
        extrema=f"min {fmt_float(result.min, 6)}  max {fmt_float(result.max, 6)}  "
        f"|max| {fmt_float(result.absmax, 6)}",
        classes=(("nan", "NaN", h.nan), ("inf", "Inf", h.inf), ("zero", "zero", h.zero),
                 ("subnormal", "subnormal", h.subnormal)),
        exponents=exponents,
        options=opts,
    )


def header_lines(result: Any) -> list[str]:
    head = scan_header(result)
    classes = "  ".join(f"{label} {fmt_count(n, result.size)}" for _, label, n in head.classes)
    lines = [head.title, f"  {head.extrema}", f"  {classes}"]
    if head.exponents is not None:
        lines.append(f"  {head.exponents}")
    lines.append(f"  {head.options}")
    return lines


def block_nan_note(result: Any) -> str | None:
    """One line on the block formats' finite values lost to a NaN/Inf in their block (counted
    apart from overflow), or None when the scan has no block formats."""
    rows = [f for f in result.formats if f.block_nan is not None]
    if not rows:
        return None
    parts = ", ".join(f"{f.name} {fmt_count(f.block_nan, f.size)}" for f in rows)
    return f"block NaN (finite values lost to a NaN/Inf in their block, not overflow): {parts}"


def scan_text(result: Any) -> str:
    """The result as an aligned plain-text table (and the block-NaN note, if any)."""
    rows = scan_rows(result)
    cells = [list(COLUMNS)] + rows
    widths = [max(len(r[i]) for r in cells) for i in range(len(COLUMNS))]
    out = header_lines(result)
    for j, r in enumerate(cells):
        line = "  ".join(
            (c.ljust(widths[i]) if i == 0 else c.rjust(widths[i])) for i, c in enumerate(r)
        )
        out.append(line.rstrip())
        if j == 0:
            out.append("  ".join("-" * w for w in widths))
    note = block_nan_note(result)
    if note is not None:
        out.append(note)
    return "\n".join(out)
