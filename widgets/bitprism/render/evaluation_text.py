"""Plain text of an ``Evaluation``: the format's answer, the exact one, and every step."""

from __future__ import annotations

from fractions import Fraction
from typing import Any

from ..numerics.decimal_text import decimal_digit_count
from ..numerics.digits import full_digit_cap
from ..numerics.exact import ExactValue

__all__ = ["evaluation_text", "short_value", "step_cause"]


def short_value(v: ExactValue, digits: int = 17) -> str:
    """Short readable text for a value: exact when short, else ~17 significant digits, with
    the length of the exact expansion when it is too long to write (more than
    ``digits.FULL_DIGITS`` digits: ``~1.0e+0 (131074 digits)`` for 1 + 2^-131073)."""
    sign = "-" if v.negative else ""
    if v.kind != "finite" or v.clamped:
        return str(v)
    q = v.magnitude
    if q == 0:
        return f"{sign}0"
    n, d = q.numerator, q.denominator
    if n.bit_length() < 100 and d.bit_length() < 100:
        if d & (d - 1) == 0:  # a binary fraction: its decimal expansion is finite
            k = d.bit_length() - 1
            scaled = n * 5**k  # n / 2^k = n * 5^k / 10^k
            text = str(scaled).rjust(k + 1, "0")
            whole, frac = text[: len(text) - k], text[len(text) - k :].rstrip("0")
            if len(whole) + len(frac) <= 40:
                return f"{sign}{whole}.{frac}" if frac else f"{sign}{whole}"
        if len(str(n)) + len(str(d)) <= 40:
            return f"{sign}{q}"
    # about `digits` significant digits, in integers (the value may exceed float64's range)
    e10 = int((n.bit_length() - d.bit_length()) * 0.30102999566398120)
    scaled_q = q * Fraction(10) ** (digits - 1 - e10)
    m = round(scaled_q)
    while m >= 10**digits:
        e10 += 1
        m = round(q * Fraction(10) ** (digits - 1 - e10))
    while m < 10 ** (digits - 1):
        e10 -= 1
        m = round(q * Fraction(10) ** (digits - 1 - e10))
    mantissa = str(m)
    text = f"{sign}~{mantissa[0]}.{mantissa[1:].rstrip('0') or '0'}e{e10:+d}"
    count = decimal_digit_count(q)
    if count is not None and count > full_digit_cap():
        text += f" ({count} digits)"
    return text


def evaluation_text(ev: Any) -> str:
    """The evaluation as lines: the call, the result, the exact value, one line per step."""
    width = (ev.format.bits + 3) // 4
    hexcode = f"0x{{:0{width}x}}"
    lines = [
        f"{ev.text.strip()}  in {ev.format.name} ({ev.options.rounding}, "
        f"overflow={ev.options.overflow}, subnormals={ev.options.subnormals})",
        f"  result: {short_value(ev.result)}  [{hexcode.format(ev.code)}]",
    ]
    if ev.exact is None:
        lines.append(f"  exact:  not available ({ev.exact_error})")
    else:
        assert ev.exact_code is not None
        same = "same" if ev.exact_code == ev.code else "differs"
        lines.append(
            f"  exact:  {short_value(ev.exact)}  (rounded once: {hexcode.format(ev.exact_code)}, "
            f"{same})"
        )
    lines.append("  steps:")
    for step in ev.steps:
        lines.append(
            f"    {step.operation}  = {short_value(step.exact)}  ->  {short_value(step.rounded)} "
            f"[{hexcode.format(step.code)}]  {_CAUSES.get(step.event, step.event)}"
        )
    return "\n".join(lines)


# The cause of a step that was not exact, in words shared with the Prism's compute box.
_CAUSES = {
    "rounded": "rounded",
    "absorbed": "absorbed addend (the sum equals one addend)",
    "overflow": "overflow",
    "underflow": "underflow to zero",
    "invalid": "invalid operation (NaN)",
    "divide by zero": "divide by zero",
}


def step_cause(step: Any) -> str:
    """One step in words: "2048 + 1 = 2049 -> 2048: absorbed addend (the sum equals one
    addend)"; a literal that rounds reads "literal 0.1 -> 0.1000000015: rounded"."""
    cause = _CAUSES.get(step.event, step.event)
    if step.kind == "literal":
        return f"literal {step.operation} -> {short_value(step.rounded)}: {cause}"
    return (f"{step.operation} = {short_value(step.exact)} -> {short_value(step.rounded)}: "
            f"{cause}")
