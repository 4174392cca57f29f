"""Exact real values, as a person types them, before any rounding.

``ExactValue`` is what ``parse`` returns and what the scalar encode path consumes: a sign
(kept for zeros and NaN), a kind, the magnitude as a ``Fraction`` and, for a NaN read from a
bit pattern, its payload. Magnitudes beyond
2^±MAGNITUDE_LIMIT (far outside every format, float64 included) are not built as giant
integers: they are clamped to the limit and flagged, which keeps rounding decisions right (they
still overflow or underflow in every format, in the right direction) while staying instant.
"""

from __future__ import annotations

import math
import struct
from dataclasses import dataclass
from decimal import Decimal
from fractions import Fraction
from typing import Any, Literal, Union

import numpy as np

from ..errors import BitprismError, UnsupportedInputError
from ..formats import get_format
from .digits import fraction_text, int_text

__all__ = ["MAGNITUDE_LIMIT", "ExactValue", "RealLike", "as_exact", "floor_log2"]

# 2^±131072 lies far beyond float64's 2^-1074 .. 2^1024; any magnitude past it rounds the same
# way in every format, so it can be represented by the limit itself.
MAGNITUDE_LIMIT = 1 << 17

Kind = Literal["finite", "inf", "nan"]


@dataclass(frozen=True)
class ExactValue:
    """An exact real, ±Inf or NaN.

    Attributes:
        kind: 'finite', 'inf' or 'nan'.
        negative: the sign bit (meaningful for zeros and NaN too).
        magnitude: |value| as a Fraction (0 for Inf and NaN).
        clamped: +1 if the true magnitude exceeds 2^MAGNITUDE_LIMIT, -1 if it is nonzero and
            below 2^-MAGNITUDE_LIMIT; ``magnitude`` then holds the limit as a stand-in.
        payload: for a NaN read from a bit pattern (a float, a numpy scalar, a code), the
            source's trailing significand field T as the dyadic fraction T / 2^t in [0, 1):
            quiet bit first, so the same number whatever the source format's width. None for a
            NaN without one (``parse("nan")``, an invalid operation, a format with a single
            NaN) and for every other value. A cast keeps its top bits, quieted (IEEE 754-2019
            §6.2.3; ``scalar.encode_exact``).

    Equality and hashing are structural: two NaNs with different payloads are different
    values here (they encode to different codes), as are +0 and -0.
    """

    kind: Kind
    negative: bool = False
    magnitude: Fraction = Fraction(0)
    clamped: int = 0
    payload: Fraction | None = None

    def __post_init__(self) -> None:
        if self.kind not in ("finite", "inf", "nan"):
            raise BitprismError(f"kind must be 'finite', 'inf' or 'nan', got {self.kind!r}")
        if not isinstance(self.magnitude, Fraction) or self.magnitude < 0:
            raise BitprismError(f"magnitude must be a Fraction >= 0, got {_shown(self.magnitude)}")
        if self.payload is not None:
            p = self.payload
            dyadic = isinstance(p, Fraction) and 0 <= p < 1 and p.denominator & (p.denominator - 1) == 0
            if not dyadic or self.kind != "nan":
                raise BitprismError(
                    "payload must be None or, for a NaN, a dyadic Fraction in [0, 1) (the "
                    f"trailing significand T / 2^t); got {_shown(p)} for kind {self.kind!r}"
                )

    # ----- constructors -------------------------------------------------------------------
    @classmethod
    def finite(cls, value: Fraction | int, negative: bool | None = None) -> "ExactValue":
        """A finite value; huge or tiny magnitudes are clamped and flagged."""
        value = Fraction(value)
        neg = value < 0 if negative is None else negative
        mag = abs(value)
        if mag == 0:
            return cls("finite", neg, Fraction(0))
        e = floor_log2(mag)
        if e >= MAGNITUDE_LIMIT:
            return cls("finite", neg, Fraction(2) ** MAGNITUDE_LIMIT, clamped=1)
        if e < -MAGNITUDE_LIMIT:
            return cls("finite", neg, Fraction(1, 1 << MAGNITUDE_LIMIT), clamped=-1)
        return cls("finite", neg, mag)

    @classmethod
    def inf(cls, negative: bool = False) -> "ExactValue":
        return cls("inf", negative)

    @classmethod
    def nan(cls, negative: bool = False, payload: Fraction | None = None) -> "ExactValue":
        return cls("nan", negative, payload=payload)

    # ----- queries ------------------------------------------------------------------------
    @property
    def is_finite(self) -> bool:
        return self.kind == "finite"

    @property
    def is_nan(self) -> bool:
        return self.kind == "nan"

    @property
    def is_inf(self) -> bool:
        return self.kind == "inf"

    @property
    def is_zero(self) -> bool:
        return self.kind == "finite" and self.magnitude == 0

    @property
    def value(self) -> Fraction:
        """The signed exact value; raises for Inf and NaN."""
        if self.kind != "finite":
            raise BitprismError(f"{self} has no exact rational value")
        return -self.magnitude if self.negative else self.magnitude

    def floor_log2(self) -> int:
        """e with 2^e <= |x| < 2^(e+1), for finite nonzero x."""
        if self.kind != "finite" or self.magnitude == 0:
            raise BitprismError(f"floor_log2 needs a finite nonzero value, got {self}")
        return floor_log2(self.magnitude)

    def __float__(self) -> float:
        if self.kind == "nan":
            return -math.nan if self.negative else math.nan
        if self.kind == "inf":
            return -math.inf if self.negative else math.inf
        try:
            mag = float(self.magnitude)
        except OverflowError:
            mag = math.inf
        return -mag if self.negative else mag

    def __neg__(self) -> "ExactValue":
        return ExactValue(self.kind, not self.negative, self.magnitude, self.clamped, self.payload)

    def __str__(self) -> str:
        """``nan``, ``-inf``, ``(> 2**131072)`` or the exact fraction ``n/d``; a part of more
        than ``digits.FULL_DIGITS`` digits is shortened to its leading digits and its count."""
        sign = "-" if self.negative else ""
        if self.kind != "finite":
            return f"{sign}{self.kind}"
        if self.clamped:
            side = ">" if self.clamped > 0 else "<"
            return f"{sign}({side} 2**{self.clamped * MAGNITUDE_LIMIT})"
        return f"{sign}{fraction_text(self.magnitude)}"


def floor_log2(q: Fraction | int) -> int:
    """floor(log2(q)) for q > 0, exactly, in integers: compare n with d shifted by the
    bit-length guess (no float, so it is right for every size of q)."""
    if not isinstance(q, Fraction):
        q = Fraction(q)
    n, d = q.numerator, q.denominator
    e = n.bit_length() - d.bit_length()
    # 2^e <= n/d  <=>  n >= d << e (e >= 0)  or  n << -e >= d (e < 0)
    if (n >= d << e) if e >= 0 else ((n << -e) >= d):
        return e
    return e - 1


RealLike = Union[ExactValue, Fraction, int, float, Decimal, str, np.floating, np.integer]


def _nan_of_float(f: float) -> ExactValue:
    """A Python float NaN with its sign and payload (the float64 trailing significand)."""
    bits = struct.unpack("<Q", struct.pack("<d", f))[0]
    return ExactValue.nan(bits >> 63 == 1, Fraction(bits & ((1 << 52) - 1), 1 << 52))


def _nan_of_numpy(x: np.generic) -> ExactValue | None:
    """A numpy / ml_dtypes float scalar that is NaN, read from its bits (``float(x)`` would
    pass through the hardware, which may quiet a signaling NaN); None if ``x`` is not NaN or
    its dtype is not a known format."""
    try:
        fmt = get_format(x.dtype)
    except BitprismError:
        return None
    raw = np.asarray(x).reshape(1).view(np.dtype(f"u{x.dtype.itemsize}"))
    code = int(raw[0]) & ((1 << fmt.bits) - 1)
    if fmt.classify(code) != "nan":
        return None
    payload = None
    if fmt.specials == "ieee":  # the single NaN of the 'fn'/'fnuz' conventions has no payload
        payload = Fraction(code & fmt.significand_mask, 1 << fmt.significand_bits)
    return ExactValue.nan(bool(code & fmt.sign_mask), payload)


def _decimal(x: Decimal) -> ExactValue:
    if x.is_nan():
        return ExactValue.nan(x.is_signed())
    if x.is_infinite():
        return ExactValue.inf(x.is_signed())
    sign, digits, exp = x.as_tuple()
    # int(Decimal) is not bound by Python's int-to-str digit limit, unlike int(str)
    n = int(Decimal((0, digits, 0)))
    assert isinstance(exp, int)
    if abs(exp) > 2 * MAGNITUDE_LIMIT:  # 10^exp is far past the limit: clamp, do not build it
        if n == 0:
            return ExactValue.finite(0, bool(sign))
        clamp = 1 if exp > 0 else -1
        stand_in = Fraction(2) ** (clamp * MAGNITUDE_LIMIT)
        return ExactValue("finite", bool(sign), stand_in, clamp)
    mag = Fraction(n) * Fraction(10) ** exp
    return ExactValue.finite(mag, bool(sign))


def as_exact(x: Any) -> ExactValue:
    """Turn a Python/numpy scalar into an ExactValue without any rounding.

    A ``str`` is read by ``parse``, exactly (``"0.1"`` is 1/10, not the binary double); a NaN
    float or numpy scalar keeps its sign and payload (``ExactValue.payload``).
    """
    if isinstance(x, ExactValue):
        return x
    if isinstance(x, str):
        from .parse import parse  # parse builds on this module: imported on first use

        return parse(x)
    if isinstance(x, (bool, np.bool_)):
        raise UnsupportedInputError(f"expected a number, got the bool {x!r}")
    if isinstance(x, (int, np.integer)):
        return ExactValue.finite(int(x))
    if isinstance(x, Fraction):
        return ExactValue.finite(x)
    if isinstance(x, Decimal):
        return _decimal(x)
    if isinstance(x, (complex, np.complexfloating)):
        raise UnsupportedInputError(f"complex values are not supported, got {x!r}")
    non_numeric = (np.str_, np.bytes_, np.void, np.datetime64, np.timedelta64, np.object_)
    if isinstance(x, (float, np.generic)) and not isinstance(x, non_numeric):
        if isinstance(x, np.generic) and x.dtype.itemsize > 8:
            raise UnsupportedInputError(
                f"{x.dtype} scalars are not supported (platform-dependent width); "
                "convert to float64 or pass a Fraction"
            )
        if isinstance(x, np.generic):
            nan = _nan_of_numpy(x)
            if nan is not None:
                return nan
        f = float(x)  # type: ignore[arg-type]  # exact for float dtypes up to float64 (ml_dtypes too)
        neg = math.copysign(1.0, f) < 0
        if math.isnan(f):
            return _nan_of_float(f)
        if math.isinf(f):
            return ExactValue.inf(neg)
        return ExactValue("finite", neg, Fraction(abs(f)))  # float64 is far inside the limit
    if isinstance(x, np.ndarray) and x.ndim == 0:
        return as_exact(x[()])
    raise UnsupportedInputError(
        f"expected a real number (int, float, Fraction, Decimal, str read by parse(), numpy "
        f"scalar or parse() result), got {type(x).__name__} {_shown(x)}"
    )


def _shown(x: Any) -> str:
    """``repr(x)`` for a message, cut to 80 characters; numbers through ``digits`` (a repr of a
    huge int would meet Python's int-to-str limit)."""
    if isinstance(x, Fraction):
        return f"Fraction({fraction_text(x)})"
    if isinstance(x, int) and not isinstance(x, bool):
        return int_text(x)
    text = repr(x)
    return text if len(text) <= 80 else text[:77] + "..."
