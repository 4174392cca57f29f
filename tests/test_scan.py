"""Tests of ``bitprism.tensors.scan``: every figure is checked against an independent computation
written here (ml_dtypes / numpy casts, ``np.quantile``, ``fractions.Fraction``) or against a
published reference value named beside it.

"exact" quantiles are checked for equality with ``np.quantile(rel, q, method="linear")`` (numpy's
default, Hyndman & Fan type 7) of the relative errors of the elements whose input and result are
both finite.
"""

from __future__ import annotations

import math
import os
import subprocess
import sys
from fractions import Fraction

import ml_dtypes
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from bitprism.tensors.scan.block import scan_block
from bitprism.tensors.scan.plan import Locator, ScanPlan, ScanTuning, resolve_entries
from bitprism.errors import BitprismError
from bitprism.formats import get_format
from bitprism.numerics.options import CastOptions
from bitprism.tensors.scan.partials import ExactSum, compress_values
from bitprism.tensors.scan import ScanResult, scan

WITH_INF = ("bfloat16", "float16", "float8_e5m2")  # IEEE-style: overflow -> Inf
NAN_ONLY = ("float8_e4m3fn",)  # no Inf: overflow -> NaN (OCP OFP8 rev 1.0, E4M3 "N/A" Inf)
FINITE = ("float6_e3m2fn", "float4_e2m1fn")  # no Inf, no NaN (OCP MX v1.0 Tables 4-5)
ALL = WITH_INF + NAN_ONLY + FINITE


def dtype_of(name: str) -> np.dtype:
    return np.dtype(np.float16) if name == "float16" else np.dtype(getattr(ml_dtypes, name))


def wide_data(n: int = 20000, seed: int = 0, dtype=np.float32, low: float = -36, high: float = 36) -> np.ndarray:
    """Invented data: normal samples scaled by 2^uniform(low, high), with NaN, ±Inf and ±0."""
    rng = np.random.default_rng(seed)
    x = (rng.standard_normal(n) * np.exp2(rng.uniform(low, high, n))).astype(dtype)
    x[::97] = np.nan
    x[1::101] = np.inf
    x[2::103] = -np.inf
    x[3::53] = 0.0
    x[4::59] = -0.0
    return x


def cast_ref(x: np.ndarray, name: str) -> np.ndarray:
    """ml_dtypes (the reference for these formats) cast, back to float64."""
    with np.errstate(all="ignore"):
        return np.asarray(x).astype(dtype_of(name)).astype(np.float64)


def rel_ref(x: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Relative errors of the elements with finite input and finite result (and their mask)."""
    x = np.asarray(x, np.float64)
    both = np.isfinite(x) & np.isfinite(y)
    xf, yf = x[both], y[both]
    err = np.abs(yf - xf)
    with np.errstate(invalid="ignore", divide="ignore"):
        rel = np.where(xf == 0, 0.0, err / np.abs(xf))
    return rel, both


def ulp_ref(q: np.ndarray, name: str) -> np.ndarray:
    """Handbook ULP at q: 2^(max(floor(log2|q|), emin) - t); written from ml_dtypes.finfo."""
    fi = ml_dtypes.finfo(dtype_of(name))
    emin = int(np.log2(float(fi.smallest_normal)))
    t = int(fi.nmant)
    _, e = np.frexp(np.abs(q))
    ex = np.where(q == 0, emin, np.maximum(e - 1, emin))
    return np.ldexp(1.0, (ex - t).astype(np.int32))


# ----- counts, errors and quantiles against ml_dtypes and numpy -------------------------------


@pytest.mark.parametrize("name", ALL)
def test_full_scan_matches_ml_dtypes_and_numpy(name: str) -> None:
    x = wide_data()
    res = scan(x, [name], progress=False)
    f = res[name]
    y = cast_ref(x, name)
    finite_in = np.isfinite(x)
    assert (f.nan, f.inf) == (int(np.isnan(x).sum()), int(np.isinf(x).sum()))
    if name in FINITE:
        # no Inf/NaN to overflow to: every |x| that rounds above the largest finite value
        # saturates. FP6 E3M2 max 28 = 1.75*2^4, FP4 E2M1 max 6 = 1.5*2^2 (OCP MX v1.0 Tables
        # 4-5); the next value of the unbounded binade is 32 / 8, the tie point 30 / 7 goes to
        # it (the max significand is odd), so overflow is |x| >= 30 / 7.
        tie = {"float6_e3m2fn": 30.0, "float4_e2m1fn": 7.0}[name]
        assert f.overflow == int((finite_in & (np.abs(x) >= tie)).sum())
    else:
        assert f.overflow == int((finite_in & ~np.isfinite(y)).sum())
    assert f.underflow == int((finite_in & (x != 0) & (y == 0)).sum())
    fi = ml_dtypes.finfo(dtype_of(name))
    assert f.subnormal == int((finite_in & (y != 0) & (np.abs(y) < float(fi.smallest_normal))).sum())
    assert f.exact == int((finite_in & (y == x.astype(np.float64))).sum())
    rel, both = rel_ref(x, y)
    assert f.compared == int(both.sum())
    p50, p99 = np.quantile(rel, [0.5, 0.99], method="linear")
    assert (f.rel_error_p50, f.rel_error_p99) == (p50, p99)
    assert f.rel_error_max == rel.max()
    xf = x.astype(np.float64)[both]
    err = np.abs(y[both] - xf)
    assert f.max_abs_error == err.max()
    ue = err / ulp_ref(y[both], name)
    assert f.ulp_error_max == ue.max()
    assert f.ulp_error_mean == pytest.approx(ue.mean(), rel=1e-12)
    expected_sqnr = 10 * math.log10(np.sum(xf**2) / np.sum(err**2))
    assert f.sqnr_db == pytest.approx(expected_sqnr, rel=1e-12)
    assert res.size == x.size and res.shape == x.shape and res.dtype == "float32"


def test_histogram_quantiles_are_close_to_exact() -> None:
    x = wide_data(seed=3)
    ex = scan(x, ALL, progress=False)
    hi = scan(x, ALL, progress=False, quantiles="histogram")
    for a, b in zip(ex.formats, hi.formats):
        assert (a.overflow, a.underflow, a.subnormal, a.exact) == (b.overflow, b.underflow, b.subnormal, b.exact)
        for u, v in ((a.rel_error_p50, b.rel_error_p50), (a.rel_error_p99, b.rel_error_p99)):
            assert v == pytest.approx(u, rel=2**-7)  # buckets are 2^-7 wide (scan docstring)


def test_exact_two_pass_equals_numpy() -> None:
    """Small blocks and a small keep limit force the histogram + second-pass path."""
    # refine through sub-range counts, then values
    tuning = ScanTuning(block=4096, piece=1024, keep_values=1000, refine_cap=8)
    rng = np.random.default_rng(5)
    x = rng.standard_normal(30000).astype(np.float32) * 100
    x[::31] = rng.standard_normal(x[::31].size) * 1e-6  # some underflow and subnormals
    tiny = (x * 1e-3).astype(np.float32)  # mostly flushed to zero in FP4: p50 is exactly 1
    for data in (x, tiny):
        for name in ("bfloat16", "float16", "float8_e4m3fn", "float4_e2m1fn"):
            f = scan(data, [name], progress=False, tuning=tuning)[name]
            rel, _ = rel_ref(data, cast_ref(data, name))
            assert (f.rel_error_p50, f.rel_error_p99) == tuple(np.quantile(rel, [0.5, 0.99]))
    assert scan(tiny, ["float4_e2m1fn"], progress=False, tuning=tuning)["float4_e2m1fn"].rel_error_p50 == 1.0


# ----- published thresholds -----------------------------------------------------------------


def test_thresholds_match_published_values() -> None:
    res = scan(np.zeros(1, np.float32), ALL, progress=False, quantiles=False)
    # IEEE 754-2008 §4.3.1: binary16 overflows from 2^15*(2 - 2^-11) = 65520 (to nearest).
    assert res["float16"].overflow_from == 65520.0
    # bfloat16 (p = 8): 2^127*(2 - 2^-8), float32 bits 0x7F7F8000 (same rule; from library).
    assert res["bfloat16"].overflow_from == 2.0**127 * (2 - 2.0**-8)
    # OFP8 rev 1.0 / FP8 paper Table 1: E4M3 max 448; 464 ties to 448 (even), above overflows.
    assert res["float8_e4m3fn"].overflow_from == np.nextafter(464.0, np.inf)
    # E5M2 max 57344; the tie 61440 goes to the odd-significand side's next value, Inf.
    assert res["float8_e5m2"].overflow_from == 61440.0
    # binary16 smallest subnormal 2^-24; the tie 2^-25 rounds to 0, so anything above survives.
    assert res["float16"].underflow_below == np.nextafter(2.0**-25, np.inf)
    # binary16 smallest normal 2^-14: reached from 2^-14 - 2^-25 (a tie, rounding up to even).
    assert res["float16"].normal_from == 2.0**-14 - 2.0**-25
    # E4M3 smallest subnormal 2^-9 (OFP8 rev 1.0): the tie 2^-10 goes to 0.
    assert res["float8_e4m3fn"].underflow_below == np.nextafter(2.0**-10, np.inf)


def test_fp16_boundaries_one_element_each() -> None:
    # IEEE 754-2008 §4.3.1 threshold and the binary16 subnormal-boundary ties (from library).
    x = np.array([65519.99, 65520.0, 2.0**-25, 3 * 2.0**-26, 2.0**-24, 1.0], np.float64)
    f = scan(x, ["float16"], progress=False)["float16"]
    assert f.overflow == 1  # 65520 only
    assert f.underflow == 1  # 2^-25 (tie to 0)
    assert f.subnormal == 2  # 3*2^-26 -> 2^-24, and 2^-24 itself
    assert f.exact == 2  # 2^-24 and 1.0


def test_ulp_error_against_fractions() -> None:
    # float32(1/3) = 11184811/2^25 (from library, numpy) -> binary16 1365/4096, whose ULP is
    # 2^-12 (binade [1/4, 1/2), t = 10); error in ULPs computed exactly with Fraction.
    x = np.array([np.float32(1 / 3)])
    f = scan(x, ["float16"], progress=False)["float16"]
    exact_x = Fraction(11184811, 2**25)
    assert Fraction(float(x[0])) == exact_x
    q = Fraction(1365, 4096)
    assert f.ulp_error_max == float(abs(q - exact_x) / Fraction(1, 2**12))
    assert f.max_abs_error == float(abs(q - exact_x))
    # float32(0.1) = 13421773/2^27 -> E4M3: 0.1015625 = 13/128, ULP 2^-7 (binade [1/16, 1/8)).
    x2 = np.array([np.float32(0.1)])
    g = scan(x2, ["float8_e4m3fn"], progress=False)["float8_e4m3fn"]
    ex2 = Fraction(13421773, 2**27)
    assert g.ulp_error_max == float(abs(Fraction(13, 128) - ex2) / Fraction(1, 2**7))


# ----- counts-only scan agrees with the full scan ----------------------------------------------

OPTION_SETS = [
    (r, o, s)
    for r in ("roundTiesToEven", "roundTiesToAway", "roundTowardZero", "roundTowardPositive", "roundTowardNegative")
    for o in ("standard", "saturate")
    for s in ("keep", "flush")
]


@pytest.mark.parametrize("rounding,overflow,subnormals", OPTION_SETS)
def test_counts_only_agrees_with_full_scan(rounding: str, overflow: str, subnormals: str) -> None:
    x = wide_data(6000, seed=11)
    fmts = ALL + ("float8_e4m3fnuz", "float8_e5m3fnu", "float8_e8m0fnu", "float8_e3m4")
    kw = dict(rounding=rounding, overflow=overflow, subnormals=subnormals, progress=False)
    full = scan(x, fmts, quantiles="histogram", **kw)
    fast = scan(x, fmts, quantiles=False, **kw)
    for a, b in zip(full.formats, fast.formats):
        assert (a.overflow, a.underflow, a.subnormal, a.invalid) == (
            b.overflow, b.underflow, b.subnormal, b.invalid
        ), a.format
        for kind in ("overflow", "underflow", "subnormal"):
            assert np.array_equal(full.where(kind, a.format)[0], fast.where(kind, a.format)[0])
    assert fast.formats[0].exact is None and fast.formats[0].rel_error_p50 is None


def test_counts_only_refuses_stochastic() -> None:
    with pytest.raises(BitprismError, match="deterministic"):
        scan(np.ones(3), ["float16"], rounding="stochastic", quantiles=False)


def test_unsigned_format_counts_negatives_as_invalid() -> None:
    x = np.array([-1.0, -0.0, 2.0, -np.inf, 3.0], np.float32)
    f = scan(x, ["float8_e5m3fnu"], progress=False)["float8_e5m3fnu"]
    assert f.invalid == 1  # -1.0 only (-0 becomes +0, -Inf is an input Inf)
    assert f.compared == 3


# ----- merging partial results -----------------------------------------------------------------


def _spec(fmts, mode="histogram", limit=5, keep=True):
    opts = CastOptions()
    return ScanPlan(resolve_entries(fmts, opts), opts, None, mode, limit, keep, True)


def _same(a, b) -> None:
    ia, ib = a.input, b.input
    for field in ("n", "nan", "inf", "zero", "carrier_subnormal", "min", "max"):
        assert getattr(ia, field) == getattr(ib, field), field
    assert np.array_equal(ia.exponents, ib.exponents)
    assert np.array_equal(ia.where_nan, ib.where_nan) and np.array_equal(ia.where_inf, ib.where_inf)
    for fa, fb in zip(a.formats, b.formats):
        for field in ("overflow", "underflow", "subnormal", "invalid", "exact", "compared",
                      "max_abs", "max_rel", "max_ulp"):
            assert getattr(fa, field) == getattr(fb, field), field
        for field in ("rel_hist", "rel_values", "where_overflow", "where_underflow",
                      "where_subnormal", "top_err", "top_idx"):
            assert np.array_equal(getattr(fa, field), getattr(fb, field)), field
        for field in ("sum_x2", "sum_err2", "sum_ulp"):  # block sums: equal to float rounding
            assert getattr(fa, field).value() == pytest.approx(getattr(fb, field).value(), rel=1e-12)


@settings(max_examples=25, deadline=None)
@given(
    cuts=st.lists(st.integers(1, 2999), max_size=6, unique=True),
    order=st.randoms(use_true_random=False),
)
def test_merge_of_random_splits_equals_whole(cuts: list[int], order) -> None:
    x = wide_data(3000, seed=7)
    spec = _spec(("float16", "float8_e4m3fn", "float4_e2m1fn"))
    piece = ScanTuning().piece
    whole = scan_block(x, Locator(0), spec, piece)
    bounds = [0] + sorted(cuts) + [x.size]
    parts = [
        scan_block(x[s:e], Locator(s), spec, piece)
        for s, e in zip(bounds, bounds[1:])
    ]
    order.shuffle(parts)  # merges are commutative and associative
    merged = parts[0]
    for p in parts[1:]:
        merged = p.merge(merged) if order.random() < 0.5 else merged.merge(p)
    _same(merged, whole)


def test_exact_sum_is_exact_and_associative() -> None:
    vals = [1e300, 1.0, -1e300, 2.0**-1074, 3.5]
    total = ExactSum()
    for v in vals:
        total = total + ExactSum.of(v)
    assert total.value() == float(sum(Fraction(v) for v in vals))
    assert (ExactSum.of(1.0) + ExactSum.of(math.inf)).value() == math.inf


# ----- input kinds -----------------------------------------------------------------------------


def test_memmap_is_read_in_blocks(tmp_path) -> None:
    x = wide_data(23456, seed=2).reshape(-1, 32)[:733]
    path = tmp_path / "t.npy"
    np.save(path, x)
    mm = np.load(path, mmap_mode="r")
    tuning = ScanTuning(block=5000)
    a = scan(mm, ALL, progress=False, tuning=tuning)
    b = scan(np.array(x), ALL, progress=False, tuning=tuning)
    assert a.formats == b.formats and a.histogram == b.histogram
    for kind in ("nan", "inf"):
        assert all(np.array_equal(u, v) for u, v in zip(a.where(kind), b.where(kind)))


def test_multiblock_equals_single_block() -> None:
    x = wide_data(20000, seed=4).reshape(100, 200)
    one = scan(x, ALL, progress=False, quantiles="histogram")
    many = scan(x, ALL, progress=False, quantiles="histogram", tuning=ScanTuning(block=3000, piece=512))
    for a, b in zip(one.formats, many.formats):
        assert (a.overflow, a.underflow, a.subnormal, a.exact, a.max_abs_error, a.rel_error_p50) == (
            b.overflow, b.underflow, b.subnormal, b.exact, b.max_abs_error, b.rel_error_p50
        )
        assert a.sqnr_db == pytest.approx(b.sqnr_db, rel=1e-12)
        w1, w2 = one.where("largest_error", a.format), many.where("largest_error", a.format)
        assert all(np.array_equal(u, v) for u, v in zip(w1, w2))


@pytest.mark.parametrize("mode,rounding", [("histogram", "roundTiesToEven"), ("exact", "roundTiesToEven"),
                                           ("exact", "stochastic"), (False, "roundTiesToEven")])
def test_threads_equal_one_thread(mode, rounding) -> None:
    """Blocks on worker threads (merged in order, floors from the blocks merged so far) give
    the same result as one thread, the second pass of exact quantiles included."""
    x = wide_data(30000, seed=5).reshape(150, 200)
    # small blocks (counts only with numba: one per thread), pieces and refinement ranges
    small = dict(block=2500, count_block=2500, count_block_min=1, compiled_min=256, piece=512,
                 keep_values=1000, refine_cap=64)
    kw = dict(quantiles=mode, rounding=rounding, seed=7, progress=False)
    one = scan(x, ALL, **kw, tuning=ScanTuning(threads=1, **small))
    many = scan(x, ALL, **kw, tuning=ScanTuning(threads=3, **small))  # even on a one-core machine
    assert one.formats == many.formats and one.histogram == many.histogram
    for name in ALL:
        for kind in ("overflow", "underflow", "subnormal", "largest_error"):
            w1, w2 = one.where(kind, name), many.where(kind, name)
            assert all(np.array_equal(u, v) for u, v in zip(w1, w2)), (name, kind)


@pytest.mark.skipif(not hasattr(os, "fork"), reason="needs os.fork")
def test_scan_in_a_forked_child(tmp_path) -> None:
    """A child forked after a threaded scan inherits the thread pool object but not its
    threads: its own scan must still finish (run in a subprocess, so a hang is a timeout)."""
    script = tmp_path / "fork_scan.py"
    script.write_text(
        "import os\n"
        "import numpy as np\n"
        "from bitprism.tensors.scan import ScanTuning, scan\n"
        "two = ScanTuning(threads=2)  # threads even on a one-core machine\n"
        "x = np.random.default_rng(0).standard_normal(1 << 21).astype(np.float32)\n"
        "for q in (False, 'histogram'):\n"
        "    r = scan(x, quantiles=q, progress=False, tuning=two)\n"
        "    pid = os.fork()\n"
        "    if pid == 0:\n"
        "        os._exit(0 if scan(x, quantiles=q, progress=False, tuning=two).formats == r.formats else 3)\n"
        "    assert os.waitstatus_to_exitcode(os.waitpid(pid, 0)[1]) == 0\n"
        "print('ok')\n"
    )
    out = subprocess.run([sys.executable, str(script)], capture_output=True, text=True, timeout=120)
    assert out.returncode == 0 and out.stdout.strip() == "ok", out.stderr


def test_non_contiguous_input() -> None:
    x = wide_data(6000, seed=8).reshape(60, 100)
    a = scan(x.T, ("float16",), progress=False)
    b = scan(np.ascontiguousarray(x.T), ("float16",), progress=False)
    assert a.formats == b.formats
    assert all(np.array_equal(u, v) for u, v in zip(a.where("overflow", "float16"), b.where("overflow", "float16")))


@pytest.mark.parametrize("src", ["float16", "bfloat16", "float8_e5m2", "float64"])
def test_every_float_input_dtype(src: str) -> None:
    dt = np.dtype(np.float64) if src == "float64" else dtype_of(src)
    with np.errstate(over="ignore"):  # the wide data overflows the narrow input dtypes
        x = wide_data(4000, seed=9).astype(dt)
    res = scan(x, ("float8_e4m3fn", "float16"), progress=False)
    for name in ("float8_e4m3fn", "float16"):
        # every one of these inputs is exact in float32, so one cast from float32 is a single
        # rounding from the exact input
        y = cast_ref(x.astype(np.float32) if src != "float64" else x, name)
        xf = x.astype(np.float64)
        f = res[name]
        assert f.underflow == int((np.isfinite(xf) & (xf != 0) & (y == 0)).sum())
        rel, _ = rel_ref(xf, y)
        assert f.rel_error_p99 == np.quantile(rel, 0.99)
    assert res.dtype == str(dt)


def test_integers_are_exact_inputs() -> None:
    x = np.arange(-70000, 70000, 7, dtype=np.int32)
    f = scan(x, ["float16"], progress=False)["float16"]
    y = cast_ref(x.astype(np.float64), "float16")
    assert f.overflow == int(np.isinf(y).sum())
    assert f.exact == int((y == x).sum())
    assert scan(x, ["float16"], progress=False).histogram.subnormal == 0


def test_input_histogram_and_extrema() -> None:
    x = np.array([0.0, -0.0, 1.0, 1.5, -3.0, 2.0**-130, np.nan, np.inf, 1024.0], np.float32)
    res = scan(x, ["bfloat16"], progress=False)
    h = res.histogram
    assert (h.zero, h.subnormal, h.inf, h.nan) == (2, 1, 1, 1)  # 2^-130 is a float32 subnormal
    assert dict(zip(h.exponents, h.counts)) == {0: 2, 1: 1, 10: 1}
    assert h.total == x.size
    assert (res.min, res.max, res.absmax) == (-3.0, math.inf, math.inf)
    # float16 input: values below its smallest normal 2^-14 are its subnormals
    y = np.array([2.0**-20, 2.0**-14, 1.0], np.float16)
    hy = scan(y, ["float8_e5m2"], progress=False).histogram
    assert hy.subnormal == 1 and hy.exponents == (-14, 0)


def test_empty_zero_d_and_nan_only() -> None:
    e = scan(np.zeros((0, 4), np.float32), progress=False)
    assert e.size == 0 and e.min is None and e.formats[0].compared == 0
    assert e.formats[0].rel_error_p50 is None and e.formats[0].sqnr_db is None
    assert e.where("nan")[0].size == 0 and e.shape == (0, 4)
    z = scan(np.float32(70000.0), ["float16"], progress=False)
    assert z.shape == () and z.size == 1 and z["float16"].overflow == 1
    n = scan(np.full((3, 3), np.nan), ["float16", "float4_e2m1fn"], progress=False)
    for f in n.formats:
        assert (f.nan, f.compared, f.overflow, f.underflow, f.exact) == (9, 0, 0, 0, 0)
    assert n.min is None and n.absmax is None
    assert len(n.where("nan")[0]) == 9


def test_scale_multiplies_before_the_cast() -> None:
    x = wide_data(5000, seed=12)
    s = 2.0**-12
    res = scan(x, ("float8_e4m3fn",), scale=s, progress=False)
    xs = x.astype(np.float64) * s
    y = cast_ref(xs, "float8_e4m3fn")
    f = res["float8_e4m3fn"]
    assert res.scale == s
    assert f.overflow == int((np.isfinite(xs) & ~np.isfinite(y)).sum())
    rel, _ = rel_ref(xs, y)
    assert f.rel_error_p50 == np.quantile(rel, 0.5)
    assert "scale=" in res.to_text()


def test_stochastic_rounding_is_seeded() -> None:
    x = np.random.default_rng(1).standard_normal(3000)
    a = scan(x, ["float8_e5m2"], rounding="stochastic", seed=3, progress=False)
    b = scan(x, ["float8_e5m2"], rounding="stochastic", seed=3, progress=False)
    assert a.formats == b.formats
    rne = scan(x, ["float8_e5m2"], progress=False)
    assert a["float8_e5m2"].rel_error_max >= rne["float8_e5m2"].rel_error_max


def test_bad_arguments() -> None:
    with pytest.raises(BitprismError, match="quantiles"):
        scan(np.ones(2), quantiles="median")
    with pytest.raises(BitprismError, match="scale"):
        scan(np.ones(2), scale=0.0)
    with pytest.raises(BitprismError, match="unknown format"):
        scan(np.ones(2), ["float7"])
    with pytest.raises(BitprismError, match="kind"):
        scan(np.ones(2), ["float16"]).where("big")


# ----- where() ---------------------------------------------------------------------------------


def test_where_points_at_the_right_elements() -> None:
    x = wide_data(8000, seed=13).reshape(40, 200)
    res = scan(x, ("float16", "float8_e4m3fn"), progress=False, where_limit=7)
    nan_idx = res.where("nan")
    assert len(nan_idx) == 2 and np.isnan(x[nan_idx]).all()
    assert np.array_equal(np.ravel_multi_index(nan_idx, x.shape), np.flatnonzero(np.isnan(x))[:7])
    assert np.isinf(x[res.where("inf")]).all()
    for name in ("float16", "float8_e4m3fn"):
        y = cast_ref(x, name).reshape(x.shape)
        ov = res.where("overflow", name)
        assert np.isfinite(x[ov]).all() and not np.isfinite(y[ov]).any()
        expect = np.flatnonzero(np.isfinite(x) & ~np.isfinite(y))[:7]
        assert np.array_equal(np.ravel_multi_index(ov, x.shape), expect)
        un = res.where("underflow", name)
        assert (y[un] == 0).all() and (x[un] != 0).all()
        sb = res.where("subnormal", name)
        assert (np.abs(y[sb]) < float(ml_dtypes.finfo(dtype_of(name)).smallest_normal)).all()
        # largest absolute errors, largest first, among finite results
        le = res.where("largest_error", name)
        with np.errstate(invalid="ignore"):  # Inf - Inf at input Infs, masked just below
            err = np.abs(y - x.astype(np.float64))
        err[~(np.isfinite(x) & np.isfinite(y))] = -1
        top = np.sort(err.reshape(-1))[::-1][:7]
        assert np.array_equal(err[le], top)
        assert res[name].max_abs_error == top[0]


# ----- dask --------------------------------------------------------------------------------------


def test_dask_local_schedulers() -> None:
    da = pytest.importorskip("dask.array")
    import dask

    x = wide_data(9000, seed=14).reshape(90, 100)
    ref = scan(x, ALL, progress=False)
    d = da.from_array(x, chunks=(17, 33))
    for scheduler in ("synchronous", "threads"):
        with dask.config.set(scheduler=scheduler):
            got = scan(d, ALL, progress=False)
        assert [(f.overflow, f.underflow, f.subnormal, f.exact, f.rel_error_p50, f.rel_error_p99,
                 f.max_abs_error) for f in got.formats] == [
            (f.overflow, f.underflow, f.subnormal, f.exact, f.rel_error_p50, f.rel_error_p99,
             f.max_abs_error) for f in ref.formats]
        assert got.histogram == ref.histogram
        for name in ALL:
            for kind in ("overflow", "underflow", "largest_error"):
                assert all(np.array_equal(u, v) for u, v in zip(got.where(kind, name), ref.where(kind, name)))


def test_dask_two_pass_exact() -> None:
    da = pytest.importorskip("dask.array")
    import dask

    tuning = ScanTuning(keep_values=100, refine_cap=8)
    x = np.random.default_rng(15).standard_normal(5000).astype(np.float32)
    with dask.config.set(scheduler="synchronous"):
        f = scan(da.from_array(x, chunks=700), ["float8_e5m2"], progress=False, tuning=tuning)["float8_e5m2"]
    rel, _ = rel_ref(x, cast_ref(x, "float8_e5m2"))
    assert (f.rel_error_p50, f.rel_error_p99) == tuple(np.quantile(rel, [0.5, 0.99]))


def test_dask_distributed_local_cluster() -> None:
    distributed = pytest.importorskip("distributed")
    da = pytest.importorskip("dask.array")

    x = wide_data(4000, seed=16).reshape(40, 100)
    ref = scan(x, ("float16", "float8_e4m3fn"), progress=False)
    with distributed.LocalCluster(
        n_workers=1, threads_per_worker=1, processes=False, dashboard_address=None
    ) as cluster, distributed.Client(cluster):
        got = scan(da.from_array(x, chunks=(10, 50)), ("float16", "float8_e4m3fn"), progress=False)
    assert got.formats == ref.formats


# ----- block-format entries (the scan-format protocol) -----------------------------------------


class _PowerOfTwoBlocks:
    """A toy block format: each block of 8 shares a power-of-two step 2^(floor(log2 max)-2)."""

    name = "toy8"
    block_size = 8

    def __init__(self) -> None:
        self.lengths: list[int] = []

    def dequantize_block(self, x: np.ndarray) -> np.ndarray:
        self.lengths.append(x.size)
        assert x.dtype == np.float64 and x.ndim == 1 and x.size % 8 == 0
        b = x.reshape(-1, 8)
        m = np.max(np.abs(b), axis=1, keepdims=True)
        with np.errstate(divide="ignore"):
            step = np.where(m > 0, np.exp2(np.floor(np.log2(np.where(m > 0, m, 1))) - 2), 1.0)
        return (np.round(b / step) * step).reshape(-1)


def test_block_format_hook_with_padding() -> None:
    hook = _PowerOfTwoBlocks()
    x = np.random.default_rng(17).standard_normal((13, 21)) * 10  # rows of 21: padded to 24
    x[0, 0] = 1e-9
    f = scan(x, [hook, "float16"], progress=False)["toy8"]
    assert all(n % 8 == 0 for n in hook.lengths)
    padded = np.zeros((13, 24))
    padded[:, :21] = x
    y = _PowerOfTwoBlocks().dequantize_block(padded.reshape(-1)).reshape(13, 24)[:, :21]
    assert f.underflow == int(((y == 0) & (x != 0)).sum())
    assert f.exact == int((y == x).sum())
    rel, _ = rel_ref(x.reshape(-1), y.reshape(-1))
    assert f.rel_error_p50 == np.quantile(rel, 0.5)
    assert f.subnormal is None and f.ulp_error_mean is None
    g = scan(x, [_PowerOfTwoBlocks()], progress=False, quantiles=False)["toy8"]
    assert (g.underflow, g.overflow, g.exact) == (f.underflow, f.overflow, None)


def test_mx_formats_from_the_mx_module() -> None:
    mx = pytest.importorskip("bitprism.tensors.mx")
    fmt = mx.get_mx_format("mxfp4")
    x = np.random.default_rng(18).standard_normal((4, 64))
    f = scan(x, [fmt], progress=False)[fmt.name]
    y = mx.mx_quantize(x, fmt).values
    rel, _ = rel_ref(x.reshape(-1), np.asarray(y).reshape(-1))
    assert f.rel_error_p99 == np.quantile(rel, 0.99)


# ----- presentation and layering ---------------------------------------------------------------


def test_text_and_html_repr() -> None:
    x = wide_data(2000, seed=19)
    res = scan(x, ("float16", "float8_e4m3fn"), progress=False)
    assert isinstance(res, ScanResult)
    bundle = res._repr_mimebundle_()
    assert set(bundle) == {"text/plain", "text/html"}
    text = bundle["text/plain"]
    assert "float8_e4m3fn" in text and "overflow" in text and "float32 [2000]" in text
    html = bundle["text/html"]
    assert "<script" not in html and "float8_e4m3fn" in html
    assert f"{res['float16'].overflow:,}" in html


def test_html_escapes_names() -> None:
    class Evil(_PowerOfTwoBlocks):
        name = "<b>x</b>"

    html = scan(np.ones(8), [Evil()], progress=False).to_html()
    assert "<b>x</b>" not in html and "&lt;b&gt;x&lt;/b&gt;" in html


def test_progress_bar_on_large_input(capsys) -> None:
    scan(np.ones(1000, np.float32), ["float16"], progress=True, tuning=ScanTuning(progress_min=100, block=256))
    assert "scan" in capsys.readouterr().err


def test_progress_bar_counts_each_pass(capsys) -> None:
    # exact quantiles of more than keep_values elements take a second pass: the bar names it and
    # counts the tensor's 1000 elements again instead of showing a total of twice the tensor
    x = np.random.default_rng(0).standard_normal(1000).astype(np.float32)
    scan(x, ["float16"], progress=True, quantiles="exact",
         tuning=ScanTuning(progress_min=100, block=256, keep_values=10))
    err = capsys.readouterr().err
    assert "scan, pass 1" in err and "scan, pass 2" in err
    assert "/1.00k" in err and "/2.00k" not in err


def test_importing_scan_loads_no_plotting_or_dask() -> None:
    code = (
        "import sys, bitprism.tensors.scan, bitprism.plots;"
        "bad = [m for m in ('matplotlib', 'dask', 'distributed', 'tqdm', 'IPython', 'ipywidgets') if m in sys.modules];"
        "print(bad); sys.exit(1 if bad else 0)"
    )
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert done.returncode == 0, done.stdout + done.stderr


def test_format_entry_accepts_aliases_and_dtypes() -> None:
    res = scan(np.ones(4, np.float32), ["fp16", ml_dtypes.bfloat16], progress=False)
    assert res.format_names == ("float16", "bfloat16")
    assert res["fp16"] is res["float16"]
    assert get_format("fp16").name == "float16"


def test_block_nan_is_counted_apart_from_overflow() -> None:
    mx = pytest.importorskip("bitprism.tensors.mx")
    fmt = mx.get_mx_format("mxfp8_e4m3")
    x = np.random.default_rng(19).standard_normal((2, 64))  # invented data, 4 blocks of 32
    x[0, 3] = np.nan  # block (0, 0): its 31 finite neighbours become NaN (MX v1.0 §6.3)
    x[1, 40] = np.inf  # block (1, 1): 31 more
    f = scan(x, [fmt, "float16"], progress=False)
    y = np.asarray(mx.mx_quantize(x, fmt).values)
    lost = np.isfinite(x) & ~np.isfinite(y)
    assert f[fmt.name].block_nan == int(lost.sum()) == 62
    assert f[fmt.name].overflow == 0
    assert f["float16"].block_nan is None
    assert "block NaN" in f.to_text() and "block NaN" in f.to_html()
    assert f[fmt.name].fraction("block_nan") == 62 / x.size


_REPEATS = st.sampled_from([0.0, 1.0, 0.5, 2.0**-30, math.nan])  # relative errors repeat a lot


@settings(max_examples=300, deadline=None)
@given(st.lists(
    st.one_of(
        st.lists(st.one_of(_REPEATS, st.floats(0, 2, allow_nan=False)), max_size=40),
        st.tuples(st.lists(_REPEATS, min_size=1, max_size=5, unique_by=str), st.integers(1, 9)),
    ),
    min_size=1, max_size=4,
))
def test_compress_values_matches_numpy_unique(parts_spec: list) -> None:
    # sorted distinct values with summed weights, whether the parts are plain values (one
    # block: the sort path) or (values, counts) pairs (merges): numpy's unique is the reference
    parts = []
    for p in parts_spec:
        if isinstance(p, tuple):
            vals = np.unique(np.array(p[0]))  # a pair holds distinct sorted values
            parts.append(np.stack((vals, np.full(vals.size, float(p[1])))))
        else:
            parts.append(np.array(p, np.float64))
    values = np.concatenate([q if q.ndim == 1 else q[0] for q in parts])
    weights = np.concatenate([np.ones(q.size) if q.ndim == 1 else q[1] for q in parts])
    uniq, inv = np.unique(values, return_inverse=True)
    expected = np.stack((uniq, np.bincount(inv.reshape(-1), weights=weights, minlength=uniq.size)))
    got = compress_values(parts)
    assert got.shape == expected.shape and np.array_equal(got, expected, equal_nan=True)


def test_options_are_resolved_once_per_scan() -> None:
    """A scan validates its options once and passes the object down: a fresh process scanning
    3 values into 2 formats builds a handful of CastOptions (the thresholds' two variants per
    format and sign), not one per rounded scalar (762 before the options were passed down)."""
    code = (
        "import numpy as np\n"
        "from bitprism.numerics.options import CastOptions\n"
        "import bitprism as bp\n"
        "count = [0]\n"
        "orig = CastOptions.__post_init__\n"
        "def counting(self):\n"
        "    count[0] += 1\n"
        "    orig(self)\n"
        "CastOptions.__post_init__ = counting\n"
        "bp.scan(np.array([1.0, 2.0, 3.0]), ['float16', 'bfloat16'], progress=False)\n"
        "first = count[0]\n"
        "bp.scan(np.array([1.0, 2.0, 3.0]), ['float16', 'bfloat16'], progress=False, rounding='rtz')\n"
        "print(first, count[0] - first)\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    first, second = map(int, out.stdout.split())
    assert first <= 8 and second <= 9, (first, second)


@pytest.mark.skipif(sys.platform != "linux", reason="reads /proc/self/status (Linux)")
@pytest.mark.parametrize("quantiles", [False, "histogram"])
def test_memmap_scan_keeps_the_resident_set_small(tmp_path, quantiles) -> None:
    """A memory-mapped file is scanned block by block and each block's pages are handed back
    afterwards: once the scan is done, the process holds a few blocks of the file, not the file
    (256 MiB here; before, the whole file stayed in the resident set while the array lived)."""
    path = tmp_path / "big.npy"
    n = (256 << 20) // 4
    mm = np.lib.format.open_memmap(path, mode="w+", dtype=np.float32, shape=(n,))
    for s in range(0, n, 1 << 22):
        mm[s : s + (1 << 22)] = np.random.default_rng(s).standard_normal(min(1 << 22, n - s))
    mm.flush()
    del mm
    code = (
        "import sys, numpy as np\n"
        "from bitprism.tensors.scan import ScanTuning, scan\n"
        "def rss_mib():\n"
        "    with open('/proc/self/status') as f:\n"
        "        return next(int(l.split()[1]) for l in f if l.startswith('VmRSS')) // 1024\n"
        f"q = {quantiles!r}\n"
        "tuning = ScanTuning(block=1 << 20, count_block=1 << 20, count_block_min=1 << 20)\n"
        "scan(np.ones(1 << 16, np.float32), ['float16'], progress=False, quantiles=q)  # compile\n"
        "mm = np.load(sys.argv[1], mmap_mode='r')\n"
        "before = rss_mib()\n"
        "scan(mm, ['float16', 'float8_e4m3fn'], progress=False, quantiles=q, tuning=tuning)\n"
        "print(rss_mib() - before)\n"
    )
    out = subprocess.run([sys.executable, "-c", code, str(path)], capture_output=True, text=True,
                         check=True, timeout=300)
    grew_mib = int(out.stdout.split()[-1])
    assert grew_mib < 64, grew_mib


@pytest.mark.parametrize("quantiles", ["exact", "histogram", False])
def test_signaling_nans_are_scanned_without_warnings(quantiles) -> None:
    """float16 signaling NaNs (0x7d01, 0xfc01: quiet bit clear, IEEE 754-2019 §6.2.1) widen to
    the carrier quietly (numpy warns "invalid value" on such casts; pytest turns warnings into
    errors here) and count as NaN."""
    x = np.array([0x7D01, 0x3C00, 0xFC01] * 30000, np.uint16).view(np.float16)
    for kw in ({}, {"scale": 2.0}):
        r = scan(x, ["float16", "float8_e4m3fn"], progress=False, quantiles=quantiles, **kw)
        assert r.histogram.nan == 60000
