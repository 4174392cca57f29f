"""Compiled loops (numba) of the general scan path, for formats of up to 16 bits.

Once a piece of data is cast to codes, the scan measures the cast: the value and ``1/ulp`` of
each code, ``err = |q - x|`` with NaN (left out) set to 0, ``rel = err / |x|``, the counts of
left-out, exact, zero and subnormal results, the maxima, and the histogram of relative errors.
numpy does that in about twenty passes over memory, three of them gathers and scatters it does
slowly (``take``, ``rel_keys`` + ``bincount``). ``measure_codes`` does it in three loops
(gathers; a branch-free one that vectorizes; maxima) and ``bucket_rel`` builds the histogram,
in a fraction of numpy's time (docs/benchmarks.md). Every number they produce is the same IEEE
operation numpy does on the same operands, an integer count or a maximum, and the sums stay
numpy's, so a scan gives the same result with and without numba; tests hold the two paths
equal. ``range_values`` and ``range_counts`` do the selections of an exact-quantile refinement
pass (``sub_ranges``). ``BITPRISM_NUMBA=0`` or a missing numba uses numpy.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Callable

import numpy as np

from ..partials import REL_BASE, REL_BINS, REL_SHIFT
from ..sub_ranges import LOG_BITS
from .jit import built_once, make_jit, with_kernels

__all__ = ["CodeErrors", "bucket_rel", "measure_codes", "range_counts", "range_values"]


@dataclass(frozen=True)
class CodeErrors:
    """Counts and maxima of one piece (see ``measure_codes``)."""

    bad: int  # left out: NaN error (non-finite input or result)
    exact: int  # compared, error 0
    zero_magnitudes: int  # codes whose magnitude bits are 0
    zero_codes: int  # codes equal to 0
    subnormal: int  # codes with a subnormal magnitude
    max_err: float  # over all elements, left-out ones counting 0
    max_rel: float
    max_ulp: float


def measure_codes(
    codes: np.ndarray,
    x: np.ndarray,
    den: np.ndarray,
    values: np.ndarray,
    inv_ulp: np.ndarray,
    inv_mask: int,
    inv_shift: int,
    magnitude_mask: int,
    subnormal_top: int,
    err: np.ndarray,
    rel: np.ndarray,
    ue: np.ndarray,
    bad: np.ndarray,
) -> CodeErrors:
    """Fill ``err = |values[codes] - x|`` (0 where NaN, flagged in ``bad``), ``rel = err / den``
    and ``ue = inv_ulp[(codes & inv_mask) >> inv_shift] * err``. ``values`` (float32 or
    float64, converted exactly) holds NaN for codes whose error is left out (NaN and Inf),
    ``x`` NaN at non-finite inputs; ``subnormal_top``: the largest subnormal magnitude code
    (0: none)."""
    t = codes.dtype.type
    out = _kernels()[0](
        codes, x, den, values, inv_ulp, t(inv_mask), t(inv_shift), t(magnitude_mask),
        t(subnormal_top), err, rel, ue, bad,
    )
    (n_bad, n_exact, mag0, code0, n_sub), (e_max, r_max, u_max) = out
    return CodeErrors(int(n_bad), int(n_exact), int(mag0), int(code0), int(n_sub),
                      float(e_max), float(r_max), float(u_max))


def bucket_rel(rel: np.ndarray, hist: np.ndarray) -> int:
    """Add each relative error's bucket (``partials.rel_keys``) to ``hist``; return how many
    are exactly 1.0. ``rel``: non-negative float64, no NaN."""
    return int(_kernels()[1](rel.view(np.uint64), hist))


def range_values(rel: np.ndarray, lo: int, hi: int) -> np.ndarray:
    """The values of ``rel`` (non-negative float64) whose bit pattern lies in ``[lo, hi)``, in
    order (a new array): what a refinement pass of an exact-quantile scan collects."""
    bits = rel.view(np.uint64)
    lo_, hi_ = np.uint64(lo), np.uint64(hi)
    k = _kernels()
    out = np.empty(int(k[2](bits, lo_, hi_)), np.uint64)
    k[3](bits, lo_, hi_, out)
    return out.view(np.float64)


def range_counts(rel: np.ndarray, lo: int, hi: int, shift: int, bins: int, log_bins: int,
                 hist: np.ndarray) -> None:
    """Add to ``hist`` the counts of the patterns of ``rel`` in ``[lo, hi)``, laid out as
    ``sub_ranges.layout`` says: over ``bins`` sub-ranges of ``2^shift`` patterns, then
    ``log_bins`` by distance from the top and ``log_bins`` by distance from the bottom
    (``sub_ranges.log_keys``)."""
    _kernels()[4](rel.view(np.uint64), np.uint64(lo), np.uint64(hi), np.uint64(shift), bins, log_bins, hist)


# the compiled kernels that ``measure`` calls, bound by ``with_kernels`` where they are made
_gather: Callable[..., Any]
_settle: Callable[..., Any]
_maxima: Callable[..., Any]


@built_once
def _kernels() -> tuple[Callable[..., Any], ...]:
    jit = make_jit()
    fast_jit = make_jit(fastmath={"nnan"})  # maxima of NaN-free arrays: lets them vectorize
    first = np.uint64(REL_BASE << REL_SHIFT)  # patterns below the first edge go to bucket 0
    shift = np.uint64(REL_SHIFT)
    base = np.uint64(REL_BASE)
    last = np.uint64(REL_BINS - 1)
    one = np.uint64(0x3FF0000000000000)  # IEEE 754 binary64 pattern of 1.0

    @jit
    def gather(codes, x, values, inv_ulp, imask, ishift, mmask, sub_top, err, ue):  # type: ignore[no-untyped-def]
        n_mag0 = 0
        n_code0 = 0
        n_sub = 0
        for i in range(codes.size):
            c = codes[i]
            err[i] = abs(np.float64(values[c]) - x[i])
            ue[i] = inv_ulp[(c & imask) >> ishift]
            cm = c & mmask
            n_mag0 += cm == 0
            n_code0 += c == 0
            n_sub += (cm != 0) & (cm <= sub_top)
        return n_mag0, n_code0, n_sub

    @jit
    def settle(err, den, rel, ue, bad):  # type: ignore[no-untyped-def]
        # NaN flags in a loop of their own: together with the rest it compiles to branches
        # (three times slower on data with many left-out elements)
        n_bad = 0
        for i in range(err.size):
            b = err[i] != err[i]
            bad[i] = b
            n_bad += b
        n_zero = 0
        for i in range(err.size):
            e = np.fmax(err[i], 0.0)  # NaN -> 0
            n_zero += e == 0.0
            err[i] = e
            rel[i] = e / den[i]
            ue[i] = ue[i] * e
        return n_bad, n_zero - n_bad

    @fast_jit
    def maxima(err, rel, ue):  # type: ignore[no-untyped-def]
        e_max = 0.0
        r_max = 0.0
        u_max = 0.0
        for i in range(err.size):
            e_max = max(e_max, err[i])
            r_max = max(r_max, rel[i])
            u_max = max(u_max, ue[i])
        return e_max, r_max, u_max

    def measure(codes, x, den, values, inv_ulp, imask, ishift, mmask, sub_top, err, rel, ue, bad):  # type: ignore[no-untyped-def]
        n_mag0, n_code0, n_sub = _gather(codes, x, values, inv_ulp, imask, ishift, mmask, sub_top, err, ue)
        n_bad, n_exact = _settle(err, den, rel, ue, bad)
        return (n_bad, n_exact, n_mag0, n_code0, n_sub), _maxima(err, rel, ue)

    measure = jit(with_kernels(measure, _gather=gather, _settle=settle, _maxima=maxima))

    @jit
    def buckets(bits, hist):  # type: ignore[no-untyped-def]
        ones = 0
        for i in range(bits.size):
            b = bits[i]
            ones += b == one
            k = (max(b, first) >> shift) - base
            hist[min(k, last)] += 1
        return ones

    @jit
    def in_range(bits, lo, hi):  # type: ignore[no-untyped-def]
        n = 0
        width = hi - lo
        for i in range(bits.size):
            n += (bits[i] - lo) < width  # unsigned: below lo wraps past the width
        return n

    @jit
    def take_range(bits, lo, hi, out):  # type: ignore[no-untyped-def]
        m = 0
        for i in range(bits.size):
            b = bits[i]
            if b >= lo and b < hi:
                out[m] = b
                m += 1

    log_bits = LOG_BITS

    @jit
    def count_range(bits, lo, hi, shift, bins, n_log, hist):  # type: ignore[no-untyped-def]
        top = hi - np.uint64(1)
        # bit lengths from the exponent field of the distance as a float64 (exact below 2^53;
        # 0 gives a field of 0): numba's math.frexp is a call, ten times slower
        f = np.empty(1, np.float64)
        fb = f.view(np.uint64)
        for i in range(bits.size):
            b = bits[i]
            if b >= lo and b < hi:
                hist[(b - lo) >> shift] += 1
                if n_log:
                    for d, base in ((top - b, bins), (b - lo, bins + n_log)):
                        f[0] = np.float64(d)
                        e = np.int64(fb[0] >> np.uint64(52)) - 1022
                        s = max(0, e - (log_bits + 1))
                        hist[base + (s << log_bits) + np.int64(d >> np.uint64(s))] += 1

    return measure, buckets, in_range, take_range, count_range
