"""Decimal text for stored values: the shortest string that reads back to the same code, and the
exact (finite) decimal expansion of a dyadic rational.

Everything here is integer / ``Fraction`` arithmetic. The shortest form is found by trying
1, 2, 3 ... significant digits of the exact stored value and asking the exact cast
(``encode_exact``, roundTiesToEven) whether a candidate reads back to the same code, so it is
right for every format, custom layouts included, without going through any binary float.
"""

from __future__ import annotations

from fractions import Fraction

from ..errors import BitprismError
from ..formats import Format, FormatLike, get_format
from .digits import fraction_text, full_digit_cap, valuation
from .exact import ExactValue
from .options import CastOptions
from .scalar import decode_exact, encode_exact

__all__ = [
    "DEFAULT_MAX_DIGITS",
    "abbreviate_decimal",
    "decimal_digit_count",
    "exact_decimal",
    "exact_text",
    "readable_decimal",
    "scientific",
    "shortest_decimal",
]

# Exact expansions longer than this many significant digits are shown abbreviated by
# ``abbreviate_decimal`` (the full text is always what ``exact_decimal`` returns).
DEFAULT_MAX_DIGITS = 40

# Python's float repr switches to scientific notation outside 1e-4 <= |x| < 1e16; we use the
# same switch so float64 results read exactly like ``repr(float)``.
_SCI_LOW = -4
_SCI_HIGH = 16

_RNE = CastOptions()


def _floor_log10(q: Fraction) -> int:
    """floor(log10(q)) for q > 0, in integers: a bit-length estimate, then exact correction."""
    n, d = q.numerator, q.denominator
    # log10(2) ~ 0.30103; the estimate is within 1 of the answer, corrected by comparisons
    k = ((n.bit_length() - d.bit_length()) * 30103) // 100000
    while _pow10_le(k + 1, n, d):
        k += 1
    while not _pow10_le(k, n, d):
        k -= 1
    return k


def _pow10_le(k: int, n: int, d: int) -> bool:
    """10^k <= n/d."""
    return d * 10**k <= n if k >= 0 else d <= n * 10 ** (-k)


def _format_digits(negative: bool, digits: str, exp10: int, sci_low: int, sci_high: int) -> str:
    """Place significant ``digits`` (no leading zeros) whose first digit has weight 10^exp10.

    Positional like Python's repr inside [10^sci_low, 10^sci_high), scientific outside.
    """
    digits = digits.rstrip("0") or "0"
    sign = "-" if negative else ""
    if sci_low <= exp10 < sci_high:
        if exp10 < 0:
            return f"{sign}0.{'0' * (-exp10 - 1)}{digits}"
        int_part = digits[: exp10 + 1].ljust(exp10 + 1, "0")
        frac_part = digits[exp10 + 1 :] or "0"
        return f"{sign}{int_part}.{frac_part}"
    mant = digits[0] + ("." + digits[1:] if len(digits) > 1 else "")
    return f"{sign}{mant}e{'-' if exp10 < 0 else '+'}{abs(exp10):02d}"


def _special_text(x: ExactValue) -> str | None:
    sign = "-" if x.negative else ""
    if x.is_nan:
        return f"{sign}nan"
    if x.is_inf:
        return f"{sign}inf"
    if x.is_zero:
        return f"{sign}0.0"
    return None


def shortest_decimal(code: int, fmt: FormatLike) -> str:
    """The shortest decimal that reads back (roundTiesToEven, exactly) to ``code`` in ``fmt``.

    Among the candidates with the fewest significant digits the one closest to the stored value
    wins (an exact tie goes to the even last digit). Layout follows Python's float repr
    (``0.1``, ``65504.0``, ``5.960464477539063e-08``), so for float64 the result equals
    ``repr(float)``. NaN, Inf and zeros read ``nan``, ``inf``, ``0.0`` with their sign.
    """
    f = get_format(fmt)
    code = int(code)
    x = decode_exact(code, f)
    special = _special_text(x)
    if special is not None:
        return special
    mag = x.magnitude
    lo, hi = _rounding_interval(code, mag, f)
    e10 = _floor_log10(mag)
    # 17 significant digits always suffice for float64, hence for every format that fits in it;
    # the exact expansion (at most a few hundred digits) is the guaranteed fallback.
    for ndigits in range(1, 18):
        best = _shortest_with(ndigits, mag, e10, lo, hi, x.negative, code, f)
        if best is not None:
            digits, exp10 = best
            return _format_digits(x.negative, digits, exp10, _SCI_LOW, _SCI_HIGH)
    return exact_decimal(x.value)


def _rounding_interval(code: int, mag: Fraction, f: Format) -> tuple[Fraction, Fraction]:
    """Midpoints to the magnitudes next below and above: every value strictly between them
    reads back to ``code`` (the midpoints themselves are settled by the exact cast)."""
    mcode = code & f.magnitude_mask
    if mcode == 0:
        below = Fraction(0)  # no zero in this format: everything smaller reads as this code
    else:
        below = decode_exact(mcode - 1, f).magnitude
    if mcode < f.max_code:
        above = decode_exact(mcode + 1, f).magnitude
    else:  # the largest finite: the next step of an unbounded exponent range
        above = mag + Fraction(2) ** (f.emax - f.significand_bits)
    return (mag + below) / 2, (mag + above) / 2


def _shortest_with(
    ndigits: int,
    mag: Fraction,
    e10: int,
    lo: Fraction,
    hi: Fraction,
    negative: bool,
    code: int,
    f: Format,
) -> tuple[str, int] | None:
    """The best ``ndigits``-digit decimal reading back to ``code``, or None.

    Done in integers over the common power-of-two denominator ``den`` of mag, lo and hi
    (midpoints of dyadic values are dyadic): a candidate m / 10^shift is compared by cross
    multiplication, with no gcd work per digit count.
    """
    den = max(mag.denominator, lo.denominator, hi.denominator)
    big_m = mag.numerator * (den // mag.denominator)
    big_lo = lo.numerator * (den // lo.denominator)
    big_hi = hi.numerator * (den // hi.denominator)
    shift = ndigits - 1 - e10  # mag * 10^shift has ndigits integer digits
    # candidate m stands for m / 10^shift; cross-multiply it onto the denominator den
    if shift >= 0:
        p10 = 10**shift
        below, rem = divmod(big_m * p10, den)

        def scaled(m: int) -> int:  # m / 10^shift in units of 1 / (den * 10^shift)
            return m * den

        unit = p10
    else:
        p10 = 10 ** (-shift)
        below, rem = divmod(big_m, den * p10)

        def scaled(m: int) -> int:
            return m * den * p10

        unit = 1
    # compare everything in units of 1 / (den * unit)
    lo_u, hi_u, m_u = big_lo * unit, big_hi * unit, big_m * unit
    candidates = [below] if rem == 0 else [below, below + 1]
    good = []
    for m in candidates:
        if m == 0:
            continue
        v = scaled(m)
        if lo_u < v < hi_u:
            good.append((abs(v - m_u), m))
        elif v == lo_u or v == hi_u:
            value = Fraction(m) / Fraction(10) ** shift
            if encode_exact(ExactValue("finite", negative, value), f, _RNE) == code:
                good.append((abs(v - m_u), m))
    if not good:
        return None
    # closest to the stored value; an exact tie goes to the even last digit
    best = min(good, key=lambda g: (g[0], g[1] % 2))[1]
    digits = str(best)
    # a carry (999 -> 1000) adds a digit: the leading weight moves up by one
    return digits, len(digits) - 1 - shift


def _terminating(value: Fraction) -> bool:
    return _decimal_shift(value.denominator) is not None


def _decimal_shift(d: int) -> int | None:
    """k = max(a, b) for d = 2^a 5^b (mag * 10^k is then the smallest integer multiple), or
    None when d has another prime factor. In O(log k) divisions (``digits.valuation``): one
    factor at a time was quadratic, seconds for the 131,073 factors of 2 behind a sticky
    bit."""
    a, d = valuation(d, 2)
    if d == 1:
        return a
    b, d = valuation(d, 5)
    return max(a, b) if d == 1 else None


def _leading(mag: Fraction, count: int, e10: int) -> str:
    """The first ``count`` significant digits of ``mag`` (truncated; 10^e10 <= mag), by one
    integer division: floor(mag * 10^(count - 1 - e10))."""
    shift = count - 1 - e10
    n, d = mag.numerator, mag.denominator
    return str(n * 10**shift // d if shift >= 0 else n // (d * 10 ** (-shift)))


def _abbreviated(negative: bool, lead: str, e10: int, count: int) -> str:
    """``abbreviate_decimal``'s layout: ``-1.2345…e-45 (105 digits)``."""
    mant = lead[0] + "." + lead[1:] if len(lead) > 1 else lead
    sign = "-" if negative else ""
    return f"{sign}{mant}…e{'-' if e10 < 0 else '+'}{abs(e10):02d} ({count} digits)"


def _significant(mag: Fraction, e10: int, k: int) -> tuple[int, int]:
    """(significant digits, trailing zeros dropped) of the terminating expansion of ``mag``
    (10^e10 <= mag, mag * 10^k the smallest integer multiple): mag * 10^k has e10 + k + 1
    digits, and only an integer (k = 0) can end in zeros, which are not significant."""
    zeros = 0
    if k == 0:
        zeros = min(valuation(mag.numerator, 2)[0], valuation(mag.numerator, 5)[0])
    return e10 + k + 1 - zeros, zeros


def decimal_digit_count(value: Fraction | int) -> int | None:
    """Significant digits of the exact decimal expansion of ``value`` (0 for zero), counted
    in integers without writing it out; None when it does not terminate."""
    mag = abs(Fraction(value))
    if mag == 0:
        return 0
    k = _decimal_shift(mag.denominator)
    return None if k is None else _significant(mag, _floor_log10(mag), k)[0]


def exact_decimal(value: Fraction | int, max_digits: int | None = None) -> str:
    """The exact decimal expansion of ``value`` (every dyadic rational has a finite one).

    All significant digits are written: positionally for 1e-7 <= |x| < 1e21, otherwise as
    ``d.ddd…e±XX``. With ``max_digits`` set, a longer expansion is shown by its first
    ``max_digits`` digits followed by ``… (N digits)`` (see ``abbreviate_decimal``). An
    expansion of more than ``digits.FULL_DIGITS`` significant digits (a value of an exact
    expression, such as a sum carrying a sticky bit; never a value of a format) is always
    shown that way, with DEFAULT_MAX_DIGITS digits if ``max_digits`` is not set: it is never
    built (that would be a conversion through Python's int-to-str limit, and seconds of work).
    A value with no finite expansion (a denominator with a prime factor other than 2 and 5) is
    written with ``max_digits`` (default 40) correctly truncated digits and a trailing ``…``.
    """
    value = Fraction(value)
    if value == 0:
        return "0.0"
    negative = value < 0
    mag = abs(value)
    e10 = _floor_log10(mag)
    k = _decimal_shift(mag.denominator)
    if k is None:
        n = max_digits or DEFAULT_MAX_DIGITS
        return _format_digits(negative, _leading(mag, n, e10), e10, -7, 21) + "…"
    count, zeros = _significant(mag, e10, k)
    if count > full_digit_cap():
        shown = max_digits or DEFAULT_MAX_DIGITS
        return _abbreviated(negative, _leading(mag, shown, e10), e10, count)
    digits = str((mag * 10**k).numerator // 10**zeros)
    full = _format_digits(negative, digits, e10, -7, 21)
    if max_digits is not None:
        return abbreviate_decimal(full, max_digits)
    return full


def scientific(value: Fraction, digits: int, signed: bool = False) -> str:
    """``value`` with ``digits`` significant digits in exponent notation as Python's ``%g``
    writes it (trailing zeros dropped: ``9.99e+399``, ``-1e-400``), correctly rounded (ties to
    even) from the exact value, for any magnitude: the figure ``%g`` of ``float(value)`` would
    give where float64 cannot hold the value (an error of 1e400 overflows a float, one of
    1e-400 becomes 0)."""
    if digits < 1:
        raise BitprismError(f"digits must be at least 1, got {digits!r}")
    value = Fraction(value)
    sign = "-" if value < 0 else ("+" if signed else "")
    if value == 0:
        return f"{sign}0"
    mag = abs(value)
    e10 = _floor_log10(mag)
    shift = digits - 1 - e10
    n, d = mag.numerator, mag.denominator
    num, den = (n * 10**shift, d) if shift >= 0 else (n, d * 10 ** (-shift))
    m, rem = divmod(num, den)
    if 2 * rem > den or (2 * rem == den and m % 2 == 1):
        m += 1
    if m == 10**digits:  # 9.99.. rounded up to 10.0: one more power of ten
        m //= 10
        e10 += 1
    text = str(m).rstrip("0")
    mant = text[0] + ("." + text[1:] if len(text) > 1 else "")
    return f"{sign}{mant}e{'-' if e10 < 0 else '+'}{abs(e10):02d}"


def _count_digits(text: str) -> tuple[int, str]:
    """Number of significant digits of a decimal string and the digits themselves."""
    body = text.lstrip("-").split("e")[0].replace(".", "").lstrip("0").rstrip("…")
    return len(body), body


def abbreviate_decimal(text: str, max_digits: int = DEFAULT_MAX_DIGITS) -> str:
    """``text`` itself, or when it has more than ``max_digits`` significant digits, its first
    ``max_digits`` digits (truncated, marked ``…``) and the total count: ``1.4012984…e-45
    (105 digits)``."""
    if max_digits < 1:
        raise BitprismError(f"max_digits must be at least 1, got {max_digits!r}")
    count, body = _count_digits(text)
    if count <= max_digits:
        return text
    negative = text.startswith("-")
    if "e" in text:
        exp10 = int(text.split("e")[1])
    else:
        int_part = text.lstrip("-").split(".")[0].lstrip("0")
        if int_part:
            exp10 = len(int_part) - 1
        else:
            frac = text.split(".")[1]
            exp10 = -(len(frac) - len(frac.lstrip("0")) + 1)
    return _abbreviated(negative, body[:max_digits], exp10, count)


def readable_decimal(shortest: str, exact: str, max_digits: int = 17) -> str:
    """What to show as a stored value: the exact decimal when it is short (so float16's 65504
    reads 65504, not the shortest round-trip text 65500.0), else the shortest round-trip
    decimal. ``max_digits`` = 17 is as long as a float64 round-trip text can get."""
    if "…" in exact or not exact[:1].isdigit() and not exact.startswith("-"):
        return shortest
    count, _ = _count_digits(exact)
    return exact if count <= max_digits else shortest


def exact_text(x: ExactValue) -> str:
    """Text that ``parse`` reads back to exactly ``x`` (how a number is stored in a widget).

    Two exceptions, where the caller keeps the ExactValue itself: a NaN is written ``nan``
    with its sign only (its payload is a bit pattern, not a value ``parse`` could read), and a
    rational whose numerator or denominator has more than ``digits.FULL_DIGITS`` digits is
    shortened (``digits.fraction_text``) and does not read back."""
    special = _special_text(x)
    if special is not None:
        return special
    sign = "-" if x.negative else ""
    if x.clamped:
        power = (x.clamped * (x.floor_log2() + 1)) if x.clamped > 0 else x.floor_log2() - 1
        return f"{sign}2**{power}"
    mag = x.magnitude
    if _terminating(mag):
        text = exact_decimal(mag)
        if "…" not in text and _count_digits(text)[0] <= 60:
            return sign + text
    return sign + fraction_text(mag)
