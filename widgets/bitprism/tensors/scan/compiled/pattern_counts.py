"""One pass of pattern counts for counts-only scans: compiled with numba when it is installed.

A counts-only scan (``scan(..., quantiles=False)``) needs, per block of data, how many IEEE bit
patterns lie at or above each of a few magnitude thresholds ("cuts": every class of a monotone
cast is a range of ``|x|``), whether +Inf and -Inf occur, the extreme finite values, and
optionally the histogram of exponent fields. numpy needs one pass over memory per cut. The
compiled kernel reads each cache-sized chunk from memory once, in a loop that takes the
extreme finite values and writes a half-width *key* per element; the cuts that lie
outside the chunk's finite range are settled without a compare, and the others are counted
from the chunk in cache, eight at a time: on the keys (16-bit lanes for float32 data) when the
cut sits on a key step or one above it, which holds for zero, Inf, NaN, powers of two and the
thresholds of formats with few significand bits, and on the full patterns otherwise (the
thresholds of float16 and bfloat16, say). A cut costs about one compare and one subtraction
per 16 elements on keys, per 8 on full float32 patterns, so the cost grows with the number of
formats. The kernel keeps each chunk's counts too, so that ``range_positions`` finds the first
elements of each class by reading only the chunks that hold some. ``numba`` is optional (the
``fast`` extra); without it, and with ``BITPRISM_NUMBA=0`` in the environment, the same
numbers come from numpy. Tests hold the two equal on every kind of pattern.
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
_EXT_EMPTY_MAX = 0  # sentinel of an empty "max" slot (every real pattern in it is >= 1)
# where a cut's count comes from in a chunk, when not from its own compare
_FROM_NONZERO, _FROM_BIG, _FROM_NAN, _FROM_NONE, _FROM_SLOT0, _FROM_SLOT1 = -1, -2, -3, -4, -5, -6


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
    k = _kernels() if compiled else None
    if k is not None and bits.size:
        const = _constants(dtype, t)
        out = np.zeros(cuts.size + 2, np.int64)
        ext = np.array([_EXT_EMPTY_MAX, _EXT_EMPTY_MAX, const[5]], dtype)
        n_exp = int(const[1] >> dtype.type(t)) + 1
        exps = np.zeros((4, n_exp) if exponents else (4, 1), np.int64)
        per_chunk = np.empty((-(-bits.size // CHUNK), cuts.size), np.int32)
        k[dtype][0](bits, const, cuts, bool(exponents), out, ext, exps, per_chunk)
        return _finish(out[:-2], out[-2:], ext, exps.sum(axis=0) if exponents else None, per_chunk)
    return _numpy_counts(bits, t, cuts, exponents)


def _finish(
    at_least: np.ndarray, infs: np.ndarray, ext: np.ndarray, exps: np.ndarray | None, per_chunk: np.ndarray
) -> BlockCounts:
    empty_min = int(np.iinfo(ext.dtype).max)
    p_max, n_max, m_min = (int(v) for v in ext)
    return BlockCounts(
        at_least,
        bool(infs[0]),
        bool(infs[1]),
        p_max if p_max != _EXT_EMPTY_MAX else None,
        n_max if n_max != _EXT_EMPTY_MAX else None,
        m_min if m_min != empty_min else None,
        exps,
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


# the compiled kernels that other kernels call, bound by ``with_kernels`` where they are made
_first_pass: Callable[..., Any]
_count_keys: Callable[..., Any]
_count_wide: Callable[..., Any]


@built_once
def _compile() -> dict[np.dtype, tuple[Callable[..., Any], Callable[..., Any], Callable[..., Any]]]:
    """Build the numba kernels, one pair per pattern dtype."""
    jit = make_jit()
    return {np.dtype(t): _kernels_for(t, jit) for t in (np.uint32, np.uint64)}


def _group_counter(jit: Any, V: Any, masked: bool) -> Callable[..., Any]:
    """A compiled loop that stores, for each cut ``k`` in ``live[:nl]``, how many elements
    ``x`` of ``data`` (``x & mask`` when ``masked``) satisfy ``x > below[k]``, all compared
    as the signed type ``V``, into ``local[k]``. Eight cuts per pass over the chunk (four when
    no more are left); a short group repeats its last cut (the counts are assigned, not
    added). The two loops are unrolled by hand on purpose: a pass of four costs about half a
    pass of eight, so a short tail takes the cheaper one."""

    @jit
    def run(data, mask, below, live, nl, local):  # type: ignore[no-untyped-def]
        m = data.size
        g = 0
        while g < nl:
            width = 8 if nl - g > 4 else 4
            for r in range(nl, g + width):
                live[r] = live[nl - 1]
            k0 = live[g]
            k1 = live[g + 1]
            k2 = live[g + 2]
            k3 = live[g + 3]
            b0 = V(below[k0])
            b1 = V(below[k1])
            b2 = V(below[k2])
            b3 = V(below[k3])
            n0 = V(0)
            n1 = V(0)
            n2 = V(0)
            n3 = V(0)
            if width == 4:
                for i in range(m):
                    a = V(V(data[i]) & mask) if masked else V(data[i])
                    n0 = V(n0 + V(a > b0))
                    n1 = V(n1 + V(a > b1))
                    n2 = V(n2 + V(a > b2))
                    n3 = V(n3 + V(a > b3))
            else:
                k4 = live[g + 4]
                k5 = live[g + 5]
                k6 = live[g + 6]
                k7 = live[g + 7]
                b4 = V(below[k4])
                b5 = V(below[k5])
                b6 = V(below[k6])
                b7 = V(below[k7])
                n4 = V(0)
                n5 = V(0)
                n6 = V(0)
                n7 = V(0)
                for i in range(m):
                    a = V(V(data[i]) & mask) if masked else V(data[i])
                    n0 = V(n0 + V(a > b0))
                    n1 = V(n1 + V(a > b1))
                    n2 = V(n2 + V(a > b2))
                    n3 = V(n3 + V(a > b3))
                    n4 = V(n4 + V(a > b4))
                    n5 = V(n5 + V(a > b5))
                    n6 = V(n6 + V(a > b6))
                    n7 = V(n7 + V(a > b7))
                local[k4] = n4
                local[k5] = n5
                local[k6] = n6
                local[k7] = n7
            local[k0] = n0
            local[k1] = n1
            local[k2] = n2
            local[k3] = n3
            g += width

    return run


def _kernels_for(T: Any, jit: Any) -> tuple[Callable[..., Any], Callable[..., Any], Callable[..., Any]]:
    """The kernels for patterns of numpy type ``T`` (unsigned).

    Each chunk is read from memory once, by a first loop on the patterns (``_first_pass``); the
    cuts are then counted from the chunk in cache. Most cuts are counted on *keys* half the
    width of the pattern, twice as many per vector operation: with s = ``KEY_SHIFT``,
    ``key(a) = floor(a / 2^s) + ceil(a / 2^s)`` is monotone and steps exactly at the multiples
    of 2^s and one above them, so for a cut ``c`` whose remainder mod 2^s is 0 or 1,
    ``a >= c`` holds exactly when ``key(a) >= 2 (c >> s) + (c mod 2^s)``. The first loop
    stores ``key(a) - 1 = (a >> s) + ((a - 1) >> s)`` (arithmetic shifts, so -1 for zero),
    whose ``a - 1`` also serves the smallest magnitude. Power-of-two bounds,
    the midpoints of formats with few significand bits and "just above a tie" cuts all have
    that form; the others (float16's midpoints, say) are compared on the full pattern, two of
    them inside the first loop. Compares are on signed integers (magnitudes and keys fit them),
    so ``x > c - 1`` is one AVX2 compare, whose all-ones result is subtracted from a counter
    of the same width. Every intermediate is cast back to its type: numba widens integer
    arithmetic to 64 bits, which would halve the lanes of each vector operation."""
    S = np.int64 if T == np.uint64 else np.int32  # signed pattern (full-width compares)
    K = np.int32 if T == np.uint64 else np.int16  # key (half-width compares)
    shift = KEY_SHIFT[np.dtype(T)]
    key_low = T((1 << shift) - 1)
    key_shift = T(shift)
    s_shift = S(shift)

    @jit
    def first_pass(blk, key, s_mask, off_p, w0, w1, with_wide):  # type: ignore[no-untyped-def]
        """One loop over the chunk: the extreme finite patterns per sign (through an offset
        that pushes every other pattern below the range; the unsigned maximum of the same
        sums is the signed one of the sums with the sign bit flipped, which is the negative
        values' offset), the smallest nonzero magnitude (an
        unsigned minimum of a - 1: zero wraps to the top), the keys minus one, and
        with ``with_wide`` the counts above two full-width bounds."""
        lowest = T(T(s_mask) + T(1))  # the sign bit: the lowest signed value
        mx_p = S(lowest)
        mx_u = T(0)
        mn = T(-1)
        n0 = S(0)
        n1 = S(0)
        one = S(1)
        if with_wide:
            for i in range(blk.size):
                v = S(blk[i])
                a = S(v & s_mask)
                u = S(v + off_p)
                mx_p = max(mx_p, u)
                mx_u = max(mx_u, T(u))
                am1 = S(a - one)
                mn = min(mn, T(am1))
                n0 = S(n0 + S(a > w0))
                n1 = S(n1 + S(a > w1))
                key[i] = K(S(a >> s_shift) + S(am1 >> s_shift))
        else:
            for i in range(blk.size):
                v = S(blk[i])
                a = S(v & s_mask)
                u = S(v + off_p)
                mx_p = max(mx_p, u)
                mx_u = max(mx_u, T(u))
                am1 = S(a - one)
                mn = min(mn, T(am1))
                key[i] = K(S(a >> s_shift) + S(am1 >> s_shift))
        return mx_p, S(mx_u ^ lowest), mn, n0, n1

    def count_chunks(bits, const, cuts, want_exps, out, ext, exps, per_chunk):  # type: ignore[no-untyped-def]
        mask = T(const[0])
        inf = T(const[1])
        sign = T(const[2])
        one = T(const[4])
        ones = T(const[5])
        zero = T(const[6])
        shift = T(const[7])
        inf_m1 = T(inf - one)
        inf_p1 = T(inf + one)
        s_mask = S(mask)
        s_inf = S(inf)
        s_ninf = S(T(inf | sign))
        # v + off_p keeps the order of positive finite patterns and sends everything else
        # below off_p (signed); v + off_n does the same for negative ones (sign flipped)
        off_p = S(T(sign - inf))
        off_n = S(T(off_p + sign))
        n = bits.size
        kc = cuts.size
        p_max = T(ext[0])
        n_max = T(ext[1])
        min_mag = T(ext[2])
        # per cut: the bound of "a > below_w" (full width) and of "stored key > below_k"
        # (key(a) >= 2 (c >> s) + rem, less one as stored, less one for ">"); cuts kc,
        # kc + 1, kc + 2 are 1, +Inf and +Inf + 1 (nonzero, Inf or NaN, NaN): always counted
        below_w = np.empty(kc, S)
        below_k = np.empty(kc + 3, K)
        exact = np.zeros(kc, np.bool_)
        for k in range(kc):
            c = cuts[k]
            below_w[k] = S(T(c - one)) if c <= mask else s_mask
            rem = T(c & key_low)
            if rem <= one and c <= mask:
                exact[k] = True
                below_k[k] = K(S(S(S(c >> key_shift) << one) + S(rem)) - S(2))
        below_k[kc] = K(-1)
        below_k[kc + 1] = K(S(S(inf >> key_shift) << one) - S(2))
        below_k[kc + 2] = K(S(S(inf >> key_shift) << one) - S(1))
        live_k = np.empty(kc + 11, np.int64)
        live_w = np.empty(kc + 8, np.int64)
        source = np.empty(kc, np.int64)  # per cut: >= 0 counted there, < 0 a _FROM_* case
        local = np.zeros(kc + 3, np.int64)
        counts = np.zeros(kc, np.int64)
        key = np.empty(CHUNK, K)
        # the two full-width cuts of the first loop: those live in the previous chunk
        # (at first, the lowest candidates)
        slot0 = -1
        slot1 = -1
        for k in range(kc):
            if not exact[k] and one < cuts[k] < inf:
                if slot0 < 0:
                    slot0 = k
                elif slot1 < 0:
                    slot1 = k
        has_pos = out[kc] != 0
        has_neg = out[kc + 1] != 0
        for s in range(0, n, CHUNK):
            e = min(n, s + CHUNK)
            blk = bits[s:e]
            m = e - s
            w0 = below_w[slot0] if slot0 >= 0 else s_mask  # a > s_mask: never
            w1 = below_w[slot1] if slot1 >= 0 else s_mask
            mx_p, mx_n, mn, n0, n1 = _first_pass(blk, key, s_mask, off_p, w0, w1, slot0 >= 0)
            # decoded: largest positive / negative finite nonzero pattern, smallest nonzero
            # finite magnitude
            cp_max = T(T(mx_p) - T(off_p)) if mx_p > off_p else zero
            cn_max = T(T(mx_n) - T(off_n)) if mx_n > off_p else zero
            c_min = T(mn + one) if mn < inf_m1 else ones
            p_max = max(p_max, cp_max)
            n_max = max(n_max, cn_max)
            min_mag = min(min_mag, c_min)
            # finite nonzero magnitudes of the chunk lie in [f_lo, f_hi] (f_lo > f_hi: none)
            f_hi = T(max(cp_max, T(cn_max & mask)))
            f_lo = c_min
            # cuts settled without a compare: 1, +Inf and just above (always counted), as
            # many as the cut 1 (<= f_lo: no magnitude in between) or as the cut +Inf
            # (> f_hi), none above every magnitude; the others are counted on keys or on the
            # full patterns
            live_k[0] = kc
            live_k[1] = kc + 1
            live_k[2] = kc + 2
            nk = 3
            nw = 0
            next0 = -1
            next1 = -1
            for k in range(kc):
                c = cuts[k]
                if c == one or (c <= f_lo and c <= inf):
                    source[k] = _FROM_NONZERO
                elif c == inf or (c > f_hi and c < inf):
                    source[k] = _FROM_BIG
                elif c == inf_p1:
                    source[k] = _FROM_NAN
                elif c > mask:
                    source[k] = _FROM_NONE
                elif exact[k]:
                    source[k] = k
                    live_k[nk] = k
                    nk += 1
                else:
                    if k == slot0:
                        source[k] = _FROM_SLOT0
                    elif k == slot1:
                        source[k] = _FROM_SLOT1
                    else:
                        source[k] = k
                        live_w[nw] = k
                        nw += 1
                    if next0 < 0:
                        next0 = k
                    elif next1 < 0:
                        next1 = k
            _count_keys(key[:m], K(-1), below_k, live_k, nk, local)
            if nw:
                _count_wide(blk, s_mask, below_w, live_w, nw, local)
            nonzero = local[kc]
            big = local[kc + 1]
            nan = local[kc + 2]
            if big > nan and not (has_pos and has_neg):
                # which signs of Inf the chunk holds, until both have been seen
                c_pos = S(0)
                c_neg = S(0)
                for i in range(m):
                    v = S(blk[i])
                    c_pos = S(c_pos + S(v == s_inf))
                    c_neg = S(c_neg + S(v == s_ninf))
                has_pos = has_pos or c_pos > 0
                has_neg = has_neg or c_neg > 0
            ci = s // CHUNK
            for k in range(kc):
                src = source[k]
                got = 0
                if src >= 0:
                    got = local[src]
                elif src == _FROM_NONZERO:
                    got = nonzero
                elif src == _FROM_BIG:
                    got = big
                elif src == _FROM_NAN:
                    got = nan
                elif src == _FROM_SLOT0:
                    got = n0
                elif src == _FROM_SLOT1:
                    got = n1
                counts[k] += got
                per_chunk[ci, k] = got
            slot0 = next0
            slot1 = next1
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
        out[kc] = has_pos
        out[kc + 1] = has_neg
        ext[0] = p_max
        ext[1] = n_max
        ext[2] = min_mag

    count_chunks = jit(with_kernels(
        count_chunks, _first_pass=first_pass, _count_keys=_group_counter(jit, K, masked=False),
        _count_wide=_group_counter(jit, S, masked=True),
    ))

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

    return count_chunks, first_in_range, first_in_ranges
