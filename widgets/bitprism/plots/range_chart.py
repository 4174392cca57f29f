"""The range chart: a tensor's binary-exponent histogram laid over each format's bands.

One row per format, sharing the exponent axis: the bars are the tensor's values by
``floor(log2|x|)`` (the same histogram in every row), and behind them the format's bands —
underflow to zero, subnormal, normal (a teal tint), overflow, in the colours of
``render.vocabulary``. Each band
is labelled with the share of the tensor that lands in it. Band edges come from the scan's
thresholds (``FormatScan.underflow_below``, ``normal_from``, ``overflow_from``), so they follow
the rounding and subnormal options the scan used.

A block format (MX) has no bands of its own: each block of 32 shares a power-of-two scale. Its
row shows the element format's bands for the block that holds the tensor's largest |x|, shifted
by that block's shared exponent (MX v1.0 §6.3: ``floor(log2 max|x|) - emax_elem``), and says so;
nothing in that block lies above its largest element. Finite values lost because their block
holds a NaN or Inf (the scan's ``block_nan``) get a mark in the NaN colour.

``advice_range_chart`` (``advice.plot(kind="range")``) draws a per-tensor ``ScaleAdvice``: the
histogram of the unscaled data, and for each format two rows: its bands as they are, and its
bands shifted by the advised scale (a scale ``2^k`` applied before the cast moves every edge
from ``E`` to ``E - k`` on the data's axis), with the shares of the scans before and after.

matplotlib is imported when a chart is drawn, never at module import.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

from ..errors import BitprismError
from ..numerics.options import CastOptions
from ..numerics.thresholds import cast_thresholds
from ..render.vocabulary import FIELDS, OUTCOMES

__all__ = ["advice_range_chart", "range_chart", "scaled_rows"]

# the outcome colours of render.vocabulary (light theme: a figure has a white background); the
# normal band is a tint of the trailing-significand teal (values there are exact or rounded)
_BAND = {
    "underflow": OUTCOMES["underflow"].light.fill,
    "subnormal": OUTCOMES["subnormal"].light.fill,
    "normal": FIELDS["significand"].colour.fill,
    "overflow": OUTCOMES["overflow"].light.fill,
}
_BAR = FIELDS["sign"].colour.fill  # ink-violet
_NAN = OUTCOMES["nan"].light.fill
_E8M0_MIN, _E8M0_MAX = -127, 127  # the shared scale's exponent range (MX v1.0 Table 7)


def _block_edges(f: Any, absmax: float | None,
                 options: CastOptions) -> tuple[float, float | None, float, int] | None:
    """For a block-format row: (underflow below, normal from, top, shared exponent) of the
    block holding the tensor's largest |x|; None for a plain format or no finite data."""
    mx = f.format
    if not hasattr(mx, "emax_elem") or not absmax or not math.isfinite(absmax):
        return None
    s = math.floor(math.log2(absmax)) - int(mx.emax_elem)
    s = max(_E8M0_MIN, min(_E8M0_MAX, s))
    scale = 2.0 ** s
    elem = getattr(mx, "element", None)
    if elem is None:  # MXINT8: k/64, no subnormals; below half of 1/64 rounds to zero
        return 2.0 ** -7 * scale, None, float(mx.max_normal) * scale, s
    th = cast_thresholds(elem, CastOptions(options.rounding, "saturate", options.subnormals))
    normal = th.normal_from if th.normal_from and th.normal_from > th.nonzero_from else None
    return (th.nonzero_from * scale, None if normal is None else normal * scale,
            float(mx.max_normal) * scale, s)


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


_PAD = 2  # binades shown beyond the data on each side
_NEAR = 12  # a format's band edge this close to the data widens the view to show it


def _view(exps: list[int], edges: list[float]) -> tuple[float, float]:
    """The visible exponent range: the data's exponents plus a margin, widened to take in the
    band edges that lie near the data (those that decide what happens to it); far edges, such
    as bfloat16's -133 and 128 around data in -20 .. 20, stay out of view."""
    if not exps:
        if not edges:
            return -8.0, 8.0
        return math.floor(min(edges)) - _PAD, math.ceil(max(edges)) + _PAD
    d_lo, d_hi = min(exps), max(exps) + 1  # the last bar spans [e, e + 1)
    lo, hi = float(d_lo - _PAD), float(d_hi + _PAD)
    for e in edges:
        if d_lo - _NEAR <= e < lo + 1:
            lo = min(lo, math.floor(e) - _PAD)
        if hi - 1 < e <= d_hi + _NEAR:
            hi = max(hi, math.ceil(e) + _PAD)
    return lo, hi


def _block_notes(ax: Any, f: Any, blk: tuple[float, float | None, float, int], lo: float) -> None:
    """A block format's row: what its bands are, its top edge, and the block-NaN mark."""
    elem = getattr(f.format, "element", None)
    name = elem.name if elem is not None else "int8 x 2^-6"
    ax.axvline(math.log2(blk[2]), color=FIELDS["significand"].colour.fill, lw=1.0, ls="--")
    ax.text(lo + 0.2, 0.04, f"bands: {name} in the block holding the largest |x| "
            f"(shared scale 2^{blk[3]}); underflow share over all blocks",
            transform=ax.get_xaxis_transform(), ha="left", va="bottom", fontsize=6.5,
            color="#1f2328", clip_on=True,
            bbox={"boxstyle": "round,pad=0.15", "fc": "white", "ec": "none", "alpha": 0.7})
    if f.block_nan:
        ax.text(0.995, 0.7, f"block NaN {_share(f.block_nan, f.size)}: {f.block_nan:,} finite "
                "values in blocks holding a NaN/Inf", transform=ax.transAxes, ha="right",
                va="center", fontsize=7, color="white", clip_on=True,
                bbox={"boxstyle": "round,pad=0.2", "fc": _NAN, "ec": "none"})


@dataclass(frozen=True)
class _Row:
    """One row of the chart: a label, the scan of one format that gives its shares, and its
    band edges as ``log2`` of the magnitude of the *charted* data (shifted by ``shift``)."""

    label: str
    scan: Any  # a FormatScan: the shares written on the bands, the block-NaN mark
    under: float | None
    normal: float | None
    over: float | None
    block: tuple[float, float | None, float, int] | None = None


def _rows(result: Any, shift: float = 0.0, suffix: str = "") -> list[_Row]:
    """The rows of a scan: each format's edges, ``shift`` binades along the exponent axis
    (a scale ``2^k`` applied before the cast moves an edge ``E`` to ``E - k``)."""
    rows = []
    for f in result.formats:
        blk = _block_edges(f, result.absmax, result.options)
        triple = (blk[0], blk[1], None) if blk is not None else (
            f.underflow_below, f.normal_from, f.overflow_from)
        u, n_, o = (None if e is None else e + shift for e in map(_log2, triple))
        if blk is not None and shift:
            blk = (blk[0] * 2.0 ** shift, None if blk[1] is None else blk[1] * 2.0 ** shift,
                   blk[2] * 2.0 ** shift, blk[3])
        rows.append(_Row(f.name + suffix, f, u, n_, o, blk))
    return rows


def _edges(row: _Row) -> list[float]:
    top = _log2(row.block[2]) if row.block is not None else None
    return [e for e in (row.under, row.normal, row.over, top) if e is not None]


def _draw_row(ax: Any, row: _Row, lo: float, hi: float, far_lo: float, far_hi: float) -> None:
    """The bands of one row behind the bars, each labelled with its share of the tensor."""
    f, u, n_, o, blk = row.scan, row.under, row.normal, row.over, row.block
    bands = []
    if u is not None:
        bands.append(("underflow", far_lo, u, f.underflow))
        if n_ is not None and n_ > u:
            bands.append(("subnormal", u, n_, f.subnormal))
    start = n_ if n_ is not None else (u if u is not None else far_lo)
    end = o if o is not None else (_log2(blk[2]) or far_hi if blk is not None else far_hi)
    bands.append(("normal", start, end, None))
    if o is not None:
        bands.append(("overflow", o, far_hi, f.overflow))
    if blk is not None:
        _block_notes(ax, f, blk, lo)
    for kind, a, b, n in bands:
        alpha = 0.12 if kind == "normal" else 0.28
        ax.axvspan(a, b, color=_BAND[kind], alpha=alpha, lw=0)
        va, vb = max(a, lo), min(b, hi)  # the visible part of the band
        if n is not None and vb > va and (n or vb - va >= 8):  # no crowded "0%" labels
            x, ha = (va + vb) / 2, "center"
            if vb - va < 8 and va == lo:  # a narrow band at the edge of the view: the
                x, ha = lo + 0.2, "left"  # label grows inward instead of off the axes
            elif vb - va < 8 and vb == hi:
                x, ha = hi - 0.2, "right"
            ax.text(
                x, 0.96, f"{kind} {_share(n, f.size)}",
                transform=ax.get_xaxis_transform(), ha=ha, va="top", fontsize=7,
                color="#1f2328", clip_on=True,
                bbox={"boxstyle": "round,pad=0.15", "fc": "white", "ec": "none", "alpha": 0.7},
            )
        for edge in (a, b):  # band edges inside the view, as thin lines
            if lo < edge < hi and kind != "normal":
                ax.axvline(edge, color=_BAND[kind], lw=0.8, alpha=0.7)


def _figure(result: Any, rows: list[_Row], title: str, *, width: float, row_height: float,
            log: bool) -> Any:
    """Draw ``rows`` over the exponent histogram of ``result``."""
    h = result.histogram
    if not h.collected:
        raise BitprismError(
            "this scan left out the binary exponents the range chart draws (a counts-only scan "
            "does unless asked); scan again with exponents=True"
        )
    from matplotlib.figure import Figure

    fig = Figure(figsize=(width, 0.9 + row_height * max(1, len(rows))), layout="constrained")
    axes = fig.subplots(max(1, len(rows)), 1, sharex=True, squeeze=False)[:, 0]
    exps = list(h.exponents)
    counts = list(h.counts)
    edges = [e for row in rows for e in _edges(row)]
    lo, hi = _view(exps, edges)
    far_lo, far_hi = min(lo, *(edges or [lo])) - 1, max(hi, *(edges or [hi])) + 1
    for ax, row in zip(axes, rows):
        _draw_row(ax, row, lo, hi, far_lo, far_hi)
        if exps:
            ax.bar([e + 0.5 for e in exps], counts, width=0.9, color=_BAR, lw=0)
            if log:
                ax.set_yscale("log")
            top = max(counts)  # headroom above the tallest bar for the band labels
            ax.set_ylim(0.5 if log else 0, top * 40 if log else top * 1.3)
        ax.set_xlim(lo, hi)
        ax.set_ylabel(row.label, rotation=0, ha="right", va="center", fontsize=8)
        ax.tick_params(labelsize=7)
    axes[-1].set_xlabel("binary exponent  floor(log2 |x|)")
    extra = []
    for label, n in (("zero", h.zero), ("subnormal", h.subnormal), ("Inf", h.inf), ("NaN", h.nan)):
        if n:
            extra.append(f"{label} {n:,}")
    if extra:
        title += "  (" + ", ".join(extra) + " not shown as bars)"
    fig.suptitle(title, fontsize=9)
    return fig


def _title(result: Any) -> str:
    shape = "x".join(str(s) for s in result.shape) or "scalar"
    return f"range chart: {result.dtype} [{shape}]"


def range_chart(result: Any, *, width: float = 9.0, row_height: float = 1.35, log: bool = True) -> Any:
    """Draw the range chart of a ``ScanResult``; returns the matplotlib ``Figure``.

    Args:
        result: what ``scan()`` returned.
        width, row_height: figure size in inches (height grows with the number of formats).
        log: logarithmic count axis (rare exponents stay visible).
    """
    title = _title(result)
    if result.scale is not None:
        title += f", scaled by {result.scale:g}"
    return _figure(result, _rows(result), title, width=width, row_height=row_height, log=log)


def scaled_rows(advice: Any) -> list[_Row]:
    """The rows of ``advice``'s range chart: each format unscaled, then with the advised scale,
    both over the histogram of the unscaled data (so the scaled bands move, not the data)."""
    before, after = advice.before, advice.after
    if before is None or after is None:
        raise BitprismError(
            f"this advice has no scans to chart (it was made with formats=[]): {advice.message}")
    if advice.scale is None:
        raise BitprismError(
            f"a per-{advice.granularity} scale moves each group by its own amount, so there is "
            "no one shifted band to draw; advice.after.plot() charts the scaled data itself, "
            "advice.plot() the sweep")
    k = math.log2(advice.scale)
    shown = f"2^{advice.exponent}" if advice.exponent is not None else f"{advice.scale:g}"
    return _rows(before) + _rows(after, shift=-k, suffix=f" x {shown}")


def advice_range_chart(advice: Any, *, width: float = 9.0, row_height: float = 1.35,
                       log: bool = True) -> Any:
    """The range chart of a per-tensor ``ScaleAdvice``: the histogram of the unscaled data,
    each format's bands as they are and shifted by the advised scale, each band labelled with
    the share of the tensor that lands in it without and with the scale."""
    rows = scaled_rows(advice)
    shown = rows[-1].label.rsplit(" x ", 1)[-1]
    title = f"{_title(advice.before)}: bands without and with the scale {shown}\n{advice.message}"
    return _figure(advice.before, rows, title, width=width, row_height=row_height, log=log)
