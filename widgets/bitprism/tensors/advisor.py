"""Per-tensor scale advice: the amax-based scale that brings a tensor inside a narrow format.

``suggest_scale(data, "e4m3")`` takes the largest finite magnitude ``amax`` of the tensor and
proposes ``scale = (max_finite(fmt) / 2^margin) / amax`` (common practice for 8-bit training
recipes: the tensor is multiplied by ``scale`` before the cast and divided by it after), by
default rounded *down* to a power of two so that applying and removing it is exact. The result
carries the survival scan of the data without and with the scale, side by side.

The scale is computed exactly (``Fraction``) and turned into a float64 by rounding toward zero,
so ``amax * scale <= max_finite / 2^margin`` holds exactly and after scaling nothing finite
overflows the format, in every rounding direction.

Tensors without a usable amax get ``scale = 1`` and a message saying why: all zeros, nothing
but NaN/Inf, or no elements. NaN and Inf elements never enter ``amax`` (an Inf amax would give a
zero scale); they stay NaN and Inf after scaling and are counted in the result.
"""

from __future__ import annotations

from dataclasses import dataclass
from fractions import Fraction
from typing import Any, Sequence

import numpy as np

from ..display import Displayable
from ..errors import BitprismError
from ..formats import Format, FormatLike, get_format
from ..numerics.exact import floor_log2

__all__ = ["ScaleAdvice", "suggest_scale"]

_CHUNK = 1 << 20  # elements read at a time for amax: memory stays bounded on memmaps
_F64_MAX_EXP = 1023  # scale stays a normal float64: 2^-1022 .. 2^1023
_F64_MIN_EXP = -1022


@dataclass(frozen=True, eq=False)
class ScaleAdvice(Displayable):
    """A proposed per-tensor scale for one format, with the scans it was judged by.

    Attributes:
        format: the target ``Format``.
        scale: multiply the data by this before the cast (divide after); float64.
        scale_exact: the same scale as a ``Fraction`` (exactly ``scale``).
        exponent: ``log2(scale)`` when the scale is a power of two, else ``None``.
        amax: largest finite magnitude of the data (0.0 when there is none).
        target: ``max_finite / 2^margin``, the magnitude ``amax`` is mapped to at most.
        margin: power-of-two headroom below the format's largest finite value.
        power_of_two: whether the scale was rounded down to a power of two.
        nan_count, inf_count, size: element counts.
        message: one line saying what was done and why (also when ``scale`` is 1 by default).
        before, after: ``scan`` of the data without and with the scale (``None`` if no formats).
    """

    format: Format
    scale: float
    scale_exact: Fraction
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

    def __repr__(self) -> str:
        return f"<ScaleAdvice {self.format.name} scale={self.scale!r} amax={self.amax!r}>"

    def _repr_pretty_(self, p: Any, cycle: bool) -> None:
        p.text(str(self))


def _survey(arr: np.ndarray) -> tuple[float, int, int]:
    """(largest finite |x|, NaN count, Inf count), reading ``arr`` in bounded chunks."""
    flat = arr.reshape(-1)
    amax, nans, infs = 0.0, 0, 0
    for start in range(0, flat.size, _CHUNK):
        chunk = np.asarray(flat[start : start + _CHUNK], dtype=np.float64)  # exact widening
        finite = np.isfinite(chunk)
        if not finite.all():
            isnan = np.isnan(chunk)
            nans += int(isnan.sum())
            infs += int((~finite & ~isnan).sum())
            chunk = chunk[finite]
        if chunk.size:
            amax = max(amax, float(np.max(np.abs(chunk))))
    return amax, nans, infs


def _round_down_to_float(q: Fraction) -> float:
    """The largest float64 <= q (q > 0, inside the normal float64 range)."""
    f = float(q)  # round to nearest; step down once if that went above
    if Fraction(f) > q:
        f = float(np.nextafter(f, 0.0))
    return f


def suggest_scale(
    data: Any,
    fmt: FormatLike,
    margin: int = 0,
    power_of_two: bool = True,
    formats: Sequence[Any] | None = None,
    *,
    rounding: str = "roundTiesToEven",
    overflow: str = "standard",
    subnormals: str = "keep",
    progress: bool = False,
) -> ScaleAdvice:
    """Propose ``scale = (max_finite(fmt) / 2^margin) / amax`` for ``data``.

    Args:
        data: any tensor ``as_array`` accepts.
        fmt: the target format (name, alias, dtype or ``Format``), e.g. ``"e4m3"``.
        margin: integer number of binades of headroom left below the format's maximum.
        power_of_two: round the scale down to a power of two (exact to apply and undo).
        formats: formats to scan before/after (default: just ``fmt``); ``[]`` skips the scans.
        rounding, overflow, subnormals, progress: passed to ``scan``.
    """
    from .adapters import as_array

    f = get_format(fmt)
    if isinstance(margin, bool) or not isinstance(margin, (int, np.integer)):
        raise BitprismError(f"margin must be an integer number of binades, got {margin!r}")
    margin = int(margin)
    if not isinstance(power_of_two, (bool, np.bool_)):
        raise BitprismError(f"power_of_two must be True or False, got {power_of_two!r}")
    arr = as_array(data)
    amax, nans, infs = _survey(arr)
    target = f.max_finite / Fraction(2) ** margin

    exponent: int | None
    if arr.size == 0:
        scale_q, exponent, message = Fraction(1), 0, "no elements: scale 1"
    elif amax == 0.0:
        what = "nothing but NaN/Inf" if nans or infs else "all zeros"
        if nans or infs:
            what = f"no finite nonzero value ({nans} NaN, {infs} Inf, the rest zeros)"
            if nans + infs == arr.size:
                what = f"nothing but NaN/Inf ({nans} NaN, {infs} Inf)"
        scale_q, exponent, message = Fraction(1), 0, f"{what}: no amax to scale by; scale 1"
    else:
        ideal = target / Fraction(amax)
        e = floor_log2(ideal)
        capped = ""
        if e > _F64_MAX_EXP or e < _F64_MIN_EXP:
            e = min(max(e, _F64_MIN_EXP), _F64_MAX_EXP)
            ideal = Fraction(2) ** e
            capped = f" (capped at 2^{e} to stay a normal float64)"
        if power_of_two:
            scale_q, exponent = Fraction(2) ** e, e
            message = f"amax {amax!r} -> {float(target):g}: scale rounded down to 2^{e}{capped}"
        else:
            scale_q = Fraction(_round_down_to_float(ideal))
            exponent = e if scale_q == Fraction(2) ** e else None
            message = f"amax {amax!r} -> {float(target):g}: scale {float(scale_q)!r}{capped}"
        if nans or infs:
            message += f"; {nans} NaN and {infs} Inf stay as they are"
    scale = float(scale_q)

    before = after = None
    columns = [f] if formats is None else list(formats)
    if columns:
        from .scan import scan

        before = scan(arr, columns, rounding, overflow, subnormals, progress=progress)
        after = scan(arr, columns, rounding, overflow, subnormals, scale=scale, progress=progress)
    return ScaleAdvice(
        format=f,
        scale=scale,
        scale_exact=scale_q,
        exponent=exponent,
        amax=amax,
        target=target,
        margin=margin,
        power_of_two=bool(power_of_two),
        nan_count=nans,
        inf_count=infs,
        size=int(arr.size),
        message=message,
        before=before,
        after=after,
    )
