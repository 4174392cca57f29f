"""Static HTML for a ``Comparison``: the verdict first, then the ruler, then the raw encoding.

Layout (the same pieces make the Prism widget's bands and ``compare()``'s page):

* a header: the exact input, the cast options, the ruler's legend and scale, the input's bits;
* one band per format: its verdict in words with the outcome's mark and colour, its bits on
  the shared power-of-two ruler (``render.ruler_html``), the stored value as the shortest
  decimal that reads back and the exact one, the errors, and the raw encoding (sign, biased
  exponent, trailing significand, hex).

Inline CSS only (a ``<style>`` element from ``palette.theme_css`` only switches the outcome
colours for JupyterLab's dark theme); no scripts, no external resources; every piece of text is
escaped. Words come from ``render.verdicts`` and ``render.vocabulary``.
"""

from __future__ import annotations

from fractions import Fraction
from html import escape
from typing import TYPE_CHECKING, Sequence

from ..formats import Format
from ..numerics.compare import Comparison, FormatRow
from ..numerics.digits import fraction_text
from ..numerics.exact import ExactValue, floor_log2
from ..numerics.inspect import CodeClass
from .compare_text import class_label, format_error, format_number
from .palette import badge_style, theme_css, tile_style
from .ruler_html import (
    Ruler,
    band_ruler_html,
    input_ruler_html,
    make_ruler,
    ruler_legend_html,
    ruler_scale_html,
)
from .verdicts import (
    exact_input_text,
    neighbour_text,
    options_text,
    stored_pair,
    verdict,
)
from .vocabulary import FIELDS, OUTCOMES, UNITS, WORDS

if TYPE_CHECKING:
    from ..numerics.evaluate import Evaluation

__all__ = [
    "band_bar",
    "band_detail_html",
    "band_html",
    "caption_html",
    "comparison_html",
    "evaluations_html",
    "header_html",
    "prism_css",
    "raw_fields_html",
    "verdict_html",
]

_MUTED = "opacity:0.8;font-size:90%"
_MONO = "font-family:var(--jp-code-font-family,monospace)"
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


def _span(text: str, style: str, title: str | None = None) -> str:
    t = f' title="{_e(title)}"' if title else ""
    return f'<span{t} style="{style}">{_e(text)}</span>'


def _hex(code: int, row: FormatRow) -> str:
    return f"0x{code:0{(row.format.bits + 3) // 4}x}"


def caption_html(text: str) -> str:
    """A line above the bands naming what is shown (e.g. a tensor cell); nothing when empty."""
    if not text:
        return ""
    return f'<div class="bitprism-caption-line" style="font-weight:600;margin:2px 0">{_e(text)}</div>'


def verdict_html(c: Comparison, row: FormatRow, name: bool = True) -> str:
    """The verdict line: (format name,) the outcome's mark and name on its colour, the words."""
    key, words = verdict(c, row)
    o = OUTCOMES[key]
    badge = (f'<span class="bitprism-outcome bitprism-{key}" title="{_e(o.meaning)}" '
             f'style="{badge_style(key)}">{_e(o.mark)} {_e(o.name)}</span>'
             if o.mark != o.name else
             f'<span class="bitprism-outcome bitprism-{key}" title="{_e(o.meaning)}" '
             f'style="{badge_style(key)}">{_e(o.name)}</span>')
    head = f"<b>{_e(row.format.name)}</b> " if name else ""
    return (f'<div class="bitprism-verdict" data-outcome="{key}" style="line-height:1.5">'
            f"{head}{badge} <span>{_e(words)}</span></div>")


def _stored_line(row: FormatRow) -> str:
    shortest, exact = stored_pair(row)
    kind = CodeClass(row.fields.kind)
    cls = _span(class_label(row), f"{badge_style(_BADGE_ROLE[kind])}", f"class: {class_label(row)}")
    code = f'<code style="{_MUTED}">{_hex(row.code, row)}</code>'
    if not row.stored.is_finite or row.stored.is_zero:
        value = f"<b>{_e(shortest)}</b>"
    elif shortest == exact:
        value = f'exact <b style="{_MONO}">{_e(exact)}</b>'
    else:
        title = f' title="{_e(row.exact)}"' if len(row.exact) <= 1200 else ""
        value = (f'shortest <b style="{_MONO}">{_e(shortest)}</b> · exact '
                 f'<span{title} style="{_MONO};word-break:break-all">{_e(exact)}</span>')
    return f'<div>stored {value} {cls} {code}</div>'


def _frac_title(q: Fraction | None) -> str:
    return "undefined" if q is None else f"exactly {fraction_text(q)}"


def _ulp_here(row: FormatRow) -> str:
    if row.ulp is None:
        return "n/a"
    return f"2^{floor_log2(row.ulp)}"


def _error_line(row: FormatRow) -> str:
    if row.abs_error is None:
        return ""
    if row.abs_error == 0:
        return f'<div style="{_MUTED}">error 0 · {UNITS["ulp"]} here {_e(_ulp_here(row))}</div>'
    return (
        f'<div style="{_MUTED}">error '
        f'<span title="{_e(_frac_title(row.abs_error))}">abs {_e(format_number(row.abs_error, 4, True))}</span>'
        f' · <span title="{_e(_frac_title(row.rel_error))}">{UNITS["relative"]} '
        f'{_e(format_number(row.rel_error, 4, True))}</span>'
        f' · <span title="{_e(_frac_title(row.ulp_error))}">{_e(format_error(row.ulp_error))} '
        f'{UNITS["ulp"]}</span> · {UNITS["ulp"]} here {_e(_ulp_here(row))}</div>'
    )


def band_detail_html(c: Comparison, row: FormatRow, ruler: Ruler | None,
                     neighbours: bool = False) -> str:
    """A band's body: its bits on the ruler, the stored value, the errors (the widget shows the
    verdict and the raw bits around it)."""
    parts = []
    if ruler is not None:
        parts.append(band_ruler_html(c, row, ruler))
    parts.append(_stored_line(row))
    parts.append(_error_line(row))
    if neighbours:
        parts.append(f'<div style="{_MUTED}">{_e(WORDS["down"])} {_e(neighbour_text(row, "down"))}'
                     f' · {_e(WORDS["up"])} {_e(neighbour_text(row, "up"))}</div>')
    return (f'<div class="bitprism-band" data-format="{_e(row.format.name)}" '
            f'style="line-height:1.45">' + "".join(parts) + "</div>")


def raw_fields_html(row: FormatRow) -> str:
    """The raw encoding's words beside its bits: hex, and each field's integer and meaning."""
    f = row.format
    fl = row.fields
    kind = row.kind
    parts = [f'<code title="the bit pattern in hex">{_hex(row.code, row)}</code>']
    if f.signed:
        parts.append(f'{FIELDS["sign"].name} {"−" if fl.sign else "+"}')
    e = int(fl.exponent)
    if kind in (CodeClass.NORMAL,):
        meaning = f" (2^{e - f.bias})"
    elif kind in (CodeClass.ZERO, CodeClass.SUBNORMAL):
        meaning = f" (subnormal range, 2^{f.emin})"
    else:
        meaning = " (special)" if f.specials == "ieee" else ""
    parts.append(f'{FIELDS["exponent"].name} {e}{meaning}')
    if f.significand_bits:
        sig = int(fl.significand)
        extra = ""
        if kind in (CodeClass.QUIET_NAN, CodeClass.SIGNALING_NAN):
            word = WORDS["quiet"] if kind == CodeClass.QUIET_NAN else WORDS["signaling"]
            extra = f" ({word}, {WORDS['payload']} {int(fl.payload):#x})"
        parts.append(f'{FIELDS["significand"].name} {sig:#x}{_e(extra)}')
    return f'<span style="{_MUTED};line-height:1.4">' + " · ".join(parts) + "</span>"


def _raw_line(row: FormatRow) -> str:
    """Static raw bits: sign | biased exponent | trailing significand, one run per field."""
    f = row.format
    bits = row.bits()
    s, w = f.sign_bits, f.exponent_bits
    runs = []
    if s:
        runs.append(_span(bits[:s], tile_style("sign"), FIELDS["sign"].name))
    runs.append(_span(bits[s:s + w], tile_style("exponent"), FIELDS["exponent"].name))
    if f.significand_bits:
        runs.append(_span(bits[s + w:], tile_style("significand"), FIELDS["significand"].name))
    return (f'<div class="bitprism-raw" style="margin-top:2px"><span style="{_MONO};'
            f'font-size:11px;word-break:break-all">{" ".join(runs)}</span> {raw_fields_html(row)}</div>')


def band_html(c: Comparison, row: FormatRow, ruler: Ruler | None = None) -> str:
    """One format's band as a static block: verdict, ruler row, stored value, errors, raw bits."""
    body = band_detail_html(c, row, ruler, neighbours=True)
    inner = body[body.index(">") + 1 : -len("</div>")]
    key, _ = verdict(c, row)
    return (f'<div class="bitprism-band" data-format="{_e(row.format.name)}" '
            f'style="{band_bar(key)};padding:2px 0 2px 8px;margin:8px 0;line-height:1.45">'
            + verdict_html(c, row) + inner + _raw_line(row) + "</div>")


def band_bar(key: str) -> str:
    """The band's left bar in its outcome's colour (a dashed bar for 'rounded', which has none)."""
    o = OUTCOMES[key]
    if o.light.fill is None:
        return "border-left:4px dashed currentColor"
    return f"border-left:4px solid var(--bp-{key}-fill,{o.light.fill})"


def header_html(c: Comparison, ruler: Ruler | None = None) -> str:
    """The exact input, the cast options and, with a ruler, its legend, scale and input bits."""
    ruler_part = ""
    if ruler is not None:
        ruler_part = (ruler_legend_html() + ruler_scale_html(ruler) + input_ruler_html(c, ruler))
    return (
        f'<div class="bitprism-header" style="line-height:1.45;margin-bottom:4px">'
        f'<div><b>input</b> <code>{_e(c.text)}</code> = <span style="{_MONO};'
        f'word-break:break-all">{_e(exact_input_text(c))}</span></div>'
        f'<div style="{_MUTED}">{_e(options_text(c))}</div>{ruler_part}</div>'
    )


def comparison_html(c: Comparison, aligned: bool = True) -> str:
    """The whole comparison: header, one band per format; ``aligned`` draws the ruler."""
    ruler = make_ruler(c) if aligned else None
    bands = "".join(band_html(c, r, ruler) for r in c.rows)
    return (
        '<div class="bitprism bitprism-compare" style="font-size:13px;line-height:1.4;'
        'max-width:100%;overflow-wrap:anywhere">'
        + theme_css() + header_html(c, ruler) + bands + "</div>"
    )


def evaluations_html(evaluations: Sequence[Evaluation]) -> str:
    """Per-format arithmetic (``numerics.evaluate`` results): each format's answer, the exact
    answer rounded once, and the cause of every step that was not exact, in ``evaluate()``'s
    words (overflow, absorbed, rounded, underflow to zero...)."""
    from .evaluation_text import short_value, step_cause

    rows = []
    for ev in evaluations:
        fmt = ev.format
        result = short_value(ev.result)
        once = "n/a" if ev.exact is None or ev.exact_code is None else short_value(
            _decoded(ev.exact_code, fmt))
        differs = ev.exact_code is not None and ev.exact_code != ev.code
        causes = [step_cause(s) for s in ev.steps if s.event != "exact"]
        mark = (f' <span style="{badge_style("flag")}">differs from one rounding</span>'
                if differs else "")
        rows.append(
            f"<tr><td><b>{_e(fmt.name)}</b></td><td>{_e(result)}</td><td>{_e(once)}{mark}</td>"
            f'<td style="{_MUTED}">{"<br>".join(_e(x) for x in causes) or "every step exact"}'
            "</td></tr>"
        )
    head = (
        "<tr><th style=\"text-align:left\">format</th><th style=\"text-align:left\">computed in format</th>"
        "<th style=\"text-align:left\">exact, rounded once</th><th style=\"text-align:left\">steps that were not exact</th></tr>"
    )
    return (
        '<div style="max-width:100%;overflow-x:auto">'
        '<table class="bitprism-evaluation" style="border-collapse:collapse;font-size:13px">'
        + head + "".join(rows) + "</table></div>"
    )


def _decoded(code: int, fmt: Format) -> ExactValue:
    from ..numerics.scalar import decode_exact

    return decode_exact(code, fmt)


def prism_css() -> str:
    """A ``<style>`` element for the Prism widget's own buttons (scoped to ``.bitprism-prism``):
    the bit buttons small, tight and rounded with their digit centred, the band names plain."""
    return (
        "<style>"
        ".bitprism-prism .bitprism-bit{line-height:18px;border-radius:3px;min-width:0;"
        "font-family:var(--jp-code-font-family,monospace);text-overflow:clip}"
        ".bitprism-prism .bitprism-band-name{font-family:var(--jp-code-font-family,monospace)}"
        ".bitprism-prism .bitprism-selected .bitprism-band-name{"
        "outline:2px solid #6f51b4;outline-offset:-2px}"
        ".bitprism-prism .widget-html-content{line-height:1.45}"
        "</style>"
    )
