"""Two compiled loops (numba) of the general scan path, for formats of up to 16 bits.

Once a piece of data is cast to codes, the scan measures the cast with numpy passes: most are
vector arithmetic that numpy does well (subtract, divide, maxima, sums), but three are gathers
and scatters it does slowly: the value and ``1/ulp`` of each code (``take`` with an index
array), and the histogram of relative errors (``rel_keys`` then ``bincount``). Measured on
64K float32 elements cast to float8_e4m3fn, one core with AVX2: the lookups 700 -> 160 us with
the zero and subnormal code counts, the histogram 650 -> 180 us with the count of relative
errors equal to 1. Every number they produce is an integer count or a copied table entry, so a
scan gives the same result with and without numba; tests hold the two paths equal.
``BITPRISM_NUMBA=0`` or a missing numba uses numpy.
"""

from __future__ import annotations

from functools import lru_cache
from typing import Any, Callable

import numpy as np

from .partials import REL_BASE, REL_BINS, REL_SHIFT
from .pattern_counts import compiled_available, make_jit

__all__ = ["available", "bucket_rel", "lookup_codes"]


def available() -> bool:
    """True when the compiled loops are used (the same switch as the counting kernel)."""
    return compiled_available()


def lookup_codes(
    codes: np.ndarray,
    values: np.ndarray,
    inv_ulp: np.ndarray,
    magnitude_mask: int,
    subnormal_top: int,
    q: np.ndarray,
    u: np.ndarray,
) -> tuple[int, int, int]:
    """Fill ``q = values[codes]`` and ``u = inv_ulp[codes]``; return how many codes have
    magnitude 0, how many are exactly 0, and how many have a subnormal magnitude (in
    ``[1, subnormal_top]``; ``subnormal_top`` 0: none)."""
    return _kernels()[0](
        codes, values, inv_ulp, codes.dtype.type(magnitude_mask), codes.dtype.type(subnormal_top), q, u
    )


def bucket_rel(rel: np.ndarray, hist: np.ndarray) -> int:
    """Add each relative error's bucket (``partials.rel_keys``) to ``hist``; return how many
    are exactly 1.0. ``rel``: non-negative float64, no NaN."""
    return int(_kernels()[1](rel.view(np.uint64), hist))


@lru_cache(maxsize=1)
def _kernels() -> tuple[Callable[..., Any], Callable[..., Any]]:
    jit = make_jit()
    first = np.uint64(REL_BASE << REL_SHIFT)  # patterns below the first edge go to bucket 0
    shift = np.uint64(REL_SHIFT)
    base = np.uint64(REL_BASE)
    last = np.uint64(REL_BINS - 1)
    one = np.uint64(0x3FF0000000000000)  # IEEE 754 binary64 pattern of 1.0

    @jit
    def lookup(codes, values, inv_ulp, mmask, sub_top, q, u):  # type: ignore[no-untyped-def]
        n_mag0 = 0
        n_code0 = 0
        n_sub = 0
        for i in range(codes.size):
            c = codes[i]
            q[i] = values[c]
            u[i] = inv_ulp[c]
            cm = c & mmask
            n_mag0 += cm == 0
            n_code0 += c == 0
            n_sub += (cm != 0) & (cm <= sub_top)
        return n_mag0, n_code0, n_sub

    @jit
    def buckets(bits, hist):  # type: ignore[no-untyped-def]
        ones = 0
        for i in range(bits.size):
            b = bits[i]
            ones += b == one
            k = (max(b, first) >> shift) - base
            hist[min(k, last)] += 1
        return ones

    return lookup, buckets
