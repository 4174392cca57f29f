"""Compiled float32 -> float16 / bfloat16 casts for the scan (numba), default options only.

A scan casts float32 data into every format; formats of up to 8 bits use the numerics
kernel's table, but float16 and bfloat16 go through ``encode``, the largest single cost of a
histogram scan after the error loops. With the
default options (roundTiesToEven, overflow to Inf, subnormals kept) both casts are a few
integer operations per element on the float32 pattern:

* bfloat16 (IEEE 754 binary32's exponent field, 7 significand bits): add ``0x7FFF`` plus the
  lowest kept bit and drop 16 bits; a carry rounds up into the exponent, past the largest
  finite value into Inf.
* float16 (binary16): re-bias the exponent and round the same way, dropping 13 bits, for
  results that are normal; below 2^-14 add 0.5 in float32, whose step there is binary16's
  subnormal step (2^-24), so the FPU's own roundTiesToEven rounds, and read the code off the
  sum's pattern; from 65536 up, Inf. Each choice is a select, not a branch, so the loops
  vectorize (a branchy version ran 2-4x slower on data that spans many binades).

Inf and NaN inputs follow ``encode``'s rules (Inf stays Inf; NaN becomes a quiet NaN of the
same sign with the top payload bits kept). Tests hold every finite result to numpy's float16
and ml_dtypes' bfloat16 casts (independent implementations) on every float32 exponent and sign
with the rounding-relevant low bits, and every result, NaN payloads included, to ``encode``.
"""

from __future__ import annotations

from functools import lru_cache
from typing import Any, Callable

import numpy as np

from ....formats import Format, get_format
from ....numerics.options import CastOptions
from .jit import built_once, make_jit

__all__ = ["cast16", "eligible"]


def eligible(fmt: Format, options: CastOptions) -> bool:
    """True when ``cast16`` casts float32 into ``fmt`` with ``options`` (the caller checks
    that the compiled loops are in use)."""
    return (
        _kind(fmt) is not None
        and options.rounding == "roundTiesToEven"
        and options.overflow == "standard"
        and options.subnormals == "keep"
    )


def cast16(x: np.ndarray, fmt: Format, out: np.ndarray) -> np.ndarray:
    """Codes of float32 ``x`` (1-D, contiguous) in ``fmt`` (``eligible`` must hold) into
    ``out`` (uint16, same size); returns ``out``."""
    kind = _kind(fmt)
    if kind is None:
        raise ValueError(f"cast16 casts into float16 or bfloat16, not {fmt.name}")
    _kernels()[kind](x.view(np.uint32), out)
    return out


@lru_cache(maxsize=64)
def _kind(fmt: Format) -> int | None:
    """0 for the built-in bfloat16, 1 for float16 (binary16), else None (a user-made format
    with the same layout takes encode)."""
    for k, name in enumerate(("bfloat16", "float16")):
        if fmt == get_format(name):
            return k
    return None


@built_once
def _kernels() -> tuple[Callable[..., Any], Callable[..., Any]]:
    jit = make_jit()
    U = np.uint32
    H = np.uint16

    # every intermediate is cast back to 32 bits: numba widens integer arithmetic to 64 bits,
    # which halves the vector lanes (the float16 loop ran at less than half the speed)

    @jit
    def to_bfloat16(bits, out):  # type: ignore[no-untyped-def]
        for i in range(bits.size):
            b = bits[i]
            rounded = U(U(U(b + U(0x7FFF)) + U(U(b >> U(16)) & U(1))) >> U(16))
            nan = U(U(b >> U(16)) | U(0x40))  # quieted, top payload bits kept
            out[i] = H(nan if U(b & U(0x7FFFFFFF)) > U(0x7F800000) else rounded)

    @jit
    def shift_half(x, shifted):  # type: ignore[no-untyped-def]
        half = np.float32(0.5)
        for i in range(x.size):
            # float32 addition (not float64: no double rounding): the FPU rounds |x| to a
            # multiple of 2^-24, float32's step at 0.5 and binary16's subnormal step
            shifted[i] = np.float32(abs(x[i]) + half)

    @jit
    def from_parts(bits, steps, out):  # type: ignore[no-untyped-def]
        for i in range(bits.size):
            b = bits[i]
            a = U(b & U(0x7FFFFFFF))
            r = U(a - U(0x38000000))  # exponent re-biased from 127 to 15
            normal = U(U(U(r + U(0xFFF)) + U(U(r >> U(13)) & U(1))) >> U(13))  # 65520 up: Inf
            low = U(steps[i] - U(0x3F000000))  # below 2^-14: steps of 2^-24 above 0.5
            nan = U(U(0x7E00) | U(U(a >> U(13)) & U(0x3FF)))  # quieted, top payload bits kept
            mag = normal if a >= U(0x38800000) else low
            mag = U(0x7C00) if a >= U(0x47800000) else mag
            mag = nan if a > U(0x7F800000) else mag
            out[i] = H(U(U(b >> U(16)) & U(0x8000)) | mag)

    def to_float16(bits: np.ndarray, out: np.ndarray) -> None:
        shifted = np.empty(bits.size, np.float32)
        shift_half(bits.view(np.float32), shifted)
        from_parts(bits, shifted.view(np.uint32), out)

    return to_bfloat16, to_float16
