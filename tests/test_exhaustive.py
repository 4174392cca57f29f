"""Every code of every format up to 16 bits, the way ml_dtypes' float8_test loops over all
bit patterns: decode, field split, encode round trip, next_up/next_down walks, ULP and
ulp_distance. Built-ins are compared with ml_dtypes 0.7 / numpy 2.4 (from library); custom
layouts and everything the libraries lack with the exact oracle in tests/oracle.py.
"""

from __future__ import annotations

import math
import warnings
from fractions import Fraction

import numpy as np
import pytest

import bitprism
import oracle as O

SMALL_BUILTINS = [n for n in O.BUILTIN_LAYOUTS if O.BUILTIN_LAYOUTS[n].bits <= 16]
CASES = [(n, O.BUILTIN_LAYOUTS[n]) for n in SMALL_BUILTINS] + [
    (L.name, L) for L in O.CUSTOM_LAYOUTS if L.bits <= 16
]
IDS = [n for n, _ in CASES]

CLASS_NAMES = {  # oracle class -> CodeClass member name
    "zero": "ZERO", "subnormal": "SUBNORMAL", "normal": "NORMAL", "infinite": "INFINITE",
    "quiet_nan": "QUIET_NAN", "signaling_nan": "SIGNALING_NAN",
}


def _format(name: str, L: O.Layout) -> bitprism.Format:
    if name in bitprism.FORMATS:
        return bitprism.FORMATS[name]
    return bitprism.Format(L.name, L.w, L.t, L.bias, L.specials, L.signed, L.has_zero)


def _quiet(fn, *args, **kwargs):
    """Call the engine with RuntimeWarnings silenced; test_casts checks warnings separately."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        return fn(*args, **kwargs)


@pytest.fixture(scope="module", params=CASES, ids=IDS)
def case(request):
    name, L = request.param
    fmt = _format(name, L)
    codes = np.arange(L.n_codes, dtype=fmt.code_dtype)
    expected = np.array([L.to_float(int(c)) for c in codes])  # oracle (checked vs libraries)
    dt = O.library_dtype(name) if name in O.BUILTIN_LAYOUTS else None
    if dt is not None:
        lib = O.library_decode(codes, dt)  # from library
        assert np.array_equal(lib, expected, equal_nan=True)  # the oracle agrees (test_oracle)
    values = np.array([float(v) for v in L.ordered_values])
    return name, L, fmt, codes, expected, values


def test_codes_fit_code_dtype(case):
    name, L, fmt, codes, *_ = case
    assert fmt.bits == L.bits and np.iinfo(fmt.code_dtype).max >= L.n_codes - 1


def test_decode_every_code(case):
    name, L, fmt, codes, expected, _ = case
    got = bitprism.decode(codes, fmt)
    assert got.dtype == np.float64 and got.shape == codes.shape
    nan = np.isnan(expected)
    assert np.array_equal(np.isnan(got), nan)
    assert np.array_equal(got[~nan], expected[~nan])
    assert np.array_equal(np.signbit(got[~nan]), np.signbit(expected[~nan]))  # -0.0 included
    if L.signed and L.specials in ("ieee", "fn"):  # NaNs with a meaningful sign bit
        assert np.array_equal(np.signbit(got[nan]), np.signbit(expected[nan]))


def test_decode_scalar_codes(case):
    name, L, fmt, codes, expected, _ = case
    for c in list(range(min(L.n_codes, 64))) + [L.max_mag_code, L.n_codes - 1]:
        got = bitprism.decode(c, fmt)
        assert isinstance(got, float)
        assert (math.isnan(got) and math.isnan(expected[c])) or (
            got == expected[c] and math.copysign(1, got) == math.copysign(1, expected[c]))


def test_fields_round_trip(case):
    name, L, fmt, codes, *_ = case
    f = bitprism.fields(codes, fmt)
    sign = np.asarray(f.sign).astype(np.int64)
    e = np.asarray(f.exponent).astype(np.int64)
    t = np.asarray(f.significand).astype(np.int64)
    assert sign.min() >= 0 and sign.max() <= int(L.signed)
    assert e.min() >= 0 and e.max() <= L.all_ones_exponent
    assert t.min() >= 0 and t.max() <= L.frac_mask
    rebuilt = (sign << (L.w + L.t)) | (e << L.t) | t
    assert np.array_equal(rebuilt, codes.astype(np.int64))


def test_fields_kind_and_payload(case):
    name, L, fmt, codes, *_ = case
    f = bitprism.fields(codes, fmt)
    kinds = [bitprism.CodeClass(int(k)).name for k in np.asarray(f.kind)]
    # IEEE formats: 754-2008 §6.2.1 decides quiet vs signaling; the single NaN of the
    # 'fn'/'fnuz' conventions counts as quiet (bitprism CodeClass documentation).
    expected = []
    for c in codes:
        cls = CLASS_NAMES[L.classify(int(c))]
        if cls.endswith("_NAN") and L.specials != "ieee":
            cls = "QUIET_NAN"
        expected.append(cls)
    assert kinds == expected
    payload = np.asarray(f.payload).astype(np.int64)
    is_nan = np.array([L.is_nan(int(c)) for c in codes])
    if L.specials == "ieee":  # trailing bits below the quiet bit (754-2008 §6.2.1)
        exp_payload = np.where(is_nan, codes.astype(np.int64) & ((1 << (L.t - 1)) - 1), 0)
        assert np.array_equal(payload, exp_payload)
    else:
        assert not payload.any()


def test_encode_decode_round_trip(case):
    name, L, fmt, codes, expected, _ = case
    nan = np.isnan(expected)
    got = _quiet(bitprism.encode, expected, fmt)
    assert got.dtype == fmt.code_dtype
    assert np.array_equal(got[~nan], codes[~nan])
    for c_in, c_out in zip(codes[nan], got[nan]):  # NaN codes -> a NaN code, same sign
        assert L.is_nan(int(c_out))
        if L.signed and L.specials in ("ieee", "fn"):
            assert L.is_negative(int(c_out)) == L.is_negative(int(c_in))


def test_encode_scalar_round_trip(case):
    name, L, fmt, codes, expected, _ = case
    step = max(1, L.n_codes // 2048)
    for c in range(0, L.n_codes, step):
        if L.is_nan(c):
            continue
        v = float(expected[c])
        got = bitprism.encode(v, fmt)
        assert isinstance(got, int) and got == c, (v, hex(got), hex(c))
        if math.isfinite(v) and v != 0:
            assert bitprism.encode(Fraction(v), fmt) == c  # exact rational input


def test_next_up_walks_the_whole_value_set(case):
    name, L, fmt, codes, expected, values = case
    assert np.array_equal(bitprism.next_up(values[:-1], fmt), values[1:])
    top = bitprism.next_up(values[-1:], fmt)[0]
    assert top == math.inf if L.has_inf else math.isnan(top)  # next_up(max) ('fn': NaN)


def test_next_down_walks_the_whole_value_set(case):
    name, L, fmt, codes, expected, values = case
    assert np.array_equal(bitprism.next_down(values[1:], fmt), values[:-1])
    bottom = bitprism.next_down(values[:1], fmt)[0]
    if L.signed and L.has_inf:
        assert bottom == -math.inf
    else:  # -max of a format without -Inf; 0 or 2^emin of an unsigned format
        assert math.isnan(bottom)


def test_next_up_down_from_between_values(case):
    name, L, fmt, codes, expected, values = case
    mids = (values[:-1] + values[1:]) / 2  # exact in float64: at most 11 significant bits
    assert np.array_equal(bitprism.next_up(mids, fmt), values[1:])
    assert np.array_equal(bitprism.next_down(mids, fmt), values[:-1])


def test_next_up_down_at_zero_and_infinities(case):
    name, L, fmt, codes, expected, values = case
    tiny = float(L.smallest_positive)
    if L.has_zero:
        for z in (0.0, -0.0):  # IEEE 754-2008 §5.3.1: nextUp(+-0) = smallest positive
            assert bitprism.next_up(np.array([z]), fmt)[0] == tiny
            down = bitprism.next_down(np.array([z]), fmt)[0]
            assert down == -tiny if L.signed else math.isnan(down)
    nan = bitprism.next_up(np.array([math.nan]), fmt)[0]
    assert math.isnan(nan)
    if L.has_inf:  # nextUp(+Inf) = +Inf, nextUp(-Inf) = -max (754-2008 §5.3.1)
        up = bitprism.next_up(np.array([math.inf, -math.inf]), fmt)
        assert up[0] == math.inf and up[1] == -float(L.max_finite)
        down = bitprism.next_down(np.array([math.inf, -math.inf]), fmt)
        assert down[0] == float(L.max_finite) and down[1] == -math.inf


def test_ulp_every_value(case):
    name, L, fmt, codes, expected, values = case
    finite = expected[np.isfinite(expected)]
    got = bitprism.ulp(finite, fmt)
    want = np.array([O.ulp_of_float(float(v), L) for v in finite])  # Handbook definition
    assert np.array_equal(got, want)
    for v in finite[:: max(1, finite.size // 500)]:  # the float shortcut is the exact oracle
        assert O.ulp_of_float(float(v), L) == O.ulp(Fraction(float(v)), L)


def test_ulp_beyond_the_range(case):
    name, L, fmt, codes, expected, values = case
    top = float(L.max_finite)
    beyond = np.array([top * 1.5, top * 4, -top * 64])  # e capped at emax (Handbook)
    assert np.array_equal(bitprism.ulp(beyond, fmt),
                          np.full(3, float(Fraction(2) ** (L.emax - L.t))))
    assert bitprism.ulp(np.array([0.0]), fmt)[0] == float(L.smallest_positive)  # ulp(0)
    assert np.isnan(bitprism.ulp(np.array([math.nan]), fmt)).all()


def test_ulp_distance_between_neighbours(case):
    name, L, fmt, codes, expected, values = case
    assert np.array_equal(bitprism.ulp_distance(values[:-1], values[1:], fmt),
                          np.ones(len(values) - 1))
    assert np.array_equal(bitprism.ulp_distance(values[1:], values[:-1], fmt),
                          -np.ones(len(values) - 1))  # signed
    span = bitprism.ulp_distance(values[:1], values[-1:], fmt)[0]
    assert span == len(values) - 1
    if L.has_zero and L.signed:  # +0 and -0 count as one value
        assert bitprism.ulp_distance(np.array([-0.0]), np.array([0.0]), fmt)[0] == 0
        tiny = float(L.smallest_positive)
        assert bitprism.ulp_distance(np.array([-tiny]), np.array([tiny]), fmt)[0] == 2
