"""Format identities and published parameter tables for every built-in format.

Style of ml_dtypes' finfo tests: identities that must hold for every dtype (bit counts,
eps = 2^-t, the value after max), each derived quantity compared with ml_dtypes/numpy finfo
computed at run time (from library: ml_dtypes 0.7, numpy 2.4), then the published tables with
their source beside each value (IEEE 754-2008 Table 3.5, FP8 paper Table 1 / OCP OFP8 rev 1.0,
OCP MX v1.0), then the registry's lookups and the validation of hand-rolled formats.
"""

from __future__ import annotations

import math
import struct
from fractions import Fraction

import ml_dtypes
import numpy as np
import pytest

import bitprism
import oracle as O

ALL = list(O.BUILTIN_LAYOUTS)
LIB = [n for n in ALL if O.library_dtype(n) is not None]
LIB_SMALL = [n for n in LIB if O.library_dtype(n).itemsize <= 2]
SIGNED_LIB = [n for n in LIB if O.BUILTIN_LAYOUTS[n].signed]
UNSIGNED_LIB = [n for n in LIB if not O.BUILTIN_LAYOUTS[n].signed]
WITH_NAN = [n for n in LIB if O.BUILTIN_LAYOUTS[n].has_nan]
IEEE_SPECIALS = [n for n in ALL if O.BUILTIN_LAYOUTS[n].specials == "ieee"]


def _finfo(name):
    return ml_dtypes.finfo(O.library_dtype(name))  # from library (numpy finfo for IEEE types)


def _F(x) -> Fraction:
    return Fraction(float(x))


# ----- registry ----------------------------------------------------------------------------------
def test_registry_names_in_display_order():
    # Display order agreed in the design brief.
    assert list(bitprism.FORMATS) == [
        "float64", "float32", "tf32", "bfloat16", "float16", "float8_e5m2", "float8_e4m3fn",
        "float8_e4m3", "float8_e3m4", "float8_e4m3fnuz", "float8_e5m2fnuz",
        "float8_e4m3b11fnuz", "float8_e5m3fnu", "float8_e8m0fnu", "float6_e2m3fn",
        "float6_e3m2fn", "float4_e2m1fn",
    ]
    assert all(isinstance(f, bitprism.Format) and f.name == n
               for n, f in bitprism.FORMATS.items())


@pytest.mark.parametrize("name", ALL)
def test_free_parameters_match_published_layouts(name):
    # Sources per format in tests/oracle.py BUILTIN_LAYOUTS (IEEE 754 Table 3.5, OFP8, MX v1.0,
    # ml_dtypes README, ONNX float8 page).
    assert O.Layout.of(bitprism.FORMATS[name]) == O.BUILTIN_LAYOUTS[name]


# ----- identities against ml_dtypes / numpy finfo ------------------------------------------------
@pytest.mark.parametrize("name", LIB)
def test_library_dtype(name):
    fmt, dt = bitprism.FORMATS[name], O.library_dtype(name)
    assert fmt.dtype == dt
    assert fmt.code_dtype == np.dtype(f"uint{8 * dt.itemsize}")


@pytest.mark.parametrize("name", SIGNED_LIB)
def test_signed_bit_count_identity(name):
    fmt, fi = bitprism.FORMATS[name], _finfo(name)
    # ml_dtypes finfo_test: nmant + nexp + 1 == bits for signed formats
    assert fi.nmant + fi.nexp + 1 == fi.bits == fmt.bits
    assert (fmt.exponent_bits, fmt.significand_bits) == (fi.nexp, fi.nmant)


@pytest.mark.parametrize("name", UNSIGNED_LIB)
def test_unsigned_bit_count_identity(name):
    fmt, fi = bitprism.FORMATS[name], _finfo(name)
    assert fi.nmant + fi.nexp == fi.bits == fmt.bits  # no sign bit
    assert (fmt.exponent_bits, fmt.significand_bits) == (fi.nexp, fi.nmant)


@pytest.mark.parametrize("name", LIB)
def test_derived_values_match_finfo(name):
    fmt, fi = bitprism.FORMATS[name], _finfo(name)
    assert fmt.precision == fi.nmant + 1
    assert fmt.epsilon == Fraction(1, 2**fmt.significand_bits) == _F(fi.eps)  # eps == 2**-t
    assert fmt.max_finite == _F(fi.max)
    assert fmt.smallest_normal == _F(fi.smallest_normal)
    assert fmt.smallest_subnormal == _F(fi.smallest_subnormal)
    # numpy's maxexp is emax + 1, minexp is emin (numpy finfo / ml_dtypes finfo, from library)
    assert fmt.emin == fi.minexp
    assert fmt.emax == fi.maxexp - 1
    for prop in ("max_finite", "smallest_normal", "smallest_subnormal", "epsilon"):
        assert isinstance(getattr(fmt, prop), Fraction), prop


@pytest.mark.parametrize("name", LIB)
def test_max_code_and_special_codes_decode_in_library(name):
    fmt, dt, fi = bitprism.FORMATS[name], O.library_dtype(name), _finfo(name)
    assert O.library_decode([fmt.max_code], dt)[0] == float(fi.max)
    if fmt.has_inf:
        assert O.library_decode([fmt.inf_code], dt)[0] == math.inf
    else:
        assert fmt.inf_code is None
    if fmt.has_nan:
        nan = O.library_decode([fmt.nan_code], dt)[0]
        assert math.isnan(nan)
        # the canonical NaN is the one the library produces for numpy's +NaN (IEEE 754-2008
        # §6.2.1 quiet NaN; encodings from library: numpy / ml_dtypes)
        assert int(O.library_encode(np.array([np.nan]), dt)[0]) == fmt.nan_code
    else:
        assert fmt.nan_code is None


AFTER_MAX = {  # what the code after the largest finite one is, by special-value convention
    "ieee": "inf",  # IEEE 754-2008 §3.4: exponent all ones, significand 0
    "fn": "nan",  # OFP8 E4M3 S.1111.111; ml_dtypes e5m3fnu / MX E8M0 0xFF
    "fnuz": "nan",  # max 0x7F, then 0x80: the single NaN (ONNX float8 page)
    "finite": "-0",  # MX FP6/FP4: 0x1F then 0x20 = -0 (the sign bit)
}


@pytest.mark.parametrize("name", [n for n in LIB if n != "float64"])
def test_what_comes_after_max(name):
    fmt, dt = bitprism.FORMATS[name], O.library_dtype(name)
    after = O.library_decode([fmt.max_code + 1], dt)[0]  # from library
    expected = AFTER_MAX[fmt.specials]
    if expected == "inf":
        assert after == math.inf and fmt.classify(fmt.max_code + 1) == "inf"
    elif expected == "nan":
        assert math.isnan(after) and fmt.classify(fmt.max_code + 1) == "nan"
    else:
        assert after == 0 and math.copysign(1, after) < 0
        assert fmt.code_value(fmt.max_code + 1) == 0


@pytest.mark.parametrize("name", LIB_SMALL)
def test_capabilities_match_library_enumeration(name):
    fmt, dt = bitprism.FORMATS[name], O.library_dtype(name)
    v = O.library_decode(np.arange(1 << fmt.bits), dt)  # every code, from library
    finite = np.isfinite(v)
    assert fmt.has_inf == bool(np.isinf(v).any())
    assert fmt.has_nan == bool(np.isnan(v).any())
    assert fmt.has_negative_zero == bool(((v == 0) & np.signbit(v)).any())
    tiny = float(fmt.smallest_normal)
    assert fmt.has_subnormals == bool((finite & (v != 0) & (np.abs(v) < tiny)).any())
    assert fmt.signed == bool((v < 0).any())
    # every finite code agrees with Format.code_value, exactly
    for code in np.flatnonzero(finite)[:: max(1, finite.sum() // 4096)]:
        assert fmt.code_value(int(code)) == Fraction(v[code])


@pytest.mark.parametrize("name", IEEE_SPECIALS)
def test_ieee_canonical_nan_is_quiet(name):
    # IEEE 754-2008 §6.2.1: a quiet NaN has the first trailing significand bit d1 = 1
    fmt = bitprism.FORMATS[name]
    t = fmt.significand_bits
    assert fmt.nan_code == fmt.inf_code | (1 << (t - 1))


# ----- IEEE 754-2008 §3.6 Table 3.5 (confirmed in text, via a public transcription) ---------------
@pytest.mark.parametrize(
    "name, k, p, emax, bias, w, t",
    [
        ("float16", 16, 11, 15, 15, 5, 10),  # binary16
        ("float32", 32, 24, 127, 127, 8, 23),  # binary32
        ("float64", 64, 53, 1023, 1023, 11, 52),  # binary64
    ],
)
def test_ieee754_table_3_5(name, k, p, emax, bias, w, t):
    fmt = bitprism.FORMATS[name]
    assert fmt.bits == k and fmt.precision == p and fmt.emax == emax and fmt.bias == bias
    assert fmt.emin == 1 - emax  # IEEE 754-2008 §3.3: emin shall be 1 - emax
    assert fmt.exponent_bits == w and fmt.significand_bits == t == p - 1


# ----- FP8 paper (arXiv 2209.05433) Table 1 = OCP OFP8 rev 1.0 (2023-06-20 / 2023-12-01) -------
# (confirmed in text via two public transcriptions of the paper's Table 1 and the ONNX float8 page)
FP8_TABLE_1 = [
    # name, code, exact value, class
    ("float8_e4m3fn", 0x7E, Fraction(448), "normal"),  # max normal S.1111.110 = 1.75*2^8
    ("float8_e4m3fn", 0x08, Fraction(1, 2**6), "normal"),  # min normal S.0001.000 = 2^-6
    ("float8_e4m3fn", 0x07, Fraction(7, 8) / 2**6, "subnormal"),  # max subnorm 0.875*2^-6
    ("float8_e4m3fn", 0x01, Fraction(1, 2**9), "subnormal"),  # min subnorm S.0000.001 = 2^-9
    ("float8_e4m3fn", 0x00, Fraction(0), "zero"),  # S.0000.000
    ("float8_e5m2", 0x7B, Fraction(57344), "normal"),  # max normal S.11110.11 = 1.75*2^15
    ("float8_e5m2", 0x04, Fraction(1, 2**14), "normal"),  # min normal S.00001.00 = 2^-14
    ("float8_e5m2", 0x03, Fraction(3, 4) / 2**14, "subnormal"),  # max subnorm 0.75*2^-14
    ("float8_e5m2", 0x01, Fraction(1, 2**16), "subnormal"),  # min subnorm S.00000.01 = 2^-16
    ("float8_e5m2", 0x00, Fraction(0), "zero"),  # S.00000.00
]


@pytest.mark.parametrize("sign", [0, 0x80], ids=["pos", "neg"])
@pytest.mark.parametrize("name, code, value, kind", FP8_TABLE_1,
                         ids=[f"{n}-{c:#04x}" for n, c, _, _ in FP8_TABLE_1])
def test_fp8_table_1_encodings(name, code, value, kind, sign):
    fmt = bitprism.FORMATS[name]
    c = code | sign
    expected = -value if sign else value
    assert fmt.code_value(c) == expected
    got = bitprism.decode(c, fmt)
    assert got == float(expected) and math.copysign(1, got) == (-1 if sign else 1)
    f = bitprism.fields(np.array([c], dtype=fmt.code_dtype), fmt)
    assert bitprism.CodeClass(int(f.kind[0])).name == kind.upper()


def test_fp8_table_1_specials():
    e4m3, e5m2 = bitprism.FORMATS["float8_e4m3fn"], bitprism.FORMATS["float8_e5m2"]
    # E4M3: Infinities N/A; NaN S.1111.111 only (0x7F, 0xFF)
    assert not e4m3.has_inf
    assert [c for c in range(256) if e4m3.classify(c) == "nan"] == [0x7F, 0xFF]
    # E5M2: Inf S.11111.00 (0x7C, 0xFC); NaN S.11111.{01,10,11}
    assert [c for c in range(256) if e5m2.classify(c) == "inf"] == [0x7C, 0xFC]
    assert [c for c in range(256) if e5m2.classify(c) == "nan"] == [0x7D, 0x7E, 0x7F,
                                                                      0xFD, 0xFE, 0xFF]
    # biases 7 and 15 (FP8 paper §3.2 "IEEE-like exponent biases")
    assert (e4m3.bias, e5m2.bias) == (7, 15)


def test_fp8_paper_extra_e4m3_magnitudes():
    # FP8 paper §3.1 (confirmed in text via a verbatim quote in public notes): E4M3 gains 256,
    # 288, ..., 448 in the all-ones exponent binade (codes 0x78-0x7E); without this the maximum
    # would be 240, which is the max of the IEEE-like variant float8_e4m3.
    e4m3 = bitprism.FORMATS["float8_e4m3fn"]
    assert [e4m3.code_value(c) for c in range(0x78, 0x7F)] == [256, 288, 320, 352, 384, 416, 448]
    assert bitprism.FORMATS["float8_e4m3"].max_finite == 240


# ----- OCP Microscaling (MX) v1.0, Sept 2023 (Tables 4, 5, 7; via public transcriptions) ----------
@pytest.mark.parametrize(
    "name, bias, max_normal, min_normal, max_sub, min_sub",
    [
        # MX Table 4 (FP6), ml_dtypes numeric_limits comments; confirmed in text except max_sub
        ("float6_e2m3fn", 1, Fraction(15, 2), Fraction(1), Fraction(7, 8), Fraction(1, 8)),
        ("float6_e3m2fn", 3, Fraction(28), Fraction(1, 4), Fraction(3, 16), Fraction(1, 16)),
        # MX Table 5 (FP4)
        ("float4_e2m1fn", 1, Fraction(6), Fraction(1), Fraction(1, 2), Fraction(1, 2)),
    ],
)
def test_mx_element_formats(name, bias, max_normal, min_normal, max_sub, min_sub):
    fmt = bitprism.FORMATS[name]
    assert fmt.bias == bias and fmt.max_finite == max_normal
    assert fmt.smallest_normal == min_normal and fmt.smallest_subnormal == min_sub
    assert not fmt.has_inf and not fmt.has_nan  # MX: no Inf, no NaN in FP6/FP4
    max_sub_code = (1 << fmt.significand_bits) - 1
    assert fmt.code_value(max_sub_code) == max_sub


def test_mx_fp4_all_magnitudes():
    # OCP MX v1.0 Table 5 / ml_dtypes README "[0, 0.5, 1, 1.5, 2, 3, 4, 6]" (confirmed in text)
    fp4 = bitprism.FORMATS["float4_e2m1fn"]
    expected = [0, 0.5, 1, 1.5, 2, 3, 4, 6]
    assert [fp4.code_value(c) for c in range(8)] == [Fraction(v) for v in expected]
    assert list(bitprism.decode(np.arange(8, dtype=np.uint8), fp4)) == expected
    assert list(bitprism.decode(np.arange(8, 16, dtype=np.uint8), fp4)) == [-v for v in expected]


def test_mx_e8m0_scale():
    # OCP MX v1.0 Table 7 / §5.4.1 (confirmed in text): 8 exponent bits, no sign, no mantissa,
    # value 2^(E-127); range 2^-127 (0x00) .. 2^127 (0xFE); NaN 0xFF; no zero, no Inf.
    e8m0 = bitprism.FORMATS["float8_e8m0fnu"]
    assert (e8m0.bits, e8m0.exponent_bits, e8m0.significand_bits, e8m0.bias) == (8, 8, 0, 127)
    assert not e8m0.signed and not e8m0.has_inf and not e8m0.has_subnormals
    assert not e8m0.has_zero and not e8m0.has_negative_zero
    assert e8m0.code_value(0x00) == Fraction(1, 2**127) == e8m0.smallest_normal
    assert e8m0.code_value(0xFE) == 2**127 == e8m0.max_finite
    assert e8m0.nan_code == 0xFF and [c for c in range(256) if e8m0.classify(c) == "nan"] == [0xFF]
    dt = O.library_dtype("float8_e8m0fnu")
    for value in (1.0, 0.5, 2.0, 2.0**-126):  # 0x7F, 0x7E, 0x80, 0x01 from library
        code = int(O.library_encode(np.array([value]), dt)[0])
        assert e8m0.code_value(code) == Fraction(value)


# ----- IEEE 754 binary16/32/64 worked encodings (from library: struct, float.hex, fractions) ------
WORKED = [
    ("float16", 0x3C00, Fraction(1)),
    ("float16", 0x3C01, 1 + Fraction(1, 2**10)),
    ("float16", 0x3BFF, Fraction(2047, 2048)),
    ("float16", 0x7BFF, (2 - Fraction(1, 2**10)) * 2**15),
    ("float16", 0x0400, Fraction(1, 2**14)),
    ("float16", 0x03FF, Fraction(1023, 2**24)),
    ("float16", 0x0001, Fraction(1, 2**24)),
    ("float16", 0x3555, Fraction(1365, 4096)),
    ("float16", 0x2E66, Fraction(819, 8192)),
    ("float16", 0xC000, Fraction(-2)),
    ("float32", 0x3F800001, 1 + Fraction(1, 2**23)),
    ("float32", 0x3F7FFFFF, 1 - Fraction(1, 2**24)),
    ("float32", 0x7F7FFFFF, (2 - Fraction(1, 2**23)) * 2**127),
    ("float32", 0x00800000, Fraction(1, 2**126)),
    ("float32", 0x007FFFFF, (1 - Fraction(1, 2**23)) / 2**126),
    ("float32", 0x00000001, Fraction(1, 2**149)),
    ("float32", 0x34000000, Fraction(1, 2**23)),
    ("float32", 0x3DCCCCCD, Fraction(13421773, 134217728)),
    ("float32", 0x3EAAAAAB, Fraction(11184811, 33554432)),
    ("float32", 0x40490FDB, Fraction(13176795, 4194304)),
    ("float64", 0x3FF0000000000001, 1 + Fraction(1, 2**52)),
    ("float64", 0x3CB0000000000000, Fraction(1, 2**52)),
    ("float64", 0x7FEFFFFFFFFFFFFF, (2 - Fraction(1, 2**52)) * 2**1023),
    ("float64", 0x0010000000000000, Fraction(1, 2**1022)),
    ("float64", 0x0000000000000001, Fraction(1, 2**1074)),
    ("float64", 0x3FB999999999999A, Fraction(0.1)),
]
_STRUCT = {"float16": ">e", "float32": ">f", "float64": ">d"}


@pytest.mark.parametrize("name, code, exact", WORKED,
                         ids=[f"{n}-{c:#x}" for n, c, _ in WORKED])
def test_worked_encodings_section_1_4(name, code, exact):
    fmt = bitprism.FORMATS[name]
    fmt_char = _STRUCT[name]
    from_struct = struct.unpack(fmt_char, code.to_bytes(struct.calcsize(fmt_char), "big"))[0]
    assert Fraction(from_struct) == exact  # the table entry itself, checked with struct
    assert fmt.code_value(code) == exact
    assert bitprism.decode(code, fmt) == from_struct


# ----- TF32 (RISC-V BF16 chapter table, TensorFlow TF32 RFC, NVIDIA CUDA __nv_tf32) ---------------
def test_tf32_layout():
    tf32 = bitprism.FORMATS["tf32"]
    assert (tf32.exponent_bits, tf32.significand_bits, tf32.bias) == (8, 10, 127)
    assert tf32.bits == 19 and tf32.storage_bits == 32 and tf32.code_dtype == np.uint32
    assert tf32.dtype is None
    assert (tf32.precision, tf32.emax, tf32.emin) == (11, 127, -126)
    assert tf32.epsilon == Fraction(1, 2**10)  # eps 2^-10, derived from the 10 fraction bits
    # TF32 values are float32 values with the low 13 fraction bits zero: code << 13 is the
    # float32 pattern (from library: numpy float32 view)
    f32 = lambda bits: Fraction(float(np.array([bits], dtype=np.uint32).view(np.float32)[0]))
    assert tf32.max_finite == f32(0x7F7FE000)  # (2 - 2^-10) * 2^127
    assert tf32.inf_code << 13 == 0x7F800000
    for code in (0x00001, 0x003FF, 0x00400, 0x1FC00, 0x1FC01, 0x3FBFF, 0x5FC00):
        assert tf32.code_value(code) == f32(code << 13)


# ----- get_format ---------------------------------------------------------------------------------
@pytest.mark.parametrize(
    "alias, canonical",
    [  # common practice (framework and paper spellings)
        ("fp32", "float32"), ("bf16", "bfloat16"), ("fp16", "float16"), ("half", "float16"),
        ("e4m3", "float8_e4m3fn"),  # OCP E4M3 is the 'fn' variant (ml_dtypes README naming)
        ("e5m2", "float8_e5m2"), ("fp4", "float4_e2m1fn"), ("e8m0", "float8_e8m0fnu"),
        ("fp64", "float64"), ("FP16", "float16"), ("Float8-E4M3FN", "float8_e4m3fn"),
    ],
)
def test_get_format_aliases(alias, canonical):
    assert bitprism.get_format(alias) is bitprism.FORMATS[canonical]


@pytest.mark.parametrize("name", LIB)
def test_get_format_by_dtype(name):
    dt = O.library_dtype(name)
    assert bitprism.get_format(dt) is bitprism.FORMATS[name]


@pytest.mark.parametrize("name", LIB)
def test_get_format_by_scalar_type(name):
    # FormatLike admits a type: np.float16, ml_dtypes.bfloat16, ... as people pass them
    scalar_type = O.library_dtype(name).type
    assert bitprism.get_format(scalar_type) is bitprism.FORMATS[name]


def test_get_format_passes_formats_through():
    mine = bitprism.Format("mine", 3, 3)
    assert bitprism.get_format(mine) is mine


@pytest.mark.parametrize("typo, suggestion", [("bfloat61", "bfloat16"),
                                              ("float8_e4m3f", "float8_e4m3fn"),
                                              ("flaot16", "float16")])
def test_unknown_name_lists_close_matches(typo, suggestion):
    with pytest.raises(bitprism.BitprismError) as info:
        bitprism.get_format(typo)
    msg = str(info.value)
    assert repr(typo) in msg and repr(suggestion) in msg
    assert isinstance(info.value, ValueError)


def test_get_format_rejects_non_formats():
    with pytest.raises(bitprism.BitprismError, match="3.5"):
        bitprism.get_format(3.5)


# ----- hand-rolled formats ------------------------------------------------------------------------
CUSTOM = O.CUSTOM_LAYOUTS  # hand-rolled layouts, one convention each (tests/oracle.py)


def to_format(L: O.Layout) -> bitprism.Format:
    return bitprism.Format(L.name, L.w, L.t, L.bias, L.specials, L.signed, L.has_zero)


@pytest.mark.parametrize("L", CUSTOM, ids=[L.name for L in CUSTOM])
def test_custom_derived_properties_match_oracle(L):
    fmt = to_format(L)
    assert fmt.bits == L.bits and fmt.emax == L.emax and fmt.emin == L.emin
    assert fmt.max_finite == L.max_finite and fmt.smallest_normal == L.smallest_normal
    assert fmt.smallest_subnormal == L.smallest_positive
    assert fmt.epsilon == Fraction(1, 2**L.t)
    assert (fmt.has_inf, fmt.has_nan, fmt.has_subnormals) == (L.has_inf, L.has_nan,
                                                              L.has_subnormals)
    assert fmt.max_code == L.max_mag_code
    if L.has_nan:
        assert fmt.nan_code == L.nan(False)
    for code in range(1 << L.bits):
        if L.is_nan(code) or L.is_inf(code):
            assert fmt.classify(code) == ("nan" if L.is_nan(code) else "inf")
        else:
            assert fmt.code_value(code) == L.value(code)


def test_custom_defaults_are_ieee():
    mine = bitprism.Format("mine", 3, 3)
    assert (mine.bias, mine.specials, mine.signed, mine.has_zero) == (3, "ieee", True, True)
    assert mine.max_finite == 15  # (2 - 2^-3) * 2^3 (IEEE-style, from fractions)


@pytest.mark.parametrize(
    "args, kwargs, fragment",
    [
        (("w0", 0, 3), {}, "exponent_bits.*0"),  # widths out of range
        (("w12", 12, 3), {}, "exponent_bits.*12"),
        (("t53", 8, 53), {}, "significand_bits.*53"),
        (("tneg", 8, -1), {}, "significand_bits.*-1"),
        (("wbool", True, 3), {}, "exponent_bits"),
        (("big", 11, 3), {"bias": 0}, "bias"),  # emax 2046 does not fit float64
        (("small", 11, 3), {"bias": 2000}, "bias"),  # emin -1999 does not fit float64
        (("ieee0", 4, 0), {}, "ieee"),  # 'ieee' needs t >= 1 to tell NaN from Inf
        (("uz", 4, 3), {"specials": "fnuz", "signed": False}, "fnuz"),
        (("sp", 4, 3), {"specials": "weird"}, "'weird'"),
        (("nz", 4, 3), {"specials": "fn", "has_zero": False}, "has_zero"),
        (("", 4, 3), {}, "name"),
        (("st", 5, 10), {"storage_bits": 8}, "storage_bits"),
    ],
    ids=["w0", "w12", "t53", "t-1", "w-bool", "bias-high", "bias-low", "ieee-t0",
         "fnuz-unsigned", "specials", "signed-no-zero", "empty-name", "storage"],
)
def test_custom_format_validation(args, kwargs, fragment):
    with pytest.raises(bitprism.BitprismError, match=fragment) as info:
        bitprism.Format(*args, **kwargs)
    assert isinstance(info.value, ValueError)


def test_widest_custom_formats_that_fit_float64():
    # the float64 layout itself; 10-bit exponents with the extreme biases that still fit
    # float64's [emin, emax] = [-1022, 1023] (IEEE 754-2008 Table 3.5)
    assert bitprism.Format("f64", 11, 52).max_finite == bitprism.FORMATS["float64"].max_finite
    assert bitprism.Format("high", 10, 5, bias=-1).emax == 1023  # 1022 - (-1)
    assert bitprism.Format("low", 10, 5, bias=1023).emin == -1022  # 1 - 1023
    with pytest.raises(bitprism.BitprismError, match="bias"):
        bitprism.Format("high2", 10, 5, bias=-2)  # emax 1024
    with pytest.raises(bitprism.BitprismError, match="bias"):
        bitprism.Format("e11fn", 11, 52, specials="fn")  # emax 1024 with the all-ones binade


# ----- aliases (issue 16 item 17) -----------------------------------------------------------------
# Every alias and what it resolved to before the table existed: a script written against one
# version reads the same format in the next.
PINNED_ALIASES = {
    "fp64": "float64", "f64": "float64", "double": "float64", "binary64": "float64",
    "fp32": "float32", "f32": "float32", "single": "float32", "binary32": "float32",
    "float": "float32", "tensorfloat32": "tf32", "bf16": "bfloat16", "fp16": "float16",
    "f16": "float16", "half": "float16", "binary16": "float16", "e5m2": "float8_e5m2",
    "fp8_e5m2": "float8_e5m2", "e4m3": "float8_e4m3fn", "e4m3fn": "float8_e4m3fn",
    "fp8_e4m3": "float8_e4m3fn", "fp8": "float8_e4m3fn", "e3m4": "float8_e3m4",
    "e4m3fnuz": "float8_e4m3fnuz", "e5m2fnuz": "float8_e5m2fnuz",
    "e4m3b11fnuz": "float8_e4m3b11fnuz", "e5m3fnu": "float8_e5m3fnu", "e8m0": "float8_e8m0fnu",
    "e8m0fnu": "float8_e8m0fnu", "fp6": "float6_e2m3fn", "fp6_e2m3": "float6_e2m3fn",
    "e2m3": "float6_e2m3fn", "fp6_e3m2": "float6_e3m2fn", "e3m2": "float6_e3m2fn",
    "fp4": "float4_e2m1fn", "fp4_e2m1": "float4_e2m1fn", "e2m1": "float4_e2m1fn",
}


def test_alias_table_lists_every_alias_and_resolves_as_before():
    from bitprism.formats import format_aliases, format_key

    table = format_aliases()
    assert {a.name: a.format for a in table} == PINNED_ALIASES
    assert len({a.name for a in table}) == len(table)
    for a in table:
        assert a.name == format_key(a.name) and a.name not in bitprism.FORMATS
        assert bitprism.get_format(a.name) is bitprism.FORMATS[a.format]


def test_aliases_that_could_mean_another_format_say_what_they_mean():
    from bitprism.formats import format_aliases

    notes = {a.name: a.note for a in format_aliases() if a.note}
    assert set(notes) == {"float", "e4m3", "fp8_e4m3", "fp8", "fp6"}
    # e4m3 is the OCP E4M3 (no Inf, max 448: OFP8 rev 1.0); float8_e4m3 the IEEE-style one
    # (max 240); the figures come from ml_dtypes' finfo here
    assert float(ml_dtypes.finfo(ml_dtypes.float8_e4m3fn).max) == 448
    assert float(ml_dtypes.finfo(ml_dtypes.float8_e4m3).max) == 240
    for name in ("e4m3", "fp8_e4m3", "fp8"):
        assert "without Inf (largest 448)" in notes[name] and "float8_e4m3" in notes[name]
    # "float" is C's float; Python's float is numpy's float64 (np.dtype(float))
    assert bitprism.get_format("float").name == "float32"
    assert bitprism.get_format(float).name == np.dtype(float).name == "float64"
    assert "get_format(float) gives float64" in notes["float"]
    assert "fp6_e3m2" in notes["fp6"]


def test_format_aliases_of_one_format():
    from bitprism.formats import format_aliases

    assert [a.name for a in format_aliases("float16")] == ["fp16", "f16", "half", "binary16"]
    assert [a.name for a in format_aliases("e4m3")] == ["e4m3", "e4m3fn", "fp8_e4m3", "fp8"]
    assert format_aliases("float8_e4m3") == ()
    with pytest.raises(bitprism.BitprismError, match="unknown format 'fp17'"):
        format_aliases("fp17")
