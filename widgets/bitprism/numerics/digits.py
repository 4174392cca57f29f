"""Decimal digits of big integers, without Python's int-to-str conversion limit.

Python 3.11+ refuses ``str(n)`` for an int of more than ``sys.get_int_max_str_digits()``
digits (default 4300), because the conversion is quadratic. Exact values here reach
2^±131072 (about 39,500 digits) and their errors twice that, so every display of an integer
goes through this module: digit counts come from the bit length, corrected by comparisons with
a power of ten; leading digits from one integer division; only short integers meet ``str``.
"""

from __future__ import annotations

import sys
from fractions import Fraction

__all__ = [
    "FULL_DIGITS",
    "count_digits",
    "fraction_text",
    "full_digit_cap",
    "int_text",
    "leading_digits",
    "valuation",
]

# Integers of at most this many digits are written in full: below Python's default limit of
# 4300 digits, and a few milliseconds of work at most.
FULL_DIGITS = 4000

# floor(log10(2) * 10^11): a lower bound of log10(2) = 0.30102999566398...
_LOG10_2_LOW = 30102999566
_SCALE = 10**11


def full_digit_cap() -> int:
    """How many digits an integer may have to be written in full: FULL_DIGITS, or less when
    the program lowered Python's limit (``sys.set_int_max_str_digits``; 0 means no limit)."""
    get_limit = getattr(sys, "get_int_max_str_digits", None)  # Python 3.11+
    limit = get_limit() if get_limit is not None else 0
    return FULL_DIGITS if limit == 0 else min(FULL_DIGITS, limit)


def count_digits(n: int) -> int:
    """Number of decimal digits of |n| (1 for 0), in integers: an estimate from the bit length
    that is at most one below the answer, then corrected by comparison with 10^k."""
    n = abs(n)
    if n < 10:
        return 1
    k = (n.bit_length() - 1) * _LOG10_2_LOW // _SCALE  # <= floor(log10(n))
    p = 10**k
    while p > n:  # not reached with the lower bound above; kept as a guard
        p //= 10
        k -= 1
    while p * 10 <= n:
        p *= 10
        k += 1
    return k + 1


def leading_digits(n: int, count: int, total: int | None = None) -> str:
    """The first ``count`` decimal digits of |n| (truncated), by one integer division.
    ``total`` is ``count_digits(n)`` when the caller already has it."""
    n = abs(n)
    total = count_digits(n) if total is None else total
    if total > count:
        n //= 10 ** (total - count)
    return str(n)


def valuation(n: int, p: int) -> tuple[int, int]:
    """(v, n / p^v) with p^v the largest power of ``p`` dividing ``n`` != 0, in O(log v)
    divisions: squares p, p^2, p^4 ... while they divide, then takes the binary digits of v
    from the top (one division per bit rather than one per factor)."""
    if n == 0:
        raise ValueError("valuation of 0 is undefined")  # internal: callers pass n != 0
    if p == 2:
        v = (n & -n).bit_length() - 1
        return v, n >> v
    powers = [p]
    while n % powers[-1] == 0:
        powers.append(powers[-1] * powers[-1])
    v = 0
    for j in range(len(powers) - 2, -1, -1):
        q, r = divmod(n, powers[j])
        if r == 0:
            n = q
            v += 1 << j
    return v, n


def int_text(n: int, keep: int = 20) -> str:
    """``str(n)`` when it has at most ``full_digit_cap()`` digits; otherwise ``2**k`` for a
    power of two, else its first ``keep`` digits and the count: ``1.2345…e+4771 (4772
    digits)``."""
    total = count_digits(n)
    if total <= full_digit_cap():
        return str(n)
    sign = "-" if n < 0 else ""
    m = abs(n)
    if m & (m - 1) == 0:
        return f"{sign}2**{m.bit_length() - 1}"
    lead = leading_digits(m, keep, total)
    return f"{sign}{lead[0]}.{lead[1:]}…e+{total - 1} ({total} digits)"


def fraction_text(q: Fraction) -> str:
    """``str(q)`` (``n/d``, or ``n`` for an integer) with each part written by ``int_text``."""
    if q.denominator == 1:
        return int_text(q.numerator)
    return f"{int_text(q.numerator)}/{int_text(q.denominator)}"
