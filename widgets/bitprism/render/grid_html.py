"""A tensor window as coloured cells: the paint model (shared by the widget and static HTML),
the legend, and a static HTML grid.

Colours come from ``render.palette``: class badges (NaN magenta, Inf deep red, subnormal lilac,
zero grey, normal neutral) for classes; the value view's diverging scale runs from the
ink-violet sign tile (negative) through white to the teal significand tile (positive); the
error heat scale runs from white to the amber exponent tile. Scale steps are tints of those
palette colours (mixed with white), so there is one palette. Every cell also carries a short
text label and a tooltip with its exact value (hex float) and bit pattern: colour is never the
only carrier. Text colour on each fill is whichever of near-black / white contrasts more.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from html import escape
from typing import Mapping, Sequence

import numpy as np

from ..tensors.window import CAST_KINDS, INPUT_KINDS, Window, compare_cells
from .palette import BADGES, TILES

__all__ = [
    "PAINTS",
    "VIEWS",
    "GridPaint",
    "Paint",
    "cell_tooltip",
    "grid_html",
    "legend_html",
    "paint_window",
    "short_label",
]

VIEWS = ("value", "class", "cast", "error", "compare")
STEPS = 3  # tints per side of a scale (few, so that neighbouring steps stay distinguishable)


@dataclass(frozen=True)
class Paint:
    """One cell colour: its key, fill, text colour, and the legend's words for it."""

    key: str
    background: str
    text: str
    label: str


def _rgb(h: str) -> tuple[float, float, float]:
    return tuple(int(h[i : i + 2], 16) / 255 for i in (1, 3, 5))  # type: ignore[return-value]


def _hex(rgb: Sequence[float]) -> str:
    return "#" + "".join(f"{round(min(max(c, 0.0), 1.0) * 255):02x}" for c in rgb)


def _mix(colour: str, t: float) -> str:
    """``colour`` at strength ``t`` over white (t=1: the colour itself)."""
    return _hex([1 - t * (1 - c) for c in _rgb(colour)])


def _luminance(h: str) -> float:
    # WCAG 2.1 relative luminance
    def lin(c: float) -> float:
        return c / 12.92 if c <= 0.04045 else ((c + 0.055) / 1.055) ** 2.4

    r, g, b = (lin(c) for c in _rgb(h))
    return 0.2126 * r + 0.7152 * g + 0.0722 * b


_DARK, _LIGHT = "#1f1f1f", "#ffffff"


def _text_on(bg: str) -> str:
    lb = _luminance(bg)
    dark = (lb + 0.05) / (_luminance(_DARK) + 0.05)
    light = (_luminance(_LIGHT) + 0.05) / (lb + 0.05)
    return _DARK if dark >= light else _LIGHT


def _p(key: str, bg: str, label: str, text: str | None = None) -> Paint:
    return Paint(key, bg, text or _text_on(bg), label)


def _build_paints() -> dict[str, Paint]:
    p: dict[str, Paint] = {}
    for k in ("zero", "subnormal", "normal", "nan"):
        b = BADGES[k]
        p[k] = Paint(k, b.background, b.text, b.label)
    p["inf"] = Paint("inf", BADGES["inf"].background, BADGES["inf"].text, "Inf")
    # cast classes
    p["exact"] = _p("exact", _mix(TILES["significand"].background, 0.18), "exact")
    p["rounded"] = Paint("rounded", BADGES["normal"].background, BADGES["normal"].text, "rounded")
    p["c-subnormal"] = Paint("c-subnormal", BADGES["subnormal"].background,
                             BADGES["subnormal"].text, "lands subnormal")
    p["underflow"] = Paint("underflow", BADGES["zero"].background, BADGES["zero"].text,
                           "underflows to zero")
    # overflow is what a cast does, Inf what the input already was: keep them apart
    p["overflow"] = Paint("overflow", BADGES["overflow"].background, BADGES["overflow"].text,
                          "overflows")
    p["invalid"] = Paint("invalid", BADGES["nan"].background, BADGES["nan"].text,
                         "negative into unsigned (NaN)")
    # value view: diverging around zero
    p["v0"] = _p("v0", "#ffffff", "zero")
    for s in range(1, STEPS + 1):
        t = s / STEPS
        p[f"v-{s}"] = _p(f"v-{s}", _mix(TILES["sign"].background, t), f"negative, step {s}")
        p[f"v+{s}"] = _p(f"v+{s}", _mix(TILES["significand"].background, t), f"positive, step {s}")
    # error view: heat
    p["e0"] = _p("e0", "#ffffff", "no error")
    for s in range(1, STEPS + 1):
        p[f"e{s}"] = _p(f"e{s}", _mix(TILES["exponent"].background, s / STEPS), f"error, step {s}")
    # compare view
    p["tie"] = _p("tie", "#ffffff", "A and B equally close")
    for s in range(1, 4):
        t = (s + 1) / 4
        p[f"a{s}"] = _p(f"a{s}", _mix(TILES["significand"].background, t), f"A closer, step {s}")
        p[f"b{s}"] = _p(f"b{s}", _mix(TILES["sign"].background, t), f"B closer, step {s}")
    return p


PAINTS: Mapping[str, Paint] = _build_paints()

# short labels of the class views (the legend says the words)
_CAST_LABEL = {"exact": "ex", "rounded": "rnd", "subnormal": "sub", "underflow": "→0",
               "overflow": "OVF", "nan": "NaN", "inf": "Inf", "invalid": "inv"}
_CAST_PAINT = {"exact": "exact", "rounded": "rounded", "subnormal": "c-subnormal",
               "underflow": "underflow", "overflow": "overflow", "nan": "nan", "inf": "inf",
               "invalid": "invalid"}
_INPUT_LABEL = {"zero": "0", "subnormal": "sub", "normal": "nrm", "inf": "Inf", "nan": "NaN"}


@dataclass(frozen=True)
class GridPaint:
    """How a window is painted in one view: a paint key, label and tooltip per cell, the
    legend entries, and a caption (with the scale's range where there is one)."""

    view: str
    keys: tuple[tuple[str, ...], ...]
    labels: tuple[tuple[str, ...], ...]
    tooltips: tuple[tuple[str, ...], ...]
    legend: tuple[Paint, ...]
    caption: str


def short_label(x: float) -> str:
    """At most 5 characters for a value: 0, -0, 0.12, -3.5, 123, 1e-5, -3e12, NaN, Inf."""
    if math.isnan(x):
        return "NaN"
    if math.isinf(x):
        return "Inf" if x > 0 else "-Inf"
    if x == 0:
        return "-0" if math.copysign(1.0, x) < 0 else "0"
    a = abs(x)
    sign = "-" if x < 0 else ""
    if 0.01 <= a < 1000:
        room = 5 - len(sign)
        for digits in (3, 2, 1, 0):
            s = f"{a:.{digits}f}"
            if "." in s:
                s = s.rstrip("0").rstrip(".")
            if len(s) <= room:
                if s.startswith("0.") and room < 5:
                    s = s[1:]
                return sign + s
        return sign + f"{a:.0f}"
    m, e = f"{a:.0e}".split("e")
    return f"{sign}{m}e{int(e)}"


def cell_tooltip(value: float, bits: int, bits_width: int, is_float: bool) -> str:
    """The exact value (hex float: exact for every format) and the stored bit pattern."""
    if not is_float:
        v = str(int(value))
    elif math.isfinite(value):
        v = _HEX_ZEROS.sub(r"\1", float.hex(value))  # 0x1.99999a0000000p-4 -> 0x1.99999ap-4
    else:
        v = repr(value)
    return f"{v} = 0x{int(bits):0{bits_width // 4}x}"


_HEX_ZEROS = re.compile(r"\.?0+(p)")


def _tooltips(w: Window) -> tuple[tuple[str, ...], ...]:
    width = w.bits.dtype.itemsize * 8
    is_float = w.raw.dtype.kind not in "iub"
    vals = w.values.tolist()
    bits = w.bits.tolist()
    return tuple(
        tuple(cell_tooltip(v, b, width, is_float) for v, b in zip(vr, br))
        for vr, br in zip(vals, bits)
    )


def _fmt_num(x: float) -> str:
    return f"{x:.3g}"


def _steps(mag: np.ndarray, lo: float, hi: float) -> np.ndarray:
    """1..STEPS for magnitudes scaled linearly between lo and hi."""
    if not hi > lo:
        return np.full(mag.shape, STEPS, np.int64)
    t = (mag - lo) / (hi - lo)
    return np.clip(np.ceil(t * STEPS), 1, STEPS).astype(np.int64)


def paint_window(
    w: Window,
    view: str = "cast",
    a: int = 0,
    b: int = 1,
    log_scale: bool = False,
    unit: str = "ulp",
    tooltips: tuple[tuple[str, ...], ...] | None = None,
) -> GridPaint:
    """Paint a window: ``a``/``b`` index ``w.casts`` (formats A and B)."""
    if view not in VIEWS:
        raise ValueError(f"view must be one of {', '.join(VIEWS)}; got {view!r}")
    tips = tooltips if tooltips is not None else _tooltips(w)
    x = w.values
    rows, cols = x.shape
    keys = np.empty(x.shape, object)
    labels = np.empty(x.shape, object)
    legend: list[str] = []
    caption = ""
    if view == "class":
        for k, name in enumerate(INPUT_KINDS):
            m = w.kinds == k
            keys[m] = name
            labels[m] = _INPUT_LABEL[name]
        legend = list(INPUT_KINDS)
        caption = f"class of the input value ({w.dtype})"
    elif view == "value":
        finite = np.isfinite(x)
        with np.errstate(divide="ignore", invalid="ignore"):
            mag = np.abs(x)
            nz = finite & (mag > 0)
            if log_scale:
                lm = np.where(nz, np.log2(np.where(nz, mag, 1.0)), 0.0)
                lo = float(lm[nz].min()) if nz.any() else 0.0
                hi = float(lm[nz].max()) if nz.any() else 0.0
                step = _steps(lm, lo, hi)
                caption = (f"value, log-magnitude scale: |x| from 2^{lo:.1f} to 2^{hi:.1f} "
                           "(violet negative, teal positive)")
            else:
                hi = float(mag[nz].max()) if nz.any() else 0.0
                step = _steps(mag, 0.0, hi)
                caption = (f"value, linear scale: -{_fmt_num(hi)} .. 0 .. {_fmt_num(hi)} "
                           "(violet negative, teal positive)")
        with np.errstate(invalid="ignore"):  # NaN cells compare False; painted below
            sign = np.where(x < 0, "v-", "v+").astype(object)
            zero = finite & (x == 0)
        keys[...] = sign + step.astype(str).astype(object)
        keys[zero] = "v0"
        keys[np.isinf(x)] = "inf"
        keys[np.isnan(x)] = "nan"
        labels[...] = np.array([short_label(v) for v in x.reshape(-1).tolist()],
                               object).reshape(x.shape)
        legend = [f"v-{s}" for s in range(STEPS, 0, -1)] + ["v0"] + [
            f"v+{s}" for s in range(1, STEPS + 1)] + ["nan", "inf"]
    elif view == "cast":
        c = w.casts[a]
        for k, name in enumerate(CAST_KINDS):
            m = c.kinds == k
            keys[m] = _CAST_PAINT[name]
            labels[m] = _CAST_LABEL[name]
        legend = [_CAST_PAINT[n] for n in CAST_KINDS if n != "invalid" or not c.format.signed]
        caption = f"what a cast to {c.format.name} does to each input value"
    elif view == "error":
        c = w.casts[a]
        err = c.error(unit)
        ok = np.isfinite(err)
        hi = float(err[ok].max()) if ok.any() else 0.0
        step = _steps(np.where(ok, err, 0.0), 0.0, hi)
        word = "ULP" if unit == "ulp" else "relative"
        keys[...] = ("e" + step.astype(str)).astype(object)
        labels[...] = np.array([short_label(v) for v in err.reshape(-1).tolist()],
                               object).reshape(x.shape)
        with np.errstate(invalid="ignore"):  # err is NaN where there is no finite result
            exact = ok & (err == 0)
        keys[exact] = "e0"
        labels[exact] = "0"
        for k, name in enumerate(CAST_KINDS):  # no finite result: the cell's class
            m = ~ok & (c.kinds == k)
            keys[m] = _CAST_PAINT[name]
            labels[m] = _CAST_LABEL[name]
        legend = ["e0"] + [f"e{s}" for s in range(1, STEPS + 1)] + [
            "overflow", "nan", "inf"]
        caption = (f"cast error of {c.format.name} in {word} units: 0 .. {_fmt_num(hi)} "
                   f"(largest in this window); cells without a finite result show their class")
    else:  # compare
        ca, cb = w.casts[a], w.casts[b]
        winner, ratio = compare_cells(x, ca, cb)
        for i in range(rows):
            for j in range(cols):
                wv = int(winner[i, j])
                r = float(ratio[i, j])
                if wv == -2:
                    name = CAST_KINDS[int(ca.kinds[i, j])]
                    if name in ("exact", "rounded", "subnormal", "underflow"):
                        name = CAST_KINDS[int(cb.kinds[i, j])]
                    keys[i, j] = _CAST_PAINT[name]
                    labels[i, j] = _CAST_LABEL[name]
                elif wv == 0:
                    keys[i, j], labels[i, j] = "tie", "="
                else:
                    s = 1 if r < 4 else (2 if r < 256 else 3)
                    keys[i, j] = f"{'a' if wv == 1 else 'b'}{s}"
                    labels[i, j] = ("A" if wv == 1 else "B") + _ratio_text(r)
        legend = ["a3", "a2", "a1", "tie", "b1", "b2", "b3", "overflow", "nan", "inf"]
        caption = (f"{ca.format.name} (A) vs {cb.format.name} (B): which lands closer to the "
                   "input; the label gives how many times smaller its error is "
                   "(steps: < 4x, < 256x, more)")
    return GridPaint(
        view,
        tuple(tuple(r) for r in keys.tolist()),
        tuple(tuple(r) for r in labels.tolist()),
        tips,
        tuple(PAINTS[k] for k in legend),
        caption,
    )


def _ratio_text(r: float) -> str:
    if math.isinf(r):
        return "∞"
    if r < 9.5:
        return f"{r:.0f}x" if r >= 1.95 else "1x"
    if r < 999.5:
        return f"{r:.0f}"
    return f"{r:.0e}".replace("e+0", "e").replace("e+", "e")


# ----- static HTML -------------------------------------------------------------------------------

_BOX = (
    "font-family:ui-monospace,SFMono-Regular,Menlo,Consolas,monospace;font-size:11px;"
    "color:#1f2328;background:#ffffff;border:1px solid #d0d7de;border-radius:6px;"
    "padding:8px 10px;display:inline-block;max-width:100%;overflow-x:auto;line-height:1.4"
)
_CELL = "min-width:34px;height:22px;text-align:center;padding:0 2px;border:1px solid #ffffff"
_HEAD = "color:#57606a;text-align:center;padding:0 3px;font-weight:normal"


def legend_html(paint: GridPaint) -> str:
    """The legend: one swatch per colour, each with its words."""
    items = "".join(
        f'<span style="display:inline-block;margin:1px 6px 1px 0;white-space:nowrap">'
        f'<span style="display:inline-block;width:12px;height:12px;vertical-align:middle;'
        f'background:{p.background};border:1px solid #8c959f"></span> {escape(p.label)}</span>'
        for p in paint.legend
    )
    return (f'<div class="bitprism-legend" style="font-size:11px;margin:4px 0;line-height:1.4">'
            f'<div>{escape(paint.caption)}</div><div>{items}</div></div>')


def grid_html(w: Window, paint: GridPaint, selected: tuple[int, int] | None = None,
              summary_html: str = "", title: str = "") -> str:
    """The window as a self-contained HTML table (inline CSS, no scripts), with its legend and
    an optional summary above it."""
    rows, cols = w.rows, w.cols
    head = "".join(f'<th style="{_HEAD}">{w.col0 + j}</th>' for j in range(cols))
    body = []
    for i in range(rows):
        cells = []
        for j in range(cols):
            p = PAINTS[paint.keys[i][j]]
            sel = ";outline:2px solid #1f1f1f;outline-offset:-2px" if selected == (i, j) else ""
            cells.append(
                f'<td class="bitprism-cell" title="{escape(paint.tooltips[i][j])}" '
                f'style="{_CELL};background:{p.background};color:{p.text}{sel}">'
                f"{escape(paint.labels[i][j])}</td>"
            )
        r = w.row0 + i if w.row_axis is not None else ""
        body.append(f'<tr><th style="{_HEAD}">{r}</th>{"".join(cells)}</tr>')
    axes = (f"rows: axis {w.row_axis}, columns: axis {w.col_axis}"
            if w.row_axis is not None else "axis 0")
    where = f"{title + ' · ' if title else ''}{w.dtype} {list(w.shape)}; {axes}"
    fixed = [f"axis {ax} = {v}" for ax, v in enumerate(w.fixed)
             if ax not in (w.row_axis, w.col_axis)]
    if fixed:
        where += "; " + ", ".join(fixed)
    return (
        f'<div class="bitprism-tensorprism" style="{_BOX}">'
        + (f'<div class="bitprism-summary">{summary_html}</div>' if summary_html else "")
        + f'<div style="margin:4px 0;font-weight:600">{escape(where)}</div>'
        + legend_html(paint)
        + f'<table class="bitprism-grid" style="border-collapse:collapse">'
        f'<thead><tr><th></th>{head}</tr></thead><tbody>{"".join(body)}</tbody></table></div>'
    )
