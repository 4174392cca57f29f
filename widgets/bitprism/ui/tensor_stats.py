"""Whole-tensor figures of a ``TensorPrism``: the summary scan and the counts its find buttons
show, cached per version of the data (``token``) so that a pan never rescans the tensor.

Only one summary is kept (tensors can be large); its counts of NaN, Inf, overflow and
underflow also fill the count cache, so the find buttons need no scan of their own. A reopened
case brings the summary and counts its author saw (``record``): they are shown while the
settings they were made with are in effect, since the case holds only a window of the tensor.
"""

from __future__ import annotations

from typing import Any, Sequence

import numpy as np

from ..formats import Format, get_format
from ..numerics.options import CastOptions
from ..tensors.scan import ScanResult, ScanTuning, scan
from ..tensors.window import count_kinds, largest_error
from .summary_record import COUNT_KINDS, RecordedCounts

__all__ = ["TensorStats", "summary_target"]


def summary_target(
    arr: np.ndarray, scope: str, row_axis: int | None, col_axis: int, fixed: tuple[int, ...]
) -> tuple[np.ndarray, tuple[tuple[int, int], ...]]:
    """What the summary scans: the whole tensor, or the 2-D slice shown (with its
    ``(axis, index)`` pairs)."""
    if scope == "tensor" or arr.ndim <= 2:
        return arr, ()
    key: list[Any] = []
    fixed = fixed or (0,) * arr.ndim
    for ax in range(arr.ndim):
        key.append(slice(None) if ax in (row_axis, col_axis) else fixed[ax])
    return arr[tuple(key)], tuple(
        (ax, fixed[ax]) for ax in range(arr.ndim) if ax not in (row_axis, col_axis))


_TUNING = ScanTuning()


class TensorStats:
    """The cached summary scan, per-kind counts and largest errors of one widget's tensor."""

    def __init__(self) -> None:
        self._summary_cache: dict[Any, ScanResult] = {}
        self._summary_key: Any = None
        self._count_cache: dict[Any, int] = {}
        self._largest_cache: dict[Any, tuple[float | None, int]] = {}
        self._recorded: tuple[Any, ScanResult, str] | None = None  # (key, summary, scope)
        self._recorded_keys: set[Any] = set()  # count and largest-error keys a case recorded

    @staticmethod
    def _record_key(token: int, formats: Sequence[Any], opts: CastOptions,
                    scope: str) -> Any:
        return (token, tuple(get_format(f) for f in formats), opts, scope)

    def record(self, token: int, formats: Sequence[Any], opts: CastOptions,
               summary: tuple[ScanResult, str] | None,
               counts: Sequence[tuple[str, Format | None, CastOptions, int]],
               largest: Sequence[tuple[Format, CastOptions, str, float | None, int]]) -> None:
        """What a case recorded: the summary (and its scope: 'tensor' or 'slice') made with
        ``formats`` and ``opts``, counts ``(kind, format or None, options, n)`` and largest
        errors ``(format, options, unit, error, cells)``; all for the data of ``token``."""
        if summary is not None and summary[1] in ("tensor", "slice"):
            self._recorded = (self._record_key(token, formats, opts, summary[1]), *summary)
            self._summary_key = None  # the next summary() shows the recorded one
        for kind, fmt, o, n in counts:
            self._count_cache[(token, kind, fmt, o)] = n
            self._recorded_keys.add((token, kind, fmt, o))
        for fmt, o, unit, best, n in largest:
            self._largest_cache[(token, fmt, o, unit)] = (best, n)
            self._recorded_keys.add((token, fmt, o, unit))

    def is_recorded(self, key: tuple[Any, ...]) -> bool:
        """Whether a count (``(token, kind, format, options)``) or largest error (``(token,
        format, options, unit)``) is one a case recorded."""
        return key in self._recorded_keys

    def known_count(self, token: int, kind: str, fmt: Format | None,
                    opts: CastOptions) -> int | None:
        """A count already made (or recorded), else ``None`` (never scans)."""
        return self._count_cache.get((token, kind, fmt, opts))

    def recorded(self, result: Any) -> bool:
        """Whether ``result`` is the summary a case recorded (not one made here)."""
        return self._recorded is not None and result is self._recorded[1]

    def summary(
        self, token: int, arr: np.ndarray, formats: Sequence[Any], opts: CastOptions,
        scope: str, quantiles: str, row_axis: int | None, col_axis: int, fixed: tuple[int, ...],
    ) -> tuple[ScanResult, bool] | None:
        """The summary scan for these settings and whether it holds counts only; ``None`` when
        it is the one returned last time (nothing to show anew). ``fixed`` indexes ``arr``."""
        if self._recorded is not None:
            key, result, _ = self._recorded
            if key == self._record_key(token, formats, opts, scope):
                if self._summary_key == key:
                    return None
                self._summary_key = key
                return result, result.quantiles == "none"
        target, where = summary_target(arr, scope, row_axis, col_axis, fixed)
        format_objects = [get_format(f) for f in formats]
        q = quantiles
        if q == "auto":
            n = target.size
            # exact while the scan keeps the values in one pass, a histogram while it would
            # not show a progress bar, else counts only
            q = "exact" if n <= _TUNING.keep_values else ("histogram" if n <= _TUNING.progress_min else "none")
        if opts.rounding == "stochastic" and q == "none":
            q = "histogram"
        key = (token, tuple(f.name if isinstance(f, Format) else f for f in formats),
               tuple(format_objects), opts, where, q)
        if key == self._summary_key:
            return None
        if key not in self._summary_cache:
            self._summary_cache.clear()  # one summary kept: tensors can be large
            self._summary_cache[key] = scan(
                target, format_objects, options=opts, progress=False,
                quantiles=False if q == "none" else q,
                exponents=True)  # the range chart draws the exponent histogram
        self._summary_key = key
        result = self._summary_cache[key]
        if scope == "tensor" or arr.ndim <= 2:
            for fs in result.formats:  # the scan's counts serve the navigation too
                f = fs.format
                for kind in ("nan", "inf", "overflow", "underflow"):
                    ck = (token, kind, None if kind in ("nan", "inf") else f, opts)
                    self._count_cache.setdefault(ck, getattr(fs, kind))
        return result, q == "none"

    def count(
        self, token: int, arr: np.ndarray, kind: str, fmt: Format | None, opts: CastOptions
    ) -> int:
        """How many cells of ``arr`` are of ``kind`` (``fmt`` is None for NaN and Inf)."""
        key = (token, kind, fmt, opts)
        if key not in self._count_cache:
            self._count_cache[key] = count_kinds(arr, fmt, opts, (kind,))[kind]
        return self._count_cache[key]

    def cheap_count(
        self, token: int, arr: np.ndarray, kind: str, fmt: Format | None, opts: CastOptions
    ) -> int | None:
        """``count(...)`` when it is known or costs little (a tensor the summary would scan
        without a progress bar); ``None`` for a whole pass over a larger tensor not yet made,
        so that opening a window costs what the window and its summary cost."""
        known = self._count_cache.get((token, kind, fmt, opts))
        if known is not None or arr.size > _TUNING.progress_min:
            return known
        return self.count(token, arr, kind, fmt, opts)

    def largest(
        self, token: int, arr: np.ndarray, fmt: Format, opts: CastOptions, unit: str
    ) -> tuple[float | None, int]:
        """The largest finite cast error into ``fmt`` and how many cells have it."""
        key = (token, fmt, opts, unit)
        if key not in self._largest_cache:
            self._largest_cache[key] = largest_error(arr, fmt, opts, unit)
        return self._largest_cache[key]

    def known_largest(
        self, token: int, fmt: Format, opts: CastOptions, unit: str
    ) -> tuple[float | None, int] | None:
        """``largest(...)`` if it was already computed, else ``None`` (never scans)."""
        return self._largest_cache.get((token, fmt, opts, unit))

    def counts_seen(self, token: int, fmt: Format, opts: CastOptions,
                    unit: str) -> RecordedCounts:
        """The counts known now (shown beside the find buttons) for format A ``fmt``, for a
        case to record; ``None`` for those not counted."""
        counts: dict[str, int | None] = {}
        for kind in COUNT_KINDS:
            counts[kind] = self.known_count(token, kind, None if kind in ("nan", "inf")
                                            else fmt, opts)
        known = self.known_largest(token, fmt, opts, unit)
        largest = None if known is None else (unit, known[0], known[1])
        return RecordedCounts(fmt.name, opts, counts, largest)

    def record_case(self, token: int, formats: Sequence[Format],
                    summary: tuple[ScanResult, str] | None, counts: RecordedCounts | None,
                    opts: CastOptions) -> None:
        """``record`` what a case read: its summary and its ``RecordedCounts``."""
        rec: list[tuple[str, Format | None, CastOptions, int]] = []
        largest: list[tuple[Format, CastOptions, str, float | None, int]] = []
        if counts is not None:
            fa = next(f for f in formats if f.name == counts.format)
            for kind, n in counts.counts.items():
                if n is not None:
                    rec.append((kind, None if kind in ("nan", "inf") else fa, counts.options, n))
            if counts.largest is not None:
                unit, best, n = counts.largest
                largest.append((fa, counts.options, unit, best, n))
        self.record(token, formats, summary[0].options if summary is not None else opts,
                    summary, rec, largest)
