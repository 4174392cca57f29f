"""A 2-D window of any tensor, classified cell by cell; and whole-tensor search in chunks.

This is the headless core of ``TensorPrism`` (no ipywidgets here): it reads only the cells of
the window (``make_window``) or one chunk of the tensor at a time (``count_kinds``, ``find``,
``largest_error``), so a ``np.memmap`` is never loaded whole.

Cell classes use the words of ``scan()`` (see ``tensors.scan``), with the same definitions:

* input class (``INPUT_KINDS``): zero, subnormal (of the input's own format), normal, Inf, NaN.
  Integer and bool inputs are zero or normal.
* cast class (``CAST_KINDS``) of a cast to format A, first match wins:
  ``nan``/``inf`` (the input already was), ``invalid`` (negative value sent to an unsigned
  format), ``overflow`` (finite, rounded with an unbounded exponent beyond the largest finite
  value: IEEE 754-2008 §7.4; the thresholds are the ones ``scan`` counts with),
  ``underflow`` (finite nonzero, result zero), ``subnormal`` (result is a nonzero subnormal),
  ``exact`` (result equals input), ``rounded`` (anything else).
* errors (cells whose input and result are finite): ``ulp`` = ``|q - x| / ulp(q)`` with the
  ULP of A at the rounded value ``q``; ``relative`` = ``|q - x| / |x|`` (0 where ``x == 0``).

Stochastic rounding draws fresh bits per window and per chunk (seeded from ``seed`` and the
position of the window's first cell, or of the chunk, in the tensor), so a window's cells and a
whole-tensor search may draw differently, while the same window draws the same wherever it is
read from (a reopened case's saved block included: ``make_window``'s ``offset``).
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from typing import Iterator, Sequence

import numpy as np

from ..errors import BitprismError, ParseError, UnsupportedInputError
from ..formats import Format, get_format
from ..numerics.codes import decode, encode_with
from ..numerics.inspect import CodeClass, fields, ulp
from ..numerics.options import CastOptions, child_seed
from ..numerics.thresholds import cast_thresholds
from .adapters import as_array

__all__ = [
    "CAST_KINDS",
    "CHUNK",
    "ERROR_UNITS",
    "FIND_KINDS",
    "INPUT_KINDS",
    "MAX_SIDE",
    "CastCells",
    "Placed",
    "Window",
    "as_tensor",
    "bits_of",
    "cast_cells",
    "compare_cells",
    "count_kinds",
    "find",
    "flat_index",
    "largest_error",
    "make_window",
    "parse_index",
    "read_flat",
    "values_of",
]

MAX_SIDE = 32  # a window is at most 32 x 32 cells
CHUNK = 1 << 18  # elements per chunk of a whole-tensor pass (aligned to multiples of CHUNK)
INPUT_KINDS = ("zero", "subnormal", "normal", "inf", "nan")
CAST_KINDS = ("exact", "rounded", "subnormal", "underflow", "overflow", "nan", "inf", "invalid")
FIND_KINDS = ("nan", "inf", "overflow", "underflow", "largest_error")
ERROR_UNITS = ("ulp", "relative")
_IN = {k: i for i, k in enumerate(INPUT_KINDS)}
_CAST = {k: i for i, k in enumerate(CAST_KINDS)}
_MAX_INDEX_TEXT = 200


# ----- the tensor -------------------------------------------------------------------------------


def as_tensor(data: object) -> np.ndarray:
    """``as_array(data)`` checked for a window: at least 1-D, not empty, real numbers."""
    arr = as_array(data)
    if arr.ndim == 0:
        raise BitprismError(
            f"got a 0-d value ({arr.dtype}); a tensor window needs at least one axis. "
            "For one value use Prism(value=...)"
        )
    if arr.size == 0:
        raise BitprismError(f"got an empty tensor of shape {tuple(arr.shape)}; nothing to show")
    dt = arr.dtype
    if dt.kind not in "fiub" and not _is_float_format(dt):
        raise UnsupportedInputError(f"cannot show data of dtype {dt}")
    return arr


def _is_float_format(dt: np.dtype) -> bool:
    try:
        get_format(dt)
    except BitprismError:
        return False
    return True


def values_of(a: np.ndarray) -> np.ndarray:
    """Exact float64 values of raw data (every supported dtype fits float64 exactly)."""
    with np.errstate(invalid="ignore"):  # signaling NaNs convert quietly
        return np.asarray(a).astype(np.float64)


def bits_of(a: np.ndarray) -> np.ndarray:
    """The raw bit patterns of the data, as unsigned integers of the same width."""
    a = np.ascontiguousarray(a)
    if a.dtype.kind == "b":
        return a.view(np.uint8)
    return a.view(np.dtype(f"uint{a.dtype.itemsize * 8}"))


def _input_format(dt: np.dtype) -> Format | None:
    if dt.kind in "iub":
        return None
    return get_format(dt)


def input_kinds(a: np.ndarray) -> np.ndarray:
    """``INPUT_KINDS`` index of every element (int8)."""
    fmt = _input_format(a.dtype)
    if fmt is None:  # integers and bools: no NaN to compare
        return np.where(a == 0, _IN["zero"], _IN["normal"]).astype(np.int8)
    k = np.asarray(fields(bits_of(a), fmt).kind)
    out = np.full(k.shape, _IN["normal"], np.int8)
    out[k == CodeClass.ZERO] = _IN["zero"]
    out[k == CodeClass.SUBNORMAL] = _IN["subnormal"]
    out[k == CodeClass.INFINITE] = _IN["inf"]
    out[k >= CodeClass.QUIET_NAN] = _IN["nan"]
    return out


@dataclass(frozen=True)
class Placed:
    """A block of a larger tensor and where it sits: ``array`` holds the elements from tensor
    index ``offset`` on, of a tensor of ``shape`` (same number of axes). A reopened case's
    saved window is one, so that its indices are the original tensor's."""

    array: np.ndarray
    offset: tuple[int, ...]
    shape: tuple[int, ...]

    def __post_init__(self) -> None:
        block = tuple(int(s) for s in np.shape(self.array))
        if not (len(block) == len(self.offset) == len(self.shape)):
            raise BitprismError(f"a placed block needs one offset and size per axis; got "
                                f"block {block}, offset {self.offset}, shape {self.shape}")
        for ax, (o, n, size) in enumerate(zip(self.offset, block, self.shape)):
            if o < 0 or o + n > size:
                raise BitprismError(f"a block of {n} from {o} does not fit axis {ax} of size "
                                    f"{size}")


# ----- one cast, cell by cell ----------------------------------------------------------------


@dataclass(frozen=True)
class CastCells:
    """What a cast to one format does to each cell of a window.

    Attributes:
        format: the target format.
        codes: bit patterns of the results (the format's code dtype).
        values: the results as float64 (exact).
        kinds: ``CAST_KINDS`` index per cell (int8).
        ulp_error, rel_error: error per cell; NaN where input or result is not finite.
    """

    format: Format
    codes: np.ndarray
    values: np.ndarray
    kinds: np.ndarray
    ulp_error: np.ndarray
    rel_error: np.ndarray

    def error(self, unit: str) -> np.ndarray:
        return self.ulp_error if unit == "ulp" else self.rel_error

    def kind_name(self, i: int, j: int) -> str:
        return CAST_KINDS[int(self.kinds[i, j])]


def _over_thresholds(fmt: Format, options: CastOptions) -> tuple[float, float, float, float]:
    """(overflow_from, nonzero_from) for positive then negative inputs: the magnitudes scan
    counts with (one definition of overflow and underflow for scan and window)."""
    pos = cast_thresholds(fmt, options, False)
    neg = cast_thresholds(fmt, options, True) if fmt.signed else pos
    return pos.overflow_from, pos.nonzero_from, neg.overflow_from, neg.nonzero_from


def _overflow_mask(x: np.ndarray, fmt: Format, options: CastOptions) -> np.ndarray:
    op, _, on, _ = _over_thresholds(fmt, options)
    ax = np.abs(x)
    with np.errstate(invalid="ignore"):
        return np.isfinite(x) & np.where(x < 0, ax >= on, ax >= op)


def _underflow_mask(x: np.ndarray, fmt: Format, options: CastOptions) -> np.ndarray:
    _, zp, _, zn = _over_thresholds(fmt, options)
    ax = np.abs(x)
    with np.errstate(invalid="ignore"):
        m = np.isfinite(x) & (x != 0) & np.where(x < 0, ax < zn, ax < zp)
    if not fmt.signed:
        with np.errstate(invalid="ignore"):  # NaN inputs compare False
            m &= ~(x < 0)
    return m


def cast_cells(raw: np.ndarray, fmt: Format, options: CastOptions, part: int | None = None) -> CastCells:
    """Cast raw data (any supported dtype) to ``fmt`` and classify every cell. ``part``: the
    position of this piece of the tensor, from which stochastic rounding derives its seed
    (``numerics.options.child_seed``); None draws from ``options.seed`` itself."""
    x = values_of(raw)
    rng = None
    if options.rounding == "stochastic":
        seed = options.seed if part is None else child_seed(options.seed, part)
        rng = np.random.default_rng(seed)
    codes = encode_with(raw, fmt, options, rng=rng)
    q = decode(codes, fmt)
    res_kind = np.asarray(fields(codes, fmt).kind)
    finite_in = np.isfinite(x)
    kinds = np.full(x.shape, _CAST["rounded"], np.int8)
    with np.errstate(invalid="ignore"):
        kinds[finite_in & (q == x)] = _CAST["exact"]
        kinds[finite_in & (res_kind == CodeClass.SUBNORMAL)] = _CAST["subnormal"]
        kinds[finite_in & (x != 0) & (q == 0)] = _CAST["underflow"]
    if options.rounding == "stochastic":
        with np.errstate(invalid="ignore"):  # NaN inputs compare False
            over = finite_in & (np.abs(x) > float(fmt.max_finite))
    else:
        over = _overflow_mask(x, fmt, options)
    kinds[over] = _CAST["overflow"]
    kinds[np.isinf(x)] = _CAST["inf"]
    kinds[np.isnan(x)] = _CAST["nan"]
    if not fmt.signed:
        with np.errstate(invalid="ignore"):
            kinds[(x < 0)] = _CAST["invalid"]
    compared = finite_in & np.isfinite(q) & (kinds != _CAST["invalid"])
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        err = np.where(compared, np.abs(q - x), np.nan)
        u = ulp(np.where(compared, q, 0.0), fmt)
        ulp_err = np.where(compared, err / u, np.nan)
        rel = np.where(compared, np.where(x == 0, 0.0, err / np.abs(x)), np.nan)
    return CastCells(fmt, codes, q, kinds, ulp_err, rel)


def compare_cells(x: np.ndarray, a: CastCells, b: CastCells) -> tuple[np.ndarray, np.ndarray]:
    """Which format lands closer to the input, per cell, and by how much.

    Returns ``(winner, ratio)``: winner is +1 where A's absolute error is smaller, -1 where B's
    is, 0 for equal errors, and -2 where either result is not comparable (non-finite); ratio is
    the larger error over the smaller (Inf when the smaller is 0, 1 for ties, NaN if not
    comparable).
    """
    # NaN and Inf cells are expected here (Inf - Inf and NaN compare as NaN, marked -2 below)
    with np.errstate(invalid="ignore", over="ignore"):
        ea = np.abs(a.values - x)
        eb = np.abs(b.values - x)
        ok = np.isfinite(ea) & np.isfinite(eb) & (a.kinds != _CAST["invalid"]) & (
            b.kinds != _CAST["invalid"])
        winner = np.where(ea < eb, 1, np.where(eb < ea, -1, 0)).astype(np.int8)
    winner[~ok] = -2
    with np.errstate(divide="ignore", invalid="ignore"):
        lo, hi = np.minimum(ea, eb), np.maximum(ea, eb)
        ratio = np.where(hi == 0, 1.0, np.where(lo == 0, np.inf, hi / lo))
    ratio = np.where(ok, ratio, np.nan)
    return winner, ratio


# ----- the window ----------------------------------------------------------------------------


@dataclass(frozen=True)
class Window:
    """A 2-D window of a tensor and what each listed format does to its cells.

    Attributes:
        shape: the tensor's shape.
        row_axis, col_axis: the tensor axes shown as rows and columns (``col_axis`` only for
            1-D data, which is shown as one row).
        fixed: the index of every axis (entries of the shown axes are ignored).
        row0, col0: index of the first row and column shown.
        (Indices are the tensor's own, also when the data read is a block of it placed at an
        offset, as a reopened case holds.)
        raw: the window's data, in the tensor's dtype (rows x cols; fewer at the edges).
        values: exact float64 values; ``bits``: raw bit patterns; ``kinds``: input classes.
        casts: one ``CastCells`` per format, in the order asked.
    """

    shape: tuple[int, ...]
    row_axis: int | None
    col_axis: int
    fixed: tuple[int, ...]
    row0: int
    col0: int
    raw: np.ndarray
    values: np.ndarray
    bits: np.ndarray
    kinds: np.ndarray
    casts: tuple[CastCells, ...]

    @property
    def dtype(self) -> np.dtype:
        return self.raw.dtype

    @property
    def rows(self) -> int:
        return int(self.raw.shape[0])

    @property
    def cols(self) -> int:
        return int(self.raw.shape[1])

    def index_of(self, i: int, j: int) -> tuple[int, ...]:
        """The tensor index of window cell (i, j)."""
        idx = list(self.fixed)
        if self.row_axis is not None:
            idx[self.row_axis] = self.row0 + i
        idx[self.col_axis] = self.col0 + j
        return tuple(int(v) for v in idx)

    def cell_of(self, index: Sequence[int]) -> tuple[int, int] | None:
        """The window cell (i, j) showing a tensor index, or None when it is not shown."""
        for ax, v in enumerate(index):
            if ax not in (self.row_axis, self.col_axis) and v != self.fixed[ax]:
                return None
        i = index[self.row_axis] - self.row0 if self.row_axis is not None else 0
        j = index[self.col_axis] - self.col0
        if 0 <= i < self.rows and 0 <= j < self.cols:
            return int(i), int(j)
        return None

    def cast(self, fmt: object) -> CastCells:
        f = get_format(fmt)  # type: ignore[arg-type]
        for c in self.casts:
            if c.format == f:
                return c
        raise BitprismError(f"format {f.name!r} is not cast in this window")


def check_axes(shape: Sequence[int], row_axis: int | None, col_axis: int) -> None:
    nd = len(shape)
    if nd == 1:
        if col_axis != 0:
            raise BitprismError(f"1-D data has one axis (0); got col_axis={col_axis!r}")
        return
    for name, ax in (("row_axis", row_axis), ("col_axis", col_axis)):
        if ax is None or not 0 <= ax < nd:
            raise BitprismError(f"{name} must be an axis in 0..{nd - 1}; got {ax!r}")
    if row_axis == col_axis:
        raise BitprismError(f"row and column axes must differ; both are {row_axis}")


def make_window(
    arr: np.ndarray,
    row_axis: int | None,
    col_axis: int,
    fixed: Sequence[int],
    row0: int,
    col0: int,
    rows: int,
    cols: int,
    formats: Sequence[object],
    options: CastOptions,
    offset: Sequence[int] | None = None,
    shape: Sequence[int] | None = None,
) -> Window:
    """Read the window (only its cells) and classify it for each format.

    ``arr`` may be a block of a larger tensor: ``offset`` is the tensor index of its first
    element and ``shape`` the whole tensor's (both default to ``arr`` itself). Every index
    given and kept (``fixed``, ``row0``, ``col0``) is the tensor's own; stochastic rounding
    draws from where the window sits in the tensor.
    """
    block = tuple(int(s) for s in arr.shape)
    off = tuple(int(v) for v in offset) if offset is not None else (0,) * len(block)
    full = tuple(int(s) for s in shape) if shape is not None else block
    if len(off) != len(block) or len(full) != len(block):
        raise BitprismError(f"offset and shape need one entry per axis ({len(block)})")
    check_axes(full, row_axis, col_axis)
    if not (1 <= rows <= MAX_SIDE and 1 <= cols <= MAX_SIDE):
        raise BitprismError(f"a window is 1..{MAX_SIDE} cells on a side; got {rows} x {cols}")
    fixed = tuple(int(v) for v in fixed)
    if len(fixed) != len(block):
        raise BitprismError(f"fixed needs one index per axis ({len(block)}); got {fixed!r}")
    key: list[int | slice] = []
    for ax, n in enumerate(block):
        lo = off[ax]
        if ax == col_axis:
            _check_in(col0, lo, n, f"column {col0}", ax, full[ax])
            key.append(slice(col0 - lo, min(col0 - lo + cols, n)))
        elif ax == row_axis:
            _check_in(row0, lo, n, f"row {row0}", ax, full[ax])
            key.append(slice(row0 - lo, min(row0 - lo + rows, n)))
        else:
            _check_in(fixed[ax], lo, n, f"index {fixed[ax]}", ax, full[ax])
            key.append(fixed[ax] - lo)
    win = np.asarray(arr[tuple(key)])
    if row_axis is None:
        win = win.reshape(1, -1)
        row0 = 0
    elif row_axis > col_axis:
        win = win.T
    raw = np.ascontiguousarray(win)
    origin = list(fixed)
    if row_axis is not None:
        origin[row_axis] = row0
    origin[col_axis] = col0
    part = flat_index(origin, full)  # stochastic draws depend on where the window sits
    casts = tuple(
        cast_cells(raw, get_format(f), options, part)  # type: ignore[arg-type]
        for f in formats
    )
    return Window(full, row_axis, col_axis, fixed, int(row0), int(col0), raw, values_of(raw),
                  bits_of(raw), input_kinds(raw), casts)


def _check_in(i: int, lo: int, n: int, what: str, ax: int, size: int) -> None:
    """``i`` within the ``n`` indices from ``lo`` of an axis of ``size`` (the data held)."""
    if lo <= i < lo + n:
        return
    if lo == 0 and n == size:
        raise BitprismError(f"{what} is out of range for axis {ax} of size {size}")
    raise BitprismError(f"{what} is outside the indices {lo}..{lo + n - 1} held of axis {ax} "
                        f"(size {size})")


# ----- whole-tensor passes, chunk by chunk -----------------------------------------------------


def read_flat(arr: np.ndarray, start: int, stop: int) -> np.ndarray:
    """Elements ``start:stop`` of the tensor in C order, reading only those (plus at most one
    contiguous run per axis) even when the array is a strided view."""
    if arr.ndim <= 1 or arr.flags.c_contiguous:
        return np.asarray(arr.reshape(-1)[start:stop])
    inner = arr.size // arr.shape[0]
    i0, i1 = start // inner, (stop - 1) // inner
    if i0 == i1:
        return read_flat(arr[i0], start - i0 * inner, stop - i0 * inner)
    parts = [read_flat(arr[i0], start - i0 * inner, inner)]
    if i1 > i0 + 1:
        parts.append(np.ascontiguousarray(arr[i0 + 1 : i1]).reshape(-1))
    parts.append(read_flat(arr[i1], 0, stop - i1 * inner))
    return np.concatenate(parts)


def flat_index(index: Sequence[int], shape: Sequence[int]) -> int:
    return int(np.ravel_multi_index(tuple(int(i) for i in index), tuple(shape)))


def _kind_mask(kind: str, raw: np.ndarray, fmt: Format | None, options: CastOptions,
               unit: str, target: float | None, chunk: int) -> np.ndarray:
    if raw.dtype.kind in "iub":
        if kind in ("nan", "inf"):
            return np.zeros(raw.shape, bool)
    if kind == "nan":
        return np.isnan(values_of(raw)) if raw.dtype != np.float64 else np.isnan(raw)
    if kind == "inf":
        return np.isinf(values_of(raw)) if raw.dtype != np.float64 else np.isinf(raw)
    assert fmt is not None
    if kind == "overflow" and options.rounding != "stochastic":
        return _overflow_mask(values_of(raw), fmt, options)
    if kind == "underflow" and options.rounding != "stochastic":
        return _underflow_mask(values_of(raw), fmt, options)
    c = cast_cells(raw, fmt, options, chunk)
    if kind == "overflow":
        return c.kinds == _CAST["overflow"]
    if kind == "underflow":
        return c.kinds == _CAST["underflow"]
    err = c.error(unit)
    with np.errstate(invalid="ignore"):
        return err == target


def _chunks(n: int, first: int, last: int, reverse: bool) -> Iterator[tuple[int, int, int]]:
    """(chunk number, start, stop) of the CHUNK-aligned pieces covering ``first:last``."""
    if last <= first:
        return
    ids = range(first // CHUNK, (last - 1) // CHUNK + 1)
    for c in reversed(ids) if reverse else ids:
        yield c, max(first, c * CHUNK), min(last, (c + 1) * CHUNK, n)


def _check_kind(kind: str, fmt: object, unit: str) -> Format | None:
    if kind not in FIND_KINDS:
        raise BitprismError(f"kind must be one of {', '.join(FIND_KINDS)}; got {kind!r}")
    if unit not in ERROR_UNITS:
        raise BitprismError(f"unit must be one of {', '.join(ERROR_UNITS)}; got {unit!r}")
    if kind in ("nan", "inf"):
        return None
    if fmt is None:
        raise BitprismError(f"finding {kind!r} cells needs a format")
    return get_format(fmt)  # type: ignore[arg-type]


def count_kinds(arr: np.ndarray, fmt: object, options: CastOptions,
                kinds: Sequence[str] = ("nan", "inf", "overflow", "underflow")) -> dict[str, int]:
    """How many elements of the whole tensor are of each kind (one chunked pass)."""
    f = _check_kind("nan", fmt, "ulp") if fmt is None else get_format(fmt)  # type: ignore[arg-type]
    counts = {k: 0 for k in kinds}
    n = arr.size
    for c, s, e in _chunks(n, 0, n, False):
        raw = read_flat(arr, s, e)
        for k in kinds:
            if k == "largest_error":
                raise BitprismError("count largest_error cells with largest_error()")
            counts[k] += int(np.count_nonzero(_kind_mask(k, raw, f, options, "ulp", None, c)))
    return counts


def largest_error(arr: np.ndarray, fmt: object, options: CastOptions,
                  unit: str = "ulp") -> tuple[float | None, int]:
    """(largest error over the whole tensor in ``unit``, how many elements have it);
    ``(None, 0)`` when no element has a finite input and result."""
    f = get_format(fmt)  # type: ignore[arg-type]
    _check_kind("largest_error", f, unit)
    best: float | None = None
    count = 0
    n = arr.size
    for c, s, e in _chunks(n, 0, n, False):
        err = cast_cells(read_flat(arr, s, e), f, options, c).error(unit)
        if not np.isfinite(err).any():
            continue
        m = float(np.nanmax(err))
        with np.errstate(invalid="ignore"):  # err is NaN where there is no finite result
            hits = int(np.count_nonzero(err == m))
        if best is None or m > best:
            best, count = m, hits
        elif m == best:
            count += hits
    return best, count


def find(
    arr: np.ndarray,
    kind: str,
    fmt: object = None,
    options: CastOptions | None = None,
    after: int = -1,
    backward: bool = False,
    unit: str = "ulp",
    target: float | None = None,
) -> tuple[int, bool] | None:
    """The flat index (C order) of the next element of a kind after flat index ``after``
    (before it when ``backward``), wrapping around the end; with whether it wrapped.

    ``largest_error`` looks for elements whose error equals ``target`` (from
    ``largest_error``). Reads one chunk at a time and stops at the first hit.
    """
    options = options or CastOptions()
    f = _check_kind(kind, fmt, unit)
    if kind == "largest_error" and target is None:
        raise BitprismError("finding largest_error cells needs the target error")
    n = arr.size
    after = min(max(after, -1), n)
    if backward:
        legs = ((0, max(after, 0), False), (max(after, 0), n, True))
    else:
        legs = ((after + 1, n, False), (0, after + 1, True))
    for first, last, wrapped in legs:
        for c, s, e in _chunks(n, first, last, backward):
            raw = read_flat(arr, c * CHUNK, min((c + 1) * CHUNK, n))
            mask = _kind_mask(kind, raw, f, options, unit, target, c)
            hits = np.flatnonzero(mask[s - c * CHUNK : e - c * CHUNK])
            if hits.size:
                return s + int(hits[-1] if backward else hits[0]), wrapped
    return None


# ----- index text --------------------------------------------------------------------------------

_INT_RE = re.compile(r"\s*([+-]?\d+)\s*")


def parse_index(text: str, shape: Sequence[int], shown: tuple[int | None, int] | None = None,
                fixed: Sequence[int] | None = None) -> tuple[int, ...]:
    """Numpy-style coordinates typed by a person: ``3, 17``, ``[0, 3, 17]``, ``(2,)``.

    A full index has one integer per axis; with ``shown=(row_axis, col_axis)`` and ``fixed``,
    two integers address the shown axes and keep the other indices. Negative indices count
    from the end. Never evaluated: integers and separators only.
    """
    if not isinstance(text, str):
        raise BitprismError(f"an index is typed as text like '3, 17'; got {text!r}")
    if len(text) > _MAX_INDEX_TEXT:
        raise BitprismError(f"index text is {len(text)} characters; at most {_MAX_INDEX_TEXT}")
    body = text.strip()
    offset = len(text) - len(text.lstrip())
    if body[:1] in "[(" and body:
        close = "]" if body[0] == "[" else ")"
        if not body.endswith(close):
            raise ParseError(f"expected {close!r} at the end", text, offset + len(body) + 1)
        body = body[1:-1]
        offset += 1
    parts: list[int] = []
    pos = 0
    pieces = body.split(",")
    for n_piece, piece in enumerate(pieces):
        if not piece.strip():
            if n_piece == len(pieces) - 1 and n_piece > 0:  # trailing comma, as in (2,)
                break
            raise ParseError("expected an integer", text, offset + pos + 1)
        m = _INT_RE.fullmatch(piece)
        if m is None:
            bad = next(i for i, ch in enumerate(piece) if not (ch.isdigit() or ch in " +-"))
            raise ParseError(f"unexpected {piece[bad]!r}; an index is integers separated "
                             "by commas", text, offset + pos + bad + 1)
        parts.append(int(m.group(1)))
        pos += len(piece) + 1
    nd = len(shape)
    if len(parts) != nd:
        if len(parts) == 2 and shown is not None and fixed is not None and nd > 2:
            full = list(fixed)
            full[shown[0]] = parts[0]  # type: ignore[index]
            full[shown[1]] = parts[1]
            parts = full
        elif len(parts) == 1 and nd == 1:
            pass
        else:
            hint = " (or two for the shown axes)" if nd > 2 else ""
            raise BitprismError(
                f"the tensor has {nd} axes {tuple(shape)}; the index {text.strip()!r} gives "
                f"{len(parts)} numbers; type {nd}{hint}")
    out = []
    for ax, (v, size) in enumerate(zip(parts, shape)):
        if not -size <= v < size:
            raise BitprismError(f"index {v} is out of range for axis {ax} with size {size}")
        out.append(v + size if v < 0 else v)
    return tuple(out)


def finite_or_none(v: float | None) -> float | None:
    return v if v is not None and math.isfinite(v) else None
