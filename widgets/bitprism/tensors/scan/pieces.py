"""The first steps of a block scan, per cache-sized piece: the data as the cast reads it, the
input's own statistics, and class counts by thresholds.

* ``Scratch``: buffers reused by every piece of a block (no fresh pages per piece).
* ``read_piece``: the piece as the cast reads it (the *carrier*: float32 or float64 bit
  patterns) and, where errors are measured, as float64.
* ``InputStats``: what the block says about the input itself: NaN, Inf, zero and subnormal
  counts, extrema, the exponent-field histogram, positions of NaN and Inf.
* ``PatternCounter``: #(|x| >= T) for thresholds T as bit-pattern comparisons; whole binades
  are read off the exponent histogram, so most thresholds need no comparison at all.
* ``count_threshold_classes`` / ``count_ranges``: a plain format's overflow and invalid
  counts (every scan) and underflow and subnormal counts (counts-only scans) from its
  thresholds.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Callable

import numpy as np

from ...formats import Format
from ...numerics.kernel import SOURCE32, SOURCE64
from ...numerics.thresholds import pattern_at_least
from .accumulators import EntryAcc
from .partials import EXP_OFFSET, EXP_SLOTS, InputPartial
from .plan import Entry, Locator, ScanPlan

__all__ = [
    "InputStats",
    "PatternCounter",
    "Piece",
    "Scratch",
    "count_ranges",
    "count_threshold_classes",
    "read_piece",
]

_FLOAT_BUFFERS = ("x64", "xe", "x0", "ax", "den", "err", "rel", "q", "sq", "u")


class Scratch:
    """Buffers of one block scan, each as long as one piece."""

    def __init__(self, plan: ScanPlan, size: int, piece: int) -> None:
        n = min(piece, max(size, 1))
        self.f: dict[str, np.ndarray] = {name: np.empty(n) for name in _FLOAT_BUFFERS}
        self.keys = np.empty(n, np.int64)
        self.code_index = np.empty(n, np.intp)  # codes as gather indices
        self.table_index = np.empty(n, np.intp)  # float32 table index, shared by table formats
        self.table_low = np.empty(n, np.uint32)
        self.codes = {
            dt: np.empty(n, dt) for dt in {e.fmt.code_dtype for e in plan.entries if e.fmt is not None}
        }
        self.nan = np.empty(n, bool)
        self.keep = np.empty(n, bool)


@dataclass
class Piece:
    """One piece of a block: the raw elements, the carrier and its bit patterns.

    ``x64`` is the piece as float64 (None when nothing needs it: a counts-only scan of float32
    data); ``a`` holds the magnitude patterns (sign bit cleared)."""

    at: int
    xs: np.ndarray
    carrier: np.ndarray
    x64: np.ndarray | None
    bits: np.ndarray
    a: np.ndarray
    wide: bool

    @property
    def k(self) -> int:
        return int(self.xs.size)

    @property
    def source(self) -> Any:
        return SOURCE64 if self.wide else SOURCE32


def read_piece(xs: np.ndarray, at: int, plan: ScanPlan, scratch: Scratch) -> Piece:
    """The piece as the cast reads it: scaled data and integers in float64, float32 and the
    narrower floats in float32 (exact), float64 as it is."""
    k = xs.size
    wide = not plan.carrier32
    need64 = plan.full or plan.hooks
    x64: np.ndarray | None
    with np.errstate(invalid="ignore"):  # signaling NaNs convert quietly
        if plan.scale is not None:
            x64 = scratch.f["x64"][:k]
            np.copyto(x64, xs, casting="unsafe")  # exact: every input dtype fits float64
            np.multiply(x64, plan.scale, out=x64)
            carrier = x64
        elif wide:
            if xs.dtype == np.float64:
                x64 = xs
            else:
                x64 = scratch.f["x64"][:k]
                np.copyto(x64, xs, casting="unsafe")
            carrier = x64
        else:
            carrier = xs if xs.dtype == np.float32 else xs.astype(np.float32)
            x64 = None
            if need64:
                x64 = scratch.f["x64"][:k]
                np.copyto(x64, carrier)
    src = SOURCE64 if wide else SOURCE32
    bits: np.ndarray = carrier.view(src.uint)
    a = np.bitwise_and(bits, src.uint(src.abs_mask))
    return Piece(at, xs, carrier, x64, bits, a, wide)


@dataclass
class PieceClasses:
    """The input classes of one piece: zeros, non-finite (Inf and NaN), NaN, and the
    exponent-field histogram with its suffix sums (None on a refinement pass)."""

    zero: int
    nonfinite: int
    nan: int
    histogram: np.ndarray | None = None
    suffix: np.ndarray | None = None


class InputStats:
    """Accumulates what a block says about the input itself (``InputPartial``)."""

    def __init__(self, limit: int, wide: bool) -> None:
        self.limit = limit
        self.wide = wide
        src = SOURCE64 if wide else SOURCE32
        self.e_top = (1 << src.exponent_bits) - 1
        self.n = self.nan = self.inf = self.zero = self.carrier_subnormal = 0
        self.lo, self.hi = math.inf, -math.inf
        self.exponent_fields = np.zeros(self.e_top + 1, np.int64)
        self.where_nan: list[np.ndarray] = []
        self.where_inf: list[np.ndarray] = []
        self.found_nan = self.found_inf = 0

    def add(self, p: Piece, loc: Locator) -> PieceClasses:
        """Count the piece's classes, extrema and exponent fields; note NaN/Inf positions."""
        src = p.source
        inf_bits = src.uint(src.inf_bits)
        e = np.right_shift(p.a, src.uint(src.t))
        h = np.bincount(e, minlength=self.e_top + 1)
        # suffix[E] = #(|x| pattern >= E << t): whole binades need no comparison
        suffix = np.cumsum(h[::-1])[::-1]
        h_all = h.copy()
        z = int(np.count_nonzero(p.a == 0))
        nf = int(h[self.e_top])  # Inf and NaN
        nan = int(np.count_nonzero(p.a > inf_bits)) if nf else 0
        self.n += p.k
        self.nan += nan
        self.inf += nf - nan
        self.zero += z
        self.carrier_subnormal += int(h[0]) - z
        h[0] = 0
        h[self.e_top] = 0
        self.exponent_fields += h
        if p.k > nan:
            if nan:
                self.lo = min(self.lo, float(np.fmin.reduce(p.carrier)))
                self.hi = max(self.hi, float(np.fmax.reduce(p.carrier)))
            else:
                self.lo = min(self.lo, float(p.carrier.min()))
                self.hi = max(self.hi, float(p.carrier.max()))
        if nan and self.found_nan < self.limit:
            idx = np.flatnonzero(p.a > inf_bits)[: self.limit - self.found_nan]
            self.where_nan.append(loc.to_global(idx + p.at))
            self.found_nan += idx.size
        if nf > nan and self.found_inf < self.limit:
            idx = np.flatnonzero(p.a == inf_bits)[: self.limit - self.found_inf]
            self.where_inf.append(loc.to_global(idx + p.at))
            self.found_inf += idx.size
        return PieceClasses(z, nf, nan, h_all, suffix)

    @staticmethod
    def classes_only(p: Piece) -> PieceClasses:
        """What a refinement pass needs of the input: zeros and non-finite elements."""
        src = p.source
        z = int(np.count_nonzero(p.a == 0))
        nf = int(np.count_nonzero(p.a >= src.uint(src.inf_bits)))
        return PieceClasses(z, nf, 0)

    def freeze(self) -> InputPartial:
        src = SOURCE64 if self.wide else SOURCE32
        exponents = np.zeros(EXP_SLOTS, np.int64)
        ex = np.arange(1, self.e_top) - src.bias + EXP_OFFSET
        exponents[ex] = self.exponent_fields[1 : self.e_top]
        return InputPartial(
            self.n, self.nan, self.inf, self.zero, self.carrier_subnormal, self.lo, self.hi,
            exponents, _cat(self.where_nan), _cat(self.where_inf),
        )


def _cat(parts: list[np.ndarray]) -> np.ndarray:
    return np.concatenate(parts) if parts else np.zeros(0, np.int64)


class PatternCounter:
    """#(elements of a piece) at or above a pattern, memoised per piece.

    Sides: "abs" compares magnitudes; "pos" non-negative values (0 <= x, |x| >= T: patterns
    in [p, sign bit)); "neg" negative values; "sgn" counts every pattern with the sign bit."""

    def __init__(self, p: Piece, classes: PieceClasses) -> None:
        self.p = p
        self.classes = classes
        src = p.source
        self.uint = src.uint
        self.t = src.t
        self.e_top = (1 << src.exponent_bits) - 1
        self.sign_bit = src.uint(1 << (src.width - 1))
        self.counted: dict[tuple[str, int], int] = {}

    def __call__(self, side: str, pattern: int) -> int:
        key = (side, pattern)
        if key not in self.counted:
            self.counted[key] = self._count(side, pattern)
        return self.counted[key]

    def _count(self, side: str, p: int) -> int:
        bits, a, uint = self.p.bits, self.p.a, self.uint
        h, suffix = self.classes.histogram, self.classes.suffix
        if side == "abs":
            eb = p >> self.t
            starts_binade = p & ((1 << self.t) - 1) == 0
            if h is not None and suffix is not None and (starts_binade or h[eb] == 0):
                # the threshold starts a binade, or its binade is empty in this piece
                start = eb if starts_binade else eb + 1
                return int(suffix[start]) if start <= self.e_top else 0
            return int(np.count_nonzero(a >= uint(p)))
        if side == "pos":
            return int(np.count_nonzero(bits >= uint(p))) - self("sgn", 0)
        if side == "neg":
            return int(np.count_nonzero(bits >= uint(p) + self.sign_bit))
        return int(np.count_nonzero(bits >= self.sign_bit))  # "sgn"

    def range_mask(self, side: str, p_lo: int, p_hi: int) -> Callable[[], np.ndarray]:
        """A function giving the mask of the elements in ``[p_lo, p_hi)`` on one side."""
        bits, a, uint, sign_bit = self.p.bits, self.p.a, self.uint, self.sign_bit

        def mask() -> np.ndarray:
            if side == "abs":
                return (a >= uint(p_lo)) & (a < uint(p_hi))
            if side == "pos":
                return (bits >= uint(p_lo)) & (bits < uint(p_hi))
            return (bits >= uint(p_lo) + sign_bit) & (bits < uint(p_hi) + sign_bit)

        return mask


def count_threshold_classes(
    acc: EntryAcc, entry: Entry, count: PatternCounter, p: Piece, loc: Locator, limit: int
) -> None:
    """Overflow (and, for unsigned formats, invalid) counts of a plain format, from its
    thresholds: the finite elements at or above ``overflow_from`` on each side."""
    assert entry.pos is not None
    src = p.source
    inf = int(src.inf_bits)
    uint, bits, a = src.uint, p.bits, p.a
    inf_bits = uint(inf)
    if entry.symmetric:
        po = pattern_at_least(entry.pos.overflow_from, p.wide)
        ov = count("abs", po) - count("abs", inf) if po <= inf else 0
        if ov:

            def ov_abs_mask(po: int = po) -> np.ndarray:
                return (a >= uint(po)) & (a < inf_bits)

            acc.note("overflow", limit, ov_abs_mask, loc, p.at)
        acc.overflow += ov
        return
    po = pattern_at_least(entry.pos.overflow_from, p.wide)
    ovp = count("pos", po) - count("pos", inf) if po <= inf else 0
    ovn = 0
    if entry.neg is not None:
        pn = pattern_at_least(entry.neg.overflow_from, p.wide)
        ovn = count("neg", pn) - count("neg", inf) if pn <= inf else 0
    else:
        pn = inf
        # negative nonzero finite values: patterns in (sign bit, sign bit | Inf)
        acc.invalid += count("sgn", 0) - count("neg", inf) - int(np.count_nonzero(bits == count.sign_bit))
    ov = ovp + ovn
    if ov:

        def ov_mask(po: int = po, pn: int = pn) -> np.ndarray:
            m = (bits >= uint(po)) & (bits < inf_bits)
            if pn < inf:
                m |= (bits >= uint(pn) + count.sign_bit) & (bits < inf_bits + count.sign_bit)
            return m

        acc.note("overflow", limit, ov_mask, loc, p.at)
    acc.overflow += ov


def count_ranges(
    acc: EntryAcc, entry: Entry, count: PatternCounter, p: Piece, loc: Locator, plan: ScanPlan
) -> None:
    """Counts-only scan: underflow ``(0, nonzero_from)`` and subnormal ``[nonzero_from,
    normal_from)`` counts of a plain format, and their first positions (both signs in one
    mask, so "first N" is by position)."""
    fmt = entry.fmt
    assert fmt is not None and entry.pos is not None
    if not fmt.has_zero:
        return
    if entry.symmetric:
        sides = [("abs", entry.pos)]
    else:
        sides = [("pos", entry.pos)] + ([("neg", entry.neg)] if entry.neg is not None else [])
    uf_masks, sb_masks = [], []
    for side, th in sides:
        assert th is not None
        pz = pattern_at_least(th.nonzero_from, p.wide)
        pnorm = pattern_at_least(th.normal_from, p.wide)
        if side == "abs":
            nonzero_all = p.k - count.classes.zero
        else:
            nonzero_all = count(side, 1)
        uf = nonzero_all - count(side, pz)
        sb = count(side, pz) - count(side, pnorm) if _keeps_subnormals(fmt, plan) else 0
        acc.underflow += uf
        acc.subnormal += sb
        if uf:
            uf_masks.append(count.range_mask(side, 1, pz))
        if sb:
            sb_masks.append(count.range_mask(side, pz, pnorm))
    if uf_masks:
        acc.note("underflow", plan.limit, _any(uf_masks), loc, p.at)
    if sb_masks:
        acc.note("subnormal", plan.limit, _any(sb_masks), loc, p.at)


def _keeps_subnormals(fmt: Format, plan: ScanPlan) -> bool:
    return fmt.has_subnormals and plan.options.subnormals != "flush"


def _any(masks: list[Callable[[], np.ndarray]]) -> Callable[[], np.ndarray]:
    def mask() -> np.ndarray:
        out = masks[0]()
        for m in masks[1:]:
            out |= m()
        return out

    return mask
