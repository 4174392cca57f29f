"""``compare_scaling``: no scaling, one scale per tensor, per channel and MX blocks, side by side.

Each row casts the same tensor into the same element format and measures, on the values as
they come back (each scale divided out again), the SQNR over the values whose result is finite,
the overflow (IEEE 754-2019 §7.4, as ``scan`` counts it: the value rounded with an unbounded
exponent range exceeds the largest finite one), the underflow to zero, the finite values made
NaN or Inf, and the storage the scales cost in bits per element:

* none: no scale, 0 bits;
* tensor: one float32 scale for the whole tensor (32 / size);
* channel: one float32 scale per index along ``axis`` (32 x channels / size);
* block: MX v1.0, one E8M0 scale (8 bits) per ``block_size`` elements along ``axis``, values
  exactly as ``mx_quantize`` stores them (shared exponent, clamp, one rounding; a block
  holding NaN or Inf gets the NaN scale). For an element format that is not one of MX's
  (e.g. float16) the same rule is applied with that element format.

The tensor and channel rows follow ``objective`` (``suggest_scale``); the block row is the MX
rule, whatever the objective, since that is what MX hardware stores.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass
from typing import Any, Sequence

import numpy as np

from ...display import Displayable
from ...errors import BitprismError
from ...formats import Format, FormatLike
from ...numerics.options import CastOptions
from ...numerics.thresholds import cast_thresholds
from ..mx import MX_FORMATS, MXFormat, mx_quantize
from .advice import GRANULARITIES, check_common, suggest_scale
from .groups import GroupFigures, Groups, evaluate_groups, group_layout
from .quantile import P99, quantile, slot_histogram
from .sweep import sqnr_db

__all__ = ["ScalingComparison", "ScalingRow", "compare_file", "compare_scaling", "mx_format_for"]

SCALE_BITS_F32 = 32  # a float32 scale
SCALE_BITS_E8M0 = 8  # MX v1.0 Table 7


@dataclass(frozen=True)
class ScalingRow:
    """One way of scaling: its figures on the tensor (see the module notes)."""

    granularity: str  # "none", "tensor", "channel", "block"
    rule: str  # how the scales were chosen
    scales: int
    bits_per_element: float
    sqnr_db: float | None
    rel_error_p99: float | None  # as the scan's histogram mode reads it (within 0.4 %)
    overflow: int
    underflow: int
    subnormal: int
    nonfinite: int
    exponent_range: tuple[int, int] | None  # smallest and largest scale exponent


@dataclass(frozen=True, eq=False)
class ScalingComparison(Displayable):
    """The rows of ``compare_scaling`` for one tensor and format."""

    format: Format
    objective: str
    axis: int
    block_size: int
    shape: tuple[int, ...]
    size: int
    rows: tuple[ScalingRow, ...]
    options: CastOptions
    notes: tuple[str, ...] = ()

    def __getitem__(self, granularity: str) -> ScalingRow:
        for r in self.rows:
            if r.granularity == granularity:
                return r
        raise KeyError(f"no row {granularity!r}; rows: {', '.join(r.granularity for r in self.rows)}")

    def records(self) -> list[dict[str, Any]]:
        """The rows as plain dicts (``dataclasses.asdict``), for JSON."""
        return [asdict(r) for r in self.rows]

    def __repr__(self) -> str:
        best = max(
            (r for r in self.rows if r.sqnr_db is not None and r.nonfinite == 0),
            key=lambda r: r.sqnr_db if r.sqnr_db is not None else -np.inf,
            default=None,
        )
        tail = f" best: {best.granularity} {best.sqnr_db:.1f} dB" if best is not None else ""
        return f"<ScalingComparison {self.format.name} {self.shape}{tail}>"


def mx_format_for(fmt: Format, block_size: int) -> MXFormat:
    """The MX format whose element is ``fmt`` (MX v1.0 Table 1), or one built the same way."""
    for mx in MX_FORMATS.values():
        if mx.element == fmt and mx.block_size == block_size:
            return mx
    return MXFormat(f"mx-{fmt.name}", fmt, fmt.emax, fmt.bits, block_size)


def _per_element(scales: np.ndarray, block_size: int, axis: int, length: int) -> np.ndarray:
    """Each element's block scale code, laid out as the data."""
    per = np.repeat(scales, block_size, axis=axis)
    return np.take(per, np.arange(length), axis=axis)


def _mx_row(arr: np.ndarray, fmt: Format, axis: int, block_size: int, rounding: Any) -> ScalingRow:
    mx = mx_format_for(fmt, block_size)
    res = mx_quantize(arr, mx, axis=axis, block_size=block_size, rounding=rounding)
    x = np.asarray(arr.astype(np.uint8) if arr.dtype.kind == "b" else arr, dtype=np.float64)
    v = res.values
    fin_x, fin_v = np.isfinite(x), np.isfinite(v)
    comp = fin_x & fin_v
    x0 = np.where(fin_x, x, 0.0)
    err = np.where(comp, v - x0, 0.0)
    # overflow as the scan counts it, on the ratio x / X each element is made from
    code = _per_element(res.scales.astype(np.int64), block_size, axis, arr.shape[axis])
    ratio = np.ldexp(x0, np.where(code == 0xFF, 0, 127 - code))
    opts = CastOptions(rounding)
    pos = cast_thresholds(fmt, opts, False).overflow_from
    neg = cast_thresholds(fmt, opts, True).overflow_from if fmt.signed else np.inf
    over = comp & (np.abs(ratio) >= np.where(ratio < 0, neg, pos))
    shared = res.scales[res.scales != 0xFF].astype(np.int64) - 127
    span = (int(-shared.max()), int(-shared.min())) if shared.size else None
    signal, noise = float(np.sum(np.where(comp, x0 * x0, 0.0))), float(np.sum(err * err))
    hist = slot_histogram(np.abs(err[comp]), np.abs(x0[comp]))
    sub = comp & (v != 0) & (np.abs(v) < np.ldexp(float(fmt.smallest_normal), code - 127))  # |v/X| < min normal
    return ScalingRow(
        "block", f"MX v1.0 shared exponent, {block_size} per E8M0 scale", int(res.scales.size),
        SCALE_BITS_E8M0 * res.scales.size / arr.size, sqnr_db(signal, noise) if comp.any() else None,
        quantile(hist, P99) if comp.any() else None, int(over.sum()), int(res.flushed),
        int(sub.sum()), int((fin_x & ~fin_v).sum()), span,
    )


def _row(granularity: str, rule: str, exps: np.ndarray, bits: float, fig: GroupFigures) -> ScalingRow:
    span = (int(exps.min()), int(exps.max())) if exps.size else None
    return ScalingRow(
        granularity, rule, int(exps.size) if granularity != "none" else 0, bits,
        fig.sqnr_db, fig.rel_error_p99, fig.total("overflow"),
        fig.total("underflow"), fig.total("subnormal"), fig.total("nonfinite"), span,
    )


def compare_scaling(
    data: Any,
    fmt: FormatLike,
    *,
    objective: str = "sqnr",
    axis: int = -1,
    block_size: int = 32,
    margin: int = 0,
    rounding: str = "roundTiesToEven",
    overflow: str = "standard",
    subnormals: str = "keep",
    granularities: Sequence[str] = ("tensor", "channel", "block"),
) -> ScalingComparison:
    """One table: no scaling, per tensor, per channel (along ``axis``) and MX blocks (of
    ``block_size`` along ``axis``), each with SQNR, relative-error p99, overflow, underflow,
    subnormal results, NaN/Inf made and the storage of its scales in bits per element (module
    notes). ``granularities``: the rows to compute besides "none" (default all three)."""
    from ..adapters import as_array

    f, objective, margin = check_common(fmt, objective, margin)
    wanted = tuple(granularities)
    if isinstance(granularities, str) or not set(wanted) <= set(GRANULARITIES):
        raise BitprismError(
            f"granularities must be a sequence of {', '.join(map(repr, GRANULARITIES))}; got {granularities!r}"
        )
    options = CastOptions(rounding, overflow, subnormals)  # type: ignore[arg-type]
    arr = as_array(data)
    if arr.size == 0:
        raise BitprismError("compare_scaling needs a tensor with at least one element; got none")
    work = arr.reshape(1) if arr.ndim == 0 else arr
    g_ch, moved = group_layout(work, "channel", axis, block_size)
    group_layout(work, "block", axis, block_size)  # refuses a bad block_size early
    n = int(work.size)
    whole, flat = Groups("channel", 0, 1, None, 1, (n, 1)), moved.reshape(n, 1)  # one group
    kw: dict[str, Any] = dict(objective=objective, margin=margin, formats=[], rounding=rounding,
                              overflow=overflow, subnormals=subnormals)
    zero = np.zeros(1, np.int64)
    rows = [_row("none", "no scale", zero, 0.0, evaluate_groups(whole, flat, zero, f, options, True))]
    if "tensor" in wanted:
        tensor = suggest_scale(work, f, "tensor", **kw)
        k = np.array([tensor.exponent if tensor.exponent is not None else 0], np.int64)
        rows.append(_row("tensor", _rule(objective, "tensor"), k, SCALE_BITS_F32 / n,
                         evaluate_groups(whole, flat, k, f, options, True)))
    if "channel" in wanted:
        channel = suggest_scale(work, f, "channel", axis=axis, **kw)
        assert channel.exponents is not None
        ex = channel.exponents
        rows.append(_row("channel", _rule(objective, "channel"), ex, SCALE_BITS_F32 * ex.size / n,
                         evaluate_groups(g_ch, moved, ex, f, options, True)))
    if "block" in wanted:
        rows.append(_mx_row(work, f, g_ch.axis, int(block_size), options.rounding))
    notes = []
    if options.overflow != "saturate" and "block" in wanted:
        notes.append("the block row saturates (MX v1.0 §6.3 clamps); the others follow overflow="
                     f"{options.overflow!r}")
    return ScalingComparison(f, objective, g_ch.axis, int(block_size), tuple(arr.shape), n,
                             tuple(rows), options, tuple(notes))


def _rule(objective: str, granularity: str) -> str:
    per = "one scale" if granularity == "tensor" else "a scale per channel"
    return {"sqnr": f"{per}, best SQNR", "no_overflow": f"{per}, best SQNR without overflow",
            "amax": f"{per}, amax rule"}[objective]


def compare_file(
    path: Any, formats: Sequence[Any], tensor: str | None = None, **options: Any
) -> list[tuple[str, tuple[int, ...], str, list[ScalingComparison]]]:
    """``compare_scaling`` of each tensor of a file (or only ``tensor``) in each format, as
    (name, shape, dtype, comparisons); an error names the file and the tensor."""
    import os

    from ..file_checks import printable
    from ..files import open_tensors

    tensors = open_tensors(path)
    names = [tensor] if tensor is not None else list(tensors)
    out = []
    for name in names:
        where = f"{printable(os.fspath(path))}: tensor {name!r}: "
        if name not in tensors:
            held = ", ".join(repr(n) for n in list(tensors)[:20]) or "nothing"
            raise BitprismError(where + f"no such tensor; the file holds {held}")
        arr = tensors[name]
        try:
            done = [compare_scaling(arr, f, **options) for f in formats]
        except BitprismError as exc:
            raise BitprismError(where + str(exc)) from exc
        out.append((name, tuple(int(d) for d in arr.shape), str(arr.dtype), done))
        tensors.release(name)  # a decompressed member's temporary file goes with its array
        del arr
    return out
