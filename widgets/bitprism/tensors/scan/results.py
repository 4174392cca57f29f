"""What ``scan()`` answers: immutable records built from the merged partial result.

``ScanResult`` holds facts about the input (dtype, shape, extrema, the ``ExponentHistogram``),
the options the scan used (seed included), and one ``FormatScan`` per format; its text, HTML and
range chart come from the render and plots layers through the display seam.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import Any, Mapping

import numpy as np

from ...display import Plottable
from ...errors import BitprismError
from ...formats import Format, get_format
from ...numerics.options import CastOptions
from .partials import EXP_OFFSET, BlockPartial, FormatPartial, InputPartial
from .plan import ScanPlan, scan_format
from .quantiles import quantile_values

__all__ = ["WHERE_KINDS", "ExponentHistogram", "FormatScan", "ScanResult", "build_result"]

WHERE_KINDS = ("nan", "inf", "overflow", "underflow", "subnormal", "largest_error")
_FRACTION_KINDS = ("nan", "inf", "overflow", "underflow", "subnormal", "invalid", "exact", "block_nan")


@dataclass(frozen=True)
class ExponentHistogram:
    """Binary exponents of the (scaled) data: ``counts[i]`` values have
    ``floor(log2|x|) == exponents[i]`` (normal values only; populated exponents, ascending),
    plus the zero, subnormal, Inf and NaN buckets. A counts-only scan leaves the exponents out
    unless asked (``collected`` is then False and both tuples are empty)."""

    exponents: tuple[int, ...]
    counts: tuple[int, ...]
    zero: int
    subnormal: int
    inf: int
    nan: int
    collected: bool = True  # False: a counts-only scan left the binary exponents out

    def count(self, exponent: int) -> int:
        try:
            return self.counts[self.exponents.index(exponent)]
        except ValueError:
            return 0

    @property
    def total(self) -> int:
        return sum(self.counts) + self.zero + self.subnormal + self.inf + self.nan


@dataclass(frozen=True)
class FormatScan:
    """What a cast to one format does to the tensor (counts, fractions and errors).

    ``format`` is the ``Format`` (or the block-format object, e.g. an ``MXFormat``); ``name``
    its name. Counts are over all elements; ``compared`` elements (finite input and finite
    result) enter the error figures. Figures a scan did not compute are ``None``.
    """

    format: Any
    size: int
    nan: int
    inf: int
    overflow: int
    underflow: int
    subnormal: int | None
    invalid: int
    exact: int | None
    compared: int | None
    max_abs_error: float | None
    rel_error_p50: float | None
    rel_error_p99: float | None
    rel_error_max: float | None
    ulp_error_mean: float | None
    ulp_error_max: float | None
    sqnr_db: float | None
    quantiles: str
    overflow_from: float | None = None
    underflow_below: float | None = None
    normal_from: float | None = None
    block_nan: int | None = None

    @property
    def name(self) -> str:
        return str(self.format.name)

    def fraction(self, kind: str) -> float | None:
        """Share of all elements in a class: nan, inf, overflow, underflow, subnormal, invalid,
        exact, block_nan."""
        if kind not in _FRACTION_KINDS:
            raise BitprismError(f"kind must be one of {', '.join(_FRACTION_KINDS)}; got {kind!r}")
        value = getattr(self, kind)
        if value is None or self.size == 0:
            return None if value is None else 0.0
        return value / self.size


@dataclass(frozen=True)
class ScanResult(Plottable):
    """The answer of ``scan()``: one ``FormatScan`` per format plus facts about the input.

    ``result["float16"]`` gives a format's row; ``result.where(kind, format)`` the indices of the
    first elements of a kind; ``result.plot()`` draws the range chart; ``result.options`` are
    the cast options used, with the seed stochastic rounding drew from.
    """

    dtype: str
    shape: tuple[int, ...]
    size: int
    min: float | None
    max: float | None
    absmax: float | None
    scale: float | None
    options: CastOptions
    quantiles: str
    where_limit: int
    histogram: ExponentHistogram
    formats: tuple[FormatScan, ...]
    _where: Mapping[tuple[str, str], tuple[np.ndarray, ...]] = field(repr=False, compare=False)

    @property
    def rounding(self) -> str:
        return self.options.rounding

    @property
    def overflow(self) -> str:
        return self.options.overflow

    @property
    def subnormals(self) -> str:
        return self.options.subnormals

    @property
    def format_names(self) -> tuple[str, ...]:
        return tuple(f.name for f in self.formats)

    def __getitem__(self, key: Any) -> FormatScan:
        """A format's row, by name, alias, dtype or the format object itself."""
        for f in self.formats:
            if f.name == key or f.format is key:
                return f
        try:
            wanted = scan_format(key)
        except BitprismError:
            wanted = None
        for f in self.formats:
            if wanted is not None and (f.format == wanted or f.name == getattr(wanted, "name", None)):
                return f
        raise KeyError(f"no format {key!r} in this scan; it has {', '.join(self.format_names)}")

    def where(self, kind: str, format: Any = None) -> tuple[np.ndarray, ...]:
        """Indices (a tuple of arrays, one per axis, like ``np.nonzero``) of the first
        ``where_limit`` elements of a kind, in C order; ``largest_error`` lists the largest
        absolute errors first. ``nan`` and ``inf`` describe the input and need no format."""
        if kind not in WHERE_KINDS:
            raise BitprismError(f"kind must be one of {', '.join(WHERE_KINDS)}; got {kind!r}")
        if kind in ("nan", "inf"):
            return self._where[(kind, "")]
        if format is None:
            if len(self.formats) != 1:
                raise BitprismError(
                    f"where({kind!r}) needs a format: one of {', '.join(self.format_names)}"
                )
            return self._where[(kind, self.formats[0].name)]
        return self._where[(kind, self[format].name)]


def build_result(
    arr: Any,
    dtype: np.dtype,
    size: int,
    plan: ScanPlan,
    part: BlockPartial | None,
    fparts: list[FormatPartial],
    resolved: list[dict[int, float]],
) -> ScanResult:
    """The ``ScanResult`` of a merged first pass (``part``) and the quantiles the refinement
    passes settled (``resolved``, per entry)."""
    shape = tuple(int(s) for s in arr.shape)
    inp = part.input if part is not None else InputPartial()
    hist = _histogram(inp, dtype, plan)
    has_values = inp.n > inp.nan
    lo = inp.min if has_values else None
    hi = inp.max if has_values else None
    absmax = max(abs(lo), abs(hi)) if lo is not None and hi is not None else None
    nd_shape = shape if shape else (1,)

    def unravel(flat: np.ndarray) -> tuple[np.ndarray, ...]:
        if len(nd_shape) == 1:
            return (np.array(flat, np.intp),)
        flat = np.asarray(flat, np.int64)
        return tuple(np.asarray(i, np.intp) for i in np.unravel_index(flat, nd_shape))

    where: dict[tuple[str, str], tuple[np.ndarray, ...]] = {
        ("nan", ""): unravel(inp.where_nan),
        ("inf", ""): unravel(inp.where_inf),
    }
    rows = []
    for i, entry in enumerate(plan.entries):
        fp = fparts[i] if fparts else FormatPartial()
        rows.append(_format_scan(entry, fp, inp, plan, resolved[i] if resolved else {}))
        where[("overflow", entry.name)] = unravel(fp.where_overflow)
        where[("underflow", entry.name)] = unravel(fp.where_underflow)
        where[("subnormal", entry.name)] = unravel(fp.where_subnormal)
        where[("largest_error", entry.name)] = unravel(fp.top_idx)
    return ScanResult(
        dtype=str(dtype),
        shape=shape,
        size=inp.n if part is not None else size,
        min=lo,
        max=hi,
        absmax=absmax,
        scale=plan.scale,
        options=plan.options,
        quantiles="none" if plan.mode is False else str(plan.mode),
        where_limit=plan.limit,
        histogram=hist,
        formats=tuple(rows),
        _where=MappingProxyType(where),
    )


def _histogram(inp: InputPartial, dtype: np.dtype, plan: ScanPlan) -> ExponentHistogram:
    """The exponent histogram; values below the input format's normal range are its
    subnormals (the carrier counted them as normal)."""
    exps = inp.exponents.copy()
    sub_extra = 0
    if plan.scale is None and dtype.kind not in "iub":
        emin = get_format(dtype).emin
        below = slice(0, emin + EXP_OFFSET)
        sub_extra = int(exps[below].sum())
        exps[below] = 0
    populated = np.flatnonzero(exps) if plan.exponents else np.zeros(0, np.intp)
    return ExponentHistogram(
        tuple(int(i) - EXP_OFFSET for i in populated),
        tuple(int(exps[i]) for i in populated),
        inp.zero,
        inp.carrier_subnormal + sub_extra,
        inp.inf,
        inp.nan,
        collected=plan.exponents,
    )


def _format_scan(
    entry: Any, fp: FormatPartial, inp: InputPartial, plan: ScanPlan, resolved: dict[int, float]
) -> FormatScan:
    full = plan.full
    p50, p99 = quantile_values(fp, plan.mode, resolved)
    has_err = full and bool(fp.compared)
    sx2, se2 = fp.sum_x2.value(), fp.sum_err2.value()
    if has_err:
        sqnr = math.inf if se2 == 0 else (10 * math.log10(sx2 / se2) if sx2 > 0 else -math.inf)
    else:
        sqnr = None
    plain = isinstance(entry.fmt, Format)
    th = entry.pos
    return FormatScan(
        entry.format,
        inp.n,
        inp.nan,
        inp.inf,
        fp.overflow,
        fp.underflow,
        fp.subnormal if fp.subnormal >= 0 and plain else None,
        fp.invalid,
        fp.exact if full else None,
        fp.compared if full else None,
        fp.max_abs if has_err else None,
        p50,
        p99,
        fp.max_rel if has_err else None,
        fp.sum_ulp.value() / fp.compared if has_err and plain else None,
        fp.max_ulp if has_err and plain else None,
        sqnr,
        "none" if plan.mode is False else str(plan.mode),
        th.overflow_from if th is not None else None,
        th.nonzero_from if th is not None else None,
        th.normal_from if th is not None else None,
        None if plain else fp.block_nan,
    )
