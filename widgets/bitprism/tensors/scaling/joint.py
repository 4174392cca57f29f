"""One pass over a tensor from which every power-of-two scale can be judged without a re-cast.

Multiplying by 2^k moves a value's binary exponent and leaves its significand bits alone. The
cast of ``x * 2^k`` into a format with ``t`` trailing significand bits therefore depends on the
exponent ``e + k`` (where ``e = floor(log2|x|)``), the sign, the top ``t + 1`` bits of the
significand (the kept bits and the round bit) and whether any bit below them is set (sticky):
a normal result keeps ``t`` bits after the leading one; a subnormal result keeps fewer, all of
them among those top bits, and every bit it drops below the round bit is covered by the sticky
bit; overflow (IEEE 754-2019 §7.4: the value rounded with an unbounded exponent range exceeds
the largest finite one) is decided by the same rounding. The directed roundings need only
"any bit dropped" too. So, for every ``k`` at once, one histogram of the data by ``(e, sign, top
bits, sticky)`` tells how many values overflow, underflow to zero or land subnormal, and the
rounded value of each bin (``tests/test_scale_sweep.py`` checks the claim at every exponent).
Stochastic rounding draws bits below the sticky position and is refused by the sweep.

The histogram keeps two resolutions, both filled by the same pass:

* coarse bins (``e``, top ``t + 1`` bits, sign) with the sum and the sum of squares of ``U``,
  the position in ``[0, 1)`` of each value inside its bin. With the bin's count, those make the
  squared error of every bin exact for every rounded value (``sum((d - w U)^2)`` expands into
  the three sums), so the SQNR needs no assumption about how values spread inside a bin;
* fine bins (``e``, top ``B`` bits, sticky, sign), counts only. The counts of values that sit
  exactly on a coarse bin's lower edge (no bit set below the round bit) come from them, and they
  place each value's relative error within ``2^-B`` of its binade for the quantiles.

Blocks of the flattened tensor run on worker threads (numpy releases the GIL), each worker
adding its blocks into its own sums, merged at the end (integer counts are the same however the
blocks fall; float sums may differ in their last bits); a memory-mapped input is read block by
block. Values are read as float32 bit patterns when the dtype fits float32 exactly, else as
float64; subnormal inputs are normalised first (a float32 subnormal through float64, a float64
one by an exact factor 2^64), so every value enters the bin of its true exponent.
"""

from __future__ import annotations

from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from functools import cached_property
from typing import Any, Callable

import numpy as np

from ..scan.plan import DEFAULT_TUNING, carrier_is_32

__all__ = ["JointHistogram", "fine_bits_for", "joint_histogram"]

BLOCK = 1 << 20  # elements per block: a few MiB of temporaries per thread

# Fine bins keep B = t + 9 significand bits (a value's relative error is then placed within
# 2^-(t+9) of its binade: 2^-8 of the format's half-ULP), at most 13 so that a binade holds at
# most 2^15 fine bins (float16 and bfloat16 get 13).
_FINE_EXTRA = 9
_FINE_MAX = 13
MAX_T = 10  # formats with at most this many trailing significand bits (every <= 16-bit one)


def fine_bits_for(t: int) -> int:
    """B, the significand bits a fine bin keeps, for a target with ``t`` trailing bits."""
    return max(t + 1, min(t + _FINE_EXTRA, _FINE_MAX))


@dataclass(frozen=True)
class _Carrier:
    """How a block's bit patterns are read: float32 or float64."""

    uint: type
    frac: int  # trailing significand bits
    bias: int
    min_normal: int  # magnitude pattern of the smallest normal
    inf: int  # magnitude pattern of +Inf

    @property
    def sign_shift(self) -> int:
        return 31 if self.uint is np.uint32 else 63


C32 = _Carrier(np.uint32, 23, 127, 1 << 23, 0x7F800000)
C64 = _Carrier(np.uint64, 52, 1023, 1 << 52, 0x7FF0000000000000)


@dataclass(frozen=True, eq=False)
class JointHistogram:
    """The tensor by binary exponent, significand bits and sign (see the module notes).

    Attributes:
        t: trailing significand bits of the target format (coarse bins keep ``t + 1``).
        fine_bits: ``B``, the significand bits a fine bin keeps.
        e_lo: ``floor(log2|x|)`` of row 0 of the arrays.
        fine: int64 ``[rows, 2^(B+2)]``; column ``(top B bits << 2) | (sticky << 1) | sign``.
        coarse_sum, coarse_sq: float64 ``[rows, 2^(t+2)]``; column ``(top t+1 bits << 1) |
            sign``: sum of ``U`` and of ``U^2`` (``U``: position inside the coarse bin).
        coarse_n, coarse_exact: weighted counts per coarse bin (all values; values on the
            bin's lower edge), float64 ``[rows, 2^(t+2)]``, when the pass was given weights;
            the coarse sums then carry the weights too. Per-channel and per-block sweeps weight
            each value by ``4^-k`` for its own scale ``2^k``, so that squared errors add up in
            the data's own units. None when unweighted (they follow from ``fine``).
        zeros, nan, inf: counts of those inputs; ``negative``: finite nonzero negatives.
        amax: the largest finite magnitude (0.0 without one); ``size``: all elements.
    """

    t: int
    fine_bits: int
    e_lo: int
    fine: np.ndarray
    coarse_sum: np.ndarray
    coarse_sq: np.ndarray
    coarse_n: np.ndarray | None
    coarse_exact: np.ndarray | None
    zeros: int
    nan: int
    inf: int
    negative: int
    amax: float
    size: int

    @property
    def rows(self) -> int:
        return int(self.fine.shape[0])

    @property
    def finite(self) -> int:
        return self.size - self.nan - self.inf

    @property
    def populated(self) -> np.ndarray:
        """Row indices holding at least one value."""
        return np.flatnonzero(self.fine.sum(axis=1))

    @cached_property
    def _edge(self) -> tuple[np.ndarray, np.ndarray]:
        g = self.fine_bits - self.t - 1
        f = self.fine.reshape(self.rows, 1 << (self.t + 1), 1 << g, 2, 2)  # top, guard, s, sign
        n = f.sum(axis=(2, 3)).reshape(self.rows, -1).astype(np.float64)
        exact = f[:, :, 0, 0, :].reshape(self.rows, -1).astype(np.float64)
        return n, exact

    def edge_counts(self) -> tuple[np.ndarray, np.ndarray]:
        """(all values, values exactly on the bin's lower edge) per coarse bin, as float64
        counts read off the fine bins (an edge value has no bit set below the round bit)."""
        return self._edge

    def weighted_counts(self) -> tuple[np.ndarray, np.ndarray]:
        """``edge_counts`` with the pass's weights (the same when it had none)."""
        if self.coarse_n is not None and self.coarse_exact is not None:
            return self.coarse_n, self.coarse_exact
        return self.edge_counts()


@dataclass
class _Part:
    """One block's share (rows from ``e_first``)."""

    e_first: int = 0
    fine: np.ndarray | None = None
    csum: np.ndarray | None = None
    csq: np.ndarray | None = None
    cn: np.ndarray | None = None
    cex: np.ndarray | None = None
    zeros: int = 0
    nan: int = 0
    inf: int = 0
    negative: int = 0
    amax: float = 0.0


def _normal_part(
    p: np.ndarray, c: _Carrier, t: int, b: int, e_shift: int, w: np.ndarray | None, neg: bool,
    signs: bool = True,
) -> _Part:
    """The bins of normal values given as bit patterns ``p`` of carrier ``c``; ``e_shift`` is
    added to every exponent (a float64 subnormal scaled by 2^64 has ``e_shift = -64``);
    ``signs`` False leaves the sign out of the keys (every value counts as positive)."""
    u = c.uint
    out = _Part()
    if p.size == 0:
        return out
    sign = p >> u(c.sign_shift) if signs or neg else None
    mag = p & u((1 << c.sign_shift) - 1)
    top = int(mag.max())
    out.amax = float(np.array([top], u).view(np.float32 if u is np.uint32 else np.float64)[0])
    out.amax *= 2.0**e_shift
    if neg and sign is not None:
        out.negative = int(np.count_nonzero(sign))
    sb = 1 if signs else 0  # key bits the sign takes
    e_min_field = int(mag.min()) >> c.frac
    rows = (top >> c.frac) - e_min_field + 1
    out.e_first = e_min_field - c.bias + e_shift
    # fine key (bits >> d) * 2 + sticky = (bits >> d) + ((bits + 2^d - 1) >> d): the carry
    # into bit d happens exactly when a bit below it is set
    d = c.frac - b
    key = mag >> u(d)
    key += (mag + u((1 << d) - 1)) >> u(d)
    key -= u(e_min_field << (b + 1))
    if signs:
        key <<= u(1)
        key |= sign
    out.fine = np.bincount(key.astype(np.intp), minlength=rows << (b + 1 + sb)).reshape(rows, -1)
    dc = c.frac - t - 1  # bits below a coarse bin
    ckey = mag >> u(dc)
    ckey -= u(e_min_field << (t + 1))
    if signs:
        ckey <<= u(1)
        ckey |= sign
    ck = ckey.astype(np.intp)
    pos = (mag & u((1 << dc) - 1)).astype(np.float64)  # U * 2^dc, a whole number
    size = rows << (t + 1 + sb)
    unit = 2.0**-dc  # sums are scaled once, per bin (exact: a power of two)
    if w is None:
        out.csum = np.bincount(ck, weights=pos, minlength=size).reshape(rows, -1) * unit
        out.csq = np.bincount(ck, weights=pos * pos, minlength=size).reshape(rows, -1) * unit**2
        return out
    out.cn = np.bincount(ck, weights=w, minlength=size).reshape(rows, -1)
    on_edge = pos == 0
    out.cex = np.bincount(ck[on_edge], weights=w[on_edge], minlength=size).reshape(rows, -1)
    wpos = w * pos  # exact: the weights are powers of two
    out.csum = np.bincount(ck, weights=wpos, minlength=size).reshape(rows, -1) * unit
    out.csq = np.bincount(ck, weights=wpos * pos, minlength=size).reshape(rows, -1) * unit**2
    return out


def _block_part(
    x: np.ndarray, t: int, b: int, w: np.ndarray | None, neg: bool, signs: bool = True
) -> list[_Part]:
    """The parts of one block: its normal values, and its subnormal ones normalised."""
    c = C32 if x.dtype == np.float32 else C64
    p: np.ndarray = np.ascontiguousarray(x).view(c.uint)
    mag = p & c.uint((1 << c.sign_shift) - 1)
    lo, hi = (int(mag.min()), int(mag.max())) if mag.size else (c.min_normal, 0)
    if lo >= c.min_normal and hi < c.inf:
        return [_normal_part(p, c, t, b, 0, w, neg, signs)]
    special = (mag < c.uint(c.min_normal)) | (mag >= c.uint(c.inf))
    sp = mag[special]
    head = _Part(
        zeros=int(np.count_nonzero(sp == 0)),
        nan=int(np.count_nonzero(sp > c.uint(c.inf))),
        inf=int(np.count_nonzero(sp == c.uint(c.inf))),
    )
    keep = ~special
    parts = [head, _normal_part(p[keep], c, t, b, 0, None if w is None else w[keep], neg, signs)]
    tiny = special.copy()
    tiny[special] = (sp > 0) & (sp < c.uint(c.min_normal))
    if tiny.any():
        wt = None if w is None else w[tiny]
        if c is C32:  # float32 subnormals are normal float64 values
            sub = x[tiny].astype(np.float64).view(np.uint64)
            parts.append(_normal_part(sub, C64, t, b, 0, wt, neg, signs))
        else:  # scale by 2^64 (exact) and take 64 off the exponent
            sub = (x[tiny] * 2.0**64).view(np.uint64)
            parts.append(_normal_part(sub, C64, t, b, -64, wt, neg, signs))
    return parts


class _Accumulator:
    """Parts merged into arrays that grow to cover every exponent seen."""

    def __init__(self, t: int, b: int, weighted: bool, signs: bool = True) -> None:
        self.t, self.b, self.weighted, self.signs = t, b, weighted, signs
        self.e_lo = 0
        self.arrays: list[np.ndarray] | None = None
        self.zeros = self.nan = self.inf = self.negative = 0
        self.amax = 0.0

    def _widths(self) -> list[tuple[int, Any]]:
        sb = 1 if self.signs else 0
        coarse = (1 << (self.t + 1 + sb), np.float64)
        out: list[tuple[int, Any]] = [(1 << (self.b + 1 + sb), np.int64), coarse, coarse]
        if self.weighted:
            out += [coarse, coarse]
        return out

    def _cover(self, e_first: int, rows: int) -> None:
        widths = self._widths()
        if self.arrays is None:
            self.e_lo = e_first
            self.arrays = [np.zeros((rows, w), d) for w, d in widths]
            return
        have = self.arrays[0].shape[0]
        lo, hi = min(self.e_lo, e_first), max(self.e_lo + have, e_first + rows)
        if lo == self.e_lo and hi == self.e_lo + have:
            return
        grown = [np.zeros((hi - lo, w), d) for w, d in widths]
        for new, old in zip(grown, self.arrays):
            new[self.e_lo - lo : self.e_lo - lo + have] = old
        self.e_lo, self.arrays = lo, grown

    def add(self, part: _Part) -> None:
        self.zeros += part.zeros
        self.nan += part.nan
        self.inf += part.inf
        self.negative += part.negative
        self.amax = max(self.amax, part.amax)
        if part.fine is None:
            return
        rows = part.fine.shape[0]
        self._cover(part.e_first, rows)
        assert self.arrays is not None
        at = part.e_first - self.e_lo
        pieces = [part.fine, part.csum, part.csq] + ([part.cn, part.cex] if self.weighted else [])
        for arr, piece in zip(self.arrays, pieces):
            arr[at : at + rows] += piece

    def merge(self, other: "_Accumulator") -> None:
        """Add another accumulator's counts and sums (a worker thread's share)."""
        arrays = other.arrays
        fine = csum = csq = cn = cex = None
        if arrays is not None:
            fine, csum, csq = arrays[:3]
            if self.weighted:
                cn, cex = arrays[3], arrays[4]
        self.add(_Part(other.e_lo, fine, csum, csq, cn, cex, other.zeros, other.nan, other.inf,
                       other.negative, other.amax))

    def result(self, size: int) -> JointHistogram:
        if self.arrays is None:
            self._cover(0, 0)
        assert self.arrays is not None
        arrays = self.arrays
        if not self.signs:  # every value was binned as positive: empty negative columns
            arrays = []
            for a in self.arrays:
                full = np.zeros((a.shape[0], 2 * a.shape[1]), a.dtype)
                full[:, 0::2] = a
                arrays.append(full)
        fine, csum, csq = arrays[:3]
        cn, cex = (arrays[3], arrays[4]) if self.weighted else (None, None)
        return JointHistogram(
            self.t, self.b, self.e_lo, fine, csum, csq, cn, cex,
            self.zeros, self.nan, self.inf, self.negative, self.amax, size,
        )


def _carrier_dtype(dtype: np.dtype) -> np.dtype:
    """float32 when it holds the dtype exactly (float16, bfloat16, the float8 ones...), else
    float64 (float64 itself, integers, booleans)."""
    return np.dtype(np.float32) if carrier_is_32(dtype) else np.dtype(np.float64)


def joint_histogram(
    arr: np.ndarray,
    t: int,
    *,
    weights: Callable[[int, int], np.ndarray] | None = None,
    transform: Callable[[np.ndarray, int, int], np.ndarray] | None = None,
    negatives: bool = False,
    signs: bool = True,
    threads: int | None = None,
) -> JointHistogram:
    """The joint histogram of ``arr`` (any shape, read flat in C order) for a target format
    with ``t`` trailing significand bits.

    Args:
        weights: ``weights(start, stop)`` gives the weights of the flat elements
            ``start..stop-1`` (powers of four; see ``JointHistogram.coarse_n``).
        transform: ``transform(block, start, stop)`` returns the values to bin (float64)
            instead of the block itself (per-element power-of-two scales).
        negatives: count the finite nonzero negatives (for unsigned formats).
        signs: False bins every value as if positive (half the bins), for a cast that treats
            both signs alike (``outcomes.sign_symmetric``); the histogram keeps its layout,
            with the negative columns empty.
        threads: worker threads (default: as the scan chooses, at most the cores available).
    """
    b = fine_bits_for(t)
    flat = arr.reshape(-1)
    n = int(flat.size)
    carrier = _carrier_dtype(arr.dtype) if transform is None else np.dtype(np.float64)
    acc = _Accumulator(t, b, weights is not None, signs)

    def work(start: int) -> list[_Part]:
        stop = min(start + BLOCK, n)
        block: Any = flat[start:stop]
        if transform is not None:
            block = transform(np.asarray(block), start, stop)
        elif block.dtype != carrier:
            if block.dtype.kind == "b":
                block = block.astype(np.uint8)
            block = np.asarray(block, dtype=carrier)
        w = weights(start, stop) if weights is not None else None
        return _block_part(np.asarray(block), t, b, w, negatives, signs)

    starts = list(range(0, n, BLOCK))
    workers = threads if threads is not None else DEFAULT_TUNING.worker_threads()
    workers = max(1, min(workers, len(starts)))

    def share(first: int) -> _Accumulator:  # one worker: every workers-th block, its own sums
        own = _Accumulator(t, b, weights is not None, signs)
        for s in starts[first::workers]:
            for part in work(s):
                own.add(part)
        return own

    if workers == 1:
        acc = share(0)
    else:
        with ThreadPoolExecutor(workers) as pool:
            for own in pool.map(share, range(workers)):
                acc.merge(own)
    return acc.result(n)
