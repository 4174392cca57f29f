"""One pass of pattern counts for counts-only scans: compiled with numba when it is installed.

A counts-only scan (``scan(..., quantiles=False)``) needs, per block of data, how many IEEE bit
patterns lie at or above each of a few magnitude thresholds ("cuts": every class of a monotone
cast is a range of ``|x|``), whether +Inf and -Inf occur, the extreme finite values, and
optionally the histogram of exponent fields. numpy needs one pass over memory per cut
(``_numpy_counts``, the twin every test holds the kernel to). The compiled kernel reads each
cache-sized chunk of ``CHUNK`` elements from memory once and then works on it in cache:

* a first loop (``summary``) takes the chunk's extreme finite patterns and writes each
  element's *key*: with s = ``KEY_SHIFT``, ``key(a) = floor(a / 2^s) + ceil(a / 2^s)`` of the
  magnitude ``a`` fits the signed integer of half the pattern's width, is monotone, and steps
  exactly at the multiples of 2^s and one above them. A cut ``c`` with ``c mod 2^s`` in {0, 1}
  (zero, Inf, NaN, powers of two, the thresholds of formats with few significand bits, "just
  above a tie" cuts) is then counted on keys, twice the lanes per vector compare;
* cuts outside the chunk's finite range are *settled* from its counts of nonzero, Inf and NaN
  elements, without a compare;
* the first two cuts off the key steps (float16's and bfloat16's midpoints, say) that the
  previous chunk had to count are counted inside the first loop (*slots*), where the reads from
  memory hide the compares; any others get a loop of their own on the patterns;
* every compare is ``x > c - 1`` on signed integers (magnitudes and keys fit them), one vector
  compare on AVX2, which has neither an unsigned nor a ">=" one; every intermediate is cast back
  to its width, since numba widens integer arithmetic to 64 bits, halving the vector lanes.

The kernel keeps each chunk's counts too, so that ``range_positions`` finds the first elements
of each class by reading only the chunks that hold some. ``numba`` is optional (the ``fast``
extra); without it, with ``BITPRISM_NUMBA=0`` or ``ScanTuning(compiled=False)``, the same
numbers come from numpy. What each device buys is measured in docs/benchmarks.md.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Callable

import numpy as np

from .jit import available, built_once, make_jit, with_kernels

__all__ = ["BlockCounts", "block_counts", "first_positions", "range_positions"]

CHUNK = 4096  # elements per cache-resident chunk of the compiled kernel (counters fit int16)
# key(a) = floor(a / 2^s) + ceil(a / 2^s) of a magnitude pattern fits the signed integer of
# half the pattern's width with these s (int16 for uint32 patterns, int32 for uint64)
KEY_SHIFT = {np.dtype(np.uint32): 17, np.dtype(np.uint64): 33}


@dataclass(frozen=True)
class BlockCounts:
    """Counts of one block of bit patterns (uint32 for float32 data, uint64 for float64).

    ``at_least[k]``: elements whose magnitude pattern (sign bit cleared) is >= ``cuts[k]``
    (NaN patterns are the largest, so they count at every cut up to theirs).
    ``has_pos_inf`` / ``has_neg_inf``: whether +Inf / -Inf occur (how many Inf of either sign
    is ``at_least`` of the cut +Inf less that of the cut just above). ``pos_max``: the largest
    pattern among positive nonzero finite values, ``neg_max`` among negative ones (patterns
    with the sign bit set; the largest is the most negative value); ``min_magnitude``: the
    smallest magnitude pattern among nonzero finite values of either sign (the smallest value
    of a block with no negative values and no zero, or minus the largest of one with no
    positive values); each ``None`` when the block has none. ``exponents``: elements per
    exponent field value (``|pattern| >> t``), or ``None`` when not asked for.
    ``chunk_at_least[j, k]``: the part of ``at_least[k]`` in elements ``j * CHUNK`` to
    ``(j + 1) * CHUNK`` (compiled kernel only, else ``None``), so that a search for
    positions visits only the chunks that hold some.
    """

    at_least: np.ndarray
    has_pos_inf: bool
    has_neg_inf: bool
    pos_max: int | None
    neg_max: int | None
    min_magnitude: int | None
    exponents: np.ndarray | None
    chunk_at_least: np.ndarray | None = None


def _kernels() -> dict[np.dtype, tuple[Callable[..., Any], Callable[..., Any], Callable[..., Any]]] | None:
    """The compiled kernels, or None when numba is not in use."""
    return _compile() if available() else None


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
    if cuts.size and (cuts[0] < 1 or np.any(cuts[1:] < cuts[:-1])):
        raise ValueError("cuts must be ascending magnitude patterns, each at least 1")
    kernels = _kernels() if compiled else None
    if kernels is None or not bits.size:
        return _numpy_counts(bits, t, cuts, exponents)
    T = dtype.type
    width = dtype.itemsize * 8
    sign = 1 << (width - 1)
    inf = ((1 << (width - 1 - t)) - 1) << t
    s = KEY_SHIFT[dtype]
    # per cut: whether it sits on a key step, and then the bound b of "key(a) - 1 > b"
    on_key = ((cuts & T((1 << s) - 1)) <= 1) & (cuts < T(sign))
    high, rem = (cuts >> T(s)).astype(np.int64), (cuts & T(1)).astype(np.int64)
    key_below = np.where(on_key, 2 * high + rem - 2, 0).astype(np.int16 if width == 32 else np.int32)
    at_least = np.zeros(cuts.size, np.int64)
    per_chunk = np.empty((-(-bits.size // CHUNK), cuts.size), np.int32)
    extremes = np.zeros(3, dtype)  # largest positive, largest negative, smallest magnitude
    has_inf = np.zeros(2, np.bool_)  # +Inf, -Inf
    exps = np.zeros((inf >> t) + 1 if exponents else 0, np.int64)
    kernels[dtype][0](bits, T(sign - 1), T(inf), T(sign), T(t), cuts, on_key, key_below,
                      at_least, per_chunk, extremes, has_inf, exps)
    pos_max, neg_max, min_mag = (int(v) for v in extremes)
    return BlockCounts(
        at_least,
        bool(has_inf[0]),
        bool(has_inf[1]),
        pos_max or None,  # 0: no positive finite nonzero value
        neg_max or None,
        min_mag if min_mag < inf else None,  # Inf: no finite nonzero value
        exps if exponents else None,
        per_chunk,
    )


def _numpy_counts(bits: np.ndarray, t: int, cuts: np.ndarray, exponents: bool) -> BlockCounts:
    """The same numbers with plain numpy (one pass per cut): the reference and the fallback."""
    const = _constants(bits.dtype, t)
    mask, inf, sign, inf_m1, one = (const[i] for i in range(5))
    a = np.bitwise_and(bits, mask)
    at_least = np.array([int(np.count_nonzero(a >= c)) for c in cuts], np.int64)
    pos = bits[(bits - one) < inf_m1]  # positive, nonzero, finite (0 wraps to the top)
    neg = bits[(bits - (sign + one)) < inf_m1]
    mags = a[(a - one) < inf_m1]
    exps = None
    if exponents:
        n_exp = int(inf >> bits.dtype.type(t)) + 1
        exps = np.bincount((a >> bits.dtype.type(t)).astype(np.intp), minlength=n_exp).astype(np.int64)
    return BlockCounts(
        at_least,
        bool(np.any(bits == inf)),
        bool(np.any(bits == (inf | sign))),
        int(pos.max()) if pos.size else None,
        int(neg.max()) if neg.size else None,
        int(mags.min()) if mags.size else None,
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
        m = k[dtype][1](bits, const[0] if magnitude else const[5], dtype.type(lo), dtype.type(hi - lo), out)
        return out[:m].copy()
    key = np.bitwise_and(bits, dtype.type((1 << (dtype.itemsize * 8 - 1)) - 1)) if magnitude else bits
    return np.flatnonzero((key >= dtype.type(lo)) & (key < dtype.type(hi)))[:need].astype(np.int64)


def range_positions(
    bits: np.ndarray,
    ranges: list[tuple[int, int]],
    needs: list[int],
    chunk_counts: np.ndarray | None,
    *,
    columns: list[tuple[int, int]] | None = None,
    compiled: bool = True,
) -> list[np.ndarray]:
    """For each magnitude range ``[lo, hi)`` of ``ranges``, its first positions (ascending, at
    most ``needs[r]``). ``chunk_counts[r, j]``: how many elements of range ``r`` lie in the
    ``CHUNK``-element chunk ``j``; or, with ``columns``, ``chunk_counts`` is a block's
    ``BlockCounts.chunk_at_least`` and that count is ``chunk_counts[j, lo] - chunk_counts[j, hi]``
    for ``(lo, hi) = columns[r]`` (``hi = -1``: nothing to subtract). One compiled call reads
    only the chunks holding some, so a few matches at the end of a large block cost no pass
    over it. Without the kernel or the counts, ``first_positions`` range by range."""
    k = _kernels() if compiled else None
    if k is None or chunk_counts is None or not ranges:
        return [
            first_positions(bits, lo, hi, True, need, compiled=compiled)
            for (lo, hi), need in zip(ranges, needs)
        ]
    n_chunks = -(-bits.size // CHUNK)
    if columns is None:
        if chunk_counts.shape != (len(ranges), n_chunks):
            raise ValueError("chunk_counts must hold one row per range and one column per chunk")
        per = np.ascontiguousarray(chunk_counts.T, np.int32)
        lo_col = np.arange(len(ranges), dtype=np.int64)
        hi_col = np.full(len(ranges), -1, np.int64)
    else:
        cols = np.array(columns, np.int64).reshape(-1, 2)
        if (
            chunk_counts.ndim != 2
            or chunk_counts.shape[0] != n_chunks
            or cols.shape[0] != len(ranges)
            or cols.size and (cols.min() < -1 or cols.max() >= chunk_counts.shape[1] or cols[:, 0].min() < 0)
        ):
            raise ValueError("chunk_counts must hold one row per chunk and the columns must be in it")
        per = np.ascontiguousarray(chunk_counts, np.int32)
        lo_col, hi_col = np.ascontiguousarray(cols[:, 0]), np.ascontiguousarray(cols[:, 1])
    dtype = bits.dtype
    lows = np.array([lo for lo, _ in ranges], dtype)
    widths = np.array([max(hi - lo, 0) for lo, hi in ranges], dtype)
    want = np.array([max(need, 0) for need in needs], np.int64)
    out = np.empty((len(ranges), max(int(want.max()), 1)), np.int64)
    found = np.zeros(len(ranges), np.int64)
    k[dtype][2](bits, _constants(dtype, 0)[0], lows, widths, want, per, lo_col, hi_col, out, found)
    return [out[r, : found[r]].copy() for r in range(len(ranges))]


# the compiled loops that ``count_chunks`` calls, bound by ``with_kernels`` where it is made
_summary: Callable[..., Any]
_count_keys: Callable[..., Any]
_count_above: Callable[..., Any]


@built_once
def _compile() -> dict[np.dtype, tuple[Callable[..., Any], Callable[..., Any], Callable[..., Any]]]:
    """Build the numba kernels, one set per pattern dtype."""
    jit = make_jit()
    return {np.dtype(t): (_count_kernel(t, jit),) + _position_kernels(t, jit) for t in (np.uint32, np.uint64)}


def _count_kernel(T: Any, jit: Any) -> Callable[..., Any]:
    """The chunked counts for patterns of unsigned numpy type ``T`` (see the module
    docstring)."""
    S = np.int32 if T == np.uint32 else np.int64  # signed pattern
    K = np.int16 if T == np.uint32 else np.int32  # key
    shift = S(KEY_SHIFT[np.dtype(T)])

    @jit
    def summary(blk, keys, mask, inf, sign, below0, below1):  # type: ignore[no-untyped-def]
        """Largest positive and negative finite nonzero pattern (0: none), smallest finite
        nonzero magnitude (Inf: none), the magnitudes above ``below0`` and ``below1`` (the two
        slot cuts); writes each key less one, (a >> s) + ((a - 1) >> s), -1 for zero."""
        zero = T(0)
        minus_inf = T(inf | sign)
        p_max = zero
        n_max = zero
        m_min = inf
        n0 = np.int32(0)
        n1 = np.int32(0)
        for i in range(blk.size):
            v = blk[i]
            a = T(v & mask)
            p_max = max(p_max, v if zero < v < inf else zero)
            n_max = max(n_max, v if sign < v < minus_inf else zero)
            m_min = min(m_min, a if zero < a < inf else inf)
            n0 = np.int32(n0 + np.int32(S(a) > below0))
            n1 = np.int32(n1 + np.int32(S(a) > below1))
            keys[i] = K(S(S(a) >> shift) + S(S(T(a - T(1))) >> shift))
        return p_max, n_max, m_min, n0, n1

    @jit
    def count_keys(keys, below):  # type: ignore[no-untyped-def]
        n = K(0)  # a chunk's count fits
        for i in range(keys.size):
            n = K(n + K(keys[i] > below))
        return n

    @jit
    def count_above(blk, mask, below):  # type: ignore[no-untyped-def]
        n = np.int32(0)
        for i in range(blk.size):
            n = np.int32(n + np.int32(S(S(blk[i]) & mask) > below))
        return n

    def count_chunks(  # type: ignore[no-untyped-def]
        bits, mask, inf, sign, t, cuts, on_key, key_below, at_least, per_chunk, extremes, has_inf, exps
    ):
        key_nonzero = K(-1)  # the key bounds of the cuts 1, Inf and Inf + 1
        key_big = K(S(S(inf) >> shift) * S(2) - S(2))
        key_nan = K(key_big + K(1))
        nan_cut = T(inf + T(1))
        minus_inf = T(inf | sign)
        s_mask = S(mask)
        keys = np.empty(CHUNK, K)
        slot0 = -1  # the cuts counted in the first loop: the first two counted on the
        slot1 = -1  # patterns in the previous chunk
        extremes[2] = inf
        for s in range(0, bits.size, CHUNK):
            blk = bits[s : s + CHUNK]  # a slice: blk[i] compiles to a plain load (no gather)
            key = keys[: blk.size]
            below0 = S(T(cuts[slot0] - T(1))) if slot0 >= 0 else s_mask  # > s_mask: never
            below1 = S(T(cuts[slot1] - T(1))) if slot1 >= 0 else s_mask
            p_max, n_max, m_min, n0, n1 = _summary(blk, key, mask, inf, sign, below0, below1)
            extremes[0] = max(extremes[0], p_max)
            extremes[1] = max(extremes[1], n_max)
            extremes[2] = min(extremes[2], m_min)
            nonzero = _count_keys(key, key_nonzero)
            big = _count_keys(key, key_big)  # Inf or NaN
            nan = _count_keys(key, key_nan)
            if big > nan and not (has_inf[0] and has_inf[1]):  # Inf here, a sign unseen
                for i in range(blk.size):
                    has_inf[0] |= blk[i] == inf
                    has_inf[1] |= blk[i] == minus_inf
            # a cut at or below the smallest finite magnitude counts as many as the cut 1,
            # one above the largest as many as the cut Inf; the others are counted
            f_max = max(p_max, T(n_max & mask))
            j = s // CHUNK
            next0 = -1
            next1 = -1
            for k in range(cuts.size):
                c = cuts[k]
                if c <= m_min:  # m_min is Inf when the chunk has no finite nonzero value
                    got = nonzero
                elif c <= inf and c > f_max:
                    got = big
                elif c == nan_cut:
                    got = nan
                elif c > mask:
                    got = K(0)
                elif on_key[k]:
                    got = _count_keys(key, key_below[k])
                else:
                    if next0 < 0:
                        next0 = k
                    elif next1 < 0:
                        next1 = k
                    if k == slot0:
                        got = n0
                    elif k == slot1:
                        got = n1
                    else:
                        got = _count_above(blk, s_mask, S(T(c - T(1))))
                at_least[k] += got
                per_chunk[j, k] = got
            slot0 = next0
            slot1 = next1
            if exps.size:
                for i in range(blk.size):
                    exps[T(blk[i] & mask) >> t] += 1

    return jit(with_kernels(  # type: ignore[no-any-return]
        count_chunks, _summary=summary, _count_keys=count_keys, _count_above=count_above,
    ))


def _position_kernels(T: Any, jit: Any) -> tuple[Callable[..., Any], Callable[..., Any]]:
    """The searches for the first positions in a range, for patterns of unsigned type ``T``."""

    @jit
    def first_in_range(bits, key_mask, lo, width, out):  # type: ignore[no-untyped-def]
        need = out.size
        found = 0
        for i in range(bits.size):
            if T(T(bits[i] & key_mask) - lo) < width:
                out[found] = i
                found += 1
                if found == need:
                    break
        return found

    @jit
    def first_in_ranges(  # type: ignore[no-untyped-def]
        bits, key_mask, lows, widths, need, per, lo_col, hi_col, out, found
    ):
        """Range by range, chunk by chunk where the counts say there are matches
        (``per[j, lo_col[r]] - per[j, hi_col[r]]``, the second term 0 when ``hi_col[r] < 0``):
        the first ``need[r]`` positions of ``bits & key_mask`` in ``[lows[r], lows[r] + widths[r])``."""
        n = bits.size
        for r in range(lows.size):
            got = 0
            lo = lows[r]
            width = widths[r]
            want = need[r]
            c_lo = lo_col[r]
            c_hi = hi_col[r]
            for j in range(per.shape[0]):
                if got == want:
                    break
                if per[j, c_lo] == (per[j, c_hi] if c_hi >= 0 else 0):
                    continue
                for i in range(j * CHUNK, min(n, (j + 1) * CHUNK)):
                    if T(T(bits[i] & key_mask) - lo) < width:
                        out[r, got] = i
                        got += 1
                        if got == want:
                            break
            found[r] = got

    return first_in_range, first_in_ranges
