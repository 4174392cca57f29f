"""Relative-error p99 of every candidate scale, from the fine bins of the joint histogram.

A fine bin holds the values of one binade with the same sign and top ``B`` significand bits,
either exactly on the bin's lower edge or strictly inside it (sticky). Placed at exponent ``f``
its values all round to one result (``outcomes.py``), so each value's relative error
``|q - x| / |x|`` is a monotone function of its position ``u`` in the bin (a ratio of two
linear functions of ``u``, the numerator never changing sign: no representable value lies
strictly inside a bin). The bin's relative errors therefore lie between the values at its two
ends, and each is taken as their midpoint; an edge value is exact. A value's relative error is
then off by at most ``2^-B (1 + rel) / 2``.

The midpoints go into the scan's relative-error histogram (``scan.partials.rel_keys``: buckets
2^-7 wide relative to their lower edge), and the p99 is read off it as the scan's
``quantiles="histogram"`` mode reads it: numpy's "linear" method on the bucket midpoints, with
relative errors of exactly 0 (values that survive exactly) and exactly 1 (values flushed to
zero) known exactly. Hence the bound the tests hold, with ``p`` the reported p99::

    |p99_sweep - p99_exact| <= 2^-7 p + 2^-B (1 + 2 p)

Values whose result is NaN or Inf are left out, as the scan leaves them out.

Per candidate, each binade's histogram is looked up by a key that many exponents share: all of
``emin .. emax-1`` ("interior": the same relative results), everything above the table ("above":
non-finite, or saturated with relative errors in the top bucket below 1) and, unless directed
rounding lifts tiny values to the smallest subnormal, everything below it ("below": zeros).
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from ..scan.partials import REL_BINS, rel_bin_bounds, rel_keys
from .joint import JointHistogram
from .outcomes import Outcomes

__all__ = ["FineQuantiles", "P99", "SLOTS", "p99_tolerance", "quantile", "slot_histogram"]

ZERO = REL_BINS  # slot of relative errors exactly 0
ONE = REL_BINS + 1  # ... exactly 1
LEFT_OUT = REL_BINS + 2  # non-finite results
SLOTS = REL_BINS + 3
_ONE_BUCKET = int(rel_keys(np.ones(1), np.empty(1, np.int64))[0])  # the bucket starting at 1.0
P99 = 0.99


def p99_tolerance(p: np.ndarray, fine_bits: int) -> np.ndarray:
    """The bound on ``|p99_sweep - p99_exact|`` (see the module notes); Inf where unknown."""
    with np.errstate(invalid="ignore"):
        return 2.0**-7 * p + 2.0**-fine_bits * (1 + 2 * p)


class FineQuantiles:
    """Slots of the fine patterns at each exponent key, and each binade's histogram by key."""

    def __init__(self, h: JointHistogram, oc: Outcomes, rows: np.ndarray) -> None:
        self.h, self.oc, self.rows = h, oc, rows
        b, t = h.fine_bits, h.t
        g = b - t - 1
        # a sign-symmetric cast (every rounding but the two directed ones) gives both signs
        # the same relative errors: the fine bins of the two signs are then added up
        v = oc.value
        self.fold = bool(
            np.array_equal(oc.nonfinite[..., 0::2], oc.nonfinite[..., 1::2])
            and np.array_equal(np.where(oc.nonfinite[..., 0::2], 0.0, v[..., 0::2]),
                               np.where(oc.nonfinite[..., 1::2], 0.0, -v[..., 1::2]))
        )
        pat = np.arange(0, 1 << (b + 2), 2 if self.fold else 1, dtype=np.int64)
        top, sticky, neg = pat >> 2, (pat >> 1) & 1, pat & 1
        self.coarse = ((top >> g) << 1) | neg
        self.inside = (((top & ((1 << g) - 1)) != 0) | (sticky == 1)).astype(np.intp)
        self.sticky = sticky == 1
        self.neg = neg == 1
        self.edge = 1.0 + top * 2.0**-b
        self.width = 2.0**-b
        counts = h.fine[rows]
        if self.fold:
            counts = counts[:, 0::2] + counts[:, 1::2]
        self.counts = {int(r): c for r, c in zip(rows, counts)}
        self.nz = {r: np.flatnonzero(c) for r, c in self.counts.items()}
        self._slots: dict[Any, tuple[np.ndarray, int, int]] = {}
        self._hists: dict[tuple[int, Any], tuple[np.ndarray, np.ndarray]] = {}
        self._cums: dict[str, tuple[np.ndarray, int]] = {}
        self.e = h.e_lo + rows  # ascending
        lo = oc.index(oc.f_lo)
        self.below_constant = not np.any(~oc.nonfinite[lo] & ~oc.underflow[lo])

    def key(self, f: int) -> tuple[Any, int]:
        """(cache key, an exponent that stands for it)."""
        lo, hi = self.oc.interior
        if lo <= f <= hi:
            return "interior", lo
        if f > self.oc.f_hi:
            return "above", self.oc.f_hi + 1
        if f < self.oc.f_lo and self.below_constant:
            return "below", self.oc.f_lo - 1
        return f, f

    def slots(self, f: int) -> tuple[np.ndarray, int, int]:
        """(compact slot of every pattern, lowest bucket, length): slots 0, 1, 2 are the
        exact zeros, exact ones and left-out values, slot ``3 + b - lowest`` bucket ``b``."""
        key, at = self.key(f)
        got = self._slots.get(key)
        if got is None:
            full = self._compute_slots(at)
            buckets = full < REL_BINS
            lo = int(full[buckets].min()) if buckets.any() else 0
            hi = int(full[buckets].max()) if buckets.any() else -1
            compact = np.where(buckets, full - lo + 3, full - REL_BINS)
            got = (compact, lo, hi - lo + 4)
            self._slots[key] = got
        return got

    def _compute_slots(self, f: int) -> np.ndarray:
        oc = self.oc
        i = oc.index(f)
        r = oc.relative(f)[self.inside, self.coarse]
        left_out = oc.nonfinite[i][self.inside, self.coarse]
        r = np.where(left_out, 0.0, r)
        toward = np.where(self.neg, -r, r)  # the result measured along the value's own sign
        with np.errstate(invalid="ignore", over="ignore"):
            r0 = np.abs(toward - self.edge) / self.edge
            r1 = np.abs(toward - self.edge - self.width) / (self.edge + self.width)
        val = np.where(self.sticky, 0.5 * (r0 + r1), r0)
        slots = rel_keys(val, np.empty(val.size, np.int64))
        exact = ~self.sticky
        slots[exact & (val == 0)] = ZERO
        slots[(exact & (val == 1.0)) | (r == 0)] = ONE
        slots[left_out] = LEFT_OUT
        return slots

    def row_hist(self, row: int, f: int) -> tuple[np.ndarray, np.ndarray]:
        """(slots, counts) of one binade's values placed at exponent ``f``."""
        key = (row, self.key(f)[0])
        got = self._hists.get(key)
        if got is None:
            compact, lo, length = self.slots(f)
            nz = self.nz[row]
            hist = np.bincount(compact[nz], weights=self.counts[row][nz], minlength=length)
            where = np.flatnonzero(hist)
            slots = np.where(where < 3, where + REL_BINS, where - 3 + lo)
            got = (slots, hist[where])
            self._hists[key] = got
        return got

    def _cumulative(self, key: str, at: int) -> tuple[np.ndarray, int]:
        """Running sums over the rows (in order) of their compact histograms at a shared key:
        row ``i``'s histograms of rows ``< i`` are ``cum[i]`` (so a range is one subtraction)."""
        got = self._cums.get(key)
        if got is None:
            compact, lo, length = self.slots(at)
            cum = np.zeros((self.rows.size + 1, length))
            for i, r in enumerate(self.rows):
                nz = self.nz[int(r)]
                cum[i + 1] = cum[i] + np.bincount(compact[nz], weights=self.counts[int(r)][nz],
                                                  minlength=length)
            got = (cum, lo)
            self._cums[key] = got
        return got

    def p99(self, k: int, zeros: int) -> float:
        """The p99 of the relative errors at scale ``2^k`` (NaN when nothing is compared).
        Binades under a shared key form a run of rows (interior, above, below): one
        subtraction of running sums each; the others add their own histograms."""
        oc = self.oc
        f = self.e + k
        lo, hi = oc.interior
        def at(v: int, side: Any = "left") -> int:
            return int(np.searchsorted(f, v, side=side))

        runs: list[tuple[str, int, int, int]] = [
            ("interior", lo, at(lo), at(hi, "right")),
            ("above", oc.f_hi + 1, at(oc.f_hi, "right"), int(f.size)),
        ]
        if self.below_constant:
            runs.append(("below", oc.f_lo - 1, 0, at(oc.f_lo)))
        hist: np.ndarray = np.zeros(SLOTS)
        covered = np.zeros(f.size, bool)
        for key, f_key, a, b in runs:
            if b > a:
                cum, first = self._cumulative(key, f_key)
                part = cum[b] - cum[a]
                hist[REL_BINS : REL_BINS + 3] += part[:3]
                hist[first : first + part.size - 3] += part[3:]
                covered[a:b] = True
        rest = [self.row_hist(int(self.rows[i]), int(f[i])) for i in np.flatnonzero(~covered)]
        if rest:
            hist += np.bincount(np.concatenate([p[0] for p in rest]),
                                weights=np.concatenate([p[1] for p in rest]), minlength=SLOTS)
        hist[ZERO] += zeros
        return quantile(hist, P99)


def slot_histogram(err: np.ndarray, mag: np.ndarray) -> np.ndarray:
    """The slot histogram of relative errors ``err / mag`` (0 where ``mag`` is 0), each in
    its own slot: exactly 0, exactly 1, or its bucket."""
    with np.errstate(invalid="ignore", divide="ignore"):
        rel = np.where(mag > 0, err / np.where(mag > 0, mag, 1.0), 0.0)
    slots = rel_keys(rel, np.empty(rel.size, np.int64))
    slots[rel == 0] = ZERO
    slots[rel == 1.0] = ONE
    return np.bincount(slots, minlength=SLOTS).astype(np.float64)


def _bucket_mid(b: int) -> float:
    lo, hi = rel_bin_bounds(b)
    if b == 0:
        lo = 0.0
    return lo if not math.isfinite(hi) else (lo + hi) / 2


def quantile(hist: np.ndarray, q: float) -> float:
    """numpy's "linear" quantile of the relative errors a slot histogram holds, each bucket
    standing for its midpoint (``scan.quantiles`` does the same in its histogram mode)."""
    ordered = np.concatenate(
        ([hist[ZERO]], hist[:_ONE_BUCKET], [hist[ONE]], hist[_ONE_BUCKET:REL_BINS])
    )
    cum = np.cumsum(ordered)
    n = int(round(cum[-1])) if cum.size else 0
    if n == 0:
        return math.nan

    def stat(k: int) -> float:
        i = int(np.searchsorted(cum, k, side="right"))
        if i == 0:
            return 0.0
        if i == _ONE_BUCKET + 1:
            return 1.0
        return _bucket_mid(i - 1 if i <= _ONE_BUCKET else i - 2)

    virtual = (n - 1) * q
    lo = math.floor(virtual)
    hi = lo if virtual >= n - 1 else lo + 1
    a, b, w = stat(lo), stat(hi), virtual - lo
    diff = b - a  # numpy's _lerp, so the rounding matches np.quantile's
    return b - diff * (1 - w) if w >= 0.5 else a + diff * w
