"""``suggest_scale``: the power-of-two scale (or one per channel, or per block) that serves a
stated objective best, with the sweep that shows the trade-off.

Objectives (each candidate is a power of two ``2^k``; the data is multiplied by it before the
cast and divided by it after, both exact):

* ``"sqnr"`` (default): the highest SQNR over the values whose result is finite, among the
  candidates that turn no finite value into NaN or Inf;
* ``"no_overflow"``: the same among the candidates that overflow nothing either (an overflow
  that saturates counts here, though its result is finite);
* ``"amax"``: the classic rule ``scale <= (max_finite / 2^margin) / amax`` (``rules.py``); with
  ``power_of_two=False`` the largest float64 below that ratio, as before this module existed.

Ties go to the smaller scale (the same error with more headroom above). ``margin`` leaves that
many binades of headroom: the objective's best exponent minus ``margin``, so the amax rule with
a margin stays the same rule. With ``margin=0`` the advice is never worse on its own objective
than no scaling: ``2^0`` is always a candidate.

The SQNR is measured on the data as it comes back (``q / 2^k`` against ``x``): for one scale
per tensor the same number ``scan(x, fmt, scale=2^k)`` reports. Granularities: ``"tensor"`` one
scale; ``"channel"`` one per index along ``axis``; ``"block"`` one per ``block_size``
consecutive elements along ``axis`` (``groups.py``).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from fractions import Fraction
from typing import Any, Sequence

import numpy as np

from ...display import Plottable
from ...errors import BitprismError
from ...formats import Format, FormatLike, format_key, get_format
from ...numerics.options import CastOptions
from ..mx import MX_FORMATS, MXFormat
from .joint import MAX_T, joint_histogram
from .outcomes import sign_symmetric
from .rules import F64_MAX_EXP, F64_MIN_EXP, amax_exponent, largest_float_below
from .sweep import OBJECTIVES, ScaleSweep, candidate_range, sweep_histogram

__all__ = ["GRANULARITIES", "ScaleAdvice", "check_common", "suggest_scale", "sweepable"]

GRANULARITIES = ("tensor", "channel", "block")


@dataclass(frozen=True, eq=False)
class ScaleAdvice(Plottable):
    """A proposed scale (or scales) for one format, why, and the figures it was judged by.

    Attributes:
        format: the target ``Format``.
        objective, granularity, margin: what was asked (see the module notes).
        scale: multiply the data by this before the cast (divide after); float64. For channel
            and block granularity None: see ``exponents``.
        scale_exact: ``scale`` as a ``Fraction`` (None with ``scale``).
        exponent: ``log2(scale)`` when the scale is a power of two, else None.
        exponents: per channel / per block scale exponents (int64; None for one tensor scale):
            channel: shape ``(shape[axis],)``; block: the data's shape with ``axis`` replaced
            by the number of blocks.
        amax: largest finite magnitude of the data (0.0 when there is none).
        target: ``max_finite / 2^margin``, where the amax rule puts ``amax``.
        amax_exponent: the amax rule's exponent (with ``margin``), None without an amax; for
            blocks the MX v1.0 rule is the base instead (see ``groups.py``).
        power_of_two: whether the scale is a power of two.
        nan_count, inf_count, size: element counts.
        message: one line: what was chosen and why (also when ``scale`` is 1 by default).
        sweep: every candidate's figures (None with no finite nonzero value, or a format the
            sweep does not cover); for channel and block granularity its ``exponents`` are
            offsets added to every group's base exponent.
        sqnr_db: SQNR at the choice (on the values coming back, like the scan's), or None.
        before, after: ``scan`` of the data without and with the scale(s) (None if no
            formats). With per-group scales, ``after`` scans the data multiplied by them; its
            SQNR and largest absolute error are measured after dividing them back out.
        axis, block_size: the grouping (None for one tensor scale).
        options: the cast options the advice was judged with.
        notes: further lines (what was left out, NaN/Inf, a short last block...).
    """

    format: Format
    scale: float | None
    scale_exact: Fraction | None
    exponent: int | None
    amax: float
    target: Fraction
    margin: int
    power_of_two: bool
    nan_count: int
    inf_count: int
    size: int
    message: str
    before: Any = None
    after: Any = None
    objective: str = "amax"
    granularity: str = "tensor"
    exponents: np.ndarray | None = None
    amax_exponent: int | None = None
    sweep: ScaleSweep | None = None
    sqnr_db: float | None = None
    axis: int | None = None
    block_size: int | None = None
    options: CastOptions = field(default_factory=CastOptions)
    notes: tuple[str, ...] = ()

    def __repr__(self) -> str:
        return f"<ScaleAdvice {self.format.name} {self.granularity}: {self.message}>"

    def _repr_pretty_(self, p: Any, cycle: bool) -> None:
        p.text(str(self))


def check_common(fmt: FormatLike, objective: Any, margin: Any) -> tuple[Format, str, int]:
    """The format, objective and margin of a scale request, or a clear error."""
    mx = MX_FORMATS.get(format_key(fmt)) if isinstance(fmt, str) else fmt
    if isinstance(mx, MXFormat):
        elem = repr(mx.element.name) if mx.element is not None else "(an integer element: none)"
        raise BitprismError(
            f"fmt={mx.name!r} is an MX block format; name its element format instead, and ask "
            f"for per-block scales (granularity='block'): for {mx.name}, fmt={elem}"
        )
    f = get_format(fmt)
    if objective not in OBJECTIVES:
        raise BitprismError(f"objective must be one of {', '.join(map(repr, OBJECTIVES))}; got {objective!r}")
    if isinstance(margin, bool) or not isinstance(margin, (int, np.integer)):
        raise BitprismError(f"margin must be an integer number of binades, got {margin!r}")
    return f, str(objective), int(margin)


def sweepable(fmt: Format, options: CastOptions) -> str | None:
    """Why the sweep cannot judge ``fmt`` (None when it can)."""
    if fmt.significand_bits > MAX_T:
        return (
            f"{fmt.name} has {fmt.significand_bits} trailing significand bits; the sweep covers "
            f"formats with at most {MAX_T} (every format of 16 bits or fewer)"
        )
    if not fmt.has_zero:
        return f"{fmt.name} has no zero (it stores scales, not data)"
    if options.rounding == "stochastic":
        return "stochastic rounding draws bits below the ones the sweep keeps"
    return None


def _no_amax_message(size: int, nans: int, infs: int) -> str:
    if size == 0:
        return "no elements: scale 1"
    what = "all zeros"
    if nans or infs:
        what = f"no finite nonzero value ({nans} NaN, {infs} Inf, the rest zeros)"
        if nans + infs == size:
            what = f"nothing but NaN/Inf ({nans} NaN, {infs} Inf)"
    return f"{what}: no amax to scale by; scale 1"


def _db(v: float) -> str:
    return f"{v:.1f} dB" if np.isfinite(v) else f"{v} dB"


def _values(n: int) -> str:
    return f"{n} value" if n == 1 else f"{n} values"


def _reason(objective: str, sw: ScaleSweep, k: int, k_amax: int, margin: int, prefer: int) -> str:
    """One line: the choice, the figure it wins on, what the amax rule would give, and what
    the next larger scale would cost (``prefer``: the amax rule without margin, which wins
    ties)."""
    i, j = sw.index(k), sw.index(k_amax)
    if objective == "amax":
        best = sw.best("sqnr", prefer=prefer)
        tail = ""
        if best is not None and best != i:
            tail = f"; best SQNR would be 2^{sw.exponents[best]}, {_db(sw.sqnr_db[best])}"
        return f"2^{k}: amax rule, SQNR {_db(sw.sqnr_db[i])}{tail}"
    what = "best SQNR" if objective == "sqnr" else "best SQNR without overflow"
    if margin == 0:
        line = f"2^{k}: {what} {_db(sw.sqnr_db[i])}"
    else:
        line = f"2^{k}: 2^{k + margin} ({what}) less a margin of {margin}, SQNR {_db(sw.sqnr_db[i])}"
    if k == k_amax:
        line += "; the amax rule gives the same"
    elif sw.nonfinite[j]:
        line += f"; amax rule would give 2^{k_amax}, which turns {_values(int(sw.nonfinite[j]))} into NaN/Inf"
    else:
        line += f"; amax rule would give 2^{k_amax}, {_db(sw.sqnr_db[j])}"
    up = k + margin + 1
    if margin == 0 and up <= int(sw.exponents[-1]):
        n = sw.index(up)
        if sw.nonfinite[n]:
            line += f"; 2^{up} would turn {_values(int(sw.nonfinite[n]))} into NaN/Inf"
        elif objective == "no_overflow" and sw.overflow[n]:
            line += f"; 2^{up} would overflow {_values(int(sw.overflow[n]))}"
    if sw.nonfinite[i]:  # a negative margin can ask for more than the best
        line += f"; it turns {_values(int(sw.nonfinite[i]))} into NaN/Inf"
    return line


def _columns(fmt: Format, formats: Sequence[Any] | None) -> list[Any]:
    return [fmt] if formats is None else list(formats)


def _tensor_advice(
    arr: np.ndarray, f: Format, objective: str, margin: int, power_of_two: bool,
    formats: Sequence[Any] | None, options: CastOptions, progress: bool,
) -> ScaleAdvice:
    why_not = sweepable(f, options)
    if why_not is not None and objective != "amax":
        raise BitprismError(f"objective={objective!r} needs the sweep, and {why_not}; use objective='amax'")
    if not power_of_two and objective != "amax":
        raise BitprismError(f"objective={objective!r} chooses among powers of two; power_of_two must be True")
    if not f.signed and objective != "amax":
        h = joint_histogram(arr, min(f.significand_bits, MAX_T), negatives=True)
        if h.negative:
            raise BitprismError(
                f"{f.name} is unsigned and the tensor holds {h.negative} negative values: they "
                "become NaN at every scale; cast |x|, or choose a signed format"
            )
    else:
        symmetric = why_not is None and sign_symmetric(f, options)
        h = joint_histogram(arr, min(f.significand_bits, MAX_T), signs=not symmetric)
    target = f.max_finite / Fraction(2) ** margin
    common: dict[str, Any] = dict(
        format=f, amax=h.amax, target=target, margin=margin, nan_count=h.nan, inf_count=h.inf,
        size=int(arr.size), objective=objective, granularity="tensor", options=options,
    )
    if h.amax == 0.0:
        return _finish(arr, f, formats, options, progress, Fraction(1), 0, True,
                       _no_amax_message(int(arr.size), h.nan, h.inf), None, None, common)
    k_rule, capped = amax_exponent(f, h.amax, margin)
    k_rule0 = amax_exponent(f, h.amax, 0)[0]
    sw = None
    if why_not is None:
        ks = candidate_range(h, f, k_rule0)  # widened by the margin, so the choice is one
        lo = max(min(int(ks[0]), k_rule, int(ks[0]) - margin), F64_MIN_EXP)
        hi = min(max(int(ks[-1]), int(ks[-1]) - margin), F64_MAX_EXP)
        sw = sweep_histogram(h, f, options, np.arange(lo, hi + 1, dtype=np.int64))
    notes = [] if why_not is None else [f"no sweep: {why_not}"]
    if objective == "amax":
        cap = f" (capped at 2^{k_rule} to stay a normal float64)" if capped else ""
        if power_of_two:
            scale_q, k = Fraction(2) ** k_rule, k_rule
            message = f"amax {h.amax!r} -> {float(target):g}: scale rounded down to 2^{k_rule}{cap}"
        else:
            ideal = target / Fraction(h.amax) if not capped else Fraction(2) ** k_rule
            scale_q = Fraction(largest_float_below(ideal))
            k = k_rule if scale_q == Fraction(2) ** k_rule else None  # type: ignore[assignment]
            message = f"amax {h.amax!r} -> {float(target):g}: scale {float(scale_q)!r}{cap}"
        if sw is not None and k is not None:
            message += "; " + _reason("amax", sw, k, k_rule, margin, k_rule0).split(": ", 1)[1]
    else:
        assert sw is not None
        best = sw.best(objective, prefer=k_rule0)
        if best is None:
            raise BitprismError(f"no candidate scale keeps every finite value of the tensor finite in {f.name}")
        k = int(sw.exponents[best]) - margin
        scale_q = Fraction(2) ** k
        message = _reason(objective, sw, k, k_rule, margin, k_rule0)
    if h.nan or h.inf:
        message += f"; {h.nan} NaN and {h.inf} Inf stay as they are"
    return _finish(arr, f, formats, options, progress, scale_q, k, power_of_two, message, sw,
                   k_rule, common, notes)


def _finish(
    arr: np.ndarray, f: Format, formats: Sequence[Any] | None, options: CastOptions,
    progress: bool, scale_q: Fraction, k: int | None, p2: bool, message: str,
    sw: ScaleSweep | None, k_rule: int | None, common: dict[str, Any],
    notes: Sequence[str] = (),
) -> ScaleAdvice:
    scale = float(scale_q)
    before = after = None
    columns = _columns(f, formats)
    if columns:
        from ..scan import scan

        before = scan(arr, columns, options=options, progress=progress)
        after = scan(arr, columns, options=options, scale=scale, progress=progress)
    sqnr = None
    if sw is not None and k is not None and p2 and int(sw.exponents[0]) <= k <= int(sw.exponents[-1]):
        sqnr = float(sw.sqnr_db[sw.index(k)])
    return ScaleAdvice(
        scale=scale, scale_exact=scale_q, exponent=k, power_of_two=bool(p2), message=message,
        before=before, after=after, sweep=sw, amax_exponent=k_rule, sqnr_db=sqnr,
        notes=tuple(notes), **common,
    )


def suggest_scale(
    data: Any,
    fmt: FormatLike,
    granularity: str = "tensor",
    *,
    axis: int = -1,
    block_size: int = 32,
    objective: str = "sqnr",
    margin: int = 0,
    power_of_two: bool = True,
    formats: Sequence[Any] | None = None,
    rounding: str = "roundTiesToEven",
    overflow: str = "standard",
    subnormals: str = "keep",
    progress: bool = False,
) -> ScaleAdvice:
    """The scale (or scales) of ``data`` that serve ``objective`` best in ``fmt``.

    Args:
        data: any tensor ``as_array`` accepts.
        fmt: the target format (name, alias, dtype or ``Format``), e.g. ``"e4m3"``.
        granularity: ``"tensor"``, ``"channel"`` (one scale per index along ``axis``) or
            ``"block"`` (one per ``block_size`` consecutive elements along ``axis``; MX v1.0's
            shared exponent is the base and elements saturate, as §6.3 clamps).
        objective: ``"sqnr"``, ``"no_overflow"`` or ``"amax"`` (module notes).
        margin: binades of headroom: the objective's best exponent minus ``margin``.
        power_of_two: ``objective="amax"`` only: False gives the largest float64 below
            ``(max_finite / 2^margin) / amax`` instead of a power of two.
        formats: formats to scan before/after (default: just ``fmt``); ``[]`` skips the scans.
        rounding, overflow, subnormals: the cast options; progress: scan progress bars.
    """
    from ..adapters import as_array

    f, objective, margin = check_common(fmt, objective, margin)
    if granularity not in GRANULARITIES:
        raise BitprismError(
            f"granularity must be one of {', '.join(map(repr, GRANULARITIES))}; got {granularity!r}"
        )
    if not isinstance(power_of_two, (bool, np.bool_)):
        raise BitprismError(f"power_of_two must be True or False, got {power_of_two!r}")
    options = CastOptions(rounding, overflow, subnormals)  # type: ignore[arg-type]
    arr = as_array(data)
    if granularity == "tensor":
        return _tensor_advice(arr, f, objective, margin, bool(power_of_two), formats, options, progress)
    if not power_of_two:
        raise BitprismError("power_of_two=False is for one tensor scale; per-group scales are powers of two")
    from .groups import group_advice

    return group_advice(arr, f, granularity, axis, block_size, objective, margin, formats, options, progress)
