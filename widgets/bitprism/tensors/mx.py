"""OCP Microscaling (MX) v1.0 block formats: a shared power-of-two scale per block of elements.

``mx_quantize(data, "mxfp4")`` cuts ``data`` into blocks of ``block_size`` (32 in every MX
v1.0 concrete format, MX Table 1) along one axis and converts each block as MX v1.0 §6.3 says:

1. shared exponent ``s = floor(log2(max_i |V_i|)) - emax_elem``, where ``emax_elem`` is the
   exponent of the largest power of two of the element format (E4M3 8, E5M2 15, E2M3 2,
   E3M2 4, E2M1 2, INT8 0); the scale is ``X = 2^s``, stored as an E8M0 code ``s + 127``;
2. ``P_i = V_i / X`` (exact: a division by a power of two), clamped to ±(largest normal of the
   element format) and then rounded once into the element format (roundTiesToEven by default,
   through :func:`bitprism.encode`). The clamp comes first on purpose: a plain cast of the
   unclamped ratio gives NaN (E4M3) or Inf (E5M2) at and beyond the rounding threshold
   (464, 61440), while the spec keeps the largest normal. Clamping before or after rounding
   gives the same value for every rounding direction, since ±max is itself representable.

Choices this module makes where the spec text (not reachable here, see the notes below) is
silent or was not verified:

* **E8M0 range.** ``s < -127`` is raised to ``-127`` (code 0x00; the elements then lose their
  low bits or flush toward 0); ``s > 127`` (possible only from float64 input) gives the NaN
  scale 0xFF. This is what the reference emulation library (microsoft/microxcaling) does.
* **All-zero block.** ``log2(0)`` is undefined; such a block gets the smallest scale, code 0x00
  (2^-127), and every element is a zero that keeps its input's sign. Any scale would do, the
  smallest is what the reference emulation arrives at through its tiny stand-in for log2(0).
* **NaN or Inf inside a block.** The block's scale is the NaN code 0xFF and every element
  dequantizes to NaN, whatever its own code; the element codes of such a block are all +0.
  The rule "if X is NaN, every element of the block is NaN" is in MX v1.0 as remembered, not
  re-checked against the text ("from memory"); treating Inf like NaN is our choice: an FP6/FP4
  element cannot hold Inf, and a scale cannot either (E8M0 has no Inf).
* **Inputs in float32's subnormal range** are kept, not flushed (flushing is permitted, not
  required, as read in Rouhani et al. 2023).
* **MXINT8.** Elements are 8-bit two's complement with an implicit scale 2^-6 (value =
  int8/64), clamped to the symmetric range ±127/64; code 0x80 is never produced. Whether the
  spec admits 0x80 (= -2.0) is **unverified**; decoding reads 0x80 as -2.0 (two's complement).
* **A short last block.** When the axis length is not a multiple of ``block_size``, the last
  block is shorter and is converted on its own elements (as if padded with zeros, which change
  neither its maximum nor its other elements); ``MXResult.short_last_block`` gives its length.

Everything is vectorized: the data is moved so the blocked axis is last, padded with zeros to
a whole number of blocks, reshaped to ``(..., blocks, block_size)`` and reduced per block.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Mapping

import numpy as np

from ..display import Displayable
from ..errors import BitprismError
from ..formats import Format, format_key, get_format
from ..numerics.codes import decode, encode_with
from ..numerics.options import CastOptions, Rounding

__all__ = [
    "MX_FORMATS",
    "MXFormat",
    "MXResult",
    "decode_mx",
    "get_mx_format",
    "mx_quantize",
]

E8M0_BIAS = 127  # MX v1.0 Table 7: value 2^(code - 127)
E8M0_NAN = 0xFF  # MX v1.0 Table 7: the single NaN code
_SCALE_EXP_MIN = -127  # code 0x00
_SCALE_EXP_MAX = 127  # code 0xFE
MX_BLOCK_SIZE = 32  # MX v1.0 Table 1: k = 32 for every concrete format
_INT8_FRACTION_BITS = 6  # MXINT8 element value = int8 * 2^-6 (MX v1.0 Table 6)
_INT8_MAX = 127  # symmetric clamp: +-127/64 (0x80 = -2.0 never produced; see module notes)


@dataclass(frozen=True)
class MXFormat:
    """One MX concrete format: an element type sharing one E8M0 scale per block.

    Attributes:
        name: the MX name, e.g. ``"mxfp8_e4m3"`` (used as a column title by ``scan``).
        element: the element ``Format`` (``None`` for MXINT8, whose element is an integer).
        emax_elem: exponent of the element type's largest power of two (MX v1.0 §6.3).
        element_bits: width of one element code.
        block_size: elements per shared scale (32 in MX v1.0).
    """

    name: str
    element: Format | None
    emax_elem: int
    element_bits: int
    block_size: int = MX_BLOCK_SIZE

    @property
    def max_normal(self) -> float:
        """Largest element magnitude, the clamp bound of §6.3 (127/64 for MXINT8)."""
        if self.element is None:
            return _INT8_MAX / (1 << _INT8_FRACTION_BITS)
        return float(self.element.max_finite)

    @property
    def is_int(self) -> bool:
        return self.element is None

    def dequantize_block(self, x: np.ndarray) -> np.ndarray:
        """The values ``x`` takes once stored in this format (blocks along the last axis).

        ``x`` is float64, its last axis a multiple of ``block_size`` (any length works; a short
        last block is converted on its own). roundTiesToEven, as the spec requires. This is the
        column protocol ``scan`` uses for block formats.
        """
        return mx_quantize(x, self, axis=-1, block_size=self.block_size).values

    def describe(self) -> str:
        elem = self.element.name if self.element is not None else "int8 (two's complement, x 2^-6)"
        return (
            f"{self.name}: blocks of {self.block_size} x {elem} "
            f"(max {self.max_normal:g}) sharing one float8_e8m0fnu scale"
        )

    def __str__(self) -> str:
        return self.name

    def __format__(self, spec: str) -> str:
        """Formatted like its name (``f"{fmt:14}"`` pads it as it pads a string)."""
        return format(self.name, spec)


def _mx(name: str, element: str | None) -> MXFormat:
    if element is None:
        return MXFormat(name, None, 0, 8)
    fmt = get_format(element)
    # emax of the element format = exponent of its largest power of two (2 for E2M1: 6 = 1.5*2^2)
    return MXFormat(name, fmt, fmt.emax, fmt.bits)


# MX v1.0 Table 1 (concrete formats) with the element formats of Tables 2, 4, 5 and 6.
MX_FORMATS: Mapping[str, MXFormat] = {
    f.name: f
    for f in (
        _mx("mxfp8_e4m3", "float8_e4m3fn"),
        _mx("mxfp8_e5m2", "float8_e5m2"),
        _mx("mxfp6_e2m3", "float6_e2m3fn"),
        _mx("mxfp6_e3m2", "float6_e3m2fn"),
        _mx("mxfp4", "float4_e2m1fn"),
        _mx("mxint8", None),
    )
}


def get_mx_format(spec: str | MXFormat) -> MXFormat:
    """An ``MXFormat`` from its name (case and ``-``/``_`` ignored) or itself."""
    if isinstance(spec, MXFormat):
        return spec
    if isinstance(spec, str):
        key = format_key(spec)
        if key in MX_FORMATS:
            return MX_FORMATS[key]
    raise BitprismError(f"fmt must be one of {', '.join(MX_FORMATS)}; got {spec!r}")


@dataclass(frozen=True, eq=False)
class MXResult(Displayable):
    """A tensor converted to an MX format: E8M0 scales, element codes and the values they mean.

    Attributes:
        format: the ``MXFormat``.
        axis: the (non-negative) axis the blocks run along.
        block_size: elements per block.
        scales: uint8 E8M0 codes; the data's shape with ``axis`` replaced by the block count.
        elements: element codes (uint8; low 4/6/8 bits used), the data's shape.
        values: dequantized values ``X * P_i`` as float64, the data's shape (NaN where the
            block's scale is NaN).
        short_last_block: length of the last block when it is shorter than ``block_size``,
            else 0 (so it is falsy when every block is whole).
        clamped: elements whose ratio ``|V_i / X|`` exceeded the element's largest normal.
        flushed: nonzero finite inputs that became zero.
        nan_blocks: blocks whose scale is NaN (NaN/Inf inside, or a shared exponent above 127).
        options: the cast options of the elements (rounding direction and seed; overflow is
            always the §6.3 clamp, subnormals are kept).
    """

    format: MXFormat
    axis: int
    block_size: int
    scales: np.ndarray
    elements: np.ndarray
    values: np.ndarray
    short_last_block: int
    clamped: int
    flushed: int
    nan_blocks: int
    options: CastOptions = field(default_factory=lambda: CastOptions("roundTiesToEven", "saturate"))
    shape: tuple[int, ...] = field(default=())

    @property
    def blocks(self) -> int:
        return int(self.scales.size)

    @property
    def rounding(self) -> str:
        """The rounding direction of the elements."""
        return self.options.rounding

    def __repr__(self) -> str:
        return (
            f"<MXResult {self.format.name} shape={self.shape} axis={self.axis} "
            f"blocks={self.blocks}>"
        )

    def _repr_pretty_(self, p: Any, cycle: bool) -> None:
        p.text(str(self))


def _as_float64(data: Any) -> np.ndarray:
    if isinstance(data, np.ndarray) and data.dtype == np.float64:
        return data
    from .adapters import as_array

    arr = as_array(data)
    if arr.dtype.kind == "b":
        arr = arr.astype(np.uint8)
    return np.asarray(arr, dtype=np.float64)  # exact: every supported dtype fits float64


def _is_int(value: Any) -> bool:
    return not isinstance(value, (bool, np.bool_)) and isinstance(value, (int, np.integer))


def _check_axis(axis: Any, shape: tuple[int, ...]) -> int:
    ndim = len(shape)
    if not _is_int(axis) or not -ndim <= axis < ndim:
        raise BitprismError(
            f"axis must be an integer in {-ndim}..{ndim - 1} for data of shape {shape}; "
            f"got {axis!r}"
        )
    return int(axis) % ndim


def _round_int(y: np.ndarray, rounding: str, rng: np.random.Generator | None) -> np.ndarray:
    """Round float64 values to integers in the given IEEE 754 direction (y is exact here)."""
    if rounding == "roundTiesToEven":
        return np.rint(y)  # numpy rounds half to even
    if rounding == "roundTiesToAway":
        return np.copysign(np.floor(np.abs(y) + 0.5), y)  # |y| + 0.5 is exact for |y| < 2^52
    if rounding == "roundTowardPositive":
        return np.ceil(y)
    if rounding == "roundTowardNegative":
        return np.floor(y)
    if rounding == "roundTowardZero":
        return np.trunc(y)
    assert rng is not None  # stochastic: away from floor with probability frac(y)
    low = np.floor(y)
    return low + (rng.random(y.shape) < (y - low))


def mx_quantize(
    data: Any,
    fmt: str | MXFormat,
    axis: int = -1,
    block_size: int = MX_BLOCK_SIZE,
    rounding: Rounding = "roundTiesToEven",
    *,
    seed: int | None = None,
) -> MXResult:
    """Convert ``data`` to an MX block format (MX v1.0 §6.3), keeping codes and values.

    Args:
        data: any tensor ``bitprism.tensors.adapters.as_array`` accepts (read as float64, which
            holds every supported input exactly).
        fmt: ``"mxfp8_e4m3"``, ``"mxfp8_e5m2"``, ``"mxfp6_e2m3"``, ``"mxfp6_e3m2"``,
            ``"mxfp4"``, ``"mxint8"`` or an ``MXFormat``.
        axis: the axis the blocks run along.
        block_size: elements per shared scale (MX v1.0 fixes 32; other sizes are for study).
        rounding: rounding direction of the elements (IEEE 754 names, or ``"stochastic"``
            with ``seed``); the spec requires roundTiesToEven.

    The rules for zero blocks, NaN/Inf, the E8M0 range and MXINT8 are in the module notes.
    """
    mx = get_mx_format(fmt)
    options = CastOptions(rounding, "saturate", "keep", seed)
    if not _is_int(block_size) or block_size < 1:
        raise BitprismError(f"block_size must be a positive integer, got {block_size!r}")
    block_size = int(block_size)
    arr = _as_float64(data)
    if arr.ndim == 0:
        raise BitprismError("mx_quantize needs at least one axis to cut into blocks; got a scalar")
    axis = _check_axis(axis, arr.shape)

    moved = np.moveaxis(arr, axis, -1)
    n = moved.shape[-1]
    n_blocks = -(-n // block_size)
    pad = n_blocks * block_size - n
    if pad:
        widths = [(0, 0)] * (moved.ndim - 1) + [(0, pad)]
        moved = np.pad(moved, widths)  # zeros change neither the block maximum nor the others
    v = moved.reshape(moved.shape[:-1] + (n_blocks, block_size))

    # ---- shared exponent per block (step 1) -------------------------------------------
    finite = np.isfinite(v)
    bad_block = ~finite.all(axis=-1)  # NaN or Inf inside: NaN scale
    amax = np.max(np.abs(np.where(finite, v, 0.0)), axis=-1, initial=0.0)
    # frexp: amax = m * 2^e with m in [0.5, 1) -> floor(log2(amax)) = e - 1, exact in integers
    _, e = np.frexp(amax)
    shared = e.astype(np.int64) - 1 - mx.emax_elem
    zero_block = amax == 0
    shared = np.where(zero_block, _SCALE_EXP_MIN, shared)
    too_big = shared > _SCALE_EXP_MAX
    shared = np.maximum(shared, _SCALE_EXP_MIN)  # below 2^-127: raise to the smallest scale
    nan_scale = bad_block | too_big
    scales = np.where(nan_scale, E8M0_NAN, shared + E8M0_BIAS).astype(np.uint8)
    shared = np.where(nan_scale, 0, shared)

    # ---- elements (step 2): exact ratio, clamp, one rounding --------------------------
    ratio = np.ldexp(np.where(finite, v, 0.0), -shared[..., None].astype(np.int32))
    limit = mx.max_normal
    clamped_mask = (np.abs(ratio) > limit) & ~nan_scale[..., None]
    ratio = np.clip(ratio, -limit, limit)
    ratio = np.where(nan_scale[..., None], 0.0, ratio)
    if mx.element is None:
        rng = np.random.default_rng(options.seed) if options.rounding == "stochastic" else None
        ints = _round_int(np.ldexp(ratio, _INT8_FRACTION_BITS), options.rounding, rng)
        ints = np.clip(ints, -_INT8_MAX, _INT8_MAX).astype(np.int64)
        codes = (ints & 0xFF).astype(np.uint8)
        elem_values = np.ldexp(ints.astype(np.float64), -_INT8_FRACTION_BITS)
        # an int8 has no negative zero: -0.0 inputs come back as +0
    else:
        codes = np.asarray(encode_with(ratio, mx.element, options)).astype(np.uint8)
        elem_values = np.asarray(decode(codes, mx.element), dtype=np.float64)
    values = np.ldexp(elem_values, shared[..., None].astype(np.int32))
    values = np.where(nan_scale[..., None], np.nan, values)

    flushed_mask = (v != 0) & finite & (values == 0)

    def back(x: np.ndarray) -> np.ndarray:
        flat = x.reshape(x.shape[:-2] + (n_blocks * block_size,))[..., :n]
        return np.ascontiguousarray(np.moveaxis(flat, -1, axis))

    short = n - (n_blocks - 1) * block_size if pad else 0
    return MXResult(
        format=mx,
        axis=axis,
        block_size=block_size,
        scales=np.ascontiguousarray(np.moveaxis(scales, -1, axis)),
        elements=back(codes),
        values=back(values),
        short_last_block=int(short),
        clamped=int(clamped_mask.sum()),
        flushed=int(flushed_mask.sum()),
        nan_blocks=int(nan_scale.sum()),
        options=options,
        shape=tuple(arr.shape),
    )


def decode_mx(
    scales: Any,
    elements: Any,
    fmt: str | MXFormat,
    axis: int = -1,
    block_size: int = MX_BLOCK_SIZE,
) -> np.ndarray:
    """Values of stored MX data: ``2^(scale - 127) * element`` (NaN where the scale is 0xFF).

    MXINT8 codes are read as two's complement, so 0x80 reads as -2.0 (unverified, see notes).
    """
    mx = get_mx_format(fmt)
    s = np.asarray(scales)
    c = np.asarray(elements)
    if c.ndim == 0 or s.ndim != c.ndim:
        raise BitprismError(
            f"scales and elements must have the same number of axes (>= 1); got shapes "
            f"{s.shape} and {c.shape}"
        )
    axis = _check_axis(axis, c.shape)
    if not _is_int(block_size) or block_size < 1:
        raise BitprismError(f"block_size must be a positive integer, got {block_size!r}")
    n = c.shape[axis]
    n_blocks = -(-n // block_size)
    expected = c.shape[:axis] + (n_blocks,) + c.shape[axis + 1 :]
    if s.shape != expected:
        raise BitprismError(f"scales must have shape {expected} for these elements; got {s.shape}")
    if mx.element is None:
        ints = c.astype(np.uint8).view(np.int8).astype(np.float64)
        elem = np.ldexp(ints, -_INT8_FRACTION_BITS)
    else:
        elem = np.asarray(decode(c.astype(np.uint8), mx.element), dtype=np.float64)
    per = np.repeat(s.astype(np.int64), block_size, axis=axis)
    per = np.take(per, np.arange(n), axis=axis)
    out = np.ldexp(elem, (per - E8M0_BIAS).astype(np.int32))
    return np.where(per == E8M0_NAN, np.nan, out)
