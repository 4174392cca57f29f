"""How an exact-quantile refinement pass splits a range of relative-error patterns.

When a histogram bucket holds too many values to collect, a refinement pass counts them over
finer sub-ranges, and the next pass looks into the one that holds the wanted rank. Even
sub-ranges (``2^shift`` patterns each) suit values spread over the range; values that pile up
against one end (relative errors just below 1 from saturated overflow are dense near 1 in
every binade of ``1 - rel``) need sub-ranges that grow with the distance from that end. So a
pass counts three ways at once: even sub-ranges, and "log" sub-ranges by distance from the top
and from the bottom (each holding distances within ``2^-LOG_BITS`` of each other), and the next
pass takes the smallest sub-range that holds the rank. Measured on the benchmark's saturating
formats: three refinement passes become two.

The counts of one range are one int64 array: ``bins`` even sub-ranges, then ``log_bins`` by
distance from the top, then ``log_bins`` by distance from the bottom.
"""

from __future__ import annotations

import numpy as np

__all__ = ["LOG_BITS", "layout", "log_bins", "log_keys", "pick"]

LOG_BITS = 9
_LOG_MAX_WIDTH = 1 << 53  # distances convert to float64 exactly below this (bit length by frexp)
_LOG_MIN_WIDTH = 1 << 20  # narrower ranges: even sub-ranges are fine enough


def log_bins(width: int) -> int:
    """Log sub-ranges per end for a range of ``width`` patterns (0: even ones only)."""
    if width < _LOG_MIN_WIDTH or width > _LOG_MAX_WIDTH:
        return 0
    return _log_key(width - 1) + 1


def layout(lo: int, hi: int, bins: int) -> int:
    """Length of the counts array of range ``[lo, hi)`` with ``bins`` even sub-ranges."""
    return bins + 2 * log_bins(hi - lo)


def _log_key(d: int) -> int:
    s = max(0, d.bit_length() - (LOG_BITS + 1))
    return (s << LOG_BITS) + (d >> s)


def log_keys(d: np.ndarray) -> np.ndarray:
    """``_log_key`` of each distance (uint64 below 2^53) as intp: ``s = max(0, bit_length(d) -
    LOG_BITS - 1)``, key ``s * 2^LOG_BITS + (d >> s)``; keys grow with d, and each key is a
    contiguous run of distances."""
    e = np.frexp(d.astype(np.float64))[1].astype(np.int64)  # bit length (0 for 0)
    s = np.maximum(e - (LOG_BITS + 1), 0).astype(np.uint64)
    return ((s << np.uint64(LOG_BITS)) + (d >> s)).astype(np.intp)


def _log_span(key: int) -> tuple[int, int]:
    """[first, last + 1) distance of a key."""
    s = max(0, (key >> LOG_BITS) - 1)
    m = key - (s << LOG_BITS)
    return m << s, (m + 1) << s


def pick(lo: int, hi: int, shift: int, bins: int, counts: np.ndarray, rank: int) -> tuple[int, int, int, int]:
    """The smallest sub-range of ``[lo, hi)`` that holds the value of ``rank`` (0-based, in
    pattern order) by ``counts`` (see ``layout``): ``(low, high, rank inside, count inside)``."""
    even = counts[:bins]
    cum = np.cumsum(even)
    i = int(np.searchsorted(cum, rank, side="right"))
    below = int(cum[i - 1]) if i else 0
    new_lo = lo + (i << shift)
    best = (new_lo, min(new_lo + (1 << shift), hi), rank - below, int(even[i]))
    n_log = log_bins(hi - lo)
    if n_log:
        top = counts[bins : bins + n_log][::-1]  # pattern order: far from the top first
        cum = np.cumsum(top)
        i = int(np.searchsorted(cum, rank, side="right"))
        d0, d1 = _log_span(n_log - 1 - i)
        cand = (max(lo, hi - d1), hi - d0, rank - (int(cum[i - 1]) if i else 0), int(top[i]))
        if cand[3] < best[3]:
            best = cand
        bottom = counts[bins + n_log :]
        cum = np.cumsum(bottom)
        i = int(np.searchsorted(cum, rank, side="right"))
        d0, d1 = _log_span(i)
        cand = (lo + d0, min(hi, lo + d1), rank - (int(cum[i - 1]) if i else 0), int(bottom[i]))
        if cand[3] < best[3]:
            best = cand
    return best
