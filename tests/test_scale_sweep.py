"""The scale sweep against independent casts: for every candidate 2^k it must report what
``bp.cast(x * 2^k)`` and plain numpy say, without casting the data again.

The claim the sweep rests on (``tensors/scaling/joint.py``): the cast of ``x * 2^k`` depends on
``x`` only through its sign, its binary exponent, its top ``t + 1`` significand bits and
whether any bit below them is set. ``test_the_bins_decide_the_cast`` checks it directly (values
that share those and differ below cast to the same code at every exponent); the other tests
check the sweep's figures against casts of the data itself:

* counts exactly: overflow (IEEE 754-2019 §7.4: the value rounded with an unbounded exponent
  range exceeds the largest finite value; the unbounded rounding is a cast into a format with the
  same significand and an 11-bit exponent), underflow to zero, subnormal results, finite values
  made NaN/Inf;
* SQNR over the values whose result is finite to 1e-7 dB: both sides are float64 sums of the
  same squared errors taken in different orders (the sweep expands each bin's squares), so they
  agree to about n * 2^-53 relative, i.e. 1e-10 here, and 10 log10(1 + d) moves by 4.3 d dB;
* relative-error p99 within the sweep's own stated bound, ``p99_tolerance`` = 2^-7 p +
  2^-B (1 + 2p): each value's relative error is placed within 2^-B of its binade (the fine
  bins keep B significand bits) and read off a histogram with buckets 2^-7 wide.
"""

from __future__ import annotations

import math

import ml_dtypes
import numpy as np
import pytest

import bitprism as bp
from bitprism.numerics.options import CastOptions
from bitprism.tensors.scaling.joint import joint_histogram
from bitprism.tensors.scaling.outcomes import sign_symmetric
from bitprism.tensors.scaling.sweep import candidate_range, sweep_histogram

FORMATS = ["float8_e4m3fn", "float8_e5m2", "float8_e4m3fnuz", "float6_e2m3fn", "float4_e2m1fn",
           "float16", "bfloat16"]
OPTIONS = [
    CastOptions("roundTiesToEven", "standard", "keep"),
    CastOptions("roundTowardZero", "saturate", "keep"),
    CastOptions("roundTowardPositive", "standard", "flush"),
    CastOptions("roundTowardNegative", "saturate", "keep"),
    CastOptions("roundTiesToAway", "standard", "keep"),
]
OPT_IDS = ["rne", "rtz-sat", "rtp-flush", "rtn-sat", "rna"]


def data32(n: int = 20000, seed: int = 0) -> np.ndarray:
    rng = np.random.default_rng(seed)
    x = (rng.standard_normal(n) * np.exp2(rng.uniform(-12, 12, n))).astype(np.float32)
    x[:12] = [0.0, -0.0, np.nan, np.inf, -np.inf, 1e-40, -3e-42, 2.0**-149, -(2.0**-126),
              3.0e38, 1.0, -1.5]
    return x


def wide(fmt: bp.Format) -> bp.Format:
    """The same significand with an 11-bit exponent: rounding with an unbounded exponent range
    for every value the tests scale."""
    return bp.Format(f"{fmt.name}-wide", 11, fmt.significand_bits)


def oracle(x: np.ndarray, fmt: bp.Format, k: int, opts: CastOptions) -> dict[str, float]:
    xs = x.astype(np.float64) * 2.0**k  # exact: every k used keeps x * 2^k normal in float64
    with np.errstate(all="ignore"):
        q = bp.cast(xs, fmt, options=opts)
        q_wide = bp.cast(xs, wide(fmt), options=CastOptions(opts.rounding))
    fin = np.isfinite(xs)
    comp = fin & np.isfinite(q)
    err = q[comp] - xs[comp]
    # squares taken after an exact power-of-two rescale, so none underflows (x near 2^-900)
    top = float(np.max(np.abs(xs[comp]))) if comp.any() else 0.0
    unit = 2.0 ** -math.floor(math.log2(top)) if top > 0 else 1.0
    sx, se = float(np.sum((xs[comp] * unit) ** 2)), float(np.sum((err * unit) ** 2))
    ax = np.abs(xs[comp])
    rel = np.where(ax > 0, np.abs(err) / np.where(ax > 0, ax, 1.0), 0.0)
    return {
        "overflow": int(np.sum(fin & (np.abs(q_wide) > float(fmt.max_finite)))),
        "underflow": int(np.sum(fin & (xs != 0) & (q == 0))),
        "subnormal": int(np.sum(comp & (q != 0) & (np.abs(q) < float(fmt.smallest_normal)))),
        "nonfinite": int(np.sum(fin & ~np.isfinite(q))),
        # as the scan: NaN (None there) when nothing is compared, Inf without error
        "sqnr": math.nan if not comp.any() else math.inf if se == 0 else 10 * math.log10(sx / se),
        "p99": float(np.quantile(rel, 0.99)) if rel.size else math.nan,
    }


def check(sw, x: np.ndarray, fmt: bp.Format, ks, opts: CastOptions) -> None:
    for k in ks:
        i = sw.index(k)
        want = oracle(x, fmt, k, opts)
        got = {kind: int(getattr(sw, kind)[i]) for kind in ("overflow", "underflow", "subnormal", "nonfinite")}
        assert got == {kind: want[kind] for kind in got}, (k, got, want)
        if math.isnan(want["sqnr"]):
            assert np.isnan(sw.sqnr_db[i]) and np.isnan(sw.rel_error_p99[i]), k
            continue
        if math.isinf(want["sqnr"]):
            assert sw.sqnr_db[i] == want["sqnr"], k
        else:
            assert abs(sw.sqnr_db[i] - want["sqnr"]) <= 1e-7, (k, sw.sqnr_db[i], want["sqnr"])
        assert abs(sw.rel_error_p99[i] - want["p99"]) <= sw.p99_tolerance[i], (
            k, sw.rel_error_p99[i], want["p99"], sw.p99_tolerance[i])


@pytest.mark.parametrize("opts", OPTIONS, ids=OPT_IDS)
@pytest.mark.parametrize("name", FORMATS)
def test_sweep_equals_independent_casts(name: str, opts: CastOptions) -> None:
    fmt = bp.get_format(name)
    x = data32(seed=len(name))
    sw = sweep_histogram(joint_histogram(x, fmt.significand_bits), fmt, opts, np.arange(-30, 31))
    ks = [-30, -17, -9, -4, -1, 0, 1, 3, 8, 14, 22, 30]
    check(sw, x, fmt, ks, opts)


@pytest.mark.parametrize(
    "dtype", [np.float64, np.float16, ml_dtypes.bfloat16, np.int16, ml_dtypes.float8_e5m2],
    ids=["float64", "float16", "bfloat16", "int16", "float8_e5m2"],
)
def test_other_input_dtypes(dtype) -> None:
    rng = np.random.default_rng(3)
    if np.dtype(dtype).kind == "i":
        x = rng.integers(-3000, 3000, 5000).astype(dtype)
    else:
        x = (rng.standard_normal(5000) * np.exp2(rng.uniform(-6, 6, 5000))).astype(dtype)
    if dtype is np.float64:
        x[:3] = [5e-324, -2.5e-310, 1e-300]  # float64 subnormals enter their own binades
    fmt = bp.get_format("float8_e4m3fn")
    opts = CastOptions()
    h = joint_histogram(x, 3)
    ks = candidate_range(h, fmt, 0)  # scales that keep x * 2^k exact in float64
    if dtype is np.float64:
        assert ks[0] == 0  # a float64 subnormal would lose bits if scaled down
    sw = sweep_histogram(h, fmt, opts, ks)
    picked = sorted(set(int(k) for k in np.linspace(ks[0], ks[-1], 7).round()) | {0})
    check(sw, x.astype(np.float64), fmt, picked, opts)


def test_unsigned_format_with_nonnegative_data() -> None:
    fmt = bp.get_format("float8_e5m3fnu")
    x = np.abs(data32(4000, seed=9))
    opts = CastOptions()
    sw = sweep_histogram(joint_histogram(x, fmt.significand_bits), fmt, opts, np.arange(-8, 9))
    check(sw, x, fmt, [-8, -2, 0, 3, 8], opts)


@pytest.mark.parametrize("opts", OPTIONS[:3], ids=OPT_IDS[:3])
@pytest.mark.parametrize("name", ["float8_e4m3fn", "float6_e3m2fn", "float16"])
def test_the_bins_decide_the_cast(name: str, opts: CastOptions) -> None:
    """Two values with the same sign, exponent, top t+1 significand bits and sticky bit cast to
    the same code at every exponent from below the smallest subnormal to beyond overflow."""
    fmt = bp.get_format(name)
    t = fmt.significand_bits
    rng = np.random.default_rng(t)
    a = (rng.standard_normal(3000) * 4).astype(np.float32)
    keep = np.uint32(~((1 << (22 - t)) - 1) & 0xFFFFFFFF)  # sign, exponent, top t+1 bits
    bits = a.view(np.uint32)
    low = bits & ~keep
    other = rng.integers(1, 1 << (22 - t), a.size, dtype=np.uint32)  # another nonzero tail
    b = ((bits & keep) | np.where(low != 0, other, 0).astype(np.uint32)).view(np.float32)
    for f in range(fmt.emin - t - 4, fmt.emax + 3):
        sa = a.astype(np.float64) * 2.0 ** (f - np.floor(np.log2(np.abs(a.astype(np.float64)))))
        sb = b.astype(np.float64) * 2.0 ** (f - np.floor(np.log2(np.abs(b.astype(np.float64)))))
        with np.errstate(all="ignore"):
            ca, cb = bp.encode(sa, fmt, options=opts), bp.encode(sb, fmt, options=opts)
        assert np.array_equal(ca, cb), f


@pytest.mark.parametrize("name", ["float8_e4m3fn", "float8_e4m3fnuz", "float16"])
def test_magnitude_bins_give_the_same_sweep_for_symmetric_casts(name: str) -> None:
    """A sign-symmetric cast may bin magnitudes only (half the bins): same figures."""
    fmt = bp.get_format(name)
    x = data32(8000, seed=11)
    opts = CastOptions()
    assert sign_symmetric(fmt, opts) and not sign_symmetric(fmt, OPTIONS[2])
    ks = np.arange(-20, 21)
    a = sweep_histogram(joint_histogram(x, fmt.significand_bits), fmt, opts, ks)
    b = sweep_histogram(joint_histogram(x, fmt.significand_bits, signs=False), fmt, opts, ks)
    for kind in ("overflow", "underflow", "subnormal", "nonfinite", "rel_error_p99"):
        assert np.array_equal(getattr(a, kind), getattr(b, kind), equal_nan=True), kind
    assert np.allclose(a.sqnr_db, b.sqnr_db, rtol=0, atol=1e-9)


def test_sweep_equals_the_scan_with_that_scale() -> None:
    x = data32(6000, seed=5)
    fmt = bp.get_format("float8_e4m3fn")
    h = joint_histogram(x, 3)
    sw = sweep_histogram(h, fmt, CastOptions(), candidate_range(h, fmt, 0))
    for k in (-6, 0, 4, 9):
        row = bp.scan(x, [fmt], scale=2.0**k, progress=False)[fmt]
        i = sw.index(k)
        assert (row.overflow, row.underflow, row.subnormal) == (
            sw.overflow[i], sw.underflow[i], sw.subnormal[i])
        assert row.compared == sw.compared[i]
        assert abs(row.sqnr_db - sw.sqnr_db[i]) <= 1e-7
        assert abs(row.rel_error_p99 - sw.rel_error_p99[i]) <= sw.p99_tolerance[i]


def test_candidates_cover_every_binade_against_the_range() -> None:
    x = data32(3000, seed=2)
    fmt = bp.get_format("float8_e4m3fn")
    h = joint_histogram(x, 3)
    ks = candidate_range(h, fmt, 5)
    sw = sweep_histogram(h, fmt, CastOptions(), ks)
    nonzero = int(np.sum(np.isfinite(x) & (x != 0)))
    assert 0 in ks and 5 in ks and np.all(np.diff(ks) == 1)
    assert sw.underflow[0] == nonzero  # at the lowest candidate every value underflows
    assert sw.overflow[-1] == nonzero  # at the highest every value overflows


def test_plateau_candidates_tie_exactly() -> None:
    """Values that stay normal give the same figures at every interior exponent: one column."""
    x = np.linspace(1.0, 1.9, 400).astype(np.float32)
    fmt = bp.get_format("float8_e4m3fn")
    sw = sweep_histogram(joint_histogram(x, 3), fmt, CastOptions(), np.arange(-6, 8))
    inner = [sw.sqnr_db[sw.index(k)] for k in range(-6, 8)]
    assert len(set(inner)) == 1
