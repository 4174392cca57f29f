"""The one rounding rule of every exact path: a non-negative rational rounded to an integer.

The scalar cast (``scalar.encode_exact``), the overflow verdict of ``compare`` and the step
events of ``evaluate`` all decide the same two things, so they share this module:

* ``round_scaled``: ``|x| / 2^q`` rounded to an integer by a rounding direction, in integers
  and exactly once (IEEE 754-2019 §4.3: the two "to nearest" attributes, the three directed
  ones, plus stochastic rounding, up with probability equal to the remainder);
* ``exceeds_largest``: IEEE 754-2019 §7.4 overflow, i.e. whether ``x`` rounded with an
  unbounded exponent range lies beyond the format's largest finite value.

A format without trailing significand bits (float8_e8m0fnu) has no even significand, so its
roundTiesToEven breaks ties away from zero (``effective_rounding``; ml_dtypes does the same).
"""

from __future__ import annotations

from fractions import Fraction
from typing import Any

import numpy as np

from ..formats import Format
from .exact import ExactValue, floor_log2

__all__ = ["effective_rounding", "exceeds_largest", "round_ratio", "round_scaled"]


def effective_rounding(fmt: Format, mode: str) -> str:
    """The rounding direction actually applied in ``fmt``: roundTiesToEven becomes
    roundTiesToAway when the format has no trailing significand bits (every significand is
    1, so "even" is undefined)."""
    if fmt.significand_bits == 0 and mode == "roundTiesToEven":
        return "roundTiesToAway"
    return mode


def _rounds_up(n: int, rem: int, den: int, negative: bool, mode: str, rng: Any) -> bool:
    """Whether the magnitude n + rem/den (0 <= rem < den) rounds up to n + 1."""
    if rem == 0:
        return False
    if mode == "roundTiesToEven":
        return 2 * rem > den or (2 * rem == den and n & 1 == 1)
    if mode == "roundTiesToAway":
        return 2 * rem >= den
    if mode == "roundTowardZero":
        return False
    if mode == "roundTowardPositive":
        return not negative
    if mode == "roundTowardNegative":
        return negative
    # stochastic: up with probability rem/den, decided by a uniform 64-bit draw (exact
    # comparison: draw / 2^64 < rem / den)
    if rng is None:
        rng = np.random.default_rng()
    draw = int(rng.integers(0, 1 << 63, dtype=np.int64)) * 2 + int(rng.integers(0, 2))
    return draw * den < rem << 64


def round_ratio(num: int, den: int, negative: bool, mode: str, rng: Any = None) -> int:
    """``num / den`` (>= 0, the magnitude in units of the last place) rounded to an integer
    by ``mode``, in integers (no Fraction, so no gcd per call)."""
    n, rem = divmod(num, den)
    return n + _rounds_up(n, rem, den, negative, mode, rng)


def round_scaled(scaled: Fraction, negative: bool, mode: str, rng: Any = None) -> int:
    """``scaled`` (>= 0, the magnitude in units of the last place) rounded to an integer by
    ``mode``; ``negative`` is the sign of the value, which the directed modes need. ``rng``
    draws stochastic rounding (a fresh generator when None)."""
    return round_ratio(scaled.numerator, scaled.denominator, negative, mode, rng)


def exceeds_largest(x: ExactValue, fmt: Format, rounding: str) -> bool | None:
    """IEEE 754-2019 §7.4 overflow: ``x`` rounded by ``rounding`` with an unbounded exponent
    range lies beyond the largest finite value of ``fmt``. False for zeros, Inf and NaN. None
    under stochastic rounding when ``|x|`` itself lies beyond the largest finite value: the
    draw decides, and it cannot be replayed here."""
    if not x.is_finite or x.is_zero:
        return False
    mag = x.magnitude
    if mag <= fmt.max_finite:
        return False
    if rounding == "stochastic":
        return None
    e = floor_log2(mag)
    if e > fmt.emax + 1:
        return True  # even rounding toward zero stays at or above 2^(emax+1)
    unit = Fraction(2) ** (e - fmt.significand_bits)
    m = round_scaled(mag / unit, x.negative, effective_rounding(fmt, rounding))
    return m * unit > fmt.max_finite
