"""Where a cast changes class: the ranges of |x| that overflow, underflow to zero, or land
subnormal.

Rounding is monotone, so for one sign of the input every class of a cast into a format is a
range of magnitudes: overflow is ``[overflow_from, Inf)``, underflow to zero ``(0,
nonzero_from)``, a subnormal result ``[nonzero_from, normal_from)``. The ends are found once per
(format, rounding, subnormal handling, sign) by a binary search over float64 bit patterns that
rounds a few dozen scalars exactly (``rounding.exceeds_largest`` for overflow, IEEE 754-2019
§7.4; ``scalar.encode_exact`` for the rest), and are then shared by everything
that classifies data without casting it: the scan's counts (and its counts-only kernel) and the
tensor window's overflow and underflow marks. Overflow follows IEEE 754-2019 §7.4 (the value
rounded with an unbounded exponent range exceeds the largest finite value); under stochastic
rounding every magnitude beyond the largest finite value counts.

``pattern_at_least`` turns a threshold into the float32 or float64 bit pattern a counting loop
compares magnitude patterns with (non-negative IEEE values order like their patterns).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache
from typing import Callable

import numpy as np

from ..formats import Format
from .exact import as_exact
from .options import CastOptions
from .rounding import exceeds_largest
from .scalar import decode_exact, encode_exact

__all__ = ["Thresholds", "cast_thresholds", "pattern_at_least"]


@dataclass(frozen=True)
class Thresholds:
    """Magnitudes (float64) at which a cast changes class, for one sign of the input.

    ``overflow_from``: smallest |x| that overflows (Inf if none does); ``nonzero_from``: smallest
    |x| whose result is not zero (0 if every nonzero value survives, e.g. no zero in the
    format); ``normal_from``: smallest |x| whose result is a normal number.
    """

    overflow_from: float
    nonzero_from: float
    normal_from: float


_POS_PATTERNS = 0x7FF0000000000000  # float64 patterns of 0 .. +Inf


def _f64(pattern: int) -> float:
    return float(np.array([pattern], np.uint64).view(np.float64)[0])


def _first_true(pred: Callable[[float], bool]) -> float:
    """Smallest positive float64 (or +Inf) where a monotone predicate turns true."""
    lo, hi = 0, _POS_PATTERNS  # pred(lo) assumed false, pred(+Inf) taken as true
    while hi - lo > 1:
        mid = (lo + hi) // 2
        if pred(_f64(mid)):
            hi = mid
        else:
            lo = mid
    return _f64(hi)


def cast_thresholds(fmt: Format, options: CastOptions, negative: bool = False) -> Thresholds:
    """The class boundaries of a cast into ``fmt`` with ``options``, for inputs of one sign.
    They depend on the rounding direction and the subnormal handling only (cached)."""
    return _thresholds(fmt, options.rounding, options.subnormals, negative)


@lru_cache(maxsize=256)
def _thresholds(fmt: Format, rounding: str, subnormals: str, negative: bool) -> Thresholds:
    sign = -1.0 if negative else 1.0
    top = float(fmt.max_finite)
    if rounding == "stochastic":
        with np.errstate(over="ignore"):  # float64's largest finite: the next is Inf
            over = float(np.nextafter(top, math.inf))
    else:

        def overflows(m: float) -> bool:
            return bool(exceeds_largest(as_exact(sign * m), fmt, rounding))

        over = _first_true(overflows)

    saturating = CastOptions(rounding, "saturate", subnormals)  # type: ignore[arg-type]

    def result(m: float) -> float:
        return abs(float(decode_exact(encode_exact(as_exact(sign * m), fmt, saturating), fmt)))

    if not fmt.has_zero:
        nonzero = 0.0
        normal = 0.0
    else:
        nonzero = _first_true(lambda m: result(m) != 0.0)
        small = float(fmt.smallest_normal)
        normal = _first_true(lambda m: result(m) >= small)
    return Thresholds(over, nonzero, normal)


@lru_cache(maxsize=1024)
def pattern_at_least(threshold: float, wide: bool) -> int:
    """Smallest float32 (``wide=False``) or float64 bit pattern whose magnitude is >=
    ``threshold`` (a non-negative float64)."""
    if wide:
        return int(np.array([threshold], np.float64).view(np.uint64)[0])
    f = np.float32(threshold) if threshold <= 3.4028234663852886e38 else np.float32(np.inf)
    if float(f) < threshold:
        f = np.nextafter(f, np.float32(np.inf))
    return int(np.array([f], np.float32).view(np.uint32)[0])
