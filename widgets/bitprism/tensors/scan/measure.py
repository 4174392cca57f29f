"""Cast codes and error measures of one piece: the middle steps of a block scan.

* ``ErrorInputs``: the piece as the errors are measured against it: ``|x|``, the divisor of
  the relative error (1 where x is 0 or not finite), x with NaN where not finite (so the error
  of every left-out element is NaN) and x with 0 there (for sums of squares).
* ``cast_codes``: the codes of a plain format: one gather from the numerics kernel's table for
  float32 data into formats of up to 8 bits (the index shared by every such format), the
  compiled float16/bfloat16 casts with the default options, else ``encode``.
* ``measure``: ``err = |q - x|``, ``rel = err / |x|``, the left-out elements (non-finite input
  or result) and, with the compiled loops, counts and maxima in the same passes. Formats of up
  to 16 bits read values and ``1/ulp`` from per-code tables; wider ones decode.

The compiled loops (``compiled.error_kernels``) and the numpy operations here give the same
numbers: each is the same IEEE operation on the same operands; tests hold them equal.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache
import numpy as np

from ...errors import BitprismError
from ...formats import Format
from ...numerics.codes import decode, encode_with, value_table
from ...numerics.inspect import ulp
from ...numerics.kernel import table_codes, table_eligible, table_index
from ...numerics.options import child_seed
from .compiled import error_kernels, fast_casts
from .pieces import Piece, PieceClasses, Scratch
from .plan import Entry, Locator, ScanPlan

__all__ = [
    "ErrorInputs",
    "block_ids",
    "Measurement",
    "cast_codes",
    "hook_values",
    "inv_ulp_table",
    "measure",
    "measure_tables",
    "nan_value_table",
    "ulp_errors",
    "uses_table",
]


@lru_cache(maxsize=64)
def inv_ulp_table(fmt: Format) -> np.ndarray:
    """1/ulp(value) per code (a power of two, so the product is exact); 0 for NaN and Inf."""
    with np.errstate(invalid="ignore", divide="ignore"):
        u = ulp(value_table(fmt), fmt)
        inv = np.where(np.isfinite(u), 1.0 / u, 0.0)
    inv.setflags(write=False)
    return inv


@lru_cache(maxsize=64)
def nan_value_table(fmt: Format) -> np.ndarray:
    """``value_table`` with NaN in place of ±Inf: a cast's error ``|q - x|`` is then NaN exactly
    where it is left out (non-finite result or input), and one ``fmax`` clears them all."""
    with np.errstate(invalid="ignore"):
        t = value_table(fmt) * np.float64(1.0)
        t[np.isinf(t)] = np.nan
    t.setflags(write=False)
    return t


@lru_cache(maxsize=64)
def measure_tables(fmt: Format) -> tuple[np.ndarray, np.ndarray, int, int]:
    """Compact tables for ``error_kernels.measure_codes``: (values, 1/ulp, mask, shift). A
    16-bit format's float64 tables take 1 MiB, and random lookups there miss the cache: the
    values fit float32 exactly, and 1/ulp depends on the exponent field alone. Each compact
    table is checked against the full one here, entry by entry, and the full one is kept when
    they differ anywhere it matters (finite values)."""
    values, inv = nan_value_table(fmt), inv_ulp_table(fmt)
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


def uses_table(entry: Entry, plan: ScanPlan) -> bool:
    """Whether the scan casts float32 data into this plain format by one gather from the
    kernel's table (formats of up to 8 bits), else through ``encode`` or the compiled casts.
    (numpy's own float32 -> float16 conversion was tried: it is exact but much slower than the
    kernel on data that overflows or underflows, so float16 stays on the kernel.)"""
    fmt = entry.fmt
    if fmt is None or not plan.carrier32 or plan.scale is not None:
        return False
    return table_eligible(fmt, np.dtype(np.float32), plan.options)


class ErrorInputs:
    """The piece as errors are measured against it (see the module docstring)."""

    def __init__(self, p: Piece, classes: PieceClasses, scratch: Scratch, table: bool) -> None:
        assert p.x64 is not None  # set by read_piece whenever errors are measured
        k = p.k
        f = scratch.f
        self.nonfinite = classes.nonfinite
        self.ax = np.abs(p.x64, out=f["ax"][:k])
        self.den = self.ax
        self.xe = p.x64  # NaN where not finite
        self.x0 = p.x64  # 0 where not finite
        if classes.zero or self.nonfinite:
            self.den = f["den"][:k]
            np.copyto(self.den, self.ax)
            self.den[~((self.ax > 0) & (self.ax < np.inf))] = 1.0
        if self.nonfinite:
            src = p.source
            where_nf = np.flatnonzero(p.a >= src.uint(src.inf_bits))
            self.xe = f["xe"][:k]
            np.copyto(self.xe, p.x64)
            self.xe[where_nf] = np.nan  # so every left-out element's error is NaN
            self.x0 = f["x0"][:k]
            np.copyto(self.x0, p.x64)
            self.x0[where_nf] = 0.0
        self.table_index = (
            table_index(p.bits, scratch.table_index[:k], scratch.table_low[:k]) if table else None
        )
        self._x2: float | None = None

    def sum_x2(self) -> float:
        """Sum of squares of the finite inputs (shared by every entry that leaves out only
        the non-finite inputs); squares summed with einsum, not BLAS dot: the same result on
        every machine."""
        if self._x2 is None:
            self._x2 = float(np.einsum("i,i->", self.x0, self.x0))
        return self._x2


def block_ids(idx: np.ndarray, seg: int, bs: int) -> np.ndarray:
    """Block number of each position of a piece made of rows of ``seg`` elements, each row
    cut into blocks of ``bs`` from its start (the last one may be short)."""
    per_row = -(-seg // bs)
    return (idx // seg) * per_row + (idx % seg) // bs


def hook_values(entry: Entry, x64: np.ndarray, seg: int) -> np.ndarray:
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


def cast_codes(
    entry: Entry, p: Piece, errs: ErrorInputs, plan: ScanPlan, scratch: Scratch, loc: Locator
) -> np.ndarray:
    """The codes of a plain format for one piece (see the module docstring)."""
    fmt = entry.fmt
    assert fmt is not None
    out = scratch.codes[fmt.code_dtype][: p.k]
    if errs.table_index is not None and uses_table(entry, plan):
        return np.take(table_codes(fmt, plan.options), errs.table_index, out=out)
    if (
        not p.wide
        and plan.scale is None
        and plan.tuning.uses_compiled
        and fast_casts.eligible(fmt, plan.options)
    ):
        # float16 / bfloat16 with the default options: compiled, same codes
        return fast_casts.cast16(np.ascontiguousarray(p.carrier), fmt, out)
    src = p.x64 if plan.scale is not None or p.wide else p.xs
    rng = None
    if plan.options.rounding == "stochastic":
        rng = np.random.default_rng(child_seed(plan.options.seed, loc.position(p.at)))
    with np.errstate(invalid="ignore", over="ignore"):  # NaN/Inf inputs are expected
        return np.asarray(encode_with(src, fmt, plan.options, rng=rng))


@dataclass
class Measurement:
    """The errors of one piece for one entry.

    ``err``/``rel``: absolute and relative errors, 0 where left out; ``bad``: how many are
    left out; ``bad_at``: their positions when known that way (else ``nan_flags`` marks them);
    ``compiled``: the counts and maxima of the compiled loops (None on the numpy path);
    ``q``: the values (None when the compiled loops read them from tables); ``codes``: a plain
    format's codes."""

    err: np.ndarray
    rel: np.ndarray
    bad: int
    bad_at: np.ndarray | None
    nan_flags: np.ndarray
    compiled: error_kernels.CodeErrors | None
    q: np.ndarray | None
    codes: np.ndarray | None


def measure(
    entry: Entry,
    codes: np.ndarray | None,
    q: np.ndarray | None,
    p: Piece,
    errs: ErrorInputs,
    plan: ScanPlan,
    scratch: Scratch,
) -> Measurement:
    """Errors of one entry on one piece: from a plain format's ``codes`` or a block format's
    values ``q`` (see the module docstring)."""
    k = p.k
    f = scratch.f
    err, rel = f["err"][:k], f["rel"][:k]
    nan_flags = scratch.nan[:k]
    fmt = entry.fmt
    nan_table = False  # q is NaN (never Inf) wherever the error is left out
    compiled: error_kernels.CodeErrors | None = None
    if codes is not None:
        assert fmt is not None
        if fmt.bits <= 16 and plan.tuning.uses_compiled:
            compiled = error_kernels.measure_codes(
                codes, errs.xe, errs.den, *measure_tables(fmt), fmt.magnitude_mask,
                (1 << fmt.t) - 1 if fmt.has_subnormals else 0, err, rel, f["u"][:k], nan_flags,
            )
            nan_table = True
        elif fmt.bits <= 16:
            ci = scratch.code_index[:k]
            np.copyto(ci, codes, casting="unsafe")  # one conversion for every lookup
            q = np.take(nan_value_table(fmt), ci, out=f["q"][:k], mode="wrap")
            nan_table = True
        else:
            q = decode(codes, fmt)
    if compiled is None:
        assert q is not None
        with np.errstate(invalid="ignore"):  # NaN - NaN where the input is not finite
            np.subtract(q, errs.xe, out=err)
        np.abs(err, out=err)
    bad_at = None
    if compiled is not None:
        bad = compiled.bad  # left out: 0 in err and rel, flagged in nan_flags
    elif k == 0:
        bad = 0
    elif nan_table and not plan.collecting:
        np.not_equal(err, err, out=nan_flags)
        bad = int(np.count_nonzero(nan_flags))
        if bad:
            np.fmax(err, 0.0, out=err)  # NaN -> 0: left out of every sum
    else:
        top = err.max()
        if math.isfinite(top):
            bad = 0
        else:
            bad_at = np.flatnonzero(~np.isfinite(err))
            err[bad_at] = 0.0
            bad = bad_at.size
    if compiled is None:
        np.divide(err, errs.den, out=rel)
    return Measurement(err, rel, bad, bad_at, nan_flags, compiled, q, codes)


def ulp_errors(m: Measurement, fmt: Format, scratch: Scratch, k: int) -> np.ndarray:
    """Errors in ULPs of the format at the rounded value (0 where left out)."""
    if m.compiled is not None:
        return scratch.f["u"][:k]
    if fmt.bits <= 16:
        ue = np.take(inv_ulp_table(fmt), scratch.code_index[:k], out=scratch.f["sq"][:k], mode="wrap")
        return np.multiply(ue, m.err, out=ue)
    assert m.q is not None
    with np.errstate(invalid="ignore"):
        uq = ulp(m.q, fmt)
        return np.where(np.isfinite(uq), m.err / uq, 0.0)

