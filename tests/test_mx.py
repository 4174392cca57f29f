"""MX block formats (OCP Microscaling Formats Specification v1.0, Sept 2023).

Reference values follow OCP MX v1.0 (Tables 1, 5-7 and §6.3, confirmed in text via public
transcriptions and the reference emulation library microsoft/microxcaling); the worked blocks
apply the §6.3 rule with ml_dtypes casts (from library). Each check names its table or section.
The element-by-element oracle below is a scalar re-implementation of the §6.3 rule in
``fractions.Fraction``; it uses neither bitprism nor ml_dtypes.
"""

from __future__ import annotations

import functools
import math
from fractions import Fraction

import numpy as np
import pytest

from bitprism.tensors.mx import MX_FORMATS, decode_mx, get_mx_format, mx_quantize

# ----- an independent scalar model of the MX element formats (OCP MX v1.0 Tables 2, 4-6) -------
# (t = trailing significand bits, bias, max normal, sign bit position); the values are the
# published ones (MX v1.0 Tables 2/4/5, OFP8 rev 1.0), not read from bitprism.
ELEMENTS = {
    "mxfp8_e4m3": dict(t=3, bias=7, emax=8, max=Fraction(448), sign=7),
    "mxfp8_e5m2": dict(t=2, bias=15, emax=15, max=Fraction(57344), sign=7),
    "mxfp6_e2m3": dict(t=3, bias=1, emax=2, max=Fraction(15, 2), sign=5),
    "mxfp6_e3m2": dict(t=2, bias=3, emax=4, max=Fraction(28), sign=5),
    "mxfp4": dict(t=1, bias=1, emax=2, max=Fraction(6), sign=3),
}
FLOAT_FORMATS = list(ELEMENTS)
ALL_FORMATS = FLOAT_FORMATS + ["mxint8"]


@functools.lru_cache(maxsize=None)
def grid(name: str) -> list[Fraction]:
    """Non-negative values of an element format in code order (index = magnitude code)."""
    p = ELEMENTS[name]
    t, emin = p["t"], 1 - p["bias"]
    out = [Fraction(k, 1 << t) * Fraction(2) ** emin for k in range(1 << t)]  # subnormals
    for e in range(emin, p["emax"] + 1):
        out += [Fraction((1 << t) + k, 1 << t) * Fraction(2) ** e for k in range(1 << t)]
    return [v for v in out if v <= p["max"]]


def floor_log2(q: Fraction) -> int:
    e = q.numerator.bit_length() - q.denominator.bit_length()
    while Fraction(2) ** e > q:
        e -= 1
    while Fraction(2) ** (e + 1) <= q:
        e += 1
    return e


def round_to_grid(q: Fraction, values: list[Fraction]) -> int:
    """Index of the nearest grid value to q >= 0 (q within range), ties to the even index."""
    best = min(range(len(values)), key=lambda i: (abs(values[i] - q), i % 2))
    return best


def reference_block(block: list[float], name: str) -> tuple[int, list[int], list[float]]:
    """MX v1.0 §6.3 for one finite block: (E8M0 code, element codes, dequantized values)."""
    emax_elem = 0 if name == "mxint8" else ELEMENTS[name]["emax"]
    exact = [Fraction(v) for v in block]
    amax = max(abs(v) for v in exact)
    if amax == 0:
        shared = -127  # our documented choice for an all-zero block
    else:
        shared = max(floor_log2(amax) - emax_elem, -127)
    assert shared <= 127
    X = Fraction(2) ** shared
    codes, values = [], []
    for v, f in zip(exact, block):
        ratio = v / X
        if name == "mxint8":
            n = round(max(min(ratio * 64, 127), -127))  # Fraction round(): ties to even
            codes.append(n & 0xFF)
            values.append(float(Fraction(n, 64) * X))
            continue
        p = ELEMENTS[name]
        table = grid(name)
        mag = min(abs(ratio), p["max"])  # clamp to the largest normal (§6.3)
        i = round_to_grid(mag, table)
        negative = math.copysign(1.0, f) < 0
        codes.append(i | (1 << p["sign"]) if negative else i)
        values.append(float((-table[i] if negative else table[i]) * X))
    return shared + 127, codes, values


def block32(first: list[float], dtype: type = np.float64) -> np.ndarray:
    x = np.zeros(32)
    x[: len(first)] = np.asarray(first, dtype=dtype)  # fp32 inputs are rounded to fp32 first
    return x


# ----- worked blocks: the OCP MX v1.0 §6.3 rule with ml_dtypes RNE casts (from library) --------
WORKED = [
    # (id, format, inputs, input dtype, E8M0 code, element codes, dequantized values)
    ("mxfp4", "mxfp4", [7.0, -5.0, 2.5, 1.25, 0.75, 0.25, -0.1, 3.0], np.float64, 0x7F,
     [0x7, 0xE, 0x4, 0x2, 0x2, 0x0, 0x8, 0x5], [6, -4, 2, 1, 1, 0, -0.0, 3]),
    ("e4m3", "mxfp8_e4m3", [1.9, 0.001, -0.5, 0.0078125], np.float32, 0x77,
     [0x7E, 0x28, 0xF0, 0x40], [1.75, 0.0009765625, -0.5, 0.0078125]),
    ("e3m2", "mxfp6_e3m2", [100, -3, 0.5, 30], np.float64, 0x81,
     [0x1E, 0x2A, 0x02, 0x18], [96, -3, 0.5, 32]),
    ("e2m3", "mxfp6_e2m3", [0.9, -0.3, 0.01, 0.5], np.float32, 0x7C,
     [0x1E, 0x32, 0x01, 0x18], [0.875, -0.3125, 0.015625, 0.5]),
    ("e5m2", "mxfp8_e5m2", [1.0, -0.7, 2.0**-20, 3e-7], np.float32, 0x70,
     [0x78, 0xF6, 0x28, 0x21], [1.0, -0.75, 2.0**-20, 5 * 2.0**-24]),
    ("int8", "mxint8", [3.0, 0.01, -2.9, 1.0], np.float32, 0x80,
     [0x60, 0x00, 0xA3, 0x20], [3.0, 0.0, -93 / 32, 1.0]),
    ("fp4-tiny", "mxfp4", [2.0**-140, 2.0**-141], np.float64, 0x00, [0x0, 0x0], [0.0, 0.0]),
    ("fp4-huge", "mxfp4", [3e38, -1e38, 1.0], np.float32, 0xFC,
     [0x7, 0xC, 0x0], [6 * 2.0**125, -(2.0**126), 0.0]),
]


@pytest.mark.parametrize(
    "name, inputs, dtype, scale, codes, values",
    [w[1:] for w in WORKED],
    ids=[w[0] for w in WORKED],
)
def test_worked_blocks(name, inputs, dtype, scale, codes, values):
    """Worked blocks (OCP MX v1.0 §6.3, values from library; remaining elements are 0)."""
    r = mx_quantize(block32(inputs, dtype), name)
    n = len(inputs)
    assert r.scales.tolist() == [scale]
    assert r.elements[:n].tolist() == codes
    np.testing.assert_array_equal(r.values[:n], np.asarray(values, dtype=np.float64))
    assert np.signbit(r.values[:n]).tolist() == [math.copysign(1, v) < 0 for v in values]
    assert (r.values[n:] == 0).all()
    # the worked block agrees with the independent Fraction model too
    ref_scale, ref_codes, ref_values = reference_block(list(block32(inputs, dtype)), name)
    assert ref_scale == scale and ref_codes[:n] == codes and ref_values[:n] == values


def test_fp4_ties_away_differs_as_noted():
    """microxcaling's default round='nearest' is ties-away (read in its code): on the MXFP4
    worked block it gives -6, 3, 1.5, 1, 0.5."""
    x = block32([7.0, -5.0, 2.5, 1.25, 0.75, 0.25])
    r = mx_quantize(x, "mxfp4", rounding="roundTiesToAway")
    assert r.values[:6].tolist() == [6.0, -6.0, 3.0, 1.5, 1.0, 0.5]


# ----- element by element against the Fraction model (MX v1.0 §6.3) -------------------------
def random_blocks(rng: np.random.Generator, count: int, size: int = 32) -> np.ndarray:
    """Blocks mixing few-bit values (many exact ties), fp32 values, zeros and wide exponents."""
    blocks = []
    for _ in range(count):
        centre = int(rng.integers(-30, 30))
        kind = rng.integers(3)
        if kind == 0:  # few significant bits: ties at element precision are common
            x = rng.integers(-64, 65, size) * np.exp2(rng.integers(-6, 3, size) + centre)
        elif kind == 1:
            x = (rng.standard_normal(size) * np.exp2(centre)).astype(np.float32)
        else:  # wide spread of exponents inside one block: subnormal elements, flushes
            x = rng.uniform(-2, 2, size) * np.exp2(rng.integers(-25, 1, size) + centre)
        x = np.where(rng.random(size) < 0.1, 0.0, x)
        blocks.append(np.asarray(x, dtype=np.float64))
    return np.stack(blocks)


@pytest.mark.parametrize("name", ALL_FORMATS)
def test_against_fraction_reference(name):
    """MX v1.0 §6.3, element by element, on random blocks (scalar Fraction model, above)."""
    rng = np.random.default_rng(20230901 + ALL_FORMATS.index(name))
    data = random_blocks(rng, 24)
    r = mx_quantize(data, name)
    for b, block in enumerate(data):
        scale, codes, values = reference_block(list(block), name)
        assert int(r.scales[b, 0]) == scale, (b, block)
        assert r.elements[b].tolist() == codes, (b, block)
        np.testing.assert_array_equal(r.values[b], np.asarray(values))


# ----- the clamp property (derived from the OCP MX v1.0 §6.3 clamp) ---------------------------
# amax = m * 2^e, m in [1, 2): the largest element clamps exactly when m exceeds this bound.
CLAMP_BOUND = {
    "mxfp4": Fraction(3, 2),  # 4m > 6
    "mxfp8_e4m3": Fraction(7, 4),  # 256m > 448
    "mxfp6_e3m2": Fraction(7, 4),  # 16m > 28
    "mxfp6_e2m3": Fraction(15, 8),  # 4m > 7.5
    "mxfp8_e5m2": Fraction(7, 4),  # 2^15 m > 57344
}


@pytest.mark.parametrize("name", FLOAT_FORMATS)
@pytest.mark.parametrize("e", [-20, -3, 0, 7, 60])
def test_clamp_property(name, e):
    """Derived from OCP MX v1.0 §6.3 (clamp to the largest normal): the largest element clamps
    exactly when the significand m of amax exceeds the bound."""
    bound = CLAMP_BOUND[name]
    max_normal = float(ELEMENTS[name]["max"])
    X = 2.0 ** (e - ELEMENTS[name]["emax"])
    for m in (float(bound) + 2.0**-20, (float(bound) + 2) / 2, 2 - 2.0**-30):
        for sign in (1.0, -1.0):
            x = block32([sign * m * 2.0**e, 0.5 * 2.0**e])
            r = mx_quantize(x, name)
            assert r.scales[0] == e - ELEMENTS[name]["emax"] + 127
            assert r.values[0] == sign * max_normal * X
            assert r.clamped == 1
            assert np.isfinite(r.values).all()
    # at the bound itself the largest element is exact, not clamped
    r = mx_quantize(block32([float(bound) * 2.0**e]), name)
    assert r.values[0] == float(bound) * 2.0**e and r.clamped == 0


def test_clamp_beyond_rounding_threshold_is_not_nan():
    """A plain (non-saturating) ml_dtypes cast of 464 (E4M3) / 61440 (E5M2) overflows (from
    library); OCP MX v1.0 §6.3 clamps."""
    r = mx_quantize(block32([1.8125, 0.1]), "mxfp8_e4m3")  # ratio 1.8125 * 256 = 464
    assert r.elements[0] == 0x7E and r.values[0] == 1.75
    r = mx_quantize(block32([1.875, 0.1]), "mxfp8_e5m2")  # ratio 1.875 * 2^15 = 61440
    assert r.elements[0] == 0x7B and r.values[0] == 1.75


def test_mxint8_symmetric_clamp():
    """MXINT8 clamps to +-127/64 (OCP MX v1.0 Table 6 via a hardware summary; microxcaling);
    0x80 (-2.0) is never produced (whether the spec admits it: from memory, unverified)."""
    r = mx_quantize(block32([-1.999, 1.999, -2.0 + 2.0**-40]), "mxint8")  # shared exp 0 - 0
    assert r.scales[0] == 127
    assert r.values[:3].tolist() == [-127 / 64, 127 / 64, -127 / 64]
    assert 0x80 not in r.elements.tolist()
    assert decode_mx(np.array([127]), np.array([0x80] + [0] * 31), "mxint8")[0] == -2.0


# ----- axes, short blocks, special blocks ------------------------------------------------------
@pytest.mark.parametrize(
    "shape, axis",
    [((40, 3), 0), ((3, 40), -1), ((3, 40), 1), ((2, 33, 4), 1), ((2, 3, 64), -1), ((64, 2, 3), 0)],
)
@pytest.mark.parametrize("name", ["mxfp4", "mxfp8_e4m3", "mxint8"])
def test_axis_handling(shape, axis, name):
    """Each block is a run of 32 along ``axis`` (MX v1.0 §6.3 applied per block)."""
    rng = np.random.default_rng(7)
    data = rng.standard_normal(shape) * np.exp2(rng.integers(-4, 5, shape))
    r = mx_quantize(data, name, axis=axis)
    ax = axis % data.ndim
    n = shape[ax]
    blocks = -(-n // 32)
    assert r.axis == ax
    assert r.scales.shape == shape[:ax] + (blocks,) + shape[ax + 1 :]
    assert r.elements.shape == r.values.shape == shape
    assert r.scales.dtype == np.uint8 and r.values.dtype == np.float64
    for index in np.ndindex(*(shape[:ax] + shape[ax + 1 :])):
        for b in range(blocks):
            idx = list(index)
            idx.insert(ax, slice(32 * b, min(32 * b + 32, n)))
            sidx = list(index)
            sidx.insert(ax, b)
            block = data[tuple(idx)]
            scale, codes, values = reference_block(list(block), name)
            assert r.scales[tuple(sidx)] == scale
            assert r.elements[tuple(idx)].tolist() == codes
            assert r.values[tuple(idx)].tolist() == values
    np.testing.assert_array_equal(decode_mx(r.scales, r.elements, name, axis=axis), r.values)


def test_short_last_block():
    """A last block shorter than 32 is converted on its own elements, and said so."""
    rng = np.random.default_rng(3)
    data = rng.standard_normal(75)
    r = mx_quantize(data, "mxfp6_e3m2")
    assert r.short_last_block == 75 - 64
    assert r.scales.shape == (3,)
    alone = mx_quantize(data[64:], "mxfp6_e3m2")
    assert alone.short_last_block == 11
    np.testing.assert_array_equal(r.values[64:], alone.values)
    assert r.scales[2] == alone.scales[0] == reference_block(list(data[64:]), "mxfp6_e3m2")[0]
    assert "11 of 32" in str(r)
    assert mx_quantize(data[:64], "mxfp6_e3m2").short_last_block == 0


@pytest.mark.parametrize("name", ALL_FORMATS)
def test_all_zero_block(name):
    """Documented choice: an all-zero block gets scale 0x00 (2^-127) and zero elements."""
    x = np.concatenate([np.zeros(32), -np.zeros(32), np.ones(32)])
    r = mx_quantize(x, name)
    assert r.scales.tolist()[:2] == [0x00, 0x00]
    assert (r.values[:64] == 0).all() and r.values[64:].tolist() == [1.0] * 32
    if name != "mxint8":  # float elements keep the sign of zero
        assert np.signbit(r.values[32:64]).all() and not np.signbit(r.values[:32]).any()


@pytest.mark.parametrize("name", ALL_FORMATS)
@pytest.mark.parametrize("special", [np.nan, np.inf, -np.inf])
def test_nan_or_inf_block(name, special):
    """A block holding NaN or Inf: NaN scale 0xFF, every element NaN (MX §6.3, from memory)."""
    x = np.linspace(-3, 3, 96)
    x[40] = special
    r = mx_quantize(x, name)
    assert r.scales.tolist()[1] == 0xFF and r.nan_blocks == 1
    assert np.isnan(r.values[32:64]).all()
    assert not np.isnan(r.values[:32]).any() and not np.isnan(r.values[64:]).any()
    np.testing.assert_array_equal(r.values[:32], mx_quantize(x[:32], name).values)


def test_shared_exponent_above_127_gives_nan_scale():
    """E8M0 tops out at 2^127 (MX v1.0 Table 7); float64 input beyond that -> NaN scale."""
    r = mx_quantize(block32([2.0**1000, 1.0]), "mxfp4")
    assert r.scales.tolist() == [0xFF] and np.isnan(r.values).all()


def test_inputs_of_other_dtypes_and_errors():
    import ml_dtypes

    x = np.array([1.5, -0.25, 3.0], dtype=ml_dtypes.bfloat16)
    r = mx_quantize(x, "MXFP8-E4M3")
    assert r.values.tolist() == [1.5, -0.25, 3.0]
    with pytest.raises(ValueError, match="mxfp4"):
        mx_quantize(x, "mxfp5")
    with pytest.raises(ValueError, match="axis"):
        mx_quantize(x, "mxfp4", axis=1)
    with pytest.raises(ValueError, match="block_size"):
        mx_quantize(x, "mxfp4", block_size=0)
    with pytest.raises(ValueError, match="scalar"):
        mx_quantize(np.float64(1.0), "mxfp4")


def test_mx_format_objects_are_scan_columns():
    """Each MX format has a name and dequantize_block (the block-format column protocol)."""
    assert sorted(MX_FORMATS) == sorted(ALL_FORMATS)
    rng = np.random.default_rng(11)
    x = rng.standard_normal((2, 64))
    for name, fmt in MX_FORMATS.items():
        assert fmt.name == name and get_mx_format(name.upper()) is fmt
        out = fmt.dequantize_block(x)
        assert out.dtype == np.float64 and out.shape == x.shape
        np.testing.assert_array_equal(out, mx_quantize(x, name).values)


def test_text_and_html_summary():
    r = mx_quantize(np.array([[7.0, 1.0]]), "mxfp4")
    text = str(r)
    assert "mxfp4" in text and "clamped to max normal" in text and "1x2" in text
    bundle = r._repr_mimebundle_()
    assert bundle["text/plain"] == text
    assert "<table" in bundle["text/html"] and "mxfp4" in bundle["text/html"]


@pytest.mark.parametrize("name", ["mxfp4", "mxfp6_e2m3", "mxint8"])
@pytest.mark.parametrize("shape", [(4, 64), (3, 40)], ids=["whole", "short-rows"])
def test_scan_uses_the_block_protocol(name, shape):
    """scan() treats an MXFormat as a block-format column (name + dequantize_block)."""
    from bitprism.tensors.scan import ScanQuantizer, scan

    fmt = MX_FORMATS[name]
    assert isinstance(fmt, ScanQuantizer)
    rng = np.random.default_rng(5)
    data = rng.standard_normal(shape) * np.exp2(rng.integers(-12, 3, shape))
    result = scan(data, formats=[fmt], progress=False)
    row = result[name]
    r = mx_quantize(data, name, axis=-1)
    assert row.underflow == r.flushed
    assert row.exact == int((r.values == data).sum())
    assert row.overflow == 0
