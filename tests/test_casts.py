"""Casts into every numpy/ml_dtypes-backed format, bit for bit against the library.

ml_dtypes 0.7 and numpy 2.4 round float64 and float32 inputs once, ties to even, with their own
(non-saturating) overflow: exactly bitprism's default options (roundTiesToEven, overflow
"standard", subnormals "keep"). So for those formats ``x.astype(dtype)`` is the oracle (from
library), on the edge and tie cases below (each group names its source) and on 2^20 random
inputs per format. NaN inputs are compared by NaN-ness and sign only; for FP6/FP4 (no NaN)
ml_dtypes flips the sign of the zero it returns (from library; its include/mxfloat.h comment
calls NaN conversion implementation-defined by OCP MX v1.0): the documented exception.
TF32 has no library type and is checked against the exact oracle and a table of distinguishing
float32 inputs (from library, bit arithmetic).
"""

from __future__ import annotations

import math
import struct
import warnings
import zlib
from fractions import Fraction

import numpy as np
import pytest

import bitprism
import oracle as O

TARGETS = [n for n in O.BUILTIN_LAYOUTS if n != "float64" and O.library_dtype(n) is not None]
NAN_TARGETS = [n for n in TARGETS if O.BUILTIN_LAYOUTS[n].has_nan]
NO_NAN_TARGETS = [n for n in TARGETS if not O.BUILTIN_LAYOUTS[n].has_nan]
SIGNED_NAN = {n for n in NAN_TARGETS  # NaNs whose sign bit means something
              if O.BUILTIN_LAYOUTS[n].signed and O.BUILTIN_LAYOUTS[n].specials != "fnuz"}
N_RANDOM = 1 << 20


def _encode(x, name, **options):
    """bitprism.encode with RuntimeWarnings silenced (test_no_runtime_warnings checks them)."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        return bitprism.encode(x, bitprism.FORMATS[name], **options)


def assert_matches_library(x: np.ndarray, name: str, got: np.ndarray | None = None) -> None:
    """encode(x) == x.astype(dtype) bit for bit, NaN inputs by the rules in the docstring."""
    L, dt = O.BUILTIN_LAYOUTS[name], O.library_dtype(name)
    if got is None:
        got = _encode(x, name)
    lib = O.library_encode(x, dt)  # from library
    assert got.dtype == lib.dtype and got.shape == x.shape
    got, lib = got.astype(np.int64), lib.astype(np.int64)
    nan_in = np.isnan(x)
    bad = np.flatnonzero((got != lib) & ~nan_in)
    assert bad.size == 0, (
        f"{bad.size} mismatches in {name}; first: "
        + ", ".join(f"{x[i]!r} ({float(x[i]).hex()}): got {got[i]:#x}, library {lib[i]:#x}"
                    for i in bad[:5]))
    if not nan_in.any():
        return
    if L.has_nan:
        assert all(L.is_nan(int(c)) for c in got[nan_in])
        if name in SIGNED_NAN:
            assert np.array_equal(got[nan_in] & L.sign_bit,
                                  np.where(np.signbit(x[nan_in]), L.sign_bit, 0))
    else:  # documented exception: a zero with the input's sign; ml_dtypes flips it
        assert np.array_equal(got[nan_in], lib[nan_in] ^ L.sign_bit)


# ----- edge and tie cases, each group with its published source -------------------------------
# (group label, target, input, code the library was recorded to give; None: not recorded)
F32 = lambda bits: float(np.array([bits], dtype=np.uint32).view(np.float32)[0])  # exact
EDGES = [
    # "1.2": IEEE 754-2008 §4.3.1 overflow threshold 2^emax (2 - 2^-p) for the nearest modes
    # (codes from library: numpy, ml_dtypes)
    ("1.2", "float16", 65519.99, 0x7BFF), ("1.2", "float16", 65520.0, 0x7C00),
    ("1.2", "float16", -65520.0, 0xFC00),
    ("1.2", "bfloat16", F32(0x7F7F8000), 0x7F80), ("1.2", "bfloat16", F32(0x7F7F7FFF), 0x7F7F),
    ("1.2", "float32", float((2 - Fraction(1, 2**24)) * 2**127), 0x7F800000),
    ("1.2", "float32", math.nextafter(float((2 - Fraction(1, 2**24)) * 2**127), 0), 0x7F7FFFFF),
    # "1.4": IEEE 754 binary16/32 worked encodings, RNE of 1/3, 1/10, pi from float64 (from
    # library: struct, float.hex, fractions, numpy)
    ("1.4", "float16", 1 / 3, 0x3555), ("1.4", "float16", 0.1, 0x2E66),
    ("1.4", "float32", 0.1, 0x3DCCCCCD), ("1.4", "float32", 1 / 3, 0x3EAAAAAB),
    ("1.4", "float32", math.pi, 0x40490FDB),
    # "1.4": integer-gap ties (from library, numpy)
    ("1.4", "float16", 2049.0, 0x6800), ("1.4", "float16", 2051.0, 0x6802),
    ("1.4", "float32", 16777217.0, 0x4B800000), ("1.4", "float32", 16777219.0, 0x4B800002),
    # "1.4": subnormal-boundary ties (from library, numpy)
    ("1.4", "float16", 2.0**-25, 0x0000), ("1.4", "float16", 3 * 2.0**-26, 0x0001),
    ("1.4", "float16", -(2.0**-25), 0x8000),
    ("1.4", "float16", 1 + 2.0**-11, 0x3C00), ("1.4", "float16", 1 + 3 * 2.0**-11, 0x3C02),
    # "2.2": OCP OFP8 rev 1.0 E4M3 (float8_e4m3fn) ties and thresholds, non-saturating (from
    # library, ml_dtypes)
    ("2.2", "float8_e4m3fn", 448.0, 0x7E), ("2.2", "float8_e4m3fn", 449.0, 0x7E),
    ("2.2", "float8_e4m3fn", 463.99, 0x7E), ("2.2", "float8_e4m3fn", 464.0, 0x7E),
    ("2.2", "float8_e4m3fn", 464.0001, 0x7F), ("2.2", "float8_e4m3fn", 480.0, 0x7F),
    ("2.2", "float8_e4m3fn", 1e6, 0x7F), ("2.2", "float8_e4m3fn", math.inf, 0x7F),
    ("2.2", "float8_e4m3fn", -math.inf, 0xFF),
    ("2.2", "float8_e4m3fn", 1.0625, 0x38), ("2.2", "float8_e4m3fn", 1.1875, 0x3A),
    ("2.2", "float8_e4m3fn", 2.0**-10, 0x00), ("2.2", "float8_e4m3fn", 2.0**-10 * 1.0001, 0x01),
    ("2.2", "float8_e4m3fn", 3 * 2.0**-11, 0x01),
    # "2.2": OCP OFP8 rev 1.0 E5M2, non-saturating (from library, ml_dtypes)
    ("2.2", "float8_e5m2", 57344.0, 0x7B), ("2.2", "float8_e5m2", 61439.0, 0x7B),
    ("2.2", "float8_e5m2", 61440.0, 0x7C), ("2.2", "float8_e5m2", 61441.0, 0x7C),
    ("2.2", "float8_e5m2", 1e6, 0x7C), ("2.2", "float8_e5m2", math.inf, 0x7C),
    ("2.2", "float8_e5m2", 1.125, 0x3C), ("2.2", "float8_e5m2", 1.375, 0x3E),
    ("2.2", "float8_e5m2", 2.0**-17, 0x00),
    # "5.1": float32 -> bfloat16 ties (inputs as float32 patterns; from library, ml_dtypes: no
    # published worked tie example; the normal inputs agree with the Intel SDM VCVTNEPS2BF16
    # RNE recipe)
    ("5.1", "bfloat16", F32(0x3F808000), 0x3F80), ("5.1", "bfloat16", F32(0x3F818000), 0x3F82),
    ("5.1", "bfloat16", F32(0x3F80C000), 0x3F81), ("5.1", "bfloat16", F32(0x3F807FFF), 0x3F80),
    ("5.1", "bfloat16", F32(0x3F808001), 0x3F81), ("5.1", "bfloat16", F32(0x3DCCCCCD), 0x3DCD),
    ("5.1", "bfloat16", F32(0x7F7F7FFF), 0x7F7F), ("5.1", "bfloat16", F32(0x7F7F8000), 0x7F80),
    ("5.1", "bfloat16", F32(0x7F7FFFFF), 0x7F80), ("5.1", "bfloat16", F32(0x00018000), 0x0002),
    # "8": ml_dtypes 0.7 finfo and encodings (from library): -0.0, -Inf, negative max tie for
    # the 8-bit types
    ("8", "float8_e4m3fn", -464.0, 0xFE), ("8", "float8_e4m3fn", -464.0001, 0xFF),
    ("8", "float8_e4m3fn", -1e6, 0xFF),
    ("8", "float8_e3m4", -math.inf, 0xF0), ("8", "float8_e4m3", -math.inf, 0xF8),
    ("8", "float8_e5m2", -math.inf, 0xFC), ("8", "float8_e4m3fnuz", -math.inf, 0x80),
    ("8", "float8_e5m2fnuz", -math.inf, 0x80), ("8", "float8_e4m3b11fnuz", -math.inf, 0x80),
    ("8", "float8_e8m0fnu", -math.inf, 0xFF), ("8", "float6_e2m3fn", -math.inf, 0x3F),
    ("8", "float6_e3m2fn", -math.inf, 0x3F), ("8", "float4_e2m1fn", -math.inf, 0x0F),
    ("8", "float8_e4m3fnuz", -0.0, 0x00), ("8", "float8_e5m2fnuz", -0.0, 0x00),
    ("8", "float8_e4m3fn", -0.0, 0x80), ("8", "float8_e3m4", 1.0, 0x30),
    ("8", "float8_e4m3fnuz", 1.0, 0x40), ("8", "float8_e4m3b11fnuz", 1.0, 0x58),
    ("8", "float8_e5m2fnuz", 1.0, 0x40), ("8", "float8_e8m0fnu", 1.0, 0x7F),
    ("8", "float6_e2m3fn", 1.0, 0x08), ("8", "float6_e3m2fn", 1.0, 0x0C),
    ("8", "float4_e2m1fn", 1.0, 0x02), ("8", "bfloat16", 1.0, 0x3F80),
    # "8.1": ml_dtypes 0.7 FP4 ties (from library; values 0, 1, 1, 2, 2, 4, 4, 0.5, 6 -> codes)
    ("8.1", "float4_e2m1fn", 0.25, 0x0), ("8.1", "float4_e2m1fn", 0.75, 0x2),
    ("8.1", "float4_e2m1fn", 1.25, 0x2), ("8.1", "float4_e2m1fn", 1.75, 0x4),
    ("8.1", "float4_e2m1fn", 2.5, 0x4), ("8.1", "float4_e2m1fn", 3.5, 0x6),
    ("8.1", "float4_e2m1fn", 5.0, 0x6), ("8.1", "float4_e2m1fn", 0.2500001, 0x1),
    ("8.1", "float4_e2m1fn", 5.0001, 0x7),
    # "8.1": ml_dtypes 0.7 FP6 ties and saturation (from library)
    ("8.1", "float6_e2m3fn", 0.0625, 0x00), ("8.1", "float6_e2m3fn", 0.1875, 0x02),
    ("8.1", "float6_e3m2fn", 0.03125, 0x00), ("8.1", "float6_e3m2fn", 30.0, 0x1F),
    ("8.1", "float6_e3m2fn", 31.0, 0x1F), ("8.1", "float6_e3m2fn", 32.0, 0x1F),
    ("8.1", "float6_e2m3fn", math.inf, 0x1F), ("8.1", "float4_e2m1fn", math.inf, 0x07),
    # "8.1": ml_dtypes 0.7 E8M0 (from library): no zero, no subnormal flush, ties up in the
    # linear domain
    ("8.1", "float8_e8m0fnu", 0.0, 0xFF), ("8.1", "float8_e8m0fnu", -0.0, 0xFF),
    ("8.1", "float8_e8m0fnu", -1.0, 0xFF), ("8.1", "float8_e8m0fnu", 2.0**128, 0xFF),
    ("8.1", "float8_e8m0fnu", 2.0**-128, 0x00), ("8.1", "float8_e8m0fnu", 0.75 * 2.0**-127, 0x00),
    ("8.1", "float8_e8m0fnu", 1.5, 0x80), ("8.1", "float8_e8m0fnu", 3.0, 0x81),
    ("8.1", "float8_e8m0fnu", 0.75, 0x7F), ("8.1", "float8_e8m0fnu", 1.42, 0x7F),
    ("8.1", "float8_e8m0fnu", math.inf, 0xFF),
    # ml_dtypes e5m3fnu (from library): negatives, -0
    ("8", "float8_e5m3fnu", -1e-30, None), ("8", "float8_e5m3fnu", -0.0, None),
    ("8", "float8_e5m3fnu", math.inf, None), ("8", "float8_e5m3fnu", 1e30, None),
]


@pytest.mark.parametrize("section, name, x, doc_code", EDGES,
                         ids=[f"s{s}-{n}-{x!r}" for s, n, x, _ in EDGES])
def test_reference_edge_cases(section, name, x, doc_code):
    dt = O.library_dtype(name)
    lib = int(O.library_encode(np.array([x]), dt)[0])  # from library
    if doc_code is not None:  # the library still gives the code recorded above
        assert lib == doc_code
    arr = _encode(np.array([x]), name)
    assert int(arr[0]) == lib
    scalar = bitprism.encode(x, bitprism.FORMATS[name])  # scalar path agrees
    assert isinstance(scalar, int) and scalar == lib
    # and the exact oracle agrees (it is what the other test files trust)
    assert O.encode(x, O.BUILTIN_LAYOUTS[name]) == lib
    x32 = np.array([x]).astype(np.float32) if abs(x) < 3.4e38 or math.isinf(x) else None
    if x32 is not None and float(x32[0]) == x:  # the same input as a float32 array
        assert int(_encode(x32, name)[0]) == int(O.library_encode(x32, dt)[0])


@pytest.mark.parametrize("name", TARGETS)
def test_signed_zeros_infinities_and_nans(name):
    x = np.array([0.0, -0.0, math.inf, -math.inf, math.nan, -math.nan,
                  F32(0x7F800001), F32(0xFF800001), F32(0x7FC00001)])  # incl. sNaN patterns
    assert_matches_library(x, name)
    assert_matches_library(x.astype(np.float32), name)


# ----- random inputs: 2^20 per format and input kind --------------------------------------------
@pytest.mark.parametrize("name", TARGETS)
def test_random_float32_bit_patterns(name):
    rng = np.random.default_rng(zlib.crc32(name.encode()))
    x32 = O.float32_patterns(rng, N_RANDOM)  # uniform over all 2^32 patterns
    assert_matches_library(x32, name)


@pytest.mark.parametrize("name", TARGETS)
def test_random_float64_around_the_range(name):
    L = O.BUILTIN_LAYOUTS[name]
    rng = np.random.default_rng(1 + zlib.crc32(name.encode()))
    edges = O.edge_values(L, rng, 2000)  # consecutive values, exact midpoints (ties) +- 1 ulp
    x = np.concatenate([edges, O.spread_values(L, rng, N_RANDOM - edges.size)])
    assert_matches_library(x, name)


@pytest.mark.parametrize("name", TARGETS)
def test_exact_ties_between_consecutive_values(name):
    # every midpoint of consecutive values (random pairs for 16/32-bit formats) is an exact
    # tie in float64 and float32 inputs alike (at most 25 significant bits)
    L = O.BUILTIN_LAYOUTS[name]
    rng = np.random.default_rng(2)
    pairs = O._mag_pairs(L, rng, 20000)
    a = np.array([float(L.mag_value(m)) for m in pairs])
    b = np.array([float(L.mag_value(m + 1)) for m in pairs])
    mids = np.concatenate([(a + b) / 2, -(a + b) / 2])
    assert_matches_library(mids, name)
    if L.t <= 22 and L.emin - L.t - 1 >= -149:  # midpoints exact in float32 too
        assert_matches_library(mids.astype(np.float32), name)


def test_float32_to_float64_is_exact():
    rng = np.random.default_rng(9)
    x32 = O.float32_patterns(rng, 1 << 16)
    got = _encode(x32, "float64")
    with np.errstate(invalid="ignore"):
        want = x32.astype(np.float64).view(np.uint64)  # from library: exact widening
    finite = ~np.isnan(x32)
    assert np.array_equal(got[finite], want[finite])


@pytest.mark.parametrize("name", TARGETS + ["tf32"])
@pytest.mark.parametrize("src", [np.float32, np.float64])
def test_no_runtime_warnings_on_ordinary_values(name, src):
    # pyproject sets filterwarnings = error: casting ordinary numbers must not warn
    x = np.array([1.0, -0.5, 3.0, 1e-3, 0.0], dtype=src)
    for rounding in ("roundTiesToEven", "roundTowardPositive", "stochastic"):
        with warnings.catch_warnings():
            warnings.simplefilter("error")
            bitprism.encode(x, bitprism.FORMATS[name], rounding=rounding, seed=1)


@pytest.mark.parametrize("name", ["float32", "float16", "bfloat16", "float8_e4m3fn",
                                  "float8_e8m0fnu", "float4_e2m1fn", "tf32"])
def test_no_runtime_warnings_on_nan_and_random_patterns(name):
    # signaling and quiet NaN patterns (float32 and float64) and random float32 patterns
    rng = np.random.default_rng(4)
    x32 = np.concatenate([np.array([0x7F800001, 0xFFC00000, 0x7F800000], dtype=np.uint32)
                          .view(np.float32), O.float32_patterns(rng, 1 << 12)])
    with np.errstate(invalid="ignore"):  # numpy itself warns when widening signaling NaNs
        x64 = np.concatenate([np.array([0x7FF0000000000001], dtype=np.uint64).view(np.float64),
                              x32.astype(np.float64)])
    for x in (x32, x64):
        for rounding in ("roundTiesToEven", "roundTowardPositive", "stochastic"):
            with warnings.catch_warnings():
                warnings.simplefilter("error")
                bitprism.encode(x, bitprism.FORMATS[name], rounding=rounding, seed=1)


# ----- double-rounding trap (ml_dtypes 0.7, from library) -----------------------------------------
@pytest.mark.parametrize(
    "name, x, direct, via_float32",
    [  # ml_dtypes 0.7 (from library): direct rounding vs through float32 first
        ("bfloat16", 1 + 2.0**-8 + 2.0**-30, 1 + 2.0**-7, 1.0),
        ("float16", 1 + 2.0**-11 + 2.0**-30, 1 + 2.0**-10, 1.0),
        ("float8_e4m3fn", 1 + 2.0**-4 + 2.0**-26, 1.125, 1.0),
    ],
)
def test_double_rounding_trap(name, x, direct, via_float32):
    dt = O.library_dtype(name)
    got_direct = bitprism.cast(np.array([x]), name)[0]
    got_via = bitprism.cast(np.array([x]).astype(np.float32), name)[0]
    assert got_direct == direct and got_via == via_float32
    # both agree with the library along the same path, and the direct one with the oracle
    assert got_direct == O.library_encode(np.array([x]), dt).view(dt).astype(np.float64)[0]
    assert got_via == np.array([x]).astype(np.float32).astype(dt).astype(np.float64)[0]
    assert O.BUILTIN_LAYOUTS[name].to_float(O.encode(x, O.BUILTIN_LAYOUTS[name])) == direct


# ----- exact (scalar) inputs: one rounding from the rational ------------------------------------
@pytest.mark.parametrize(
    "name, x, code",
    [  # IEEE 754 binary16/32 encodings and cross-format error tables (from library: numpy /
       # ml_dtypes RNE of float64 inputs, exact fractions)
        ("float16", Fraction(1, 3), 0x3555), ("float16", Fraction(1, 10), 0x2E66),
        ("float32", Fraction(1, 3), 0x3EAAAAAB), ("float32", Fraction(1, 10), 0x3DCCCCCD),
        ("bfloat16", Fraction(1, 10), 0x3DCD), ("bfloat16", Fraction(1, 3), 0x3EAB),
        ("float8_e4m3fn", Fraction(1, 10), 0x1D), ("float8_e5m2", Fraction(1, 10), 0x2E),
        ("float8_e4m3fn", Fraction(1, 3), 0x2B), ("float8_e5m2", Fraction(1, 3), 0x35),
        ("float6_e2m3fn", Fraction(1, 10), 0x01), ("float6_e3m2fn", Fraction(1, 10), 0x02),
        ("float4_e2m1fn", Fraction(1, 10), 0x0), ("float4_e2m1fn", Fraction(1, 3), 0x1),
        ("float6_e2m3fn", Fraction(1, 3), 0x03), ("float6_e3m2fn", Fraction(1, 3), 0x05),
    ],
)
def test_exact_rational_inputs(name, x, code):
    assert O.encode(x, O.BUILTIN_LAYOUTS[name]) == code  # exact oracle agrees with the table
    assert bitprism.encode(x, bitprism.FORMATS[name]) == code
    assert bitprism.encode(-x, bitprism.FORMATS[name]) == code | O.BUILTIN_LAYOUTS[name].sign_bit


# ----- TF32: no library type; the exact oracle and the distinguishing inputs ---------------------
TF32 = bitprism.FORMATS["tf32"]


@pytest.mark.parametrize(
    "f32_bits, rne, rna, rtz",
    [  # RNE (Intel SPIR-V SPV_INTEL_tensor_float32_conversion) / RNA, ties away (PTX
       # cvt.rna.tf32.f32) / truncate (PyTorch numerical-accuracy notes); the sources disagree.
       # Codes from library (bit arithmetic), as fp32 patterns
        (0x3F801000, 0x3F800000, 0x3F802000, 0x3F800000),  # 1 + 2^-11, exact tie
        (0x3F803000, 0x3F804000, 0x3F804000, 0x3F802000),  # 1 + 3*2^-11, tie
        (0x3F801800, 0x3F802000, 0x3F802000, 0x3F800000),  # above the tie
        (0x3DCCCCCD, 0x3DCCC000, 0x3DCCC000, 0x3DCCC000),  # 0.1f
    ],
)
def test_tf32_section_5_2_table(f32_bits, rne, rna, rtz):
    x = np.array([f32_bits], dtype=np.uint32).view(np.float32)
    # TF32 code = the float32 pattern without its 13 low fraction bits (RISC-V BF16 chapter
    # TF32 table; TensorFlow TF32 RFC)
    for rounding, want in (("roundTiesToEven", rne), ("roundTiesToAway", rna),
                           ("roundTowardZero", rtz)):
        assert int(bitprism.encode(x, TF32, rounding=rounding)[0]) == want >> 13
        assert bitprism.encode(float(x[0]), TF32, rounding=rounding) == want >> 13
        assert O.encode(float(x[0]), O.BUILTIN_LAYOUTS["tf32"], rounding) == want >> 13


@pytest.mark.parametrize("rounding", ["roundTiesToEven", "roundTiesToAway", "roundTowardZero"])
def test_tf32_random_float32_patterns(rounding):
    # integer recipes on the float32 pattern (validated against the oracle in test_oracle.py)
    rng = np.random.default_rng(12)
    x32 = O.float32_patterns(rng, N_RANDOM)
    b = x32.view(np.uint32).astype(np.int64)
    sign, mag = b & 0x80000000, b & 0x7FFFFFFF
    add = {"roundTowardZero": 0, "roundTiesToAway": 0x1000,
           "roundTiesToEven": 0xFFF + ((mag >> 13) & 1)}[rounding]
    want = (sign >> 13) | ((mag + add) >> 13)
    got = _encode(x32, "tf32", rounding=rounding).astype(np.int64)
    finite = np.isfinite(x32)
    assert np.array_equal(got[finite], want[finite])
    L = O.BUILTIN_LAYOUTS["tf32"]
    nan = np.isnan(x32)
    assert all(L.is_nan(int(c)) for c in got[nan])
    assert np.array_equal(got[nan] & L.sign_bit, (sign[nan] >> 13))
    assert np.array_equal(got[np.isinf(x32)], want[np.isinf(x32)])  # +-Inf patterns map over


def test_tf32_random_float64_against_oracle():
    L = O.BUILTIN_LAYOUTS["tf32"]
    rng = np.random.default_rng(13)
    x = np.concatenate([O.edge_values(L, rng, 300), O.spread_values(L, rng, 4000)])
    x = x[~np.isnan(x)]
    for rounding in ("roundTiesToEven", "roundTiesToAway", "roundTowardZero"):
        got = _encode(x, "tf32", rounding=rounding)
        want = np.array([O.encode(float(v), L, rounding) for v in x])
        bad = np.flatnonzero(got.astype(np.int64) != want)
        assert bad.size == 0, [(x[i], hex(int(got[i])), hex(int(want[i]))) for i in bad[:5]]


def test_tf32_decode_is_float32_of_shifted_code():
    rng = np.random.default_rng(14)
    codes = rng.integers(0, 1 << 19, 1 << 16).astype(np.uint32)
    with np.errstate(invalid="ignore"):
        want = (codes << 13).view(np.float32).astype(np.float64)  # from library (numpy)
    got = bitprism.decode(codes, TF32)
    assert np.array_equal(got, want, equal_nan=True)


# ----- NaN payloads on every path ---------------------------------------------------------------
def _f64(bits: int) -> float:
    """The Python float with these float64 bits (struct copies them, signaling NaNs included)."""
    return struct.unpack("<d", struct.pack("<Q", bits))[0]


# float64 NaN classes: quiet / signaling, payload empty, in the top bits, only in the low bits
# (dropped by every narrower format), everywhere; both signs below
NAN64 = {
    "quiet": 0x7FF8000000000000,
    "quiet, top payload": 0x7FFC000000000000,
    "quiet, low payload": 0x7FF8000000000001,
    "quiet, all ones": 0x7FFFFFFFFFFFFFFF,
    "signaling, low payload": 0x7FF0000000000001,
    "signaling, top payload": 0x7FF4000000000000,
    "signaling, all ones": 0x7FF7FFFFFFFFFFFF,
    "float16 payload's last bit": 0x7FF8040000000000,
}
NAN_DESTINATIONS = ["float32", "tf32", "bfloat16", "float16"] + [
    n for n, f in bitprism.FORMATS.items() if f.bits <= 8
]


def _softfloat_nan(bits64: int, fmt: bitprism.Format) -> int:
    """Berkeley SoftFloat's f64_to_f32 / f64_to_f16 NaN rule (softfloat_commonNaNToF16UI /
    F32UI, specialize 8086): sign | all-ones exponent | quiet bit | the top t - 1 payload bits
    of the float64 trailing significand."""
    t = fmt.significand_bits
    frac = bits64 & ((1 << 52) - 1)
    sign = fmt.sign_mask if bits64 >> 63 else 0
    return sign | fmt.nan_code | (frac >> (52 - t))


def test_softfloat_rule_is_the_hardware_conversion() -> None:
    # numpy's float64 -> float32 astype is the x86 conversion: payload kept, quieted
    for bits in NAN64.values():
        for sign in (0, 1 << 63):
            x = np.array([bits | sign], np.uint64).view(np.float64)
            with np.errstate(invalid="ignore"):
                hw = int(x.astype(np.float32).view(np.uint32)[0])
            assert hw == _softfloat_nan(bits | sign, bitprism.FORMATS["float32"])
            # numpy's float64 -> float16 keeps the payload bits but not the quiet bit
            with np.errstate(invalid="ignore"):
                half = int(x.astype(np.float16).view(np.uint16)[0])
            if bits >> 51 & 1 and half & 0x1FF:  # quiet, with payload bits numpy kept
                assert half == _softfloat_nan(bits | sign, bitprism.FORMATS["float16"])


@pytest.mark.parametrize("name", NAN_DESTINATIONS)
@pytest.mark.parametrize("negative", [False, True], ids=["+", "-"])
@pytest.mark.parametrize("pattern", list(NAN64), ids=list(NAN64))
def test_nan_payload_same_on_scalar_and_array_paths(pattern: str, negative: bool, name: str) -> None:
    from bitprism.numerics.compare import compare
    from bitprism.numerics.exact import as_exact
    from bitprism.numerics.scalar import decode_exact, encode_exact

    fmt = bitprism.FORMATS[name]
    bits = NAN64[pattern] | (1 << 63 if negative else 0)
    array = np.array([bits], np.uint64).view(np.float64)
    want = int(_encode(array, name)[0])  # the vector kernel
    if fmt.specials == "ieee":
        assert want == _softfloat_nan(bits, fmt)  # SoftFloat's rule (quiet, top payload bits)
    assert bitprism.encode(_f64(bits), fmt) == want  # a Python float: the scalar path
    assert encode_exact(as_exact(array[0]), fmt) == want  # a numpy scalar, exactly
    assert encode_exact(decode_exact(bits, bitprism.FORMATS["float64"]), fmt) == want  # a code
    row = compare(_f64(bits), [fmt]).rows[0]
    assert row.code == want and row.stored.is_nan == fmt.has_nan
    if fmt.specials == "ieee":
        assert row.fields.payload == want & ((1 << (fmt.significand_bits - 1)) - 1)


def test_float16_signaling_nan_to_float32_is_quieted_with_its_payload() -> None:
    from bitprism.numerics.exact import as_exact
    from bitprism.numerics.scalar import encode_exact

    h = np.array([0x7D01], np.uint16).view(np.float16)  # signaling: quiet bit clear, payload 0x101
    with np.errstate(invalid="ignore"):
        numpy_bits = int(h.astype(np.float32).view(np.uint32)[0])  # numpy keeps the payload ...
    want = numpy_bits | 0x00400000  # ... and IEEE 754-2019 §6.2.3 (SoftFloat f16_to_f32) quiets
    assert want == 0x7FE02000
    f32 = bitprism.FORMATS["float32"]
    assert int(_encode(h, "float32")[0]) == want  # array path
    assert int(bitprism.encode(h[0], f32)) == want  # numpy scalar
    assert encode_exact(as_exact(h[0]), f32) == want  # its exact value


def test_nan_in_its_own_format_keeps_its_bits() -> None:
    """A value put into its own format is copied (IEEE 754-2019 §5.5.1), not converted: a
    signaling NaN stays signaling, as on the array path (numpy copies the bits)."""
    from bitprism.numerics.compare import compare

    s32 = np.array([0x7F800001, 0xFFC00123], np.uint32).view(np.float32)
    assert np.array_equal(_encode(s32, "float32"), [0x7F800001, 0xFFC00123])  # numpy view
    for value, code in zip(s32, (0x7F800001, 0xFFC00123)):
        assert int(bitprism.encode(value, "float32")) == code
        row, half = compare(value, ["float32", "float16"]).rows
        assert row.code == code
        assert half.code == _encode(np.array([value]), "float16")[0]  # converted: quieted
    assert compare(s32[0], ["float32"]).rows[0].kind.label == "signaling NaN"
    snan = _f64(0x7FF0000000000001)
    assert bitprism.encode(snan, "float64") == 0x7FF0000000000001  # Python float into float64
    assert compare(snan, ["float64"]).rows[0].code == 0x7FF0000000000001


def test_nan_payload_in_exact_values() -> None:
    from fractions import Fraction as Q

    from bitprism.numerics.decimal_text import exact_text
    from bitprism.numerics.exact import ExactValue, as_exact
    from bitprism.numerics.scalar import decode_exact

    x = as_exact(_f64(0xFFFC000000000000))
    assert x.is_nan and x.negative and x.payload == Q(3, 4)  # trailing significand 0xC000... / 2^52
    assert decode_exact(0x7F00, bitprism.FORMATS["float16"]).payload == Q(0x300, 1 << 10)
    assert decode_exact(0x7F, bitprism.FORMATS["float8_e4m3fn"]).payload is None  # single NaN
    assert bitprism.parse("nan").payload is None
    # equality is structural: the payload takes part (it changes the code a cast gives)
    assert x != ExactValue.nan(True) and x == ExactValue.nan(True, Q(3, 4))
    assert len({x, ExactValue.nan(True, Q(3, 4)), ExactValue.nan(True)}) == 2
    assert (-x).payload == x.payload and not (-x).negative
    # exact text keeps the sign only: it reads back as a NaN (the widget keeps x itself)
    assert exact_text(x) == "-nan" and bitprism.parse(exact_text(x)) == ExactValue.nan(True)
    with pytest.raises(bitprism.BitprismError, match="payload"):
        ExactValue("finite", False, Q(1), payload=Q(1, 2))
    with pytest.raises(bitprism.BitprismError, match="payload"):
        ExactValue.nan(False, Q(1, 3))  # not a dyadic fraction
