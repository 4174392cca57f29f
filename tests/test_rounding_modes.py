"""Every rounding direction x overflow x subnormal option against the exact oracle.

Libraries implement only roundTiesToEven with their own overflow convention, so here the
expected codes come from tests/oracle.py (exact Fractions and integers, itself checked against
ml_dtypes in test_oracle.py). Rounding names: IEEE 754-2008 §4.3; overflow after rounding with
an unbounded exponent: §7.4; stochastic rounding: Gupta et al., ICML 2015, §3 (unbiasedness
confirmed in text via a public summary; their exact formula from memory) and Higham & Pranesh,
SIAM J. Sci. Comput. 2019, chop option round = 5; SAT/NONSAT: OCP OFP8 rev 1.0 as tabulated
on the ONNX float8 page (OFP8 "Table 3" from memory).
"""

from __future__ import annotations

import math
import tracemalloc
import warnings
from fractions import Fraction
from functools import lru_cache

import numpy as np
import pytest

import bitprism
import oracle as O
from bitprism.numerics.kernel import CHUNK

MODES = O.DETERMINISTIC_ROUNDINGS
FORMAT_NAMES = ["float16", "bfloat16", "tf32", "float8_e4m3fn", "float8_e5m2",
                "float8_e4m3fnuz", "float8_e5m3fnu", "float8_e8m0fnu", "float6_e3m2fn",
                "float4_e2m1fn", "mine", "x", "fnuz35"]
_CUSTOM = {L.name: L for L in O.CUSTOM_LAYOUTS}


def layout(name: str) -> O.Layout:
    return O.BUILTIN_LAYOUTS.get(name) or _CUSTOM[name]


def fmt_of(name: str) -> bitprism.Format:
    if name in bitprism.FORMATS:
        return bitprism.FORMATS[name]
    L = _CUSTOM[name]
    return bitprism.Format(L.name, L.w, L.t, L.bias, L.specials, L.signed, L.has_zero)


def encode(x, name, **options):
    with warnings.catch_warnings():  # warnings are checked in test_casts.py
        warnings.simplefilter("ignore", RuntimeWarning)
        return bitprism.encode(x, fmt_of(name), **options)


@lru_cache(maxsize=None)
def samples(name: str) -> np.ndarray:
    """Edge, tie and near-tie values plus values spread over (and beyond) the range."""
    L = layout(name)
    rng = np.random.default_rng(sum(map(ord, name)))
    return np.concatenate([O.edge_values(L, rng, 120), O.spread_values(L, rng, 2500)])


def _mismatches(x, got, want):
    bad = np.flatnonzero(got.astype(np.int64) != np.asarray(want, dtype=np.int64))
    return bad.size, [(float(x[i]), float(x[i]).hex(), hex(int(got[i])), hex(int(want[i])))
                      for i in bad[:5]]


@pytest.mark.parametrize("subnormals", O.SUBNORMALS)
@pytest.mark.parametrize("overflow", O.OVERFLOWS)
@pytest.mark.parametrize("rounding", MODES)
@pytest.mark.parametrize("name", FORMAT_NAMES)
def test_array_cast_matches_oracle(name, rounding, overflow, subnormals):
    L, x = layout(name), samples(name)
    got = encode(x, name, rounding=rounding, overflow=overflow, subnormals=subnormals)
    want = [O.encode(float(v), L, rounding, overflow, subnormals) for v in x]
    count, first = _mismatches(x, got, want)
    assert count == 0, f"{count} of {x.size} differ (input, hex, got, expected): {first}"


def _scalar_inputs(L: O.Layout) -> list:
    """Python ints, Fractions (non-dyadic, and ties nudged by far less than a float64 ulp)
    and floats; exactness matters: e.g. 1 + 2^-11 + 2^-70 must round up in float16."""
    rng = np.random.default_rng(L.bits)
    ints = [0, 1, -3, 7, 2**200, -(2**2000), 10**400, -(10**30)]
    fracs = [Fraction(1, 3), Fraction(-1, 10), Fraction(1, 10**400), Fraction(-7, 10**50),
             Fraction(10**40 + 1, 3)]
    for m in O._mag_pairs(L, rng, 12):
        mid = (L.mag_value(m) + L.mag_value(m + 1)) / 2
        nudge = mid / 2**80 if mid else Fraction(1, 2**2000)
        fracs += [mid, mid + nudge, mid - nudge, -(mid + nudge), -(mid - nudge)]
    num = rng.integers(1, 10**9, 10)
    den = rng.integers(1, 10**9, 10)
    fracs += [Fraction(int(a), int(b)) * Fraction(2) ** int(e)
              for a, b, e in zip(num, den, rng.integers(L.emin - L.t - 3, L.emax + 3, 10))]
    floats = [float(v) for v in samples(L.name if L.name in FORMAT_NAMES else "mine")[:40]]
    return ints + fracs + floats


@pytest.mark.parametrize("rounding", MODES)
@pytest.mark.parametrize("name", FORMAT_NAMES)
def test_scalar_inputs_match_oracle(name, rounding):
    L, fmt = layout(name), fmt_of(name)
    inputs = _scalar_inputs(L)
    for overflow in O.OVERFLOWS:
        for subnormals in O.SUBNORMALS:
            for v in inputs:
                want = O.encode(v, L, rounding, overflow, subnormals)
                got = bitprism.encode(v, fmt, rounding=rounding, overflow=overflow,
                                      subnormals=subnormals)
                assert isinstance(got, int), type(got)
                assert got == want, (v, overflow, subnormals, hex(got), hex(want))


@pytest.mark.parametrize("rounding", MODES)
@pytest.mark.parametrize("name", ["float16", "float8_e4m3fn", "float8_e4m3fnuz", "float8_e5m3fnu",
                                  "float8_e8m0fnu", "float4_e2m1fn", "x"])
def test_exact_value_inputs(name, rounding):
    # bitprism.ExactValue (kind, sign bit, magnitude) carries what a Fraction cannot: -0,
    # +-Inf and +-NaN; the oracle gets the same value as a float or a special string.
    L, fmt = layout(name), fmt_of(name)
    cases = [
        (bitprism.ExactValue("finite", True, Fraction(0)), -0.0),
        (bitprism.ExactValue("finite", False, Fraction(0)), 0.0),
        (bitprism.ExactValue("finite", True, Fraction(1, 3)), Fraction(-1, 3)),
        (bitprism.ExactValue("finite", False, Fraction(10**30 + 1, 7)), Fraction(10**30 + 1, 7)),
        (bitprism.ExactValue("inf", False), "inf"),
        (bitprism.ExactValue("inf", True), "-inf"),
        (bitprism.ExactValue("nan", False), "nan"),
        (bitprism.ExactValue("nan", True), "-nan"),
    ]
    for overflow in O.OVERFLOWS:
        for value, same in cases:
            got = bitprism.encode(value, fmt, rounding=rounding, overflow=overflow)
            assert got == O.encode(same, L, rounding, overflow), (value, overflow, hex(got))


def test_exact_input_is_not_rounded_through_float64():
    # 1 + 2^-11 + 2^-70: float64 would make it the exact tie 1 + 2^-11 (-> 1.0 under RNE);
    # one rounding of the rational gives 1 + 2^-10 (IEEE 754-2008 §4.3: one rounding).
    x = 1 + Fraction(1, 2**11) + Fraction(1, 2**70)
    assert float(x) == 1 + 2**-11
    assert bitprism.encode(x, "float16") == 0x3C01
    assert bitprism.encode(float(x), "float16") == 0x3C00


# ----- SAT vs NONSAT (OCP OFP8 rev 1.0, via the ONNX float8 page tables) --------------------------
# NONSAT = overflow "standard"; SAT = overflow "saturate"; rounding RNE in both. "nan" = a NaN
# code of that format with the given sign. Confirmed in text (the ONNX float8 page tables for
# E4M3FN / E5M2).
OFP8_TABLE = [
    # input, E4M3 SAT, E4M3 NONSAT, E5M2 SAT, E5M2 NONSAT
    (math.inf, 0x7E, 0x7F, 0x7B, 0x7C),
    (-math.inf, 0xFE, 0xFF, 0xFB, 0xFC),
    (1e6, 0x7E, 0x7F, 0x7B, 0x7C),  # rounds above +max
    (-1e6, 0xFE, 0xFF, 0xFB, 0xFC),  # rounds below -max (E4M3 NONSAT: NaN, sign kept 0xFF)
    (480.0, 0x7E, 0x7F, 0x60, 0x60),  # above E4M3 max; E5M2 tie 448 <-> 512 -> 512 (even)
    (61440.0, 0x7E, 0x7F, 0x7B, 0x7C),  # E5M2 tie 57344 <-> 2^16 goes to the even (Inf)
    (0.0, 0x00, 0x00, 0x00, 0x00),
    (-0.0, 0x80, 0x80, 0x80, 0x80),
    (1.0, 0x38, 0x38, 0x3C, 0x3C),  # otherwise: RNE
]


@pytest.mark.parametrize("x, e4m3_sat, e4m3_nonsat, e5m2_sat, e5m2_nonsat", OFP8_TABLE,
                         ids=[repr(row[0]) for row in OFP8_TABLE])
def test_ofp8_saturation_table(x, e4m3_sat, e4m3_nonsat, e5m2_sat, e5m2_nonsat):
    for name, sat, nonsat in (("float8_e4m3fn", e4m3_sat, e4m3_nonsat),
                              ("float8_e5m2", e5m2_sat, e5m2_nonsat)):
        assert bitprism.encode(x, name, overflow="saturate") == sat
        assert bitprism.encode(x, name, overflow="standard") == nonsat
        arr = encode(np.array([x, x]), name, overflow="saturate")
        assert list(arr) == [sat, sat]


@pytest.mark.parametrize("overflow", O.OVERFLOWS)
@pytest.mark.parametrize("name", ["float8_e4m3fn", "float8_e5m2"])
def test_ofp8_nan_stays_nan(name, overflow):
    L = layout(name)
    for x in (math.nan, -math.nan):
        code = bitprism.encode(x, name, overflow=overflow)
        assert L.is_nan(code) and L.is_negative(code) == (math.copysign(1, x) < 0)


# ----- stochastic rounding (Gupta et al. 2015 §3; Higham & Pranesh 2019 chop) ---------------------
N_DRAWS = 200_000


@pytest.mark.parametrize(
    "name, x, down, up, p",
    [  # check values from library arithmetic; E[SR(x)] = x in every case
        ("float16", 1 + 2.0**-12, 1.0, 1 + 2.0**-10, 0.25),
        ("bfloat16", 1 + 2.0**-10, 1.0, 1 + 2.0**-7, 0.125),
        ("float8_e4m3fn", 1.03125, 1.0, 1.125, 0.25),
        ("float4_e2m1fn", 2.5, 2.0, 3.0, 0.5),
    ],
)
def test_stochastic_probability(name, x, down, up, p):
    _check_stochastic(name, np.full(N_DRAWS, x), x, down, up, p)


@pytest.mark.parametrize("dtype", [np.float32, np.float64], ids=["f32", "f64"])
@pytest.mark.parametrize(
    "name, x, down, up, p",
    [  # subnormal and underflow range: the same Higham-Pranesh definition (chop round = 5),
       # where the gap is the subnormal step 2^(emin - t) (fp16: 2^-24, IEEE 754-2008
       # Table 3.5; E4M3: 2^-9, FP8 paper Table 1); probabilities from library arithmetic
       # (fractions)
        ("float16", 1.25 * 2.0**-24, 2.0**-24, 2.0**-23, 0.25),
        ("float16", 2.0**-26, 0.0, 2.0**-24, 0.25),
        ("float16", 3.5 * 2.0**-24, 3 * 2.0**-24, 4 * 2.0**-24, 0.5),
        ("float8_e4m3fn", 2.0**-10 + 2.0**-12, 0.0, 2.0**-9, 0.625),
    ],
)
def test_stochastic_probability_below_the_normal_range(name, x, down, up, p, dtype):
    _check_stochastic(name, np.full(N_DRAWS, x, dtype), x, down, up, p)


def _check_stochastic(name, data, x, down, up, p):
    codes = encode(data, name, rounding="stochastic", seed=20240611)
    values = bitprism.decode(codes, name)
    assert set(np.unique(values)) <= {down, up}
    observed = float(np.mean(values == up))
    sigma = math.sqrt(p * (1 - p) / N_DRAWS)
    # 5 sigma: a correct implementation fails with probability < 6e-7
    assert abs(observed - p) < 5 * sigma, (observed, p)
    # unbiased: E[SR(x)] = x; the sample mean's standard deviation is (up - down) * sigma
    assert abs(float(np.mean(values)) - x) < 5 * (up - down) * sigma
    # and negative inputs mirror: -x rounds away from zero with the same probability
    neg = bitprism.decode(encode(np.full(N_DRAWS, -x), name, rounding="stochastic", seed=7), name)
    assert abs(float(np.mean(neg == -up)) - p) < 5 * sigma


@pytest.mark.parametrize("subnormals", O.SUBNORMALS)
@pytest.mark.parametrize("overflow", O.OVERFLOWS)
@pytest.mark.parametrize("name", ["float16", "bfloat16", "float8_e4m3fn", "float8_e5m2",
                                  "float8_e8m0fnu", "float4_e2m1fn", "mine"])
def test_stochastic_picks_a_neighbour_without_bias(name, overflow, subnormals):
    L, x = layout(name), samples(name)
    got = encode(x, name, rounding="stochastic", overflow=overflow, subnormals=subnormals,
                 seed=5).astype(np.int64)
    triples = [O.stochastic(float(v), L, overflow, subnormals) for v in x]
    down = np.array([d for d, _, _ in triples])
    up = np.array([u for _, u, _ in triples])
    p = np.array([float(q) for _, _, q in triples])
    ok = (got == down) | (got == up)
    assert ok.all(), [(x[i], hex(got[i]), hex(down[i]), hex(up[i])) for i in
                      np.flatnonzero(~ok)[:5]]
    exact = p == 0
    assert np.array_equal(got[exact], down[exact])  # representable inputs are not moved
    # the up-decisions follow the probabilities: sum(went_up - p) is a sum of independent
    # zero-mean terms with variance p(1 - p); 5 sigma bound. Weighted by (p - 1/2) as well,
    # which catches round-to-nearest posing as stochastic rounding.
    two = up != down  # the decision is visible (saturation or flushing can merge them)
    went_up, p = (got[two] == up[two]).astype(float), p[two]
    var = p * (1 - p)
    sd = math.sqrt(var.sum())
    if sd > 0:
        assert abs((went_up - p).sum()) < 5 * sd + 1e-9
        w = p - 0.5
        assert abs(((went_up - p) * w).sum()) < 5 * math.sqrt((var * w * w).sum()) + 1e-9


def test_stochastic_seed_reproducible():
    x = np.full(1000, 2.5)  # FP4: 2 or 3 with probability 1/2 each (from library arithmetic)
    a = encode(x, "float4_e2m1fn", rounding="stochastic", seed=1)
    b = encode(x, "float4_e2m1fn", rounding="stochastic", seed=1)
    c = encode(x, "float4_e2m1fn", rounding="stochastic", seed=2)
    assert np.array_equal(a, b)
    assert not np.array_equal(a, c)  # equal by chance with probability 2^-1000
    s1 = [bitprism.encode(2.5, "float4_e2m1fn", rounding="stochastic", seed=s)
          for s in range(64)]
    s2 = [bitprism.encode(2.5, "float4_e2m1fn", rounding="stochastic", seed=s)
          for s in range(64)]
    assert s1 == s2 and set(s1) == {0x4, 0x5}  # both neighbours occur (fails w.p. 2^-63)


def test_stochastic_scalar_inputs_pick_a_neighbour():
    L = layout("float16")
    for v in (Fraction(1, 3), 1 + Fraction(1, 2**12), Fraction(-7, 10**6), 70000, -65519.5):
        down, up, _ = O.stochastic(v, L)
        for seed in range(8):
            assert bitprism.encode(v, "float16", rounding="stochastic", seed=seed) in {down, up}


@pytest.mark.parametrize("rounding", list(bitprism.ROUNDING_MODES))
def test_extra_memory_is_the_fixed_scratch(rounding: str) -> None:
    # encode works in chunks of kernel.CHUNK elements with reused buffers (design.md: memory
    # stays the output plus a fixed scratch): five chunk-sized float32 buffers (a, b, c, side,
    # the low-range correction's), the random words of stochastic rounding and a bool mask,
    # whatever the input size. Chunk-sized temporaries in numpy calls would exceed it.
    rng = np.random.default_rng(23)  # invented data: exponents over float16's whole range
    x = (rng.uniform(1, 2, 1 << 20) * np.exp2(rng.integers(-30, 20, 1 << 20))).astype(np.float32)
    buffers = 6 if rounding == "stochastic" else 5
    budget = buffers * CHUNK * 4 + CHUNK + (128 << 10)  # + 128 KiB for small objects
    peaks = []
    for n in (x.size // 4, x.size):
        bitprism.encode(x[:100], "float16", rounding, seed=1)  # warm caches (plans, tables)
        tracemalloc.start()
        out = bitprism.encode(x[:n], "float16", rounding, seed=1)
        peak = tracemalloc.get_traced_memory()[1]
        tracemalloc.stop()
        peaks.append(peak - out.nbytes)
    assert max(peaks) <= budget, (peaks, budget)
    assert abs(peaks[1] - peaks[0]) <= 64 << 10  # independent of the input size


@pytest.mark.parametrize("target", ["float64", "float32"])
@pytest.mark.parametrize("mode", ["roundTiesToEven", "roundTiesToAway", "roundTowardPositive",
                                  "roundTowardNegative", "roundTowardZero", "stochastic"])
@pytest.mark.parametrize("overflow", ["standard", "saturate"])
def test_casts_into_the_sources_own_precision(target: str, mode: str, overflow: str) -> None:
    """float32/float64 data cast into formats of the source's own precision through the
    kernel's general path (saturate or a directed mode keep it off the copy shortcut): every
    value is representable, so the result is the input (stochastic rounding once asserted that
    it had random bits it never drew there)."""
    x = np.array([0.0, -0.0, 1e-45, -3e-39, 1.5, -2.75, 3.4e38, np.inf, -np.inf], np.float32)
    for data in (x, x.astype(np.float64)):
        if target == "float32" and data.dtype == np.float64:
            data = data.astype(np.float32).astype(np.float64)  # values float32 holds exactly
        got = bitprism.cast(data, target, rounding=mode, overflow=overflow, seed=1)
        want = data.astype(np.float64)
        if overflow == "saturate":  # OCP saturating conversion: Inf inputs become +-max
            top = float(bitprism.get_format(target).max_finite)
            want = np.clip(want, -top, top)
        assert np.array_equal(got, want) and np.array_equal(np.signbit(got), np.signbit(want))
