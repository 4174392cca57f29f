"""The exact scalar cast: one ExactValue -> one code, rounded once, in integer arithmetic.

This is the reference path (Python ints and Fractions, no floats). The vector kernel in
``kernel.py`` implements the same rules with numpy integer operations; the two are tested
against each other and against an independent oracle.

Rules shared by every path (see DEVELOPERS.md, "Cast semantics"):
- the exact value is rounded once, with an unbounded exponent range above, then checked for
  overflow; subnormal results are flushed after rounding when asked;
- overflow with ``overflow="standard"`` follows IEEE 754 §7.4 per rounding direction, where a
  format without Inf substitutes its NaN (or, without NaN, its largest finite value);
- a format with no trailing significand bits breaks roundTiesToEven ties away from zero (every
  significand is 1, so "even" is undefined; ml_dtypes does the same for float8_e8m0fnu).
"""

from __future__ import annotations

from fractions import Fraction
from typing import Any

import numpy as np

from ..formats import Format
from .exact import ExactValue, _floor_log2
from .options import CastOptions

__all__ = ["decode_exact", "encode_exact", "overflow_code", "nan_input_code"]

_DEFAULT = CastOptions()


def _signed(fmt: Format, negative: bool, magnitude_code: int) -> int:
    """Attach the sign bit, except where the format has no negative zero for a zero result."""
    if not negative or not fmt.signed:
        return magnitude_code
    if magnitude_code == 0 and not fmt.has_negative_zero:
        return 0
    return magnitude_code | fmt.sign_mask


def _nan(fmt: Format, negative: bool) -> int:
    if fmt.specials == "fnuz":
        return fmt.sign_mask
    assert fmt.nan_code is not None
    return _signed(fmt, negative, fmt.nan_code)


def nan_input_code(fmt: Format, negative: bool) -> int:
    """Code for a NaN input: the canonical NaN with the input's sign; a signed zero where the
    format has no NaN (FP6/FP4; ml_dtypes flips the sign there instead)."""
    if fmt.has_nan:
        return _nan(fmt, negative)
    return _signed(fmt, negative, 0) if fmt.has_zero else 0


def overflow_code(fmt: Format, negative: bool, options: CastOptions) -> int:
    """Code of a result whose rounded magnitude exceeds the largest finite value.

    IEEE 754-2008 §7.4: to nearest -> Inf; toward zero -> max; toward ±Inf -> Inf on that side
    and max on the other. "Inf" falls back to NaN, then to max, for formats lacking it.
    """
    if options.overflow == "saturate":
        return _signed(fmt, negative, fmt.max_code)
    mode = options.rounding
    to_special = (
        mode in ("roundTiesToEven", "roundTiesToAway", "stochastic")
        or (mode == "roundTowardPositive" and not negative)
        or (mode == "roundTowardNegative" and negative)
    )
    if not to_special:
        return _signed(fmt, negative, fmt.max_code)
    if fmt.has_inf:
        assert fmt.inf_code is not None
        return _signed(fmt, negative, fmt.inf_code)
    if fmt.has_nan:
        return _nan(fmt, negative)
    return _signed(fmt, negative, fmt.max_code)


def _round_up(n: int, rem: Fraction, negative: bool, mode: str, rng: Any) -> bool:
    """Whether the magnitude n + rem (0 <= rem < 1) rounds up to n + 1."""
    if rem == 0:
        return False
    if mode == "roundTiesToEven":
        return rem > Fraction(1, 2) or (rem == Fraction(1, 2) and n & 1 == 1)
    if mode == "roundTiesToAway":
        return rem >= Fraction(1, 2)
    if mode == "roundTowardZero":
        return False
    if mode == "roundTowardPositive":
        return not negative
    if mode == "roundTowardNegative":
        return negative
    # stochastic: up with probability rem, decided by a uniform 64-bit draw (exact comparison)
    if rng is None:
        rng = np.random.default_rng()
    draw = int(rng.integers(0, 1 << 63, dtype=np.int64)) * 2 + int(rng.integers(0, 2))
    return Fraction(draw, 1 << 64) < rem


def encode_exact(
    x: ExactValue,
    fmt: Format,
    options: CastOptions = _DEFAULT,
    rng: Any = None,
) -> int:
    """The code of ``x`` rounded once into ``fmt`` under ``options``."""
    neg = x.negative
    if x.is_nan:
        return nan_input_code(fmt, neg)
    if neg and not fmt.signed and not x.is_zero:
        # unsigned formats: negative numbers (and -Inf) are not representable
        return nan_input_code(fmt, False) if fmt.has_nan else 0
    if x.is_inf:
        return overflow_code(fmt, neg, CastOptions("roundTiesToEven", options.overflow))
    if x.is_zero:
        if not fmt.has_zero:
            return nan_input_code(fmt, False) if fmt.has_nan else 0
        return _signed(fmt, neg, 0)

    t = fmt.significand_bits
    mode = options.rounding
    if t == 0 and mode == "roundTiesToEven":
        mode = "roundTiesToAway"
    mag = x.magnitude
    e = _floor_log2(mag)
    if not fmt.has_zero and e < fmt.emin:
        return 0  # no zero to round to: everything below the smallest value becomes it
    q = max(e, fmt.emin) - t  # exponent of the unit in the last place
    scaled = mag / Fraction(2) ** q
    n = scaled.numerator // scaled.denominator
    m = n + _round_up(n, scaled - n, neg, mode, rng)
    if m >= 1 << t:  # normal (a subnormal may have rounded up into the first normal binade)
        if m == 1 << (t + 1):
            m >>= 1
            q += 1
        biased = q + t + fmt.bias
        code = (biased << t) | (m - (1 << t))
    else:
        code = m
    if code > fmt.max_code:
        return overflow_code(fmt, neg, options)
    if options.subnormals == "flush" and fmt.has_zero and 0 < code < (1 << t):
        code = 0
    return _signed(fmt, neg, code)


def decode_exact(code: int, fmt: Format) -> ExactValue:
    """The exact value of one code (NaN and Inf keep their sign)."""
    kind = fmt.classify(code)
    negative = bool(int(code) & fmt.sign_mask)
    if kind == "nan":
        return ExactValue.nan(negative)
    if kind == "inf":
        return ExactValue.inf(negative)
    value = fmt.code_value(int(code))
    return ExactValue("finite", negative, abs(value))
