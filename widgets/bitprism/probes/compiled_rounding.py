"""The magic-constant rounding of ``rounding.Rounder`` fused into one compiled pass (numba).

``Rounder._magic`` rounds a block in seven numpy passes (exponent field, its extremes, the
constant, add, subtract, sign); an emulated matmul rounds its running sum after every chunk of
terms, so those passes, not the products, were most of its cost. Here each element is read
once and written once, with the same arithmetic: ``c = 1.5 * 2^(e + 52 - t)`` from the
value's exponent field clamped below at the format's smallest normal, ``r = (v + c) - c``
(numba keeps IEEE 754 semantics: no fast-math, so nothing is reassociated), the sign copied
back (a result of zero keeps the input's sign; a format without -0 gets +0).

Values whose result would pass the largest finite value, and Inf and NaN, are not rounded
here: the kernel leaves the value it would have rounded (the input, or the float64 sum) in
``out`` and sets its flag, and the caller sends the flagged values through the package's cast.
Each choice is a select, not a branch, so the loop vectorizes.

Only used when ``jit.available()`` (numba installed, ``BITPRISM_NUMBA`` not 0); the numpy
passes in ``Rounder`` are the plain twin, and ``tests/test_emulate.py`` holds the two to the
same bits.
"""

from __future__ import annotations

import math
from typing import Any, Callable

import numpy as np

from ..tensors.scan.compiled.jit import available, built_once, make_jit, with_kernels

__all__ = ["MIN_SIZE", "round_nearest", "sum_nearest", "usable"]

# below this many elements the numpy passes cost no more, and a short trace does not load numba
MIN_SIZE = 4096


def usable(size: int) -> bool:
    """True when an array of ``size`` elements is rounded by the compiled pass."""
    return size >= MIN_SIZE and available()


def round_nearest(x: np.ndarray, out: np.ndarray, flags: np.ndarray, emin_field: int,
                  magic_add: int, max_finite: float, signed_zero: bool) -> int:
    """``x`` (1-D contiguous float32 or float64) rounded into ``out`` (float64, may be ``x``);
    returns how many were flagged (``flags``, bool, same size: see the module docstring)."""
    return _run(x, _NO_ADDEND, out, flags, emin_field, magic_add, max_finite, signed_zero)


def sum_nearest(a: np.ndarray, b: np.ndarray, out: np.ndarray, flags: np.ndarray,
                emin_field: int, magic_add: int, max_finite: float, signed_zero: bool) -> int:
    """``a + b`` (1-D contiguous float64, summed in float64) rounded into ``out`` (may be
    ``a`` or ``b``); flags as ``round_nearest``."""
    return _run(a, b, out, flags, emin_field, magic_add, max_finite, signed_zero)


_NO_ADDEND = np.zeros(0)


def _run(a: np.ndarray, b: np.ndarray, out: np.ndarray, flags: np.ndarray, emin_field: int,
         magic_add: int, max_finite: float, signed_zero: bool) -> int:
    return int(_kernels()(a, b, out, flags.view(np.uint8), np.uint64(emin_field),
                          np.uint64(magic_add), float(max_finite), bool(signed_zero)))


def _nearest(v, emin_field, magic_add, signed_zero):  # type: ignore[no-untyped-def]
    field = np.uint64(np.float64(v).view(np.uint64) & np.uint64(0x7FF0_0000_0000_0000))
    c = np.uint64(max(field, emin_field) + magic_add).view(np.float64)
    r = math.copysign((v + c) - c, v)
    return r if signed_zero else r + 0.0


def _loop(a, b, out, flags, emin_field, magic_add, max_finite, signed_zero):  # type: ignore[no-untyped-def]
    """``a`` rounded, or ``a + b`` when ``b`` is not empty (a test the compiler takes out of
    the loop; adding a zero instead would turn -0 into +0)."""
    summed = b.size > 0
    count = 0
    for i in range(a.size):
        v = np.float64(a[i]) + b[i] if summed else np.float64(a[i])
        r = nearest(v, emin_field, magic_add, signed_zero)  # noqa: F821 (a global: with_kernels)
        ok = abs(r) <= max_finite
        out[i] = r if ok else v
        flags[i] = 0 if ok else 1
        count += 0 if ok else 1
    return count


@built_once
def _kernels() -> Callable[..., Any]:
    jit = make_jit()
    return jit(with_kernels(_loop, nearest=jit(_nearest)))
