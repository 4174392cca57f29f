"""The range chart: a tensor's binary-exponent histogram laid over each format's bands.

One row per format, sharing the exponent axis: the bars are the tensor's values by
``floor(log2|x|)`` (the same histogram in every row), and behind them the format's bands —
underflow to zero (grey), subnormal (lilac), normal (teal tint), overflow (deep red). Each band
is labelled with the share of the tensor that lands in it. Band edges come from the scan's
thresholds (``FormatScan.underflow_below``, ``normal_from``, ``overflow_from``), so they follow
the rounding and subnormal options the scan used.

matplotlib is imported when a chart is drawn, never at module import.
"""

from __future__ import annotations

import math
from typing import Any

__all__ = ["range_chart"]

_BAND = {
    "underflow": "#5f6368",  # zero grey
    "subnormal": "#dccbf2",  # lilac
    "normal": "#00707a",  # teal (drawn as a light tint)
    "overflow": "#8b1a1a",  # deep red
}
_BAR = "#6f51b4"  # ink-violet


def _log2(v: float | None) -> float | None:
    if v is None or v <= 0 or not math.isfinite(v):
        return None
    return math.log2(v)


def _share(n: int | None, size: int) -> str:
    if n is None:
        return ""
    if size == 0 or n == 0:
        return "0%"
    pct = 100.0 * n / size
    return f"{pct:.3g}%" if pct >= 0.01 else "<0.01%"


def range_chart(result: Any, *, width: float = 9.0, row_height: float = 1.35, log: bool = True) -> Any:
    """Draw the range chart of a ``ScanResult``; returns the matplotlib ``Figure``.

    Args:
        result: what ``scan()`` returned.
        width, row_height: figure size in inches (height grows with the number of formats).
        log: logarithmic count axis (rare exponents stay visible).
    """
    from matplotlib.figure import Figure

    h = result.histogram
    rows = result.formats
    fig = Figure(figsize=(width, 0.9 + row_height * max(1, len(rows))), layout="constrained")
    axes = fig.subplots(max(1, len(rows)), 1, sharex=True, squeeze=False)[:, 0]
    exps = list(h.exponents)
    counts = list(h.counts)
    edges = []
    for f in rows:
        edges += [e for e in (_log2(f.underflow_below), _log2(f.normal_from), _log2(f.overflow_from)) if e is not None]
    lo = min(exps + [math.floor(e) for e in edges] or [0]) - 2
    hi = max(exps + [math.ceil(e) for e in edges] or [0]) + 2
    for ax, f in zip(axes, rows):
        bands = []
        u, n_, o = _log2(f.underflow_below), _log2(f.normal_from), _log2(f.overflow_from)
        if u is not None:
            bands.append(("underflow", lo, u, f.underflow))
            if n_ is not None and n_ > u:
                bands.append(("subnormal", u, n_, f.subnormal))
        start = n_ if n_ is not None else (u if u is not None else lo)
        end = o if o is not None else hi
        bands.append(("normal", start, end, None))
        if o is not None:
            bands.append(("overflow", o, hi, f.overflow))
        for kind, a, b, n in bands:
            alpha = 0.12 if kind == "normal" else 0.28
            ax.axvspan(a, b, color=_BAND[kind], alpha=alpha, lw=0)
            if n is not None and b > a and (n or b - a >= 8):  # no crowded "0%" labels
                ax.text(
                    (a + b) / 2, 0.96, f"{kind} {_share(n, f.size)}", transform=ax.get_xaxis_transform(),
                    ha="center", va="top", fontsize=7, color="#1f2328",
                )
        if exps:
            ax.bar([e + 0.5 for e in exps], counts, width=0.9, color=_BAR, lw=0)
            if log:
                ax.set_yscale("log")
        ax.set_xlim(lo, hi)
        ax.set_ylabel(f.format, rotation=0, ha="right", va="center", fontsize=8)
        ax.tick_params(labelsize=7)
        ax.margins(y=0.25)
    axes[-1].set_xlabel("binary exponent  floor(log2 |x|)")
    extra = []
    for label, n in (("zero", h.zero), ("subnormal", h.subnormal), ("Inf", h.inf), ("NaN", h.nan)):
        if n:
            extra.append(f"{label} {n:,}")
    shape = "x".join(str(s) for s in result.shape) or "scalar"
    title = f"range chart: {result.dtype} [{shape}]"
    if result.scale is not None:
        title += f", scaled by {result.scale:g}"
    if extra:
        title += "  (" + ", ".join(extra) + " not shown as bars)"
    fig.suptitle(title, fontsize=9)
    return fig
