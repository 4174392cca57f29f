"""Per-channel and per-block scales, and compare_scaling: checked against hand loops,
``bp.cast`` with each group's own scale, and ``bp.mx_quantize``."""

from __future__ import annotations

import math

import numpy as np
import pytest

import bitprism as bp
from bitprism.tensors.scaling import compare_scaling, suggest_scale

E4M3_MAX = 448.0  # OCP OFP8 rev 1.0, Table 1 (E4M3 max normal)


def channels(shape=(6, 5, 8), axis=1, seed=0) -> np.ndarray:
    """Channels along ``axis`` with magnitudes 2^-10 .. 2^20 apart (invented)."""
    rng = np.random.default_rng(seed)
    x = rng.standard_normal(shape)
    scale_shape = [1] * len(shape)
    scale_shape[axis] = shape[axis]
    mags = np.exp2(rng.uniform(-10, 20, shape[axis])).reshape(scale_shape)
    return (x * mags).astype(np.float32)


def hand_noise(x: np.ndarray, exps_per_element: np.ndarray, fmt: str, **opts) -> tuple[float, float]:
    """(signal, noise) of casting x * 2^k element by element with bp.cast, k divided back out."""
    x64 = x.astype(np.float64)
    with np.errstate(all="ignore"):
        q = bp.cast(np.ldexp(x64, exps_per_element), fmt, **opts)
    back = np.ldexp(q, -exps_per_element)
    comp = np.isfinite(x64) & np.isfinite(q)
    return float(np.sum(x64[comp] ** 2)), float(np.sum((back[comp] - x64[comp]) ** 2))


@pytest.mark.parametrize("axis", [0, 1, -1])
def test_channel_scales_are_per_channel_along_axis(axis: int) -> None:
    x = channels(axis=axis % 3)
    advice = suggest_scale(x, "float8_e4m3fn", "channel", axis=axis, objective="amax", formats=[])
    n = x.shape[axis]
    assert advice.exponents.shape == (n,) and advice.axis == axis % 3
    for c in range(n):
        amax = float(np.max(np.abs(np.take(x, c, axis=axis).astype(np.float64))))
        assert advice.exponents[c] == math.floor(math.log2(E4M3_MAX / amax))  # by hand


@pytest.mark.parametrize("axis", [0, -1])
@pytest.mark.parametrize("overflow", ["standard", "saturate"])
def test_channel_sqnr_objective_beats_or_ties_the_amax_rule(axis: int, overflow: str) -> None:
    x = channels(shape=(64, 12), axis=axis % 2, seed=3)
    best = suggest_scale(x, "float4_e2m1fn", "channel", axis=axis, overflow=overflow, formats=[])
    rule = suggest_scale(x, "float4_e2m1fn", "channel", axis=axis, objective="amax", overflow=overflow, formats=[])
    shape = [1, 1]
    shape[axis] = -1
    per_el_best = np.broadcast_to(best.exponents.reshape(shape), x.shape)
    per_el_rule = np.broadcast_to(rule.exponents.reshape(shape), x.shape)
    s1, n1 = hand_noise(x, per_el_best, "float4_e2m1fn", overflow=overflow)
    s2, n2 = hand_noise(x, per_el_rule, "float4_e2m1fn", overflow=overflow)
    assert n1 <= n2 * (1 + 1e-9)
    assert abs(10 * math.log10(s1 / n1) - best.sqnr_db) < 1e-7  # the advice's own figure


@pytest.mark.parametrize("granularity", ["channel", "block"])
@pytest.mark.parametrize("fmt", ["float8_e4m3fn", "float4_e2m1fn"])
def test_group_advice_never_worse_than_no_scaling(granularity: str, fmt: str) -> None:
    """Scale 1 for every group is no better than the advice, when it makes no NaN/Inf."""
    for seed in range(3):
        x = (np.random.default_rng(seed).standard_normal((16, 64)) * 0.5).astype(np.float32)
        advice = suggest_scale(x, fmt, granularity, formats=[])
        opts = {"overflow": "saturate"} if granularity == "block" else {}
        s, n = hand_noise(x, np.zeros(x.shape, np.int64), fmt, **opts)
        assert advice.sqnr_db >= 10 * math.log10(s / n) - 1e-9


def test_channel_after_scan_is_in_the_datas_units() -> None:
    x = channels(shape=(40, 10), axis=1, seed=4)
    advice = suggest_scale(x, "float8_e4m3fn", "channel")
    per_el = np.broadcast_to(advice.exponents.reshape(1, -1), x.shape)
    s, n = hand_noise(x, per_el, "float8_e4m3fn")
    row = advice.after["float8_e4m3fn"]
    assert abs(row.sqnr_db - 10 * math.log10(s / n)) < 1e-7
    assert abs(row.sqnr_db - advice.sqnr_db) < 1e-7


@pytest.mark.parametrize("fmt, mx", [("float8_e4m3fn", "mxfp8_e4m3"), ("float4_e2m1fn", "mxfp4"),
                                     ("float6_e3m2fn", "mxfp6_e3m2")])
@pytest.mark.parametrize("shape, axis", [((8, 64), -1), ((64, 8), 0), ((4, 40), 1)])
def test_block_amax_objective_is_the_mx_rule(fmt: str, mx: str, shape, axis: int) -> None:
    x = channels(shape=shape, axis=1 - (axis % 2), seed=5)
    advice = suggest_scale(x, fmt, "block", axis=axis, objective="amax", formats=[])
    res = bp.mx_quantize(x, mx, axis=axis)
    assert advice.exponents.shape == res.scales.shape
    assert np.array_equal(advice.exponents, 127 - res.scales.astype(np.int64))  # E8M0: 2^(c-127)


def test_block_sqnr_objective_is_never_worse_than_mx() -> None:
    x = channels(shape=(16, 64), axis=0, seed=6)
    best = suggest_scale(x, "float8_e4m3fn", "block", formats=[])
    mx = bp.mx_quantize(x, "mxfp8_e4m3")
    v = mx.values
    noise_mx = float(np.sum((v - x.astype(np.float64)) ** 2))
    signal = float(np.sum(x.astype(np.float64) ** 2))
    assert best.sqnr_db >= 10 * math.log10(signal / noise_mx) - 1e-9


@pytest.mark.parametrize("fmt, mx", [("float8_e4m3fn", "mxfp8_e4m3"), ("float8_e5m2", "mxfp8_e5m2"),
                                     ("float4_e2m1fn", "mxfp4")])
@pytest.mark.parametrize("block_size", [32, 24])
def test_compare_scaling_block_row_equals_mx_quantize(fmt: str, mx: str, block_size: int) -> None:
    x = channels(shape=(20, 50), axis=1, seed=7).astype(np.float64)
    x[3, 7] = np.nan  # its block gets the NaN scale: its finite values become NaN
    c = compare_scaling(x, fmt, block_size=block_size)
    row = c["block"]
    res = bp.mx_quantize(x, bp.get_mx_format(mx), axis=-1, block_size=block_size)
    v = res.values
    comp = np.isfinite(x) & np.isfinite(v)
    signal = float(np.sum(x[comp] ** 2))
    noise = float(np.sum((v[comp] - x[comp]) ** 2))
    assert abs(row.sqnr_db - 10 * math.log10(signal / noise)) < 1e-9
    assert row.underflow == res.flushed
    elem = bp.decode(res.elements, bp.get_mx_format(mx).element)  # the stored element values
    sub = comp & (elem != 0) & (np.abs(elem) < float(bp.get_mx_format(mx).element.smallest_normal))
    assert row.subnormal == int(sub.sum())
    assert row.nonfinite == int(np.sum(np.isfinite(x) & ~np.isfinite(v))) > 0
    assert row.scales == res.scales.size
    assert row.bits_per_element == 8 * res.scales.size / x.size  # one E8M0 byte per block


def test_compare_scaling_rows_and_storage() -> None:
    x = channels(shape=(16, 64), axis=1, seed=8)
    c = compare_scaling(x, "float8_e4m3fn")
    assert [r.granularity for r in c.rows] == ["none", "tensor", "channel", "block"]
    assert c["none"].bits_per_element == 0 and c["tensor"].bits_per_element == 32 / x.size
    assert c["channel"].bits_per_element == 32 * 64 / x.size  # one float32 per channel
    assert c["block"].bits_per_element == 0.25  # 8 bits per 32 elements (OCP MX v1.0)
    tensor = suggest_scale(x, "float8_e4m3fn", formats=[])
    assert abs(c["tensor"].sqnr_db - tensor.sqnr_db) < 1e-7
    assert c["tensor"].exponent_range == (tensor.exponent, tensor.exponent)
    s, n = hand_noise(x, np.zeros(x.shape, np.int64), "float8_e4m3fn")
    assert abs(c["none"].sqnr_db - 10 * math.log10(s / n)) < 1e-7
    only = compare_scaling(x, "float8_e4m3fn", granularities=["channel"])
    assert [r.granularity for r in only.rows] == ["none", "channel"]
    assert "bits/element" in str(c) and "<table" in c._repr_html_()


def test_group_sweep_offset_zero_is_the_base_rule() -> None:
    x = channels(shape=(30, 9), axis=1, seed=9)
    advice = suggest_scale(x, "float8_e4m3fn", "channel", objective="amax")
    sw = advice.sweep
    assert sw.relative_to == "channel amax rule"
    per_el = np.broadcast_to(advice.exponents.reshape(1, -1), x.shape)
    s, n = hand_noise(x, per_el, "float8_e4m3fn")
    assert abs(sw.sqnr_db[sw.index(0)] - 10 * math.log10(s / n)) < 1e-7
    for k in (-3, 1):  # a common offset on top of every channel's rule
        s, n = hand_noise(x, per_el + k, "float8_e4m3fn")
        i = sw.index(k)
        if sw.compared[i] == x.size:
            assert abs(sw.sqnr_db[i] - 10 * math.log10(s / n)) < 1e-7


@pytest.mark.parametrize("kwargs, words", [
    (dict(data=np.float32(3.0), granularity="channel"), "needs at least one axis"),
    (dict(granularities="channel"), "granularities must be"),
    (dict(data=np.zeros((0, 3))), "at least one element"),
])
def test_compare_scaling_bad_input(kwargs: dict, words: str) -> None:
    data = kwargs.pop("data", channels(shape=(4, 8), axis=1))
    granularity = kwargs.pop("granularity", None)
    with pytest.raises(bp.BitprismError, match=words):
        if granularity is not None:
            suggest_scale(data, "e4m3", granularity, formats=[])
        else:
            compare_scaling(data, "e4m3", **kwargs)
