"""``watch()``: a context manager that scans what every submodule of a torch model produces.

``with bp.watch(model, formats=["float16"]) as w: model(x)`` puts a forward hook (and, with
``grads=True``, a full backward hook) on every module ``named_modules()`` lists, the watched
module included; each call's output (gradient) is read bit-exactly through
``tensors.adapters`` and counted like a trace's outputs (``stats.Counter``). The weights
(``named_parameters()``) are counted once, when the watch starts. Every hook is removed when
the ``with`` block ends, also when the code inside it raises.

Where an event is born: a module's output holds a NaN (Inf, overflow, underflow in a format)
and none of its tensor inputs does; a gradient the module's backward produced (with respect to
its inputs; with respect to its output when it has no differentiable input) holds it and the
gradient arriving from above (with respect to its output) does not; a weight holds it. torch is
imported when the watch starts (the module is a torch module, so torch is loaded).
"""

from __future__ import annotations

import warnings
from functools import partial
from typing import Any, Sequence

import numpy as np

from ..display import Plottable
from ..errors import BitprismError
from ..tensors.adapters import as_array
from .arguments import probe_settings
from .capture import CaptureStore
from .cases import ProbeCase, SharesCases, first_position, watch_case
from .memo import Memo
from .records import FormatCounts, WatchRecord, first_record
from .session import Operand, born_counts, created_count, new_events
from .stats import ArrayStats, Counter
from .views import open_view

__all__ = ["KINDS", "ModuleRow", "Watch", "watch"]

KINDS = ("output", "grad", "weight")


class ModuleRow:
    """One module (and kind) of ``Watch.table()``: its records added up.

    Attributes: ``module``, ``module_type``, ``kind``, ``calls`` (records), ``size``, ``nan``,
    ``inf``, ``amax`` (largest of the records), ``counts`` (``FormatCounts`` summed; ``*_born``
    true when any record has it born).
    """

    __slots__ = ("module", "module_type", "kind", "calls", "size", "nan", "inf", "amax", "counts")

    def __init__(self, records: Sequence[WatchRecord]) -> None:
        first = records[0]
        self.module = first.module
        self.module_type = first.module_type
        self.kind = first.kind
        self.calls = len(records)
        self.size = sum(r.size for r in records)
        self.nan = sum(r.nan for r in records)
        self.inf = sum(r.inf for r in records)
        self.amax = max(r.amax for r in records)
        self.counts = tuple(
            FormatCounts(c.format, sum(r.counts[i].overflow for r in records),
                         sum(r.counts[i].underflow for r in records),
                         sum(r.counts[i].subnormal for r in records),
                         any(r.counts[i].overflow_born for r in records),
                         any(r.counts[i].underflow_born for r in records))
            for i, c in enumerate(first.counts))

    def fraction(self, kind: str, fmt_index: int) -> float:
        """Share of the elements that overflow (``kind="overflow"``) or underflow in one
        format."""
        c = self.counts[fmt_index]
        n = c.overflow if kind == "overflow" else c.underflow
        return n / self.size if self.size else 0.0

    def __repr__(self) -> str:
        return (f"ModuleRow(module={self.module!r}, kind={self.kind!r}, calls={self.calls}, "
                f"nan={self.nan}, inf={self.inf}, amax={self.amax:g})")


def _check_module(module: Any) -> Any:
    if not (hasattr(module, "named_modules") and hasattr(module, "register_forward_hook")):
        raise BitprismError(
            f"watch() takes a torch.nn.Module; got a {type(module).__name__}: trace a function "
            "with bitprism.trace instead")
    return module


class Watch(SharesCases, Plottable):
    """Per-module records of a torch model (see the module docstring). Use it as a context
    manager; the records, ``first()``, ``table()`` and the views read what it saw so far."""

    def __init__(self, module: Any, formats: Any = None, grads: bool = False,
                 weights: bool = True, capture_mib: float = 64, rounding: str | None = None,
                 overflow: str | None = None, subnormals: str | None = None) -> None:
        self.module = _check_module(module)
        settings = probe_settings(formats, rounding, overflow, subnormals, None,
                                  capture_mib=capture_mib)
        if not isinstance(grads, bool) or not isinstance(weights, bool):
            raise BitprismError(f"grads and weights must be True or False; got grads={grads!r}, "
                                f"weights={weights!r}")
        self.formats = settings.formats
        self.options = settings.options
        self.grads = grads
        self.weights = weights
        self.counter = Counter(self.formats, self.options)
        self.captures = CaptureStore(settings.capture_bytes)
        self._records: list[WatchRecord] = []
        self._seen: set[tuple[str, str | None]] = set()
        self._calls: dict[tuple[str, str], int] = {}
        self._handles: list[Any] = []
        self._memo = Memo()
        self._weights_done = False
        self._live: dict[str, Any] = {}
        self._quiet: Any = None

    # ----- the context -------------------------------------------------------------------------
    def __enter__(self) -> Watch:
        if self._handles:
            raise BitprismError("this watch is already on; leave its with-block first")
        if self.grads:
            # torch warns for every module whose inputs need no gradient (the first layer):
            # the watch records the gradient of its output there, and says so in its docs
            self._quiet = warnings.catch_warnings()
            self._quiet.__enter__()
            warnings.filterwarnings("ignore", category=UserWarning,
                                    message="Full backward hook is firing when gradients")
        try:
            for name, mod in self.module.named_modules():
                self._handles.append(mod.register_forward_hook(partial(self._on_forward, name)))
                if self.grads:
                    self._handles.append(
                        mod.register_full_backward_hook(partial(self._on_backward, name)))
            if self.weights and not self._weights_done:
                self._scan_weights()
        except BaseException:
            self._remove()
            raise
        return self

    def __exit__(self, *exc: Any) -> None:
        self._remove()

    def _remove(self) -> None:
        handles, self._handles = self._handles, []
        for h in handles:
            h.remove()
        quiet, self._quiet = self._quiet, None
        if quiet is not None:
            quiet.__exit__(None, None, None)

    @property
    def active(self) -> bool:
        """True inside the with-block (the hooks are on)."""
        return bool(self._handles)

    # ----- hooks -------------------------------------------------------------------------------
    def _tensors(self, value: Any) -> list[Any]:
        out: list[Any] = []
        if isinstance(value, (list, tuple)):
            for v in value:
                out += self._tensors(v)
        elif isinstance(value, dict):
            for v in value.values():
                out += self._tensors(v)
        elif hasattr(value, "detach") and hasattr(value, "dtype") and hasattr(value, "_version"):
            if value.is_complex():
                return out
            if value.device.type != "cpu":
                raise BitprismError(f"watch reads CPU tensors; got one on {value.device}")
            out.append(value)
        return out

    def _stats_of(self, t: Any) -> ArrayStats:
        known = self._memo.get(t)
        version = int(t._version)
        if known is not None and known[0] == version:
            return known[1]  # type: ignore[no-any-return]
        stats = self.counter.stats(as_array(t))
        self._memo.set(t, (version, stats))
        return stats

    def _operands(self, tensors: Sequence[Any]) -> list[Operand]:
        return [Operand(as_array(t), self.counter, self._stats_of(t), tuple(t.shape),
                        str(t.dtype).removeprefix("torch.")) for t in tensors]

    def _add(self, module: str, module_type: str, kind: str, tensors: Sequence[Any],
             inputs: Sequence[Operand]) -> None:
        if not tensors:
            return
        arrays = [as_array(t) for t in tensors]
        stats = self._stats_of(tensors[0])
        for t in tensors[1:]:
            stats = stats + self._stats_of(t)
        key = (module, kind)
        call = self._calls.get(key, 0)
        self._calls[key] = call + 1
        record = WatchRecord(
            size=stats.size, nan=stats.nan, inf=stats.inf,
            created_nan=created_count("nan", stats.nan, inputs, arrays, False),
            created_inf=created_count("inf", stats.inf, inputs, arrays, False),
            amax=stats.amax, counts=born_counts(self.formats, stats, inputs),
            index=len(self._records), module=module, module_type=module_type, call=call,
            kind=kind, shape=tuple(tensors[0].shape),
            dtype=str(tensors[0].dtype).removeprefix("torch."))
        self._records.append(record)
        if new_events(self._seen, record):
            nbytes = int(arrays[0].nbytes) + sum(int(op.value.nbytes) for op in inputs)
            self.captures.offer(record.index, lambda: arrays[0],
                                lambda: [op.value for op in inputs], nbytes)

    def _on_forward(self, name: str, mod: Any, args: Any, output: Any) -> None:
        self._add(name, type(mod).__name__, "output", self._tensors(output),
                  self._operands(self._tensors(args)))

    def _on_backward(self, name: str, mod: Any, grad_input: Any, grad_output: Any) -> None:
        produced = self._tensors(grad_input)
        arriving = self._tensors(grad_output)
        if produced:
            self._add(name, type(mod).__name__, "grad", produced, self._operands(arriving))
        else:
            self._add(name, type(mod).__name__, "grad", arriving, [])

    def _scan_weights(self) -> None:
        owners = {name: type(mod).__name__ for name, mod in self.module.named_modules()}
        for pname, p in self.module.named_parameters():
            owner = pname.rsplit(".", 1)[0] if "." in pname else ""
            self._live[pname] = p
            self._add(pname, owners.get(owner, type(self.module).__name__), "weight",
                      self._tensors(p), [])
        self._weights_done = True

    # ----- reading -----------------------------------------------------------------------------
    @property
    def records(self) -> tuple[WatchRecord, ...]:
        """Every record so far, in the order scanned."""
        return tuple(self._records)

    def first(self, event: str, fmt: Any = None, kind: str | None = None) -> WatchRecord | None:
        """The first record where ``event`` is born ("nan", "inf", "nonfinite", "overflow",
        "underflow"; ``fmt`` picks the format of the last two; ``kind`` limits the search to
        "output", "grad" or "weight" records). None if none is."""
        if kind is not None and kind not in KINDS:
            raise BitprismError(f"kind must be one of {', '.join(KINDS)} or None; got {kind!r}")
        records = [r for r in self._records if kind is None or r.kind == kind]
        return first_record(records, event, fmt, self.formats)

    def first_bad(self) -> tuple[str, str | None, WatchRecord] | None:
        """The earliest (event, format, record) where anything is born."""
        found: list[tuple[str, str | None, WatchRecord]] = []
        for event in ("nan", "inf"):
            rec = self.first(event)
            if rec is not None:
                found.append((event, None, rec))
        for event in ("overflow", "underflow"):
            for f in self.formats:
                rec = self.first(event, f.name)
                if rec is not None:
                    found.append((event, f.name, rec))
        return min(found, key=lambda e: e[2].index) if found else None

    def table(self) -> tuple[ModuleRow, ...]:
        """One row per module and kind, in the order first seen."""
        groups: dict[tuple[str, str], list[WatchRecord]] = {}
        for r in self._records:
            groups.setdefault((r.module, r.kind), []).append(r)
        return tuple(ModuleRow(g) for g in groups.values())

    def _pick(self, name: str, kind: str | None) -> WatchRecord:
        wanted = [r for r in self._records if r.module == name and (kind is None or r.kind == kind)]
        if not wanted:
            known = sorted({r.module for r in self._records})
            raise BitprismError(f"no record of {name!r} (kind {kind!r}); the watch saw: "
                                f"{', '.join(repr(k) for k in known[:30]) or 'nothing yet'}")
        kept = [r for r in wanted if r.index in self.captures.kept]
        return kept[0] if kept else wanted[0]

    def output(self, name: str, kind: str | None = None) -> np.ndarray:
        """The tensor kept for module ``name`` (its first record where an event is born), or
        the live weight of a parameter name, as a numpy array with the original bits."""
        if name in self._live and kind in (None, "weight"):
            return as_array(self._live[name])
        rec = self._pick(name, kind)
        return self.captures.get(rec.index, f"the {rec.kind} of {rec.label}").output

    def open(self, name: str, kind: str | None = None) -> Any:
        """A ``TensorPrism`` of what ``output(name, kind)`` returns."""
        arr = self.output(name, kind)
        rec = None if name in self._live and kind in (None, "weight") else self._pick(name, kind)
        selected = first_position(arr, rec, self.formats) if rec is not None else None
        return open_view(arr, self.formats, selected)

    # ----- case files --------------------------------------------------------------------------
    def case(self, event: str | None = None, fmt: Any = None, note: str = "") -> ProbeCase:
        """The first-event view as a ``ProbeCase`` (``event`` None: the earliest one)."""
        return watch_case(self, event, fmt, note)


def watch(module: Any, formats: Any = None, grads: bool = False, weights: bool = True,
          capture_mib: float = 64, rounding: str | None = None, overflow: str | None = None,
          subnormals: str | None = None) -> Watch:
    """A ``Watch`` of a torch module: use it as ``with bitprism.watch(model) as w: ...``.

    Args:
        module: a ``torch.nn.Module``; every module ``named_modules()`` lists is hooked.
        formats: formats whose overflow, underflow and subnormal counts each tensor gets
            (default: bfloat16, float16, float8_e4m3fn, float8_e5m2).
        grads: also hook the backward pass (full backward hooks) and record gradients.
        weights: count every parameter once when the watch starts.
        capture_mib: copies kept for ``open`` and case files never exceed this many MiB.
        rounding, overflow, subnormals: the cast options of the counts.
    """
    return Watch(module, formats, grads, weights, capture_mib, rounding, overflow, subnormals)
