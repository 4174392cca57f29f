"""What a scan will do, decided once before any data is read: the plan.

``ScanPlan`` is a frozen, picklable record that every block scan receives (worker threads and
dask workers included): the resolved formats with their class thresholds (``Entry``), the cast
options (with the seed that stochastic rounding draws from: the only copy of it), the scale,
the quantile mode, how many positions to keep, the carrier the data is read as, and the tuning.
``ScanTuning`` holds the sizes and limits that decide how the work is cut, never what it
computes: tests and benchmarks pass their own instead of patching module globals.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field
from functools import lru_cache
from typing import Any, Protocol, runtime_checkable

import numpy as np

from ...errors import BitprismError
from ...formats import Format, format_key, get_format
from ...numerics.options import CastOptions
from ...numerics.thresholds import Thresholds, cast_thresholds
from .compiled.jit import available

MAX_THREADS = 4  # worker threads of a scan at most (and at most the cores available)

__all__ = [
    "DEFAULT_TUNING",
    "MAX_THREADS",
    "Entry",
    "Locator",
    "ScanPlan",
    "ScanQuantizer",
    "ScanTuning",
    "Targets",
    "carrier_is_32",
    "resolve_entries",
    "scan_format",
]


@dataclass(frozen=True)
class ScanTuning:
    """Sizes and limits of a scan: how the work is cut, never what it computes (a scan's
    result is the same for every tuning; tests hold it so).

    Attributes:
        block: elements per partial result on the general path.
        count_block, count_block_min: a counts-only block (one per thread) holds between these
            many elements: its partial is tiny but costs a fixed amount of Python work.
        piece: elements per cache-sized piece inside a block.
        copy_max: elements copied at a time from a strided input.
        keep_values: exact quantiles in one pass (values kept) up to this many elements.
        refine_cap: a refinement pass collects a range's values once it holds this few...
        refine_budget: ... and at most this many values in one pass, over all ranges.
        compiled_min: counts-only pieces smaller than this stay on numpy (no compile for a
            handful of values).
        convert_piece: elements converted to the carrier at a time by a counts-only block.
        progress_min: a progress bar from this many elements (times passes).
        threads: worker threads; None: as many as the cores, at most ``MAX_THREADS``.
        compiled: use the compiled loops when numba is installed (the numbers are the same
            without them; tests compare the two paths).
    """

    block: int = 1 << 20
    count_block: int = 1 << 24
    count_block_min: int = 1 << 20
    piece: int = 1 << 16
    copy_max: int = 1 << 22
    keep_values: int = 1 << 16
    refine_cap: int = 1 << 21
    refine_budget: int = 1 << 22
    compiled_min: int = 1 << 15
    convert_piece: int = 1 << 18
    progress_min: int = 1 << 22
    threads: int | None = None
    compiled: bool = True

    def __post_init__(self) -> None:
        for name in self.__dataclass_fields__:
            value = getattr(self, name)
            if (value is None and name == "threads") or name == "compiled":
                continue
            if isinstance(value, bool) or not isinstance(value, int) or value < 1:
                raise BitprismError(f"ScanTuning.{name} must be a positive int, got {value!r}")

    def worker_threads(self) -> int:
        """Worker threads of a scan: ``threads``, or the cores available (at most 4). The
        counting kernel releases the GIL, and so does numpy inside each operation."""
        if self.threads is not None:
            return self.threads
        try:
            cores = len(os.sched_getaffinity(0))
        except AttributeError:  # not on every platform
            cores = os.cpu_count() or 1
        return max(1, min(MAX_THREADS, cores))

    @property
    def uses_compiled(self) -> bool:
        """Whether the compiled loops run: asked for, and numba in use."""
        return self.compiled and available()


DEFAULT_TUNING = ScanTuning()


@runtime_checkable
class ScanQuantizer(Protocol):
    """A block-scaled format as a scan entry (see the ``bitprism.tensors.scan`` docstring)."""

    name: str

    def dequantize_block(self, x: np.ndarray) -> np.ndarray: ...


@dataclass(frozen=True)
class Entry:
    """One column of a scan: a plain format with its class thresholds for each sign, or a
    block format (``hook``) that quantizes whole blocks."""

    name: str
    fmt: Format | None
    hook: Any = None
    block_size: int = 32
    pos: Thresholds | None = None
    neg: Thresholds | None = None  # None: negatives are invalid (unsigned formats)

    @property
    def symmetric(self) -> bool:
        return self.pos is not None and self.pos == self.neg

    @property
    def format(self) -> Any:
        """What the result names: the ``Format``, or the block-format object."""
        return self.fmt if self.fmt is not None else self.hook


# Refinement ranges per entry: (low pattern, high pattern, shift, bins) each.
Targets = tuple[tuple[tuple[int, int, int, int], ...], ...]


@dataclass(frozen=True)
class ScanPlan:
    """Everything a block scan needs (frozen and picklable, so workers get their own copy).

    ``options.seed`` is the seed of stochastic rounding (drawn once per scan when none was
    given); ``mode`` is "exact", "histogram" or False (counts only); ``limit`` how many
    positions of each kind to keep; ``keep_values``: small input, exact quantiles from kept
    values; ``carrier32``: the cast reads float32 patterns (else float64); ``targets``: the
    ranges of a refinement pass (None on a first pass)."""

    entries: tuple[Entry, ...]
    options: CastOptions
    scale: float | None
    mode: Any  # "exact" | "histogram" | False
    limit: int
    keep_values: bool
    carrier32: bool
    targets: Targets | None = None
    exponents: bool = True
    tuning: ScanTuning = field(default=DEFAULT_TUNING)

    @property
    def hooks(self) -> bool:
        return any(e.hook is not None for e in self.entries)

    @property
    def full(self) -> bool:
        """Whether the data is cast (errors measured), not only counted."""
        return self.mode is not False

    @property
    def collecting(self) -> bool:
        """A refinement pass: only what the relative errors of the targets need."""
        return self.targets is not None


@dataclass(frozen=True)
class Locator:
    """Turns flat positions inside a block into flat positions in the whole tensor."""

    start: int = 0
    block_shape: tuple[int, ...] | None = None
    offsets: tuple[int, ...] | None = None
    shape: tuple[int, ...] | None = None

    def to_global(self, local: np.ndarray) -> np.ndarray:
        local = np.asarray(local, np.int64)
        if self.block_shape is None:
            return local + self.start
        idx = np.unravel_index(local, self.block_shape)
        full = tuple(i + o for i, o in zip(idx, self.offsets or ()))
        return np.ravel_multi_index(full, self.shape or ()).astype(np.int64)

    def position(self, at: int) -> int:
        """The global flat position of local position ``at``."""
        return int(self.to_global(np.array([at]))[0])


def carrier_is_32(dtype: np.dtype) -> bool:
    """float32 carries float32, float16 and every ml_dtypes float exactly."""
    if dtype == np.float32 or dtype == np.float16:
        return True
    if dtype.kind == "V" or (dtype.kind == "f" and dtype.itemsize < 4):
        try:
            get_format(dtype)
        except BitprismError:
            return False
        return True
    return False


@lru_cache(maxsize=1)
def _mx_formats() -> Any:
    from ..mx import MX_FORMATS

    return MX_FORMATS


def scan_format(spec: Any) -> Any:
    """A scan column from what a person wrote: an OCP MX block format by name ("mxfp4"), a
    block-format object (anything with ``dequantize_block``), or a plain format (name, alias,
    dtype or ``Format``, through ``get_format``)."""
    if isinstance(spec, str):
        mx = _mx_formats().get(format_key(spec))
        if mx is not None:
            return mx
    if not isinstance(spec, (str, Format, np.dtype, type)) and callable(
        getattr(spec, "dequantize_block", None)
    ):
        return spec
    return get_format(spec)


def resolve_entries(formats: Any, options: CastOptions) -> tuple[Entry, ...]:
    """The scan's columns, in order, each with its thresholds; refuses repeats and none."""
    if isinstance(formats, (str, Format)) or (
        not isinstance(formats, (tuple, list)) and isinstance(formats, ScanQuantizer)  # slow check last
    ):
        formats = (formats,)
    entries: list[Entry] = []
    for spec in formats:
        resolved = scan_format(spec)
        if not isinstance(resolved, Format):
            name = getattr(resolved, "name", None)
            if not isinstance(name, str) or not name:
                raise BitprismError(f"a block-format entry needs a non-empty str name; got {name!r}")
            bs = getattr(resolved, "block_size", 32)
            if isinstance(bs, bool) or not isinstance(bs, int) or bs < 1:
                raise BitprismError(f"{name}: block_size must be a positive int, got {bs!r}")
            entries.append(Entry(name, None, resolved, bs))
            continue
        pos = cast_thresholds(resolved, options, False)
        neg = cast_thresholds(resolved, options, True) if resolved.signed else None
        entries.append(Entry(resolved.name, resolved, None, 32, pos, neg))
    names = [e.name for e in entries]
    if len(set(names)) != len(names):
        raise BitprismError(f"formats must be distinct; got {names!r}")
    if not entries:
        raise BitprismError("formats must name at least one format")
    return tuple(entries)
