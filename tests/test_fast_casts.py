"""Tests of the compiled float32 -> float16 / bfloat16 casts of the scan (``tensors.fast_casts``).

References: numpy's float16 cast and ml_dtypes' bfloat16 cast (independent implementations of
IEEE 754 roundTiesToEven conversion) for every finite result, and ``bitprism.encode`` (itself
tested against both and a Fraction oracle) for every result, NaN payloads and Inf included.
The inputs cover every float32 sign, exponent and top significand bits, each with the low bits
that decide a rounding: zero, one, just below / at / just above the halfway point, all ones.
"""

from __future__ import annotations

import ml_dtypes
import numpy as np
import pytest

import bitprism.tensors.scan.compiled.fast_casts as fc
from bitprism.formats import get_format
from bitprism.numerics.codes import encode
from bitprism.numerics.options import CastOptions
from bitprism.tensors.scan import scan
from bitprism.tensors.scan.compiled.jit import available
from test_error_kernels import same_scan
from test_scan import wide_data

needs_numba = pytest.mark.skipif(not (available() and fc.eligible(get_format("float16"), CastOptions())),
                                 reason="numba not installed")

# low bits dropped by each cast: 16 for bfloat16, 13 for float16 normals (more below 2^-14)
LOWS = {
    "bfloat16": [0, 1, 0x7FFF, 0x8000, 0x8001, 0xFFFF, 0x4000, 0xC000],
    "float16": [0, 1, 0xFFF, 0x1000, 0x1001, 0x1FFF, 0x2000, 0x2FFF, 0x3000, 0x3001, 0x8000, 0x8001,
                0xEFFF, 0xF000, 0xF001, 0xFFFF],
}
REFERENCE = {"bfloat16": ml_dtypes.bfloat16, "float16": np.float16}


def patterns(name: str) -> np.ndarray:
    high = np.arange(1 << 16, dtype=np.uint32) << np.uint32(16)
    return np.concatenate([high | np.uint32(low) for low in LOWS[name]])


@needs_numba
@pytest.mark.parametrize("name", ["bfloat16", "float16"])
def test_cast16_against_references(name: str) -> None:
    fmt = get_format(name)
    bits = patterns(name)
    x = bits.view(np.float32)
    got = fc.cast16(x, fmt, np.empty(x.size, np.uint16))
    with np.errstate(all="ignore"):
        ref = x.astype(REFERENCE[name]).view(np.uint16)
    finite = np.isfinite(x)
    assert np.array_equal(got[finite], ref[finite])
    assert np.array_equal(got, encode(x, fmt))  # NaN payloads and Inf by encode's rules


@needs_numba
def test_float16_ties_below_the_smallest_normal() -> None:
    """Values a hair above half a subnormal step must round up: a float64 addition would
    round them to the tie first and then to even (double rounding)."""
    f16 = get_format("float16")
    # IEEE 754 binary32 patterns (common practice): 2^-25 (exactly half of binary16's smallest
    # subnormal 2^-24), the next float32 above it, and 1.5 * 2^-24 plus one float32 step
    bits = np.array([0x33000000, 0x33000001, 0x33C00000, 0x33C00001, 0x387FE000, 0x387FE001], np.uint32)
    got = fc.cast16(bits.view(np.float32), f16, np.empty(bits.size, np.uint16))
    # numpy's float16 (reference): 0, 1, 2 (tie to even), 2, 0x0400 (tie to even), 0x0400
    assert got.tolist() == bits.view(np.float32).astype(np.float16).view(np.uint16).tolist()
    assert got.tolist() == [0, 1, 2, 2, 0x0400, 0x0400]


def test_eligible_only_for_default_options() -> None:
    f16, e4m3 = get_format("float16"), get_format("float8_e4m3fn")
    assert not fc.eligible(e4m3, CastOptions())
    for opts in (CastOptions(rounding="roundTowardZero"), CastOptions(overflow="saturate"),
                 CastOptions(subnormals="flush"), CastOptions(rounding="stochastic", seed=1)):
        assert not fc.eligible(f16, opts)


@needs_numba
@pytest.mark.parametrize("quantiles", ["histogram", "exact"])
def test_scan_same_with_and_without_fast_casts(monkeypatch, quantiles) -> None:
    formats = ["bfloat16", "float16", "float8_e4m3fn"]
    with np.errstate(over="ignore"):  # values beyond float16 become Inf: wanted
        half = wide_data(20_000, 13).astype(np.float16)  # converted to float32 by the scan
    for x in (wide_data(70_000, 12, low=-40, high=40), half):
        fast = scan(x, formats, quantiles=quantiles, progress=False)
        with monkeypatch.context() as m:
            m.setattr(fc, "eligible", lambda fmt, options: False)
            ref = scan(x, formats, quantiles=quantiles, progress=False)
        same_scan(fast, ref)
