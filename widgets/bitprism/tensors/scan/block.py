"""One block of a scan: its partial result, computed in named steps over cache-sized pieces.

For each piece of the block (``pieces.read_piece``):

1. input statistics (``pieces.InputStats``): the input's own classes, extrema, exponents;
2. class counts by thresholds (``pieces.count_threshold_classes``; counts-only scans also
   ``pieces.count_ranges``), for every plain format;
3. cast codes (``measure.cast_codes``) or a block format's values (``measure.hook_values``);
4. error measures (``measure.measure``), then either the outcomes and error statistics of a
   first pass (``outcomes_from_codes`` / ``outcomes_from_values``, ``add_errors``) or the
   collection of a refinement pass (``collect``);

and at the end the accumulators are frozen into a ``BlockPartial``. A counts-only scan of
plain, sign-symmetric formats with the compiled kernel takes ``counts_only.count_block``
instead. ``floors`` (from the blocks merged so far) let a block skip elements that cannot
enter the "largest error" list; the merged result is the same.
"""

from __future__ import annotations

import numpy as np

from ...formats import Format
from . import counts_only
from .accumulators import EntryAcc, update_top
from .compiled import error_kernels
from .measure import (
    ErrorInputs,
    Measurement,
    block_ids,
    cast_codes,
    hook_values,
    measure,
    ulp_errors,
    uses_table,
)
from .partials import REL_BINS, BlockPartial, FormatPartial, InputPartial, rel_keys
from .pieces import (
    InputStats,
    PatternCounter,
    Piece,
    PieceClasses,
    Scratch,
    count_ranges,
    count_threshold_classes,
    read_piece,
)
from .plan import Entry, Locator, ScanPlan
from .sub_ranges import layout, log_bins, log_keys

__all__ = ["scan_block"]


def scan_block(
    values: np.ndarray,
    loc: Locator,
    plan: ScanPlan,
    seg: int,
    floors: tuple[float, ...] | None = None,
) -> BlockPartial:
    """Partial result of one block (any shape; read in C order). ``seg``: the length of the
    rows a block format's hook is run on."""
    flat = np.asarray(values).reshape(-1)
    if counts_only.eligible(plan):
        return counts_only.count_block(flat, loc, plan)
    piece = _piece_size(plan, seg)
    scratch = Scratch(plan, flat.size, piece)
    inputs = InputStats(plan.limit, not plan.carrier32)
    accs = [EntryAcc(plan, floors[j] if floors is not None else 0.0) for j in range(len(plan.entries))]
    if plan.collecting:
        assert plan.targets is not None
        for acc, targets in zip(accs, plan.targets):
            acc.collected = [[] for _ in targets]
    table = any(uses_table(e, plan) for e in plan.entries) and (plan.full or plan.collecting)
    for at in range(0, flat.size, piece):
        p = read_piece(flat[at : at + piece], at, plan, scratch)
        classes = InputStats.classes_only(p) if plan.collecting else inputs.add(p, loc)
        count = PatternCounter(p, classes)
        errs = ErrorInputs(p, classes, scratch, table) if plan.full or plan.hooks else None
        for j, entry in enumerate(plan.entries):
            _scan_entry(accs[j], j, entry, p, classes, count, errs, plan, scratch, loc, seg)
    if plan.collecting:
        return _collected_partial(accs, plan)
    fps = tuple(acc.freeze(e.hook is None) for acc, e in zip(accs, plan.entries))
    return BlockPartial(plan.limit, inputs.freeze(), fps)


def _piece_size(plan: ScanPlan, seg: int) -> int:
    """Elements per piece: cache-sized, and whole rows when a block format's hook needs them
    (pieces must start on a block boundary of every hook)."""
    size = plan.tuning.piece
    if not plan.hooks:
        return size
    hook_sizes = [e.block_size for e in plan.entries if e.hook is not None]
    if seg % 32 == 0 and all(size % bs == 0 and seg % bs == 0 for bs in hook_sizes):
        return size
    return max(1, size // seg) * seg


def _scan_entry(
    acc: EntryAcc,
    j: int,
    entry: Entry,
    p: Piece,
    classes: PieceClasses,
    count: PatternCounter,
    errs: ErrorInputs | None,
    plan: ScanPlan,
    scratch: Scratch,
    loc: Locator,
    seg: int,
) -> None:
    """Every step of one entry on one piece."""
    fmt = entry.fmt
    if fmt is not None and not plan.collecting:
        count_threshold_classes(acc, entry, count, p, loc, plan.limit)
    if not plan.full and entry.hook is None:
        count_ranges(acc, entry, count, p, loc, plan)
        return
    if plan.collecting and not plan.targets[j]:  # type: ignore[index]
        return  # every order statistic of this entry is known already
    assert errs is not None and p.x64 is not None  # a full scan or a hook entry reads float64
    if entry.hook is not None:
        m = measure(entry, None, hook_values(entry, p.x64, seg), p, errs, plan, scratch)
    else:
        codes = cast_codes(entry, p, errs, plan, scratch, loc)
        m = measure(entry, codes, None, p, errs, plan, scratch)
    if plan.collecting:
        collect(acc, j, m, plan)
        return
    if entry.hook is not None:
        outcomes_from_values(acc, entry, m, p, classes, errs, plan.limit, loc, seg)
        if not plan.full:
            return
    else:
        assert fmt is not None
        outcomes_from_codes(acc, fmt, m, p, classes, plan.limit, loc)
    add_errors(acc, fmt, m, p, errs, plan, scratch, loc)


def outcomes_from_values(
    acc: EntryAcc,
    entry: Entry,
    m: Measurement,
    p: Piece,
    classes: PieceClasses,
    errs: ErrorInputs,
    limit: int,
    loc: Locator,
    seg: int,
) -> None:
    """A block format's overflow, block NaN and underflow, from the values it gave: finite
    inputs made non-finite count as overflow, unless their block holds a NaN or Inf input (the
    shared scale is then NaN: block NaN, MX v1.0 §6.3); nonzero finite inputs made zero
    underflow."""
    assert p.x64 is not None
    if m.bad:
        assert m.bad_at is not None  # no NaN table for hooks: bad_at holds the left-out
        lost = m.bad_at[np.isfinite(p.x64[m.bad_at])]
        if lost.size and classes.nonfinite:
            src = p.source
            nf_blocks = block_ids(np.flatnonzero(p.a >= src.uint(src.inf_bits)), seg, entry.block_size)
            in_nan_block = np.isin(block_ids(lost, seg, entry.block_size), nf_blocks)
            acc.block_nan += int(np.count_nonzero(in_nan_block))
            lost = lost[~in_nan_block]
        acc.overflow += int(lost.size)
        acc.note_indices("overflow", limit, lost, loc, p.at)
    assert m.q is not None
    with np.errstate(invalid="ignore"):
        um = (m.q == 0) & (p.x64 != 0) & (errs.ax < np.inf)
    uf = int(np.count_nonzero(um))
    acc.underflow += uf
    if uf:

        def um_mask(um: np.ndarray = um) -> np.ndarray:
            return um

        acc.note("underflow", limit, um_mask, loc, p.at)


def outcomes_from_codes(
    acc: EntryAcc,
    fmt: Format,
    m: Measurement,
    p: Piece,
    classes: PieceClasses,
    limit: int,
    loc: Locator,
) -> None:
    """A plain format's underflow and subnormal counts from the codes (the cast's actual
    outcome); masks of zero and subnormal codes are built only where the counts need them (no
    compiled counts) or positions are still wanted."""
    if not fmt.has_zero:
        return
    codes = m.codes
    assert codes is not None
    src = p.source
    a = p.a
    inf_bits = src.uint(src.inf_bits)

    def zero_codes() -> np.ndarray:
        if not fmt.has_negative_zero:
            return codes == 0
        return np.bitwise_and(codes, codes.dtype.type(fmt.magnitude_mask)) == 0

    def sub_codes() -> np.ndarray:
        cm = np.bitwise_and(codes, codes.dtype.type(fmt.magnitude_mask))
        return np.subtract(cm, cm.dtype.type(1)) < cm.dtype.type((1 << fmt.t) - 1)

    if m.compiled is not None:
        nz = m.compiled.zero_magnitudes if fmt.has_negative_zero else m.compiled.zero_codes
    else:
        nz = int(np.count_nonzero(zero_codes()))
    uf = nz - classes.zero - (0 if fmt.has_nan else classes.nan)
    acc.underflow += uf
    if uf:

        def uf_mask() -> np.ndarray:
            return zero_codes() & (a != 0) & (a <= inf_bits)

        acc.note("underflow", limit, uf_mask, loc, p.at)
    if fmt.has_subnormals:
        sb = m.compiled.subnormal if m.compiled is not None else int(np.count_nonzero(sub_codes()))
        acc.subnormal += sb
        if sb:
            acc.note("subnormal", limit, sub_codes, loc, p.at)


def add_errors(
    acc: EntryAcc,
    fmt: Format | None,
    m: Measurement,
    p: Piece,
    errs: ErrorInputs,
    plan: ScanPlan,
    scratch: Scratch,
    loc: Locator,
) -> None:
    """The error figures of the compared elements (finite input and finite result): exact
    count, maxima, sums of squares (SQNR), ULP errors, the relative-error histogram or the
    kept values, and the largest errors."""
    k = p.k
    compared = k - m.bad
    acc.compared += compared
    acc.exact += m.compiled.exact if m.compiled is not None else int(np.count_nonzero(m.err == 0)) - m.bad
    if not compared:
        return
    emax = m.compiled.max_err if m.compiled is not None else float(m.err.max())
    acc.max_abs = max(acc.max_abs, emax)
    rmax = m.compiled.max_rel if m.compiled is not None else float(m.rel.max())
    acc.max_rel = max(acc.max_rel, rmax)
    # squares summed with einsum (not BLAS dot: same result on every machine)
    acc.sum_err2 += float(np.einsum("i,i->", m.err, m.err))
    sq = scratch.f["sq"][:k]
    if m.bad == errs.nonfinite:  # only the non-finite inputs are left out: shared sum
        acc.sum_x2 += errs.sum_x2()
    elif m.bad_at is None:
        keep = np.logical_not(m.nan_flags, out=scratch.keep[:k])
        np.multiply(errs.x0, keep, out=sq)
        acc.sum_x2 += float(np.einsum("i,i->", sq, sq))
    else:
        np.copyto(sq, errs.x0)
        sq[m.bad_at] = 0.0
        acc.sum_x2 += float(np.einsum("i,i->", sq, sq))
    if m.codes is not None:
        assert fmt is not None  # codes come from a plain format
        ue = ulp_errors(m, fmt, scratch, k)  # may reuse ``sq``: after the sums of squares
        acc.max_ulp = max(acc.max_ulp, m.compiled.max_ulp if m.compiled is not None else float(ue.max()))
        acc.sum_ulp += float(ue.sum())
    if acc.hist is not None:
        if plan.tuning.uses_compiled:
            acc.ones += error_kernels.bucket_rel(m.rel, acc.hist)
        else:
            acc.ones += int(np.count_nonzero(m.rel == 1.0))
            keys = rel_keys(m.rel, scratch.keys[:k], rmax)
            acc.hist += np.bincount(keys, minlength=REL_BINS)
        acc.hist[0] -= m.bad  # left out: relative error 0 in rel, not compared
    if acc.values is not None:
        if m.bad:
            kept = m.rel[~m.nan_flags] if m.bad_at is None else np.delete(m.rel, m.bad_at)
        else:
            kept = m.rel.copy()
        acc.values.append(kept)
    # largest errors: (error desc, index asc); only elements with error > 0
    limit = plan.limit
    if limit and emax > (acc.top_err[-1] if acc.top_err.size >= limit else acc.floor):
        update_top(acc, m.err, limit, loc, p.at)


def collect(acc: EntryAcc, j: int, m: Measurement, plan: ScanPlan) -> None:
    """Refinement pass: the values, or finer counts, of the relative errors inside each
    target range of this entry (left-out elements have rel 0, below every range)."""
    assert plan.targets is not None
    rel = m.rel
    u = rel.view(np.uint64)
    compiled = plan.tuning.uses_compiled
    for t_i, (lo_p, hi_p, shift, nbins) in enumerate(plan.targets[j]):
        if compiled and nbins == 0:
            acc.collected[t_i].append(error_kernels.range_values(rel, lo_p, hi_p))
            continue
        n_log = log_bins(hi_p - lo_p) if nbins else 0
        if nbins and not acc.collected[t_i]:  # one running count per block
            acc.collected[t_i].append(np.zeros(layout(lo_p, hi_p, nbins), np.int64))
        if compiled:
            error_kernels.range_counts(rel, lo_p, hi_p, shift, nbins, n_log, acc.collected[t_i][0])
            continue
        sel = u[(u >= np.uint64(lo_p)) & (u < np.uint64(hi_p))]
        if nbins == 0:
            acc.collected[t_i].append(sel.view(np.float64))
        else:  # counts by sub_ranges.layout
            counts = acc.collected[t_i][0]
            sub_keys = ((sel - np.uint64(lo_p)) >> np.uint64(shift)).astype(np.intp)
            counts[:nbins] += np.bincount(sub_keys, minlength=nbins)
            if n_log:
                counts[nbins : nbins + n_log] += np.bincount(
                    log_keys(np.uint64(hi_p - 1) - sel), minlength=n_log)
                counts[nbins + n_log :] += np.bincount(log_keys(sel - np.uint64(lo_p)), minlength=n_log)


def _collected_partial(accs: list[EntryAcc], plan: ScanPlan) -> BlockPartial:
    assert plan.targets is not None
    fps = tuple(
        FormatPartial(rel_hist=None, collected=tuple(
            _combine(parts, layout(t[0], t[1], t[3]) if t[3] else 0)
            for parts, t in zip(acc.collected, plan.targets[j])
        ))
        for j, acc in enumerate(accs)
    )
    return BlockPartial(plan.limit, InputPartial(), fps)


def _combine(parts: list[np.ndarray], nbins: int) -> np.ndarray:
    """One target's collection: values (nbins == 0) or counts over ``nbins`` finer ranges."""
    if nbins == 0:
        return np.concatenate(parts) if parts else np.zeros(0)
    out = np.zeros(nbins, np.int64)
    for p in parts:
        out += p
    return out
