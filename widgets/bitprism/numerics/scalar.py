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


from ..formats import Format
from .exact import ExactValue, floor_log2
from .options import DEFAULT_OPTIONS, CastOptions
from .rounding import effective_rounding, round_ratio

__all__ = ["decode_exact", "encode_exact", "nan_input_code", "nan_payload_bits", "overflow_code"]


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


def nan_payload_bits(fmt: Format, payload: Fraction | None) -> int:
    """The payload bits a NaN brings into ``fmt``: the top t bits of the source's trailing
    significand (``payload`` = T / 2^t_source) below the quiet bit, which the canonical quiet
    NaN supplies (IEEE 754-2019 §6.2.3: a conversion keeps what fits and quiets; Berkeley
    SoftFloat's f64_to_f16 does the same). 0 without a payload and for formats with a single
    NaN or none; the vector kernel's ``(frac >> d) & (2^(t-1) - 1)`` is the same rule."""
    t = fmt.significand_bits
    if payload is None or fmt.specials != "ieee" or t <= 1:
        return 0
    top = payload.numerator * (1 << t) // payload.denominator  # floor(payload * 2^t) < 2^t
    return top & ((1 << (t - 1)) - 1)


def overflow_code(fmt: Format, negative: bool, rounding: str, overflow: str) -> int:
    """Code of a result whose rounded magnitude exceeds the largest finite value.

    IEEE 754-2008 §7.4: to nearest -> Inf; toward zero -> max; toward ±Inf -> Inf on that side
    and max on the other. "Inf" falls back to NaN, then to max, for formats lacking it. An Inf
    input is converted as roundTiesToEven's overflow (Inf stays Inf where the format has it).
    """
    if overflow == "saturate":
        return _signed(fmt, negative, fmt.max_code)
    mode = rounding
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


def encode_exact(
    x: ExactValue,
    fmt: Format,
    options: CastOptions = DEFAULT_OPTIONS,
    rng: Any = None,
) -> int:
    """The code of ``x`` rounded once into ``fmt`` under ``options``."""
    neg = x.negative
    if x.is_nan:
        return nan_input_code(fmt, neg) | nan_payload_bits(fmt, x.payload)
    if neg and not fmt.signed and not x.is_zero:
        # unsigned formats: negative numbers (and -Inf) are not representable
        return nan_input_code(fmt, False) if fmt.has_nan else 0
    if x.is_inf:
        return overflow_code(fmt, neg, "roundTiesToEven", options.overflow)
    if x.is_zero:
        if not fmt.has_zero:
            return nan_input_code(fmt, False) if fmt.has_nan else 0
        return _signed(fmt, neg, 0)

    t = fmt.significand_bits
    mode = effective_rounding(fmt, options.rounding)
    mag = x.magnitude
    e = floor_log2(mag)
    if not fmt.has_zero and e < fmt.emin:
        return 0  # no zero to round to: everything below the smallest value becomes it
    q = max(e, fmt.emin) - t  # exponent of the unit in the last place
    # |x| / 2^q as a ratio of integers
    num, den = mag.numerator, mag.denominator
    num, den = (num, den << q) if q >= 0 else (num << -q, den)
    m = round_ratio(num, den, neg, mode, rng)
    if m >= 1 << t:  # normal (a subnormal may have rounded up into the first normal binade)
        if m == 1 << (t + 1):
            m >>= 1
            q += 1
        biased = q + t + fmt.bias
        code = (biased << t) | (m - (1 << t))
    else:
        code = m
    if code > fmt.max_code:
        return overflow_code(fmt, neg, options.rounding, options.overflow)
    if options.subnormals == "flush" and fmt.has_zero and 0 < code < (1 << t):
        code = 0
    return _signed(fmt, neg, code)


def decode_exact(code: int, fmt: Format) -> ExactValue:
    """The exact value of one code (NaN and Inf keep their sign; an IEEE NaN its payload,
    the trailing significand T as T / 2^t)."""
    kind = fmt.classify(code)
    negative = bool(int(code) & fmt.sign_mask)
    if kind == "nan":
        payload = None
        if fmt.specials == "ieee":  # 'fn'/'fnuz' have one NaN: no payload to carry
            payload = Fraction(int(code) & fmt.significand_mask, 1 << fmt.significand_bits)
        return ExactValue.nan(negative, payload)
    if kind == "inf":
        return ExactValue.inf(negative)
    # |value| = m * 2^(e - t) from the fields, built from integers (Format.code_value's rule)
    code = int(code)
    t = fmt.significand_bits
    e_field = (code >> t) & fmt.exponent_field_max
    m = code & fmt.significand_mask
    if e_field == 0 and fmt.has_zero:
        e = fmt.emin
    else:
        m |= 1 << t
        e = e_field - fmt.bias
    shift = e - t
    mag = Fraction(m << shift) if shift >= 0 else Fraction(m, 1 << -shift)
    return ExactValue("finite", negative, mag)
