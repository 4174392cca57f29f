"""A tensor window as coloured cells: the paint model (shared by the widget and static HTML),
the legend, the grid's style block, and a static HTML grid.

Every fill comes from ``render.vocabulary``: the cast and class views wear the outcome colours
(an input zero takes the grey scale's first step); the value view runs from the ink-violet
scale (negative) through the page (zero) to the teal scale (positive); the error view is the
amber scale; the compare view teal where format A lands closer and violet where B does. A scale
has two steps, 3:1 apart and from the page in both themes (``vocabulary.Scale``); where the
step breaks is chosen from the window's own numbers and written in the legend. Every cell also
carries a short text label and a tooltip with its exact value (hex float) and bit pattern:
colour is never the only carrier.

Fills are CSS values ``var(--bp-..., <light colour>)``: the light colours apply where nothing
sets the variables (an exported page, nbconvert), and ``grid_css()`` (with ``theme_css()``) sets
them for JupyterLab's dark theme inside an element of class ``bitprism``.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from html import escape
from typing import Mapping

import numpy as np

from ..tensors.window import CAST_KINDS, INPUT_KINDS, Window, compare_cells
from .palette import theme_css
from .vocabulary import OUTCOMES, SCALES, UNITS

__all__ = [
    "COMPARE_STEP",
    "PAINTS",
    "VALUE_SCALES",
    "VIEWS",
    "WIDE_RANGE",
    "GridPaint",
    "Paint",
    "cell_tooltip",
    "grid_css",
    "grid_html",
    "legend_html",
    "paint_window",
    "ratio_text",
    "short_label",
]

VIEWS = ("value", "class", "cast", "error", "compare")
VALUE_SCALES = ("auto", "linear", "log", "quantile")  # where the value and error views break
WIDE_RANGE = 16.0  # "auto": largest / smallest magnitude above this uses the quantile scale
COMPARE_STEP = 16.0  # compare view: step 2 where one error is at least this many times smaller

_PAGE_FILL = "var(--jp-layout-color0,#ffffff)"
_PAGE_INK = "var(--jp-content-font-color0,#1f1f1f)"


@dataclass(frozen=True)
class Paint:
    """One cell colour.

    Attributes:
        key: the paint's key (also the cell style's key in the widget).
        background, text: the light-theme colours (hex; the page's for unfilled paints).
        fill, ink: the CSS values cells use, switched by the theme (``var(--bp-...)``).
        label: the legend's default words for it.
    """

    key: str
    background: str
    text: str
    fill: str
    ink: str
    label: str


def _outcome_paint(key: str, label: str | None = None) -> Paint:
    o = OUTCOMES[key]
    if o.light.fill is None:
        return Paint(key, "#ffffff", "#1f1f1f", _PAGE_FILL, _PAGE_INK, label or o.name)
    return Paint(key, o.light.fill, o.light.text or "#000000",
                 f"var(--bp-{key}-fill,{o.light.fill})",
                 f"var(--bp-{key}-text,{o.light.text})", label or o.name)


def _scale_paint(key: str, hue: str, step: int, label: str) -> Paint:
    c = SCALES[hue].light[step - 1]
    assert c.fill is not None and c.text is not None
    return Paint(key, c.fill, c.text, f"var(--bp-{hue}-{step}-fill,{c.fill})",
                 f"var(--bp-{hue}-{step}-text,{c.text})", label)


def _build_paints() -> dict[str, Paint]:
    p: dict[str, Paint] = {k: _outcome_paint(k) for k in OUTCOMES}
    p["page"] = Paint("page", "#ffffff", "#1f1f1f", _PAGE_FILL, _PAGE_INK, "")
    p["zero"] = _scale_paint("zero", "grey", 1, "zero")
    for s in (1, 2):
        p[f"v-{s}"] = _scale_paint(f"v-{s}", "violet", s, f"negative, step {s}")
        p[f"v+{s}"] = _scale_paint(f"v+{s}", "teal", s, f"positive, step {s}")
        p[f"e{s}"] = _scale_paint(f"e{s}", "amber", s, f"error, step {s}")
        p[f"a{s}"] = _scale_paint(f"a{s}", "teal", s, f"A closer, step {s}")
        p[f"b{s}"] = _scale_paint(f"b{s}", "violet", s, f"B closer, step {s}")
    return p


PAINTS: Mapping[str, Paint] = _build_paints()

# the outcome a cast class is painted with (a cast class is an outcome of the vocabulary)
_CAST_PAINT = {name: name for name in CAST_KINDS}
_INPUT_PAINT = {"zero": "zero", "subnormal": "subnormal", "normal": "page", "inf": "inf",
                "nan": "nan"}
_INPUT_LABEL = {"zero": "0", "subnormal": "sub", "normal": "nrm", "inf": "Inf", "nan": "NaN"}
_INPUT_WORDS = {"zero": "zero", "subnormal": "subnormal input", "normal": "normal",
                "inf": "Inf", "nan": "NaN"}


def _mark(name: str) -> str:
    return OUTCOMES[name].mark


def _words(name: str) -> str:
    """An outcome's mark and name for a legend ("→0 underflow to zero", "NaN")."""
    o = OUTCOMES[name]
    return o.name if o.mark == o.name else f"{o.mark} {o.name}"


@dataclass(frozen=True)
class GridPaint:
    """How a window is painted in one view: a paint key, label and tooltip per cell, the
    legend entries (paint key, words), and a caption saying what the colours mean."""

    view: str
    keys: tuple[tuple[str, ...], ...]
    labels: tuple[tuple[str, ...], ...]
    tooltips: tuple[tuple[str, ...], ...]
    legend: tuple[tuple[str, str], ...]
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


def _num(x: float) -> str:
    return f"{x:.3g}"


def ratio_text(r: float) -> str:
    """How many times smaller one error is, in one form: 1.3, 7.0, 10, 250, 1e3, ∞."""
    if math.isinf(r):
        return "∞"
    if r < 9.95:
        return f"{r:.1f}"
    if r < 999.5:
        return f"{r:.0f}"
    m, e = f"{r:.0e}".split("e")
    return f"{m}e{int(e)}"


@dataclass(frozen=True)
class _Split:
    """Where a two-step scale breaks: magnitudes up to ``at`` are step 1, above it step 2."""

    at: float
    scale: str  # the scale used (auto resolved)
    lo: float
    hi: float

    def why(self) -> str:
        return {"linear": "half the largest", "log": "the geometric middle of the smallest "
                "and largest", "quantile": "the median"}[self.scale]


def _split(mag: np.ndarray, scale: str) -> _Split | None:
    """The break of a scale over positive finite magnitudes (None when there are none)."""
    if mag.size == 0:
        return None
    lo, hi = float(mag.min()), float(mag.max())
    if scale == "auto":
        scale = "linear" if hi <= WIDE_RANGE * lo else "quantile"
    if lo == hi:
        return _Split(0.0, scale, lo, hi)  # one magnitude: all of it step 2
    if scale == "linear":
        at = hi / 2
    elif scale == "log":
        at = 2.0 ** ((math.log2(lo) + math.log2(hi)) / 2)
    else:
        at = float(np.median(mag))
        if at >= hi:  # more than half the cells hold the largest: keep it as step 2
            at = float(mag[mag < hi].max())
    return _Split(at, scale, lo, hi)


def _steps(mag: np.ndarray, split: _Split | None) -> np.ndarray:
    if split is None:
        return np.full(mag.shape, 1, np.int64)
    with np.errstate(invalid="ignore"):
        return np.where(mag > split.at, 2, 1).astype(np.int64)


def _scale_words(split: _Split | None, what: str, unit: str = "") -> tuple[str, str, str]:
    """(caption part, step-1 words, step-2 words) of a two-step scale."""
    if split is None:
        return f"no nonzero {what} in this window", f"{what} (none)", f"{what} (none)"
    top = f"largest {what} {_num(split.hi)}{unit}"
    if split.at == 0.0:
        return (f"one {what} in this window: {_num(split.hi)}{unit}", "(none)", top)
    caption = (f"{split.scale} scale: steps break at {_num(split.at)}{unit}, {split.why()} "
               f"{what} of this window ({_num(split.lo)} .. {_num(split.hi)}{unit})")
    return caption, f"≤ {_num(split.at)}{unit}", f"> {_num(split.at)}{unit} ({top})"


def paint_window(
    w: Window,
    view: str = "cast",
    a: int = 0,
    b: int = 1,
    scale: str = "auto",
    unit: str = "ulp",
    tooltips: tuple[tuple[str, ...], ...] | None = None,
) -> GridPaint:
    """Paint a window: ``a``/``b`` index ``w.casts`` (formats A and B); ``scale`` is where the
    value and error views break (``VALUE_SCALES``)."""
    if view not in VIEWS:
        raise ValueError(f"view must be one of {', '.join(VIEWS)}; got {view!r}")
    if scale not in VALUE_SCALES:
        raise ValueError(f"scale must be one of {', '.join(VALUE_SCALES)}; got {scale!r}")
    tips = tooltips if tooltips is not None else _tooltips(w)
    x = w.values
    keys = np.empty(x.shape, object)
    labels = np.empty(x.shape, object)
    if view == "class":
        legend = []
        for k, name in enumerate(INPUT_KINDS):
            m = w.kinds == k
            keys[m] = _INPUT_PAINT[name]
            labels[m] = _INPUT_LABEL[name]
            legend.append((_INPUT_PAINT[name], f"{_INPUT_LABEL[name]} {_INPUT_WORDS[name]}"))
        caption = f"class of the input value ({w.dtype})"
    elif view == "value":
        legend, caption = _paint_value(x, scale, keys, labels)
    elif view == "cast":
        c = w.casts[a]
        for k, name in enumerate(CAST_KINDS):
            m = c.kinds == k
            keys[m] = _CAST_PAINT[name]
            labels[m] = _mark(name)
        legend = [(n, _words(n)) for n in CAST_KINDS if n != "invalid" or not c.format.signed]
        caption = f"what a cast to {c.format.name} does to each input value"
    elif view == "error":
        legend, caption = _paint_error(w, a, scale, unit, keys, labels)
    else:
        legend, caption = _paint_compare(w, a, b, keys, labels)
    return GridPaint(
        view,
        tuple(tuple(r) for r in keys.tolist()),
        tuple(tuple(r) for r in labels.tolist()),
        tips,
        tuple(legend),
        caption,
    )


def _paint_value(x: np.ndarray, scale: str, keys: np.ndarray,
                 labels: np.ndarray) -> tuple[list[tuple[str, str]], str]:
    finite = np.isfinite(x)
    with np.errstate(invalid="ignore"):
        mag = np.abs(x)
        nz = finite & (mag > 0)
        split = _split(mag[nz], scale)
        step = _steps(np.where(nz, mag, 0.0), split)
        sign = np.where(x < 0, "v-", "v+").astype(object)
        zero = finite & (x == 0)
    keys[...] = sign + step.astype(str).astype(object)
    keys[zero] = "page"
    keys[np.isinf(x)] = "inf"
    keys[np.isnan(x)] = "nan"
    labels[...] = np.array([short_label(v) for v in x.reshape(-1).tolist()],
                           object).reshape(x.shape)
    part, one, two = _scale_words(split, "|x|")
    legend = [("v-2", f"negative, |x| {two}"), ("v-1", f"negative, |x| {one}"),
              ("page", "zero"), ("v+1", f"positive, {one}"), ("v+2", f"positive, {two}"),
              ("nan", "NaN"), ("inf", "Inf")]
    return legend, f"value (violet negative, teal positive); {part}"


def _paint_error(w: Window, a: int, scale: str, unit: str, keys: np.ndarray,
                 labels: np.ndarray) -> tuple[list[tuple[str, str]], str]:
    c = w.casts[a]
    err = c.error(unit)
    ok = np.isfinite(err)
    with np.errstate(invalid="ignore"):  # err is NaN where there is no finite result
        exact = ok & (err == 0)
    pos = ok & ~exact
    split = _split(err[pos], scale)
    step = _steps(np.where(pos, err, 0.0), split)
    keys[...] = ("e" + step.astype(str)).astype(object)
    labels[...] = np.array([short_label(v) for v in err.reshape(-1).tolist()],
                           object).reshape(err.shape)
    keys[exact] = "page"
    labels[exact] = "0"
    shown = []
    for k, name in enumerate(CAST_KINDS):  # no finite result: the cell's outcome
        m = ~ok & (c.kinds == k)
        keys[m] = _CAST_PAINT[name]
        labels[m] = _mark(name)
        if m.any():
            shown.append(name)
    word = UNITS["ulp"] if unit == "ulp" else "relative"
    suffix = f" {UNITS['ulp']}" if unit == "ulp" else ""
    part, one, two = _scale_words(split, "error", suffix)
    legend = [("page", "0 no error"), ("e1", f"error {one}"), ("e2", f"error {two}")]
    legend += [(n, f"{_words(n)} (no finite result)") for n in shown]
    return legend, f"cast error of {c.format.name} in {word} units; {part}"


def _paint_compare(w: Window, a: int, b: int, keys: np.ndarray,
                   labels: np.ndarray) -> tuple[list[tuple[str, str]], str]:
    x = w.values
    ca, cb = w.casts[a], w.casts[b]
    winner, ratio = compare_cells(x, ca, cb)
    rows, cols = x.shape
    shown: list[str] = []
    for i in range(rows):
        for j in range(cols):
            wv = int(winner[i, j])
            if wv == -2:  # not comparable: the outcome that made it so
                name = CAST_KINDS[int(ca.kinds[i, j])]
                if name in ("exact", "rounded", "subnormal", "underflow"):
                    name = CAST_KINDS[int(cb.kinds[i, j])]
                keys[i, j], labels[i, j] = _CAST_PAINT[name], _mark(name)
                if name not in shown:
                    shown.append(name)
            elif wv == 0:
                keys[i, j], labels[i, j] = "page", "tie"
            else:
                r = float(ratio[i, j])
                who = "a" if wv == 1 else "b"
                keys[i, j] = f"{who}{2 if r >= COMPARE_STEP else 1}"
                labels[i, j] = f"{who.upper()}×{ratio_text(r)}"
    big = ratio_text(COMPARE_STEP)
    legend = [("a2", f"A closer, error ×{big} or more smaller (×∞: A exact)"),
              ("a1", f"A closer, less than ×{big}"), ("page", "tie: equal errors"),
              ("b1", f"B closer, less than ×{big}"),
              ("b2", f"B closer, ×{big} or more (×∞: B exact)")]
    legend += [(n, f"{_words(n)} (not comparable)") for n in shown]
    caption = (f"{ca.format.name} (A) vs {cb.format.name} (B): which lands closer to the input; "
               "the label says how many times smaller its error is (A×7: A's error is a "
               "seventh of B's)")
    return legend, caption


# ----- style block and static HTML ----------------------------------------------------------------


def grid_css() -> str:
    """A ``<style>`` element: the outcome and scale colours for JupyterLab's dark theme, the
    selected cell's outline in the page's own text colour, and the cells' type."""
    dark = ";".join(
        f"--bp-{s.key}-{i}-fill:{c.fill};--bp-{s.key}-{i}-text:{c.text}"
        for s in SCALES.values() for i, c in enumerate(s.dark, start=1)
    )
    rules = (
        f'body[data-jp-theme-light="false"] .bitprism{{{dark}}}'
        ".bitprism .bitprism-grid{background:var(--jp-border-color2,#e0e0e0)}"
        ".bitprism .bitprism-grid .bitprism-cell.jupyter-button{font-family:"
        "var(--jp-code-font-family,monospace);font-size:11px;padding:0 1px;min-width:0}"
        ".bitprism .bitprism-grid .bitprism-cell-selected.jupyter-button,"
        ".bitprism .bitprism-grid .bitprism-cell-selected.jupyter-button:focus{"
        "outline:2px solid var(--jp-ui-font-color0,#1f1f1f) !important;outline-offset:-2px;"
        "box-shadow:inset 0 0 0 3px var(--jp-layout-color0,#ffffff)}"
        ".bitprism .bitprism-head{font-family:var(--jp-code-font-family,monospace);"
        "font-size:11px;color:var(--jp-ui-font-color1,#57606a)}"
    )
    return theme_css() + f"<style>{rules}</style>"


_BOX = (
    "font-family:ui-monospace,SFMono-Regular,Menlo,Consolas,monospace;font-size:11px;"
    "color:var(--jp-ui-font-color0,#1f2328);background:var(--jp-layout-color0,#ffffff);"
    "border:1px solid var(--jp-border-color1,#d0d7de);border-radius:6px;"
    "padding:8px 10px;display:inline-block;max-width:100%;overflow-x:auto;line-height:1.4;"
    "box-sizing:border-box"
)
_CELL = ("min-width:34px;height:22px;text-align:center;padding:0 2px;"
         "border:1px solid var(--jp-border-color2,#e0e0e0)")
_HEAD = ("color:var(--jp-ui-font-color1,#57606a);text-align:center;padding:0 3px;"
         "font-weight:normal")
_SELECTED = ";outline:2px solid var(--jp-ui-font-color0,#1f1f1f);outline-offset:-2px"


def legend_html(paint: GridPaint) -> str:
    """The legend: the caption, then one swatch per colour with its words (wrapping)."""
    items = "".join(
        f'<span style="display:inline-block;margin:1px 8px 1px 0">'
        f'<span style="display:inline-block;width:12px;height:12px;vertical-align:middle;'
        f'background:{PAINTS[key].fill};border:1px solid var(--jp-border-color1,#8c959f)">'
        f"</span> {escape(words)}</span>"
        for key, words in paint.legend
    )
    return (f'<div class="bitprism bitprism-legend" style="font-size:11px;margin:4px 0;'
            f'line-height:1.4;white-space:normal;overflow-wrap:anywhere">'
            f'<div class="bitprism-legend-caption">{escape(paint.caption)}</div>'
            f"<div>{items}</div></div>")


def grid_html(w: Window, paint: GridPaint, selected: tuple[int, int] | None = None,
              summary_html: str = "", title: str = "", detail_html: str = "",
              detail_title: str = "") -> str:
    """The window as a self-contained HTML table (inline CSS, no scripts), with its legend, an
    optional summary above it and the selected cell's breakdown (``detail_html``, headed by
    ``detail_title``) below."""
    rows, cols = w.rows, w.cols
    head = "".join(f'<th style="{_HEAD}">{w.col0 + j}</th>' for j in range(cols))
    body = []
    for i in range(rows):
        cells = []
        for j in range(cols):
            p = PAINTS[paint.keys[i][j]]
            sel = _SELECTED if selected == (i, j) else ""
            cls = "bitprism-cell bitprism-cell-selected" if sel else "bitprism-cell"
            cells.append(
                f'<td class="{cls}" title="{escape(paint.tooltips[i][j])}" '
                f'style="{_CELL};background:{p.fill};color:{p.ink}{sel}">'
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
        f'<div class="bitprism bitprism-tensorprism" style="{_BOX}">{grid_css()}'
        + (f'<div class="bitprism-summary">{summary_html}</div>' if summary_html else "")
        + f'<div style="margin:4px 0;font-weight:600">{escape(where)}</div>'
        + legend_html(paint)
        + '<div style="overflow-x:auto;max-width:100%">'
        f'<table class="bitprism-grid" style="border-collapse:collapse">'
        f'<thead><tr><th></th>{head}</tr></thead><tbody>{"".join(body)}</tbody></table></div>'
        + (f'<div class="bitprism-detail" style="margin-top:6px">'
           f'<div style="font-weight:600;margin:2px 0">{escape(detail_title)}</div>'
           f"{detail_html}</div>" if detail_html else "")
        + "</div>"
    )
