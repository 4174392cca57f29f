"""suggest_scale(objective="amax"): amax-based per-tensor scales, checked by hand with ml_dtypes
and Fractions (the rule as it was before the other objectives came; tests/test_scale_*.py hold
those)."""

from __future__ import annotations

import math
from fractions import Fraction

import ml_dtypes
import numpy as np
import pytest

from bitprism.tensors.advisor import suggest_scale

# (format name, ml_dtypes type); the largest finite value is read from ml_dtypes.finfo.
NARROW = [
    ("float8_e4m3fn", ml_dtypes.float8_e4m3fn),
    ("float8_e5m2", ml_dtypes.float8_e5m2),
    ("float16", np.float16),
    ("bfloat16", ml_dtypes.bfloat16),
    ("float6_e2m3fn", ml_dtypes.float6_e2m3fn),
    ("float6_e3m2fn", ml_dtypes.float6_e3m2fn),
    ("float4_e2m1fn", ml_dtypes.float4_e2m1fn),
]
IDS = [n for n, _ in NARROW]


def finfo_max(dtype) -> float:
    return float(ml_dtypes.finfo(dtype).max)


def sample(seed: int, centre: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    return (rng.standard_normal((16, 24)) * 2.0**centre).astype(np.float32)


@pytest.mark.parametrize("name, dtype", NARROW, ids=IDS)
@pytest.mark.parametrize("centre", [-30, -3, 0, 12])
def test_power_of_two_scale_by_hand(name, dtype, centre):
    data = sample(centre + 100, centre)
    advice = suggest_scale(data, name, objective="amax", formats=[])
    amax = float(np.max(np.abs(data.astype(np.float64))))
    top = finfo_max(dtype)
    # hand computation: the largest 2^k with amax * 2^k <= max
    k = math.floor(math.log2(top / amax))
    while amax * 2.0**k > top:
        k -= 1
    while amax * 2.0 ** (k + 1) <= top:
        k += 1
    assert advice.amax == amax
    assert advice.scale == 2.0**k and advice.exponent == k
    mantissa, _ = math.frexp(advice.scale)
    assert mantissa == 0.5  # exactly a power of two
    scaled = data.astype(np.float64) * advice.scale
    cast = scaled.astype(dtype).astype(np.float64)
    assert np.isfinite(cast).all() and np.max(np.abs(cast)) <= top
    # the next power of two would no longer keep amax inside the format
    assert amax * advice.scale * 2 > top


@pytest.mark.parametrize("name, dtype", NARROW[:3], ids=IDS[:3])
@pytest.mark.parametrize("margin", [1, 3])
def test_margin_leaves_headroom(name, dtype, margin):
    data = sample(5, 4)
    advice = suggest_scale(data, name, objective="amax", margin=margin, formats=[])
    amax = advice.amax
    target = finfo_max(dtype) / 2**margin
    assert amax * advice.scale <= target < amax * advice.scale * 2


@pytest.mark.parametrize("name, dtype", NARROW, ids=IDS)
def test_exact_scale_is_largest_float_below_ratio(name, dtype):
    data = np.array([3.0, -7.3, 1e-3])
    advice = suggest_scale(data, name, objective="amax", power_of_two=False, formats=[])
    ratio = Fraction(finfo_max(dtype)) / Fraction(7.3)
    assert Fraction(advice.scale) <= ratio < Fraction(float(np.nextafter(advice.scale, np.inf)))
    assert advice.scale_exact == Fraction(advice.scale)
    cast = (data * advice.scale).astype(dtype).astype(np.float64)
    assert np.isfinite(cast).all() and np.max(np.abs(cast)) <= finfo_max(dtype)


@pytest.mark.parametrize(
    "data, words",
    [
        (np.zeros(10), "all zeros"),
        (np.full(4, np.nan), "nothing but NaN/Inf"),
        (np.array([np.inf, -np.inf, np.nan]), "nothing but NaN/Inf"),
        (np.array([0.0, np.nan]), "no finite nonzero"),
        (np.zeros((0, 3)), "no elements"),
    ],
    ids=["zeros", "nan-only", "inf-and-nan", "zero-and-nan", "empty"],
)
def test_no_amax_gives_scale_one_with_message(data, words):
    advice = suggest_scale(data, "e4m3", formats=[])
    assert advice.scale == 1.0 and advice.amax == 0.0
    assert words in advice.message and "scale 1" in advice.message
    assert words in str(advice)


def test_inf_and_nan_are_left_out_of_amax():
    data = np.array([np.inf, 2.0, -3.0, np.nan, -np.inf])
    advice = suggest_scale(data, "e5m2", objective="amax", formats=[])
    assert advice.amax == 3.0 and advice.inf_count == 2 and advice.nan_count == 1
    assert advice.scale == 2.0**14  # 3 * 2^14 = 49152 <= 57344 (E5M2 max) < 3 * 2^15
    assert "2 Inf" in advice.message


def test_extreme_amax_keeps_scale_a_normal_float():
    tiny = suggest_scale(np.array([5e-324]), "e5m2", objective="amax", formats=[])
    assert tiny.scale == 2.0**1023 and "capped" in tiny.message
    huge = suggest_scale(np.array([1e308]), "e4m3", objective="amax", formats=[])
    assert huge.exponent == math.floor(math.log2(448 / 1e308))


def test_bad_arguments():
    with pytest.raises(ValueError, match="margin"):
        suggest_scale(np.ones(3), "e4m3", margin=0.5, formats=[])
    with pytest.raises(ValueError, match="unknown format"):
        suggest_scale(np.ones(3), "e4m4", formats=[])


def test_scans_side_by_side():
    data = sample(1, 10)  # |x| up to a few thousand: E4M3 (max 448) overflows unscaled
    advice = suggest_scale(data, "e4m3")
    assert advice.before is not None and advice.after is not None
    # independent count with ml_dtypes (non-saturating, OCP OFP8 rev 1.0 NONSAT as tabulated on
    # the ONNX float8 page: overflow -> NaN)
    unscaled = data.astype(ml_dtypes.float8_e4m3fn).astype(np.float64)
    assert advice.before["float8_e4m3fn"].overflow == int(np.isnan(unscaled).sum()) > 0
    assert advice.after["float8_e4m3fn"].overflow == 0
    assert advice.after.scale == advice.scale and advice.before.scale is None
    text = str(advice)
    assert "without scaling" in text and f"multiplied by {advice.scale!r}" in text
    assert str(advice.before) in text and str(advice.after) in text
    html = advice._repr_html_()
    assert "without scaling" in html and "<table" in html
    assert advice._repr_mimebundle_()["text/plain"] == text


def test_block_format_columns_and_margin_in_scans():
    from bitprism.tensors.mx import MX_FORMATS

    data = sample(2, 6)
    advice = suggest_scale(
        data, "e5m2", objective="amax", margin=2, formats=["e5m2", MX_FORMATS["mxfp4"]]
    )
    assert advice.before.format_names == ("float8_e5m2", "mxfp4")
    assert advice.after["float8_e5m2"].overflow == 0
    assert advice.amax * advice.scale <= 57344 / 4  # E5M2 max (OFP8 rev 1.0) over 2^margin
