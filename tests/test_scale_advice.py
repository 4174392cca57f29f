"""suggest_scale's objectives: the choice is the sweep's best, the amax rule is the OCP hand
computation, no advice is worse than no scaling, and bad input gets a clear answer."""

from __future__ import annotations

import math

import numpy as np
import pytest

import bitprism as bp
from bitprism.tensors.scaling import suggest_scale
from bitprism.tensors.scaling.sweep import TIE_DB

# Largest finite values from the OCP 8-bit Floating Point Specification (OFP8), revision 1.0
# (2023), Table 1: E4M3 max normal S.1111.110 = 448, E5M2 max normal S.11110.11 = 57344.
OCP_MAX = {"float8_e4m3fn": 448.0, "float8_e5m2": 57344.0}


def act(seed: int = 0, n: int = 4096) -> np.ndarray:
    """Heavy-tailed activations with a few outlier channels (invented)."""
    rng = np.random.default_rng(seed)
    cols = 64
    return (rng.standard_t(3, size=(n // cols, cols)) * np.where(rng.random(cols) < 0.05, 300.0, 1.0)).astype(np.float32)


@pytest.mark.parametrize("name", sorted(OCP_MAX))
@pytest.mark.parametrize("amax", [3.0, 0.0123, 1000.0, 3.55])
@pytest.mark.parametrize("margin", [0, 2])
def test_amax_rule_is_the_ocp_hand_computation(name: str, amax: float, margin: int) -> None:
    data = np.array([amax, -amax / 3, amax / 100])
    advice = suggest_scale(data, name, objective="amax", margin=margin, formats=[])
    target = OCP_MAX[name] / 2**margin
    k = math.floor(math.log2(target / amax))  # by hand; then make sure of the floor
    while amax * 2.0**k > target:
        k -= 1
    while amax * 2.0 ** (k + 1) <= target:
        k += 1
    assert advice.exponent == k and advice.scale == 2.0**k
    assert advice.amax_exponent == k


@pytest.mark.parametrize("objective", ["sqnr", "no_overflow"])
@pytest.mark.parametrize("overflow", ["standard", "saturate"])
@pytest.mark.parametrize("name", ["float8_e4m3fn", "float8_e5m2", "float4_e2m1fn", "float16"])
def test_choice_is_the_sweeps_best(objective: str, overflow: str, name: str) -> None:
    advice = suggest_scale(act(len(name)), name, objective=objective, overflow=overflow, formats=[])
    sw = advice.sweep
    ok = (sw.nonfinite == 0) & ~np.isnan(sw.sqnr_db)
    if objective == "no_overflow":
        ok &= sw.overflow == 0
    i = sw.index(advice.exponent)
    assert ok[i]
    assert sw.sqnr_db[i] >= sw.sqnr_db[ok].max() - TIE_DB
    assert advice.sqnr_db == sw.sqnr_db[i]


@pytest.mark.parametrize("objective", ["sqnr", "no_overflow"])
@pytest.mark.parametrize(
    "data",
    [
        act(1),  # needs scaling down: no scaling overflows
        np.linspace(-3, 3, 101).astype(np.float32),  # fine as it is
        np.array([1.0, 2.0, 4.0, 0.5], np.float32),  # exact at many scales, 2^0 among them
        (np.random.default_rng(5).standard_normal(3000) * 1e-4).astype(np.float32),  # too small
    ],
    ids=["outliers", "in-range", "exact", "tiny"],
)
@pytest.mark.parametrize("overflow", ["standard", "saturate"])
def test_never_worse_than_no_scaling(objective: str, data: np.ndarray, overflow: str) -> None:
    advice = suggest_scale(data, "float8_e4m3fn", objective=objective, overflow=overflow, formats=[])
    sw = advice.sweep
    assert 0 in sw.exponents  # scale 1 is always a candidate
    none = sw.index(0)
    feasible = sw.nonfinite[none] == 0 and (objective == "sqnr" or sw.overflow[none] == 0)
    if feasible:
        assert advice.sqnr_db >= sw.sqnr_db[none] - TIE_DB


def test_margin_takes_binades_off_the_best() -> None:
    x = act(2)
    best = suggest_scale(x, "e4m3", formats=[])
    for m in (1, 3):
        shifted = suggest_scale(x, "e4m3", margin=m, formats=[])
        assert shifted.exponent == best.exponent - m
        assert f"margin of {m}" in shifted.message


def test_saturation_can_beat_the_amax_rule() -> None:
    """Gaussian data in FP4 (three normal binades): with a saturating cast, clamping the few
    largest values pays for lifting the many small ones out of the subnormals (the sweep shows
    it); with NaN on overflow it never does, and "no_overflow" never clamps."""
    x = np.random.default_rng(7).standard_normal(20000).astype(np.float32)
    sat = suggest_scale(x, "float4_e2m1fn", overflow="saturate", formats=[])
    sw = sat.sweep
    assert sat.exponent > sat.amax_exponent and sw.overflow[sw.index(sat.exponent)] > 0
    assert sat.sqnr_db > sw.sqnr_db[sw.index(sat.amax_exponent)] + 1  # dB
    e5m2 = suggest_scale(x, "float8_e5m2", formats=[])  # overflow becomes Inf
    assert e5m2.sweep.nonfinite[e5m2.sweep.index(e5m2.exponent)] == 0
    no_over = suggest_scale(x, "float4_e2m1fn", objective="no_overflow", overflow="saturate", formats=[])
    assert no_over.sweep.overflow[no_over.sweep.index(no_over.exponent)] == 0


def test_ties_go_to_the_amax_rule() -> None:
    x = (1 + np.random.default_rng(3).normal(0, 0.05, 64)).astype(np.float32)  # one binade
    advice = suggest_scale(x, "float8_e4m3fn", formats=[])
    assert advice.exponent == advice.amax_exponent
    assert "the amax rule gives the same" in advice.message


def test_reprs_say_in_one_line_what_and_why() -> None:
    advice = suggest_scale(act(3), "float8_e4m3fn", overflow="saturate", formats=[])
    line = repr(advice)
    assert "\n" not in line and line.startswith("<ScaleAdvice float8_e4m3fn tensor: 2^")
    assert "SQNR" in line and "dB" in line and "amax rule" in line
    assert advice.message.split(":")[0] == f"2^{advice.exponent}"


def test_notebook_tensor_before_and_after() -> None:
    """The checkpoint notebook's invented activation (issue 20's opening figures)."""
    rng = np.random.default_rng(2024)
    d, ff = 64, 256
    rng.normal(0, d**-0.5, size=(d, d))
    rng.normal(0, 0.02, size=(ff, d))
    rng.normal(0, 0.05, size=d)
    x = (rng.standard_t(3, size=(32, ff)) * np.where(rng.random(ff) < 0.02, 400.0, 1.0)).astype(np.float32)
    amax = suggest_scale(x, "float8_e4m3fn", objective="amax")
    b, a = amax.before["float8_e4m3fn"], amax.after["float8_e4m3fn"]
    assert (b.overflow, a.overflow, a.underflow, b.subnormal, a.subnormal) == (44, 0, 51, 86, 584)
    assert round(b.sqnr_db, 2) == 31.94 and round(a.sqnr_db, 2) == 31.88
    assert round(b.rel_error_p99, 3) == 0.058 and round(a.rel_error_p99, 3) == 0.302
    advice = suggest_scale(x, "float8_e4m3fn")  # best SQNR: 2^-2 would make 3 NaN
    assert advice.exponent == -3
    assert "2^-2 would turn 3 values into NaN/Inf" in advice.message
    channel = suggest_scale(x, "float8_e4m3fn", "channel")
    after = channel.after["float8_e4m3fn"]
    assert after.underflow <= 1 and after.rel_error_p99 < 0.06


@pytest.mark.parametrize("granularity", ["tensor", "channel", "block"])
@pytest.mark.parametrize(
    "data, words",
    [
        (np.zeros((4, 8)), "all zeros"),
        (np.full((4, 8), np.nan), "nothing but NaN/Inf"),
        (np.full((4, 8), -np.inf), "nothing but NaN/Inf"),
        (np.zeros((0, 8)), "no elements"),
    ],
    ids=["zeros", "nan", "inf", "empty"],
)
def test_no_finite_data_is_stated(granularity: str, data: np.ndarray, words: str) -> None:
    advice = suggest_scale(data, "e4m3", granularity, formats=[])
    if granularity == "tensor":
        assert advice.scale == 1.0 and words in advice.message and advice.sweep is None
    else:
        assert advice.sweep is None
        assert data.size == 0 or any("no finite nonzero value" in n for n in advice.notes)


@pytest.mark.parametrize(
    "kwargs, words",
    [
        (dict(granularity="row"), "granularity must be"),
        (dict(objective="mse"), "objective must be"),
        (dict(granularity="channel", axis=2), "axis must be an integer in -2..1"),
        (dict(granularity="block", axis=-3), "axis must be"),
        (dict(granularity="block", block_size=0), "block_size must be a positive integer"),
        (dict(granularity="block", block_size=2.5), "block_size must be"),
        (dict(margin=1.5), "margin must be an integer"),
        (dict(power_of_two=False), "power_of_two must be True"),
        (dict(fmt="float32"), "at most 10"),
        (dict(fmt="float8_e8m0fnu"), "has no zero"),
        (dict(rounding="stochastic"), "stochastic"),
        (dict(fmt="mxfp4"), "name its element format"),
        (dict(fmt="float8_e5m3fnu"), "unsigned"),
        (dict(fmt="float8_e5m3fnu", granularity="channel"), "unsigned"),
    ],
)
def test_bad_input_gets_a_clear_error(kwargs: dict, words: str) -> None:
    data = act(4)[:8, :16]
    fmt = kwargs.pop("fmt", "float8_e4m3fn")
    with pytest.raises(bp.BitprismError, match=words):
        suggest_scale(data, fmt, formats=[], **kwargs)


def test_amax_objective_still_serves_formats_the_sweep_does_not() -> None:
    advice = suggest_scale(np.array([3.0, -1.0]), "float32", objective="amax", formats=[])
    assert advice.sweep is None and advice.exponent == math.floor(math.log2(3.4028234663852886e38 / 3))
    assert any("no sweep" in n for n in advice.notes)


def test_block_size_that_does_not_divide_is_stated() -> None:
    x = act(5)[:4, :40]
    advice = suggest_scale(x, "float8_e4m3fn", "block", block_size=32, formats=[])
    assert advice.exponents.shape == (4, 2)
    assert any("last block of each row has 8 of 32" in n for n in advice.notes)
