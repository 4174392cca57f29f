"""How many elements a cast makes NaN or Inf: the scan's counts read through the format's rules.

A ``FormatScan`` counts the NaN and Inf of the *input* and what the cast does to finite values
(overflow, invalid, block NaN). Whether those end as NaN, Inf or a finite number depends on the
format and the options: float8_e4m3fn has no Inf, so an overflow or an Inf input becomes NaN;
a negative value sent to an unsigned format becomes NaN; float8_e8m0fnu has no zero, so a zero
becomes NaN; under ``overflow="saturate"`` nothing overflows to a special value. The fate of
each kind of input is asked of the scalar reference cast (``numerics.scalar``), never restated
here.

The counts decide every case but two, which are then counted exactly from the data (one more
pass, only then): a counts-only scan with directed rounding, whose overflows become Inf (or
NaN) on one side and the largest finite value on the other (IEEE 754-2019 §7.4) while the scan
counts both sides together; and Inf inputs of both signs sent to a format that treats the two
differently (an unsigned format under ``saturate``: +Inf becomes its largest value, -Inf NaN).
A full scan needs no pass: its ``compared`` count (finite input and finite result) gives the
finite inputs with a non-finite result exactly, stochastic rounding included.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import Any, Iterator

import numpy as np

from ..errors import BitprismError
from ..formats import Format
from ..numerics.exact import as_exact
from ..numerics.scalar import encode_exact, overflow_code
from ..numerics.thresholds import cast_thresholds
from .mx import MXFormat
from .scan import FormatScan, ScanResult

__all__ = ["CastSpecials", "cast_specials"]

_BLOCK = 1 << 20  # elements read at a time by the counting pass


@dataclass(frozen=True)
class CastSpecials:
    """Elements whose cast result is NaN (``nan``) and ±Inf (``inf``), NaN inputs included."""

    nan: int
    inf: int


def cast_specials(result: ScanResult, row: FormatScan, data: Any = None) -> CastSpecials | None:
    """The NaN and Inf of the cast that ``row`` of ``result`` describes.

    ``data`` is the array the scan read; it is read again only in the two cases the module
    docstring names (without it those raise ``BitprismError``). Block formats: the OCP MX ones
    (NaN only: a block holding NaN or Inf, or whose scale exceeds E8M0's range, becomes NaN,
    MX v1.0 §6.3, and elements saturate); None for other block-format objects, whose results
    are not known here.
    """
    fmt = row.format
    if isinstance(fmt, MXFormat):
        return CastSpecials(row.nan + row.inf + (row.block_nan or 0) + row.overflow, 0)
    if not isinstance(fmt, Format):
        return None
    options = result.options
    # the fates below involve no rounding: a deterministic direction spares the random source
    plain = replace(options, rounding="roundTiesToEven") if options.rounding == "stochastic" else options
    counts = {"nan": 0, "inf": 0, "finite": 0}

    def fate(value: float) -> str:
        return fmt.classify(encode_exact(as_exact(value), fmt, plain))

    counts[fate(float("nan"))] += row.nan
    up, down = fate(float("inf")), fate(float("-inf"))
    if up == down or row.inf == 0:
        counts[up] += row.inf
    else:
        positive = _positive_infs(result, row, data)
        counts[up] += positive
        counts[down] += row.inf - positive
    made_nan = 0  # finite inputs made NaN other than by overflow (zeros, invalid negatives)
    if not fmt.has_zero:
        counts[fate(0.0)] += result.histogram.zero
        made_nan += result.histogram.zero if fate(0.0) == "nan" else 0
    if not fmt.signed:
        counts[fate(-1.0)] += row.invalid
        made_nan += row.invalid if fate(-1.0) == "nan" else 0
    if row.compared is not None:
        # a full scan: every finite input not compared has a NaN or Inf result
        special = row.size - row.nan - row.inf - row.compared - made_nan
        if special:
            counts["inf" if fmt.has_inf else "nan"] += special
        return CastSpecials(counts["nan"], counts["inf"])
    ahead = fmt.classify(overflow_code(fmt, False, options.rounding, options.overflow))
    behind = fmt.classify(overflow_code(fmt, True, options.rounding, options.overflow))
    if not fmt.signed or ahead == behind or row.overflow == 0:
        counts[ahead] += row.overflow  # unsigned: negatives are invalid, overflows positive
    else:
        positive = _positive_overflows(result, row, data)
        counts[ahead] += positive
        counts[behind] += row.overflow - positive
    return CastSpecials(counts["nan"], counts["inf"])


def _positive_infs(result: ScanResult, row: FormatScan, data: Any) -> int:
    """How many of the Inf inputs are +Inf: from the extrema when they tell, else counted."""
    if result.min is not None and result.min > -np.inf:
        return row.inf
    if result.max is not None and result.max < np.inf:
        return 0
    return sum(int(np.count_nonzero(x == np.inf)) for x in _values(result, data, "Inf inputs"))


def _positive_overflows(result: ScanResult, row: FormatScan, data: Any) -> int:
    """How many of the overflows are positive: the finite values at or above the positive
    overflow threshold of the format (``numerics.thresholds``), counted in the data."""
    start = cast_thresholds(row.format, result.options, False).overflow_from
    total = 0
    for x in _values(result, data, "overflows"):
        with np.errstate(invalid="ignore"):  # NaN compares False, as it should
            total += int(np.count_nonzero((x >= start) & (x < np.inf)))
    return total


def _values(result: ScanResult, data: Any, what: str) -> Iterator[np.ndarray]:
    """The (scaled) data as float64 blocks, in any order, as the scan saw it."""
    if data is None:
        raise BitprismError(
            f"telling the sign of {what} needs the data the scan read; pass it as data=..."
        )
    arr = np.asarray(data)
    if tuple(arr.shape) != tuple(result.shape):
        raise BitprismError(
            f"data has shape {tuple(arr.shape)} but the scan read shape {tuple(result.shape)}"
        )
    for block in _blocks(arr):
        x = block.astype(np.float64)
        if result.scale is not None:
            with np.errstate(over="ignore", invalid="ignore"):  # as the scan scales: in float64
                x *= result.scale
        yield x


def _blocks(arr: np.ndarray) -> Iterator[np.ndarray]:
    a = arr.reshape(1) if arr.ndim == 0 else arr
    if a.flags.c_contiguous or a.flags.f_contiguous:
        flat = a.reshape(-1, order="A")  # a view in memory order
        for s in range(0, flat.size, _BLOCK):
            yield flat[s : s + _BLOCK]
        return
    rows = max(1, _BLOCK // max(1, a[0].size))
    for r in range(0, a.shape[0], rows):
        yield np.ascontiguousarray(a[r : r + rows]).reshape(-1)
