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
  all compared elements. Small inputs (at most ``ScanTuning.keep_values`` elements) keep the
  values. Larger
  ones take more passes over the data: the first builds the relative-error histogram, which
  puts each needed order statistic in a bucket; each further pass counts the elements of those
  buckets in finer sub-ranges of float64 bit patterns (2^16 even ones, and ones that grow with
  the distance from either end, for values piled against an end: ``sub_ranges``), until a
  range holds at most ``ScanTuning.refine_cap`` elements (and all ranges of one pass at most
  ``refine_budget``, 32 MiB of values), whose values are then collected and the order statistic picked by
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
  (``counts_only``) in one block per thread (up to ``ScanTuning.count_block``); the exponent histogram
  is left out unless ``exponents=True``.

Memory and scale: the tensor is read in blocks of ``ScanTuning.block`` elements (processed in
cache-sized pieces), so a ``np.memmap`` is never loaded whole. Blocks run on worker threads
(numpy and the counting kernel release the GIL), one block ahead at most, merged in order;
block formats stay on the calling thread. Each block gives a ``BlockPartial`` whose merge is
associative and commutative (see ``partials``). A dask array (recognised by duck typing; dask
is imported only then) is scanned as a dask reduction: one partial per chunk via
``to_delayed``, then a tree of merges, so it runs on whatever scheduler is active, a
``distributed`` cluster included.

The wing, in the order a scan runs: ``plan`` (formats resolved with their thresholds, the
options, the tuning), ``runners`` (numpy blocks on threads, dask), ``block`` (one block in named
steps: ``pieces`` for the input statistics and class counts, ``measure`` for cast codes and
errors; ``counts_only`` for counts-only scans), ``partials`` (the merges), ``quantiles`` (the
refinement passes), ``results`` (the records). ``compiled`` holds the optional numba loops.

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
from dataclasses import replace
from typing import Any, Sequence, Union

import numpy as np

from ...errors import BitprismError, UnsupportedInputError
from ...numerics.options import CastOptions, resolve_options
from .plan import (
    DEFAULT_TUNING,
    ScanPlan,
    ScanQuantizer,
    ScanTuning,
    carrier_is_32,
    resolve_entries,
    scan_format,
)
from .quantiles import first_requests, refine, targets_for
from .results import WHERE_KINDS, ExponentHistogram, FormatScan, ScanResult, build_result
from .runners import progress_bar, run_dask, run_numpy

__all__ = [
    "DEFAULT_FORMATS",
    "WHERE_KINDS",
    "ExponentHistogram",
    "FormatScan",
    "ScanQuantizer",
    "ScanResult",
    "ScanTuning",
    "scan",
    "scan_format",
]

DEFAULT_FORMATS = ("bfloat16", "float16", "float8_e4m3fn", "float8_e5m2")
_QUANTILES = ("exact", "histogram", False)


def _as_input(data: Any) -> Any:
    from ..adapters import as_array, is_dask_array

    if is_dask_array(data):
        return data
    return as_array(data)


def _check_arguments(
    options: CastOptions, quantiles: Any, exponents: Any, where_limit: Any, scale: Any
) -> tuple[bool, float | None]:
    """Refuse bad arguments with a clear message; (exponents, scale) as the scan uses them."""
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
    if isinstance(where_limit, bool) or not isinstance(where_limit, int) or where_limit < 0:
        raise BitprismError(f"where_limit must be a non-negative int, got {where_limit!r}")
    if scale is not None:
        if isinstance(scale, bool) or not isinstance(scale, (int, float, np.integer, np.floating)):
            raise BitprismError(f"scale must be a real number or None, got {scale!r}")
        scale = float(scale)
        if not math.isfinite(scale) or scale == 0.0:
            raise BitprismError(f"scale must be finite and nonzero, got {scale!r}")
    return bool(exponents), scale


def _carrier32(dtype: np.dtype, scale: float | None) -> bool:
    """Whether the cast reads float32 patterns (float64 for integers, scaled data, float64)."""
    if dtype.kind in "iub":
        return False
    carrier32 = scale is None and carrier_is_32(dtype)
    if not carrier32 and dtype != np.float64:
        if dtype.kind == "f" and dtype.itemsize > 8 or dtype.kind not in "fV":
            raise UnsupportedInputError(f"cannot scan data of dtype {dtype}")
    return carrier32


def scan(
    data: Any,
    formats: Sequence[Any] | Any = DEFAULT_FORMATS,
    rounding: str | None = None,
    overflow: str | None = None,
    subnormals: str | None = None,
    scale: float | None = None,
    progress: bool = True,
    quantiles: Union[str, bool] = "exact",
    where_limit: int = 10,
    seed: int | None = None,
    exponents: bool | None = None,
    *,
    options: CastOptions | None = None,
    tuning: ScanTuning | None = None,
) -> ScanResult:
    """What happens to ``data`` in each of ``formats``: counts, errors and where they are.

    Args:
        data: a numpy array of any float dtype (ml_dtypes included), an int or bool array, a
            ``np.memmap``, a torch/JAX tensor, a file path, or a dask array (scanned lazily).
        formats: format names, ``Format`` objects, dtypes, or block-format objects (see the
            module docstring for that protocol).
        rounding, overflow, subnormals, seed: keyword shorthands for the cast options; they
            replace the fields of ``options`` (default ``CastOptions()``). Stochastic rounding
            without a seed draws one; ``result.options.seed`` tells which.
        scale: multiply the data by this number (in float64) before the cast.
        progress: show a ``tqdm.auto`` bar for inputs over ``tuning.progress_min`` elements.
        quantiles: ``"exact"``, ``"histogram"`` or ``False`` (counts only).
        where_limit: how many indices ``where()`` keeps per kind.
        exponents: collect the binary-exponent histogram (the range chart needs it). ``None``
            (default): collected unless ``quantiles=False``, where leaving it out makes a
            counts-only scan markedly faster.
        tuning: how the work is cut (``ScanTuning``); the result is the same for every tuning.
    """
    options = resolve_options(options, rounding, overflow, subnormals, seed)
    exponents_on, scale = _check_arguments(options, quantiles, exponents, where_limit, scale)
    tuning = DEFAULT_TUNING if tuning is None else tuning
    if not isinstance(tuning, ScanTuning):
        raise BitprismError(f"tuning must be a ScanTuning or None, got {tuning!r}")
    entries = resolve_entries(formats, options)
    arr = _as_input(data)
    dask_input = not isinstance(arr, np.ndarray)
    dtype = np.dtype(arr.dtype)
    carrier32 = _carrier32(dtype, scale)
    if options.rounding == "stochastic" and options.seed is None:
        drawn = int(np.random.SeedSequence().generate_state(1, np.uint64)[0] >> np.uint64(1))
        options = replace(options, seed=drawn)  # the one seed the whole scan draws from
    size = int(np.prod(arr.shape, dtype=np.int64)) if arr.shape else 1
    keep = quantiles == "exact" and size <= tuning.keep_values
    plan = ScanPlan(entries, options, scale, quantiles, where_limit, keep, carrier32,
                    exponents=exponents_on, tuning=tuning)
    passes = 2 if quantiles == "exact" and not keep else 1
    # exact quantiles may need more passes than the two foreseen: the bar counts the elements
    # of the current pass (so its total is the tensor's size) and names the pass
    bar = None if dask_input else progress_bar(
        size, size * passes, progress, "scan, pass 1" if passes == 2 else "scan", plan)
    try:
        part = run_dask(arr, plan) if dask_input else run_numpy(arr, plan, bar)
        fparts = list(part.formats) if part is not None else []
        resolved: list[dict[int, float]] = [{} for _ in fparts]
        if part is not None and passes == 2:
            pending = first_requests(fparts)
            pass_number = 1
            while pending:
                targets, index = targets_for(pending, len(fparts), tuning)
                refining = replace(plan, keep_values=False, targets=targets)
                pass_number += 1
                if bar is not None:
                    bar.set_description(f"scan, pass {pass_number}", refresh=False)
                    bar.reset(total=size)
                more = run_dask(arr, refining) if dask_input else run_numpy(arr, refining, bar)
                assert more is not None
                pending = refine(pending, index, targets, more, resolved)
    finally:
        if bar is not None:
            bar.close()
    return build_result(arr, dtype, size, plan, part, fparts, resolved)
