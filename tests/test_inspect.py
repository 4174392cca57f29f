"""next_up / next_down / ulp / ulp_distance: IEEE 754-2019 §5.3.1 at the signed zero, and one
meaning of a scalar on every path.

* nextUp of the negative number of least magnitude is -0 and nextDown of the positive one is
  +0 (§5.3.1: nextDown(x) = -nextUp(-x)), in every format with a negative zero. Checked bit for
  bit (±0 told apart) on every code of every format up to 16 bits against numpy's nextafter
  (float16) and ml_dtypes' nextafter (its formats), for the vector path and for its scalar twin
  ``inspect.neighbour_codes``.
* A scalar argument is taken exactly (text read by ``parse``): the exact path must equal the
  vector path on every value of float16, bfloat16 and the 8-bit formats and on every midpoint
  between neighbours, while ``"0.1"`` (1/10) and ``0.1`` (the binary double) differ where they
  must. Arrays of text are refused.
"""

from __future__ import annotations

import math
import struct
import warnings
from fractions import Fraction

import ml_dtypes
import numpy as np
import pytest

import bitprism
import oracle as O
from bitprism.errors import BitprismError, ParseError, UnsupportedInputError
from bitprism.formats import FORMATS, Format
from bitprism.numerics.inspect import neighbour_codes, next_down, next_up, ulp, ulp_distance

SMALL = [(n, O.BUILTIN_LAYOUTS[n]) for n in O.BUILTIN_LAYOUTS if O.BUILTIN_LAYOUTS[n].bits <= 16]
SMALL += [(L.name, L) for L in O.CUSTOM_LAYOUTS if L.bits <= 16]
IDS = [n for n, _ in SMALL]
LIBRARY = [(n, L) for n, L in SMALL if n in O.BUILTIN_LAYOUTS and O.library_dtype(n) is not None]


def _format(name: str, L: O.Layout) -> Format:
    if name in FORMATS:
        return FORMATS[name]
    return Format(L.name, L.w, L.t, L.bias, L.specials, L.signed, L.has_zero)


def _bits(x: np.ndarray) -> np.ndarray:
    """float64 bit patterns, every NaN as one pattern (so -0 and +0 differ, NaNs compare)."""
    x = np.asarray(x, dtype=np.float64)
    return np.where(np.isnan(x), np.uint64(0x7FF8000000000000), x.view(np.uint64))


def _float_bits(v: float) -> int:
    return 0x7FF8000000000000 if math.isnan(v) else struct.unpack("<Q", struct.pack("<d", v))[0]


def _non_nan_codes(fmt: Format) -> np.ndarray:
    codes = np.arange(1 << fmt.bits, dtype=np.uint64)
    return codes[~np.isnan(bitprism.decode(codes, fmt))]


# ----- nextUp(-least) = -0, checked against the libraries on every code --------------------------
@pytest.mark.parametrize(("name", "L"), LIBRARY, ids=[n for n, _ in LIBRARY])
def test_neighbours_match_library_nextafter_bit_for_bit(name: str, L: O.Layout) -> None:
    fmt = FORMATS[name]
    dt = O.library_dtype(name)
    codes = _non_nan_codes(fmt)
    lib_values = codes.astype(np.dtype(f"u{dt.itemsize}")).view(dt)
    # toward +Inf / -Inf, or the far ends where the format has no Inf (nextafter(x, x) = x there)
    high = math.inf if L.has_inf else float(L.max_finite)
    low = -math.inf if L.has_inf else (-float(L.max_finite) if L.signed else float(L.ordered_values[0]))
    with warnings.catch_warnings(), np.errstate(all="ignore"):
        warnings.simplefilter("ignore", RuntimeWarning)
        toward_up = np.full(codes.size, high).astype(dt)
        toward_down = np.full(codes.size, low).astype(dt)
        lib_up = O.library_decode(np.nextafter(lib_values, toward_up).view(f"u{dt.itemsize}"), dt)
        lib_down = O.library_decode(np.nextafter(lib_values, toward_down).view(f"u{dt.itemsize}"), dt)
    values = bitprism.decode(codes, fmt)
    has_up, has_down = values != high, values != low  # at the far end the library stays put
    # the vector path (numpy nextafter for float16, ml_dtypes nextafter for the others)
    assert np.array_equal(_bits(next_up(values, fmt))[has_up], _bits(lib_up)[has_up])
    assert np.array_equal(_bits(next_down(values, fmt))[has_down], _bits(lib_down)[has_down])
    # its scalar twin, on codes
    for i, code in enumerate(codes.tolist()):
        down, up = neighbour_codes(code, fmt)
        if has_up[i]:
            assert up is not None and _float_bits(bitprism.decode(up, fmt)) == _bits(lib_up[i:i + 1])[0]
        if has_down[i]:
            assert down is not None
            assert _float_bits(bitprism.decode(down, fmt)) == _bits(lib_down[i:i + 1])[0]


@pytest.mark.parametrize(("name", "L"), SMALL, ids=IDS)
def test_next_up_of_the_least_negative_is_negative_zero(name: str, L: O.Layout) -> None:
    fmt = _format(name, L)
    if not fmt.has_zero or not fmt.signed:
        pytest.skip("no negative values")
    least = float(L.smallest_positive)
    # IEEE 754-2019 §5.3.1: nextUp(-least) = -0 where -0 exists; nextDown(+least) = +0
    minus_zero = fmt.has_negative_zero
    want_up = -0.0 if minus_zero else 0.0
    for got in (next_up(-least, fmt), next_up(np.array([-least]), fmt)[0],
                bitprism.decode(neighbour_codes(fmt.sign_mask | 1, fmt)[1], fmt)):
        assert _float_bits(float(got)) == _float_bits(want_up), (name, got)
    for got in (next_down(least, fmt), next_down(np.array([least]), fmt)[0],
                bitprism.decode(neighbour_codes(1, fmt)[0], fmt)):
        assert _float_bits(float(got)) == _float_bits(0.0), (name, got)
    # between -least and 0 the smallest value above is the same -0 (roundTowardPositive of a
    # tiny negative is -0, §4.3.2 / §6.3)
    assert _float_bits(next_up(-least / 4, fmt)) == _float_bits(want_up)


@pytest.mark.parametrize(("name", "L"), SMALL, ids=IDS)
def test_scalar_twin_equals_vector_path_on_every_code(name: str, L: O.Layout) -> None:
    """neighbour_codes against next_up / next_down on codes, bit for bit. The one difference
    by design: nextUp(+Inf) = +Inf and nextDown(-Inf) = -Inf (§5.3.1) while no code lies
    beyond an Inf."""
    fmt = _format(name, L)
    codes = _non_nan_codes(fmt)
    values = bitprism.decode(codes, fmt)
    vec_up, vec_down = _bits(next_up(values, fmt)), _bits(next_down(values, fmt))
    nan = _float_bits(math.nan)
    for i, code in enumerate(codes.tolist()):
        down, up = neighbour_codes(code, fmt)
        twin_up = nan if up is None else _float_bits(bitprism.decode(up, fmt))
        twin_down = nan if down is None else _float_bits(bitprism.decode(down, fmt))
        if values[i] == math.inf:
            assert up is None and vec_up[i] == _float_bits(math.inf)
        else:
            assert twin_up == vec_up[i], (name, hex(code))
        if values[i] == -math.inf:
            assert down is None and vec_down[i] == _float_bits(-math.inf)
        else:
            assert twin_down == vec_down[i], (name, hex(code))


# ----- scalars are exact: the exact path equals the vector path on values and midpoints ---------
EXACT_VS_VECTOR = ["float16", "bfloat16"] + [n for n, f in FORMATS.items() if f.bits <= 8]


def _probe_values(fmt: Format) -> np.ndarray:
    """Every non-NaN value of fmt, every midpoint between neighbours (exact in float64: at most
    12 significant bits), and values beyond both ends of the range."""
    values = np.unique(bitprism.decode(_non_nan_codes(fmt), fmt))  # sorted; ±0 merged
    finite = values[np.isfinite(values)]
    mids = (finite[:-1] + finite[1:]) / 2
    top = float(fmt.max_finite)
    least = float(fmt.smallest_subnormal)
    extra = np.array([top * 1.5, top * 4, -top * 3, least / 4, -least / 4, -0.0, 0.0, math.nan])
    return np.concatenate([values, mids, extra])


@pytest.mark.parametrize("name", EXACT_VS_VECTOR)
def test_exact_scalar_path_equals_vector_path(name: str) -> None:
    fmt = FORMATS[name]
    x = _probe_values(fmt)
    with np.errstate(invalid="ignore", over="ignore"):
        want_up, want_down = _bits(next_up(x, fmt)), _bits(next_down(x, fmt))
        want_ulp = _bits(ulp(x, fmt))
        want_dist = _bits(ulp_distance(x[:-1], x[1:], fmt))
    pair_step = 1 if fmt.bits <= 8 else 13  # ulp_distance: every pair, or every 13th (time)
    for i, v in enumerate(x.tolist()):
        assert _float_bits(next_up(v, fmt)) == want_up[i], (name, v)
        assert _float_bits(next_down(v, fmt)) == want_down[i], (name, v)
        assert _float_bits(ulp(v, fmt)) == want_ulp[i], (name, v)
        if i + 1 < x.size and i % pair_step == 0:
            assert _float_bits(ulp_distance(v, float(x[i + 1]), fmt)) == want_dist[i], (name, v)


def test_scalar_results_are_floats() -> None:
    for fn in (next_up, next_down, ulp):
        assert type(fn(1, "float16")) is float and type(fn("1", "float16")) is float
    assert type(ulp_distance(1, "2", "float16")) is float
    assert isinstance(next_up(np.array([1.0]), "float16"), np.ndarray)


# ----- text means the exact value ---------------------------------------------------------------
def test_text_is_the_exact_value_not_the_binary_double() -> None:
    tenth = Fraction(1, 10)
    # The double nearest 1/10 lies above it (Python's Fraction of the float): so the smallest
    # float64 above 1/10 is 0.1 itself, while next_up(0.1) is the double after it
    # (math.nextafter).
    assert Fraction(0.1) > tenth and Fraction(math.nextafter(0.1, 0)) < tenth
    assert next_up("0.1", "float64") == 0.1
    assert next_up(0.1, "float64") == math.nextafter(0.1, math.inf)
    assert next_down("0.1", "float64") == math.nextafter(0.1, 0)
    # the smallest bfloat16 above 1/10: ml_dtypes' roundTiesToEven of 0.1 lies above 1/10
    bf = ml_dtypes.bfloat16
    rne = float(np.array(0.1).astype(bf))
    assert Fraction(rne) > tenth and next_up("0.1", "bfloat16") == rne
    # ULP at 1/10 in float32: 1/10 lies in [2^-4, 2^-3), so 2^(-4-23) (Goldberg's definition)
    assert ulp("0.1", "float32") == 2.0**-27
    # text that float() cannot read: an expression, and a value float64 cannot hold
    assert next_up("2**-24", "float16") == 2.0**-23  # numpy: float16 nextafter(2^-24, 1)
    assert next_up("2**-24", "float16") == float(np.nextafter(np.float16(2**-24), np.float16(1)))
    assert ulp("2**-24", "float16") == 2.0**-24
    assert next_down("2**-1075", "float64") == 0.0  # half the least subnormal is above +0 ...
    assert next_down(2**-1075, "float64") == -5e-324  # ... while the float 2**-1075 is 0.0
    assert ulp(10**400, "float64") == 2.0**971  # beyond float64: emax capped (Handbook)
    assert math.copysign(1, next_up("-2**-1074", "float64")) == -1  # -0 (§5.3.1)
    # encode / cast / ulp_distance read text the same way
    assert bitprism.encode("0.1", "float32") == int(np.array(0.1, np.float32).view(np.uint32))
    up = bitprism.encode("1 + 2**-60", "float64", rounding="roundTowardPositive")
    assert up == struct.unpack("<Q", struct.pack("<d", math.nextafter(1.0, 2.0)))[0]
    assert bitprism.encode(1 + 2**-60, "float64", rounding="roundTowardPositive") == 0x3FF0000000000000
    assert bitprism.cast("2**-25 * 3", "float16") == 2.0**-23  # ties to even: 1.5 ulp -> 2 ulp
    assert ulp_distance("1", "1 + 2**-52", "float64") == 1.0
    assert ulp_distance("1", "1 + 2**-53", "float64") == 0.0  # rounds to 1 (ties to even)


@pytest.mark.parametrize("fn", [next_up, next_down, ulp])
def test_bad_text_is_a_parse_error(fn) -> None:
    with pytest.raises(ParseError):
        fn("2**-24 +", "float16")
    with pytest.raises(ParseError):
        fn("abc", "float16")


@pytest.mark.parametrize(
    "call",
    [
        lambda a: bitprism.encode(a, "float16"),
        lambda a: bitprism.cast(a, "float16"),
        lambda a: ulp(a, "float16"),
        lambda a: next_up(a, "float16"),
        lambda a: next_down(a, "float16"),
        lambda a: ulp_distance(a, a, "float16"),
        lambda a: ulp_distance(np.zeros(1), a, "float16"),
    ],
    ids=["encode", "cast", "ulp", "next_up", "next_down", "ulp_distance", "ulp_distance_b"],
)
@pytest.mark.parametrize(
    "texts", [["0.1"], np.array(["0.1", "2"]), np.array([b"1"]), np.array(["1", 2.0], dtype=object)],
    ids=["list", "unicode", "bytes", "object"],
)
def test_arrays_of_text_are_refused(call, texts) -> None:
    with pytest.raises(UnsupportedInputError) as info:
        call(texts)
    assert isinstance(info.value, BitprismError)
    message = str(info.value)
    if "object" not in message:
        assert "text" in message and "parse()" in message
