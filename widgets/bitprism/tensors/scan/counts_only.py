"""The counts-only scan of one block: every class count is a count of bit patterns in a range.

Rounding is monotone, so for a format whose thresholds are the same for both signs each class
of a cast is a range of ``|x|``: overflow is ``[overflow_from, Inf)``, underflow
``(0, nonzero_from)``, subnormal ``[nonzero_from, normal_from)``. Non-negative IEEE values are
ordered like their bit patterns, so with G(p) = #(magnitude pattern >= p) each count is a
difference of two G values, and the input's own classes (zero, subnormal, Inf, NaN) are too.
``pattern_counts.block_counts`` gets every G of a block in one pass, chunk by chunk; positions
("where") come from an early-exit search of only the chunks whose counts say they hold some,
so a single NaN at the end of a large tensor costs no extra pass.

Used by ``block.scan_block`` when the scan is counts-only, every format is a plain,
sign-symmetric one and numba is installed; anything else takes the general path. Tests hold
the two paths equal.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache
from typing import Iterator

import numpy as np

from ...formats import get_format
from ...numerics.thresholds import pattern_at_least
from .compiled.pattern_counts import BlockCounts, block_counts, range_positions
from .partials import EXP_OFFSET, EXP_SLOTS, BlockPartial, FormatPartial, InputPartial
from .plan import Locator, ScanPlan

__all__ = ["count_block", "eligible"]


def eligible(spec: ScanPlan) -> bool:
    """True when ``count_block`` computes this spec's block partials: a counts-only scan of
    plain, sign-symmetric formats, with the compiled kernel (numpy alone needs a pass per cut
    here, slower than the general path's exponent-histogram shortcuts)."""
    return (
        spec.tuning.uses_compiled
        and spec.mode is False
        and spec.targets is None
        and not spec.hooks
        and all(e.fmt is not None and e.symmetric for e in spec.entries)
    )


@dataclass(frozen=True)
class _Cuts:
    """What a counts-only scan compares with, in the carrier's bit patterns."""

    dtype: np.dtype  # uint32 (float32 carrier) or uint64 (float64)
    t: int  # significand bits of the carrier
    cuts: np.ndarray  # ascending magnitude patterns
    index: dict[int, int]  # pattern -> position in cuts
    inf: int
    p_sub: int  # magnitudes in [1, p_sub) are the input's subnormals
    entries: tuple[tuple[int, int | None, int | None, bool], ...]  # po, pz, pn, subnormals


@lru_cache(maxsize=64)
def _cuts(spec: ScanPlan, input_dtype: np.dtype) -> _Cuts:
    wide = not spec.carrier32
    dt, t = (np.dtype(np.uint64), 52) if wide else (np.dtype(np.uint32), 23)
    width = dt.itemsize * 8
    inf = ((1 << (width - 1 - t)) - 1) << t
    if spec.exponents or spec.scale is not None or input_dtype.kind in "iub":
        p_sub = 1 << t  # the carrier's smallest normal; the histogram tells the rest
    else:
        p_sub = pattern_at_least(float(get_format(input_dtype).smallest_normal), wide)
    cuts = {1, inf, inf + 1, p_sub}
    entries = []
    for e in spec.entries:
        assert e.pos is not None and e.fmt is not None  # eligible(): plain, symmetric
        po = pattern_at_least(e.pos.overflow_from, wide)
        pz = pattern_at_least(e.pos.nonzero_from, wide) if e.fmt.has_zero else None
        pn = pattern_at_least(e.pos.normal_from, wide) if e.fmt.has_zero else None
        subs = e.fmt.has_subnormals and spec.options.subnormals != "flush"
        entries.append((po, pz, pn, subs))
        cuts.update(p for p in (po, pz, pn) if p is not None)
    ordered = sorted(cuts)
    arr = np.array(ordered, dt)
    arr.setflags(write=False)
    return _Cuts(dt, t, arr, {p: k for k, p in enumerate(ordered)}, inf, p_sub, tuple(entries))


def _pieces(flat: np.ndarray, spec: ScanPlan) -> Iterator[tuple[int, np.ndarray]]:
    """(offset, carrier bit patterns) of the block: the block itself when the data already is
    the carrier, else converted ``tuning.convert_piece`` elements at a time (memory stays small)."""
    if spec.carrier32 and flat.dtype == np.float32:
        yield 0, np.ascontiguousarray(flat).view(np.uint32)
        return
    if not spec.carrier32 and flat.dtype == np.float64 and spec.scale is None:
        yield 0, np.ascontiguousarray(flat).view(np.uint64)
        return
    carrier = np.float32 if spec.carrier32 else np.float64
    piece = spec.tuning.convert_piece
    buf = np.empty(min(piece, flat.size), carrier)
    for at in range(0, flat.size, piece):
        x = buf[: min(piece, flat.size - at)]
        with np.errstate(invalid="ignore"):  # exact: the carrier holds it; signaling NaNs quietly
            np.copyto(x, flat[at : at + x.size], casting="unsafe")
        if spec.scale is not None:
            # beyond float64: Inf, as the cast sees it; signaling NaNs stay NaN, quietly
            with np.errstate(over="ignore", invalid="ignore"):
                np.multiply(x, spec.scale, out=x)
        yield at, x.view(np.uint32 if spec.carrier32 else np.uint64)


def _value(pattern: int, dtype: np.dtype) -> float:
    return float(np.array([pattern], dtype).view(np.float32 if dtype.itemsize == 4 else np.float64)[0])


def count_block(flat: np.ndarray, loc: Locator, spec: ScanPlan) -> BlockPartial:
    """Partial result of one block of a counts-only scan (``eligible(spec)`` must hold)."""
    flat = flat.reshape(-1)
    plan = _cuts(spec, flat.dtype)
    inf, dt = plan.inf, plan.dtype
    sign = 1 << (dt.itemsize * 8 - 1)
    limit = spec.limit
    # per kind: (low pattern, high pattern) of its magnitude range
    ranges = [(inf + 1, sign), (inf, inf + 1)]
    for po, pz, pn, _ in plan.entries:
        ranges += [(po, inf), (1, pz or 1), (pz or 1, pn or 1)]
    totals = np.zeros(len(ranges), np.int64)
    found: list[list[np.ndarray]] = [[] for _ in ranges]
    need = [limit] * len(ranges)
    n = zero = csub = 0
    lo, hi = math.inf, -math.inf
    exps: np.ndarray | None = None
    for at, bits in _pieces(flat, spec):
        compiled = bits.size >= spec.tuning.compiled_min
        bc = block_counts(bits, plan.t, plan.cuts, spec.exponents, compiled=compiled)
        g = bc.at_least
        ix = plan.index
        k = int(bits.size)
        nan = int(g[ix[inf + 1]])
        counts = [nan, int(g[ix[inf]]) - nan]
        for po, pz, pn, subs in plan.entries:
            ov = int(g[ix[po]] - g[ix[inf]]) if po <= inf else 0
            uf = int(g[ix[1]] - g[ix[pz]]) if pz is not None else 0
            sb = int(g[ix[pz]] - g[ix[pn]]) if pz is not None and pn is not None and subs else 0
            counts += [ov, uf, sb]
        totals += counts
        todo = [r for r, c in enumerate(counts) if c and need[r] > 0]
        if todo:
            wanted = [ranges[r] for r in todo]
            got = range_positions(
                bits, wanted, [min(need[r], counts[r]) for r in todo], bc.chunk_at_least,
                columns=[(ix[lo], ix.get(hi, -1)) for lo, hi in wanted], compiled=compiled,
            )
            for r, pos in zip(todo, got):
                found[r].append(loc.to_global(pos + at))
                need[r] -= pos.size
        piece_zero = k - int(g[ix[1]])
        p_lo, p_hi = _extremes(bc, piece_zero, dt)
        lo, hi = min(lo, p_lo), max(hi, p_hi)
        n += k
        zero += piece_zero
        csub += int(g[ix[1]] - g[ix[plan.p_sub]])
        if bc.exponents is not None:
            exps = bc.exponents if exps is None else exps + bc.exponents
    exponents = np.zeros(EXP_SLOTS, np.int64)
    if exps is not None:
        width = dt.itemsize * 8
        e_top = inf >> plan.t
        bias = (1 << (width - 2 - plan.t)) - 1
        exponents[np.arange(1, e_top) - bias + EXP_OFFSET] = exps[1:e_top]

    def where(r: int) -> np.ndarray:
        return np.concatenate(found[r]) if found[r] else np.zeros(0, np.int64)

    t = [int(v) for v in totals]
    inp = InputPartial(n, t[0], t[1], zero, csub, lo, hi, exponents, where(0), where(1))
    fps = tuple(
        FormatPartial(
            t[2 + 3 * j], t[3 + 3 * j], t[4 + 3 * j],
            where_overflow=where(2 + 3 * j),
            where_underflow=where(3 + 3 * j),
            where_subnormal=where(4 + 3 * j),
        )
        for j in range(len(plan.entries))
    )
    return BlockPartial(limit, inp, fps)


def _extremes(bc: BlockCounts, zero: int, dt: np.dtype) -> tuple[float, float]:
    """(min, max) over the non-NaN values of the block (Inf included) from the extreme
    patterns; (Inf, -Inf) when there is none, as ``InputPartial`` expects. Without positive
    values or zero the largest value is minus the smallest magnitude (all are negative), and
    the other way round for the smallest value."""
    sign = 1 << (dt.itemsize * 8 - 1)
    if bc.has_pos_inf:
        hi = math.inf
    elif bc.pos_max is not None:
        hi = _value(bc.pos_max, dt)
    elif zero:
        hi = 0.0
    elif bc.min_magnitude is not None:
        hi = _value(bc.min_magnitude | sign, dt)
    else:
        hi = -math.inf  # only -Inf (or nothing but NaN)
    if bc.has_neg_inf:
        lo = -math.inf
    elif bc.neg_max is not None:
        lo = _value(bc.neg_max, dt)
    elif zero:
        lo = 0.0
    elif bc.min_magnitude is not None:
        lo = _value(bc.min_magnitude, dt)
    else:
        lo = math.inf  # only +Inf (or nothing but NaN)
    return lo, hi
