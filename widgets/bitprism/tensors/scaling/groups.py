"""Per-channel and per-block scales: one power-of-two scale per group of elements.

* channel: one scale per index along ``axis`` (every element with that index, whatever its
  other indices); the base is the amax rule of each channel.
* block: one scale per ``block_size`` consecutive elements along ``axis`` (a short last block
  when the length is not a multiple, as ``mx_quantize`` converts it); the base is MX v1.0
  §6.3's shared exponent (``rules.mx_exponents``), and elements saturate (§6.3 clamps to the
  largest normal before rounding; clamping before or after gives the same value).

Objectives per group. With one scale per group, the squared errors of the groups add up, so
the tensor's SQNR is highest when each group's own error is smallest: each group takes its
best offset ``j`` from its base, independently. Offsets are tried upward from the amax rule
(``j = 0`` for channels; ``j = -1`` for blocks, where the MX rule can sit one binade above it):
below the amax rule nothing overflows and every value's error can only grow as the scale
shrinks (a coarser grid is never closer), so lower offsets never win. Going up, a value that
is normal keeps its error until it overflows, and an overflowing value's error only grows; only
values below the normal range can still gain, by at most their current error. A group stops
when its error less that bound is no better than its best (or when the cast makes one of its
values NaN or Inf, which every higher offset does too). Each step casts the data once.

The sweep of a grouped advice is the tensor sweep of the data multiplied by each group's base
scale, over a common offset ``k``; each value carries the weight ``4^-base`` so that squared
errors add up in the data's own units (``joint.py``).
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from fractions import Fraction
from typing import Any, Callable, Sequence

import numpy as np

from ...errors import BitprismError
from ...formats import Format
from ...numerics.codes import decode, encode_with
from ...numerics.options import CastOptions
from ...numerics.thresholds import cast_thresholds
from .advice import ScaleAdvice, sweepable
from .joint import BLOCK, joint_histogram
from .outcomes import sign_symmetric
from .quantile import P99, SLOTS, quantile, slot_histogram
from .rules import E8M0_MAX, E8M0_MIN, F64_MAX_EXP, F64_MIN_EXP, amax_exponent, amax_exponents, mx_exponents
from .sweep import candidate_range, sqnr_db, sweep_histogram

__all__ = ["GroupFigures", "Groups", "evaluate_groups", "group_advice", "group_layout"]


@dataclass(frozen=True)
class Groups:
    """How the elements of the data, with ``axis`` moved last and read in C order, fall into
    groups (channels or blocks)."""

    granularity: str
    axis: int
    length: int  # elements along the axis
    block_size: int | None
    count: int  # groups
    shape: tuple[int, ...]  # of the moved data

    @property
    def per_row(self) -> int:
        """Blocks per row of the moved data."""
        bs = self.block_size or 1
        return -(-self.length // bs)

    def ids(self, start: int, stop: int) -> np.ndarray:
        """Group of each flat position ``start .. stop-1``."""
        i = np.arange(start, stop, dtype=np.int64)
        if self.granularity == "channel":
            return i % self.length
        assert self.block_size is not None
        return (i // self.length) * self.per_row + (i % self.length) // self.block_size

    def scale_shape(self, data_ndim: int) -> tuple[int, ...]:
        """Shape of the per-group exponents as they are returned."""
        if self.granularity == "channel":
            return (self.length,)
        return self.shape[:-1] + (self.per_row,)

    def to_user(self, per_group: np.ndarray) -> np.ndarray:
        """Per-group values laid out as the data (channel: 1-D; block: ``axis`` in place)."""
        if self.granularity == "channel":
            return per_group
        return np.moveaxis(per_group.reshape(self.shape[:-1] + (self.per_row,)), -1, self.axis)


def group_layout(arr: np.ndarray, granularity: str, axis: Any, block_size: Any) -> tuple[Groups, np.ndarray]:
    """(groups, the data with ``axis`` moved last, C-contiguous)."""
    if arr.ndim == 0:
        raise BitprismError(f"granularity={granularity!r} needs at least one axis; got a scalar")
    ndim = arr.ndim
    if isinstance(axis, (bool, np.bool_)) or not isinstance(axis, (int, np.integer)) or not -ndim <= axis < ndim:
        raise BitprismError(
            f"axis must be an integer in {-ndim}..{ndim - 1} for data of shape {arr.shape}; got {axis!r}"
        )
    axis = int(axis) % ndim
    bs = None
    if granularity == "block":
        if isinstance(block_size, (bool, np.bool_)) or not isinstance(block_size, (int, np.integer)) or block_size < 1:
            raise BitprismError(f"block_size must be a positive integer, got {block_size!r}")
        bs = int(block_size)
    moved = np.ascontiguousarray(np.moveaxis(arr, axis, -1))
    length = int(moved.shape[-1])
    rows = int(moved.size // length) if length else 0
    count = length if granularity == "channel" else rows * (-(-length // (bs or 1)))
    return Groups(granularity, axis, length, bs, count, tuple(moved.shape)), moved


def _chunks(moved: np.ndarray) -> Any:
    """(start, stop, values as float64) of whole rows of the moved data, about ``BLOCK``
    elements at a time."""
    flat = moved.reshape(-1)
    step = max(1, BLOCK // max(1, moved.shape[-1])) * max(1, moved.shape[-1])
    for start in range(0, flat.size, step):
        stop = min(start + step, flat.size)
        block = flat[start:stop]
        if block.dtype.kind == "b":
            block = block.astype(np.uint8)
        yield start, stop, np.asarray(block, dtype=np.float64)


def group_amax(g: Groups, moved: np.ndarray) -> tuple[np.ndarray, int, int]:
    """(largest finite magnitude per group, NaN count, Inf count)."""
    amax = np.zeros(g.count)
    nans = infs = 0
    for start, _, x in _chunks(moved):
        a = np.abs(x)
        fin = np.isfinite(a)
        if not fin.all():
            n_nan = int(np.isnan(a).sum())
            nans += n_nan
            infs += int((~fin).sum()) - n_nan
            a = np.where(fin, a, 0.0)
        rows = a.reshape(-1, g.length)
        if g.granularity == "channel":
            np.maximum(amax, rows.max(axis=0), out=amax)
            continue
        assert g.block_size is not None
        width = g.per_row * g.block_size
        if width != g.length:  # zeros change no block's maximum
            rows = np.pad(rows, ((0, 0), (0, width - g.length)))
        first = start // g.length * g.per_row
        per = rows.reshape(rows.shape[0], g.per_row, g.block_size).max(axis=2).reshape(-1)
        amax[first : first + per.size] = per
    return amax, nans, infs


@dataclass(frozen=True)
class GroupFigures:
    """Per-group sums and counts of one cast with per-group exponents (the data's units)."""

    noise: np.ndarray
    signal: np.ndarray
    gain: np.ndarray  # squared error of the values below the normal range (what can still go)
    overflow: np.ndarray
    underflow: np.ndarray
    subnormal: np.ndarray
    nonfinite: np.ndarray
    compared: np.ndarray
    max_abs: float
    rel_error_p99: float | None = None  # over every group (scan's histogram mode), if asked

    def total(self, kind: str) -> int:
        return int(getattr(self, kind).sum())

    @property
    def sqnr_db(self) -> float | None:
        """The scan's SQNR of all groups (None when no value is compared)."""
        if not self.total("compared"):
            return None
        return sqnr_db(float(self.signal.sum()), float(self.noise.sum()))


def evaluate_groups(
    g: Groups, moved: np.ndarray, exps: np.ndarray, fmt: Format, options: CastOptions,
    p99: bool = False,
) -> GroupFigures:
    """Cast the data multiplied by ``2^exps[group]`` and measure each group's error after
    dividing the scale back out; ``p99``: also the relative-error p99 of all groups, read as
    the scan's histogram mode reads it (within 0.4 %)."""
    pos = cast_thresholds(fmt, options, False).overflow_from
    neg = cast_thresholds(fmt, options, True).overflow_from if fmt.signed else np.inf
    small = float(fmt.smallest_normal)
    sums = {k: np.zeros(g.count) for k in ("noise", "signal", "gain")}
    counts = {
        k: np.zeros(g.count, np.int64)
        for k in ("overflow", "underflow", "subnormal", "nonfinite", "compared")
    }
    max_abs = 0.0
    hist = np.zeros(SLOTS)
    for start, stop, x in _chunks(moved):
        ids = g.ids(start, stop)
        k = exps[ids]
        y = np.ldexp(x, k)
        with np.errstate(invalid="ignore", over="ignore"):
            q = np.asarray(decode(encode_with(y, fmt, options), fmt), dtype=np.float64)
        fin_x, fin_q = np.isfinite(x), np.isfinite(q)
        comp = fin_x & fin_q
        err = np.where(comp, np.ldexp(np.where(fin_q, q, 0.0), -k) - np.where(fin_x, x, 0.0), 0.0)
        e2 = err * err
        low = comp & (((q == 0) & (x != 0)) | ((q != 0) & (np.abs(q) < small)))
        sums["noise"] += np.bincount(ids, e2, g.count)
        sums["signal"] += np.bincount(ids, np.where(comp, x * x, 0.0), g.count)
        sums["gain"] += np.bincount(ids, np.where(low, e2, 0.0), g.count)
        with np.errstate(invalid="ignore"):
            over = fin_x & (np.abs(y) >= np.where(y < 0, neg, pos))
        counts["overflow"] += np.bincount(ids[over], minlength=g.count)
        counts["underflow"] += np.bincount(ids[comp & (q == 0) & (x != 0)], minlength=g.count)
        counts["subnormal"] += np.bincount(ids[comp & (q != 0) & (np.abs(q) < small)], minlength=g.count)
        counts["nonfinite"] += np.bincount(ids[fin_x & ~fin_q], minlength=g.count)
        counts["compared"] += np.bincount(ids[comp], minlength=g.count)
        if err.size:
            max_abs = max(max_abs, float(np.abs(err).max()))
        if p99:
            hist += slot_histogram(np.abs(err[comp]), np.abs(x[comp]))
    return GroupFigures(max_abs=max_abs, rel_error_p99=quantile(hist, P99) if p99 else None,
                        **sums, **counts)


def _best_offsets(
    g: Groups, moved: np.ndarray, base: np.ndarray, rule: np.ndarray, fmt: Format,
    options: CastOptions, objective: str, start: int, limits: tuple[int, int],
) -> np.ndarray:
    """Each group's best offset from ``base`` (module notes), trying ``start, start+1, ...``;
    a group whose amax-rule offset ``rule`` is as good as its best (to rounding) keeps it."""
    best = np.full(g.count, np.inf)
    at_rule = np.full(g.count, np.inf)
    choice = np.full(g.count, start, np.int64)
    active = np.ones(g.count, bool)
    j = start
    while active.any():
        exps = np.clip(base + j, *limits)
        fig = evaluate_groups(g, moved, exps, fmt, options)
        bad = fig.nonfinite > 0
        if objective == "no_overflow":
            bad |= fig.overflow > 0
        ok = active & ~bad
        at_rule = np.where(ok & (rule == j), fig.noise, at_rule)
        better = ok & (fig.noise < best)
        best = np.where(better, fig.noise, best)
        choice = np.where(better, j, choice)
        # nothing can improve a group once a value is made NaN/Inf, or once its error less
        # what its values below the normal range could still gain is no better than its best
        done = bad | (fig.noise - fig.gain >= best) | (base + j >= limits[1])
        active &= ~done
        j += 1
    tie = at_rule <= best * (1 + 1e-9)  # equal to rounding: the amax rule it is
    return np.where(tie, rule, choice)


def _transform(g: Groups, base: np.ndarray) -> tuple[Callable[..., np.ndarray], Callable[..., np.ndarray]]:
    def transform(block: np.ndarray, start: int, stop: int) -> np.ndarray:
        x = block.astype(np.uint8) if block.dtype.kind == "b" else block
        return np.ldexp(np.asarray(x, dtype=np.float64), base[g.ids(start, stop)])

    def weights(start: int, stop: int) -> np.ndarray:
        return np.ldexp(1.0, -2 * base[g.ids(start, stop)])

    return transform, weights


def group_advice(
    arr: np.ndarray, f: Format, granularity: str, axis: Any, block_size: Any, objective: str,
    margin: int, formats: Sequence[Any] | None, options: CastOptions, progress: bool,
) -> ScaleAdvice:
    """``suggest_scale`` for ``granularity`` "channel" or "block" (see the module notes)."""
    g, moved = group_layout(arr, granularity, axis, block_size)
    why_not = sweepable(f, options)
    if why_not is not None:
        raise BitprismError(f"per-{granularity} scales are judged by the sweep, and {why_not}")
    if granularity == "block":
        options = CastOptions(options.rounding, "saturate", options.subnormals)
    amax_g, nans, infs = group_amax(g, moved)
    if not f.signed:
        negatives = int(sum(np.count_nonzero((x < 0) & np.isfinite(x)) for _, _, x in _chunks(moved)))
        if negatives:
            raise BitprismError(
                f"{f.name} is unsigned and the tensor holds {negatives} negative values: they "
                "become NaN at every scale; cast |x|, or choose a signed format"
            )
    if granularity == "channel":
        base, limits, start, rule = amax_exponents(f, amax_g), (F64_MIN_EXP, F64_MAX_EXP), 0, "channel amax rule"
    else:
        base, limits, start, rule = mx_exponents(f, amax_g), (-E8M0_MAX, -E8M0_MIN), -1, "block MX rule"
    has = amax_g > 0
    if objective == "amax":
        offsets = np.zeros(g.count, np.int64)
    else:
        rule_offsets = np.clip(amax_exponents(f, amax_g), *limits) - base
        offsets = _best_offsets(g, moved, base, rule_offsets, f, options, objective, start, limits)
    exps = np.where(has, np.clip(base + offsets - margin, *limits), base)
    final = evaluate_groups(g, moved, exps, f, options)
    transform, weights = _transform(g, base)
    h = joint_histogram(moved, f.significand_bits, transform=transform, weights=weights,
                        signs=not sign_symmetric(f, options))
    sw = None
    if h.amax > 0:
        ks = candidate_range(h, f, amax_exponent(f, h.amax)[0])
        sw = sweep_histogram(h, f, options, ks, relative_to=rule)
    notes = _notes(g, nans, infs, has, granularity)
    message = _group_message(g, exps[has], final, sw, objective, margin, rule)
    before = after = None
    columns = [f] if formats is None else list(formats)
    if columns:
        from ..scan import scan

        before = scan(arr, columns, options=options, progress=progress)
        stored = np.moveaxis(_scaled(moved, g, exps), -1, g.axis)
        after = _original_units(scan(stored, columns, options=options, progress=progress), f, final)
    return ScaleAdvice(
        format=f, scale=None, scale_exact=None, exponent=None,
        amax=float(amax_g.max()) if amax_g.size else 0.0,
        target=f.max_finite / Fraction(2) ** margin,
        margin=margin, power_of_two=True, nan_count=nans, inf_count=infs, size=int(arr.size),
        message=message, before=before, after=after, objective=objective,
        granularity=granularity, exponents=g.to_user(exps), amax_exponent=None, sweep=sw,
        sqnr_db=final.sqnr_db, axis=g.axis, block_size=g.block_size, options=options,
        notes=tuple(notes),
    )


def _scaled(moved: np.ndarray, g: Groups, exps: np.ndarray) -> np.ndarray:
    out = np.empty(moved.shape, np.float64)
    flat = out.reshape(-1)
    for start, stop, x in _chunks(moved):
        flat[start:stop] = np.ldexp(x, exps[g.ids(start, stop)])
    return out


def _original_units(result: Any, f: Format, fig: GroupFigures) -> Any:
    """The after-scan with its SQNR and largest absolute error measured after dividing the
    scales back out (for ``f``; other columns lose those two figures: None)."""
    rows = []
    for row in result.formats:
        if row.format == f:
            rows.append(replace(row, sqnr_db=fig.sqnr_db, max_abs_error=fig.max_abs))
        else:
            rows.append(replace(row, sqnr_db=None, max_abs_error=None))
    return replace(result, formats=tuple(rows))


def _notes(g: Groups, nans: int, infs: int, has: np.ndarray, granularity: str) -> list[str]:
    notes = []
    empty = int((~has).sum())
    if empty:
        notes.append(f"{empty} {granularity}s hold no finite nonzero value: scale 2^0" if granularity == "channel"
                     else f"{empty} blocks hold no finite nonzero value: MX's smallest scale, 2^127")
    if nans or infs:
        notes.append(f"{nans} NaN and {infs} Inf stay as they are")
    if granularity == "block" and g.block_size and g.length % g.block_size:
        notes.append(
            f"the axis holds {g.length} elements: the last block of each row has "
            f"{g.length % g.block_size} of {g.block_size} (converted on its own, as mx_quantize does)"
        )
    if granularity == "block":
        notes.append("elements saturate at the largest normal (MX v1.0 §6.3 clamps)")
    return notes


def _group_message(
    g: Groups, exps: np.ndarray, fig: GroupFigures, sw: Any, objective: str, margin: int, rule: str
) -> str:
    if not exps.size:
        base = "2^0" if g.granularity == "channel" else "MX's smallest, 2^127"
        return f"no {g.granularity} holds a finite nonzero value: no amax to scale by; every scale {base}"
    span = f"2^{int(exps.min())}..2^{int(exps.max())}"
    head = f"{g.count} per-{g.granularity} scales {span}"
    what = {"amax": f"the {rule}", "sqnr": "best SQNR per group",
            "no_overflow": "best SQNR without overflow per group"}[objective]
    if margin:
        what += f", less a margin of {margin}"
    sqnr = fig.sqnr_db
    line = f"{head}: {what}" + (f", SQNR {sqnr:.1f} dB" if sqnr is not None else "")
    if objective != "amax" and sw is not None and 0 in sw.exponents:
        line += f"; the {rule} gives {sw.sqnr_db[sw.index(0)]:.1f} dB"
    return line
