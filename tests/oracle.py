"""An exact reference for binary floating-point formats, written independently of bitprism.

The tests use this module as their oracle for everything ml_dtypes and numpy cannot answer
(directed rounding, saturation, flush-to-zero, TF32, hand-rolled layouts). It reads only the
six free parameters of a format (exponent width ``w``, trailing significand width ``t``, bias,
special-value convention, signedness, whether a zero exists) and derives everything else here,
in Python integers and ``fractions.Fraction``; it never calls bitprism's numeric code.

Rounding is done once, in integers (the ``divmod`` of ``Lib/fractions.py``): the exact input
``num/den`` is scaled by the quantum ``2^q`` of its binade, the integer part is the candidate
below and the remainder decides the direction. Overflow is decided after rounding with an
unbounded exponent (IEEE 754-2008 §7.4), then mapped to the format's Inf, NaN or largest finite
value as the cast options say. The semantics are the ones agreed in the project brief:

* rounding names of IEEE 754-2008 §4.3 plus stochastic rounding (probability of rounding away
  from zero = distance from the lower-magnitude neighbour / gap);
* with 0 trailing bits (E8M0) "ties to even" is undefined, so roundTiesToEven breaks ties away
  from zero, as ml_dtypes 0.7 does (3.0 -> 4.0);
* NaN input -> a NaN of the same sign ('fnuz': the single NaN; unsigned: the NaN; formats
  without NaN: a zero carrying the input's sign bit);
* unsigned formats: negative nonzero inputs and -Inf -> NaN; -0 -> +0; E8M0 (no zero): +-0 -> NaN
  and positive values below 2^emin -> 2^emin in every rounding mode.
"""

from __future__ import annotations

import math
from bisect import bisect_left, bisect_right
from dataclasses import dataclass
from fractions import Fraction
from functools import cached_property
from typing import Any, Union

RNE = "roundTiesToEven"
RNA = "roundTiesToAway"
RTP = "roundTowardPositive"
RTN = "roundTowardNegative"
RTZ = "roundTowardZero"
SR = "stochastic"
DETERMINISTIC_ROUNDINGS = (RNE, RNA, RTP, RTN, RTZ)
OVERFLOWS = ("standard", "saturate")
SUBNORMALS = ("keep", "flush")

Number = Union[Fraction, int, float]


@dataclass(frozen=True)
class Layout:
    """The free parameters of a format; every other property below is derived from them."""

    w: int
    t: int
    bias: int
    specials: str = "ieee"  # 'ieee' | 'fn' | 'fnuz' | 'finite'
    signed: bool = True
    has_zero: bool = True
    name: str = "layout"

    @classmethod
    def of(cls, fmt: Any) -> "Layout":
        """Read the free parameters of a bitprism Format (or any object with the same names)."""
        bias = fmt.bias if fmt.bias is not None else (1 << (fmt.exponent_bits - 1)) - 1
        return cls(
            w=fmt.exponent_bits,
            t=fmt.significand_bits,
            bias=bias,
            specials=fmt.specials,
            signed=fmt.signed,
            has_zero=fmt.has_zero,
            name=fmt.name,
        )

    # ----- widths and special codes (magnitude codes exclude the sign bit) ----------------
    @cached_property
    def bits(self) -> int:
        return int(self.signed) + self.w + self.t

    @cached_property
    def sign_bit(self) -> int:
        return (1 << (self.w + self.t)) if self.signed else 0

    @cached_property
    def all_ones_exponent(self) -> int:
        return (1 << self.w) - 1

    @cached_property
    def frac_mask(self) -> int:
        return (1 << self.t) - 1

    @cached_property
    def max_mag_code(self) -> int:
        """Magnitude code of the largest finite value."""
        if self.specials == "ieee":  # all-ones exponent reserved (754-2008 §3.4)
            return ((self.all_ones_exponent - 1) << self.t) | self.frac_mask
        if self.specials == "fn":  # only all-ones exponent AND significand is NaN
            return (1 << (self.w + self.t)) - 2
        return (1 << (self.w + self.t)) - 1  # 'fnuz', 'finite': every magnitude is finite

    @cached_property
    def emin(self) -> int:
        return (1 if self.has_zero else 0) - self.bias

    @cached_property
    def emax(self) -> int:
        return (self.max_mag_code >> self.t) - self.bias

    @cached_property
    def has_inf(self) -> bool:
        return self.specials == "ieee"

    @cached_property
    def has_nan(self) -> bool:
        return self.specials != "finite"

    @cached_property
    def has_subnormals(self) -> bool:
        return self.has_zero and self.t > 0

    @cached_property
    def inf_mag_code(self) -> int:
        return self.all_ones_exponent << self.t

    @cached_property
    def max_finite(self) -> Fraction:
        return self.mag_value(self.max_mag_code)

    @cached_property
    def smallest_normal(self) -> Fraction:
        return Fraction(2) ** self.emin

    @cached_property
    def smallest_positive(self) -> Fraction:
        """Smallest positive value: 2^(emin - t), or 2^emin without subnormals."""
        if not self.has_subnormals:
            return self.smallest_normal
        return Fraction(2) ** (self.emin - self.t)

    def with_sign(self, negative: bool, mag_code: int) -> int:
        return (self.sign_bit | mag_code) if (negative and self.signed) else mag_code

    def nan(self, negative: bool = False) -> int:
        """The NaN a cast produces: quiet (754-2008 §6.2.1, first trailing bit set) for 'ieee'."""
        if self.specials == "ieee":
            return self.with_sign(negative, self.inf_mag_code | (1 << (self.t - 1)))
        if self.specials == "fn":
            return self.with_sign(negative, (1 << (self.w + self.t)) - 1)
        if self.specials == "fnuz":
            return self.sign_bit  # the negative-zero pattern is the single NaN
        raise ValueError(f"{self.name}: format has no NaN")

    def zero(self, negative: bool) -> int:
        if not self.has_zero:
            return self.nan(False)  # E8M0: zero is not representable
        if self.specials == "fnuz" or not self.signed:
            return 0
        return self.with_sign(negative, 0)

    # ----- classification and exact values -------------------------------------------------
    def is_nan(self, code: int) -> bool:
        mag = code & ~self.sign_bit
        if self.specials == "ieee":
            return (mag >> self.t) == self.all_ones_exponent and (mag & self.frac_mask) != 0
        if self.specials == "fn":
            return mag == (1 << (self.w + self.t)) - 1
        if self.specials == "fnuz":
            return code == self.sign_bit
        return False

    def is_inf(self, code: int) -> bool:
        return self.has_inf and (code & ~self.sign_bit) == self.inf_mag_code

    def is_negative(self, code: int) -> bool:
        return bool(code & self.sign_bit)

    def mag_value(self, mag_code: int) -> Fraction:
        """Exact value of a finite magnitude code."""
        e_field, frac = mag_code >> self.t, mag_code & self.frac_mask
        if self.has_zero and e_field == 0:  # zero and subnormals: 0.F * 2^emin
            return Fraction(frac) * Fraction(2) ** (self.emin - self.t)
        return Fraction((1 << self.t) | frac) * Fraction(2) ** (e_field - self.bias - self.t)

    def value(self, code: int) -> Fraction:
        """Exact value of a finite code (the sign of a zero is lost: use ``to_float``)."""
        if self.is_nan(code) or self.is_inf(code):
            raise ValueError(f"{self.name}: code {code:#x} is not finite")
        mag = self.mag_value(code & ~self.sign_bit)
        return -mag if self.is_negative(code) else mag

    def to_float(self, code: int) -> float:
        """The code's value as a Python float, keeping the sign of zeros, Infs and NaNs."""
        sign = -1.0 if self.is_negative(code) else 1.0
        if self.is_nan(code):
            return math.copysign(math.nan, sign)
        if self.is_inf(code):
            return sign * math.inf
        mag = code & ~self.sign_bit
        if self.bits <= 20:  # small formats: one table of exact magnitudes
            return math.copysign(self._mag_floats[mag], sign)
        return math.copysign(float(self.mag_value(mag)), sign)

    @cached_property
    def _mag_floats(self) -> list[float]:
        return [float(self.mag_value(m)) for m in range(self.max_mag_code + 1)]

    def classify(self, code: int) -> str:
        """'zero', 'subnormal', 'normal', 'infinite', 'quiet_nan' or 'signaling_nan'.

        For 'fn'/'fnuz' the single NaN pattern is reported as 'quiet_nan' only when the
        754 rule (first trailing bit set) says so; the tests treat non-IEEE NaNs as "a NaN".
        """
        if self.is_nan(code):
            first = (code >> (self.t - 1)) & 1 if self.t else 0
            return "quiet_nan" if first else "signaling_nan"
        if self.is_inf(code):
            return "infinite"
        mag = code & ~self.sign_bit
        if self.has_zero and mag == 0:
            return "zero"
        if self.has_zero and (mag >> self.t) == 0:
            return "subnormal"
        return "normal"

    @cached_property
    def n_codes(self) -> int:
        return 1 << self.bits

    def finite_codes(self) -> list[int]:
        return [c for c in range(self.n_codes) if not (self.is_nan(c) or self.is_inf(c))]

    @cached_property
    def ordered_values(self) -> list[Fraction]:
        """Every distinct finite value, ascending (+0 and -0 are one value). Magnitude codes
        0..max_mag_code are finite and increase with their value, so no sort is needed."""
        mags = [self.mag_value(m) for m in range(self.max_mag_code + 1)]
        if not self.signed:
            return mags
        negatives = [-v for v in reversed(mags) if v != 0]
        return negatives + mags


# ----- rounding ---------------------------------------------------------------------------------
def _split(x: Any) -> tuple[bool, str, Fraction]:
    """(negative, kind, |x|) with kind in 'nan', 'inf', 'finite'; accepts floats, ints,
    Fractions, numpy scalars and the strings 'nan', '-nan', 'inf', '-inf'."""
    if isinstance(x, str):
        text = x.strip().lower()
        negative = text.startswith("-")
        body = text.lstrip("+-")
        if body not in ("nan", "inf"):
            raise ValueError(f"unknown special {x!r}")
        return negative, body, Fraction(0)
    if isinstance(x, (Fraction, int)) and not isinstance(x, bool):
        return x < 0, "finite", abs(Fraction(x))
    xf = float(x)  # numpy floats and Python floats: exact conversion
    negative = math.copysign(1.0, xf) < 0
    if math.isnan(xf):
        return negative, "nan", Fraction(0)
    if math.isinf(xf):
        return negative, "inf", Fraction(0)
    return negative, "finite", abs(Fraction(xf))


def _floor_log2(mag: Fraction) -> int:
    """e with 2^e <= mag < 2^(e+1), mag > 0, in integers."""
    num, den = mag.numerator, mag.denominator
    e = num.bit_length() - den.bit_length()  # floor(log2) is e or e - 1
    if (num << max(-e, 0)) < (den << max(e, 0)):
        e -= 1
    return e


def _grid(mag: Fraction, L: Layout) -> tuple[int, int, int, int]:
    """Scale |x| to its quantum: returns (n, r, d, q) with |x| = (n + r/d) * 2^q, 0 <= r < d.

    q = max(e, emin) - t is the exponent of the last significand bit in |x|'s binade with an
    unbounded exponent above (IEEE 754-2008 §7.4 overflow rule) and subnormals below.
    """
    q = max(_floor_log2(mag), L.emin) - L.t
    num, den = mag.numerator, mag.denominator
    if q <= 0:
        n, r = divmod(num << -q, den)
        d = den
    else:
        d = den << q
        n, r = divmod(num, d)
    return n, r, d, q


def _mag_code(n: int, q: int, L: Layout) -> int:
    """Magnitude code of n * 2^q (on the grid of _grid); may exceed max_mag_code (overflow)."""
    if n == 0:
        return 0
    if n == 1 << (L.t + 1):  # the carry out of the binade: 1.11..1 rounded up to 10.00..0
        n, q = n >> 1, q + 1
    if n < (1 << L.t):  # subnormal (only reachable below 2^emin with a zero)
        return n
    e_field = q + L.t + L.bias
    return (e_field << L.t) | (n - (1 << L.t))


def _direction(rounding: str, negative: bool) -> str:
    """Map a rounding attribute to what it does to the magnitude."""
    if rounding == RTZ:
        return "down"
    if rounding == RTP:
        return "down" if negative else "up"
    if rounding == RTN:
        return "up" if negative else "down"
    if rounding in (RNE, RNA):
        return rounding
    raise ValueError(f"unknown rounding {rounding!r}")


def _round_mag_code(mag: Fraction, L: Layout, direction: str) -> int:
    n, r, d, q = _grid(mag, L)
    if r:
        if direction == "up":
            n += 1
        elif direction in (RNE, RNA):
            twice = 2 * r
            if twice > d:
                n += 1
            elif twice == d:
                # Tie. Away from zero for RNA; for RNE the even integer significand, except
                # that with t = 0 every significand is 1 and "even" is undefined: away (brief).
                if direction == RNA or L.t == 0 or n & 1:
                    n += 1
    return _mag_code(n, q, L)


def _inf_like(L: Layout, negative: bool) -> int:
    """What 'the format's Infinity' means: Inf, else NaN, else the largest finite value."""
    if L.has_inf:
        return L.with_sign(negative, L.inf_mag_code)
    if L.has_nan:
        return L.nan(negative)
    return L.with_sign(negative, L.max_mag_code)


def _overflow(L: Layout, negative: bool, rounding: str, overflow: str) -> int:
    if overflow == "saturate":
        return L.with_sign(negative, L.max_mag_code)
    # IEEE 754-2008 §7.4: nearest modes -> Inf; directed modes -> Inf only in their direction.
    to_inf = (
        rounding in (RNE, RNA, SR)
        or (rounding == RTP and not negative)
        or (rounding == RTN and negative)
    )
    return _inf_like(L, negative) if to_inf else L.with_sign(negative, L.max_mag_code)


def _check_options(rounding: str, overflow: str, subnormals: str) -> None:
    if rounding not in DETERMINISTIC_ROUNDINGS:
        raise ValueError(f"oracle encode: rounding must be one of {DETERMINISTIC_ROUNDINGS}")
    if overflow not in OVERFLOWS or subnormals not in SUBNORMALS:
        raise ValueError(f"bad options {overflow!r}, {subnormals!r}")


def _finish(L: Layout, negative: bool, mc: int, rounding: str, overflow: str,
            subnormals: str) -> int:
    """Apply overflow, flush-to-zero and the sign to a rounded magnitude code."""
    if mc > L.max_mag_code:
        return _overflow(L, negative, rounding, overflow)
    if subnormals == "flush" and L.has_zero and 0 < mc < (1 << L.t):
        mc = 0  # subnormal after rounding -> zero of the same sign
    if mc == 0 and L.has_zero:
        return L.zero(negative)
    return L.with_sign(negative, mc)


def _special(L: Layout, negative: bool, kind: str, mag: Fraction, overflow: str) -> int | None:
    """Code for inputs decided before rounding (NaN, Inf, zero, negatives in unsigned formats,
    below the range of a zero-less format), else None."""
    if kind == "nan":
        if L.has_nan:
            return L.nan(negative) if L.signed else L.nan(False)
        return L.with_sign(negative, 0)  # no NaN (FP6/FP4): a zero with the input's sign bit
    if not L.signed and negative and (kind == "inf" or mag != 0):
        return L.nan(False)  # unsigned: negative nonzero and -Inf are NaN
    if kind == "inf":
        if overflow == "saturate":
            return L.with_sign(negative, L.max_mag_code)
        return _inf_like(L, negative)
    if mag == 0:
        return L.zero(negative)
    if not L.has_zero and mag < L.smallest_normal:
        return 0  # E8M0: below 2^emin -> 2^emin (code 0) in every rounding mode
    return None


def encode(x: Any, L: Layout, rounding: str = RNE, overflow: str = "standard",
           subnormals: str = "keep") -> int:
    """The code one correct rounding of the exact value of x gives under the cast options."""
    _check_options(rounding, overflow, subnormals)
    negative, kind, mag = _split(x)
    early = _special(L, negative, kind, mag, overflow)
    if early is not None:
        return early
    mc = _round_mag_code(mag, L, _direction(rounding, negative))
    return _finish(L, negative, mc, rounding, overflow, subnormals)


def stochastic(x: Any, L: Layout, overflow: str = "standard",
               subnormals: str = "keep") -> tuple[int, int, Fraction]:
    """(code toward zero, code away from zero, probability of the latter) for stochastic
    rounding: p = (|x| - lower neighbour) / gap on the unbounded-exponent grid."""
    negative, kind, mag = _split(x)
    early = _special(L, negative, kind, mag, overflow)
    if early is not None:
        return early, early, Fraction(0)
    n, r, d, q = _grid(mag, L)
    p = Fraction(r, d)
    # Either neighbour is "the rounded result"; one beyond max overflows as in the nearest
    # modes (Inf / NaN / max by the format's conventions, or max when saturating).
    down = _finish(L, negative, _mag_code(n, q, L), SR, overflow, subnormals)
    if r == 0:
        return down, down, Fraction(0)
    up = _finish(L, negative, _mag_code(n + 1, q, L), SR, overflow, subnormals)
    return down, up, p


# ----- ULP (Handbook definition) ----------------------------------------------------------------
def ulp(x: Number, L: Layout) -> Fraction:
    """Handbook of Floating-Point Arithmetic / Goldberg ULP: for |x| in [2^e, 2^(e+1)),
    2^(max(e, emin) - t), with e capped at emax beyond the largest binade; ulp(0) =
    2^(emin - t) (the smallest subnormal)."""
    mag = abs(Fraction(x))
    if mag == 0:
        return Fraction(2) ** (L.emin - L.t)
    e = min(_floor_log2(mag), L.emax)
    return Fraction(2) ** (max(e, L.emin) - L.t)


# ----- brute force over the value set (a second, independent rounding for small formats) ----
def brute_round(x: Fraction, L: Layout, rounding: str) -> Fraction:
    """Round a finite x with |x| <= max_finite by searching the sorted value set. Ties: the
    value whose code has an even trailing significand (RNE), larger magnitude (RNA)."""
    vals = L.ordered_values
    if not vals[0] <= x <= vals[-1]:
        raise ValueError("brute_round works inside [lowest, max] only")
    i = bisect_left(vals, x)
    if vals[i] == x:
        return x
    lo, hi = vals[i - 1], vals[i]
    if rounding == RTP:
        return hi
    if rounding == RTN:
        return lo
    toward_zero, away = (lo, hi) if x > 0 else (hi, lo)
    if rounding == RTZ:
        return toward_zero
    dlo, dhi = x - lo, hi - x
    if dlo != dhi:
        return lo if dlo < dhi else hi
    if rounding == RNA or L.t == 0:
        return away
    # RNE: the neighbour whose encoding has an even last trailing-significand bit
    even = [v for v in (lo, hi) if _code_of_value(v, L) & 1 == 0]
    assert len(even) == 1, (x, lo, hi)
    return even[0]


def _code_of_value(v: Fraction, L: Layout) -> int:
    return _value_codes(L)[v]


_VALUE_CODES: dict[Layout, dict[Fraction, int]] = {}


def _value_codes(L: Layout) -> dict[Fraction, int]:
    """value -> code (the +0 code for zero), built once per layout."""
    if L not in _VALUE_CODES:
        table: dict[Fraction, int] = {}
        for c in reversed(L.finite_codes()):  # lower codes win: +0 over -0
            table[L.value(c)] = c
        _VALUE_CODES[L] = table
    return _VALUE_CODES[L]


def neighbours(x: Fraction, L: Layout) -> tuple[Fraction | None, Fraction | None]:
    """(largest value < x, smallest value > x) of the finite value set, None where none."""
    vals = L.ordered_values
    i, j = bisect_left(vals, x), bisect_right(vals, x)
    return (vals[i - 1] if i > 0 else None), (vals[j] if j < len(vals) else None)


# ----- the built-in formats, from their published parameters (not from bitprism) --------------
def _L(name: str, w: int, t: int, bias: int, specials: str = "ieee", *, signed: bool = True,
       has_zero: bool = True) -> Layout:
    return Layout(w, t, bias, specials, signed, has_zero, name)


BUILTIN_LAYOUTS: dict[str, Layout] = {
    # IEEE Std 754-2008 §3.6 Table 3.5 (w, t, bias)
    "float64": _L("float64", 11, 52, 1023),
    "float32": _L("float32", 8, 23, 127),
    # TF32: 1 sign, 8 exponent, 10 fraction bits, bias 127 (RISC-V BF16 chapter format table;
    # TensorFlow TF32 RFC)
    "tf32": _L("tf32", 8, 10, 127),
    # bfloat16: top half of binary32 (Google Cloud TPU bfloat16 doc; RISC-V BF16 chapter)
    "bfloat16": _L("bfloat16", 8, 7, 127),
    "float16": _L("float16", 5, 10, 15),  # IEEE 754-2008 Table 3.5
    # OCP OFP8 rev 1.0 / FP8 paper (arXiv 2209.05433) Table 1: E5M2 IEEE-like, E4M3 no Inf
    "float8_e5m2": _L("float8_e5m2", 5, 2, 15),
    "float8_e4m3fn": _L("float8_e4m3fn", 4, 3, 7, "fn"),
    # ml_dtypes 0.7 README / source: IEEE-like E4M3 and E3M4
    "float8_e4m3": _L("float8_e4m3", 4, 3, 7),
    "float8_e3m4": _L("float8_e3m4", 3, 4, 3),
    # ONNX "Float stored in 8 bits" page and ml_dtypes: fnuz biases 8 and 16; b11 = bias 11
    "float8_e4m3fnuz": _L("float8_e4m3fnuz", 4, 3, 8, "fnuz"),
    "float8_e5m2fnuz": _L("float8_e5m2fnuz", 5, 2, 16, "fnuz"),
    "float8_e4m3b11fnuz": _L("float8_e4m3b11fnuz", 4, 3, 11, "fnuz"),
    # ml_dtypes 0.7: unsigned E5M3 with NaN at 0xFF, bias 15 (finfo minexp -14)
    "float8_e5m3fnu": _L("float8_e5m3fnu", 5, 3, 15, "fn", signed=False),
    # OCP MX v1.0 Table 7: E8M0 scale, unsigned, bias 127, NaN 0xFF, no zero, no Inf
    "float8_e8m0fnu": _L("float8_e8m0fnu", 8, 0, 127, "fn", signed=False, has_zero=False),
    # OCP MX v1.0 Tables 4-5: FP6 E2M3 bias 1, E3M2 bias 3, FP4 E2M1 bias 1; no Inf, no NaN
    "float6_e2m3fn": _L("float6_e2m3fn", 2, 3, 1, "finite"),
    "float6_e3m2fn": _L("float6_e3m2fn", 3, 2, 3, "finite"),
    "float4_e2m1fn": _L("float4_e2m1fn", 2, 1, 1, "finite"),
}

# The numpy / ml_dtypes type with each layout (None: no library type).
LIBRARY_TYPE_NAMES: dict[str, str | None] = {
    "float64": "numpy.float64",
    "float32": "numpy.float32",
    "tf32": None,
    "float16": "numpy.float16",
    **{n: f"ml_dtypes.{n}" for n in BUILTIN_LAYOUTS if n not in ("float64", "float32", "tf32",
                                                                   "float16")},
}


def library_dtype(name: str):  # -> numpy.dtype | None
    import ml_dtypes
    import numpy as np

    spec = LIBRARY_TYPE_NAMES[name]
    if spec is None:
        return None
    module, attr = spec.split(".")
    return np.dtype(getattr(np if module == "numpy" else ml_dtypes, attr))


# ----- sample generators (float64 numpy arrays) -----------------------------------------------
def _mag_pairs(L: Layout, rng, count: int) -> list[int]:
    """Magnitude codes m (with m + 1 also finite): the ends of the range, the subnormal/normal
    boundary, around 1.0 and random ones. Consecutive magnitude codes are consecutive values."""
    top = L.max_mag_code  # pairs (m, m+1) need m + 1 <= top
    if top <= 2 * count:
        return list(range(top))
    k = max(count // 8, 1)
    one = _round_mag_code(Fraction(1), L, RNE)
    normal0 = 1 << L.t if L.has_zero else 0
    picks = set(range(k)) | set(range(top - k, top))
    for centre in (normal0, one):
        picks |= set(range(max(centre - k, 0), min(centre + k, top)))
    picks |= {int(v) for v in rng.integers(0, top, count)}
    return sorted(picks)


def edge_values(L: Layout, rng, count: int = 400):
    """float64 inputs that probe every decision of a cast to L: consecutive values, their exact
    midpoints (ties) and the float64 numbers either side of each midpoint; ties and near-ties
    beyond the largest finite value and below the smallest positive; +-0, +-Inf, +-NaN."""
    import numpy as np

    out: list[float] = []
    for m in _mag_pairs(L, rng, count):
        a, b = L.mag_value(m), L.mag_value(m + 1)
        mid = (a + b) / 2
        out += [float(a), float(b), float(mid)]
    mids = np.array(out[2::3])
    top = L.max_finite
    gap = Fraction(2) ** (L.emax - L.t)  # the unbounded-exponent gap above max
    tiny = L.smallest_positive
    special = [top + gap / 2, top + gap, top + 3 * gap / 2, 2 * top, top * 4, tiny / 2,
               tiny / 4, 3 * tiny / 4, tiny * 3 / 2, tiny / 1024]
    spec = np.array([float(v) for v in special if float(v) < math.inf], dtype=np.float64)
    arr = np.concatenate([np.array(out), np.nextafter(mids, -np.inf), np.nextafter(mids, np.inf),
                          spec, np.nextafter(spec, -np.inf), np.nextafter(spec, np.inf)])
    arr = arr[np.isfinite(arr)]
    arr = np.concatenate([arr, -arr, [0.0, -0.0, np.inf, -np.inf, np.nan, -np.nan,
                                      1e308, -1e308, 5e-324, -5e-324]])
    return arr


def spread_values(L: Layout, rng, n: int):
    """n float64 values spread over L's exponent range and two binades beyond it either side,
    with random signs and full 53-bit significands; one quarter near max and near zero."""
    import numpy as np

    lo = max(L.emin - L.t - 3, -1074)
    hi = min(L.emax + 2, 1023)
    k = n // 8
    sig = rng.uniform(1.0, 2.0, n - 2 * k)
    exps = rng.integers(lo, hi + 1, n - 2 * k)
    body = np.ldexp(sig, exps)
    fmax = float(L.max_finite)
    step = float(Fraction(2) ** (L.emax - L.t))
    near_max = fmax + rng.uniform(-4.0, 4.0, k) * step if fmax < 1e308 else rng.uniform(0, 1e308, k)
    near_zero = rng.uniform(0.0, 4.0, k) * float(L.smallest_normal)
    vals = np.concatenate([body, near_max, near_zero])
    signs = np.where(rng.integers(0, 2, n) == 1, -1.0, 1.0)
    return vals * signs


def float32_patterns(rng, n: int):
    """n uniformly random float32 bit patterns (every class, NaN payloads included)."""
    import numpy as np

    return rng.integers(0, 1 << 32, n, dtype=np.uint64).astype(np.uint32).view(np.float32)


# ----- library counterparts (ml_dtypes / numpy), quiet about casts of NaN and overflow -------
def library_decode(codes, dtype):
    """Codes viewed as the library dtype and widened to float64 (exact)."""
    import numpy as np

    codes = np.asarray(codes).astype(np.dtype(f"uint{8 * dtype.itemsize}"))
    with np.errstate(invalid="ignore", over="ignore"):
        return codes.view(dtype).astype(np.float64)


def library_encode(x, dtype):
    """x.astype(dtype) (one rounding, ties to even, ml_dtypes' overflow), as unsigned codes."""
    import numpy as np

    with np.errstate(invalid="ignore", over="ignore"):
        y = np.asarray(x).astype(dtype)
    return y.view(np.dtype(f"uint{8 * dtype.itemsize}"))


# Hand-rolled layouts the tests run beside the built-ins (each exercises one convention).
CUSTOM_LAYOUTS: list[Layout] = [
    Layout(3, 3, 3, name="mine"),  # small IEEE-style: Inf, NaNs, subnormals
    Layout(2, 0, 1, "fn", signed=False, name="x"),  # 2-bit unsigned, t = 0, NaN at 0b11
    Layout(6, 9, 31, name="e6m9"),  # 16-bit IEEE-style
    Layout(3, 5, 4, "fnuz", name="fnuz35"),  # single NaN at the -0 pattern, odd bias
    Layout(3, 4, 2, "finite", name="fin34"),  # no Inf, no NaN, unusual bias
    Layout(4, 0, 7, "fn", signed=False, has_zero=False, name="e4m0"),  # E8M0 in miniature
    Layout(5, 1, 15, name="e5m1"),  # IEEE with t = 1: the only NaN is quiet
    Layout(3, 2, 3, "finite", signed=False, name="ufin32"),  # unsigned, no NaN
]


def ulp_of_float(v: float, L: Layout) -> float:
    """ulp() for a finite float input: the same Handbook formula with e read by math.frexp
    (|v| = m * 2^k with m in [0.5, 1), so e = k - 1); cross-checked against ulp()."""
    if v == 0:
        return math.ldexp(1.0, L.emin - L.t)
    e = min(math.frexp(abs(v))[1] - 1, L.emax)
    return math.ldexp(1.0, max(e, L.emin) - L.t)
