"""Tests of the counts-only scan path (``tensors.scan.counts_only``) and its counting kernel
(``tensors.scan.compiled.pattern_counts``).

The kernel and its numpy fallback are checked against plain Python integer counts on every
kind of IEEE pattern; the counts-only scan against the general scan path (the block scan that
casts nothing and compares with numpy, used without numba) and against ml_dtypes / numpy casts
(the references for these formats).
"""

from __future__ import annotations

import math

import ml_dtypes
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import bitprism.tensors.scan.compiled.pattern_counts as pc
import bitprism.tensors.scan.counts_only as counts_only
from bitprism.errors import BitprismError
from bitprism.numerics.options import CastOptions
from bitprism.tensors.scan import ScanTuning, scan
from bitprism.tensors.scan.compiled.jit import available as compiled_available
from bitprism.tensors.scan.plan import ScanPlan, resolve_entries
from test_scan import wide_data

FORMATS = ("bfloat16", "float16", "float8_e4m3fn", "float8_e5m2", "float6_e3m2fn", "float4_e2m1fn")
needs_numba = pytest.mark.skipif(not compiled_available(), reason="numba not installed")

# IEEE 754-2008 §3.4 binary32 / binary64 encodings (common practice): sign, biased exponent,
# trailing significand.
F32 = dict(t=23, mask=0x7FFFFFFF, inf=0x7F800000, sign=0x80000000, dtype=np.uint32)
F64 = dict(t=52, mask=0x7FFFFFFFFFFFFFFF, inf=0x7FF0000000000000, sign=0x8000000000000000,
           dtype=np.uint64)


def special_patterns(f: dict) -> list[int]:
    """±0, the smallest and largest subnormal, the smallest normal, 1.0, the largest finite,
    ±Inf, and NaNs (quiet and signalling payloads) of both signs."""
    t, inf, sign = f["t"], f["inf"], f["sign"]
    one = (inf >> 1) & ~((1 << t) - 1)  # exponent field = bias: the pattern of 1.0
    pos = [0, 1, (1 << t) - 1, 1 << t, one, inf - 1, inf, inf + 1, inf | (1 << (t - 1)), sign - 1]
    return pos + [p | sign for p in pos]


def py_counts(bits: np.ndarray, f: dict, cuts: list[int]) -> dict:
    """The kernel's numbers by plain Python integer arithmetic (one element at a time)."""
    vals = [int(v) for v in bits]
    mask, inf, sign = f["mask"], f["inf"], f["sign"]
    pos = [v for v in vals if 0 < v < inf]
    neg = [v for v in vals if sign < v < sign + inf]
    mags = [v & mask for v in pos + neg]
    return dict(
        at_least=[sum(1 for v in vals if v & mask >= c) for c in cuts],
        has_pos_inf=inf in vals, has_neg_inf=(inf | sign) in vals,
        pos_max=max(pos, default=None), neg_max=max(neg, default=None),
        min_magnitude=min(mags, default=None),
        exponents=np.bincount([(v & mask) >> f["t"] for v in vals], minlength=(inf >> f["t"]) + 1),
    )


def check_counts(bits: np.ndarray, f: dict, cuts: list[int], compiled: bool) -> None:
    got = pc.block_counts(bits, f["t"], np.array(cuts, f["dtype"]), True, compiled=compiled)
    want = py_counts(bits, f, cuts)
    assert [int(v) for v in got.at_least] == want["at_least"]
    for k in ("has_pos_inf", "has_neg_inf", "pos_max", "neg_max", "min_magnitude"):
        assert getattr(got, k) == want[k], k
    assert got.exponents is not None and np.array_equal(got.exponents, want["exponents"])


@pytest.mark.parametrize("f", [F32, F64], ids=["float32", "float64"])
@pytest.mark.parametrize("n", [1, 7, pc.CHUNK - 1, pc.CHUNK, pc.CHUNK + 1, 2 * pc.CHUNK + 900])
@pytest.mark.parametrize("compiled", [True, False], ids=["numba", "numpy"])
def test_block_counts_on_every_kind_of_pattern(f: dict, n: int, compiled: bool) -> None:
    if compiled and not compiled_available():
        pytest.skip("numba not installed")
    rng = np.random.default_rng(n)
    specials = special_patterns(f)
    hi = int(f["sign"]) * 2
    bits = rng.integers(0, hi, n, dtype=f["dtype"], endpoint=False)
    bits[rng.integers(0, n, n // 2)] = rng.choice(np.array(specials, f["dtype"]), n // 2)
    # cuts: 1, +Inf and just above it (NaN), the special magnitudes, random magnitudes
    cuts = sorted({1, f["inf"], f["inf"] + 1} | {p & f["mask"] for p in specials if p & f["mask"]}
                  | {int(c) for c in rng.integers(1, f["sign"], 9, dtype=f["dtype"])})
    check_counts(bits, f, cuts, compiled)


@needs_numba
@pytest.mark.parametrize("f", [F32, F64], ids=["float32", "float64"])
def test_block_counts_chunks_without_specials(f: dict) -> None:
    """Chunks of only zeros, only NaN, only -Inf, Inf and NaN without finite values, one sign,
    or one binade, and the two signs of Inf in different chunks: the kernel settles cuts from
    the chunk's range there and looks for the signs of Inf until it has seen both, so each
    case is held to the Python counts."""
    inf, sign, t = f["inf"], f["sign"], f["t"]
    one = (inf >> 1) & ~((1 << t) - 1)
    cuts = sorted({1, 2, 1 << t, one, one + 5, inf - 1, inf, inf + 1, sign - 1})
    cases = [
        np.zeros(3000, f["dtype"]),
        np.full(3000, inf + 3, f["dtype"]),
        np.full(3000, sign | inf, f["dtype"]),
        np.tile(np.array([inf, inf + 5, 0, sign | inf, sign | (inf + 9)], f["dtype"]), 700),
        np.arange(one, one + 3000, dtype=f["dtype"]),
        np.arange(one, one + 3000, dtype=f["dtype"]) | f["dtype"](sign),
        np.concatenate([np.zeros(pc.CHUNK, f["dtype"]),
                        np.arange(one, one + pc.CHUNK, dtype=f["dtype"])]),
        # +Inf in the first chunk, -Inf only two chunks later
        np.concatenate([np.full(pc.CHUNK, inf, f["dtype"]), np.arange(one, one + pc.CHUNK, dtype=f["dtype"]),
                        np.full(5, sign | inf, f["dtype"])]),
    ]
    for bits in cases:
        check_counts(bits, f, cuts, True)


@needs_numba
@settings(max_examples=60, deadline=None)
@given(
    st.lists(st.integers(0, 2**32 - 1), min_size=1, max_size=5000),
    st.lists(st.integers(1, 2**31), min_size=1, max_size=12, unique=True),
)
def test_block_counts_property(values: list[int], cuts: list[int]) -> None:
    check_counts(np.array(values, np.uint32), F32, sorted(cuts), True)


def near_cuts(f: dict, cuts: list[int], rng: np.random.Generator, n: int) -> np.ndarray:
    """n patterns of both signs at and around the cuts: c - 2 .. c + 2, and c plus or minus
    half and one step of the key (2^KEY_SHIFT), where a key-based count would go wrong first."""
    step = 1 << pc.KEY_SHIFT[np.dtype(f["dtype"])]
    near = sorted({c + d for c in cuts for d in (-step, -step // 2, -2, -1, 0, 1, 2, step // 2, step)
                   if 0 <= c + d <= f["mask"]})
    mags = rng.choice(np.array(near, f["dtype"]), n)
    return mags | (rng.integers(0, 2, n).astype(f["dtype"]) * f["dtype"](f["sign"]))


@needs_numba
@pytest.mark.parametrize("f", [F32, F64], ids=["float32", "float64"])
def test_block_counts_at_key_steps(f: dict) -> None:
    """Cuts on multiples of the key step and one above (counted on keys), at other
    remainders (counted on full patterns, more than the two of the first loop), more than
    eight of each: every element sits next to a cut, so an off-by-one in a key bound or a
    count taken from the wrong slot shows."""
    rng = np.random.default_rng(11)
    step = 1 << pc.KEY_SHIFT[np.dtype(f["dtype"])]
    tops = rng.integers(1, f["inf"] // step, 12)
    cuts = {1, f["inf"], f["inf"] + 1}
    cuts |= {int(q) * step for q in tops[:6]} | {int(q) * step + 1 for q in tops[6:]}
    cuts |= {int(q) * step + int(r) for q, r in zip(tops, rng.integers(2, step, 12))}
    cuts |= {step, step + 1, f["inf"] - 1}
    cuts = sorted(cuts)
    bits = near_cuts(f, cuts, rng, 3 * pc.CHUNK + 5)
    check_counts(bits, f, cuts, True)


@needs_numba
def test_block_counts_when_the_live_cuts_change_between_chunks() -> None:
    """Chunk by chunk, the data moves to other binades: full-width cuts live in one chunk are
    settled in the next, so the two of the first loop change (they follow the previous
    chunk) and the others are compared in passes of their own."""
    f = F32
    rng = np.random.default_rng(12)
    # float16 and bfloat16 thresholds are not on key steps (IEEE 754 binary16: largest finite
    # 65504, so 65520 rounds up; smallest normal 2^-14)
    odd = [0x387FE000, 0x3A7FF000, 0x3F7FF000, 0x477FF000, 0x4B7FF000, 0x7F7F8000]
    cuts = sorted({1, 0x3F800000, 0x3F800001, f["inf"], f["inf"] + 1, *odd})
    pieces = []
    for lo, hi in [(0x38000000, 0x3B000000), (0x46000000, 0x4C000000), (0x3F000000, 0x3F900000),
                   (0x00000001, 0x7F800000), (0x38000000, 0x3B000000)]:
        pieces.append(rng.integers(lo, hi, pc.CHUNK, dtype=np.uint32))
    pieces.append(near_cuts(f, cuts, rng, pc.CHUNK))
    check_counts(np.concatenate(pieces), f, cuts, True)


@needs_numba
@settings(max_examples=40, deadline=None)
@given(st.data())
def test_block_counts_property_near_key_steps(data: st.DataObject) -> None:
    """Random cuts on and off the key steps, and patterns around them."""
    step = 1 << pc.KEY_SHIFT[np.dtype(np.uint32)]
    tops = data.draw(st.lists(st.integers(0, (2**31 - 1) // step), min_size=1, max_size=20))
    rems = data.draw(st.lists(st.sampled_from([0, 1, 1, 2, step - 1, step // 2]),
                              min_size=len(tops), max_size=len(tops)))
    cuts = sorted({min(max(q * step + r, 1), 2**31 - 1) for q, r in zip(tops, rems)})
    seed = data.draw(st.integers(0, 2**32 - 1))
    n = data.draw(st.integers(1, 2 * pc.CHUNK + 3))
    check_counts(near_cuts(F32, cuts, np.random.default_rng(seed), n), F32, cuts, True)


def test_block_counts_refuses_bad_cuts() -> None:
    bits = np.arange(10, dtype=np.uint32)
    for cuts in ([0, 5], [5, 3]):
        with pytest.raises(ValueError, match="ascending"):
            pc.block_counts(bits, 23, np.array(cuts, np.uint32), False)


@pytest.mark.parametrize("compiled", [True, False], ids=["numba", "numpy"])
def test_first_positions(compiled: bool) -> None:
    if compiled and not compiled_available():
        pytest.skip("numba not installed")
    rng = np.random.default_rng(3)
    bits = rng.integers(0, 2**32, 10000, dtype=np.uint32)
    for lo, hi, magnitude, need in [(0x3F000000, 0x40000000, True, 5), (0x80000000, 0x90000000, False, 3),
                                    (0x7F800001, 0x80000000, True, 4), (5, 5, True, 3), (0, 2**32, False, 0),
                                    (0x12345678, 0x12345678 + 2**21, True, 6)]:
        key = bits & np.uint32(0x7FFFFFFF) if magnitude else bits
        want = [i for i, v in enumerate(key.tolist()) if lo <= v < hi][:need]
        got = pc.first_positions(bits, lo, hi, magnitude, need, compiled=compiled)
        assert got.tolist() == want


@pytest.mark.parametrize("compiled", [True, False], ids=["numba", "numpy"])
def test_range_positions(compiled: bool) -> None:
    """Several magnitude ranges at once, reading only the chunks whose counts (as the kernel
    keeps them) say they hold some: common ranges, rare ones spread over chunks, an empty one,
    and one asked for nothing."""
    if compiled and not compiled_available():
        pytest.skip("numba not installed")
    rng = np.random.default_rng(4)
    bits = rng.integers(0, 2**32, 3 * pc.CHUNK + 100, dtype=np.uint32)
    key = bits & np.uint32(0x7FFFFFFF)
    rare = 8 * (2**31 // bits.size)  # about eight of the block's magnitudes in this width
    ranges = [(0x3F000000, 0x40000000), (0x12345678, 0x12345678 + rare), (0x7F800001, 0x80000000),
              (5, 6), (0x20000000, 0x30000000)]
    needs = [5, 6, 4, 3, 0]
    starts = np.arange(0, bits.size, pc.CHUNK)
    chunks = np.array([np.add.reduceat(((key >= lo) & (key < hi)).astype(np.int64), starts)
                       for lo, hi in ranges])
    got = pc.range_positions(bits, ranges, needs, chunks, compiled=compiled)
    for (lo, hi), need, pos in zip(ranges, needs, got):
        want = [i for i, v in enumerate(key.tolist()) if lo <= v < hi][:need]
        assert pos.tolist() == want
    few = [i for i, v in enumerate(key.tolist()) if ranges[1][0] <= v < ranges[1][1]]
    assert len(few) >= 3 and few[min(5, len(few) - 1)] >= pc.CHUNK  # spread over chunks
    # the same from per-chunk counts at or above each bound, as BlockCounts.chunk_at_least
    # holds them: column 2r for the low end of range r, 2r + 1 for its high end
    at_least = np.array([np.add.reduceat((key >= b).astype(np.int64), starts)
                         for lo, hi in ranges for b in (lo, hi)]).T
    columns = [(2 * r, 2 * r + 1) for r in range(len(ranges))]
    by_columns = pc.range_positions(bits, ranges, needs, at_least, columns=columns, compiled=compiled)
    assert [p.tolist() for p in by_columns] == [p.tolist() for p in got]
    top = [(2 * r, -1) for r in range(len(ranges))]  # no high end: up to every magnitude
    opened = pc.range_positions(bits, [(lo, 2**31) for lo, _ in ranges], needs, at_least, columns=top,
                                compiled=compiled)
    for (lo, _), need, pos in zip(ranges, needs, opened):
        assert pos.tolist() == [i for i, v in enumerate(key.tolist()) if v >= lo][:need]
    if compiled:
        with pytest.raises(ValueError, match="one column per chunk"):
            pc.range_positions(bits, ranges, needs, chunks[:, :1])
        with pytest.raises(ValueError, match="one row per chunk"):
            pc.range_positions(bits, ranges, needs, at_least[:1], columns=columns)
        with pytest.raises(ValueError, match="columns must be in it"):
            pc.range_positions(bits, ranges, needs, at_least, columns=[(0, 2 * len(ranges))] * len(ranges))


# ----- the counts-only scan against the general path and against the reference casts ---------


def wide(n: int, seed: int, dtype=np.float32) -> np.ndarray:
    """``test_scan.wide_data`` spread over 2^-140 .. 2^40 (float32 subnormals included)."""
    return wide_data(n, seed, dtype, low=-140, high=40)


def narrow(x: np.ndarray, dtype) -> np.ndarray:
    with np.errstate(over="ignore"):  # out-of-range values become Inf: wanted here
        return x.astype(dtype)


def general(*args, **kw):
    """The same scan on the general block path (the compiled loops, and so the counts-only
    path, switched off)."""
    return scan(*args, **kw, tuning=ScanTuning(compiled=False))


def assert_same(a, b, formats) -> None:
    assert a.formats == b.formats
    assert (a.size, a.min, a.max, a.absmax) == (b.size, b.min, b.max, b.absmax)
    ha, hb = a.histogram, b.histogram
    assert (ha.zero, ha.subnormal, ha.inf, ha.nan) == (hb.zero, hb.subnormal, hb.inf, hb.nan)
    if ha.collected and hb.collected:
        assert (ha.exponents, ha.counts) == (hb.exponents, hb.counts)
    for kind in ("nan", "inf"):
        assert all(np.array_equal(p, q) for p, q in zip(a.where(kind), b.where(kind))), kind
    for name in formats:
        for kind in ("overflow", "underflow", "subnormal"):
            pa, pb = a.where(kind, name), b.where(kind, name)
            assert all(np.array_equal(p, q) for p, q in zip(pa, pb)), (name, kind)


def late(dtype) -> np.ndarray:
    """Ones, the minimum in the middle, and near the end of 600k elements (past the first
    converted pieces) a NaN, an Inf, and values that overflow or underflow float8_e4m3fn."""
    x = np.ones(600_000, np.float32)
    x[300_000] = -5.0
    x[-9:] = [np.nan, np.inf, 7.0, 1000.0, 1e-9, 3e-3, np.nan, 2000.0, 1e-10]
    return narrow(x, dtype)


def sparse() -> np.ndarray:
    """300k ones with NaN, Inf, overflows and underflows of float8_e4m3fn a few thousand
    elements apart: most of the kernel's chunks hold none, the others one or two, so the
    positions come from many chunks."""
    x = np.ones(300_000, np.float32)
    x[::7001] = np.nan
    x[3::9001] = 1000.0
    x[5::11003] = -1e-9
    x[7::13001] = -np.inf
    return x


CASES = [
    ("late specials, float16", lambda: late(np.float16), {}),
    ("sparse specials", sparse, {}),
    ("late specials, float32", lambda: late(np.float32), {}),
    ("float32", lambda: wide(40000, 1), {}),
    ("float64", lambda: wide(40000, 2, np.float64), {}),
    ("float16 input", lambda: narrow(wide(40000, 3), np.float16), {}),
    ("bfloat16 input", lambda: narrow(wide(40000, 4), ml_dtypes.bfloat16), {}),
    ("int32 input", lambda: np.random.default_rng(5).integers(-2**31, 2**31, 40000, dtype=np.int32), {}),
    ("scaled", lambda: wide(40000, 6), {"scale": 2.0**-20}),
    ("ties away, saturate", lambda: wide(40000, 7), {"rounding": "roundTiesToAway", "overflow": "saturate"}),
    ("toward zero, flush", lambda: wide(40000, 8), {"rounding": "roundTowardZero", "subnormals": "flush"}),
    ("2-d, strided", lambda: wide(80000, 9).reshape(200, 400)[:, ::2], {}),
    ("only NaN", lambda: np.full(5000, np.nan, np.float32), {}),
    ("only -Inf and zeros", lambda: np.array([-np.inf, 0.0, -0.0] * 1000, np.float32), {}),
    ("empty", lambda: np.zeros((0, 4), np.float32), {}),
    ("0-d", lambda: np.float32(70000.0), {}),
]


@pytest.mark.parametrize("exponents", [False, True], ids=["no-exponents", "exponents"])
@pytest.mark.parametrize("name,make,kw", CASES, ids=[c[0] for c in CASES])
def test_counts_only_equals_general_path(name, make, kw, exponents) -> None:
    x = make()
    fast = scan(x, FORMATS, quantiles=False, exponents=exponents, progress=False, **kw)
    ref = general(x, FORMATS, quantiles=False, exponents=exponents, progress=False, **kw)
    assert fast.histogram.collected is exponents
    assert_same(fast, ref, FORMATS)


def test_counts_only_without_numba_and_on_threads() -> None:
    """Without numba the general path runs (and leaves the exponents out all the same); many
    small blocks on worker threads give the same result as one pass."""
    x = wide(200_000, 10)
    ref = scan(x, FORMATS, quantiles=False, progress=False, tuning=ScanTuning(compiled=False, threads=1))
    entries = resolve_entries(FORMATS, CastOptions())
    without = ScanPlan(entries, CastOptions(), None, False, 10, False, True, tuning=ScanTuning(compiled=False))
    assert not counts_only.eligible(without)
    plain = general(x, FORMATS, quantiles=False, progress=False)
    assert_same(plain, ref, FORMATS)
    assert not plain.histogram.collected
    if compiled_available():
        assert counts_only.eligible(ScanPlan(entries, CastOptions(), None, False, 10, False, True))
        # small blocks on three threads, converted in small pieces inside each block
        small = ScanTuning(count_block=1 << 14, count_block_min=1, threads=3, compiled_min=1 << 10,
                           convert_piece=1 << 12)
        assert_same(scan(x, FORMATS, quantiles=False, progress=False, tuning=small), ref, FORMATS)
        x16 = narrow(x, np.float16)
        ref16 = general(x16, FORMATS, quantiles=False, progress=False)
        assert_same(scan(x16, FORMATS, quantiles=False, progress=False, tuning=small), ref16, FORMATS)


def test_counts_only_against_reference_casts() -> None:
    """Overflow and underflow counts of a 5M-element scan (threads, numba when installed)
    against numpy (float16) and ml_dtypes (the others) casts of the same data."""
    x = wide(5_000_000, 11)
    res = scan(x, FORMATS[:4], quantiles=False, progress=False)
    finite = np.isfinite(x)
    for name in FORMATS[:4]:
        dt = np.float16 if name == "float16" else getattr(ml_dtypes, name)
        with np.errstate(all="ignore"):
            y = x.astype(dt).astype(np.float32)
        overflow = int(np.count_nonzero(finite & ~np.isfinite(y)))  # Inf, or NaN in e4m3fn
        underflow = int(np.count_nonzero(finite & (x != 0) & (y == 0)))
        f = res[name]
        assert (f.overflow, f.underflow) == (overflow, underflow), name
    assert res.histogram.nan == int(np.isnan(x).sum())
    assert res.histogram.inf == int(np.isinf(x).sum())
    assert res.histogram.zero == int((x == 0).sum())
    assert res.min == -math.inf and res.max == math.inf


def test_exponents_option() -> None:
    pytest.importorskip("matplotlib")
    x = narrow(wide(20000, 12), np.float16)  # float16 subnormals must be told either way
    off = scan(x, FORMATS, quantiles=False, progress=False)
    on = scan(x, FORMATS, quantiles=False, exponents=True, progress=False)
    hist = scan(x, FORMATS, quantiles="histogram", progress=False)
    assert not off.histogram.collected and off.histogram.exponents == ()
    assert on.histogram == hist.histogram and on.histogram.collected
    assert off.histogram.subnormal == on.histogram.subnormal > 0
    assert "binary exponents not collected" in off.to_text()
    with pytest.raises(BitprismError, match="exponents=True"):
        off.plot()
    on.plot()
    assert not scan(x, FORMATS, quantiles="histogram", exponents=False, progress=False).histogram.collected
    with pytest.raises(BitprismError, match="exponents"):
        scan(x, FORMATS, quantiles=False, exponents="yes", progress=False)  # type: ignore[arg-type]


def test_dask_counts_only() -> None:
    da = pytest.importorskip("dask.array")
    import dask

    x = wide(60000, 13).reshape(300, 200)
    ref = scan(x, FORMATS, quantiles=False, progress=False)
    with dask.config.set(scheduler="synchronous"):
        got = scan(da.from_array(x, chunks=(70, 90)), FORMATS, quantiles=False)
    assert_same(got, ref, FORMATS)
