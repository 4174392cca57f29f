"""``trace()``: run a function with every numpy (or torch) operation intercepted, and find the
first operation where a NaN, an Inf, an overflow or an underflow is born.

numpy: the array arguments are wrapped as ``TracedArray`` (``numpy_trace``), whose
``__array_ufunc__`` and ``__array_function__`` (NEP 13, NEP 18) send each operation to
``numpy_ops``. torch: the call runs inside a ``torch.overrides.TorchFunctionMode``
(``torch_trace``; torch is imported only when a torch tensor or module is among the arguments).
Both halves fill one ``Session``, which becomes the ``Trace``.
"""

from __future__ import annotations

import inspect
from dataclasses import dataclass, field
from typing import Any, Callable

import numpy as np

from ..display import Plottable
from ..errors import BitprismError
from ..formats import Format
from ..numerics.options import CastOptions
from .arguments import check_callable, holds_torch, probe_settings
from .capture import CaptureStore
from .cases import ProbeCase, SharesCases, first_position, trace_case
from .numpy_trace import run_numpy
from .records import EVENTS, OpRecord, first_record
from .session import Session
from .views import open_view

__all__ = ["Trace", "trace"]


@dataclass(frozen=True)
class Trace(SharesCases, Plottable):
    """What ``trace()`` saw: one ``OpRecord`` per operation, and the function's result.

    Attributes:
        function: the traced function's name.
        backend: ``"numpy"`` or ``"torch"``.
        ops: the records, in the order the operations ran.
        formats: the formats counted (the emulated one included).
        options: the cast options of the counts and of the emulation.
        emulate, accumulate, chunk: the emulation (None: the code ran as written).
        shadow: ``"float64"`` when a shadow ran beside it, else None.
        result: what the function returned, traced arrays made plain numpy arrays (torch:
            tensors as returned); with ``emulate``, floating-point values are float64 arrays
            (tensors) holding values of the emulated format.
        shadow_result: the same from the float64 shadow (None without a shadow).
    """

    function: str
    backend: str
    ops: tuple[OpRecord, ...]
    formats: tuple[Format, ...]
    options: CastOptions
    emulate: Format | None
    accumulate: Format | None
    chunk: int | None
    shadow: str | None
    result: Any = field(default=None, compare=False, repr=False)
    shadow_result: Any = field(default=None, compare=False, repr=False)
    captures: CaptureStore = field(default_factory=lambda: CaptureStore(0), compare=False,
                                   repr=False)

    def first(self, event: str, fmt: Any = None) -> OpRecord | None:
        """The first record where ``event`` is born ("nan", "inf", "nonfinite", "overflow",
        "underflow"); ``fmt`` picks one format for overflow and underflow. None if none is."""
        return first_record(self.ops, event, fmt, self.formats)

    def first_events(self) -> list[tuple[str, str | None, OpRecord]]:
        """(event, format or None, record) for every event born somewhere, in the order the
        records ran (at one record: NaN, Inf, overflow, underflow)."""
        out: list[tuple[str, str | None, OpRecord]] = []
        for event in EVENTS:
            fmts: list[str | None] = [None] if event not in ("overflow", "underflow") else [
                f.name for f in self.formats]
            for name in fmts:
                if event == "nonfinite":
                    continue
                rec = self.first(event, name)
                if rec is not None:
                    out.append((event, name, rec))
        return sorted(out, key=lambda e: e[2].index)

    def first_bad(self) -> tuple[str, str | None, OpRecord] | None:
        """The earliest (event, format, record) of ``first_events`` (ties: NaN and Inf before
        overflow before underflow)."""
        found = self.first_events()
        return min(found, key=lambda e: e[2].index) if found else None

    def _record(self, record: OpRecord | int) -> OpRecord:
        index = record.index if isinstance(record, OpRecord) else record
        if isinstance(index, bool) or not isinstance(index, (int, np.integer)) or not (
            0 <= int(index) < len(self.ops)
        ):
            raise BitprismError(
                f"record must be an OpRecord of this trace or an index 0..{len(self.ops) - 1}; "
                f"got {record!r}"
            )
        return self.ops[int(index)]

    def output(self, record: OpRecord | int) -> np.ndarray:
        """The captured output of ``record`` (a numpy array with the original bits)."""
        rec = self._record(record)
        return self.captures.get(rec.index, f"the output of {rec.label}").output

    def input_arrays(self, record: OpRecord | int) -> tuple[np.ndarray, ...]:
        """The captured array inputs of ``record``, in order."""
        rec = self._record(record)
        return self.captures.get(rec.index, f"the inputs of {rec.label}").inputs

    def open(self, record: OpRecord | int) -> Any:
        """A ``TensorPrism`` of the captured output of ``record`` (the first element where its
        event is born selected)."""
        rec = self._record(record)
        out = self.output(rec)
        return open_view(out, self.formats, first_position(out, rec, self.formats))

    def inputs(self, record: OpRecord | int) -> list[Any]:
        """One ``TensorPrism`` per captured array input of ``record``."""
        return [open_view(a, self.formats, None) for a in self.input_arrays(record)]

    # ----- case files ---------------------------------------------------------------------------
    def case(self, event: str | None = None, fmt: Any = None, note: str = "") -> ProbeCase:
        """The first-event view as a ``ProbeCase`` (``event`` None: the earliest event born)."""
        return trace_case(self, event, fmt, note)


def _names(fn: Callable[..., Any], count: int) -> list[str]:
    """How messages name the positional arguments: ``argument 'x' (args[0])``."""
    names = [f"args[{i}]" for i in range(count)]
    try:
        params = [p for p in inspect.signature(fn).parameters.values()
                  if p.kind in (p.POSITIONAL_ONLY, p.POSITIONAL_OR_KEYWORD)]
    except (TypeError, ValueError):
        return names
    for i, p in enumerate(params[:count]):
        names[i] = f"argument {p.name!r} (args[{i}])"
    return names


def trace(
    fn: Callable[..., Any],
    *args: Any,
    kwargs: dict[str, Any] | None = None,
    formats: Any = None,
    emulate: Any = None,
    rounding: str | None = None,
    overflow: str | None = None,
    subnormals: str | None = None,
    accumulate: Any = None,
    chunk: int | None = 32,
    shadow: str | None = None,
    capture_mib: float = 64,
    seed: int | None = None,
) -> Trace:
    """Run ``fn(*args, **kwargs)`` with every numpy (or torch) operation recorded.

    Args:
        fn, args, kwargs: the function and its arguments. numpy arrays among them (also inside
            lists, tuples and dicts) are traced, and so is everything computed from them;
            torch tensors make it a torch trace (CPU). Other arguments pass through untouched.
        formats: the formats whose overflow, underflow and subnormal counts each output gets
            (default: bfloat16, float16, float8_e4m3fn, float8_e5m2).
        emulate: run the code as if in this format: inputs and constants rounded to it on
            entry, every floating-point result rounded once to it (values kept in float64).
        rounding, overflow, subnormals, seed: the cast options of the counts and the emulation.
        accumulate: the format sums and products accumulate in (default: ``emulate``); the
            accumulator is rounded every ``chunk`` terms (None: once, at the end).
        shadow: ``"float64"`` recomputes every operation in float64 beside the run and records
            each output's relative error against it.
        capture_mib: the copies of outputs and inputs kept for ``open``, ``inputs`` and case
            files (the records where an event is born first) never exceed this many MiB.
    """
    check_callable(fn)
    kw = {} if kwargs is None else kwargs
    if not isinstance(kw, dict):
        raise BitprismError(f"kwargs must be a dict of keyword arguments or None; got {kwargs!r}")
    settings = probe_settings(formats, rounding, overflow, subnormals, seed, emulate,
                              accumulate, chunk, shadow, capture_mib)
    name = getattr(fn, "__qualname__", None) or getattr(fn, "__name__", None) or type(fn).__name__
    torch_args = holds_torch(args, kw)
    session = Session(str(name), settings.formats, settings.options, settings.emulator(),
                      settings.shadow, settings.capture_bytes,
                      "torch" if torch_args else "numpy")
    names = _names(fn, len(args))
    if torch_args:
        from .torch_trace import run_torch

        result, shadow_out = run_torch(session, fn, args, kw, names)
    else:
        result, shadow_out = run_numpy(session, fn, args, kw, names)
    return Trace(session.function, session.backend, tuple(session.records), settings.formats,
                 settings.options, settings.emulate, settings.accumulate,
                 settings.chunk if settings.emulate is not None else None,
                 "float64" if settings.shadow else None, result, shadow_out, session.captures)
