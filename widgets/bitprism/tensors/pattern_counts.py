"""One pass of pattern counts for counts-only scans: compiled with numba when it is installed.

A counts-only scan (``scan(..., quantiles=False)``) needs, per block of data, how many IEEE bit
patterns lie at or above each of a few magnitude thresholds ("cuts": every class of a monotone
cast is a range of ``|x|``), how many elements are exactly +Inf, the extreme finite values, and
optionally the histogram of exponent fields. numpy needs one pass over memory per cut. The
compiled kernel reads each cache-sized chunk from memory once, settles the cuts that lie
outside the chunk's range from a few reductions, and counts the others with vector
compares. ``numba`` is optional (the ``fast`` extra); without it, and with
``BITPRISM_NUMBA=0`` in the environment, the same numbers come from numpy. Tests hold the two
equal on every kind of pattern.
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from functools import lru_cache
from typing import Any, Callable

import numpy as np

__all__ = ["BlockCounts", "block_counts", "compiled_available", "first_positions"]

CHUNK = 2048  # elements per cache-resident chunk of the compiled kernel
_EXT_EMPTY_MAX = 0  # sentinel of an empty "max" slot (every real pattern in it is >= 1)


@dataclass(frozen=True)
class BlockCounts:
    """Counts of one block of bit patterns (uint32 for float32 data, uint64 for float64).

    ``at_least[k]``: elements whose magnitude pattern (sign bit cleared) is >= ``cuts[k]``
    (NaN patterns are the largest, so they count at every cut up to theirs).
    ``pos_inf``: elements equal to +Inf. ``pos_max``/``pos_min``: largest and smallest pattern
    among positive nonzero finite values, ``neg_max``/``neg_min`` the same among negative ones
    (patterns with the sign bit set; the largest is the most negative value); ``None`` when
    the block has none. ``exponents``: elements per exponent field value (``|pattern| >> t``),
    or ``None`` when not asked for.
    """

    at_least: np.ndarray
    pos_inf: int
    pos_max: int | None
    pos_min: int | None
    neg_max: int | None
    neg_min: int | None
    exponents: np.ndarray | None


def compiled_available() -> bool:
    """True when the numba kernel is in use (numba importable, not disabled by
    ``BITPRISM_NUMBA=0``)."""
    return _kernels() is not None


@lru_cache(maxsize=1)
def _kernels() -> tuple[Callable[..., Any], Callable[..., Any]] | None:
    if os.environ.get("BITPRISM_NUMBA", "1").strip().lower() in ("0", "false", "no", "off"):
        return None
    try:
        import numba  # noqa: F401
    except ImportError:
        return None
    return _compile()


def _constants(dtype: np.dtype, t: int) -> np.ndarray:
    """[magnitude mask, +Inf, sign bit, Inf - 1, 1, all ones, 0, exponent shift] in the pattern
    dtype, so the kernel never mixes signed literals with unsigned patterns."""
    width = dtype.itemsize * 8
    e_bits = width - 1 - t
    inf = ((1 << e_bits) - 1) << t
    return np.array(
        [(1 << (width - 1)) - 1, inf, 1 << (width - 1), inf - 1, 1, (1 << width) - 1, 0, t],
        dtype,
    )


def block_counts(
    bits: np.ndarray, t: int, cuts: np.ndarray, exponents: bool, *, compiled: bool = True
) -> BlockCounts:
    """Counts of a 1-D C-contiguous block of uint32/uint64 patterns whose format has ``t``
    significand bits; ``cuts``: ascending magnitude patterns (same dtype, at least 1).
    ``compiled=False`` uses numpy even when the kernel is available."""
    dtype = bits.dtype
    cuts = np.ascontiguousarray(cuts, dtype)
    k = _kernels() if compiled else None
    if k is not None and bits.size:
        const = _constants(dtype, t)
        out = np.zeros(cuts.size + 1, np.int64)
        ext = np.array([0, const[5], 0, const[5]], dtype)
        n_exp = int(const[1] >> dtype.type(t)) + 1
        exps = np.zeros((4, n_exp) if exponents else (4, 1), np.int64)
        k_one = _index_of(cuts, 1)
        k_inf = _index_of(cuts, int(const[1]))
        k[0](bits, const, cuts, k_one, k_inf, bool(exponents), out, ext, exps)
        return _finish(out[:-1], int(out[-1]), ext, exps.sum(axis=0) if exponents else None)
    return _numpy_counts(bits, t, cuts, exponents)


def _index_of(cuts: np.ndarray, value: int) -> int:
    hit = np.flatnonzero(cuts == cuts.dtype.type(value))
    return int(hit[0]) if hit.size else -1


def _finish(at_least: np.ndarray, pos_inf: int, ext: np.ndarray, exps: np.ndarray | None) -> BlockCounts:
    empty_min = int(np.iinfo(ext.dtype).max)
    p_max, p_min, n_max, n_min = (int(v) for v in ext)
    return BlockCounts(
        at_least,
        pos_inf,
        p_max if p_max != _EXT_EMPTY_MAX else None,
        p_min if p_min != empty_min else None,
        n_max if n_max != _EXT_EMPTY_MAX else None,
        n_min if n_min != empty_min else None,
        exps,
    )


def _numpy_counts(bits: np.ndarray, t: int, cuts: np.ndarray, exponents: bool) -> BlockCounts:
    """The same numbers with plain numpy (one pass per cut): the reference and the fallback."""
    const = _constants(bits.dtype, t)
    mask, inf, sign, inf_m1, one = (const[i] for i in range(5))
    a = np.bitwise_and(bits, mask)
    at_least = np.array([int(np.count_nonzero(a >= c)) for c in cuts], np.int64)
    pos_inf = int(np.count_nonzero(bits == inf))
    pos = bits[(bits - one) < inf_m1]  # positive, nonzero, finite (0 wraps to the top)
    neg = bits[(bits - (sign + one)) < inf_m1]
    exps = None
    if exponents:
        n_exp = int(inf >> bits.dtype.type(t)) + 1
        exps = np.bincount((a >> bits.dtype.type(t)).astype(np.intp), minlength=n_exp).astype(np.int64)
    return BlockCounts(
        at_least,
        pos_inf,
        int(pos.max()) if pos.size else None,
        int(pos.min()) if pos.size else None,
        int(neg.max()) if neg.size else None,
        int(neg.min()) if neg.size else None,
        exps,
    )


def first_positions(
    bits: np.ndarray, lo: int, hi: int, magnitude: bool, need: int, *, compiled: bool = True
) -> np.ndarray:
    """Positions (ascending, at most ``need``) whose pattern — or magnitude pattern when
    ``magnitude`` — lies in ``[lo, hi)``. Stops early with the compiled kernel."""
    if need <= 0 or hi <= lo:
        return np.zeros(0, np.int64)
    dtype = bits.dtype
    k = _kernels() if compiled else None
    if k is not None:
        const = _constants(dtype, 0)
        out = np.empty(need, np.int64)
        m = k[1](bits, const[0] if magnitude else const[5], dtype.type(lo), dtype.type(hi - lo), out)
        return out[:m].copy()
    key = np.bitwise_and(bits, dtype.type((1 << (dtype.itemsize * 8 - 1)) - 1)) if magnitude else bits
    return np.flatnonzero((key >= dtype.type(lo)) & (key < dtype.type(hi)))[:need].astype(np.int64)


def _probe(x: int) -> int:
    """Decorated (never called) to learn whether numba's on-disk cache can be used."""
    return x


def _compile() -> tuple[Callable[..., Any], Callable[..., Any]]:
    """Build the numba kernels (cached on disk by numba where it can write)."""
    from numba import njit

    try:  # numba caches compiled code beside the module, or in a per-user folder
        jit = njit(nogil=True, cache=True, boundscheck=False)
        jit(_probe)
    except RuntimeError:  # nowhere writable: compile in every process instead
        jit = njit(nogil=True, cache=False, boundscheck=False)

    @jit
    def count_chunks(bits, const, cuts, k_one, k_inf, want_exps, out, ext, exps):  # type: ignore[no-untyped-def]
        mask = const[0]
        inf = const[1]
        sign = const[2]
        inf_m1 = const[3]
        one = const[4]
        ones = const[5]
        zero = const[6]
        shift = const[7]
        neg_lo = sign + one
        n = bits.size
        kc = cuts.size
        p_max = ext[0]
        p_min = ext[1]
        n_max = ext[2]
        n_min = ext[3]
        live = np.empty(kc + 4, np.int64)
        local = np.zeros(kc, np.int64)
        state = np.zeros(kc, np.int8)
        counts = np.zeros(kc, np.int64)
        for s in range(0, n, CHUNK):
            e = min(n, s + CHUNK)
            blk = bits[s:e]
            m = e - s
            # reductions: the chunk's magnitude range and the extreme finite values per sign
            a_min = ones
            a_max = zero
            cp_max = zero
            cp_min = ones
            cn_max = zero
            cn_min = ones
            for i in range(m):
                v = blk[i]
                a = v & mask
                a_min = min(a_min, a)
                a_max = max(a_max, a)
                isp = (v - one) < inf_m1
                isn = (v - neg_lo) < inf_m1
                cp_max = max(cp_max, v if isp else zero)
                cp_min = min(cp_min, v if isp else ones)
                cn_max = max(cn_max, v if isn else zero)
                cn_min = min(cn_min, v if isn else ones)
            p_max = max(p_max, cp_max)
            p_min = min(p_min, cp_min)
            n_max = max(n_max, cn_max)
            n_min = min(n_min, cn_min)
            # finite nonzero magnitudes of the chunk lie in [f_lo, f_hi] (f_lo > f_hi: none)
            f_hi = max(cp_max, cn_max & mask)
            f_lo = min(cp_min, cn_min & mask)
            # cuts settled without a compare: all (<= a_min), none (> a_max), as many as the
            # cut 1 (<= f_lo: no magnitude in between) or as the cut +Inf (> f_hi); the
            # others are compared, four at a time
            nl = 0
            for k in range(kc):
                c = cuts[k]
                local[k] = 0
                if c <= a_min:
                    local[k] = m
                    state[k] = 0
                elif c > a_max:
                    state[k] = 0
                elif k == k_one or k == k_inf or c > inf:
                    state[k] = 0
                    live[nl] = k
                    nl += 1
                elif c <= f_lo and k_one >= 0:
                    state[k] = 1
                elif c > f_hi and k_inf >= 0:
                    state[k] = 2
                else:
                    state[k] = 0
                    live[nl] = k
                    nl += 1
            if nl:
                while nl % 4:
                    live[nl] = live[nl - 1]
                    nl += 1
                for g in range(0, nl, 4):
                    k0 = live[g]
                    k1 = live[g + 1]
                    k2 = live[g + 2]
                    k3 = live[g + 3]
                    c0 = cuts[k0]
                    c1 = cuts[k1]
                    c2 = cuts[k2]
                    c3 = cuts[k3]
                    n0 = np.int32(0)
                    n1 = np.int32(0)
                    n2 = np.int32(0)
                    n3 = np.int32(0)
                    for i in range(m):
                        a = blk[i] & mask
                        n0 += np.int32(a >= c0)
                        n1 += np.int32(a >= c1)
                        n2 += np.int32(a >= c2)
                        n3 += np.int32(a >= c3)
                    # a padded group repeats its last cut (assignments, not sums)
                    local[k0] = n0
                    local[k1] = n1
                    local[k2] = n2
                    local[k3] = n3
            for k in range(kc):
                if state[k] == 1:
                    local[k] = local[k_one]
                elif state[k] == 2:
                    local[k] = local[k_inf]
                counts[k] += local[k]
            if a_max >= inf:
                c = np.int32(0)
                for i in range(m):
                    c += np.int32(blk[i] == inf)
                out[kc] += c
            if want_exps:
                i = 0
                while i + 4 <= m:
                    exps[0, (blk[i] & mask) >> shift] += 1
                    exps[1, (blk[i + 1] & mask) >> shift] += 1
                    exps[2, (blk[i + 2] & mask) >> shift] += 1
                    exps[3, (blk[i + 3] & mask) >> shift] += 1
                    i += 4
                while i < m:
                    exps[0, (blk[i] & mask) >> shift] += 1
                    i += 1
        for k in range(kc):
            out[k] += counts[k]
        ext[0] = p_max
        ext[1] = p_min
        ext[2] = n_max
        ext[3] = n_min

    @jit
    def first_in_range(bits, key_mask, lo, width, out):  # type: ignore[no-untyped-def]
        need = out.size
        found = 0
        for i in range(bits.size):
            if ((bits[i] & key_mask) - lo) < width:
                out[found] = i
                found += 1
                if found == need:
                    break
        return found

    return count_chunks, first_in_range
