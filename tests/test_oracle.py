"""Checks of the test oracle itself (tests/oracle.py) before any test trusts it.

The oracle is compared with ml_dtypes 0.7 and numpy 2.4 (from library) on every 8-bit and
16-bit format they implement: decoding of every code, classification, and round-to-nearest-even
encoding of edge, tie and random inputs. Its directed modes, which the libraries do not offer,
are compared with a brute-force search over the sorted value set, and its TF32 rounding with
the integer recipes on float32 bit patterns (in the style of the Intel SDM VCVTNEPS2BF16 entry;
TF32 layout from the RISC-V BF16 chapter table and the TensorFlow TF32 RFC). None of this
imports bitprism's numeric code.
"""

from __future__ import annotations

import math
from fractions import Fraction

import numpy as np
import pytest

import oracle as O

LIB_SMALL = [n for n in O.BUILTIN_LAYOUTS if O.library_dtype(n) is not None
             and O.library_dtype(n).itemsize <= 2]
EIGHT_BIT_OR_LESS = [n for n in LIB_SMALL if O.library_dtype(n).itemsize == 1]
NO_NAN = [n for n in O.BUILTIN_LAYOUTS if not O.BUILTIN_LAYOUTS[n].has_nan]


def _lib_codes(x: np.ndarray, dtype: np.dtype) -> np.ndarray:
    """ml_dtypes / numpy cast of float64 inputs, as unsigned codes (from library)."""
    return O.library_encode(x, dtype).astype(np.int64)


def test_library_small_formats_present():
    # 13 ml_dtypes/numpy formats of 4..16 bits (ml_dtypes 0.7 + numpy float16); guards the
    # parametrisation below against silently shrinking.
    assert len(LIB_SMALL) == 14 and "float16" in LIB_SMALL and "bfloat16" in LIB_SMALL


@pytest.mark.parametrize("name", LIB_SMALL)
def test_decode_every_code_matches_library(name):
    L, dt = O.BUILTIN_LAYOUTS[name], O.library_dtype(name)
    codes = np.arange(L.n_codes, dtype=np.dtype(f"uint{8 * dt.itemsize}"))
    lib = O.library_decode(codes, dt)  # from library
    mine = np.array([L.to_float(int(c)) for c in codes])
    assert np.array_equal(np.isnan(mine), np.isnan(lib))
    finite = ~np.isnan(lib)
    assert np.array_equal(mine[finite], lib[finite])
    assert np.array_equal(np.signbit(mine), np.signbit(lib))  # -0.0 and NaN signs too
    # class: subnormal iff finite, nonzero and below the library's smallest normal
    import ml_dtypes

    tiny = float(ml_dtypes.finfo(dt).smallest_normal)
    lib_sub = finite & (lib != 0) & (np.abs(lib) < tiny)
    mine_sub = np.array([L.classify(int(c)) == "subnormal" for c in codes])
    assert np.array_equal(mine_sub, lib_sub)
    assert np.array_equal(np.array([L.classify(int(c)) == "infinite" for c in codes]),
                          np.isinf(lib))


@pytest.mark.parametrize("name", LIB_SMALL)
def test_encode_nearest_even_matches_library(name):
    L, dt = O.BUILTIN_LAYOUTS[name], O.library_dtype(name)
    rng = np.random.default_rng(20240611)
    x = np.concatenate([O.edge_values(L, rng, 300), O.spread_values(L, rng, 3000)])
    lib = _lib_codes(x, dt)
    mine = np.array([O.encode(float(v), L) for v in x])
    nan_in = np.isnan(x)
    if L.has_nan:
        assert np.array_equal(mine[~nan_in], lib[~nan_in])
        # NaN inputs: NaN out with the input's sign (sign only where the format has one)
        assert all(L.is_nan(int(c)) for c in mine[nan_in])
        assert all(L.is_nan(int(c)) for c in lib[nan_in])
    else:
        assert np.array_equal(mine[~nan_in], lib[~nan_in])
        # Documented exception (comment in ml_dtypes include/mxfloat.h: NaN conversion is
        # implementation-defined by OCP MX v1.0; behaviour from library): ml_dtypes maps +NaN
        # to -0 and -NaN to +0; we keep the input's sign bit on the zero.
        assert np.array_equal(mine[nan_in], lib[nan_in] ^ L.sign_bit)


def test_encode_float32_matches_numpy():
    L = O.BUILTIN_LAYOUTS["float32"]
    rng = np.random.default_rng(7)
    x = np.concatenate([O.edge_values(L, rng, 300), O.spread_values(L, rng, 4000)])
    x = x[~np.isnan(x)]
    lib = _lib_codes(x, np.dtype(np.float32))  # numpy: correctly rounded float64 -> float32
    mine = np.array([O.encode(float(v), L) for v in x])
    assert np.array_equal(mine, lib)


@pytest.mark.parametrize("rounding", O.DETERMINISTIC_ROUNDINGS)
@pytest.mark.parametrize("name", EIGHT_BIT_OR_LESS + ["custom_e3m3"])
def test_all_modes_match_brute_force_inside_range(name, rounding):
    L = O.BUILTIN_LAYOUTS.get(name) or O.Layout(3, 3, 3, name=name)
    rng = np.random.default_rng(3)
    x = O.edge_values(L, rng, 300)
    x = x[np.isfinite(x) & (np.abs(x) <= float(L.max_finite))]
    if not L.signed:
        x = x[x > 0]
    if not L.has_zero:
        x = x[x >= float(L.smallest_normal)]
    for v in x:
        code = O.encode(float(v), L, rounding)
        got = L.value(code)
        assert got == O.brute_round(Fraction(float(v)), L, rounding), (v, hex(code))


def test_directed_zero_signs_and_overflow_by_hand():
    # IEEE 754-2008 §4.3.2 / §7.4 on float16: RTZ never overflows to Inf, RTP does for
    # positives only, RTN for negatives only (confirmed in text via §4.3 quotations).
    L = O.BUILTIN_LAYOUTS["float16"]
    big = 70000.0
    assert O.encode(big, L, O.RTZ) == 0x7BFF and O.encode(-big, L, O.RTZ) == 0xFBFF
    assert O.encode(big, L, O.RTP) == 0x7C00 and O.encode(-big, L, O.RTP) == 0xFBFF
    assert O.encode(big, L, O.RTN) == 0x7BFF and O.encode(-big, L, O.RTN) == 0xFC00
    assert O.encode(big, L, O.RNE, "saturate") == 0x7BFF
    # 65520 is the IEEE 754-2008 §4.3.1 overflow threshold 2^15 (2 - 2^-11)
    assert O.encode(65520, L) == 0x7C00 and O.encode(Fraction(65520) - Fraction(1, 10**9), L) \
        == 0x7BFF
    # zero results keep the input's sign; RTP of a tiny negative is -0, RTN of tiny positive +0
    assert O.encode(-1e-30, L, O.RTP) == 0x8000 and O.encode(1e-30, L, O.RTN) == 0x0000
    assert O.encode(1e-30, L, O.RTP) == 0x0001 and O.encode(1e-30, L, O.RTP, "standard",
                                                            "flush") == 0x0000


def test_tf32_oracle_matches_integer_recipes():
    # TF32 = float32 with the low 13 fraction bits removed (RISC-V BF16 chapter TF32 table;
    # TensorFlow TF32 RFC). On the float32 bit pattern b (finite inputs): RTZ = b >> 13;
    # RNA = (b + 0x1000) >> 13; RNE = (b + 0xFFF + bit13(b)) >> 13 (the Intel SDM
    # VCVTNEPS2BF16 recipe with 13 instead of 16 dropped bits). A carry into the all-ones
    # exponent yields the Inf pattern.
    L = O.BUILTIN_LAYOUTS["tf32"]
    rng = np.random.default_rng(11)
    x32 = O.float32_patterns(rng, 6000)
    x32 = x32[np.isfinite(x32)]
    b = x32.view(np.uint32).astype(np.int64)
    sign, mag = b & 0x80000000, b & 0x7FFFFFFF
    recipes = {
        O.RTZ: mag >> 13,
        O.RNA: (mag + 0x1000) >> 13,
        O.RNE: (mag + 0xFFF + ((mag >> 13) & 1)) >> 13,
    }
    for rounding, expected_mag in recipes.items():
        expected = (sign >> 13) | expected_mag
        mine = np.array([O.encode(float(v), L, rounding) for v in x32])
        assert np.array_equal(mine, expected), rounding


@pytest.mark.parametrize("name", LIB_SMALL + ["float32"])
def test_oracle_ulp_is_library_spacing_below_max(name):
    # For 0 <= x < max, the Handbook ULP equals the gap to the next value above, which is
    # what numpy/ml_dtypes np.spacing measures (from library). Not at max: np.spacing is
    # inf/NaN there (from library: np.spacing(float16(65504)) is inf, not the ULP 32).
    L, dt = O.BUILTIN_LAYOUTS[name], O.library_dtype(name)
    rng = np.random.default_rng(5)
    mags = sorted(set(O._mag_pairs(L, rng, 500)))
    vals = np.array([float(L.mag_value(m)) for m in mags])
    with np.errstate(invalid="ignore", over="ignore"):
        spacing = np.spacing(vals.astype(dt)).astype(np.float64)
    mine = np.array([float(O.ulp(Fraction(v), L)) for v in vals])
    assert np.array_equal(mine, spacing)


@pytest.mark.parametrize(
    "name, x, p",
    [
        # up-probabilities of stochastic rounding (Higham & Pranesh 2019, chop round = 5;
        # values from library arithmetic)
        ("float16", 1 + Fraction(1, 2**12), Fraction(1, 4)),
        ("bfloat16", 1 + Fraction(1, 2**10), Fraction(1, 8)),
        ("float8_e4m3fn", Fraction(103125, 100000), Fraction(1, 4)),
        ("float4_e2m1fn", Fraction(5, 2), Fraction(1, 2)),
    ],
)
def test_oracle_stochastic_probability(name, x, p):
    L = O.BUILTIN_LAYOUTS[name]
    down, up, prob = O.stochastic(x, L)
    assert prob == p
    # E[SR(x)] = x exactly (Gupta et al., ICML 2015, §3: unbiased stochastic rounding)
    assert (1 - prob) * L.value(down) + prob * L.value(up) == x


def test_oracle_special_semantics():
    # The brief's decisions, spelled out on the oracle (see tests/oracle.py docstring).
    e8m0 = O.BUILTIN_LAYOUTS["float8_e8m0fnu"]
    assert O.encode(0.0, e8m0) == 0xFF and O.encode(-0.0, e8m0) == 0xFF
    for r in O.DETERMINISTIC_ROUNDINGS:
        assert O.encode(2.0**-130, e8m0, r) == 0x00
    assert O.encode(3.0, e8m0) == 0x81  # ties away: 3 -> 4 (ml_dtypes 0.7, from library)
    e5m3 = O.BUILTIN_LAYOUTS["float8_e5m3fnu"]
    assert O.encode(-1e-30, e5m3) == 0xFF and O.encode(-0.0, e5m3) == 0x00
    fnuz = O.BUILTIN_LAYOUTS["float8_e4m3fnuz"]
    assert O.encode(-1e-30, fnuz) == 0x00 and O.encode(-math.inf, fnuz) == 0x80
    assert O.encode(-math.inf, fnuz, overflow="saturate") == 0xFF
    fp4 = O.BUILTIN_LAYOUTS["float4_e2m1fn"]
    assert O.encode(math.nan, fp4) == 0x0 and O.encode(-math.nan, fp4) == 0x8
