"""Static HTML for a ``Comparison``: one band per format, a caption row and the weight-aligned
view. Inline CSS only, no scripts, no external resources; every piece of text is escaped.

Bits are drawn as runs of monospace characters, one run per field, so a band of float64 costs a
few hundred bytes rather than one element per bit; in the weight-aligned view every character
column is one power of two, so the runs of different formats line up on the binary point.
"""

from __future__ import annotations

from dataclasses import dataclass
from fractions import Fraction
from html import escape
from typing import TYPE_CHECKING, Sequence

from ..numerics.compare import Comparison, FormatRow
from ..numerics.decimal_text import abbreviate_decimal, exact_decimal, readable_decimal
from ..numerics.digits import fraction_text
from ..numerics.exact import ExactValue, floor_log2
from ..numerics.inspect import CodeClass
from .compare_text import (
    MINUS,
    class_label,
    event_labels,
    field_notes,
    format_error,
    format_number,
)
from .palette import badge_style, tile_style

if TYPE_CHECKING:
    from ..numerics.evaluate import Evaluation

__all__ = [
    "ALIGNED_MAX_COLUMNS",
    "aligned_html",
    "band_html",
    "comparison_html",
    "evaluations_html",
    "header_html",
]

# The weight-aligned view shows at most this many powers of two; wider spans are cut at the
# low end (a band whose last bit falls past the cut is marked with '›').
ALIGNED_MAX_COLUMNS = 80

_MONO = "font-family:var(--jp-code-font-family,monospace);white-space:pre"
_MUTED = "opacity:0.8;font-size:90%"
_BADGE_ROLE = {
    CodeClass.ZERO: "zero",
    CodeClass.SUBNORMAL: "subnormal",
    CodeClass.NORMAL: "normal",
    CodeClass.INFINITE: "inf",
    CodeClass.QUIET_NAN: "nan",
    CodeClass.SIGNALING_NAN: "nan",
}


def _e(text: object) -> str:
    return escape(str(text), quote=True)


def _span(text: str, style: str, title: str | None = None, cls: str | None = None) -> str:
    t = f' title="{_e(title)}"' if title else ""
    c = f' class="{cls}"' if cls else ""
    return f'<span{c}{t} style="{style}">{_e(text)}</span>'


def badge(role: str, text: str, title: str | None = None) -> str:
    return _span(text, badge_style(role), title)


def _class_badge(row: FormatRow) -> str:
    kind = CodeClass(row.fields.kind)
    return badge(_BADGE_ROLE[kind], class_label(row), f"class: {class_label(row)}")


def _frac_title(q: Fraction | None) -> str:
    return "undefined" if q is None else f"exactly {fraction_text(q)}"


def _bit_runs(row: FormatRow) -> str:
    """sign | exponent | (implicit) trailing significand, each field one run of tiles."""
    f = row.format
    bits = row.bits()
    s, w = f.sign_bits, f.exponent_bits
    notes = field_notes(row)
    out = []
    if s:
        out.append(_span(bits[:s], tile_style("sign"), f"sign: {notes['sign']}"))
    out.append(
        _span(bits[s : s + w], tile_style("exponent"), f"biased exponent: {notes['exponent']}")
    )
    kind = CodeClass(row.fields.kind)
    if kind not in (CodeClass.INFINITE, CodeClass.QUIET_NAN, CodeClass.SIGNALING_NAN):
        lead = "0" if kind in (CodeClass.ZERO, CodeClass.SUBNORMAL) else "1"
        out.append(
            _span(lead, tile_style("implicit"), "implicit leading bit (not stored)")
        )
    if f.significand_bits:
        out.append(
            _span(
                bits[s + w :],
                tile_style("significand"),
                f"trailing significand: {notes['significand']}",
            )
        )
    return " ".join(out)


def header_html(c: Comparison) -> str:
    """Input, options and the caption row naming the fields in words."""
    opts = c.options
    setting = f"{opts.rounding} · overflow {opts.overflow} · subnormals {opts.subnormals}"
    if opts.rounding == "stochastic":
        setting += f" · seed {opts.seed}"
    if c.via is not None:
        setting += f" · rounded first via {c.via.name}"
    x = c.input
    if x.is_finite and not x.clamped:
        full = exact_decimal(x.value)  # already shortened beyond digits.FULL_DIGITS
        shown = full if "…" in full else abbreviate_decimal(full, 40)
    else:
        full = shown = str(x)
    caption = " ".join(
        [
            _span("s", tile_style("sign"), "sign bit"),
            "sign",
            _span("e", tile_style("exponent"), "biased exponent field"),
            "biased exponent",
            _span("1", tile_style("implicit"), "implicit leading bit, not stored"),
            "implicit bit",
            _span("t", tile_style("significand"), "trailing significand field"),
            "trailing significand",
            _span("d", tile_style("dropped"), "bits of the exact input this format drops"),
            "dropped by the cast",
        ]
    )
    return (
        f'<div style="margin-bottom:4px;line-height:1.4"><b>input</b> <code>{_e(c.text)}</code> = '
        f'<span title="{_e(full)}" style="{_MONO}">{_e(shown)}</span>'
        f'<div style="{_MUTED}">{_e(setting)}</div>'
        f'<div style="{_MUTED};margin-top:2px">{caption}</div></div>'
    )


def _neighbour_text(row: FormatRow, which: str) -> str:
    n = row.next_down if which == "down" else row.next_up
    if n is None:
        return "none"
    shown = n.shortest
    if n.value.is_finite:
        shown = readable_decimal(n.shortest, exact_decimal(n.value.value))
    return f"{shown} ({_hex(n.code, row)})"


def _hex(code: int, row: FormatRow) -> str:
    return f"0x{code:0{(row.format.bits + 3) // 4}x}"


def band_html(c: Comparison, row: FormatRow, tiles: bool = True) -> str:
    """One format's band: name, class badge, bit tiles, field notes, value, errors, neighbours."""
    f = row.format
    notes = field_notes(row)
    events = " ".join(badge("flag", ev) for ev in event_labels(row))
    head = (
        f'<b>{_e(f.name)}</b> <span style="{_MUTED}">{_e(f.layout)} bias {f.bias}</span> '
        f"{_class_badge(row)} {events}"
        f' <code style="{_MUTED}">{_hex(row.code, row)}</code>'
    )
    parts = [f"<div>{head}</div>"]
    if tiles:
        parts.append(f'<div style="{_MONO};margin:2px 0">{_bit_runs(row)}</div>')
    sign_note = f"sign {notes['sign']}" if f.signed else notes["sign"]
    parts.append(
        f'<div style="{_MUTED}">{_e(sign_note)} · {_e(notes["exponent"])} · '
        f'{_e(notes["significand"])}</div>'
    )
    if row.stored.is_finite:
        exact = row.exact
        value = (
            '<details style="display:inline-block"><summary>'
            f"<b>{_e(readable_decimal(row.shortest, exact))}</b> "
            f'<span style="{_MUTED}">(exact decimal)</span></summary>'
            f'<span style="{_MONO};white-space:normal;word-break:break-all">{_e(exact)}</span>'
            "</details>"
        )
    else:
        value = f"<b>{_e(row.shortest)}</b>"
    err = (
        f'<span title="{_e(_frac_title(row.abs_error))}">abs {_e(format_number(row.abs_error, 4, True))}</span>'
        f' · <span title="{_e(_frac_title(row.rel_error))}">rel {_e(format_number(row.rel_error, 4, True))}</span>'
        f' · <span title="{_e(_frac_title(row.ulp_error))}">{_e(format_error(row.ulp_error))} ulp</span>'
        f' · ulp here {_e(_ulp_text(row))}'
    )
    parts.append(f"<div>stored {value}</div>")
    parts.append(f'<div style="{_MUTED}">error {err}</div>')
    parts.append(
        f'<div style="{_MUTED}">next down {_e(_neighbour_text(row, "down"))} · '
        f'next up {_e(_neighbour_text(row, "up"))}</div>'
    )
    return (
        f'<div class="bitprism-band" data-format="{_e(f.name)}" '
        f'style="border-left:3px solid #8a8a8a;padding:2px 8px;margin:6px 0;line-height:1.4">'
        + "".join(parts)
        + "</div>"
    )


def _ulp_text(row: FormatRow) -> str:
    if row.ulp is None:
        return "n/a"
    e = floor_log2(row.ulp)
    return f"2^{e}" if e >= 0 else f"2^{MINUS}{-e}"


# ----- weight-aligned view --------------------------------------------------------------------
@dataclass(frozen=True)
class _Placed:
    """Significand bits of one row placed by weight: lead weight and the digit string."""

    lead: int  # weight (power of two) of the first digit (the implicit bit)
    digits: str  # implicit bit first, then the trailing significand


def _placed(row: FormatRow) -> _Placed | None:
    kind = CodeClass(row.fields.kind)
    if kind not in (CodeClass.NORMAL, CodeClass.SUBNORMAL):
        return None
    f = row.format
    t = f.significand_bits
    frac = format(int(row.fields.significand), f"0{t}b") if t else ""
    if kind == CodeClass.SUBNORMAL:
        return _Placed(f.emin, "0" + frac)
    return _Placed(int(row.fields.exponent) - f.bias, "1" + frac)


def _input_bits(x: ExactValue, top: int, bottom: int) -> tuple[str, bool]:
    """Binary digits of |x| at weights top..bottom and whether nonzero bits lie below."""
    mag = x.magnitude
    scaled = mag / Fraction(2) ** bottom
    n = scaled.numerator // scaled.denominator
    more = n != scaled
    width = top - bottom + 1
    digits = format(n, "b")
    if len(digits) > width:
        digits = digits[-width:]
    return digits.rjust(width, "0"), more


def aligned_html(c: Comparison) -> str:
    """Every band's significand bits placed by power-of-two weight (one column per weight),
    under the exact input's bits; the bits a cast drops are shown struck through."""
    placed = [(r, _placed(r)) for r in c.rows]
    spans = [(p.lead, p.lead - len(p.digits) + 1) for _, p in placed if p is not None]
    if not spans:
        return ""
    x = c.input
    ref_ok = x.is_finite and not x.is_zero and not x.clamped
    top = max(s[0] for s in spans)
    if ref_ok:
        top = max(top, x.floor_log2())
    bottom = min(s[1] for s in spans)
    cut = top - bottom + 1 > ALIGNED_MAX_COLUMNS
    if cut:
        bottom = top - ALIGNED_MAX_COLUMNS + 1
    name_w = max(len("exact input"), *(len(r.format.name) for r in c.rows))
    has_point = top >= 0 and bottom <= -1
    header = (
        f"leftmost column 2^{_exp(top)}, rightmost 2^{_exp(bottom)}"
        + ("; '.' marks the binary point" if has_point else "")
        + ("; cut at the low end (›)" if cut else "")
    )
    lines = [f'<div style="{_MUTED}">weight-aligned view: {_e(header)}</div>']
    ref_digits: str | None = None
    if ref_ok:
        ref_digits, more = _input_bits(x, top, bottom)
        cells = {top - i: (d, "input") for i, d in enumerate(ref_digits)}
        first = ref_digits.find("1")
        for i in range(max(first, 0)):
            del cells[top - i]  # no leading zeros before the input's first 1
        title = "exact input" + (f", rounded first via {c.via.name}" if c.via else "")
        body = _columns(cells, top, bottom, has_point) + ("…" if more else "")
        lines.append(f'<div title="{_e(title)}">{_e("exact input".ljust(name_w))} {body}</div>')
    for row, p in placed:
        label = _e(row.format.name.ljust(name_w))
        if p is None:
            lines.append(
                f'<div>{label} <span style="{_MUTED}">({_e(class_label(row))}: no bits to place)'
                "</span></div>"
            )
            continue
        last = p.lead - len(p.digits) + 1
        cells = {}
        for i, d in enumerate(p.digits):
            cells[p.lead - i] = (d, "implicit" if i == 0 else "significand")
        if ref_digits is not None and last > bottom:
            dropped = ref_digits[top - last + 1 :].rstrip("0")
            for i, d in enumerate(dropped):
                cells[last - 1 - i] = (d, "dropped")
        marker = "›" if last < bottom else ""
        lines.append(f"<div>{label} {_columns(cells, top, bottom, has_point)}{marker}</div>")
    return f'<div style="{_MONO};line-height:1.5;margin-top:6px">' + "".join(lines) + "</div>"


def _columns(cells: dict[int, tuple[str, str]], top: int, bottom: int, has_point: bool) -> str:
    """One character per weight from ``top`` down to ``bottom`` (blank where no cell), runs of
    equal role in one span, '.' after weight 0 in every row."""
    lowest = min((w for w in cells if bottom <= w <= top), default=None)
    if lowest is None:
        return ""
    out: list[str] = []
    run: list[str] = []
    role: str | None = None

    def flush() -> None:
        if run:
            out.append(_run("".join(run), role))
            run.clear()

    for w in range(top, lowest - 1, -1):
        ch, r = cells.get(w, (" ", None))  # type: ignore[arg-type]
        if r != role:
            flush()
            role = r
        run.append(ch)
        if has_point and w == 0 and lowest <= -1:
            flush()
            out.append(".")
    flush()
    return "".join(out)


def _exp(n: int) -> str:
    return str(n) if n >= 0 else f"{MINUS}{-n}"


_RUN_TITLES = {
    "implicit": "implicit leading bit",
    "significand": "trailing significand bits",
    "dropped": "bits of the exact input below this format's last bit: dropped by the cast",
    "input": "bits of the exact input",
}


def _run(text: str, role: str | None) -> str:
    if role is None or role == "input":
        return _e(text)
    return _span(text, tile_style(role, aligned=True), _RUN_TITLES[role])


def comparison_html(c: Comparison, aligned: bool = True, tiles: bool = True) -> str:
    """The whole comparison: header with caption row, one band per format, aligned view."""
    bands = "".join(band_html(c, r, tiles=tiles) for r in c.rows)
    view = aligned_html(c) if aligned else ""
    return (
        '<div class="bitprism-compare" style="font-size:13px;line-height:1.4">'
        + header_html(c)
        + bands
        + view
        + "</div>"
    )


def evaluations_html(evaluations: Sequence[Evaluation]) -> str:
    """Per-format arithmetic (``numerics.evaluate`` results): each format's answer, the exact
    answer rounded once, and every step that was not exact (absorbed addends, overflow...)."""
    from ..numerics.decimal_text import shortest_decimal

    rows = []
    for ev in evaluations:
        fmt = ev.format
        result = shortest_decimal(ev.code, fmt)
        if ev.exact_code is None:
            once = "n/a"
        else:
            once = shortest_decimal(ev.exact_code, fmt)
        differs = ev.exact_code is not None and ev.exact_code != ev.code
        notes = [
            f"{s.operation} {s.event}"
            for s in ev.steps
            if s.event != "exact" and s.kind != "literal"
        ]
        lit = [s for s in ev.steps if s.kind == "literal" and s.event != "exact"]
        if lit:
            notes.append(f"{len(lit)} literal(s) rounded")
        mark = badge("flag", "differs from one rounding") if differs else ""
        rows.append(
            f"<tr><td><b>{_e(fmt.name)}</b></td><td>{_e(result)}</td><td>{_e(once)} {mark}</td>"
            f'<td style="{_MUTED}">{_e("; ".join(notes) or "every step exact")}</td></tr>'
        )
    head = (
        "<tr><th style=\"text-align:left\">format</th><th style=\"text-align:left\">computed in format</th>"
        "<th style=\"text-align:left\">exact, rounded once</th><th style=\"text-align:left\">steps</th></tr>"
    )
    return (
        '<table class="bitprism-evaluation" style="border-collapse:collapse;font-size:13px">'
        + head
        + "".join(rows)
        + "</table>"
    )
