"""Plain text for a ``Comparison``: a fixed-width table, plus the field notes the HTML shares.

Pure functions of the result object: no widgets, no I/O.
"""

from __future__ import annotations

from fractions import Fraction

from ..numerics.compare import Comparison, FormatRow
from ..numerics.decimal_text import exact_decimal, scientific
from ..numerics.inspect import CodeClass
from .vocabulary import OUTCOMES, UNITS

__all__ = [
    "MINUS",
    "class_label",
    "comparison_text",
    "event_labels",
    "field_notes",
    "format_error",
    "format_number",
    "grouped_bits",
]

MINUS = "\u2212"  # typographic minus for exponents and signs shown to people


def format_number(q: Fraction | None, digits: int = 4, signed: bool = False) -> str:
    """A short display of an exact value: ``+1.4901e-09``, ``-0.4``, ``n/a`` for None.

    Python's ``%g`` of ``float(q)`` where float64 holds q; beyond its range (an error of
    1e400, a relative error of 1e-400) the same layout from the exact value
    (``decimal_text.scientific``), never a float that overflows or flushes to 0."""
    if q is None:
        return "n/a"
    if q == 0:
        return "0"
    f = _float_or_none(q)
    if f is None:
        return scientific(q, digits, signed)
    return f"{f:+.{digits}g}" if signed else f"{f:.{digits}g}"


def _float_or_none(q: Fraction) -> float | None:
    """float(q) when it is finite and nonzero (q != 0), else None."""
    try:
        f = float(q)
    except OverflowError:
        return None
    return f if f != 0 else None


def format_error(q: Fraction | None) -> str:
    """Errors are shown signed; a few-digit fraction (1/3, 2/5) stays exact."""
    if q is None:
        return "n/a"
    if q == 0:
        return "0"
    if q.denominator <= 12:
        whole = _float_or_none(q)  # None beyond float64's range: |q| >= 1/12 cannot underflow
        if q.denominator in (1, 2, 4, 5, 8, 10):
            return f"{whole:+g}" if whole is not None else scientific(q, 6, signed=True)
        if whole is not None:
            return f"{'+' if q > 0 else '-'}{abs(q.numerator)}/{q.denominator}"
    return format_number(q, 4, signed=True)


def grouped_bits(row: FormatRow, sep: str = " ") -> str:
    """The code's bits as sign, exponent and trailing significand groups."""
    bits = row.bits()
    f = row.format
    s = f.sign_bits
    parts = [bits[:s], bits[s : s + f.exponent_bits], bits[s + f.exponent_bits :]]
    return sep.join(p for p in parts if p)


def class_label(row: FormatRow) -> str:
    return CodeClass(row.fields.kind).label


def event_labels(row: FormatRow) -> list[str]:
    """What the cast did, in words (overflow, underflow to zero, subnormal, not representable)."""
    out = []
    if row.overflowed:
        out.append(OUTCOMES["overflow"].name)
    if row.underflowed:
        out.append(OUTCOMES["underflow"].name)
    if row.not_representable:
        out.append("not representable")
    return out


def field_notes(row: FormatRow) -> dict[str, str]:
    """Integer value and meaning of each field: sign, exponent, significand."""
    f = row.format
    fl = row.fields
    kind = CodeClass(fl.kind)
    t = f.significand_bits
    notes: dict[str, str] = {}
    notes["sign"] = ("\u2212" if fl.sign else "+") if f.signed else "unsigned (no sign bit)"
    e = int(fl.exponent)
    top = kind in (CodeClass.INFINITE, CodeClass.QUIET_NAN, CodeClass.SIGNALING_NAN)
    if top and f.specials == "ieee":
        notes["exponent"] = f"E = {e}: all ones, reserved for Inf and NaN"
    elif kind in (CodeClass.QUIET_NAN, CodeClass.SIGNALING_NAN):
        notes["exponent"] = f"E = {e}: part of the NaN pattern"
    elif kind in (CodeClass.ZERO, CodeClass.SUBNORMAL):
        notes["exponent"] = f"E = 0: subnormal range, power {_pow(f.emin)} (1 {MINUS} bias)"
    else:
        notes["exponent"] = f"E = {e}: {e} {MINUS} {f.bias} = {_signed_int(e - f.bias)}"
    sig = int(fl.significand)
    if kind == CodeClass.INFINITE:
        notes["significand"] = "T = 0: Inf"
    elif kind in (CodeClass.QUIET_NAN, CodeClass.SIGNALING_NAN):
        quiet = "quiet" if kind == CodeClass.QUIET_NAN else "signaling"
        notes["significand"] = f"T = {sig:#x}: {quiet} NaN, payload {int(fl.payload):#x}"
    else:
        lead = 0 if kind in (CodeClass.ZERO, CodeClass.SUBNORMAL) else 1
        frac = format(sig, f"0{t}b") if t else ""
        m = Fraction((lead << t) | sig, 1 << t)
        notes["significand"] = f"T = {sig}: {lead}.{frac or '0'}\u2082 = {exact_decimal(m)}"
    return notes


def _signed_int(n: int) -> str:
    return f"{MINUS}{-n}" if n < 0 else str(n)


def _pow(n: int) -> str:
    return f"2^{_signed_int(n)}"


def _cut(line: str, width: int) -> str:
    return line if len(line) <= width else line[: width - 1] + "…"


def comparison_text(c: Comparison, width: int = 120) -> str:
    """The verdicts first (one line per format, in words), then a fixed-width table: class,
    stored value (shortest and exact decimal), errors and raw bits. Lines are cut to
    ``width`` characters (marked ``…``)."""
    from .verdicts import exact_input_text, options_text, stored_pair, verdict

    lines = [_cut(f"input {c.text} = {exact_input_text(c)}", width),
             _cut(options_text(c), width)]
    name_w = max(6, *(len(r.format.name) for r in c.rows))
    for r in c.rows:
        _, words = verdict(c, r)
        lines.append(_cut(f"{r.format.name + ':':<{name_w + 1}} {words}", width))
    lines.append("")
    bits_w = max(32, *(len(grouped_bits(r)) for r in c.rows))
    pairs = [stored_pair(r) for r in c.rows]
    short_w = max(8, *(len(p[0]) for p in pairs))
    exact_w = max(5, *(len(p[1]) if p[1] != p[0] else 1 for p in pairs))
    ulp = UNITS["ulp"]
    cols = (
        f"{'format':<{name_w}}  {'class':<9}  {'shortest':<{short_w}}  {'exact':<{exact_w}}  "
        f"{ulp + ' err':>8}  {UNITS['relative'] + ' err':>12}  "
        f"{'bits (sign biased-exponent trailing-significand)':<{bits_w}}"
    )
    lines.append(_cut(cols.rstrip(), width))
    for r, (shortest, exact) in zip(c.rows, pairs):
        line = (
            f"{r.format.name:<{name_w}}  {class_label(r):<9}  {shortest:<{short_w}}  "
            f"{(exact if exact != shortest else '='):<{exact_w}}  "
            f"{format_error(r.ulp_error):>8}  {format_number(r.rel_error, 4, signed=True):>12}  "
            f"{grouped_bits(r):<{bits_w}}"
        )
        lines.append(_cut(line.rstrip(), width))
    return "\n".join(lines)
