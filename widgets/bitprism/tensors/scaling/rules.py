"""The classic scale rules, computed exactly: amax to the largest finite value, and MX v1.0's.

* amax rule (common practice in 8-bit training recipes): ``scale = (max_finite / 2^margin) /
  amax`` rounded down to a power of two, so that ``amax * scale <= max_finite / 2^margin``
  holds exactly and nothing finite overflows in any rounding direction. As a power of two,
  ``2^k`` with ``k = floor(log2(max_finite / amax)) - margin``.
* MX v1.0 §6.3 shared exponent (the rule ``tensors.mx`` implements): ``X = 2^s`` with
  ``s = floor(log2 amax) - emax_elem``, so the scale applied to the elements is ``2^-s``; the
  largest element may then exceed the largest normal and is clamped (the ratio is below
  ``2^(emax+1)``). ``s`` is kept in E8M0's range ``-127 .. 127`` (an all-zero block gets -127).

Both are exact: ``floor(log2 v)`` comes from ``frexp`` (an exact decomposition), and the ratio
of two mantissas is compared, not divided.
"""

from __future__ import annotations

from fractions import Fraction

import numpy as np

from ...formats import Format
from ...numerics.exact import floor_log2

__all__ = [
    "E8M0_MAX",
    "E8M0_MIN",
    "F64_MAX_EXP",
    "F64_MIN_EXP",
    "amax_exponent",
    "amax_exponents",
    "largest_float_below",
    "mx_exponents",
]

F64_MAX_EXP = 1023  # a scale stays a normal float64: 2^-1022 .. 2^1023
F64_MIN_EXP = -1022
E8M0_MIN, E8M0_MAX = -127, 127  # MX v1.0 Table 7: 2^(code - 127), codes 0x00 .. 0xFE


def amax_exponent(fmt: Format, amax: float, margin: int = 0) -> tuple[int, bool]:
    """(k, capped): the amax rule's exponent for ``amax > 0``, and whether it was capped to
    keep ``2^k`` a normal float64."""
    target = fmt.max_finite / Fraction(2) ** margin
    k = floor_log2(target / Fraction(amax))
    capped = not F64_MIN_EXP <= k <= F64_MAX_EXP
    return min(max(k, F64_MIN_EXP), F64_MAX_EXP), capped


def largest_float_below(q: Fraction) -> float:
    """The largest float64 <= q (q > 0, inside the normal float64 range)."""
    f = float(q)  # round to nearest; step down once if that went above
    if Fraction(f) > q:
        f = float(np.nextafter(f, 0.0))
    return f


def _floor_log2(a: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(floor(log2 a), mantissa in [1, 2)) of positive float64 values, exactly."""
    m, e = np.frexp(a)  # a = m 2^e, m in [0.5, 1)
    return e.astype(np.int64) - 1, m * 2


def amax_exponents(fmt: Format, amax: np.ndarray, margin: int = 0) -> np.ndarray:
    """The amax rule per group (``amax`` float64, 0 where a group has no finite nonzero
    value: those get 0, scale 1): ``floor(log2(max_finite / amax)) - margin``."""
    top = float(fmt.max_finite)
    e_top, m_top = _floor_log2(np.array([top]))
    pos = amax > 0
    e, m = _floor_log2(np.where(pos, amax, 1.0))
    k = e_top[0] - e - (m > m_top[0]).astype(np.int64) - margin  # max/a = (m_top/m) 2^(e_top-e)
    k = np.clip(k, F64_MIN_EXP, F64_MAX_EXP)
    return np.where(pos, k, 0)


def mx_exponents(fmt: Format, amax: np.ndarray) -> np.ndarray:
    """The scale exponent ``-s`` that MX v1.0 §6.3 gives each block (``s`` in E8M0's range;
    an all-zero block gets ``s = -127``, as ``mx_quantize`` does)."""
    pos = amax > 0
    e, _ = _floor_log2(np.where(pos, amax, 1.0))
    s = np.where(pos, e - fmt.emax, E8M0_MIN)
    return -np.clip(s, E8M0_MIN, E8M0_MAX)
