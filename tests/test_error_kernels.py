"""Tests of the compiled lookups and error buckets of the general scan path
(``tensors.error_kernels``): every code of every format up to 16 bits against numpy's ``take``,
the buckets against ``partials.rel_keys`` + ``bincount``, and whole scans with and without the
kernels field by field (they must be equal, not close)."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest

import bitprism.tensors.scan.compiled.error_kernels as ek
from bitprism.tensors.scan import ScanTuning
from bitprism.tensors.scan.compiled.jit import available
from bitprism.tensors.scan.measure import inv_ulp_table, measure_tables, nan_value_table
from bitprism.formats import get_format
from bitprism.tensors.scan import sub_ranges
from bitprism.tensors.scan.partials import REL_BINS, rel_keys
from bitprism.tensors.scan import scan
from test_scan import wide_data

needs_numba = pytest.mark.skipif(not available(), reason="numba not installed")
NUMPY = ScanTuning(compiled=False)  # the numpy twins of every compiled loop

SMALL = ("bfloat16", "float16", "float8_e4m3fn", "float8_e4m3fnuz", "float8_e5m2fnuz", "float8_e5m2",
         "float6_e3m2fn", "float6_e2m3fn", "float4_e2m1fn", "float8_e8m0fnu")


@needs_numba
@pytest.mark.parametrize("compact", [False, True], ids=["full tables", "compact tables"])
@pytest.mark.parametrize("name", SMALL)
def test_measure_codes_every_code(name: str, compact: bool) -> None:
    """Every code of the format, against inputs near its value and non-finite ones, held to
    the numpy operations the general path does (take, subtract, abs, fmax, divide), with the
    full float64 tables and with the compact ones the scan passes (float32 values, 1/ulp by
    exponent field)."""
    fmt = get_format(name)
    codes = np.arange(1 << fmt.bits, dtype=fmt.code_dtype)
    codes = np.concatenate([codes, codes[::-1], codes])
    values = nan_value_table(fmt)
    inv = inv_ulp_table(fmt)
    rng = np.random.default_rng(fmt.bits)
    idx = codes.astype(np.intp)
    with np.errstate(invalid="ignore", over="ignore"):
        x = np.nan_to_num(values[idx], nan=1.0) * (1 + rng.uniform(-0.3, 0.3, codes.size))
    x[::7] = np.nan  # left out: non-finite input (the scan's xe)
    x[1::11] = 0.0
    den = np.abs(x)
    den[~((den > 0) & (den < np.inf))] = 1.0
    err, rel, ue = np.empty(codes.size), np.empty(codes.size), np.empty(codes.size)
    bad = np.empty(codes.size, bool)
    top = (1 << fmt.t) - 1 if fmt.has_subnormals else 0
    tables = measure_tables(fmt) if compact else (values, inv, (1 << fmt.bits) - 1, 0)
    got = ek.measure_codes(codes, x, den, *tables, fmt.magnitude_mask, top, err, rel, ue, bad)
    with np.errstate(invalid="ignore"):
        e = np.abs(np.take(values, idx) - x)
    want_bad = np.isnan(e)
    e = np.fmax(e, 0.0)
    r = e / den
    u = np.take(inv, idx) * e
    assert np.array_equal(bad, want_bad) and got.bad == int(want_bad.sum())
    assert np.array_equal(err, e) and np.array_equal(rel, r) and np.array_equal(ue, u)
    assert got.exact == int(np.count_nonzero(e == 0)) - got.bad
    assert (got.max_err, got.max_rel, got.max_ulp) == (e.max(), r.max(), u.max())
    mags = codes & fmt.magnitude_mask
    assert got.zero_magnitudes == int(np.count_nonzero(mags == 0))
    assert got.zero_codes == int(np.count_nonzero(codes == 0))
    assert got.subnormal == int(np.count_nonzero((mags >= 1) & (mags <= top)))


@needs_numba
def test_bucket_rel_matches_rel_keys() -> None:
    # IEEE 754 binary64 (common practice): the smallest subnormal, the smallest normal, the
    # largest finite value, Inf; the bucket edges themselves and their neighbours.
    specials = [0.0, 5e-324, 2.2250738585072014e-308, 1.7976931348623157e308, np.inf, 1.0,
                np.nextafter(1.0, 2.0), np.nextafter(1.0, 0.0), 0.5, 2.0**-60, 2.0**64, 2.0**70]
    rng = np.random.default_rng(1)
    rel = np.concatenate([np.array(specials), np.exp2(rng.uniform(-80, 80, 50_000)),
                          rng.random(10_000), np.ones(17)])
    hist = np.zeros(REL_BINS, np.int64)
    hist[3] = 5  # added to, not overwritten
    ones = ek.bucket_rel(rel, hist)
    keys = rel_keys(rel, np.empty(rel.size, np.int64))
    want = np.bincount(keys, minlength=REL_BINS)
    want[3] += 5
    assert np.array_equal(hist, want)
    assert ones == int(np.count_nonzero(rel == 1.0)) == 18  # 1.0 in specials and 17 ones


# ----- whole scans with and without the kernels -------------------------------------------------


def same_scan(a, b) -> None:
    assert a.to_text() == b.to_text()
    for name in a.format_names:
        fa, fb = a[name], b[name]
        for f in dataclasses.fields(fa):
            va, vb = getattr(fa, f.name), getattr(fb, f.name)
            assert va == vb or (va != va and vb != vb), (name, f.name, va, vb)
        for kind in ("overflow", "underflow", "subnormal", "largest_error"):
            pa, pb = a.where(kind, name), b.where(kind, name)
            assert all(np.array_equal(p, q) for p, q in zip(pa, pb)), (name, kind)


FORMATS = ("bfloat16", "float16", "float8_e4m3fn", "float8_e5m2", "float6_e3m2fn", "float4_e2m1fn",
           "float8_e4m3fnuz")

CASES = [
    ("float32", lambda: wide_data(70_000, 1, low=-140, high=40), {}),
    ("float64", lambda: wide_data(70_000, 2, np.float64), {}),
    ("scaled", lambda: wide_data(70_000, 3), {"scale": 2.0**-10}),
    ("ties away, saturate", lambda: wide_data(70_000, 4), {"rounding": "roundTiesToAway", "overflow": "saturate"}),
    ("toward zero, flush", lambda: wide_data(70_000, 5), {"rounding": "roundTowardZero", "subnormals": "flush"}),
    ("only NaN", lambda: np.full(3000, np.nan, np.float32), {}),
    ("empty", lambda: np.zeros((0, 3), np.float32), {}),
]


@needs_numba
@pytest.mark.parametrize("quantiles", ["exact", "histogram"])
@pytest.mark.parametrize("name,make,kw", CASES, ids=[c[0] for c in CASES])
def test_scan_same_with_and_without_kernels(name, make, kw, quantiles) -> None:
    x = make()
    fast = scan(x, FORMATS, quantiles=quantiles, progress=False, **kw)
    ref = scan(x, FORMATS, quantiles=quantiles, progress=False, **kw, tuning=NUMPY)
    same_scan(fast, ref)


@needs_numba
def test_scan_same_with_block_formats() -> None:
    """Block-scaled formats (cast by a hook, buckets by the kernel) and a wide format."""
    mx = pytest.importorskip("bitprism.tensors.mx")
    formats = [mx.get_mx_format("mxfp8_e4m3"), mx.get_mx_format("mxfp4"), "float32", "float16"]
    x = wide_data(40_000, 6, low=-20, high=20)
    fast = scan(x, formats, progress=False)
    ref = scan(x, formats, progress=False, tuning=NUMPY)
    same_scan(fast, ref)


def counts_by_python(u: np.ndarray, lo: int, hi: int, shift: int, bins: int) -> np.ndarray:
    """``sub_ranges.layout`` counts one element at a time with Python integers."""
    n_log = sub_ranges.log_bins(hi - lo)
    out = np.zeros(sub_ranges.layout(lo, hi, bins), np.int64)
    for p in (int(v) for v in u):
        if lo <= p < hi:
            out[(p - lo) >> shift] += 1
            if n_log:
                out[bins + sub_ranges._log_key(hi - 1 - p)] += 1
                out[bins + n_log + sub_ranges._log_key(p - lo)] += 1
    return out


def test_log_keys_match_python() -> None:
    rng = np.random.default_rng(5)
    d = np.concatenate([np.array([0, 1, 2, 1023, 1024, 1025, 2**20, 2**53 - 1], np.uint64),
                        rng.integers(0, 2**53, 5000, dtype=np.uint64)])
    keys = sub_ranges.log_keys(d)
    assert keys.tolist() == [sub_ranges._log_key(int(v)) for v in d]
    order = np.argsort(d, kind="stable")
    assert np.all(np.diff(keys[order]) >= 0)  # keys grow with the distance
    for v, k in zip(d.tolist(), keys.tolist()):
        a, b = sub_ranges._log_span(k)
        assert a <= v < b and (b - a) <= max(1, v >> sub_ranges.LOG_BITS)


@needs_numba
def test_range_values_and_counts() -> None:
    rng = np.random.default_rng(7)
    rel = np.concatenate([np.exp2(rng.uniform(-30, 3, 6_000)), np.zeros(50), np.full(9, np.inf),
                          1.0 - np.exp2(-rng.uniform(1, 50, 3_000))])
    u = rel.view(np.uint64)
    edges = [1, int(u[5]), int(u[5]) + 1, 0x3FE0000000000000, 0x3FEFE00000000000, 0x3FF0000000000000,
             0x7FF0000000000001]
    for lo in edges:
        for hi in edges:
            if hi <= lo:
                continue
            inside = (u >= np.uint64(lo)) & (u < np.uint64(hi))
            assert np.array_equal(ek.range_values(rel, lo, hi), rel[inside])
            width = hi - lo
            shift = max(0, width.bit_length() - 10)
            bins = ((width - 1) >> shift) + 1
            got = np.ones(sub_ranges.layout(lo, hi, bins), np.int64)  # added to
            ek.range_counts(rel, lo, hi, shift, bins, sub_ranges.log_bins(width), got)
            assert np.array_equal(got - 1, counts_by_python(u, lo, hi, shift, bins))


def test_pick_holds_the_rank() -> None:
    """The sub-range ``pick`` returns holds the wanted element at the rank it says, and as many
    elements as it says; values piled against either end (as relative errors just below 1 are
    after saturation) land in small sub-ranges, where even sub-ranges alone would not do."""
    rng = np.random.default_rng(11)
    lo, hi = 0x3FE0000000000000, 0x3FF0000000000000  # [0.5, 1.0) as IEEE 754 binary64 patterns
    width = hi - lo
    shift = max(0, width.bit_length() - 16)
    bins = ((width - 1) >> shift) + 1
    cases = {"top pile": 1.0 - np.exp2(-rng.uniform(2, 50, 20_000)),
             "spread": rng.uniform(0.5, 1.0, 20_000),
             "bottom pile": 0.5 + np.exp2(-rng.uniform(2, 50, 20_000))}
    for name, vals in cases.items():
        u = np.sort(vals.view(np.uint64))
        counts = counts_by_python(u, lo, hi, shift, bins)
        for rank in (0, 9_999, 19_800, 19_999):
            a, b, r, c = sub_ranges.pick(lo, hi, shift, bins, counts, rank)
            inside = u[(u >= np.uint64(a)) & (u < np.uint64(b))]
            assert inside.size == c and inside[r] == u[rank], (name, rank)
            assert c <= 200, (name, rank, c)
        even_only = counts[:bins]
        if name != "spread":  # a rank inside the pile
            i = int(np.searchsorted(np.cumsum(even_only), 19_800 if name == "top pile" else 200, side="right"))
            assert even_only[i] > 2_000  # the pile sits in one or two even sub-ranges


@needs_numba
def test_exact_quantiles_through_sub_ranges() -> None:
    """Refinement passes that count sub-ranges before they collect values (forced by a small
    cap on collected values) give the same quantiles with and without the kernels."""
    x = wide_data(70_000, 8, low=-30, high=30)
    fast = scan(x, FORMATS, progress=False, tuning=ScanTuning(refine_cap=64))
    ref = scan(x, FORMATS, progress=False, tuning=ScanTuning(refine_cap=64, compiled=False))
    same_scan(fast, ref)
    plain = scan(x, FORMATS, progress=False)  # quantiles are exact whatever the path
    for name in FORMATS:
        p, f = plain[name], fast[name]
        assert (p.rel_error_p50, p.rel_error_p99) == (f.rel_error_p50, f.rel_error_p99)
