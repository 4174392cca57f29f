"""encode / decode / cast: real values <-> bit patterns of any format, scalar or vectorized.

Scalars (Python int, float, Fraction, Decimal, ``parse`` results, and text, which ``parse``
reads exactly) take the exact integer path and return a Python int; arrays (numpy scalars
included) take the chunked numpy kernel and return an array of the format's code dtype with the
input's shape. Both paths round once, from the exact input, and keep a NaN's sign and payload
the same way; a value already in the target format keeps its bits (a copy, not a conversion).
"""

from __future__ import annotations

import struct
from functools import lru_cache
from typing import Any, Callable

import numpy as np

from ..errors import BitprismError, UnsupportedInputError
from ..formats import Format, FormatLike, format_of_dtype, get_format
from .exact import as_exact
from .kernel import CHUNK, SOURCE32, encode_bits, encode_table, source_for, table_eligible
from .options import CastOptions, Overflow, Rounding, Subnormals, resolve_options
from .scalar import decode_exact, encode_exact

__all__ = [
    "cast",
    "check_codes",
    "decode",
    "encode",
    "encode_with",
    "is_scalar_input",
    "native_code",
    "to_float_array",
    "value_table",
]

# Inputs are converted to float32/float64 in blocks of this many elements, so memory stays
# bounded whatever the input dtype.
_BLOCK = CHUNK * 16
_MAX_EXACT_INT = 1 << 53


def is_scalar_input(x: Any) -> bool:
    """True for the values that take the exact scalar path (text included: ``parse`` reads it)."""
    if isinstance(x, str):
        return True
    return not isinstance(x, (np.ndarray, list, tuple)) and not hasattr(x, "__array_interface__")


def native_code(x: Any, fmt: Format) -> int | None:
    """The bits of ``x`` when it already is a value of ``fmt`` as stored (a numpy or ml_dtypes
    scalar of that dtype, or a Python float for float64), else None. Putting a value into its
    own format is a copy, which keeps a signaling NaN as it is (IEEE 754-2019 §5.5.1), as the
    array path does; a conversion quiets it (§6.2.3)."""
    if isinstance(x, float) and not isinstance(x, np.generic):
        if fmt.is_dtype(np.dtype(np.float64)):
            return int(struct.unpack("<Q", struct.pack("<d", x))[0])
        return None
    if isinstance(x, np.generic) and fmt.is_dtype(x.dtype):
        raw = np.asarray(x).reshape(1).view(np.dtype(f"u{x.dtype.itemsize}"))
        return int(raw[0]) & ((1 << fmt.bits) - 1)
    return None


def _float_dtype_of(arr: np.ndarray) -> np.dtype:
    """The float dtype the kernel reads for ``arr`` (float32 or float64), or raise."""
    dt = arr.dtype
    if dt == np.float32 or dt == np.float64:
        return dt
    if dt.kind == "f" and dt.itemsize <= 4 or (dt.kind == "V" and format_of_dtype(dt) is not None):
        return np.dtype(np.float32)  # float16 and every ml_dtypes float fit float32 exactly
    if dt.kind in "iub":
        return np.dtype(np.float64)
    if dt.kind in "US":
        raise UnsupportedInputError(
            f"arrays of text ({dt}) are not read: a str is one value, read exactly by parse(); "
            "pass one string at a time, or numbers as a float/int numpy array"
        )
    if dt.kind == "f":
        raise UnsupportedInputError(
            f"{dt} arrays are not supported (platform-dependent extended precision); "
            "convert to float64 first"
        )
    raise UnsupportedInputError(
        f"cannot cast {dt} data: expected real numbers (float, ml_dtypes float, int or bool "
        f"arrays); got {dt}"
    )


def _check_int_range(arr: np.ndarray) -> None:
    if arr.dtype.kind in "iu" and arr.dtype.itemsize >= 8 and arr.size:
        lo, hi = int(arr.min()), int(arr.max())
        if hi > _MAX_EXACT_INT or lo < -_MAX_EXACT_INT:
            bad = int(np.flatnonzero((arr > _MAX_EXACT_INT) | (arr < -_MAX_EXACT_INT))[0])
            raise BitprismError(
                f"integer {arr.reshape(-1)[bad]!r} at flat index {bad} is beyond 2**53, where the "
                "array path cannot hold integers exactly; pass it as a Python int (scalar path) "
                "or as float64 if rounding it first is intended"
            )


def to_float_array(x: Any) -> np.ndarray:
    """The input as a numpy array the kernel can read (no copy when it already is one)."""
    arr = x if isinstance(x, np.ndarray) else np.asarray(x)
    if arr.dtype == object:
        raise UnsupportedInputError(
            "object arrays are not supported: pass numbers as a float/int numpy array, "
            "or one Python number at a time for the exact scalar path"
        )
    _float_dtype_of(arr)
    _check_int_range(arr)
    return arr


def encode(
    x: Any,
    fmt: FormatLike,
    rounding: Rounding | None = None,
    overflow: Overflow | None = None,
    subnormals: Subnormals | None = None,
    seed: int | None = None,
    *,
    options: CastOptions | None = None,
    progress: Callable[[int], None] | None = None,
) -> Any:
    """Correctly rounded cast of real values ``x`` into the bit patterns of ``fmt``.

    Arrays of any float dtype (ml_dtypes included), int or bool give an array of codes with
    the same shape (dtype ``fmt.code_dtype``); a scalar gives a Python int. The cast options
    are ``options`` with the keyword shorthands replacing its fields (defaults:
    roundTiesToEven, overflow "standard", subnormals "keep", no seed).
    """
    return encode_with(x, get_format(fmt), resolve_options(options, rounding, overflow, subnormals, seed), progress)


def encode_with(
    x: Any,
    fmt: Format,
    options: CastOptions,
    progress: Callable[[int], None] | None = None,
    rng: np.random.Generator | None = None,
) -> Any:
    """``encode`` with a resolved format and options (what the layers above call). ``rng``:
    the generator stochastic rounding draws from (default: one seeded with ``options.seed``),
    for callers that cast a tensor piece by piece with a seed per piece."""
    if is_scalar_input(x):
        native = native_code(x, fmt)
        if native is not None and options.overflow == "standard" and options.subnormals == "keep":
            return native  # already in this format: the code is the bits (a NaN's included)
        if rng is None and options.rounding == "stochastic":
            rng = np.random.default_rng(options.seed)
        return encode_exact(as_exact(x), fmt, options, rng)
    arr = to_float_array(x)
    return _encode_array(arr, fmt, options, progress, rng)


def _encode_array(
    arr: np.ndarray,
    fmt: Format,
    options: CastOptions,
    progress: Callable[[int], None] | None = None,
    rng: np.random.Generator | None = None,
) -> np.ndarray:
    out = np.empty(arr.shape, fmt.code_dtype)
    flat_in = arr.reshape(-1)
    flat_out = out.reshape(-1)
    carrier = _float_dtype_of(arr)
    src = source_for(fmt, carrier)
    kernel_dtype = np.dtype(np.float32) if src is SOURCE32 else np.dtype(np.float64)
    if options.rounding == "stochastic" and rng is None:
        rng = np.random.default_rng(options.seed)
    unchanged = options.overflow == "standard" and options.subnormals == "keep"
    if unchanged and fmt.is_dtype(arr.dtype):
        np.copyto(flat_out, flat_in.view(fmt.code_dtype))
        return out  # already in this format: the codes are the bits
    if table_eligible(fmt, carrier, options):
        for start in range(0, flat_in.size, _BLOCK):
            block = flat_in[start : start + _BLOCK]
            if block.dtype != np.float32:
                with np.errstate(invalid="ignore"):  # signaling NaNs convert quietly
                    block = block.astype(np.float32)
            encode_table(block.view(np.uint32), fmt, options, flat_out[start : start + _BLOCK], progress)
        return out
    if arr.dtype == kernel_dtype:
        bits: np.ndarray = flat_in.view(src.uint)
        encode_bits(bits, src, fmt, options, flat_out, rng, progress)
        return out
    for start in range(0, flat_in.size, _BLOCK):
        with np.errstate(invalid="ignore"):  # signaling NaNs convert quietly
            block = flat_in[start : start + _BLOCK].astype(kernel_dtype)
        encode_bits(block.view(src.uint), src, fmt, options, flat_out[start : start + _BLOCK], rng, progress)
    return out


@lru_cache(maxsize=64)
def value_table(fmt: Format) -> np.ndarray:
    """float64 value of every code of a format of at most 16 bits (read-only)."""
    if fmt.bits > 16:
        raise BitprismError(f"value_table is for formats of at most 16 bits; {fmt.name} has {fmt.bits}")
    table = _decode_arith(np.arange(1 << fmt.bits, dtype=np.uint64), fmt)
    table.setflags(write=False)
    return table


def _decode_arith(codes: np.ndarray, fmt: Format) -> np.ndarray:
    """Decode by field arithmetic (every value is exact in float64 by the Format invariants)."""
    c = codes.astype(np.uint64, copy=False)
    t = fmt.significand_bits
    e = (c >> np.uint64(t)) & np.uint64(fmt.exponent_field_max)
    frac = (c & np.uint64(fmt.significand_mask)).astype(np.float64)
    if fmt.has_zero:
        sub = e == 0
        mant = np.where(sub, frac, frac + float(1 << t))
        exp = np.where(sub, fmt.emin - t, e.astype(np.int64) - fmt.bias - t)
    else:
        mant = frac + float(1 << t)
        exp = e.astype(np.int64) - fmt.bias - t
    val = np.ldexp(mant, exp.astype(np.int32))
    if fmt.signed:
        neg = (c & np.uint64(fmt.sign_mask)) != 0
        val = np.where(neg, -val, val)
    mag = c & np.uint64(fmt.magnitude_mask)
    if fmt.specials == "ieee":
        top = e == fmt.exponent_field_max
        val = np.where(top & (mag & np.uint64(fmt.significand_mask) == 0), np.copysign(np.inf, val), val)
        nan = top & ((mag & np.uint64(fmt.significand_mask)) != 0)
        val = np.where(nan, np.copysign(np.nan, val), val)
    elif fmt.specials == "fn":
        val = np.where(mag == fmt.magnitude_mask, np.copysign(np.nan, val), val)
    elif fmt.specials == "fnuz":
        val = np.where(c == fmt.sign_mask, np.nan, val)
    return val


def check_codes(codes: Any, fmt: Format) -> np.ndarray:
    arr = np.asarray(codes)
    if arr.dtype.kind not in "iu":
        raise BitprismError(
            f"codes must be integers (bit patterns of {fmt.name}); got dtype {arr.dtype}. "
            "To cast values, use encode()"
        )
    if arr.size:
        lo, hi = int(arr.min()), int(arr.max())
        if lo < 0 or hi >= 1 << fmt.bits:
            bad = lo if lo < 0 else hi
            raise BitprismError(
                f"code {bad!r} is outside 0..{(1 << fmt.bits) - 1:#x}, the {fmt.bits}-bit codes "
                f"of {fmt.name}"
            )
    return arr


def decode(codes: Any, fmt: FormatLike) -> Any:
    """Bit patterns -> values as float64 (exact for every format but float64, which is itself).

    A Python int gives a Python float; arrays give float64 arrays of the same shape.
    """
    f = get_format(fmt)
    if is_scalar_input(codes):
        if isinstance(codes, (bool, np.bool_)) or not isinstance(codes, (int, np.integer)):
            raise BitprismError(f"a code must be an integer bit pattern of {f.name}, got {codes!r}")
        return float(decode_exact(int(codes), f))
    arr = check_codes(codes, f)
    if f.bits <= 16:
        return value_table(f)[arr.astype(np.intp, copy=False)]
    if f.bits == 64 and f.significand_bits == 52 and f.emin == -1022 and f.specials == "ieee":
        return arr.astype(np.uint64).view(np.float64).copy()
    if f.bits == 32 and f.significand_bits == 23 and f.emin == -126 and f.specials == "ieee":
        return arr.astype(np.uint32).view(np.float32).astype(np.float64)
    return _decode_arith(arr, f)


def cast(
    x: Any,
    fmt: FormatLike,
    rounding: Rounding | None = None,
    overflow: Overflow | None = None,
    subnormals: Subnormals | None = None,
    seed: int | None = None,
    *,
    options: CastOptions | None = None,
) -> Any:
    """``decode(encode(x, ...))``: the value ``x`` takes in ``fmt``, as float64."""
    f = get_format(fmt)
    return decode(encode_with(x, f, resolve_options(options, rounding, overflow, subnormals, seed)), f)
