"""Plain-text rendering of a ``ScanResult``: a header about the input and one row per format.

Pure function of the result (no I/O, no widgets); the HTML twin is ``scan_html``.
"""

from __future__ import annotations

import math
from typing import Any

__all__ = ["fmt_count", "fmt_float", "scan_rows", "scan_text"]

COLUMNS = (
    "format",
    "overflow",
    "underflow",
    "subnormal",
    "exact",
    "max abs err",
    "rel p50",
    "rel p99",
    "rel max",
    "ULP mean",
    "ULP max",
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
                f.format,
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


def header_lines(result: Any) -> list[str]:
    shape = "x".join(str(s) for s in result.shape) or "scalar"
    h = result.histogram
    lines = [
        f"scan of {result.dtype} [{shape}], {result.size:,} elements",
        f"  min {fmt_float(result.min, 6)}  max {fmt_float(result.max, 6)}  "
        f"|max| {fmt_float(result.absmax, 6)}",
        f"  NaN {fmt_count(h.nan, result.size)}  Inf {fmt_count(h.inf, result.size)}  "
        f"zero {fmt_count(h.zero, result.size)}  subnormal {fmt_count(h.subnormal, result.size)}",
    ]
    if h.exponents:
        lines.append(f"  binary exponents {h.exponents[0]} .. {h.exponents[-1]}")
    elif not h.collected:
        lines.append("  binary exponents not collected (a counts-only scan leaves them out)")
    opts = f"  {result.rounding}, overflow={result.overflow}, subnormals={result.subnormals}"
    if result.scale is not None:
        opts += f", scale={result.scale!r} (errors against the scaled data)"
    opts += f", quantiles={result.quantiles}"
    lines.append(opts)
    return lines


def scan_text(result: Any) -> str:
    """The result as an aligned plain-text table."""
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
    return "\n".join(out)
