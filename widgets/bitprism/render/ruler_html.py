"""The ruler: one shared power-of-two scale, each format a band whose bits sit under their weights.

Every column is one weight 2^k (highest on the left); every format's significand bits (the
implicit bit dashed) sit under their weights, so the bands of one value line up like light
split by a prism. The exact input's bits run along the top; the bits a cast drops sit faded and
struck beyond a band's last kept bit; bits a rounding carry changed are marked; each band's
own overflow, subnormal and underflow-to-zero zones are shaded in a strip under its bits.

Long runs of weights are elided into one column (``⋯``, its title says which weights), so
float64's 53 bits and exponent gaps of hundreds fit in ``MAX_COLUMNS`` columns. Every row is a
CSS grid of the same ``N`` equal columns spanning its container, so rows drawn in separate
elements (the widget's bands) line up as long as they are equally wide. Inline styles only.
"""

from __future__ import annotations

import bisect
from dataclasses import dataclass
from fractions import Fraction
from html import escape

from ..formats import Format
from ..numerics.compare import Comparison, FormatRow
from ..numerics.exact import ExactValue
from ..numerics.inspect import CodeClass
from .palette import TILES, outcome_style
from .vocabulary import FIELDS, OUTCOMES

__all__ = [
    "MAX_COLUMNS",
    "Column",
    "Ruler",
    "band_ruler_html",
    "input_ruler_html",
    "make_ruler",
    "ruler_legend_html",
    "ruler_scale_html",
    "zone_of",
]

MAX_COLUMNS = 52  # columns of the ruler: 52 x 8 px still fit a 468-px output column
_ZONE_REACH = 40  # zone boundaries farther than this from every bit are left out
_MONO = "font-family:var(--jp-code-font-family,monospace)"
_FADED = "opacity:0.6"


@dataclass(frozen=True)
class Column:
    """One column of the ruler: the weights 2^hi down to 2^lo (hi == lo but for an elided run)."""

    hi: int
    lo: int

    @property
    def elided(self) -> bool:
        return self.hi != self.lo


@dataclass(frozen=True)
class Ruler:
    """The columns shown, highest weight first, and where the binary point falls."""

    columns: tuple[Column, ...]

    @property
    def size(self) -> int:
        return len(self.columns)

    @property
    def top(self) -> int:
        return self.columns[0].hi

    @property
    def bottom(self) -> int:
        return self.columns[-1].lo

    def column(self, weight: int) -> int | None:
        """1-based grid column holding ``weight`` (None outside the ruler)."""
        if not self.bottom <= weight <= self.top:
            return None
        keys = [-c.hi for c in self.columns]
        i = bisect.bisect_left(keys, -weight)
        if i < len(self.columns) and self.columns[i].hi == weight:
            return i + 1
        return i  # inside the elided run of column i (1-based: i)

    @property
    def point(self) -> int | None:
        """Grid column of weight 2^-1 when 2^0 and 2^-1 are neighbours on the ruler."""
        a, b = self.column(0), self.column(-1)
        if a is None or b is None or b != a + 1 or self.columns[a - 1].elided:
            return None
        return b

    def template(self) -> str:
        # one narrow column more at the end: the input's "…" when its bits go on
        return (f"display:grid;grid-template-columns:repeat({self.size},minmax(0,1fr)) "
                "minmax(0,0.6fr)")


# ----- where bits sit ----------------------------------------------------------------------------
def placed(row: FormatRow) -> tuple[int, str] | None:
    """(weight of the leading bit, significand digits with the implicit bit first) of a finite
    nonzero row, or None."""
    kind = row.kind
    if kind not in (CodeClass.NORMAL, CodeClass.SUBNORMAL):
        return None
    f = row.format
    t = f.significand_bits
    frac = format(int(row.fields.significand), f"0{t}b") if t else ""
    if kind == CodeClass.SUBNORMAL:
        return f.emin, "0" + frac
    return int(row.fields.exponent) - f.bias, "1" + frac


def _input_msb(x: ExactValue) -> int | None:
    if not x.is_finite or x.is_zero or x.clamped:
        return None
    return x.floor_log2()


def _input_bit(x: ExactValue, weight: int) -> int:
    """The bit of |x| at 2^weight (x finite)."""
    q = x.magnitude / Fraction(2) ** weight
    return (q.numerator // q.denominator) & 1


def _input_lowest(x: ExactValue) -> int | None:
    """Weight of the lowest set bit of |x|, or None when its binary expansion is infinite."""
    d = x.magnitude.denominator
    if d & (d - 1):
        return None
    n = x.magnitude.numerator
    return (n & -n).bit_length() - 1 - (d.bit_length() - 1)


def zone_of(f: Format, weight: int, flush: bool = False) -> str | None:
    """The zone of ``f`` a leading bit at 2^weight falls in: 'overflow' (beyond the largest
    binade), 'subnormal', 'underflow' (below the smallest subnormal, or below the smallest
    normal when subnormals are flushed) or None (normal)."""
    if weight > f.emax:
        return "overflow"
    if weight >= f.emin:
        return None
    lowest = f.emin - f.significand_bits if f.has_subnormals and not flush else f.emin
    return "subnormal" if weight >= lowest else "underflow"


def _zone_edges(f: Format) -> list[int]:
    """The highest weight of each zone below a zone boundary, with the one above it."""
    edges = [f.emax + 1, f.emax, f.emin, f.emin - 1]
    if f.has_subnormals:
        low = f.emin - f.significand_bits
        edges += [low, low - 1]
    return edges


def make_ruler(c: Comparison) -> Ruler | None:
    """The columns for a comparison: every band's leading and last bits, the first dropped bit,
    the input's leading bits, the binary point and nearby zone boundaries; long runs between
    them elided. None when there is no bit to place (all NaN, Inf or beyond range)."""
    spans = [(p[0], p[0] - len(p[1]) + 1) for r in c.rows if (p := placed(r)) is not None]
    msb = _input_msb(c.input)
    if not spans and msb is None:
        return None
    highs = [s[0] for s in spans] + ([msb] if msb is not None else [])
    lows = [s[1] for s in spans] + ([msb] if msb is not None else [])
    hi, lo = max(highs), min(lows)
    if msb is not None and spans:  # the input's bits a few weights beyond the last kept bit
        lowest = _input_lowest(c.input)
        lo = min(lo, max(min(s[1] for s in spans) - 2, lowest if lowest is not None else lo - 2))
    for lead_reach, tail_reach, zones in ((3, 1, True), (1, 1, True), (1, 0, True), (1, 0, False),
                                          (0, 0, False)):
        keep: set[int] = set()
        for lead, last in spans:
            keep.update(range(lead - lead_reach, lead + 1))
            keep.update(range(last - tail_reach - 1, last + tail_reach + 1))
        if msb is not None:
            keep.update(range(msb - lead_reach, msb + 1))
        keep.update(w for w in (hi, lo) if w is not None)
        if lo <= -1 and hi >= 0:
            keep.update((0, -1))
        if zones:
            for r in c.rows:
                keep.update(w for w in _zone_edges(r.format)
                            if lo - _ZONE_REACH <= w <= hi + _ZONE_REACH)
        ruler = _columns(sorted(keep, reverse=True))
        if ruler.size <= MAX_COLUMNS:
            return ruler
    return ruler


def _columns(weights: list[int]) -> Ruler:
    cols: list[Column] = []
    for w in weights:
        if cols and cols[-1].lo - w > 1:
            cols.append(Column(cols[-1].lo - 1, w + 1))
        cols.append(Column(w, w))
    return Ruler(tuple(cols))


# ----- markup -------------------------------------------------------------------------------------
def _e(text: object) -> str:
    return escape(str(text), quote=True)


def _sup(k: int) -> str:
    return str(k)


def _cell(col: int, text: str, style: str, title: str | None = None) -> str:
    t = f' title="{_e(title)}"' if title else ""
    return f'<span{t} style="grid-area:1/{col};{style}">{_e(text)}</span>'


def _row_style(r: Ruler, extra: str = "") -> str:
    return (f"{r.template()};{_MONO};font-size:11px;line-height:15px;text-align:center;"
            f"column-gap:0;{extra}")


def _point(r: Ruler, rows: str = "1/2") -> str:
    p = r.point
    if p is None:
        return ""
    return (f'<span title="binary point (between 2^0 and 2^-1)" style="grid-column:{p};'
            f'grid-row:{rows};border-left:2px solid currentColor;opacity:0.45;'
            'pointer-events:none"></span>')


def ruler_scale_html(r: Ruler) -> str:
    """The scale across the top: the exponent k of some columns' weights 2^k, ``⋯`` where
    weights are elided (its title names them)."""
    cells = []
    last_label = -10
    for i, col in enumerate(r.columns, start=1):
        if col.elided:
            n = col.hi - col.lo + 1
            cells.append(_cell(i, "⋯", _FADED,
                               f"2^{col.hi} … 2^{col.lo}: {n} weights not shown"))
            continue
        k = col.hi
        edge = i in (1, r.size) or r.columns[i - 2].elided or (i < r.size and r.columns[i].elided)
        if (k % 4 == 0 or edge or k == 0) and i - last_label >= 3:
            cells.append(_cell(i, _sup(k), "font-size:9px;white-space:nowrap;overflow:visible",
                               f"weight 2^{k}"))
            last_label = i
    return (f'<div class="bitprism-ruler-scale" style="{_row_style(r, "opacity:0.8")}">'
            + "".join(cells) + _point(r) + "</div>")


def _digit_style(role: str, bit: str) -> str:
    if role == "implicit":
        return "outline:1px dashed currentColor;outline-offset:-2px"
    if role == "dropped":
        return "text-decoration:line-through;opacity:0.45"
    if role == "input":
        return ""
    s = TILES["significand"]
    if bit == "1":
        return f"background:{s.background};color:{s.text}"
    return f"box-shadow:inset 0 0 0 1px {s.background}"


_TITLES = {
    "input": "bit of the exact input",
    "implicit": "implicit leading bit (not stored)",
    "significand": "significand bit",
    "dropped": "bit of the exact input this format drops",
}


def input_ruler_html(c: Comparison, r: Ruler) -> str:
    """The exact input's bits on the ruler (nothing for NaN, Inf, zero, or beyond range);
    ``…`` after the last column when more nonzero bits follow."""
    x = c.input
    msb = _input_msb(x)
    if msb is None:
        return ""
    cells = []
    for i, col in enumerate(r.columns, start=1):
        if col.hi > msb:
            continue
        if col.elided:
            cells.append(_cell(i, "⋯", _FADED, f"input bits 2^{col.hi} … 2^{col.lo}"))
        else:
            cells.append(_cell(i, str(_input_bit(x, col.hi)), ""))
    lowest = _input_lowest(x)
    more = lowest is None or lowest < r.bottom
    tail = _cell(r.size + 1, "…", "", "more bits follow") if more else ""
    return (f'<div class="bitprism-ruler-input" style="{_row_style(r)}">'
            + "".join(cells) + _point(r) + tail + "</div>")


def _band_cells(c: Comparison, row: FormatRow, r: Ruler) -> list[str]:
    p = placed(row)
    if p is None:
        return []
    lead, digits = p
    last = lead - len(digits) + 1
    x = c.source if c.via is None else c.input
    msb = _input_msb(x)
    rounded = row.abs_error is not None and row.abs_error != 0
    cells = []
    for i, col in enumerate(r.columns, start=1):
        if col.elided:
            if col.hi <= lead and col.lo >= last:
                cells.append(_cell(i, "⋯", _FADED, f"bits 2^{col.hi} … 2^{col.lo}"))
            elif msb is not None and col.hi < last and col.hi <= msb:
                cells.append(_cell(i, "⋯", "opacity:0.35", "dropped bits"))
            continue
        w = col.hi
        if last <= w <= lead:
            bit = digits[lead - w]
            role = "implicit" if w == lead else "significand"
            style = _digit_style(role, bit)
            title = _TITLES[role] if role == "implicit" else None
            if rounded and msb is not None and w <= msb + 1 and _input_bit(x, w) != int(bit):
                style += ";text-decoration:underline;text-decoration-thickness:2px"
                title = "changed by the rounding (carry)"
            cells.append(_cell(i, bit, style, title))
        elif msb is not None and w < last and w <= msb:
            bit = str(_input_bit(x, w))
            cells.append(_cell(i, bit, _digit_style("dropped", bit),
                               _TITLES["dropped"] if w == last - 1 else None))
    return cells


def _zone_strip(f: Format, r: Ruler, flush: bool = False) -> str:
    """Under a band: the columns where a leading bit would overflow, be subnormal or underflow
    to zero in ``f``, shaded with the outcome's colour and named by its mark and title."""
    runs: list[tuple[str, int, int]] = []
    for i, col in enumerate(r.columns, start=1):
        z = zone_of(f, col.lo if col.elided else col.hi, flush)
        if col.elided and z != zone_of(f, col.hi, flush):
            z = None  # a run across a boundary (never made by make_ruler): leave it blank
        if z is None:
            continue
        if runs and runs[-1][0] == z and runs[-1][2] == i - 1:
            runs[-1] = (z, runs[-1][1], i)
        else:
            runs.append((z, i, i))
    out = []
    for z, a, b in runs:
        o = OUTCOMES[z]
        # the name, when the run is long enough to hold it, follows the mark as one unbreakable
        # piece in a one-line box that wraps: where the column is too narrow for it, it moves
        # to the hidden second line, so a zone shows its whole name or its mark, never a cut name
        name = "" if b - a < 5 else (
            '<span style="white-space:nowrap;flex-shrink:0;max-width:100%;overflow:hidden">'
            f"{_e(o.name)}</span>")
        title = f"{f.name}: {o.name} zone ({o.meaning})"
        out.append(
            f'<span class="bitprism-zone" title="{_e(title)}" '
            f'style="grid-column:{a}/{b + 1};grid-row:2;'
            f'{outcome_style(z)};font-size:9px;line-height:11px;height:11px;overflow:hidden;'
            f'display:flex;flex-wrap:wrap;align-content:flex-start;column-gap:3px;'
            f'padding-left:2px"><span>{_e(o.mark)}</span>{name}</span>')
    return "".join(out)


def band_ruler_html(c: Comparison, row: FormatRow, r: Ruler) -> str:
    """One band on the ruler: its significand bits under their weights (implicit bit dashed,
    dropped input bits faded and struck, carry-changed bits underlined) over its zone strip."""
    cells = _band_cells(c, row, r)
    if not cells:
        word = {CodeClass.ZERO: "zero: no bits to place", CodeClass.INFINITE: "Inf",
                CodeClass.QUIET_NAN: "NaN", CodeClass.SIGNALING_NAN: "NaN"}[row.kind]
        cells = [f'<span style="grid-area:1/1/2/-1;text-align:left;{_FADED}">({_e(word)})</span>']
    return (f'<div class="bitprism-ruler-band" style="{_row_style(r)}">'
            + "".join(cells) + _zone_strip(row.format, r, c.options.subnormals == "flush") + _point(r, "1/3") + "</div>")


def ruler_legend_html() -> str:
    """What the ruler's marks mean, in words beside each mark."""
    s = TILES["significand"]
    items = [
        (f"background:{s.background};color:{s.text}", "1", "significand bit 1"),
        (f"box-shadow:inset 0 0 0 1px {s.background}", "0", "significand bit 0"),
        ("outline:1px dashed currentColor;outline-offset:-2px", "1",
         FIELDS["implicit"].name + " (not stored)"),
        ("text-decoration:line-through;opacity:0.45", "1", FIELDS["dropped"].name),
        ("text-decoration:underline;text-decoration-thickness:2px", "1", "changed by rounding"),
        (_FADED, "⋯", "weights not shown"),
    ]
    parts = [
        f'<span style="white-space:nowrap"><span style="{_MONO};display:inline-block;'
        f'width:12px;text-align:center;{st}">{_e(mark)}</span> {_e(words)}</span>'
        for st, mark, words in items
    ]
    for key in ("overflow", "subnormal", "underflow"):
        o = OUTCOMES[key]
        parts.append(f'<span style="white-space:nowrap"><span style="{outcome_style(key)};'
                     f'padding:0 3px;font-size:9px">{_e(o.mark)}</span> {_e(o.name)} zone</span>')
    return ('<div class="bitprism-ruler-legend" style="font-size:11px;opacity:0.85;display:flex;'
            'flex-wrap:wrap;column-gap:10px;margin:2px 0">' + "".join(parts) + "</div>")
