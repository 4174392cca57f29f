"""Vectorized correctly rounded casts: float32/float64 bit patterns -> codes of any format.

The kernel works on the source's IEEE bit patterns as unsigned integers, in chunks of
``CHUNK`` elements with reused scratch buffers (memory stays the output plus a fixed scratch):

* **normal results** (the bulk): because IEEE encodings are monotone, adding a rounding
  increment to the whole magnitude pattern and shifting right by ``d = t_src - t_dst`` rounds
  the significand and carries into the exponent in one integer add (a carry out of the
  largest binade lands on the overflow code). The exponent re-bias is folded into the same add.
  Overflow is then a clamp, since every overflowing pattern maps above the largest code.
* **subnormal results and underflow** (source exponent below the target's emin): the shift
  grows by the exponent deficit, so those elements are gathered and rounded with a per-element
  shift at 64-bit width, then scattered back.
* **Inf/NaN inputs** and negative inputs to unsigned formats are rare and fixed up by index.

The scalar reference for every rule is ``scalar.encode_exact``; tests hold the two together.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

import numpy as np

from ..formats import Format
from .options import CastOptions
from .scalar import nan_input_code, overflow_code

__all__ = ["CHUNK", "encode_bits"]

CHUNK = 1 << 16

_NEAREST = ("roundTiesToEven", "roundTiesToAway", "stochastic")


@dataclass(frozen=True)
class _Source:
    """The IEEE source encoding the kernel reads: float32 or float64 bit patterns."""

    uint: type
    width: int
    t: int
    bias: int

    @property
    def abs_mask(self) -> int:
        return (1 << (self.width - 1)) - 1

    @property
    def inf_bits(self) -> int:
        return ((1 << (self.width - 1 - self.t)) - 1) << self.t


SOURCE32 = _Source(np.uint32, 32, 23, 127)
SOURCE64 = _Source(np.uint64, 64, 52, 1023)


def source_for(fmt: Format, dtype: np.dtype) -> _Source:
    """float32 sources can use the 32-bit kernel when the target's range and precision fit
    inside float32's; everything else goes through float64 (exact for every supported input)."""
    if (
        dtype == np.float32
        and fmt.significand_bits < 23
        and fmt.emin >= -126
        and fmt.emax <= 127
    ):
        return SOURCE32
    return SOURCE64


@dataclass(frozen=True)
class _Plan:
    """Constants of one (source, format, options) kernel, computed once."""

    src: _Source
    fmt: Format
    mode: str
    d: int  # t_src - t_dst
    k_add: int  # rounding increment minus the re-bias, modulo 2^width (normal path)
    low_bits: int  # source patterns below this have results below the target's emin
    clamp: int  # largest magnitude code after the overflow clamp
    sign_shift: int  # source sign bit -> target sign bit


@lru_cache(maxsize=256)
def _plan(src: _Source, fmt: Format, options: CastOptions) -> _Plan:
    t = fmt.significand_bits
    mode = options.rounding
    if t == 0 and mode == "roundTiesToEven":
        mode = "roundTiesToAway"  # no even significand exists; ties go away (as ml_dtypes)
    d = src.t - t
    rebias = (src.bias - fmt.bias) << src.t
    if d == 0:
        inc = 0  # the source's own precision: nothing to round in the normal range
    elif mode == "roundTiesToEven":
        inc = (1 << d >> 1) - 1  # plus the kept LSB, added per element
    elif mode == "roundTiesToAway":
        inc = 1 << d >> 1
    else:
        inc = 0  # directed and stochastic increments are per element
    k_add = (inc - rebias) % (1 << src.width)
    # below this pattern the result is under the target's emin, or the source is subnormal
    low_bits = max(fmt.emin + src.bias, 1) << src.t
    if options.overflow == "saturate" or not fmt.has_nan and not fmt.has_inf:
        clamp = fmt.max_code
    elif mode in _NEAREST or mode in ("roundTowardPositive", "roundTowardNegative"):
        clamp = fmt.max_code + 1  # Inf, or the NaN that takes its place, sits right above max
    else:
        clamp = fmt.max_code
    return _Plan(src, fmt, mode, d, k_add, low_bits, clamp, src.width - fmt.bits)


class _Scratch:
    """Reusable per-call buffers so a long cast allocates a fixed amount once."""

    def __init__(self, uint: type, n: int) -> None:
        self.a = np.empty(n, uint)
        self.b = np.empty(n, uint)
        self.c = np.empty(n, uint)


def _random_bits(rng: np.random.Generator, n: int, uint: type) -> np.ndarray:
    return rng.integers(0, np.iinfo(uint).max, size=n, dtype=uint, endpoint=True)


def _normal_chunk(
    plan: _Plan, bits: np.ndarray, a: np.ndarray, b: np.ndarray, c: np.ndarray, rng
) -> None:
    """Codes (with sign) for every element as if its result were normal; leaves |bits| in a."""
    src, fmt = plan.src, plan.fmt
    np.bitwise_and(bits, src.uint(src.abs_mask), out=a)
    d = src.uint(plan.d)
    mode = plan.mode
    if plan.d == 0:  # as many significand bits as the source: the normal path is exact
        np.copyto(b, a)
    elif mode == "roundTiesToEven":
        np.right_shift(a, d, out=b)
        np.bitwise_and(b, src.uint(1), out=b)
        np.add(b, a, out=b)
    elif mode in ("roundTowardPositive", "roundTowardNegative"):
        # magnitude rounds up (by 2^d - 1 before truncation) for one sign only
        np.right_shift(bits, src.uint(src.width - 1), out=b)
        if mode == "roundTowardPositive":
            np.bitwise_xor(b, src.uint(1), out=b)
        np.multiply(b, src.uint((1 << plan.d) - 1), out=b)
        np.add(b, a, out=b)
    elif mode == "stochastic":
        r = _random_bits(rng, a.size, src.uint)
        np.bitwise_and(r, src.uint((1 << plan.d) - 1), out=b)
        np.add(b, a, out=b)
    else:
        np.copyto(b, a)
    np.add(b, src.uint(plan.k_add), out=b)
    np.right_shift(b, d, out=b)
    np.minimum(b, src.uint(plan.clamp), out=b)
    if plan.clamp > fmt.max_code and mode in ("roundTowardPositive", "roundTowardNegative"):
        # the side rounding toward zero overflows to max, not to Inf/NaN
        np.right_shift(bits, src.uint(src.width - 1), out=c)
        if mode == "roundTowardNegative":
            np.bitwise_xor(c, src.uint(1), out=c)
        np.multiply(c, np.greater(b, src.uint(fmt.max_code)), out=c, casting="unsafe")
        np.subtract(b, c, out=b)
    if fmt.signed:
        np.right_shift(bits, src.uint(src.width - 1), out=c)
        np.left_shift(c, src.uint(fmt.bits - 1), out=c)
        np.bitwise_or(b, c, out=b)


def _low_codes(plan: _Plan, bits: np.ndarray, options: CastOptions, rng) -> np.ndarray:
    """Exact codes for elements whose results are subnormal, zero or (no-zero formats) the
    smallest value: per-element shift at 64-bit width."""
    src, fmt = plan.src, plan.fmt
    t = fmt.significand_bits
    x = bits.astype(np.uint64)
    neg = (x >> np.uint64(src.width - 1)).astype(bool)
    a = x & np.uint64(src.abs_mask)
    if not fmt.has_zero:
        out = np.zeros(a.size, np.uint64)
        if fmt.has_nan:
            out[a == 0] = nan_input_code(fmt, False)
        return out
    e = a >> np.uint64(src.t)
    m = (a & np.uint64((1 << src.t) - 1)) | (np.minimum(e, 1) << np.uint64(src.t))
    ef = np.maximum(e, np.uint64(1))
    sh = np.uint64(plan.d) + (np.uint64(fmt.emin + src.bias) - ef)
    # Shifts past 63 keep only what decides the result: for the nearest modes and directed
    # modes, M < 2^(t_src+1) <= 2^(sh-1) already means "below half, nonzero" at sh = t_src + 2;
    # for stochastic, the low bits are dropped (probability exact to 2^-63).
    cap = np.uint64(min(63, src.t + 2) if plan.mode != "stochastic" else 63)
    over = sh > cap
    if over.any():
        if plan.mode == "stochastic":
            m = np.where(over, m >> np.minimum(sh - cap, np.uint64(63)), m)
        sh = np.minimum(sh, cap)
    one = np.uint64(1)
    half = one << (sh - one)
    mode = plan.mode
    if mode == "roundTiesToEven":
        q = (m + half - one + ((m >> sh) & one)) >> sh
    elif mode == "roundTiesToAway":
        q = (m + half) >> sh
    elif mode == "roundTowardZero":
        q = m >> sh
    elif mode in ("roundTowardPositive", "roundTowardNegative"):
        up = ~neg if mode == "roundTowardPositive" else neg
        q = (m + ((one << sh) - one) * up.astype(np.uint64)) >> sh
    else:
        r = _random_bits(rng, m.size, np.uint64)
        q = (m + (r & ((one << sh) - one))) >> sh
    if plan.d == 0:  # the shift can be 0 here (exact); the formulas above assume >= 1
        q = np.where(sh == 0, m, q)
    if options.subnormals == "flush":
        q[q < np.uint64(1 << t)] = 0
    if fmt.signed:
        keep_sign = neg & (q != 0) if not fmt.has_negative_zero else neg
        q |= keep_sign.astype(np.uint64) << np.uint64(fmt.bits - 1)
    return q


def _special_codes(plan: _Plan, bits: np.ndarray, options: CastOptions) -> np.ndarray:
    """Codes for Inf and NaN inputs (NaN keeps its sign and, in IEEE targets, the top of its
    payload, quieted as 754-2008 §6.2.3 asks of conversions)."""
    src, fmt = plan.src, plan.fmt
    x = bits.astype(np.uint64)
    neg = (x >> np.uint64(src.width - 1)).astype(bool)
    frac = x & np.uint64((1 << src.t) - 1)
    out = np.empty(x.size, np.uint64)
    is_nan = frac != 0
    for negative in (False, True):
        inf_sel = ~is_nan & (neg == negative)
        out[inf_sel] = overflow_code(fmt, negative, CastOptions("roundTiesToEven", options.overflow))
        out[is_nan & (neg == negative)] = nan_input_code(fmt, negative)
    if fmt.specials == "ieee" and fmt.significand_bits > 1 and is_nan.any():
        payload = (frac >> np.uint64(plan.d)) & np.uint64((1 << (fmt.significand_bits - 1)) - 1)
        out[is_nan] |= payload[is_nan]
    if not fmt.signed:  # unsigned: -Inf is a negative number, not representable
        out[neg & ~is_nan] = nan_input_code(fmt, False) if fmt.has_nan else 0
    return out


def encode_bits(
    bits: np.ndarray,
    src: _Source,
    fmt: Format,
    options: CastOptions,
    out: np.ndarray,
    rng: np.random.Generator | None = None,
    progress=None,
) -> None:
    """Round the float32/float64 patterns ``bits`` (1-D, ``src.uint``) into ``out`` (1-D codes)."""
    same_format = fmt.significand_bits == src.t and fmt.emin == 1 - src.bias and fmt.bits == src.width
    if same_format and options.overflow == "standard" and options.subnormals == "keep":
        np.copyto(out, bits, casting="unsafe")  # the source format itself: nothing to round
        return
    plan = _plan(src, fmt, options)
    if plan.mode == "stochastic" and rng is None:
        rng = np.random.default_rng(options.seed)
    n = bits.size
    scratch = _Scratch(src.uint, min(CHUNK, max(n, 1)))
    low_bits = src.uint(plan.low_bits)
    inf_bits = src.uint(src.inf_bits)
    for start in range(0, n, CHUNK):
        chunk = bits[start : start + CHUNK]
        k = chunk.size
        a, b, c = scratch.a[:k], scratch.b[:k], scratch.c[:k]
        _normal_chunk(plan, chunk, a, b, c, rng)
        if a.min() < low_bits:
            idx = np.flatnonzero(a < low_bits)
            b[idx] = _low_codes(plan, chunk[idx], options, rng)
        if a.max() >= inf_bits:
            idx = np.flatnonzero(a >= inf_bits)
            b[idx] = _special_codes(plan, chunk[idx], options)
        if not fmt.signed:
            negative = chunk > src.uint(src.abs_mask)
            if negative.any():
                idx = np.flatnonzero(negative & (a != 0) & (a < inf_bits))
                b[idx] = nan_input_code(fmt, False) if fmt.has_nan else 0
                if not fmt.has_zero:
                    idx = np.flatnonzero(negative & (a == 0))
                    b[idx] = nan_input_code(fmt, False) if fmt.has_nan else 0
        np.copyto(out[start : start + k], b, casting="unsafe")
        if progress is not None:
            progress(k)
