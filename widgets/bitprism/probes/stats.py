"""What one operation's output holds: NaN and Inf, its largest finite magnitude, and for each
format the overflow, underflow-to-zero and subnormal counts a cast into it would give.

The counts are the counts-only scan's (``scan(..., quantiles=False)``): rounding is monotone,
so each class of a cast is a range of ``|x|`` whose ends ``numerics.thresholds`` finds once per
(format, options, sign); the data is only compared with them, never cast. Done directly here
because a trace counts every operation's output, most of them small, where the scan's plan,
blocks and threads cost more than the counting: the largest magnitude decides the overflow
counts of most outputs without a comparison, and only the values below the largest "normal
from" threshold are looked at again for underflow and subnormal counts.
``tests/test_trace.py`` holds these counts to ``scan``'s.

Definitions (the scan's): overflow counts finite values only; underflow counts nonzero finite
values whose result is zero; subnormal counts values whose result is a nonzero subnormal.
Stochastic rounding has no fixed thresholds, so it is counted as roundTiesToEven.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from typing import Any, Sequence

import numpy as np

from ..errors import BitprismError, UnsupportedInputError
from ..formats import Format, get_format
from ..numerics.options import CastOptions
from ..numerics.thresholds import Thresholds, cast_thresholds, pattern_at_least
from .scratch import COUNT_BLOCK, buffer

__all__ = ["ArrayStats", "Counter", "check_formats", "readable"]


@dataclass(frozen=True)
class ArrayStats:
    """Counts of one array (or of several outputs of one operation, added up).

    ``overflow``, ``underflow`` and ``subnormal`` hold one count per format of the counter, in
    its order; ``amax`` is the largest finite magnitude (0.0 when there is none).
    """

    size: int
    nan: int
    inf: int
    amax: float
    overflow: tuple[int, ...]
    underflow: tuple[int, ...]
    subnormal: tuple[int, ...]

    @property
    def clean(self) -> bool:
        """No NaN, no Inf and nothing that overflows or underflows in any format: every part
        of this array is clean too."""
        return not (self.nan or self.inf or any(self.overflow) or any(self.underflow))

    def __add__(self, other: ArrayStats) -> ArrayStats:
        return ArrayStats(
            self.size + other.size,
            self.nan + other.nan,
            self.inf + other.inf,
            max(self.amax, other.amax),
            tuple(a + b for a, b in zip(self.overflow, other.overflow)),
            tuple(a + b for a, b in zip(self.underflow, other.underflow)),
            tuple(a + b for a, b in zip(self.subnormal, other.subnormal)),
        )


def check_formats(formats: Any) -> tuple[Format, ...]:
    """The formats a probe counts: plain signed formats (a block or unsigned format has no
    per-value overflow and underflow ranges on both signs)."""
    items = [formats] if isinstance(formats, (str, Format)) else list(formats)
    out = []
    for i, spec in enumerate(items):
        fmt = get_format(spec)
        if not fmt.signed or not fmt.has_zero:
            raise BitprismError(
                f"formats[{i}]: {fmt.name} is unsigned; a probe counts signed formats "
                f"(bfloat16, float16, float8_e4m3fn, ...); got {spec!r}"
            )
        if fmt not in out:
            out.append(fmt)
    return tuple(out)


def readable(arr: np.ndarray) -> np.ndarray:
    """``arr`` as float32 or float64 values to compare (float16 and ml_dtypes floats widen
    exactly to float32; integers and booleans to float64)."""
    dt = arr.dtype
    if dt == np.float32 or dt == np.float64:
        return arr
    if dt.kind in "iub":
        return arr.astype(np.float64)
    if dt.kind == "f" and dt.itemsize <= 4 or dt.kind == "V":
        return arr.astype(np.float32)
    raise UnsupportedInputError(f"a probe reads real numbers; got {dt} data")


@dataclass(frozen=True)
class _Cuts:
    """One sign's thresholds of every format, typed for one carrier dtype."""

    over: tuple[Any, ...]
    nonzero: tuple[Any, ...]
    normal: tuple[Any, ...]
    least_over: Any = field(init=False)
    most_normal: Any = field(init=False)
    cuts: tuple[tuple[float, Any], ...] = field(init=False)

    def __post_init__(self) -> None:
        object.__setattr__(self, "least_over", min(self.over))
        object.__setattr__(self, "most_normal", max(self.normal))
        # the distinct cuts below "normal", ascending, as (float, typed) pairs
        values = sorted(set(self.nonzero) | set(self.normal))
        object.__setattr__(self, "cuts", tuple((float(v), v) for v in values))


def _typed(t: float, dtype: np.dtype) -> Any:
    """The smallest ``dtype`` value >= ``t``: ``a >= that`` counts exactly the ``a >= t``."""
    if dtype == np.float64:
        return np.float64(t)
    pattern = pattern_at_least(t, False)
    return np.array([pattern], np.uint32).view(np.float32)[0]


class Counter:
    """Counts outputs in ``formats`` with the cast ``options`` (thresholds computed once)."""

    def __init__(self, formats: Sequence[Format], options: CastOptions) -> None:
        self.formats = tuple(formats)
        if options.rounding == "stochastic":
            options = replace(options, rounding="roundTiesToEven", seed=None)
        self.options = options
        pos = [cast_thresholds(f, options, False) for f in self.formats]
        neg = [cast_thresholds(f, options, True) for f in self.formats]
        self.symmetric = pos == neg
        self._cuts: dict[tuple[np.dtype, bool], _Cuts] = {}
        self._raw = {False: pos, True: neg}
        self.zero = ArrayStats(0, 0, 0, 0.0, *([(0,) * len(self.formats)] * 3))

    def _cuts_for(self, dtype: np.dtype, negative: bool) -> _Cuts:
        key = (dtype, negative)
        cuts = self._cuts.get(key)
        if cuts is None:
            raw: list[Thresholds] = self._raw[negative]
            cuts = _Cuts(
                tuple(_typed(t.overflow_from, dtype) for t in raw),
                tuple(_typed(t.nonzero_from, dtype) for t in raw),
                tuple(_typed(t.normal_from, dtype) for t in raw),
            )
            self._cuts[key] = cuts
        return cuts

    def scalar(self, value: float) -> ArrayStats:
        """Counts of one Python number (constants: no numpy passes)."""
        v = float(value)
        if math.isnan(v):
            return replace(self.zero, size=1, nan=1)
        if math.isinf(v):
            return replace(self.zero, size=1, inf=1)
        return self.stats(np.array([v]))

    def stats(self, data: Any, narrow: bool = False) -> ArrayStats:
        """Counts of an array (any real dtype; a numpy scalar or 0-d array counts as one).
        ``narrow``: float64 data whose every value float32 holds exactly (an emulated format's
        values), counted as float32, which halves the bytes each pass reads."""
        arr = np.asarray(data)
        size = int(arr.size)
        if size == 0:
            return replace(self.zero, size=size)
        flat = arr.reshape(-1)
        if not self.symmetric:
            return self._by_sign(readable(flat), size)
        total = None
        for start in range(0, size, COUNT_BLOCK):
            part = self._block(flat[start:start + COUNT_BLOCK], narrow)
            total = part if total is None else total + part
        assert total is not None
        return total

    def _block(self, block: np.ndarray, narrow: bool = False) -> ArrayStats:
        """One block's counts, its magnitudes in a reused buffer (no allocation)."""
        wide = block.dtype == np.float64 and not narrow or block.dtype.kind in "iub"
        dtype = np.dtype(np.float64) if wide else np.dtype(np.float32)
        mags = buffer("count-mags", dtype, block.size)
        if block.dtype == dtype:
            np.abs(block, out=mags)
        else:
            with np.errstate(invalid="ignore"):  # a signaling NaN converts quietly
                mags[...] = block  # float16, ml_dtypes floats and integers widen exactly
            np.abs(mags, out=mags)
        return self._count(mags, block.size, False)

    def _by_sign(self, flat: np.ndarray, size: int) -> ArrayStats:
        """Directed rounding: each sign has its own thresholds."""
        with np.errstate(invalid="ignore"):
            pos = self._count(flat[flat >= 0], 0, False)
            neg = self._count(-flat[flat < 0], 0, True)
        nan = int(np.count_nonzero(np.isnan(flat)))
        return replace(pos + neg, size=size, nan=nan)

    def _count(self, mags: np.ndarray, size: int, negative: bool) -> ArrayStats:
        """Counts over magnitudes (NaN compare false everywhere, so they fall out)."""
        n = len(self.formats)
        if mags.size == 0:
            return replace(self.zero, size=size)
        top = mags.max()
        nan = inf = 0
        amax = float(top)
        if not math.isfinite(amax):
            nan = int(np.count_nonzero(np.isnan(mags)))
            inf = int(np.count_nonzero(np.isinf(mags)))
            amax = float(np.max(mags, where=np.isfinite(mags), initial=0.0))
            top = np.inf if inf else top.dtype.type(amax)
        if n == 0:
            return ArrayStats(size, nan, inf, amax, (), (), ())
        cuts = self._cuts_for(mags.dtype, negative)
        flags = buffer("count-flags", np.bool_, mags.size)
        over = [0] * n
        if top >= cuts.least_over:
            over = [int(np.count_nonzero(np.greater_equal(mags, c, out=flags))) - inf
                    if top >= c else 0 for c in cuts.over]
        under = [0] * n
        sub = [0] * n
        low = np.fmin.reduce(mags)
        if low < cuts.most_normal:
            below = self._below(mags, low, cuts, flags)
            zeros = below[0.0]
            for i in range(n):
                below_nonzero = below[cuts.nonzero[i]]
                under[i] = max(below_nonzero - zeros, 0)
                sub[i] = below[cuts.normal[i]] - max(below_nonzero, zeros)
        return ArrayStats(size, nan, inf, amax, tuple(over), tuple(under), tuple(sub))

    @staticmethod
    def _below(mags: np.ndarray, low: Any, cuts: _Cuts, flags: np.ndarray) -> dict[Any, int]:
        """How many magnitudes are below each cut (key 0.0: how many are zero). When few
        nonzero values are small they are picked out once and counted again; when many are,
        each cut counts the whole block (picking out a large share costs more than the passes).
        Zeros (half of a ReLU's output) are counted apart, so they do not force the passes."""
        pool = mags
        n_small = int(np.count_nonzero(np.less(mags, cuts.most_normal, out=flags)))
        zeros = 0
        if n_small and float(low) == 0.0:
            other = buffer("count-other", np.bool_, mags.size)
            zeros = int(np.count_nonzero(np.equal(mags, 0, out=other)))
            if zeros and (n_small - zeros) * 8 <= mags.size:
                np.logical_and(flags, np.logical_not(other, out=other), out=flags)
        if (n_small - zeros) * 8 <= mags.size:
            pool = mags[flags]  # the small values (nonzero ones only, when zeros were counted)
        counted_zeros = zeros if pool is not mags else 0
        out: dict[Any, int] = {0.0: zeros}
        small = buffer("count-small", np.bool_, pool.size) if pool is not mags else flags
        floor = float(low)
        top = float(cuts.most_normal)
        for value, cut in cuts.cuts:
            if value <= floor or value == 0.0:
                out[cut] = 0
            elif value == top:
                out[cut] = n_small
            else:  # the zeros left out of the pool are below every cut
                out[cut] = int(np.count_nonzero(np.less(pool, cut, out=small))) + counted_zeros
        return out

    def holds(self, data: Any, kind: str, index: int = 0) -> bool:
        """Whether an array holds any ``"nan"``, ``"inf"``, or values that overflow
        (``"overflow"``) or underflow to zero (``"underflow"``) in format ``index``: what a
        record needs to know of an input, found without counting it all (block by block,
        stopping at the first block that has one)."""
        arr = np.asarray(data)
        if arr.size == 0:
            return False
        if not self.symmetric:
            stats = self.stats(arr)
            return bool(_pick(stats, kind, index))
        flat = arr.reshape(-1)
        for start in range(0, flat.size, COUNT_BLOCK):
            block = flat[start:start + COUNT_BLOCK]
            wide = block.dtype == np.float64 or block.dtype.kind in "iub"
            mags = buffer("count-mags", np.float64 if wide else np.float32, block.size)
            with np.errstate(invalid="ignore"):  # a signaling NaN converts quietly
                mags[...] = block
            np.abs(mags, out=mags)
            flags = buffer("count-flags", np.bool_, block.size)
            if self._block_holds(mags, kind, index, flags):
                return True
        return False

    def _block_holds(self, mags: np.ndarray, kind: str, index: int, flags: np.ndarray) -> bool:
        if kind == "nan":
            return bool(np.isnan(mags, out=flags).any())
        if kind == "inf":
            return bool(np.isinf(mags, out=flags).any())
        cuts = self._cuts_for(mags.dtype, False)
        if kind == "overflow":
            cut = cuts.over[index]
            if mags.max() < cut:  # a NaN makes the maximum NaN, which is not below: count
                return False
            np.greater_equal(mags, cut, out=flags)
            return int(np.count_nonzero(flags)) > int(np.count_nonzero(np.isinf(mags)))
        cut = cuts.nonzero[index]
        if cut == 0 or not np.fmin.reduce(mags) < cut:
            return False
        np.less(mags, cut, out=flags)
        return int(np.count_nonzero(flags)) > int(np.count_nonzero(mags == 0))


def _pick(stats: ArrayStats, kind: str, index: int) -> int:
    if kind in ("nan", "inf"):
        return int(getattr(stats, kind))
    return int(getattr(stats, kind)[index])

