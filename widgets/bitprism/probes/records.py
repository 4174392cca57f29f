"""The records a trace and a watch keep: one per operation (``OpRecord``) or per module call
(``WatchRecord``), frozen, with the per-format counts (``FormatCounts``).

Where an event is *born* (``first(event)``):

* ``"nan"`` / ``"inf"``: the output holds a NaN (an Inf) that no input put there. For an
  elementwise operation this is decided element by element (broadcasting followed); for any
  other operation (a reduction, a product, a function), an output NaN counts as born only when
  no input holds a NaN (the same for Inf: an Inf - Inf that makes NaN is born there).
* ``"nonfinite"``: a NaN or an Inf is born.
* ``"overflow"`` / ``"underflow"`` in a format: the output holds values that overflow
  (underflow to zero) in that format and no array input does (a constant such as ``1e-30``
  that does not fit the format is not an input here: the operation using it is where the data
  leaves the format's range).
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from typing import Any, Iterable, Sequence, TypeVar

from ..errors import BitprismError
from ..formats import Format, get_format

__all__ = [
    "EVENTS",
    "FormatCounts",
    "OpRecord",
    "RecordCounts",
    "WatchRecord",
    "check_event",
    "first_record",
]

EVENTS = ("nan", "inf", "nonfinite", "overflow", "underflow")


@dataclass(frozen=True)
class FormatCounts:
    """What a cast of an output into one format would do: values that overflow, underflow to
    zero, land subnormal; and whether overflow / underflow is born in this record."""

    format: str
    overflow: int
    underflow: int
    subnormal: int
    overflow_born: bool = False
    underflow_born: bool = False


@dataclass(frozen=True)
class RecordCounts:
    """The counts every record carries (shared by ``OpRecord`` and ``WatchRecord``)."""

    size: int
    nan: int
    inf: int
    created_nan: int
    created_inf: int
    amax: float
    counts: tuple[FormatCounts, ...]

    def count(self, fmt: Any) -> FormatCounts:
        """The ``FormatCounts`` of one format (by name or ``Format``)."""
        name = get_format(fmt).name
        for c in self.counts:
            if c.format == name:
                return c
        raise BitprismError(
            f"fmt must be one of the probe's formats ({', '.join(c.format for c in self.counts)}); "
            f"got {fmt!r}"
        )

    def born(self, event: str, fmt: Any = None) -> bool:
        """Whether ``event`` is born here (see the module docstring); ``fmt`` chooses one
        format for "overflow" and "underflow" (None: any of them)."""
        check_event(event, fmt)
        if event == "nan":
            return self.created_nan > 0
        if event == "inf":
            return self.created_inf > 0
        if event == "nonfinite":
            return self.created_nan + self.created_inf > 0
        chosen = self.counts if fmt is None else (self.count(fmt),)
        if event == "overflow":
            return any(c.overflow_born for c in chosen)
        return any(c.underflow_born for c in chosen)

    def events(self) -> tuple[str, ...]:
        """Every event born here, as words: 'NaN', 'Inf', 'overflow float16', ..."""
        out = []
        if self.created_nan:
            out.append("NaN")
        if self.created_inf:
            out.append("Inf")
        out += [f"overflow {c.format}" for c in self.counts if c.overflow_born]
        out += [f"underflow {c.format}" for c in self.counts if c.underflow_born]
        return tuple(out)


@dataclass(frozen=True)
class OpRecord(RecordCounts):
    """One operation of a trace.

    Attributes:
        index: its place in the trace (0-based).
        name: the operation: a ufunc's name (``exp``, ``subtract``, ``matmul``), ``sum``,
            ``max``, ``min``, ``prod`` for the reductions of add, maximum, minimum, multiply,
            other ufunc methods as ``name.method``; a numpy function's name (``concatenate``,
            ``einsum``); torch operations under the same names where numpy has one.
        filename, lineno, function: the caller's source location (the first frame outside
            numpy, torch and bitprism).
        input_shapes, input_dtypes: of the array (tensor) inputs, in order.
        output_shapes, output_dtypes: of the outputs.
        size, nan, inf, amax: elements, NaN and Inf of the outputs, largest finite magnitude.
        created_nan, created_inf: NaN and Inf born here (see the module docstring).
        counts: one ``FormatCounts`` per format of the trace.
        in_place: the operation wrote into one of its inputs (``out=``, ``+=``, ``add_``).
        emulated: the result was rounded to the emulated format.
        shadow_max_rel, shadow_mean_rel: with a shadow, the largest and the mean relative error
            of the output against the float64 shadow (elements where the shadow is finite and
            nonzero; an output that is not finite there counts as an infinite error in the
            largest and is left out of the mean); None without a shadow.
    """

    index: int = 0
    name: str = ""
    filename: str = ""
    lineno: int = 0
    function: str = ""
    input_shapes: tuple[tuple[int, ...], ...] = ()
    input_dtypes: tuple[str, ...] = ()
    output_shapes: tuple[tuple[int, ...], ...] = ()
    output_dtypes: tuple[str, ...] = ()
    in_place: bool = False
    emulated: bool = False
    shadow_max_rel: float | None = None
    shadow_mean_rel: float | None = None

    @property
    def location(self) -> str:
        """``file.py:12`` (the file's name only)."""
        return f"{os.path.basename(self.filename)}:{self.lineno}"

    @property
    def label(self) -> str:
        return f"#{self.index} {self.name} at {self.location} in {self.function}"


@dataclass(frozen=True)
class WatchRecord(RecordCounts):
    """One tensor a watch scanned.

    Attributes:
        index: its place in the watch (0-based, in the order scanned).
        module: the module's qualified name as ``named_modules()`` gives it ("" is the watched
            module itself); for a weight, the parameter's name (``"fc1.weight"``).
        module_type: the module's class name (``Linear``).
        call: the call number of that module (0-based; weights 0).
        kind: ``"output"``, ``"grad"`` or ``"weight"``.
        shape, dtype: of the tensor (several outputs: the first one's shape, sizes added).
    """

    index: int = 0
    module: str = ""
    module_type: str = ""
    call: int = 0
    kind: str = "output"
    shape: tuple[int, ...] = ()
    dtype: str = ""

    @property
    def label(self) -> str:
        where = self.module or "(the watched module)"
        return f"{where} ({self.module_type}), {self.kind}" + (
            f", call {self.call}" if self.kind != "weight" else "")


def check_event(event: str, fmt: Any = None) -> None:
    if event not in EVENTS:
        raise BitprismError(f"event must be one of {', '.join(EVENTS)}; got {event!r}")
    if fmt is not None and event not in ("overflow", "underflow"):
        raise BitprismError(
            f"fmt chooses the format of 'overflow' and 'underflow'; {event!r} is counted in the "
            f"computation itself, so leave fmt=None (got fmt={fmt!r})"
        )


R = TypeVar("R", bound=RecordCounts)


def first_record(records: Iterable[R], event: str, fmt: Any,
                 formats: Sequence[Format]) -> R | None:
    """The first record where ``event`` is born (``fmt``: one of ``formats``, or None)."""
    check_event(event, fmt)
    if fmt is not None:
        name = get_format(fmt).name
        if name not in [f.name for f in formats]:
            raise BitprismError(
                f"fmt must be one of the formats counted ({', '.join(f.name for f in formats)}); "
                f"got {fmt!r}"
            )
    for record in records:
        if record.born(event, fmt):
            return record
    return None
