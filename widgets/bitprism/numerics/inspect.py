"""Reading codes apart (fields, class, NaN payload) and walking the value set (ULP, neighbours).

The public functions are vectorized over numpy arrays (taken as float64; arrays of text are
refused). A scalar argument (Python int, float, Fraction, Decimal, ExactValue, or text, which
``parse`` reads exactly: ``"0.1"`` is 1/10, not the binary double) takes the exact path instead
and gives a float. Beside them sit their exact scalar twins, in Python integers and
``Fraction``s, which ``compare``, the widgets and that exact path use one code at a time (no
array round trip): ``code_fields``, ``exact_ulp``, ``neighbour_codes``. Tests hold each twin to
its vectorized counterpart on every code of every format of up to 16 bits.
"""

from __future__ import annotations

import enum
import math
from dataclasses import dataclass
from fractions import Fraction
from typing import Any

import numpy as np

from ..errors import UnsupportedInputError
from ..formats import Format, FormatLike, get_format
from .codes import check_codes, decode, encode_with, is_scalar_input
from .exact import ExactValue, as_exact, floor_log2
from .options import DEFAULT_OPTIONS, CastOptions
from .scalar import decode_exact, encode_exact

__all__ = [
    "CodeClass",
    "Fields",
    "code_fields",
    "exact_ulp",
    "fields",
    "neighbour_codes",
    "next_down",
    "next_up",
    "rank",
    "ulp",
    "ulp_distance",
]


class CodeClass(enum.IntEnum):
    """What a code encodes (IEEE 754 §3.4 classes; a format's single NaN counts as quiet)."""

    ZERO = 0
    SUBNORMAL = 1
    NORMAL = 2
    INFINITE = 3
    QUIET_NAN = 4
    SIGNALING_NAN = 5

    @property
    def label(self) -> str:
        return {
            0: "zero",
            1: "subnormal",
            2: "normal",
            3: "Inf",
            4: "quiet NaN",
            5: "signaling NaN",
        }[int(self)]


@dataclass(frozen=True)
class Fields:
    """The fields of codes: arrays (or ints for a scalar code) of equal shape.

    Attributes:
        sign: sign bit (0 for unsigned formats).
        exponent: biased exponent field E.
        significand: trailing significand field T.
        kind: ``CodeClass`` values.
        payload: NaN payload (754-2008 §6.2.1: the trailing bits below the quiet bit), else 0.
    """

    format: Format
    sign: Any
    exponent: Any
    significand: Any
    kind: Any
    payload: Any


def _classify(fmt: Format, c: np.ndarray, e: np.ndarray, f: np.ndarray) -> np.ndarray:
    kind = np.full(c.shape, CodeClass.NORMAL, np.int8)
    if fmt.has_zero:
        kind[(e == 0) & (f != 0)] = CodeClass.SUBNORMAL
        kind[(e == 0) & (f == 0)] = CodeClass.ZERO
    top = e == fmt.exponent_field_max
    if fmt.specials == "ieee":
        quiet_bit = np.uint64(1 << (fmt.significand_bits - 1))
        kind[top & (f == 0)] = CodeClass.INFINITE
        kind[top & (f != 0) & ((f & quiet_bit) != 0)] = CodeClass.QUIET_NAN
        kind[top & (f != 0) & ((f & quiet_bit) == 0)] = CodeClass.SIGNALING_NAN
    elif fmt.specials == "fn":
        kind[(c & np.uint64(fmt.magnitude_mask)) == fmt.magnitude_mask] = CodeClass.QUIET_NAN
    elif fmt.specials == "fnuz":
        kind[c == fmt.sign_mask] = CodeClass.QUIET_NAN
        kind[c == 0] = CodeClass.ZERO
    return kind


def code_fields(code: int, fmt: Format) -> Fields:
    """``fields`` of one code, in plain integers (the scalar twin of the vectorized path)."""
    t = fmt.significand_bits
    sign = (code >> (fmt.bits - 1)) & 1 if fmt.signed else 0
    e = (code >> t) & fmt.exponent_field_max
    sig = code & fmt.significand_mask
    kind = CodeClass.NORMAL
    payload = 0
    if fmt.has_zero and e == 0:
        kind = CodeClass.ZERO if sig == 0 else CodeClass.SUBNORMAL
    cls = fmt.classify(code)
    if cls == "inf":
        kind = CodeClass.INFINITE
    elif cls == "nan":
        kind = CodeClass.QUIET_NAN
        if fmt.specials == "ieee":
            quiet = sig >> (t - 1) & 1
            kind = CodeClass.QUIET_NAN if quiet else CodeClass.SIGNALING_NAN
            payload = sig & ((1 << (t - 1)) - 1) if t > 1 else 0
    elif fmt.specials == "fnuz" and code == 0:
        kind = CodeClass.ZERO
    return Fields(fmt, sign, e, sig, kind, payload)


def fields(codes: Any, fmt: FormatLike) -> Fields:
    """Split codes into sign, biased exponent, trailing significand, class and NaN payload."""
    f = get_format(fmt)
    scalar = is_scalar_input(codes)
    arr = check_codes(codes, f).astype(np.uint64)
    t = np.uint64(f.significand_bits)
    sign = (arr >> np.uint64(f.bits - 1)) & np.uint64(1) if f.signed else np.zeros_like(arr)
    e = (arr >> t) & np.uint64(f.exponent_field_max)
    sig = arr & np.uint64(f.significand_mask)
    kind = _classify(f, arr, e, sig)
    if f.specials == "ieee" and f.significand_bits > 1:
        is_nan = kind >= CodeClass.QUIET_NAN
        payload = np.where(is_nan, sig & np.uint64((1 << (f.significand_bits - 1)) - 1), 0)
    else:
        payload = np.zeros_like(arr)
    if scalar:
        return Fields(f, int(sign), int(e), int(sig), CodeClass(int(kind)), int(payload))
    return Fields(f, sign, e, sig, kind, payload.astype(np.uint64))


def rank(codes: Any, fmt: FormatLike) -> np.ndarray:
    """Position of each code in the ordered value set (int64; ±0 share 0; NaN codes get no
    meaning). Consecutive finite values differ by one."""
    f = get_format(fmt)
    c = np.asarray(codes).astype(np.uint64)
    mag = (c & np.uint64(f.magnitude_mask)).astype(np.int64)
    if not f.signed:
        return mag
    neg = (c & np.uint64(f.sign_mask)) != 0
    return np.where(neg, -mag, mag)


def exact_ulp(value: ExactValue, fmt: Format) -> Fraction | None:
    """ULP at a value of ``fmt`` (Goldberg / Handbook): for |x| in [2^e, 2^(e+1)),
    2^(max(e, emin) - t), e capped at emax; ulp(0) is the smallest subnormal; None for NaN/Inf.
    The exact twin of ``ulp``."""
    if not value.is_finite:
        return None
    t = fmt.significand_bits
    if value.is_zero:
        e = fmt.emin
    else:
        e = min(max(floor_log2(value.magnitude), fmt.emin), fmt.emax)
    return Fraction(2) ** (e - t)


def neighbour_codes(code: int, fmt: Format) -> tuple[int | None, int | None]:
    """Codes of the values next below and above ``code`` (IEEE 754-2019 §5.3.1 nextDown /
    nextUp on the value set: ±0 count as one value, nextUp of the negative number of least
    magnitude is -0 where the format has one, nextDown of the positive one is +0; Inf has
    nothing beyond it; NaN has no neighbours). The scalar twin of ``next_down`` / ``next_up``
    on codes."""
    kind = fmt.classify(code)
    if kind == "nan":
        return None, None
    mag = code & fmt.magnitude_mask
    r = -mag if (fmt.signed and code & fmt.sign_mask) else mag
    top = _top_rank(fmt)
    bottom = _bottom_rank(fmt)
    down = _code_of_int_rank(r - 1, fmt) if r - 1 >= bottom else None
    up = _code_of_int_rank(r + 1, fmt) if r + 1 <= top else None
    if r == 0 and fmt.signed and fmt.has_zero:
        down = fmt.sign_mask | 1  # below either zero: the negative smallest subnormal
    if r == -1 and fmt.has_negative_zero:
        up = fmt.sign_mask  # nextUp(-least) = -0 (§5.3.1; numpy and ml_dtypes nextafter agree)
    return down, up


def _code_of_int_rank(r: int, fmt: Format) -> int:
    return fmt.sign_mask | -r if r < 0 else r


def _top_rank(f: Format) -> int:
    """Rank of the largest non-NaN code (+Inf where it exists, else the largest finite)."""
    return f.inf_code if f.inf_code is not None else f.max_code


def _bottom_rank(f: Format) -> int:
    return -_top_rank(f) if f.signed else 0


def _code_of_rank(r: np.ndarray, f: Format) -> np.ndarray:
    neg = r < 0
    mag = np.abs(r).astype(np.uint64)
    if f.signed:
        mag = np.where(neg, mag | np.uint64(f.sign_mask), mag)
    return mag


def _values(x: Any) -> np.ndarray:
    """An array argument as float64 (the vector path); text is refused, not converted."""
    arr = np.asarray(x)
    if arr.dtype.kind in "USO":
        if arr.dtype.kind in "US" or any(isinstance(v, (str, bytes)) for v in arr.flat):
            raise UnsupportedInputError(
                f"arrays of text ({arr.dtype}) are not read: a str is one value, read exactly "
                "by parse(); pass one string at a time, or numbers as a float/int numpy array"
            )
    return np.asarray(arr, dtype=np.float64)


def ulp(x: Any, fmt: FormatLike) -> Any:
    """Unit in the last place at ``x`` in ``fmt`` (Goldberg / Handbook of Floating-Point
    Arithmetic): for |x| in [2^e, 2^(e+1)), 2^(max(e, emin) - t); e is capped at emax beyond the
    largest binade; ulp(0) is the smallest subnormal; NaN for Inf and NaN.

    A scalar (text read by ``parse``, int, float, Fraction, Decimal, ExactValue) is taken
    exactly (``exact_ulp``) and gives a float; arrays give float64 arrays."""
    f = get_format(fmt)
    if is_scalar_input(x):
        u = exact_ulp(as_exact(x), f)
        return math.nan if u is None else float(u)
    arr = _values(x)
    _, ex = np.frexp(np.abs(arr))
    e = np.clip(ex.astype(np.int64) - 1, f.emin, f.emax)
    e = np.where(arr == 0, f.emin, e)
    out = np.ldexp(1.0, (e - f.significand_bits).astype(np.int32))
    return np.where(np.isfinite(arr), out, np.nan)


# the representable value on the far side of x: saturated, so x beyond the range gives max
_FLOOR = CastOptions("roundTowardNegative", "saturate")
_CEILING = CastOptions("roundTowardPositive", "saturate")


def _step(x: Any, f: Format, up: bool) -> np.ndarray:
    arr = _values(x)
    # the representable value on the far side of x (<= x for next_up, >= x for next_down)
    codes = encode_with(arr, f, _FLOOR if up else _CEILING)
    v = decode(codes, f)
    r = rank(codes, f) + (1 if up else -1)
    stepped = decode(_code_of_rank(np.clip(r, _bottom_rank(f), _top_rank(f)), f), f)
    if up and f.has_negative_zero:  # up from the negative number of least magnitude: -0
        stepped = np.where(r == 0, -0.0, stepped)
    out_of_set = (r > _top_rank(f)) | (r < _bottom_rank(f))
    stepped = np.where(out_of_set, np.nan, stepped)
    beyond = v > arr if up else v < arr  # x lies outside the finite range on this side
    res = np.where(beyond, v, stepped)
    if f.has_inf:  # IEEE nextUp(+Inf) = +Inf, nextDown(-Inf) = -Inf
        res = np.where(arr == (np.inf if up else -np.inf), arr, res)
    elif np.isinf(arr).any():
        res = np.where(arr == (np.inf if up else -np.inf), np.nan, res)
    if not f.signed or not f.has_zero:
        # codes that decode to NaN here mean x is below the smallest value (or negative)
        lowest = 0.0 if f.has_zero else float(f.smallest_normal)
        if up:
            res = np.where(np.isnan(v) & ~np.isnan(arr), lowest, res)
            res = np.where(~np.isnan(arr) & (arr < lowest), lowest, res)
        else:
            res = np.where(arr <= lowest, np.nan, res)
    return np.where(np.isnan(arr), np.nan, res)


def _less(x: ExactValue, q: Fraction) -> bool:
    """x < q for a non-NaN x (±Inf included; -0 equals +0)."""
    if x.is_inf:
        return x.negative
    return x.value < q


def _greater(x: ExactValue, q: Fraction) -> bool:
    """x > q for a non-NaN x (±Inf included; -0 equals +0)."""
    if x.is_inf:
        return not x.negative
    return x.value > q


def _step_exact(x: ExactValue, f: Format, up: bool) -> ExactValue | None:
    """The scalar twin of ``_step``: the same rules on the exact value (None for NaN)."""
    if x.is_nan:
        return None
    code = encode_exact(x, f, _FLOOR if up else _CEILING)
    v = decode_exact(code, f)
    down_code, up_code = neighbour_codes(code, f)
    step_code = up_code if up else down_code
    res = None if step_code is None else decode_exact(step_code, f)
    if v.is_finite and (_less(x, v.value) if up else _greater(x, v.value)):
        res = v  # x lies outside the finite range on this side: the far end is the answer
    if x.is_inf and x.negative != up:  # nextUp(+Inf) = +Inf, nextDown(-Inf) = -Inf
        res = x if f.has_inf else None
    if not f.signed or not f.has_zero:
        # no negative values, or no zero: below the smallest value there is only that value
        lowest = Fraction(0) if f.has_zero else f.smallest_normal
        if up:
            if v.is_nan or _less(x, lowest):
                res = decode_exact(0, f)
        elif x.is_inf and x.negative or (not x.is_inf and x.value <= lowest):
            res = None
    return res


def _step_value(x: Any, fmt: FormatLike, up: bool) -> Any:
    f = get_format(fmt)
    if is_scalar_input(x):
        res = _step_exact(as_exact(x), f, up)
        return math.nan if res is None else float(res)
    return _step(x, f, up)


def next_up(x: Any, fmt: FormatLike) -> Any:
    """The smallest value of ``fmt`` greater than ``x`` (float64); NaN where none exists.

    IEEE 754-2019 §5.3.1 nextUp on the format's values: nextUp(-least) is -0 in formats with a
    negative zero; nextUp(±0) is the least positive value. A scalar (text read by ``parse``,
    int, float, Fraction, Decimal, ExactValue) is taken exactly; arrays go through float64."""
    return _step_value(x, fmt, up=True)


def next_down(x: Any, fmt: FormatLike) -> Any:
    """The largest value of ``fmt`` less than ``x`` (float64); NaN where none exists
    (nextDown(x) = -nextUp(-x), so nextDown(+least) is +0). Scalars are taken exactly."""
    return _step_value(x, fmt, up=False)


def _codes_of(x: Any, f: Format) -> tuple[Any, bool]:
    """``x`` rounded to ``f`` (roundTiesToEven): an int code for a scalar (exact), else codes."""
    if is_scalar_input(x):
        return encode_exact(as_exact(x), f, DEFAULT_OPTIONS), True
    return encode_with(_values(x), f, DEFAULT_OPTIONS), False


def ulp_distance(a: Any, b: Any, fmt: FormatLike) -> Any:
    """How many representable steps lead from ``a`` to ``b`` (signed, float64).

    Both are first rounded to ``fmt`` (roundTiesToEven; a scalar exactly, text read by
    ``parse``); +0 and -0 count as one value; NaN if either is NaN. Exact up to 2^53 steps.
    """
    f = get_format(fmt)
    ca, sa = _codes_of(a, f)
    cb, sb = _codes_of(b, f)
    if sa and sb:
        if f.classify(ca) == "nan" or f.classify(cb) == "nan":
            return math.nan
        return float(_int_rank(cb, f) - _int_rank(ca, f))
    d = rank(cb, f).astype(np.float64) - rank(ca, f).astype(np.float64)
    return np.where(np.isnan(decode(ca, f)) | np.isnan(decode(cb, f)), np.nan, d)


def _int_rank(code: int, f: Format) -> int:
    mag = code & f.magnitude_mask
    return -mag if (f.signed and code & f.sign_mask) else mag
