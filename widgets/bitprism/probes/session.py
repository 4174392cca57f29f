"""The bookkeeping one trace shares between its numpy and torch halves: the counter, the
records, where each event was born first, and the captures.

An interceptor (``numpy_trace``, ``torch_trace``) computes an operation, then hands the
session its inputs (``Operand``: shape, dtype, and the counts, computed only when needed) and
its outputs as numpy arrays with the original bits; ``Session.add`` decides what is born
there (``records`` module docstring), keeps copies for the first events, and appends the
``OpRecord``.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Callable, Sequence

import numpy as np

from ..formats import Format
from ..numerics.options import CastOptions
from .capture import CaptureStore
from .emulate import Emulator
from .records import FormatCounts, OpRecord, RecordCounts
from .scratch import COUNT_BLOCK
from .stats import ArrayStats, Counter, readable

__all__ = ["Operand", "Session", "born_counts", "created_count", "new_events", "shadow_error"]


@dataclass
class Operand:
    """One input of an operation: an array (numpy, original bits) or a Python number.

    ``stats`` is filled when first asked for (most operations create nothing, and then no
    input is counted); a traced array brings the counts it was made with.
    """

    value: Any
    counter: Counter
    stats_known: ArrayStats | None = None
    shape: tuple[int, ...] = ()
    dtype: str = ""
    is_array: bool = True
    owner: Any = None  # a traced array: the counts, once made, are kept on it
    answers: dict[tuple[str, int], bool] = field(default_factory=dict)

    @property
    def stats(self) -> ArrayStats:
        if self.stats_known is None:
            if self.is_array:
                self.stats_known = self.counter.stats(self.value)
            else:
                self.stats_known = self.counter.scalar(self.value)
            if self.owner is not None:
                self.owner._bp_stats = self.stats_known
        return self.stats_known

    def holds(self, kind: str, index: int = 0) -> bool:
        """Whether this input holds a NaN or Inf (``kind``), or values that overflow or
        underflow in format ``index``: from its counts when known, else looked for (a full
        count is not needed to answer, and most inputs are never asked)."""
        if self.stats_known is None and (not self.is_array or np.size(self.value) <= COUNT_BLOCK):
            self.stats_known = self.stats  # one block: a full count costs what a question does
        if self.stats_known is not None:
            s = self.stats_known
            return bool(getattr(s, kind) if kind in ("nan", "inf") else getattr(s, kind)[index])
        key = (kind, index)
        if key not in self.answers:
            if self.is_array:
                self.answers[key] = self.counter.holds(self.value, kind, index)
            else:
                s = self.stats
                self.answers[key] = bool(getattr(s, kind) if kind in ("nan", "inf")
                                         else getattr(s, kind)[index])
        return self.answers[key]

    def mask(self, kind: str) -> Any:
        """Where this input is NaN (``kind="nan"``) or Inf, for an elementwise operation."""
        arr = readable(np.asarray(self.value))
        return np.isnan(arr) if kind == "nan" else np.isinf(arr)


def shadow_error(values: np.ndarray, shadow: np.ndarray) -> tuple[float, float]:
    """(largest, mean) relative error of ``values`` against a float64 ``shadow``, over the
    elements where the shadow is finite and nonzero (see ``OpRecord``)."""
    v = np.asarray(values, np.float64)
    s = np.broadcast_to(np.asarray(shadow, np.float64), v.shape)
    with np.errstate(all="ignore"):
        usable = np.isfinite(s) & (s != 0)
        if not usable.any():
            return 0.0, 0.0
        rel = np.abs(v - s) / np.abs(s)
        lost = usable & ~np.isfinite(rel)
        good = usable & ~lost
        largest = float("inf") if lost.any() else float(np.max(rel, where=good, initial=0.0))
        mean = float(np.mean(rel, where=good)) if good.any() else 0.0
    return largest, mean


def born_counts(formats: Sequence[Format], stats: ArrayStats,
                inputs: Sequence[Operand]) -> tuple[FormatCounts, ...]:
    """One ``FormatCounts`` per format: the output's counts, with overflow (underflow) born
    where the output has some and no array input has any in that format (a constant that
    does not fit the format is reported where it is used)."""
    counts = []
    inputs = [op for op in inputs if op.is_array and op.shape != ()]
    for i, fmt in enumerate(formats):
        over, under = stats.overflow[i], stats.underflow[i]
        over_born = bool(over) and not any(op.holds("overflow", i) for op in inputs)
        under_born = bool(under) and not any(op.holds("underflow", i) for op in inputs)
        counts.append(FormatCounts(fmt.name, over, under, stats.subnormal[i], over_born,
                                   under_born))
    return tuple(counts)


def created_count(kind: str, count: int, inputs: Sequence[Operand],
                  outputs: Sequence[np.ndarray], elementwise: bool) -> int:
    """How many of an output's ``count`` NaN (``kind="nan"``) or Inf no input put there."""
    if not count:
        return 0
    holding = [op for op in inputs if op.holds(kind)]
    if not holding:
        return count
    if not elementwise or len(outputs) != 1:
        return 0
    out = readable(np.asarray(outputs[0]))
    here = np.isnan(out) if kind == "nan" else np.isinf(out)
    inherited = np.zeros(out.shape, bool)
    for op in holding:
        inherited = inherited | op.mask(kind)
    return int(np.count_nonzero(here & ~np.broadcast_to(inherited, out.shape)))


def new_events(seen: set[tuple[str, str | None]], record: RecordCounts) -> bool:
    """Mark in ``seen`` the events first born in ``record``; True when there is one."""
    keys: list[tuple[str, str | None]] = []
    if record.created_nan:
        keys.append(("nan", None))
    if record.created_inf:
        keys.append(("inf", None))
    keys += [("overflow", c.format) for c in record.counts if c.overflow_born]
    keys += [("underflow", c.format) for c in record.counts if c.underflow_born]
    new = [k for k in keys if k not in seen]
    seen.update(new)
    return bool(new)


@dataclass
class Session:
    """One trace's state (see the module docstring)."""

    function: str
    formats: tuple[Format, ...]
    options: CastOptions
    emulator: Emulator | None
    shadow: bool
    capture_bytes: int
    backend: str = "numpy"
    records: list[OpRecord] = field(default_factory=list)
    seen: set[tuple[str, str | None]] = field(default_factory=set)
    active: bool = True

    def __post_init__(self) -> None:
        self.counter = Counter(self.formats, self.options)
        self.captures = CaptureStore(self.capture_bytes)

    def operand(self, value: Any, stats: ArrayStats | None = None) -> Operand:
        if isinstance(value, np.ndarray | np.generic):
            return Operand(value, self.counter, stats, tuple(np.shape(value)),
                           str(np.asarray(value).dtype))
        return Operand(value, self.counter, stats, (), type(value).__name__, is_array=False)

    def add(
        self,
        name: str,
        location: tuple[str, int, str],
        inputs: Sequence[Operand],
        outputs: Sequence[np.ndarray],
        stats: ArrayStats,
        *,
        elementwise: bool = False,
        in_place: bool = False,
        emulated: bool = False,
        shadow: tuple[float, float] | None = None,
        capture_inputs: Callable[[], Sequence[np.ndarray]] | None = None,
    ) -> OpRecord:
        """Record one operation (``outputs``: numpy arrays with the original bits; ``stats``:
        their counts, added up)."""
        arrays = [op for op in inputs if op.is_array]
        created_nan = created_count("nan", stats.nan, inputs, outputs, elementwise)
        created_inf = created_count("inf", stats.inf, inputs, outputs, elementwise)
        counts = born_counts(self.formats, stats, inputs)
        filename, lineno, function = location
        record = OpRecord(
            size=stats.size, nan=stats.nan, inf=stats.inf, created_nan=created_nan,
            created_inf=created_inf, amax=stats.amax, counts=counts,
            index=len(self.records), name=name, filename=filename, lineno=lineno,
            function=function,
            input_shapes=tuple(op.shape for op in arrays),
            input_dtypes=tuple(op.dtype for op in arrays),
            output_shapes=tuple(tuple(o.shape) for o in outputs),
            output_dtypes=tuple(str(o.dtype) for o in outputs),
            in_place=in_place, emulated=emulated,
            shadow_max_rel=None if shadow is None else shadow[0],
            shadow_mean_rel=None if shadow is None else shadow[1],
        )
        self.records.append(record)
        if new_events(self.seen, record) and outputs:
            self._capture(record, outputs, arrays, capture_inputs)
        return record

    def _capture(self, record: OpRecord, outputs: Sequence[np.ndarray], arrays: Sequence[Operand],
                 capture_inputs: Callable[[], Sequence[np.ndarray]] | None) -> None:
        def inputs() -> Sequence[np.ndarray]:
            if capture_inputs is not None:
                return capture_inputs()
            return [np.asarray(op.value) for op in arrays]

        nbytes = int(np.asarray(outputs[0]).nbytes) + sum(
            int(np.asarray(op.value).nbytes) for op in arrays)
        self.captures.offer(record.index, lambda: np.asarray(outputs[0]), inputs, nbytes)
