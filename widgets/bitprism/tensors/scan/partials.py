"""Mergeable partial results of ``scan``: what one block of a tensor contributes.

A scan cuts the tensor into blocks, turns each block into a partial result, and merges the
partials. Every merge here is associative and commutative, so blocks may be scanned in any
order, on any worker, and merged in any tree shape:

* counts and histograms are integer sums;
* extrema are ``max`` / ``min`` (NaN-free by construction);
* "first N" index lists are the N smallest global flat indices of the union;
* "largest error" lists are the N best ``(error descending, flat index ascending)`` pairs of
  the union, a total order, so ties are broken the same way however the blocks fall;
* float sums are held exactly (``ExactSum``: an integer count of 2^-1074 units), so adding
  the partial sums of the blocks never rounds. The sum of one block is itself a float64 sum
  of that block's elements, so two different cuts of the same data may differ in the last bits
  of a sum (relative difference at most about n·2^-53); everything else is bit-identical
  however the data is cut;
* the relative-error histogram is keyed by the top bits of the float64 pattern of each
  relative error (see ``REL_SHIFT``), so bucket boundaries are exact powers-of-two fractions
  and the same value always lands in the same bucket.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from typing import Iterable

import numpy as np

__all__ = [
    "EXP_OFFSET",
    "EXP_SLOTS",
    "REL_BINS",
    "ExactSum",
    "FormatPartial",
    "InputPartial",
    "BlockPartial",
    "compress_values",
    "rel_bin_bounds",
    "rel_keys",
    "merge_blocks",
]

# Relative-error histogram: the float64 pattern of a non-negative value, shifted right by
# REL_SHIFT, keeps the 11 exponent bits and 52 - REL_SHIFT = 7 significand bits: 128 buckets
# per binade, each at most 2^-7 (0.8 %) wide relative to its lower edge. Binades from
# 2^REL_LOW_EXP to 2^REL_HIGH_EXP get their own buckets; bucket 0 holds [0, first edge) and the
# last bucket everything from 2^REL_HIGH_EXP up (Inf included).
REL_SHIFT = 45
REL_LOW_EXP = -64
REL_HIGH_EXP = 64
REL_BASE = (1023 + REL_LOW_EXP) << (52 - REL_SHIFT)
REL_BINS = (REL_HIGH_EXP - REL_LOW_EXP) << (52 - REL_SHIFT)

# Binary-exponent histogram of the input: slot e + EXP_OFFSET counts values with
# floor(log2|x|) == e; float64 reaches e = -1074 (smallest subnormal) and e = 1023.
EXP_OFFSET = 1100
EXP_SLOTS = 2200


def rel_keys(rel: np.ndarray, out: np.ndarray, top: float = math.inf) -> np.ndarray:
    """Histogram bucket (int64) of each non-negative float64 in ``rel`` (NaN must not occur).
    ``top``: an upper bound of ``rel`` if known (skips the clamp at the last bucket)."""
    u = out.view(np.uint64)
    # patterns below the first edge (0 included) are raised to it: bucket 0
    np.maximum(rel.view(np.uint64), np.uint64(REL_BASE << REL_SHIFT), out=u)
    np.right_shift(u, np.uint64(REL_SHIFT), out=u)
    np.subtract(u, np.uint64(REL_BASE), out=u)
    if not top < 2.0**REL_HIGH_EXP:
        np.minimum(u, np.uint64(REL_BINS - 1), out=u)
    return out


def rel_bin_bounds(b: int) -> tuple[float, float]:
    """[low, high) of relative-error bucket ``b`` (bucket 0 starts at 0, the last ends at Inf)."""
    def edge(k: int) -> float:
        return float(np.array([(k + REL_BASE) << REL_SHIFT], np.uint64).view(np.float64)[0])

    low = 0.0 if b == 0 else edge(b)
    high = math.inf if b == REL_BINS - 1 else edge(b + 1)
    return low, high


@dataclass(frozen=True)
class ExactSum:
    """A sum of float64 values held exactly: ``units`` counts 2^-1074 (the smallest float64
    subnormal), so every finite float64 is a whole number of units and integer addition never
    rounds. ``special`` carries +Inf or NaN once they occur (then the sum is that value)."""

    units: int = 0
    special: float = 0.0

    @staticmethod
    def of(value: float) -> "ExactSum":
        v = float(value)
        if not math.isfinite(v):
            return ExactSum(0, v)
        num, den = v.as_integer_ratio()  # den is a power of two <= 2^1074
        return ExactSum(num * ((1 << 1074) // den))

    def __add__(self, other: "ExactSum") -> "ExactSum":
        if not other.units and other.special == 0.0:  # adding nothing (counts-only scans)
            return self
        return ExactSum(self.units + other.units, self.special + other.special)

    def value(self) -> float:
        if self.special != 0.0 or math.isnan(self.special):
            return self.special
        try:
            return self.units / (1 << 1074)  # int / int: correctly rounded
        except OverflowError:
            return math.inf


def compress_values(parts: list[np.ndarray]) -> np.ndarray:
    """Sorted distinct values with their counts, as a (2, m) float64 array (counts are whole
    numbers, exact below 2^53). ``parts`` mixes plain 1-D value arrays and such pairs.
    Relative errors repeat a lot (1.0 for every value flushed to zero), so this stays small."""
    values: list[np.ndarray] = []
    weights: list[np.ndarray] = []
    for p in parts:
        if p.ndim == 1:
            values.append(p)
            weights.append(np.ones(p.size))
        else:
            values.append(p[0])
            weights.append(p[1])
    if not values:
        return np.zeros((2, 0))
    v = np.concatenate(values)
    if all(p.ndim == 1 for p in parts):  # every weight 1 (one block's values): a plain sort
        v.sort()  # v is a fresh array here (concatenate copies)
        if v.size and not np.isnan(v[-1]):  # NaNs sort last; np.unique below merges them
            new = np.empty(v.size, np.bool_)
            new[:1] = True
            np.not_equal(v[1:], v[:-1], out=new[1:])
            starts = np.flatnonzero(new)
            return np.stack((v[starts], np.diff(starts, append=v.size).astype(np.float64)))
    w = np.concatenate(weights)
    uniq, inv = np.unique(v, return_inverse=True)
    counts = np.bincount(inv.reshape(-1), weights=w, minlength=uniq.size)
    return np.stack((uniq, counts))


def _first(a: np.ndarray, b: np.ndarray, limit: int) -> np.ndarray:
    """The ``limit`` smallest indices of two ascending index lists."""
    if not b.size:
        return a
    if not a.size:
        return b
    if a[-1] < b[0]:  # blocks merged in order: no sort needed
        return a[:limit] if a.size >= limit else np.concatenate((a, b[: limit - a.size]))
    return np.sort(np.concatenate((a, b)))[:limit]


def _top(
    av: np.ndarray, ai: np.ndarray, bv: np.ndarray, bi: np.ndarray, limit: int
) -> tuple[np.ndarray, np.ndarray]:
    if not bv.size:  # each list is already in order and at most ``limit`` long
        return av, ai
    if not av.size:
        return bv, bi
    v = np.concatenate((av, bv))
    i = np.concatenate((ai, bi))
    order = np.lexsort((i, -v))[:limit]  # error descending, then index ascending
    return v[order], i[order]


def _read_only(a: np.ndarray) -> np.ndarray:
    a.setflags(write=False)
    return a


# shared by every partial that has none (read-only, so no partial can change another's)
_NO_INDICES = _read_only(np.zeros(0, np.int64))
_NO_ERRORS = _read_only(np.zeros(0, np.float64))


def _empty_i() -> np.ndarray:
    return _NO_INDICES


def _empty_f() -> np.ndarray:
    return _NO_ERRORS


@dataclass(frozen=True)
class InputPartial:
    """What one block says about the input itself (shared by every format)."""

    n: int = 0
    nan: int = 0
    inf: int = 0  # of either sign (min and max say which signs occur)
    zero: int = 0
    carrier_subnormal: int = 0
    min: float = math.inf  # over non-NaN values
    max: float = -math.inf
    exponents: np.ndarray = field(default_factory=lambda: np.zeros(EXP_SLOTS, np.int64))
    where_nan: np.ndarray = field(default_factory=_empty_i)
    where_inf: np.ndarray = field(default_factory=_empty_i)

    def merge(self, o: "InputPartial", limit: int) -> "InputPartial":
        return InputPartial(
            self.n + o.n,
            self.nan + o.nan,
            self.inf + o.inf,
            self.zero + o.zero,
            self.carrier_subnormal + o.carrier_subnormal,
            min(self.min, o.min),
            max(self.max, o.max),
            self.exponents + o.exponents,
            _first(self.where_nan, o.where_nan, limit),
            _first(self.where_inf, o.where_inf, limit),
        )


@dataclass(frozen=True)
class FormatPartial:
    """What one block says about one format. Error fields stay at their empty values in a
    counts-only scan; ``subnormal`` is -1 where the entry cannot tell (block-format hooks)."""

    overflow: int = 0
    underflow: int = 0
    subnormal: int = 0
    invalid: int = 0
    exact: int = 0
    compared: int = 0
    max_abs: float = 0.0
    max_rel: float = 0.0
    max_ulp: float = 0.0
    sum_x2: ExactSum = ExactSum()
    sum_err2: ExactSum = ExactSum()
    sum_ulp: ExactSum = ExactSum()
    rel_hist: np.ndarray | None = None
    rel_values: np.ndarray | None = None  # (2, m) values and counts: small inputs, second pass
    where_overflow: np.ndarray = field(default_factory=_empty_i)
    where_underflow: np.ndarray = field(default_factory=_empty_i)
    where_subnormal: np.ndarray = field(default_factory=_empty_i)
    top_err: np.ndarray = field(default_factory=_empty_f)
    top_idx: np.ndarray = field(default_factory=_empty_i)
    ones: int = 0  # compared elements with relative error exactly 1 (histogram modes)
    collected: tuple[np.ndarray, ...] | None = None  # refinement pass: values or counts
    block_nan: int = 0  # block formats: finite values made NaN by a NaN/Inf in their block

    def _merge_collected(self, o: "FormatPartial") -> tuple[np.ndarray, ...] | None:
        if self.collected is None or o.collected is None:
            return self.collected if o.collected is None else o.collected
        return tuple(
            np.concatenate((a, b)) if a.dtype.kind == "f" else a + b
            for a, b in zip(self.collected, o.collected)
        )

    def merge(self, o: "FormatPartial", limit: int) -> "FormatPartial":
        if self.rel_hist is None:
            hist = o.rel_hist
        elif o.rel_hist is None:
            hist = self.rel_hist
        else:
            hist = self.rel_hist + o.rel_hist
        if self.rel_values is None:
            values = o.rel_values
        elif o.rel_values is None:
            values = self.rel_values
        else:
            values = compress_values([self.rel_values, o.rel_values])
        top_err, top_idx = _top(self.top_err, self.top_idx, o.top_err, o.top_idx, limit)
        return FormatPartial(
            self.overflow + o.overflow,
            self.underflow + o.underflow,
            -1 if self.subnormal < 0 or o.subnormal < 0 else self.subnormal + o.subnormal,
            self.invalid + o.invalid,
            self.exact + o.exact,
            self.compared + o.compared,
            max(self.max_abs, o.max_abs),
            max(self.max_rel, o.max_rel),
            max(self.max_ulp, o.max_ulp),
            self.sum_x2 + o.sum_x2,
            self.sum_err2 + o.sum_err2,
            self.sum_ulp + o.sum_ulp,
            hist,
            values,
            _first(self.where_overflow, o.where_overflow, limit),
            _first(self.where_underflow, o.where_underflow, limit),
            _first(self.where_subnormal, o.where_subnormal, limit),
            top_err,
            top_idx,
            self.ones + o.ones,
            self._merge_collected(o),
            self.block_nan + o.block_nan,
        )

    def with_values(self, values: np.ndarray | None) -> "FormatPartial":
        return replace(self, rel_values=values)


@dataclass(frozen=True)
class BlockPartial:
    """One block's (or a merged group of blocks') partial result."""

    limit: int
    input: InputPartial
    formats: tuple[FormatPartial, ...]

    def merge(self, other: "BlockPartial") -> "BlockPartial":
        return BlockPartial(
            self.limit,
            self.input.merge(other.input, self.limit),
            tuple(a.merge(b, self.limit) for a, b in zip(self.formats, other.formats)),
        )


def merge_blocks(parts: Iterable[BlockPartial]) -> BlockPartial | None:
    """Merge any number of partials (None for none)."""
    out: BlockPartial | None = None
    for p in parts:
        out = p if out is None else out.merge(p)
    return out
