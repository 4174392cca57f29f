"""``scan()``: what happens to a whole tensor when it is cast to each of several formats.

For every format the scan counts the NaN and Inf already in the input, the finite values that
overflow, the nonzero values that underflow to zero, the values that land in the subnormal
range and the values that survive exactly; it measures the error of the values whose result is
finite (maximum absolute error, relative-error quantiles, error in ULPs of the format at the
rounded value, SQNR), and remembers where the first few of each kind sit. Once per input it
records dtype, shape, extrema and a histogram of binary exponents.

Definitions (the words a result uses):

* overflow: a finite value whose magnitude, rounded with the chosen direction and an unbounded
  exponent range, exceeds the largest finite value (IEEE 754-2008 §7.4). What it becomes (Inf,
  NaN or the largest finite value) follows the ``overflow`` option and the format. Under
  stochastic rounding every finite value beyond the largest finite one counts as overflow.
* underflow: a finite nonzero value whose result is a zero.
* subnormal: a value whose result is a nonzero subnormal of the format.
* invalid: a negative nonzero value sent to an unsigned format (it becomes NaN).
* error statistics cover every element whose input and result are both finite; that includes
  saturated values and values flushed to zero, which carry their real error. The relative error
  of an element is ``|q - x| / |x|`` (0 where ``x == 0``); its ULP error is ``|q - x| / ulp(q)``
  with the ULP of the format at the rounded value ``q`` (``numerics.inspect.ulp``).
* ``scale``: the data is multiplied by ``scale`` in float64 before the cast, and every error is
  measured against that scaled data. The exponent histogram describes the scaled data too.
* exponent histogram: normal values by ``floor(log2|x|)``; zeros, subnormals (of the dtype the
  scan reads: the input's own format, or float64 once scaled), Inf and NaN in their own buckets.

Quantiles (``quantiles=``):

* ``"exact"``: the p50 and p99 relative errors are exactly what
  ``np.quantile(rel, [0.5, 0.99], method="linear")`` returns for the relative errors ``rel`` of
  all compared elements. Small inputs (at most ``KEEP_VALUES`` elements) keep the values. Larger
  ones take more passes over the data: the first builds the relative-error histogram, which
  puts each needed order statistic in a bucket; each further pass counts the elements of those
  buckets in finer sub-ranges of float64 bit patterns (2^16 even ones, and ones that grow with
  the distance from either end, for values piled against an end: ``sub_ranges``), until a
  range holds at most ``_CAP`` elements (and all ranges of one pass at most ``_BUDGET``, 32 MiB
  of values), whose values are then collected and the order statistic picked by
  ``np.partition``; in practice one or two extra passes, casting only the formats still
  asking. Order statistics that the
  counts alone decide — 0 for values that survive exactly, exactly 1 for values flushed to
  zero — need no further pass. Peak memory stays bounded by the block, not the tensor.
* ``"histogram"``: one pass; each order statistic is taken as the middle of its histogram
  bucket (buckets are at most 2^-7 wide relative to their lower edge, so the value is within
  0.4 % of the exact one), then interpolated as numpy's "linear" method does.
* ``False``: counts only. Rounding is monotone, so every class is a range of ``|x|``: the
  thresholds (smallest magnitude that overflows, smallest that does not underflow, smallest
  whose result is normal) are found once per format by rounding a few scalars exactly, and the
  data is only compared with them. Needs a deterministic rounding direction. With plain,
  sign-symmetric formats and numba installed the comparisons are bit-pattern counts
  (``counts_only``) in one block per thread (up to ``COUNT_BLOCK``); the exponent histogram
  is left out unless ``exponents=True``.

Memory and scale: the tensor is read in blocks of ``BLOCK`` elements (processed in cache-sized
pieces), so a ``np.memmap`` is never loaded whole. Blocks run on up to ``MAX_THREADS`` worker
threads (numpy and the counting kernel release the GIL), one block ahead at most, merged in
order; block formats stay on the calling thread. Each block gives a ``BlockPartial`` whose
merge is associative and commutative (see ``partials``). A dask array (recognised by duck
typing; dask is imported only then) is scanned as a dask reduction: one partial per chunk via
``to_delayed``, then a tree of merges, so it runs on whatever scheduler is active, a
``distributed`` cluster included.

Block formats (the scan-format protocol): an entry of ``formats`` may be an object with

* ``name: str`` — shown in the table and used by ``where()``;
* ``dequantize_block(x) -> values``: ``x`` is a 1-D C-contiguous float64 array of (scaled)
  data; the method returns the float64 values ``x`` takes after quantizing, same length. The
  scan only passes arrays whose first element starts a block and whose length is a multiple of
  ``block_size``: rows (the last axis) whose length is not a multiple are padded with zeros up
  to one (zeros leave a max-magnitude shared scale unchanged) and the padding is dropped;
* optional ``block_size: int`` (default 32), the number of consecutive elements along the
  flattened last axis that share a scale.

For such entries the scan reports overflow (finite input, non-finite result, its block free of
NaN and Inf inputs), ``block_nan`` (finite input made NaN because its block holds a NaN or Inf
input: the shared scale is NaN, MX v1.0 §6.3), underflow, exact
and error statistics; subnormal and ULP figures are left out (``None``): they depend on each
block's scale. ``rounding``, ``overflow`` and ``subnormals`` apply to plain formats only.
"""

from __future__ import annotations

import math
import os
import threading
from collections import deque
from concurrent.futures import Future, ThreadPoolExecutor, wait
from dataclasses import dataclass, field
from functools import lru_cache
from types import MappingProxyType
from typing import Any, Callable, Iterator, Mapping, Protocol, Sequence, Union, runtime_checkable

import numpy as np

from ..errors import BitprismError, UnsupportedInputError
from ..formats import Format, get_format
from ..numerics.codes import decode, encode, value_table
from ..numerics.inspect import ulp
from ..numerics.kernel import table_codes, table_eligible, table_index
from ..numerics.options import CastOptions
from . import counts_only, error_kernels, fast_casts
from .sub_ranges import layout, log_bins, log_keys, pick
from .partials import (
    EXP_OFFSET,
    REL_BASE,
    REL_BINS,
    REL_SHIFT,
    BlockPartial,
    ExactSum,
    FormatPartial,
    InputPartial,
    compress_values,
    merge_blocks,
    rel_bin_bounds,
    rel_keys,
)

__all__ = [
    "BLOCK",
    "KEEP_VALUES",
    "WHERE_KINDS",
    "ExponentHistogram",
    "FormatScan",
    "ScanQuantizer",
    "ScanResult",
    "scan",
]

BLOCK = 1 << 20  # elements per partial result
# A counts-only block's partial is tiny but costs ~0.3 ms of Python: one block per thread,
# within these bounds.
COUNT_BLOCK = 1 << 24
COUNT_BLOCK_MIN = 1 << 20
_COPY_MAX = 1 << 22  # elements copied at a time from a strided input
_SUB = 1 << 16  # elements per cache-sized piece inside a block
KEEP_VALUES = 1 << 16  # exact quantiles in one pass up to this many elements (kept values)
PROGRESS_MIN = 1 << 22  # show a progress bar from this many elements (times passes)
MAX_THREADS = 4  # worker threads of a scan (at most the cores available)
WHERE_KINDS = ("nan", "inf", "overflow", "underflow", "subnormal", "largest_error")
_QUANTILES = ("exact", "histogram", False)
_PERCENTILES = (0.5, 0.99)
DEFAULT_FORMATS = ("bfloat16", "float16", "float8_e4m3fn", "float8_e5m2")


@runtime_checkable
class ScanQuantizer(Protocol):
    """A block-scaled format as a scan entry (see the module docstring)."""

    name: str

    def dequantize_block(self, x: np.ndarray) -> np.ndarray: ...


# ----- thresholds: every class of a monotone cast is a range of |x| ------------------------


@dataclass(frozen=True)
class Thresholds:
    """Magnitudes (float64) at which a cast changes class, for one sign of the input.

    ``overflow_from``: smallest |x| that overflows (Inf if none does); ``nonzero_from``: smallest
    |x| whose result is not zero (0 if every nonzero value survives, e.g. no zero in the
    format); ``normal_from``: smallest |x| whose result is a normal number.
    """

    overflow_from: float
    nonzero_from: float
    normal_from: float


_POS_PATTERNS = 0x7FF0000000000000  # float64 patterns of 0 .. +Inf


def _f64(pattern: int) -> float:
    return float(np.array([pattern], np.uint64).view(np.float64)[0])


def _first_true(pred: Callable[[float], bool]) -> float:
    """Smallest positive float64 (or +Inf) where a monotone predicate turns true."""
    lo, hi = 0, _POS_PATTERNS  # pred(lo) assumed false, pred(+Inf) taken as true
    while hi - lo > 1:
        mid = (lo + hi) // 2
        if pred(_f64(mid)):
            hi = mid
        else:
            lo = mid
    return _f64(hi)


def _wide(fmt: Format) -> Format | None:
    """The format with one more exponent bit and the same bias and precision: rounding into it
    is rounding with an unbounded exponent range above ``fmt``'s largest binade."""
    if fmt.exponent_bits >= 11:
        return None
    try:
        return Format(fmt.name + "+wide", fmt.exponent_bits + 1, fmt.significand_bits, fmt.bias)
    except BitprismError:
        return None


@lru_cache(maxsize=256)
def _thresholds(fmt: Format, options: CastOptions, negative: bool) -> Thresholds:
    sign = -1.0 if negative else 1.0
    top = float(fmt.max_finite)
    if options.rounding == "stochastic":
        over = float(np.nextafter(top, math.inf))
    else:
        wide = _wide(fmt)
        if wide is None:
            over = math.inf
        else:
            mode = options.rounding

            def overflows(m: float) -> bool:
                v = decode(encode(sign * m, wide, mode), wide)
                return abs(v) > top

            over = _first_true(overflows)

    def result(m: float) -> float:
        return abs(decode(encode(sign * m, fmt, options.rounding, "saturate", options.subnormals), fmt))

    if not fmt.has_zero:
        nonzero = 0.0
        normal = 0.0
    else:
        nonzero = _first_true(lambda m: result(m) != 0.0)
        small = float(fmt.smallest_normal)
        normal = _first_true(lambda m: result(m) >= small)
    return Thresholds(over, nonzero, normal)


@lru_cache(maxsize=1024)
def _pattern(threshold: float, wide: bool) -> int:
    """Smallest float32 (wide=False) or float64 pattern whose magnitude is >= threshold."""
    if wide:
        return int(np.array([threshold], np.float64).view(np.uint64)[0])
    f = np.float32(threshold) if threshold <= 3.4028234663852886e38 else np.float32(np.inf)
    if float(f) < threshold:
        f = np.nextafter(f, np.float32(np.inf))
    return int(np.array([f], np.float32).view(np.uint32)[0])


# ----- what the workers need: a frozen, picklable description of the scan -------------------


@dataclass(frozen=True)
class _Entry:
    name: str
    fmt: Format | None
    hook: Any = None
    block_size: int = 32
    pos: Thresholds | None = None
    neg: Thresholds | None = None  # None: negatives are invalid (unsigned formats)

    @property
    def symmetric(self) -> bool:
        return self.pos is not None and self.pos == self.neg


# Refinement ranges per entry: (low pattern, high pattern, shift, bins) each.
_Targets = tuple[tuple[tuple[int, int, int, int], ...], ...]


@dataclass(frozen=True)
class _Spec:
    entries: tuple[_Entry, ...]
    options: CastOptions
    scale: float | None
    mode: Any  # "exact" | "histogram" | False
    limit: int
    keep_values: bool
    carrier32: bool
    seed: int | None
    targets: _Targets | None = None  # refinement pass
    exponents: bool = True  # collect the binary-exponent histogram

    @property
    def hooks(self) -> bool:
        return any(e.hook is not None for e in self.entries)


@dataclass(frozen=True)
class _Locator:
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


def _carrier_is_32(dtype: np.dtype) -> bool:
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


def _sub_seed(seed: int | None, position: int) -> int | None:
    if seed is None:
        return None
    ss = np.random.SeedSequence(entropy=seed, spawn_key=(position,))
    return int(ss.generate_state(1, np.uint64)[0] >> np.uint64(1))


# ----- the block scan ------------------------------------------------------------------------


class _Acc:
    """Mutable accumulators of one entry within one block (frozen into a FormatPartial)."""

    def __init__(self, spec: _Spec) -> None:
        self.overflow = self.underflow = self.subnormal = self.invalid = self.block_nan = 0
        self.exact = self.compared = 0
        self.max_abs = self.max_rel = self.max_ulp = 0.0
        self.sum_x2 = self.sum_err2 = self.sum_ulp = 0.0
        self.hist = np.zeros(REL_BINS, np.int64) if spec.mode in ("exact", "histogram") else None
        self.values: list[np.ndarray] | None = [] if spec.mode == "exact" and spec.keep_values else None
        self.where: dict[str, list[np.ndarray]] = {"overflow": [], "underflow": [], "subnormal": []}
        self.found = {"overflow": 0, "underflow": 0, "subnormal": 0}
        self.top_err = np.zeros(0)
        self.floor = 0.0
        self.collected: list[list[np.ndarray]] = []
        self.ones = 0  # compared elements whose relative error is exactly 1 (flushed to zero)
        self.top_idx = np.zeros(0, np.int64)

    def note(self, kind: str, limit: int, mask_fn: Callable[[], np.ndarray], loc: _Locator, at: int) -> None:
        need = limit - self.found[kind]
        if need <= 0:
            return
        idx = np.flatnonzero(mask_fn())[:need]
        if idx.size:
            self.where[kind].append(loc.to_global(idx + at))
            self.found[kind] += idx.size

    def freeze(self, spec: _Spec, subnormal_known: bool) -> FormatPartial:
        def cat(kind: str) -> np.ndarray:
            parts = self.where[kind]
            return np.concatenate(parts) if parts else np.zeros(0, np.int64)

        values = None
        if self.values is not None:
            values = compress_values(self.values)
        return FormatPartial(
            self.overflow,
            self.underflow,
            self.subnormal if subnormal_known else -1,
            self.invalid,
            self.exact,
            self.compared,
            self.max_abs,
            self.max_rel,
            self.max_ulp,
            ExactSum.of(self.sum_x2),
            ExactSum.of(self.sum_err2),
            ExactSum.of(self.sum_ulp),
            self.hist,
            values,
            cat("overflow"),
            cat("underflow"),
            cat("subnormal"),
            self.top_err,
            self.top_idx,
            self.ones,
            block_nan=self.block_nan,
        )


@lru_cache(maxsize=64)
def _inv_ulp_table(fmt: Format) -> np.ndarray:
    """1/ulp(value) per code (a power of two, so the product is exact); 0 for NaN and Inf."""
    with np.errstate(invalid="ignore", divide="ignore"):
        u = ulp(value_table(fmt), fmt)
        inv = np.where(np.isfinite(u), 1.0 / u, 0.0)
    inv.setflags(write=False)
    return inv


@lru_cache(maxsize=64)
def _nan_value_table(fmt: Format) -> np.ndarray:
    """``value_table`` with NaN in place of ±Inf: a cast's error ``|q - x|`` is then NaN exactly
    where it is left out (non-finite result or input), and one ``fmax`` clears them all."""
    with np.errstate(invalid="ignore"):
        t = value_table(fmt) * np.float64(1.0)
        t[np.isinf(t)] = np.nan
    t.setflags(write=False)
    return t


@lru_cache(maxsize=64)
def _measure_tables(fmt: Format) -> tuple[np.ndarray, np.ndarray, int, int]:
    """Compact tables for ``error_kernels.measure_codes``: (values, 1/ulp, mask, shift). A
    16-bit format's float64 tables take 1 MiB, and random lookups there miss the cache: the
    values fit float32 exactly, and 1/ulp depends on the exponent field alone. Each compact
    table is checked against the full one here, entry by entry, and the full one is kept when
    they differ anywhere it matters (finite values)."""
    values, inv = _nan_value_table(fmt), _inv_ulp_table(fmt)
    codes = np.arange(values.size, dtype=np.int64)
    finite = ~np.isnan(values)
    v32 = values.astype(np.float32)
    if np.array_equal(v32.astype(np.float64), values, equal_nan=True):
        values = v32
    mask, shift = (1 << fmt.bits) - 1, 0
    if fmt.bits > 8:
        m, t = fmt.magnitude_mask, fmt.t
        compact = np.zeros((m >> t) + 1)
        compact[(codes[finite] & m) >> t] = inv[finite]
        if np.array_equal(compact[(codes[finite] & m) >> t], inv[finite]):
            inv, mask, shift = compact, m, t
    values.setflags(write=False)
    inv.setflags(write=False)
    return values, inv, mask, shift


def _fast_cast(entry: _Entry, spec: _Spec) -> str:
    """How a scan casts float32 data into a plain format: "table" (one gather per element from
    the kernel's table, the index shared by every such format) or "kernel" (``encode``).
    (numpy's own float32 -> float16 conversion was tried: it is exact but much slower than the
    kernel on data that overflows or underflows, so float16 stays on the kernel.)"""
    fmt = entry.fmt
    if fmt is None or not spec.carrier32 or spec.scale is not None:
        return "kernel"
    if table_eligible(fmt, np.dtype(np.float32), spec.options):
        return "table"
    return "kernel"


def _block_ids(idx: np.ndarray, seg: int, bs: int) -> np.ndarray:
    """Block number of each position of a piece made of rows of ``seg`` elements, each row
    cut into blocks of ``bs`` from its start (the last one may be short)."""
    per_row = -(-seg // bs)
    return (idx // seg) * per_row + (idx % seg) // bs


def _hook_values(entry: _Entry, x64: np.ndarray, seg: int) -> np.ndarray:
    """Run a block-format hook on consecutive segments of length ``seg`` (rows or row pieces
    that start on a block boundary), padding each to a multiple of the block size."""
    bs = entry.block_size
    if seg % bs == 0:
        out = np.asarray(entry.hook.dequantize_block(np.ascontiguousarray(x64)), np.float64)
    else:
        rows = x64.reshape(-1, seg)
        width = -(-seg // bs) * bs
        padded = np.zeros((rows.shape[0], width))
        padded[:, :seg] = rows
        full = np.asarray(entry.hook.dequantize_block(padded.reshape(-1)), np.float64)
        out = full.reshape(rows.shape[0], width)[:, :seg].reshape(-1)
    if out.shape != x64.shape:
        raise BitprismError(
            f"{entry.name}: dequantize_block returned shape {out.shape}, expected {x64.shape}"
        )
    return out


def _scan_block(
    values: np.ndarray, loc: _Locator, spec: _Spec, seg: int, floors: tuple[float, ...] | None = None
) -> BlockPartial:
    """Partial result of one block (any shape; read in C order).

    ``floors``: per entry, an error that blocks at lower positions already beat ``limit`` times
    (a sequential scan passes it in): elements with errors not above it cannot make the final
    "largest error" list, so they are not looked at. The merged result is unchanged.
    """
    flat = np.asarray(values).reshape(-1)
    if counts_only.eligible(spec):
        return counts_only.count_block(flat, loc, spec)
    limit = spec.limit
    full = spec.mode is not False
    collect = spec.targets is not None
    accs = [_Acc(spec) for _ in spec.entries]
    if collect:
        for j, acc in enumerate(accs):
            acc.collected = [[] for _ in spec.targets[j]]  # type: ignore[index]
    if floors is not None:
        for acc, fl in zip(accs, floors):
            acc.floor = fl
    wide = not spec.carrier32
    uint = np.uint64 if wide else np.uint32
    t_src, bias, width = (52, 1023, 64) if wide else (23, 127, 32)
    abs_mask = uint((1 << (width - 1)) - 1)
    inf_bits = uint(((1 << (width - 1 - t_src)) - 1) << t_src)
    sign_bit = uint(1 << (width - 1))
    e_top = (1 << (width - 1 - t_src)) - 1
    n = nan = infs = zero = csub = 0
    lo, hi = math.inf, -math.inf
    exps = np.zeros(e_top + 1, np.int64)
    w_nan: list[np.ndarray] = []
    w_inf: list[np.ndarray] = []
    f_nan = f_inf = 0
    need64 = full or spec.hooks

    if spec.hooks:
        sub = _SUB if seg % 32 == 0 and all(
            _SUB % e.block_size == 0 and seg % e.block_size == 0 for e in spec.entries if e.hook
        ) else max(1, _SUB // seg) * seg
    else:
        sub = _SUB

    # scratch reused by every piece of the block (no fresh pages per piece)
    width_sub = min(sub, max(flat.size, 1))
    buf: dict[str, np.ndarray] = {name: np.empty(width_sub) for name in ("x64", "xe", "x0", "ax", "den", "err", "rel", "q", "sq")}
    buf["keys"] = np.empty(width_sub, np.int64)
    compiled = error_kernels.available()  # errors of <= 16-bit formats in compiled loops
    if compiled:
        buf["u"] = np.empty(width_sub)  # errors in ULPs
    buf["ci"] = np.empty(width_sub, np.intp)  # codes as gather indices
    buf["ti"] = np.empty(width_sub, np.intp)  # float32 table index, shared by table formats
    buf["t32"] = np.empty(width_sub, np.uint32)
    codebufs = {dt: np.empty(width_sub, dt) for dt in {e.fmt.code_dtype for e in spec.entries if e.fmt is not None}}
    fast = {j: _fast_cast(e, spec) for j, e in enumerate(spec.entries)}
    use_table = any(v == "table" for v in fast.values())
    nanbool = np.empty(width_sub, bool)
    keep = np.empty(width_sub, bool)
    for at in range(0, flat.size, sub):
        xs = flat[at : at + sub]
        k = xs.size
        # ----- the data as the cast reads it (carrier) and as float64 (None: not needed)
        x64: np.ndarray | None
        if spec.scale is not None:
            x64 = buf["x64"][:k]
            np.copyto(x64, xs, casting="unsafe")  # exact: every input dtype fits float64
            np.multiply(x64, spec.scale, out=x64)
            carrier = x64
        elif wide:
            if xs.dtype == np.float64:
                x64 = xs
            else:
                x64 = buf["x64"][:k]
                np.copyto(x64, xs, casting="unsafe")
            carrier = x64
        else:
            carrier = xs if xs.dtype == np.float32 else xs.astype(np.float32)
            x64 = None
            if need64:
                x64 = buf["x64"][:k]
                np.copyto(x64, carrier)
        bits = carrier.view(uint)
        a = np.bitwise_and(bits, abs_mask)
        n += k
        h_all = None
        if collect:  # second pass: only what the relative errors need
            z = int(np.count_nonzero(a == 0))
            nf = int(np.count_nonzero(a >= inf_bits))
            sub_nan = 0
        else:
            e = np.right_shift(a, uint(t_src))
            h = np.bincount(e, minlength=e_top + 1)
            # suffix[E] = #(|x| pattern >= E << t): whole binades need no comparison
            suffix = np.cumsum(h[::-1])[::-1]
            h_all = h.copy()
            z = int(np.count_nonzero(a == 0))
            nf = int(h[e_top])  # Inf and NaN
            sub_nan = int(np.count_nonzero(a > inf_bits)) if nf else 0
            nan += sub_nan
            infs += nf - sub_nan
            zero += z
            csub += int(h[0]) - z
            h[0] = 0
            h[e_top] = 0
            exps += h
            if k > sub_nan:
                if sub_nan:
                    lo = min(lo, float(np.fmin.reduce(carrier)))
                    hi = max(hi, float(np.fmax.reduce(carrier)))
                else:
                    lo = min(lo, float(carrier.min()))
                    hi = max(hi, float(carrier.max()))
            if sub_nan and f_nan < limit:
                idx = np.flatnonzero(a > inf_bits)[: limit - f_nan]
                w_nan.append(loc.to_global(idx + at))
                f_nan += idx.size
            if nf > sub_nan and f_inf < limit:
                idx = np.flatnonzero(a == inf_bits)[: limit - f_inf]
                w_inf.append(loc.to_global(idx + at))
                f_inf += idx.size
        nonfinite = nf
        # ----- class counts by thresholds: #(|x| >= T) as pattern comparisons
        counted: dict[tuple[str, int], int] = {}

        def count(side: str, p: int) -> int:
            key = (side, p)
            if key not in counted:
                if side == "abs":
                    eb = p >> t_src
                    if h_all is not None and (p & ((1 << t_src) - 1) == 0 or h_all[eb] == 0):
                        # the threshold starts a binade, or its binade is empty in this piece
                        start = eb if p & ((1 << t_src) - 1) == 0 else eb + 1
                        counted[key] = int(suffix[start]) if start <= e_top else 0
                    else:
                        counted[key] = int(np.count_nonzero(a >= uint(p)))
                elif side == "pos":  # 0 <= x, |x| >= T: patterns in [p, sign bit)
                    counted[key] = int(np.count_nonzero(bits >= uint(p))) - count("sgn", 0)
                elif side == "neg":
                    counted[key] = int(np.count_nonzero(bits >= uint(p) + sign_bit))
                else:  # "sgn": every pattern with the sign bit set
                    counted[key] = int(np.count_nonzero(bits >= sign_bit))
            return counted[key]

        if need64:
            assert x64 is not None  # every branch above sets it when need64
            ax = np.abs(x64, out=buf["ax"][:k])
            den = ax
            xe = x64  # the data the errors are measured against: NaN where not finite
            if z or nonfinite:
                den = buf["den"][:k]
                np.copyto(den, ax)
                den[~((ax > 0) & (ax < np.inf))] = 1.0
            x0 = x64  # the data with 0 where not finite (for sums of squares)
            if nonfinite:
                where_nf = np.flatnonzero(a >= inf_bits)
                xe = buf["xe"][:k]
                np.copyto(xe, x64)
                xe[where_nf] = np.nan  # so every left-out element's error is NaN
                x0 = buf["x0"][:k]
                np.copyto(x0, x64)
                x0[where_nf] = 0.0
            err, rel, qbuf, sq = buf["err"][:k], buf["rel"][:k], buf["q"][:k], buf["sq"][:k]
            keys = buf["keys"][:k]
            ci = buf["ci"][:k]
            shared_x2: float | None = None
            if use_table and (full or collect):
                tidx = table_index(bits, buf["ti"][:k], buf["t32"][:k])
        for j, entry in enumerate(spec.entries):
            acc = accs[j]
            fmt = entry.fmt
            # overflow / invalid by thresholds (plain formats)
            if fmt is not None and not collect:
                if entry.symmetric:
                    po = _pattern(entry.pos.overflow_from, wide)  # type: ignore[union-attr]
                    ov = count("abs", po) - count("abs", int(inf_bits)) if po <= inf_bits else 0
                    if ov:
                        def ov_abs_mask(po: int = po) -> np.ndarray:
                            return (a >= uint(po)) & (a < inf_bits)

                        acc.note("overflow", limit, ov_abs_mask, loc, at)
                else:
                    po = _pattern(entry.pos.overflow_from, wide)  # type: ignore[union-attr]
                    ovp = count("pos", po) - count("pos", int(inf_bits)) if po <= inf_bits else 0
                    ovn = 0
                    if entry.neg is not None:
                        pn = _pattern(entry.neg.overflow_from, wide)
                        ovn = count("neg", pn) - count("neg", int(inf_bits)) if pn <= inf_bits else 0
                        pn_ = pn
                    else:
                        pn_ = int(inf_bits)
                        # negative nonzero finite values: patterns in (sign bit, sign bit | Inf)
                        inv = count("sgn", 0) - count("neg", int(inf_bits)) - int(
                            np.count_nonzero(bits == sign_bit)
                        )
                        acc.invalid += inv
                    ov = ovp + ovn
                    if ov:
                        def ov_mask(po: int = po, pn: int = pn_) -> np.ndarray:
                            m = (bits >= uint(po)) & (bits < inf_bits)
                            if pn < inf_bits:
                                m |= (bits >= uint(pn) + sign_bit) & (bits < inf_bits + sign_bit)
                            return m

                        acc.note("overflow", limit, ov_mask, loc, at)
                acc.overflow += ov
            if not full and entry.hook is None:
                # ----- counts only: underflow and subnormal ranges
                if fmt.has_zero:  # type: ignore[union-attr]
                    sides = [("abs", entry.pos)] if entry.symmetric else [("pos", entry.pos)] + (
                        [("neg", entry.neg)] if entry.neg is not None else []
                    )
                    uf_masks, sb_masks = [], []
                    for side, th in sides:
                        pz = _pattern(th.nonzero_from, wide)  # type: ignore[union-attr]
                        pnorm = _pattern(th.normal_from, wide)  # type: ignore[union-attr]
                        if side == "abs":
                            nonzero_all = k - z
                        elif side == "pos":
                            nonzero_all = count("pos", 1)
                        else:
                            nonzero_all = count("neg", 1)
                        uf = nonzero_all - count(side, pz)
                        sb = count(side, pz) - count(side, pnorm) if fmt.has_subnormals else 0  # type: ignore[union-attr]
                        if options_flush(spec):
                            sb = 0
                        acc.underflow += uf
                        acc.subnormal += sb
                        if uf:
                            uf_masks.append(_range_mask(side, bits, a, uint, sign_bit, 1, pz))
                        if sb:
                            sb_masks.append(_range_mask(side, bits, a, uint, sign_bit, pz, pnorm))
                    # both signs in one mask, so "first N" is by position
                    if uf_masks:
                        acc.note("underflow", limit, _any(uf_masks), loc, at)
                    if sb_masks:
                        acc.note("subnormal", limit, _any(sb_masks), loc, at)
                continue
            if collect and not spec.targets[j]:  # type: ignore[index]
                continue  # every order statistic of this entry is known already
            # ----- full cast (full or a hook entry, so need64: x64 is set)
            assert x64 is not None
            nan_table = False  # q is NaN (never Inf) wherever the error is left out
            how = fast[j]
            codes: np.ndarray | None
            measured: error_kernels.CodeErrors | None = None  # err, rel, ue, nanbool filled
            if entry.hook is not None:
                q = _hook_values(entry, x64, seg)
                codes = None
            else:
                assert fmt is not None  # entries without a hook are plain formats
                if how == "table":
                    codes = np.take(table_codes(fmt, spec.options), tidx, out=codebufs[fmt.code_dtype][:k])
                elif not wide and spec.scale is None and fast_casts.eligible(fmt, spec.options):
                    # float16 / bfloat16 with the default options: compiled, same codes
                    codes = fast_casts.cast16(np.ascontiguousarray(carrier), fmt, codebufs[fmt.code_dtype][:k])
                else:
                    src = x64 if spec.scale is not None or wide else xs
                    with np.errstate(invalid="ignore", over="ignore"):  # NaN/Inf inputs are expected
                        codes = encode(
                            src,
                            fmt,
                            spec.options.rounding,
                            spec.options.overflow,
                            spec.options.subnormals,
                            _sub_seed(spec.seed, int(loc.to_global(np.array([at]))[0])),
                        )
                if fmt.bits <= 16 and compiled:
                    measured = error_kernels.measure_codes(
                        codes, xe, den, *_measure_tables(fmt), fmt.magnitude_mask,
                        (1 << fmt.t) - 1 if fmt.has_subnormals else 0, err, rel, buf["u"][:k], nanbool[:k],
                    )
                    nan_table = True
                elif fmt.bits <= 16:
                    np.copyto(ci, codes, casting="unsafe")  # one conversion for every lookup
                    q = np.take(_nan_value_table(fmt), ci, out=qbuf, mode="wrap")
                    nan_table = True
                else:
                    q = decode(codes, fmt)
            if measured is None:
                with np.errstate(invalid="ignore"):  # NaN - NaN where the input is not finite
                    np.subtract(q, xe, out=err)
                np.abs(err, out=err)
            bad = None
            if measured is not None:
                nbad = measured.bad  # left out: 0 in err and rel, flagged in nanbool
            elif k == 0:
                nbad = 0
            elif nan_table and not collect:
                np.not_equal(err, err, out=nanbool[:k])
                nbad = int(np.count_nonzero(nanbool[:k]))
                if nbad:
                    np.fmax(err, 0.0, out=err)  # NaN -> 0: left out of every sum
            else:
                top = err.max()
                if math.isfinite(top):
                    nbad = 0
                else:
                    bad = np.flatnonzero(~np.isfinite(err))
                    err[bad] = 0.0
                    nbad = bad.size
            if measured is None:
                np.divide(err, den, out=rel)
            if collect:  # refinement pass: values or finer counts inside target ranges
                u = rel.view(np.uint64)  # left-out elements have rel 0, below every range
                for t_i, (lo_p, hi_p, shift, nbins) in enumerate(spec.targets[j]):  # type: ignore[index]
                    if compiled and nbins == 0:
                        acc.collected[t_i].append(error_kernels.range_values(rel, lo_p, hi_p))
                        continue
                    n_log = log_bins(hi_p - lo_p) if nbins else 0
                    if nbins and not acc.collected[t_i]:  # one running count per block
                        acc.collected[t_i].append(np.zeros(layout(lo_p, hi_p, nbins), np.int64))
                    if compiled:
                        error_kernels.range_counts(rel, lo_p, hi_p, shift, nbins, n_log, acc.collected[t_i][0])
                        continue
                    sel = u[(u >= np.uint64(lo_p)) & (u < np.uint64(hi_p))]
                    if nbins == 0:
                        acc.collected[t_i].append(sel.view(np.float64))
                    else:  # counts by sub_ranges.layout
                        counts = acc.collected[t_i][0]
                        sub_keys = ((sel - np.uint64(lo_p)) >> np.uint64(shift)).astype(np.intp)
                        counts[:nbins] += np.bincount(sub_keys, minlength=nbins)
                        if n_log:
                            counts[nbins : nbins + n_log] += np.bincount(
                                log_keys(np.uint64(hi_p - 1) - sel), minlength=n_log)
                            counts[nbins + n_log :] += np.bincount(log_keys(sel - np.uint64(lo_p)), minlength=n_log)
                continue
            if entry.hook is not None:
                if nbad:
                    assert bad is not None  # no NaN table for hooks: bad holds the left-out
                    lost = bad[np.isfinite(x64[bad])]
                    if lost.size and nonfinite:
                        # finite values made NaN by a NaN/Inf elsewhere in their block
                        nf_blocks = _block_ids(np.flatnonzero(a >= inf_bits), seg, entry.block_size)
                        in_nan_block = np.isin(_block_ids(lost, seg, entry.block_size), nf_blocks)
                        acc.block_nan += int(np.count_nonzero(in_nan_block))
                        lost = lost[~in_nan_block]
                    acc.overflow += int(lost.size)
                    if acc.found["overflow"] < limit:
                        idx = lost[: limit - acc.found["overflow"]]
                        if idx.size:
                            acc.where["overflow"].append(loc.to_global(idx + at))
                            acc.found["overflow"] += idx.size
                with np.errstate(invalid="ignore"):
                    um = (q == 0) & (x64 != 0) & (ax < np.inf)
                uf = int(np.count_nonzero(um))
                acc.underflow += uf
                if uf:
                    def um_mask(um: np.ndarray = um) -> np.ndarray:
                        return um

                    acc.note("underflow", limit, um_mask, loc, at)
                if not full:
                    continue
            else:
                # underflow and subnormal from the codes (the cast's actual outcome)
                assert fmt is not None and codes is not None  # set by the plain-format cast
                if fmt.has_zero:
                    # masks of zero and subnormal codes, built only where the counts need them
                    # (no compiled counts) or positions are still wanted
                    def zero_codes(codes: np.ndarray = codes, fmt: Format = fmt) -> np.ndarray:
                        if not fmt.has_negative_zero:
                            return codes == 0
                        return np.bitwise_and(codes, codes.dtype.type(fmt.magnitude_mask)) == 0

                    def sub_codes(codes: np.ndarray = codes, fmt: Format = fmt) -> np.ndarray:
                        cm = np.bitwise_and(codes, codes.dtype.type(fmt.magnitude_mask))
                        return np.subtract(cm, cm.dtype.type(1)) < cm.dtype.type((1 << fmt.t) - 1)

                    if measured is not None:
                        nz = measured.zero_magnitudes if fmt.has_negative_zero else measured.zero_codes
                    else:
                        nz = int(np.count_nonzero(zero_codes()))
                    uf = nz - z - (0 if fmt.has_nan else sub_nan)
                    acc.underflow += uf
                    if uf:
                        def uf_mask() -> np.ndarray:
                            return zero_codes() & (a != 0) & (a <= inf_bits)

                        acc.note("underflow", limit, uf_mask, loc, at)
                    if fmt.has_subnormals:
                        if measured is not None:
                            sb = measured.subnormal
                        else:
                            sb = int(np.count_nonzero(sub_codes()))
                        acc.subnormal += sb
                        if sb:
                            acc.note("subnormal", limit, sub_codes, loc, at)
            # ----- errors of the compared elements
            compared = k - nbad
            acc.compared += compared
            acc.exact += measured.exact if measured is not None else int(np.count_nonzero(err == 0)) - nbad
            if compared:
                emax = measured.max_err if measured is not None else float(err.max())
                acc.max_abs = max(acc.max_abs, emax)
                rmax = measured.max_rel if measured is not None else float(rel.max())
                acc.max_rel = max(acc.max_rel, rmax)
                # squares summed with einsum (not BLAS dot: same result on every machine)
                acc.sum_err2 += float(np.einsum("i,i->", err, err))
                if nbad == nonfinite:  # only the non-finite inputs are left out: shared sum
                    if shared_x2 is None:
                        shared_x2 = float(np.einsum("i,i->", x0, x0))
                    acc.sum_x2 += shared_x2
                elif bad is None:
                    np.logical_not(nanbool[:k], out=keep[:k])
                    np.multiply(x0, keep[:k], out=sq)
                    acc.sum_x2 += float(np.einsum("i,i->", sq, sq))
                else:
                    np.copyto(sq, x0)
                    sq[bad] = 0.0
                    acc.sum_x2 += float(np.einsum("i,i->", sq, sq))
                if codes is not None:
                    assert fmt is not None  # codes come from a plain format
                    if measured is not None:
                        ue = buf["u"][:k]
                    elif fmt.bits <= 16:
                        ue = np.take(_inv_ulp_table(fmt), ci, out=sq, mode="wrap")
                        np.multiply(ue, err, out=ue)
                    else:
                        with np.errstate(invalid="ignore"):
                            uq = ulp(q, fmt)
                            ue = np.where(np.isfinite(uq), err / uq, 0.0)
                    acc.max_ulp = max(acc.max_ulp, measured.max_ulp if measured is not None else float(ue.max()))
                    acc.sum_ulp += float(ue.sum())
                if acc.hist is not None:
                    if compiled:
                        acc.ones += error_kernels.bucket_rel(rel, acc.hist)
                    else:
                        acc.ones += int(np.count_nonzero(rel == 1.0))
                        rel_keys(rel, keys, rmax)
                        acc.hist += np.bincount(keys, minlength=REL_BINS)
                    acc.hist[0] -= nbad  # left out: relative error 0 in rel, not compared
                if acc.values is not None:
                    if nbad:
                        kept = rel[~nanbool[:k]] if bad is None else np.delete(rel, bad)
                    else:
                        kept = rel.copy()
                    acc.values.append(kept)
                # largest errors: (error desc, index asc); only elements with error > 0
                if limit and emax > (acc.top_err[-1] if acc.top_err.size >= limit else acc.floor):
                    _update_top(acc, err, limit, loc, at)
    if collect:
        fps = tuple(
            FormatPartial(rel_hist=None, collected=tuple(
                _combine(parts, layout(t[0], t[1], t[3]) if t[3] else 0)
                for parts, t in zip(acc.collected, spec.targets[j])  # type: ignore[index]
            ))
            for j, acc in enumerate(accs)
        )
        return BlockPartial(limit, InputPartial(), fps)
    exponents = np.zeros(2200, np.int64)
    ex = np.arange(1, e_top) - bias + EXP_OFFSET
    exponents[ex] = exps[1:e_top]
    inp = InputPartial(
        n, nan, infs, zero, csub, lo, hi, exponents,
        np.concatenate(w_nan) if w_nan else np.zeros(0, np.int64),
        np.concatenate(w_inf) if w_inf else np.zeros(0, np.int64),
    )
    fps = tuple(acc.freeze(spec, e.hook is None) for acc, e in zip(accs, spec.entries))
    return BlockPartial(limit, inp, fps)


def _combine(parts: list[np.ndarray], nbins: int) -> np.ndarray:
    """One target's collection: values (nbins == 0) or counts over ``nbins`` finer ranges."""
    if nbins == 0:
        return np.concatenate(parts) if parts else np.zeros(0)
    out = np.zeros(nbins, np.int64)
    for p in parts:
        out += p
    return out


def _any(masks: list[Callable[[], np.ndarray]]) -> Callable[[], np.ndarray]:
    def mask() -> np.ndarray:
        out = masks[0]()
        for m in masks[1:]:
            out |= m()
        return out

    return mask


def options_flush(spec: _Spec) -> bool:
    return spec.options.subnormals == "flush"


def _range_mask(side: str, bits: np.ndarray, a: np.ndarray, uint: type, sign_bit: Any, p_lo: int, p_hi: int) -> Callable[[], np.ndarray]:
    def mask() -> np.ndarray:
        if side == "abs":
            return (a >= uint(p_lo)) & (a < uint(p_hi))
        if side == "pos":
            return (bits >= uint(p_lo)) & (bits < uint(p_hi))
        return (bits >= uint(p_lo) + sign_bit) & (bits < uint(p_hi) + sign_bit)

    return mask


def _update_top(acc: _Acc, err: np.ndarray, limit: int, loc: _Locator, at: int) -> None:
    """Fold this piece's largest errors into the block's list: (error desc, index asc)."""
    floor = acc.top_err[-1] if acc.top_err.size >= limit else acc.floor
    cand = np.flatnonzero(err > floor)  # ties at the floor sit at later positions: never enter
    if cand.size > 4 * limit + 16:
        vals = err[cand]
        cut = vals[np.argpartition(vals, vals.size - limit)[vals.size - limit :]].min()
        above = cand[vals > cut]
        ties = cand[vals == cut][:limit]
        cand = np.concatenate((above, ties))
    if not cand.size:
        return
    v_all = np.concatenate((acc.top_err, err[cand]))
    i_all = np.concatenate((acc.top_idx, loc.to_global(cand + at)))
    order = np.lexsort((i_all, -v_all))[:limit]
    acc.top_err, acc.top_idx = v_all[order], i_all[order]


# ----- results -------------------------------------------------------------------------------


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

    Counts are over all elements; ``compared`` elements (finite input and finite result) enter
    the error figures. Figures a scan did not compute are ``None``.
    """

    format: str
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

    def fraction(self, kind: str) -> float | None:
        """Share of all elements in a class: nan, inf, overflow, underflow, subnormal, invalid,
        exact, block_nan."""
        kinds = ("nan", "inf", "overflow", "underflow", "subnormal", "invalid", "exact", "block_nan")
        if kind not in kinds:
            raise BitprismError(f"kind must be one of {', '.join(kinds)}; got {kind!r}")
        value = getattr(self, kind)
        if value is None or self.size == 0:
            return None if value is None else 0.0
        return value / self.size


@dataclass(frozen=True)
class ScanResult:
    """The answer of ``scan()``: one ``FormatScan`` per format plus facts about the input.

    ``result["float16"]`` gives a format's row; ``result.where(kind, format)`` the indices of the
    first elements of a kind; ``result.plot()`` draws the range chart.
    """

    dtype: str
    shape: tuple[int, ...]
    size: int
    min: float | None
    max: float | None
    absmax: float | None
    scale: float | None
    rounding: str
    overflow: str
    subnormals: str
    quantiles: str
    where_limit: int
    histogram: ExponentHistogram
    formats: tuple[FormatScan, ...]
    _where: Mapping[tuple[str, str], tuple[np.ndarray, ...]] = field(repr=False, compare=False)

    @property
    def format_names(self) -> tuple[str, ...]:
        return tuple(f.format for f in self.formats)

    def __getitem__(self, name: str) -> FormatScan:
        for f in self.formats:
            if f.format == name:
                return f
        try:
            canonical = get_format(name).name
        except BitprismError:
            canonical = None
        for f in self.formats:
            if f.format == canonical:
                return f
        raise KeyError(f"no format {name!r} in this scan; it has {', '.join(self.format_names)}")

    def where(self, kind: str, format: str | None = None) -> tuple[np.ndarray, ...]:
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
            format = self.formats[0].format
        name = self[format].format
        return self._where[(kind, name)]

    def plot(self, **kwargs: Any) -> Any:
        """The range chart (a matplotlib Figure); see ``bitprism.plots.range_chart``."""
        from ..plots.range_chart import range_chart

        return range_chart(self, **kwargs)

    def _block_nan_note(self) -> str | None:
        """One line on the block formats' finite values lost to a NaN/Inf in their block
        (counted apart from overflow), or None when the scan has no block formats."""
        rows = [f for f in self.formats if f.block_nan is not None]
        if not rows:
            return None
        from ..render.scan_text import fmt_count

        parts = ", ".join(f"{f.format} {fmt_count(f.block_nan, f.size)}" for f in rows)
        return f"block NaN (finite values lost to a NaN/Inf in their block, not overflow): {parts}"

    def to_text(self) -> str:
        from ..render.scan_text import scan_text

        text = scan_text(self)
        note = self._block_nan_note()
        return text if note is None else f"{text}\n{note}"

    def to_html(self) -> str:
        from html import escape

        from ..render.scan_html import scan_html

        page = scan_html(self)
        note = self._block_nan_note()
        if note is None:
            return page
        line = f'<div style="margin-top:4px">{escape(note)}</div>'
        cut = page.rfind("</div>")  # inside the result's box
        return page[:cut] + line + page[cut:] if cut >= 0 else page + line

    def __str__(self) -> str:
        return self.to_text()

    def _repr_mimebundle_(self, include: Any = None, exclude: Any = None) -> dict[str, str]:
        return {"text/plain": self.to_text(), "text/html": self.to_html()}


# ----- driver --------------------------------------------------------------------------------


def _resolve_entries(formats: Any, options: CastOptions) -> tuple[_Entry, ...]:
    if isinstance(formats, (str, Format)) or (
        not isinstance(formats, (tuple, list)) and isinstance(formats, ScanQuantizer)  # slow check last
    ):
        formats = (formats,)
    entries: list[_Entry] = []
    for spec in formats:
        if isinstance(spec, str) and spec.strip().lower().replace("-", "_") in _mx_names():
            from .mx import get_mx_format

            spec = get_mx_format(spec)  # the OCP MX block formats by name ("mxfp4", ...)
        if not isinstance(spec, (str, Format, np.dtype, type)) and callable(
            getattr(spec, "dequantize_block", None)
        ):
            name = getattr(spec, "name", None)
            if not isinstance(name, str) or not name:
                raise BitprismError(f"a block-format entry needs a non-empty str name; got {name!r}")
            bs = getattr(spec, "block_size", 32)
            if isinstance(bs, bool) or not isinstance(bs, int) or bs < 1:
                raise BitprismError(f"{name}: block_size must be a positive int, got {bs!r}")
            entries.append(_Entry(name, None, spec, bs))
            continue
        fmt = get_format(spec)
        pos = _thresholds(fmt, options, False)
        neg = _thresholds(fmt, options, True) if fmt.signed else None
        entries.append(_Entry(fmt.name, fmt, None, 32, pos, neg))
    names = [e.name for e in entries]
    if len(set(names)) != len(names):
        raise BitprismError(f"formats must be distinct; got {names!r}")
    if not entries:
        raise BitprismError("formats must name at least one format")
    return tuple(entries)


@lru_cache(maxsize=1)
def _mx_names() -> frozenset[str]:
    from .mx import MX_FORMATS

    return frozenset(MX_FORMATS)


def _as_input(data: Any) -> Any:
    try:
        from .adapters import as_array, is_dask_array
    except ImportError:  # pragma: no cover - the adapters ship with the package
        return np.asarray(data)
    if is_dask_array(data):
        return data
    return as_array(data)


def _numpy_blocks(
    arr: np.ndarray, spec: _Spec, block: int = BLOCK
) -> Iterator[tuple[np.ndarray, _Locator, int]]:
    """(values, locator, segment length) for each block of ``block`` elements (whole rows of
    axis 0 for a strided array) of a numpy array, in order."""
    n = arr.size
    if n == 0:
        return
    a = arr.reshape(1) if arr.ndim == 0 else arr
    last = a.shape[-1]
    contiguous = a.flags.c_contiguous
    row = n // a.shape[0] if a.ndim >= 2 else 1  # elements per index of axis 0
    if spec.hooks:
        bs = max(e.block_size for e in spec.entries if e.hook is not None)
        if last <= BLOCK:
            step = max(1, BLOCK // last) * last
            ranges = [(s, min(s + step, n), last) for s in range(0, n, step)]
        else:
            piece = max(bs, BLOCK // bs * bs)
            ranges = [
                (r * last + j, r * last + min(j + piece, last), min(piece, last - j))
                for r in range(n // last)
                for j in range(0, last, piece)
            ]
    else:
        ranges = [(s, min(s + block, n), _SUB) for s in range(0, n, block)]
    if contiguous:
        flat = a.reshape(-1)
        for s, e, seg in ranges:
            yield flat[s:e], _Locator(s), seg
        return
    if a.ndim == 1:
        for s, e, seg in ranges:
            yield np.ascontiguousarray(a[s:e]), _Locator(s), seg
        return
    # not C-contiguous: read whole rows of axis 0 (copies bounded by the block, or one row)
    rows_per = max(1, min(block, _COPY_MAX) // row)
    for r in range(0, a.shape[0], rows_per):
        rows = np.ascontiguousarray(a[r : r + rows_per]).reshape(-1)
        yield rows, _Locator(r * row), last if spec.hooks else _SUB


def _progress_bar(size: int, work: int, enabled: bool, desc: str) -> Any:
    """A bar over the ``size`` elements of one pass, shown when the whole scan reads more
    than ``PROGRESS_MIN`` elements (``work``, over all passes)."""
    if not enabled or work <= PROGRESS_MIN:
        return None
    from tqdm.auto import tqdm

    return tqdm(total=size, unit="el", unit_scale=True, desc=desc, leave=False)


def _threads() -> int:
    """Worker threads of a scan: the counting kernel releases the GIL, and so does numpy
    inside each operation of the general block scan."""
    try:
        cores = len(os.sched_getaffinity(0))
    except AttributeError:  # not on every platform
        cores = os.cpu_count() or 1
    return max(1, min(MAX_THREADS, cores))


def _floors(out: BlockPartial | None, spec: _Spec) -> tuple[float, ...] | None:
    """Per entry, the error the blocks merged so far (all at lower positions) already beat
    ``limit`` times: later blocks skip elements not above it (see ``_scan_block``)."""
    if out is None or spec.targets is not None:
        return None
    return tuple(
        float(f.top_err[-1]) if f.top_err.size >= spec.limit and spec.limit else 0.0
        for f in out.formats
    )


def _run_numpy(arr: np.ndarray, spec: _Spec, bar: Any) -> BlockPartial | None:
    """Scan the blocks of a numpy array in order on up to ``_threads()`` threads, at most one
    more block in flight than threads (so a memmap or a strided input is never read far
    ahead), merged in order. The merge is associative and commutative and the floors only
    skip work, so the result equals a one-thread scan. Block formats (user objects that may
    not be thread-safe) run on the calling thread, and so does a counts-only scan without
    the compiled kernel (measured slower on threads)."""
    counting = counts_only.eligible(spec)
    workers = 1 if spec.hooks else _threads()
    if counting:
        block = min(COUNT_BLOCK, max(COUNT_BLOCK_MIN, -(-arr.size // workers)))
    else:
        block = BLOCK
    # numpy's counts-only block holds the GIL too often (bincount) to gain from threads
    if (spec.mode is False and not counting) or arr.size <= block:
        workers = 1
    out: BlockPartial | None = None
    if workers == 1:
        for values, loc, seg in _numpy_blocks(arr, spec, block):
            part = _scan_block(values, loc, spec, seg, _floors(out, spec))
            out = part if out is None else out.merge(part)
            if bar is not None:
                bar.update(values.size)
        return out
    pending: deque[tuple[Future[BlockPartial], int]] = deque()

    def take() -> None:
        nonlocal out
        fut, k = pending.popleft()
        part = fut.result()
        out = part if out is None else out.merge(part)
        if bar is not None:
            bar.update(k)

    pool = _pool(workers)
    try:
        for values, loc, seg in _numpy_blocks(arr, spec, block):
            fut = pool.submit(_scan_block, values, loc, spec, seg, _floors(out, spec))
            pending.append((fut, values.size))
            if len(pending) > workers:
                take()
        while pending:
            take()
    finally:
        for fut, _ in pending:  # an error or an interrupt: drop what has not started
            fut.cancel()
        for fut, _ in pending:
            if not fut.cancelled():
                wait([fut])
    return out


_pools: dict[tuple[int, int], ThreadPoolExecutor] = {}
_pools_lock = threading.Lock()


def _pool(workers: int) -> ThreadPoolExecutor:
    """A thread pool kept for the process (starting threads for every scan costs about as
    much as counting a million elements). Keyed by process id too: a forked child inherits
    the pool object but not its threads, so it gets a pool of its own."""
    key = (os.getpid(), workers)
    with _pools_lock:
        pool = _pools.get(key)
        if pool is None:
            pool = _pools[key] = ThreadPoolExecutor(workers, thread_name_prefix="bitprism-scan")
        return pool


def _merge_all(*parts: BlockPartial) -> BlockPartial:
    out = merge_blocks(parts)
    assert out is not None
    return out


def _run_dask(darr: Any, spec: _Spec) -> BlockPartial | None:
    import dask

    if darr.size == 0:
        return None
    if darr.ndim == 0:
        darr = darr.reshape(1)
    if spec.hooks:
        bs = max(e.block_size for e in spec.entries if e.hook is not None)
        last = darr.chunks[-1]
        starts = np.cumsum((0,) + last[:-1])
        if any(s % bs for s in starts):
            size = max(bs, -(-last[0] // bs) * bs)
            darr = darr.rechunk({darr.ndim - 1: size})
    shape = tuple(int(s) for s in darr.shape)
    starts_per_dim = [np.cumsum((0,) + c[:-1]) for c in darr.chunks]
    blocks = darr.to_delayed()
    scan_block = dask.delayed(_scan_block)
    parts = []
    for idx in np.ndindex(blocks.shape):
        bshape = tuple(int(darr.chunks[d][i]) for d, i in enumerate(idx))
        if 0 in bshape:
            continue
        offsets = tuple(int(starts_per_dim[d][i]) for d, i in enumerate(idx))
        loc = _Locator(0, bshape, offsets, shape)
        parts.append(scan_block(blocks[idx], loc, spec, bshape[-1]))
    merge = dask.delayed(_merge_all)
    while len(parts) > 1:
        parts = [merge(*parts[i : i + 8]) for i in range(0, len(parts), 8)]
    if not parts:
        return None
    (result,) = dask.compute(parts[0])
    return result


def _lerp(a: float, b: float, t: float) -> float:
    """numpy's ``_lerp`` for one pair (the same operations, so the same rounding)."""
    diff = b - a
    if t >= 0.5:
        return b - diff * (1 - t)
    return a + diff * t


def _order_stats(n: int) -> list[tuple[int, int, float]]:
    """(lower index, upper index, weight) per percentile, as np.quantile method='linear'."""
    out = []
    for p in _PERCENTILES:
        virtual = (n - 1) * p
        lo = math.floor(virtual)
        if virtual >= n - 1:
            lo = hi = n - 1
        else:
            hi = lo + 1
        out.append((lo, hi, virtual - lo))
    return out


def _bucket_of(cum: np.ndarray, k: int) -> int:
    return int(np.searchsorted(cum, k, side="right"))


def scan(
    data: Any,
    formats: Sequence[Any] | Any = DEFAULT_FORMATS,
    rounding: str = "roundTiesToEven",
    overflow: str = "standard",
    subnormals: str = "keep",
    scale: float | None = None,
    progress: bool = True,
    quantiles: Union[str, bool] = "exact",
    where_limit: int = 10,
    seed: int | None = None,
    exponents: bool | None = None,
) -> ScanResult:
    """What happens to ``data`` in each of ``formats``: counts, errors and where they are.

    Args:
        data: a numpy array of any float dtype (ml_dtypes included), an int or bool array, a
            ``np.memmap``, a torch/JAX tensor, a file path, or a dask array (scanned lazily).
        formats: format names, ``Format`` objects, dtypes, or block-format objects (see the
            module docstring for that protocol).
        rounding, overflow, subnormals, seed: the cast options (``CastOptions``).
        scale: multiply the data by this number (in float64) before the cast.
        progress: show a ``tqdm.auto`` bar for inputs over ``PROGRESS_MIN`` elements.
        quantiles: ``"exact"``, ``"histogram"`` or ``False`` (counts only).
        where_limit: how many indices ``where()`` keeps per kind.
        exponents: collect the binary-exponent histogram (the range chart needs it). ``None``
            (default): collected unless ``quantiles=False``, where leaving it out saves a
            third of the time of a counts-only scan.
    """
    options = CastOptions(rounding, overflow, subnormals, seed)  # type: ignore[arg-type]
    if quantiles not in _QUANTILES or quantiles is True:
        raise BitprismError(f"quantiles must be 'exact', 'histogram' or False; got {quantiles!r}")
    if quantiles is False and options.rounding == "stochastic":
        raise BitprismError(
            "a counts-only scan (quantiles=False, or --quantiles none) counts by thresholds on |x|, "
            "which needs a deterministic rounding; "
            "stochastic rounding needs the full scan (quantiles='histogram' or 'exact')"
        )
    if exponents is None:
        exponents = quantiles is not False
    elif not isinstance(exponents, (bool, np.bool_)):
        raise BitprismError(f"exponents must be True, False or None, got {exponents!r}")
    exponents = bool(exponents)
    if isinstance(where_limit, bool) or not isinstance(where_limit, int) or where_limit < 0:
        raise BitprismError(f"where_limit must be a non-negative int, got {where_limit!r}")
    if scale is not None:
        if isinstance(scale, bool) or not isinstance(scale, (int, float, np.integer, np.floating)):
            raise BitprismError(f"scale must be a real number or None, got {scale!r}")
        scale = float(scale)
        if not math.isfinite(scale) or scale == 0.0:
            raise BitprismError(f"scale must be finite and nonzero, got {scale!r}")
    entries = _resolve_entries(formats, options)
    arr = _as_input(data)
    dask_input = not isinstance(arr, np.ndarray)
    dtype = np.dtype(arr.dtype)
    if dtype.kind in "iub":
        carrier32 = False
    else:
        carrier32 = scale is None and _carrier_is_32(dtype)
        if not carrier32 and dtype != np.float64:
            if dtype.kind == "f" and dtype.itemsize > 8 or dtype.kind not in "fV":
                raise UnsupportedInputError(f"cannot scan data of dtype {dtype}")
    if options.rounding == "stochastic" and seed is None:
        seed = int(np.random.SeedSequence().generate_state(1, np.uint64)[0] >> np.uint64(1))
    size = int(np.prod(arr.shape, dtype=np.int64)) if arr.shape else 1
    keep = quantiles == "exact" and size <= KEEP_VALUES
    spec = _Spec(entries, options, scale, quantiles, where_limit, keep, carrier32, seed,
                 exponents=exponents)
    passes = 2 if quantiles == "exact" and not keep else 1
    # exact quantiles may need more passes than the two foreseen: the bar counts the elements
    # of the current pass (so its total is the tensor's size) and names the pass
    bar = None if dask_input else _progress_bar(size, size * passes, progress,
                                                "scan, pass 1" if passes == 2 else "scan")
    try:
        part = _run_dask(arr, spec) if dask_input else _run_numpy(arr, spec, bar)
        fparts = list(part.formats) if part is not None else []
        resolved: list[dict[int, float]] = [{} for _ in fparts]
        if part is not None and passes == 2:
            pending = _first_requests(fparts)
            pass_number = 1
            while pending:
                targets, index = _targets_for(pending, len(fparts))
                spec2 = _Spec(entries, options, scale, quantiles, where_limit, False, carrier32, seed, targets)
                pass_number += 1
                if bar is not None:
                    bar.set_description(f"scan, pass {pass_number}", refresh=False)
                    bar.reset(total=size)
                more = _run_dask(arr, spec2) if dask_input else _run_numpy(arr, spec2, bar)
                assert more is not None
                pending = _refine(pending, index, targets, more, resolved)
    finally:
        if bar is not None:
            bar.close()
    return _build(arr, dtype, size, spec, part, fparts, resolved)


_CAP = 1 << 21  # a refinement pass collects the values of a range once it holds this few
_BUDGET = 1 << 22  # ... and at most this many values in one pass, over all ranges (32 MiB)
_F64_TOP = 0x7FF0000000000001  # just above the pattern of +Inf

# A request: (entry, order statistic k, low pattern, high pattern, rank inside, count inside).
_Request = tuple[int, int, int, int, int, int]


def _first_requests(fparts: list[FormatPartial]) -> list[_Request]:
    """Order statistics the first pass cannot tell, each located in its histogram bucket."""
    out: list[_Request] = []
    for j, fp in enumerate(fparts):
        if not fp.compared or fp.rel_hist is None:
            continue
        cum = np.cumsum(fp.rel_hist)
        seen = set()
        for lo, hi, _ in _order_stats(fp.compared):
            for k in (lo, hi):
                if k in seen or _known(fp, cum, k) is not None:
                    continue
                seen.add(k)
                b = _bucket_of(cum, k)
                if b == 0:  # nonzero values below the first edge; the zeros come first
                    lo_p, below = 1, fp.exact
                else:
                    lo_p, below = (b + REL_BASE) << REL_SHIFT, int(cum[b - 1])
                hi_p = _F64_TOP if b == REL_BINS - 1 else (b + 1 + REL_BASE) << REL_SHIFT
                count = int(cum[b]) - below
                out.append((j, k, lo_p, hi_p, k - below, count))
    return out


def _targets_for(pending: list[_Request], n_entries: int) -> tuple[_Targets, dict]:
    """Per entry, the distinct ranges to look into: (low, high, shift, bins); bins == 0 asks
    for the values, else for counts over ``bins`` sub-ranges of 2^shift patterns each."""
    per: list[list[tuple[int, int, int, int]]] = [[] for _ in range(n_entries)]
    index: dict[tuple[int, int, int], int] = {}
    budget = _BUDGET
    for j, _, lo_p, hi_p, _, count in sorted(pending, key=lambda r: r[5]):  # smallest first
        if (j, lo_p, hi_p) in index:
            continue
        if count <= min(_CAP, budget):
            budget -= count
            t = (lo_p, hi_p, 0, 0)
        else:
            width = hi_p - lo_p
            shift = max(0, width.bit_length() - 16)
            t = (lo_p, hi_p, shift, ((width - 1) >> shift) + 1)
        index[(j, lo_p, hi_p)] = len(per[j])
        per[j].append(t)
    return tuple(tuple(p) for p in per), index


def _refine(pending: list[_Request], index: dict, targets: _Targets, more: BlockPartial,
            resolved: list[dict[int, float]]) -> list[_Request]:
    out: list[_Request] = []
    for j, k, lo_p, hi_p, rank, count in pending:
        t_i = index[(j, lo_p, hi_p)]
        _, _, shift, nbins = targets[j][t_i]
        got = more.formats[j].collected[t_i]  # type: ignore[index]
        if nbins == 0:
            resolved[j][k] = float(np.partition(got, rank)[rank])
            continue
        new_lo, new_hi, new_rank, count = pick(lo_p, hi_p, shift, nbins, got, rank)
        out.append((j, k, new_lo, new_hi, new_rank, count))
    return out


_ONE_BUCKET = int(rel_keys(np.ones(1), np.empty(1, np.int64))[0])  # 1.0 starts this bucket


def _known(fp: FormatPartial, cum: np.ndarray, k: int) -> float | None:
    """The k-th smallest relative error when the counts alone tell it: the first ``exact``
    are 0; in the bucket that starts at 1.0 the first ``ones`` are exactly 1 (values flushed to
    zero), since nothing in that bucket is smaller than 1."""
    if k < fp.exact:
        return 0.0
    b = _bucket_of(cum, k)
    if b == _ONE_BUCKET and k - int(cum[b - 1]) < fp.ones:
        return 1.0
    return None


def _quantile_values(
    fp: FormatPartial, mode: Any, resolved: dict[int, float]
) -> tuple[float | None, float | None]:
    n = fp.compared
    if not n or mode is False:
        return None, None
    out: list[float] = []
    cum = np.cumsum(fp.rel_hist) if fp.rel_hist is not None else np.zeros(1, np.int64)

    def stat(k: int) -> float:
        known = _known(fp, cum, k)
        if known is not None:
            return known
        if mode == "exact":
            if fp.rel_values is not None:  # every value kept (small input)
                vals, counts = fp.rel_values
                return float(vals[_bucket_of(np.cumsum(counts), k)])
            return resolved[k]
        b = _bucket_of(cum, k)
        lo_b, hi_b = rel_bin_bounds(b)
        if b == 0:
            lo_b = 0.0
        mid = fp.max_rel if not math.isfinite(hi_b) else (lo_b + hi_b) / 2
        return min(mid, fp.max_rel)

    for lo, hi, t in _order_stats(n):
        out.append(_lerp(stat(lo), stat(hi), t))
    return out[0], out[1]


def _build(
    arr: Any,
    dtype: np.dtype,
    size: int,
    spec: _Spec,
    part: BlockPartial | None,
    fparts: list[FormatPartial],
    resolved: list[dict[int, float]],
) -> ScanResult:
    shape = tuple(int(s) for s in arr.shape)
    inp = part.input if part is not None else InputPartial()
    # exponent histogram; values below the input format's normal range are its subnormals
    exps = inp.exponents.copy()
    sub_extra = 0
    if spec.scale is None and dtype.kind not in "iub":
        emin = get_format(dtype).emin
        below = slice(0, emin + EXP_OFFSET)
        sub_extra = int(exps[below].sum())
        exps[below] = 0
    populated = np.flatnonzero(exps) if spec.exponents else np.zeros(0, np.intp)
    hist = ExponentHistogram(
        tuple(int(i) - EXP_OFFSET for i in populated),
        tuple(int(exps[i]) for i in populated),
        inp.zero,
        inp.carrier_subnormal + sub_extra,
        inp.inf,
        inp.nan,
        collected=spec.exponents,
    )
    has_values = inp.n > inp.nan
    lo = inp.min if has_values else None
    hi = inp.max if has_values else None
    absmax = max(abs(lo), abs(hi)) if has_values else None  # type: ignore[arg-type]
    where: dict[tuple[str, str], tuple[np.ndarray, ...]] = {}
    nd_shape = shape if shape else (1,)

    def unravel(flat: np.ndarray) -> tuple[np.ndarray, ...]:
        if len(nd_shape) == 1:
            return (np.array(flat, np.intp),)
        flat = np.asarray(flat, np.int64)
        return tuple(np.asarray(i, np.intp) for i in np.unravel_index(flat, nd_shape))

    where[("nan", "")] = unravel(inp.where_nan)
    where[("inf", "")] = unravel(inp.where_inf)
    rows = []
    for i, entry in enumerate(spec.entries):
        fp = fparts[i] if fparts else FormatPartial()
        full = spec.mode is not False
        p50, p99 = _quantile_values(fp, spec.mode, resolved[i] if resolved else {})
        compared = fp.compared if full else None
        has_err = full and bool(fp.compared)
        sx2, se2 = fp.sum_x2.value(), fp.sum_err2.value()
        if has_err:
            sqnr = math.inf if se2 == 0 else (10 * math.log10(sx2 / se2) if sx2 > 0 else -math.inf)
        else:
            sqnr = None
        plain = entry.fmt is not None
        th = entry.pos
        rows.append(
            FormatScan(
                entry.name,
                inp.n,
                inp.nan,
                inp.inf,
                fp.overflow,
                fp.underflow,
                fp.subnormal if fp.subnormal >= 0 and plain else None,
                fp.invalid,
                fp.exact if full else None,
                compared,
                fp.max_abs if has_err else None,
                p50,
                p99,
                fp.max_rel if has_err else None,
                fp.sum_ulp.value() / fp.compared if has_err and plain else None,
                fp.max_ulp if has_err and plain else None,
                sqnr,
                "none" if spec.mode is False else str(spec.mode),
                th.overflow_from if th is not None else None,
                th.nonzero_from if th is not None else None,
                th.normal_from if th is not None else None,
                None if plain else fp.block_nan,
            )
        )
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
        scale=spec.scale,
        rounding=spec.options.rounding,
        overflow=spec.options.overflow,
        subnormals=spec.options.subnormals,
        quantiles="none" if spec.mode is False else str(spec.mode),
        where_limit=spec.limit,
        histogram=hist,
        formats=tuple(rows),
        _where=MappingProxyType(where),
    )
