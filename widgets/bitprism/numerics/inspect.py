"""Reading codes apart (fields, class, NaN payload) and walking the value set (ULP, neighbours).

The public functions are vectorized over numpy arrays and also accept scalars. Beside them sit
their exact scalar twins, in Python integers and ``Fraction``s, which ``compare`` and the
widgets use one code at a time (no array round trip): ``code_fields``, ``exact_ulp``,
``neighbour_codes``. Tests hold each twin to its vectorized counterpart on every code of every
format of up to 16 bits.
"""

from __future__ import annotations

import enum
from dataclasses import dataclass
from fractions import Fraction
from typing import Any

import numpy as np

from ..formats import Format, FormatLike, get_format
from .codes import check_codes, decode, encode_with, is_scalar_input
from .exact import ExactValue, floor_log2
from .options import DEFAULT_OPTIONS, CastOptions

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
    """Codes of the values next below and next above ``code`` (IEEE nextDown / nextUp on the
    value set: ±0 count as one value; Inf has nothing beyond it; NaN has no neighbours). The
    scalar twin of ``next_down`` / ``next_up`` on codes."""
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


def _values(x: Any) -> tuple[np.ndarray, bool]:
    scalar = is_scalar_input(x)
    arr = np.asarray(float(x) if scalar else x, dtype=np.float64)
    return arr, scalar


def _out(v: np.ndarray, scalar: bool) -> Any:
    return float(v) if scalar else v


def ulp(x: Any, fmt: FormatLike) -> Any:
    """Unit in the last place at ``x`` in ``fmt`` (Goldberg / Handbook of Floating-Point
    Arithmetic): for |x| in [2^e, 2^(e+1)), 2^(max(e, emin) - t); e is capped at emax beyond the
    largest binade; ulp(0) is the smallest subnormal; NaN for Inf and NaN."""
    f = get_format(fmt)
    arr, scalar = _values(x)
    _, ex = np.frexp(np.abs(arr))
    e = np.clip(ex.astype(np.int64) - 1, f.emin, f.emax)
    e = np.where(arr == 0, f.emin, e)
    out = np.ldexp(1.0, (e - f.significand_bits).astype(np.int32))
    out = np.where(np.isfinite(arr), out, np.nan)
    return _out(out, scalar)


# the representable value on the far side of x: saturated, so x beyond the range gives max
_FLOOR = CastOptions("roundTowardNegative", "saturate")
_CEILING = CastOptions("roundTowardPositive", "saturate")


def _step(x: Any, fmt: FormatLike, up: bool) -> Any:
    f = get_format(fmt)
    arr, scalar = _values(x)
    # the representable value on the far side of x (<= x for next_up, >= x for next_down)
    codes = encode_with(arr, f, _FLOOR if up else _CEILING)
    v = decode(codes, f)
    r = rank(codes, f) + (1 if up else -1)
    stepped = decode(_code_of_rank(np.clip(r, _bottom_rank(f), _top_rank(f)), f), f)
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
        smallest = float(f.smallest_subnormal) if f.has_zero else float(f.smallest_normal)
        lowest = 0.0 if f.has_zero else smallest
        if up:
            res = np.where(np.isnan(v) & ~np.isnan(arr), lowest, res)
            res = np.where(~np.isnan(arr) & (arr < lowest), lowest, res)
        else:
            res = np.where(arr <= lowest, np.nan, res)
    res = np.where(np.isnan(arr), np.nan, res)
    return _out(res, scalar)


def next_up(x: Any, fmt: FormatLike) -> Any:
    """The smallest value of ``fmt`` greater than ``x`` (float64); NaN where none exists."""
    return _step(x, fmt, up=True)


def next_down(x: Any, fmt: FormatLike) -> Any:
    """The largest value of ``fmt`` less than ``x`` (float64); NaN where none exists."""
    return _step(x, fmt, up=False)


def ulp_distance(a: Any, b: Any, fmt: FormatLike) -> Any:
    """How many representable steps lead from ``a`` to ``b`` (signed, float64).

    Both are first rounded to ``fmt`` (roundTiesToEven); +0 and -0 count as one value; NaN if
    either is NaN. Exact up to 2^53 steps.
    """
    f = get_format(fmt)
    aa, sa = _values(a)
    bb, sb = _values(b)
    ca, cb = encode_with(aa, f, DEFAULT_OPTIONS), encode_with(bb, f, DEFAULT_OPTIONS)
    d = rank(cb, f).astype(np.float64) - rank(ca, f).astype(np.float64)
    d = np.where(np.isnan(decode(ca, f)) | np.isnan(decode(cb, f)), np.nan, d)
    return _out(d, sa and sb)
