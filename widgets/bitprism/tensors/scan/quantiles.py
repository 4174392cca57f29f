"""Relative-error quantiles of a scan: exact ones by refinement passes, or from the histogram.

The p50 and p99 are what ``np.quantile(rel, [0.5, 0.99], method="linear")`` returns: two
order statistics per percentile, interpolated as numpy does (``_lerp``, the same operations).

* Exact, small input: the first pass kept every value (``FormatPartial.rel_values``).
* Exact, larger input: the first pass's histogram puts each needed order statistic in a
  bucket (``first_requests``); each further pass counts the elements of those buckets in finer
  sub-ranges of float64 bit patterns (``targets_for``, ``sub_ranges``) until a range holds at
  most ``tuning.refine_cap`` elements (and the ranges of one pass at most
  ``tuning.refine_budget``), whose values are then collected and the statistic picked by
  ``np.partition`` (``refine``). Order statistics that the counts alone decide (0 for values
  that survive exactly, exactly 1 for values flushed to zero: ``known``) need no pass.
* Histogram: each order statistic is the middle of its bucket (buckets are at most 2^-7 wide
  relative to their lower edge, so within 0.4 % of the exact value).
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from .partials import REL_BASE, REL_BINS, REL_SHIFT, BlockPartial, FormatPartial, rel_bin_bounds, rel_keys
from .plan import ScanTuning, Targets
from .sub_ranges import pick

__all__ = ["PERCENTILES", "Request", "first_requests", "quantile_values", "refine", "targets_for"]

PERCENTILES = (0.5, 0.99)
_F64_TOP = 0x7FF0000000000001  # just above the pattern of +Inf

# A request: (entry, order statistic k, low pattern, high pattern, rank inside, count inside).
Request = tuple[int, int, int, int, int, int]


def _lerp(a: float, b: float, t: float) -> float:
    """numpy's ``_lerp`` for one pair (the same operations, so the same rounding)."""
    diff = b - a
    if t >= 0.5:
        return b - diff * (1 - t)
    return a + diff * t


def _order_stats(n: int) -> list[tuple[int, int, float]]:
    """(lower index, upper index, weight) per percentile, as np.quantile method='linear'."""
    out = []
    for p in PERCENTILES:
        virtual = (n - 1) * p
        lo = math.floor(virtual)
        if virtual >= n - 1:
            lo = hi = n - 1
        else:
            hi = lo + 1
        out.append((lo, hi, virtual - lo))
    return out


def _bucket_of(cum: np.ndarray, k: int) -> int:
    return int(np.searchsorted(cum, k, side="right"))


_ONE_BUCKET = int(rel_keys(np.ones(1), np.empty(1, np.int64))[0])  # 1.0 starts this bucket


def known(fp: FormatPartial, cum: np.ndarray, k: int) -> float | None:
    """The k-th smallest relative error when the counts alone tell it: the first ``exact``
    are 0; in the bucket that starts at 1.0 the first ``ones`` are exactly 1 (values flushed to
    zero), since nothing in that bucket is smaller than 1."""
    if k < fp.exact:
        return 0.0
    b = _bucket_of(cum, k)
    if b == _ONE_BUCKET and k - int(cum[b - 1]) < fp.ones:
        return 1.0
    return None


def first_requests(fparts: list[FormatPartial]) -> list[Request]:
    """Order statistics the first pass cannot tell, each located in its histogram bucket."""
    out: list[Request] = []
    for j, fp in enumerate(fparts):
        if not fp.compared or fp.rel_hist is None:
            continue
        cum = np.cumsum(fp.rel_hist)
        seen = set()
        for lo, hi, _ in _order_stats(fp.compared):
            for k in (lo, hi):
                if k in seen or known(fp, cum, k) is not None:
                    continue
                seen.add(k)
                b = _bucket_of(cum, k)
                if b == 0:  # nonzero values below the first edge; the zeros come first
                    lo_p, below = 1, fp.exact
                else:
                    lo_p, below = (b + REL_BASE) << REL_SHIFT, int(cum[b - 1])
                hi_p = _F64_TOP if b == REL_BINS - 1 else (b + 1 + REL_BASE) << REL_SHIFT
                count = int(cum[b]) - below
                out.append((j, k, lo_p, hi_p, k - below, count))
    return out


def targets_for(pending: list[Request], n_entries: int, tuning: ScanTuning) -> tuple[Targets, dict]:
    """Per entry, the distinct ranges to look into: (low, high, shift, bins); bins == 0 asks
    for the values, else for counts over ``bins`` sub-ranges of 2^shift patterns each."""
    per: list[list[tuple[int, int, int, int]]] = [[] for _ in range(n_entries)]
    index: dict[tuple[int, int, int], int] = {}
    budget = tuning.refine_budget
    for j, _, lo_p, hi_p, _, count in sorted(pending, key=lambda r: r[5]):  # smallest first
        if (j, lo_p, hi_p) in index:
            continue
        if count <= min(tuning.refine_cap, budget):
            budget -= count
            t = (lo_p, hi_p, 0, 0)
        else:
            width = hi_p - lo_p
            shift = max(0, width.bit_length() - 16)
            t = (lo_p, hi_p, shift, ((width - 1) >> shift) + 1)
        index[(j, lo_p, hi_p)] = len(per[j])
        per[j].append(t)
    return tuple(tuple(p) for p in per), index


def refine(pending: list[Request], index: dict, targets: Targets, more: BlockPartial,
           resolved: list[dict[int, float]]) -> list[Request]:
    """Settle the requests a refinement pass collected values for (into ``resolved``); the
    others narrow to the sub-range holding their rank, for the next pass."""
    out: list[Request] = []
    for j, k, lo_p, hi_p, rank, count in pending:
        t_i = index[(j, lo_p, hi_p)]
        _, _, shift, nbins = targets[j][t_i]
        got = more.formats[j].collected[t_i]  # type: ignore[index]
        if nbins == 0:
            resolved[j][k] = float(np.partition(got, rank)[rank])
            continue
        new_lo, new_hi, new_rank, count = pick(lo_p, hi_p, shift, nbins, got, rank)
        out.append((j, k, new_lo, new_hi, new_rank, count))
    return out


def quantile_values(
    fp: FormatPartial, mode: Any, resolved: dict[int, float]
) -> tuple[float | None, float | None]:
    """(p50, p99) of the relative errors of one format, or (None, None) without any."""
    n = fp.compared
    if not n or mode is False:
        return None, None
    out: list[float] = []
    cum = np.cumsum(fp.rel_hist) if fp.rel_hist is not None else np.zeros(1, np.int64)

    def stat(k: int) -> float:
        value = known(fp, cum, k)
        if value is not None:
            return value
        if mode == "exact":
            if fp.rel_values is not None:  # every value kept (small input)
                vals, counts = fp.rel_values
                return float(vals[_bucket_of(np.cumsum(counts), k)])
            return resolved[k]
        b = _bucket_of(cum, k)
        lo_b, hi_b = rel_bin_bounds(b)
        if b == 0:
            lo_b = 0.0
        mid = fp.max_rel if not math.isfinite(hi_b) else (lo_b + hi_b) / 2
        return min(mid, fp.max_rel)

    for lo, hi, t in _order_stats(n):
        out.append(_lerp(stat(lo), stat(hi), t))
    return out[0], out[1]
