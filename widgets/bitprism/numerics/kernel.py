"""Vectorized correctly rounded casts: float32/float64 bit patterns -> codes of any format.

The kernel works on the source's IEEE bit patterns as unsigned integers, in chunks of
``CHUNK`` elements with reused scratch buffers (memory stays the output plus a fixed scratch):

* **normal results** (the bulk): because IEEE encodings are monotone, adding a rounding
  increment to the whole magnitude pattern and shifting right by ``d = t_src - t_dst`` rounds
  the significand and carries into the exponent in one integer add (a carry out of the
  largest binade lands on the overflow code). The exponent re-bias is folded into the same add.
  Overflow is then a clamp, since every overflowing pattern maps above the largest code.
* **subnormal results and underflow** (below the target's emin): adding 2^(emin - t + t_src)
  to |x| in the source's float type makes the hardware round |x| to the target's subnormal step;
  these codes saturate at the smallest normal code and are added to the normal path (which
  carries the matching offset), so both paths blend without a select or a gather. The other
  rounding directions correct the hardware's roundTiesToEven by one step from the exact
  remainder. bfloat16/tf32 from float32 (same exponent field) need none of this.
* **float32 into formats of <= 8 bits** go through a 2^17-entry table instead (``encode_table``).
* **Inf/NaN inputs** and negative inputs to unsigned formats are rare and fixed up by index.

The scalar reference for every rule is ``scalar.encode_exact``; tests hold the two together.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

import numpy as np

from ..formats import Format
from .options import CastOptions
from .rounding import effective_rounding
from .scalar import nan_input_code, overflow_code

__all__ = [
    "CHUNK",
    "SOURCE32",
    "SOURCE64",
    "encode_bits",
    "encode_table",
    "source_for",
    "table_codes",
    "table_eligible",
    "table_index",
]

CHUNK = 1 << 16

_NEAREST = ("roundTiesToEven", "roundTiesToAway", "stochastic")


@dataclass(frozen=True)
class _Source:
    """The IEEE source encoding the kernel reads: float32 or float64 bit patterns."""

    uint: type
    float: type
    width: int
    t: int
    bias: int

    @property
    def abs_mask(self) -> int:
        return (1 << (self.width - 1)) - 1

    @property
    def inf_bits(self) -> int:
        return ((1 << (self.width - 1 - self.t)) - 1) << self.t

    @property
    def exponent_bits(self) -> int:
        return self.width - 1 - self.t


SOURCE32 = _Source(np.uint32, np.float32, 32, 23, 127)
SOURCE64 = _Source(np.uint64, np.float64, 64, 52, 1023)


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
    options: CastOptions
    mode: str
    d: int  # t_src - t_dst
    k_add: int  # rounding increment minus the re-bias (and the blend offset), mod 2^width
    low_bits: int  # source patterns below this: result under the target's emin, or source subnormal
    clamp: int  # largest magnitude code after the overflow clamp
    same_range: bool  # same exponent field and bias (bfloat16/tf32 from float32): sign rides along
    blend: bool  # results below emin come from the float-add trick, blended in without gathers
    magic: float  # 2^(emin - t + t_src): a source float whose ULP is the target's subnormal step
    magic_bits: int


@lru_cache(maxsize=256)
def _plan(src: _Source, fmt: Format, options: CastOptions) -> _Plan:
    t = fmt.significand_bits
    mode = effective_rounding(fmt, options.rounding)
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
    same_range = (
        fmt.exponent_bits == src.exponent_bits
        and fmt.bias == src.bias
        and fmt.specials == "ieee"
        and fmt.signed
        and mode in ("roundTiesToEven", "roundTiesToAway", "roundTowardZero")
        and options.overflow == "standard"
        and options.subnormals == "keep"
    )
    blend = fmt.has_zero and not same_range
    offset = ((1 << t) << d) if blend else 0
    k_add = (inc - rebias - offset) % (1 << src.width)
    low_bits = max(fmt.emin + src.bias, 1) << src.t
    if options.overflow == "saturate" or not fmt.has_nan and not fmt.has_inf:
        clamp = fmt.max_code
    elif mode in _NEAREST or mode in ("roundTowardPositive", "roundTowardNegative"):
        clamp = fmt.max_code + 1  # Inf, or the NaN that takes its place, sits right above max
    else:
        clamp = fmt.max_code
    magic = src.float(2.0 ** (fmt.emin - t + src.t))
    magic_bits = int(np.array(magic, src.float).view(src.uint))
    return _Plan(
        src, fmt, options, mode, d, k_add, low_bits, clamp, same_range, blend, float(magic),
        magic_bits,
    )


class _Scratch:
    """Reusable per-call buffers so a long cast allocates a fixed amount once. Temporaries of
    a chunk's size are not free: the low-range correction of stochastic rounding made five,
    which nearly doubled the time of a stochastic cast into float16 against ``e`` and ``m``
    (figures in docs/benchmarks.md)."""

    def __init__(self, uint: type, n: int, mode: str) -> None:
        self.a: np.ndarray = np.empty(n, uint)
        self.b: np.ndarray = np.empty(n, uint)
        self.c: np.ndarray = np.empty(n, uint)
        self.s: np.ndarray = np.empty(n, uint)
        rounding_low = mode != "roundTiesToEven"  # the low range's correction (_directed_low)
        self.e: np.ndarray = np.empty(n if rounding_low else 0, uint)
        self.m: np.ndarray = np.empty(n if rounding_low else 0, np.bool_)


def _random_bits(rng: np.random.Generator, n: int, uint: type) -> np.ndarray:
    """n uniform random words straight from the bit generator (every bit independent)."""
    words = (n * np.dtype(uint).itemsize + 7) // 8
    return rng.bit_generator.random_raw(words).view(uint)[:n]


def _chunk_codes(plan: _Plan, bits: np.ndarray, scratch: _Scratch, rng) -> np.ndarray:
    """Codes for one chunk in ``scratch.c``; leaves |bits| in ``scratch.a``. Elements below
    ``low_bits`` are exact only when ``plan.blend`` or ``plan.same_range``; Inf/NaN inputs are
    not final. For the directed modes, ``side`` holds 1 where the magnitude rounds up (the
    sign that the direction points away from zero), else 0."""
    src, fmt, mode = plan.src, plan.fmt, plan.mode
    u = src.uint
    k = bits.size
    a, b, c, side = scratch.a[:k], scratch.b[:k], scratch.c[:k], scratch.s[:k]
    words = None
    directed = mode in ("roundTowardPositive", "roundTowardNegative")
    if directed:
        np.right_shift(bits, u(src.width - 1), out=side)
        if mode == "roundTowardPositive":
            np.bitwise_xor(side, u(1), out=side)
    np.bitwise_and(bits, u(src.abs_mask), out=a)
    if plan.same_range:
        x = bits  # same exponent field: the sign bit rides along untouched
    elif plan.blend:
        x = np.maximum(a, u(plan.low_bits), out=b)  # low elements get the min-normal code here
    else:
        x = a
    d = u(plan.d)
    if plan.d == 0:
        np.copyto(c, x)  # the source's own precision: nothing to round in the normal range
        if mode == "stochastic":
            words = _random_bits(rng, k, u)  # the subnormal range below may still round
    elif mode == "roundTiesToEven":
        np.right_shift(x, d, out=c)
        np.bitwise_and(c, u(1), out=c)
        np.add(c, x, out=c)
    elif directed:
        # the magnitude rounds up (by 2^d - 1 before truncation) for one sign only
        np.multiply(side, u((1 << plan.d) - 1), out=c)
        np.add(c, x, out=c)
    elif mode == "stochastic":
        words = _random_bits(rng, k, u)  # also serves the subnormal range below
        np.bitwise_and(words, u((1 << plan.d) - 1), out=c)
        np.add(c, x, out=c)
    else:
        np.copyto(c, x)
    np.add(c, u(plan.k_add), out=c)
    np.right_shift(c, d, out=c)
    if plan.same_range:
        return c
    if plan.blend:
        if a.min() < u(plan.low_bits):
            _blend_low(plan, a, b, words, side if directed else None, scratch)
            np.add(c, b, out=c)
        else:  # nothing below emin in this chunk: only undo the blend offset
            np.add(c, u(1 << fmt.significand_bits), out=c)
    if plan.clamp > fmt.max_code and directed:
        # the side rounding toward zero overflows to max, the other to Inf (or its NaN)
        np.add(side, u(fmt.max_code), out=b)
        np.minimum(c, b, out=c)
    else:
        np.minimum(c, u(plan.clamp), out=c)
    if fmt.signed:
        np.right_shift(bits, u(src.width - 1), out=b)
        if not fmt.has_negative_zero:  # no -0: a zero result takes no sign
            np.bitwise_and(b, np.minimum(c, u(1)), out=b)
        np.left_shift(b, u(fmt.bits - 1), out=b)
        np.bitwise_or(c, b, out=c)
    return c


def _blend_low(
    plan: _Plan,
    a: np.ndarray,
    b: np.ndarray,
    words: np.ndarray | None,
    side: np.ndarray | None,
    scratch: _Scratch,
) -> None:
    """Subnormal-range codes for every element into ``b``, saturating at the min-normal code
    (so that adding ``b`` to the normal path, which carries the matching offset, blends the
    two without a select). Adding M = 2^(emin - t + t_src) to |x| makes the hardware round
    |x| to a multiple of the target's subnormal step (roundTiesToEven); the other directions
    correct that by one step from the exact remainder r - |x|, which is computed exactly.
    Stochastic rounding compares the remainder, scaled to t_src + 1 bits, with as many random
    bits: probabilities here are exact to 2^-24 (float32 data) or 2^-53 (float64 data)."""
    src, fmt, mode = plan.src, plan.fmt, plan.mode
    u = src.uint
    fa: np.ndarray = a.view(src.float)
    fb: np.ndarray = b.view(src.float)
    # NaN patterns pass through this float arithmetic too (they are fixed up afterwards):
    # signaling NaNs must not raise the invalid flag into a warning
    with np.errstate(invalid="ignore", over="ignore"):
        np.add(fa, src.float(plan.magic), out=fb)
        if mode != "roundTiesToEven":
            _directed_low(plan, fa, fb, b, words, side, scratch)
    np.subtract(b, u(plan.magic_bits), out=b)
    np.minimum(b, u(1 << fmt.significand_bits), out=b)
    if plan.options.subnormals == "flush":
        np.multiply(b, np.right_shift(b, u(fmt.significand_bits)), out=b)


def _directed_low(
    plan: _Plan,
    fa: np.ndarray,
    fb: np.ndarray,
    b: np.ndarray,
    words: np.ndarray | None,
    side: np.ndarray | None,
    scratch: _Scratch,
) -> None:
    """Turn the hardware's roundTiesToEven of |x| + M (in ``fb``/``b``) into the plan's mode,
    with no temporaries (every result goes to ``scratch``)."""
    src, mode = plan.src, plan.mode
    f = src.float
    u = src.uint
    k = b.size
    e, m = scratch.e[:k], scratch.m[:k]
    r = np.subtract(fb, f(plan.magic), out=e.view(f))  # the rounded value, exact
    unit = f(plan.magic) * f(2.0 ** -src.t)  # the target's subnormal step
    if mode == "stochastic":
        assert words is not None
        below = np.greater(r, fa, out=m)
        np.subtract(b, below, out=b, casting="unsafe")  # now rounded down
        rem = np.subtract(fa, r, out=r)  # exact: both lie within one step of each other
        spare: np.ndarray = scratch.s[:k].view(f)  # free: stochastic rounding has no side
        # (no ufunc where=: its masked loops do not vectorize)
        rem += np.multiply(below, unit, out=spare)  # remainder above the lower neighbour, in [0, unit)
        rem *= f(2.0 ** (src.t + 1)) / unit  # scaled to [0, 2^(t_src+1)), an exact integer
        draw = np.right_shift(words, u(src.width - src.t - 1), out=words)
        np.copyto(spare, draw, casting="unsafe")  # exact: below 2^(t_src+1)
        np.add(b, np.less(spare, rem, out=m), out=b, casting="unsafe")
    elif mode == "roundTiesToAway":
        # a tie: the remainder is half a step. Compared doubled, since half of float64's
        # smallest subnormal step is not a float64 (0 == 2^-1075 rounded would match zeros)
        rem = np.subtract(fa, r, out=r)
        step = np.equal(np.multiply(rem, f(2.0), out=rem), unit, out=m)
        np.add(b, step, out=b, casting="unsafe")
    else:
        np.subtract(b, np.greater(r, fa, out=m), out=b, casting="unsafe")  # now rounded down
        if side is not None:  # toward ±Inf: one step up where inexact, on that side
            up = np.not_equal(r, fa, out=m)
            np.add(b, np.multiply(up, side, out=e), out=b)  # r (in e) is no longer needed


def _below_smallest_codes(plan: _Plan, bits: np.ndarray) -> np.ndarray:
    """Codes for elements below the smallest value of a format without zero (E8M0): there is
    nothing smaller to round to, so they become the smallest value; zero itself becomes NaN."""
    fmt = plan.fmt
    a = bits.astype(np.uint64) & np.uint64(plan.src.abs_mask)
    out = np.zeros(a.size, np.uint64)
    if fmt.has_nan:
        out[a == 0] = nan_input_code(fmt, False)
    return out


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
        out[inf_sel] = overflow_code(fmt, negative, "roundTiesToEven", options.overflow)
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
    scratch = _Scratch(src.uint, min(CHUNK, max(n, 1)), plan.mode)
    low_bits = src.uint(plan.low_bits)
    inf_bits = src.uint(src.inf_bits)
    for start in range(0, n, CHUNK):
        chunk = bits[start : start + CHUNK]
        k = chunk.size
        c = _chunk_codes(plan, chunk, scratch, rng)
        a = scratch.a[:k]
        if not (plan.blend or plan.same_range) and a.min() < low_bits:
            idx = np.flatnonzero(a < low_bits)
            c[idx] = _below_smallest_codes(plan, chunk[idx])
        if a.max() >= inf_bits:
            idx = np.flatnonzero(a >= inf_bits)
            c[idx] = _special_codes(plan, chunk[idx], options)
        if not fmt.signed:
            negative = chunk > src.uint(src.abs_mask)
            if negative.any():
                idx = np.flatnonzero(negative & (a != 0) & (a < inf_bits))
                c[idx] = nan_input_code(fmt, False) if fmt.has_nan else 0
                if not fmt.has_zero:
                    idx = np.flatnonzero(negative & (a == 0))
                    c[idx] = nan_input_code(fmt, False) if fmt.has_nan else 0
        np.copyto(out[start : start + k], c, casting="unsafe")
        if progress is not None:
            progress(k)


def table_eligible(fmt: Format, carrier: np.dtype, options: CastOptions) -> bool:
    """Whether float32 data can be cast through a 2^17-entry table (formats of <= 8 bits with
    <= 6 trailing bits): there the rounding point lies in the top 16 bits of the float32
    pattern, so the low 16 bits only matter through being zero or not (the sticky bit)."""
    return (
        carrier == np.float32
        and fmt.bits <= 8
        and fmt.significand_bits <= 6
        and options.rounding != "stochastic"
    )


@lru_cache(maxsize=64)
def _table(fmt: Format, options: CastOptions) -> np.ndarray:
    """Code of every (top 16 bits, low 16 bits nonzero?) float32 pattern pair, by the kernel."""
    hi = np.arange(1 << 16, dtype=np.uint32) << np.uint32(16)
    patterns = np.empty(1 << 17, np.uint32)
    patterns[0::2] = hi
    patterns[1::2] = hi | np.uint32(1)
    table = np.empty(1 << 17, fmt.code_dtype)
    src = source_for(fmt, np.dtype(np.float32))
    if src is SOURCE32:
        encode_bits(patterns, src, fmt, options, table)
    else:
        with np.errstate(invalid="ignore"):  # signaling NaN patterns convert quietly
            wide = patterns.view(np.float32).astype(np.float64).view(np.uint64)
        encode_bits(wide, src, fmt, options, table)
    table.setflags(write=False)
    return table


def encode_table(
    bits: np.ndarray,
    fmt: Format,
    options: CastOptions,
    out: np.ndarray,
    progress=None,
) -> None:
    """Cast float32 patterns ``bits`` (1-D uint32) through the table: one gather per element."""
    table = _table(fmt, options)
    n = bits.size
    idx = np.empty(min(CHUNK, max(n, 1)), np.uint32)
    low = np.empty_like(idx)
    for start in range(0, n, CHUNK):
        chunk = bits[start : start + CHUNK]
        k = chunk.size
        i, lo = idx[:k], low[:k]
        np.right_shift(chunk, np.uint32(15), out=i)
        np.bitwise_and(i, np.uint32(0x1FFFE), out=i)
        np.bitwise_and(chunk, np.uint32(0xFFFF), out=lo)
        np.minimum(lo, np.uint32(1), out=lo)
        np.bitwise_or(i, lo, out=i)
        np.take(table, i, out=out[start : start + k])
        if progress is not None:
            progress(k)


def table_codes(fmt: Format, options: CastOptions) -> np.ndarray:
    """The read-only code table that ``encode_table`` gathers from, indexed by ``table_index``
    (for callers that cast the same float32 data into several formats: one index, many
    gathers). Only for ``table_eligible`` formats."""
    return _table(fmt, options)


def table_index(bits: np.ndarray, out: np.ndarray, scratch: np.ndarray) -> np.ndarray:
    """Index into a ``table_codes`` table of each float32 pattern in ``bits`` (1-D uint32):
    twice the top 16 bits, plus 1 where the low 16 bits are not all zero (the sticky bit).
    ``out`` is an intp array and ``scratch`` a uint32 array, both of ``bits``' length."""
    np.right_shift(bits, np.uint32(16), out=out, casting="unsafe")
    np.left_shift(out, 1, out=out)
    np.bitwise_and(bits, np.uint32(0xFFFF), out=scratch)
    np.minimum(scratch, np.uint32(1), out=scratch)
    np.add(out, scratch, out=out, casting="unsafe")
    return out
