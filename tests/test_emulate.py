"""Emulation (``trace(..., emulate=fmt)``): rounding, elementwise results and accumulation.

References: the package's cast (``bitprism.cast``, itself held to ml_dtypes and an exact
Fraction oracle elsewhere) for every rounding; exact ``fractions.Fraction`` arithmetic for
the values before rounding (sums, quotients, chunked accumulation: the accumulator model is
written out here, one chunk at a time, from the definition in ``probes/emulate.py``).
"""

from __future__ import annotations

from fractions import Fraction

import numpy as np
import pytest

import bitprism as bp
from bitprism.formats import get_format
from bitprism.numerics.options import CastOptions
from bitprism.probes import compiled_rounding
from bitprism.probes.rounding import Rounder

SIGNED = ["bfloat16", "float16", "float8_e4m3fn", "float8_e5m2", "float8_e4m3fnuz",
          "float8_e5m2fnuz", "float6_e3m2fn", "float4_e2m1fn", "tf32", "float32"]
MODES = ["roundTiesToEven", "roundTiesToAway", "roundTowardZero", "roundTowardPositive",
         "roundTowardNegative"]


def _values(n: int = 20000, seed: int = 0) -> np.ndarray:
    rng = np.random.default_rng(seed)
    x = rng.standard_normal(n) * np.exp2(rng.uniform(-150, 140, n))
    # midpoints of bfloat16 and float16 (ties), specials, signed zeros
    mids = (rng.integers(1, 255, 200) * 2 + 1).astype(np.float64) * np.exp2(
        rng.integers(-130, 100, 200) - 9)
    x[:200] = mids
    x[200:210] = [0.0, -0.0, np.inf, -np.inf, np.nan, 65520.0, -65519.99, 2.0**-25, 448 + 16,
                  2.0**-134]
    return x


def _same(a: np.ndarray, b: np.ndarray) -> bool:
    a, b = np.asarray(a, np.float64), np.asarray(b, np.float64)
    bits = a.view(np.uint64) == b.view(np.uint64)
    return bool(np.all(bits | (np.isnan(a) & np.isnan(b))))


@pytest.mark.parametrize("name", SIGNED)
@pytest.mark.parametrize("mode", MODES)
def test_rounder_equals_the_package_cast(name: str, mode: str) -> None:
    x = _values()
    for overflow in ("standard", "saturate"):
        for subnormals in ("keep", "flush"):
            opts = CastOptions(mode, overflow, subnormals)  # type: ignore[arg-type]
            r = Rounder(get_format(name), opts, None)
            assert _same(r(x), bp.cast(x, name, options=opts)), (overflow, subnormals)
            scalars = np.array([r.scalar(float(v)) for v in x[:400]])
            assert _same(scalars, bp.cast(x[:400], name, options=opts))


@pytest.mark.parametrize("name", SIGNED)
def test_rounder_on_float32_data_equals_the_package_cast(name: str) -> None:
    # float32 inputs take their own path (rounded in float32 where the format allows): every
    # exponent, random bit patterns (NaN payloads, subnormals) and the edges of the formats
    rng = np.random.default_rng(2)
    wide = (rng.standard_normal(100_000) * np.exp2(rng.uniform(-150, 128, 100_000)))
    bits = rng.integers(0, 2**32, 100_000, dtype=np.uint64).astype(np.uint32)
    with np.errstate(over="ignore"):
        x = np.concatenate([wide.astype(np.float32), bits.view(np.float32), np.array(
            [0.0, -0.0, np.inf, -np.inf, 3.3e38, -1e-45, 2.0**-134, 1.5 * 2.0**-133, 65520.0,
             464.0, -240.0], np.float32)])
    r = Rounder(get_format(name), CastOptions(), None)
    with np.errstate(invalid="ignore"):  # float32 into float32 keeps a signaling NaN
        assert _same(r(x), bp.cast(x, name))


@pytest.mark.parametrize("name", ["bfloat16", "float16", "float8_e4m3fn", "tf32"])
@pytest.mark.parametrize("mode", ["roundTiesToEven", "roundTowardPositive", "roundTowardZero"])
def test_rounded_sum_is_one_rounding_of_the_exact_sum(name: str, mode: str) -> None:
    # a + b where float64 cannot hold the sum: the float64 sum alone loses the sticky bit
    rng = np.random.default_rng(3)
    fmt = get_format(name)
    opts = CastOptions(mode)  # type: ignore[arg-type]
    a = bp.cast(rng.standard_normal(300) * 8, fmt)
    b = np.ldexp(rng.standard_normal(300), rng.integers(-70, -55, 300))
    # and exact ties of the format, which the float64 sum keeps
    a[:20] = 1.0
    b[:20] = float(fmt.epsilon) / 2 * np.array([1, -1] * 10)
    r = Rounder(fmt, opts, None)
    got = r.sum(a, b)
    want = [bp.cast(Fraction(float(x)) + Fraction(float(y)), fmt, options=opts) for x, y in zip(a, b)]
    assert _same(got, np.array(want))
    got_scalar = [r.scalar_sum(float(x), float(y)) for x, y in zip(a[:50], b[:50])]
    assert _same(np.array(got_scalar), np.array(want[:50]))


def _emulated_steps(x: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, ...]:
    a = x * y
    b = a + x
    c = b - y
    d = c / (np.abs(y) + 0.25)
    e = np.sqrt(np.abs(d))
    f = np.exp(e * 0.125)
    g = np.tanh(f - 1.5)
    return a, b, c, d, e, f, g


@pytest.mark.parametrize("name", ["bfloat16", "float16", "float8_e4m3fn", "float8_e5m2"])
def test_elementwise_emulation_is_numpy_float64_cast_once(name: str) -> None:
    """Each result is bp.cast of numpy's float64 result on the emulated inputs (exact for
    + - * and, rounded to nearest, / and sqrt: double rounding through float64 is innocuous
    for these formats, Figueroa 1995)."""
    rng = np.random.default_rng(1)
    x = rng.standard_normal((6, 7)).astype(np.float32) * 3
    y = rng.standard_normal((6, 7)).astype(np.float32)
    t = bp.trace(_emulated_steps, x, y, emulate=name)
    xr, yr = bp.cast(x, name), bp.cast(y, name)
    consts = {v: bp.cast(v, name) for v in (0.25, 0.125, 1.5)}
    a = bp.cast(xr * yr, name)
    b = bp.cast(a + xr, name)
    c = bp.cast(b - yr, name)
    d = bp.cast(c / bp.cast(np.abs(yr) + consts[0.25], name), name)
    e = bp.cast(np.sqrt(np.abs(d)), name)
    f = bp.cast(np.exp(bp.cast(e * consts[0.125], name)), name)
    g = bp.cast(np.tanh(bp.cast(f - consts[1.5], name)), name)
    for got, want in zip(t.result, (a, b, c, d, e, f, g)):
        assert got.dtype == np.float64
        assert _same(got, want)
    assert all(r.emulated for r in t.ops)


def test_directed_rounding_keeps_the_sticky_bit_of_sums_and_quotients() -> None:
    # 1 + 2**-60 rounded up in bfloat16 is the next value after 1 (IEEE 754-2019 §4.3.2), which
    # a float64 sum (exactly 1.0) followed by one cast would miss
    t = bp.trace(lambda a, b: (a + b, a / b), np.array([1.0, 1.0]), np.array([2.0**-60, 3.0]),
                 emulate="bfloat16", rounding="roundTowardPositive")
    total, quotient = t.result
    want_sum = bp.cast(Fraction(1) + Fraction(1, 2**60), "bfloat16", rounding="roundTowardPositive")
    assert total[0] == want_sum == 1.0078125
    want_q = bp.cast(Fraction(1, 3), "bfloat16", rounding="roundTowardPositive")
    assert quotient[1] == want_q


# ----- accumulation, against an exact model of chunked rounding ------------------------------
def _model(terms: list[Fraction], acc_fmt: str, out_fmt: str, chunk: int | None,
           opts: CastOptions) -> float:
    """The definition: exact chunk sums added to the accumulator, which is rounded to
    ``acc_fmt`` after every chunk; the final value rounded to ``out_fmt``."""
    step = len(terms) if chunk is None else chunk
    acc = Fraction(0)
    for start in range(0, len(terms), step):
        acc = Fraction(bp.cast(acc + sum(terms[start:start + step], Fraction(0)), acc_fmt,
                               options=opts))
    return float(bp.cast(acc, out_fmt, options=opts))


def _grid(shape: tuple[int, ...], seed: int, fmt: str) -> np.ndarray:
    """Values of ``fmt`` whose products and chunk sums float64 holds exactly (a few binades)."""
    rng = np.random.default_rng(seed)
    return bp.cast(rng.integers(-120, 121, shape) * np.exp2(rng.integers(-4, 5, shape)), fmt)


@pytest.mark.parametrize("acc,chunk", [("bfloat16", 4), ("bfloat16", 32), ("float32", 3),
                                       ("float16", None), ("bfloat16", 1)])
def test_matmul_accumulates_in_chunks_like_the_exact_model(acc: str, chunk: int | None) -> None:
    scale = 2.0**-6 if acc == "float16" else 1.0  # keep float16 sums below its largest value
    a = _grid((3, 19), 0, "bfloat16") * scale
    b = _grid((19, 4), 1, "bfloat16") * scale
    t = bp.trace(lambda x, y: x @ y, a, b, emulate="bfloat16", accumulate=acc, chunk=chunk)
    opts = CastOptions()
    for i in range(3):
        for j in range(4):
            terms = [Fraction(float(a[i, k])) * Fraction(float(b[k, j])) for k in range(19)]
            assert t.result[i, j] == _model(terms, acc, "bfloat16", chunk, opts), (i, j)


def test_sum_mean_dot_and_einsum_accumulate_like_the_model() -> None:
    x = _grid((5, 21), 2, "float16")
    y = _grid((21,), 3, "float16")
    w = _grid((4, 21), 4, "float16")

    def fn(x: np.ndarray, y: np.ndarray, w: np.ndarray) -> tuple[np.ndarray, ...]:
        return (x.sum(axis=1), np.mean(x, axis=1), np.dot(x, y), np.einsum("ik,jk->ij", x, w),
                np.sum(x), x.mean())

    opts = CastOptions("roundTowardZero")
    t = bp.trace(fn, x, y, w, emulate="float16", rounding="roundTowardZero", chunk=5)
    sums, means, dots, ein, total, mean = t.result
    for i in range(5):
        row = [Fraction(float(v)) for v in x[i]]
        assert sums[i] == _model(row, "float16", "float16", 5, opts)
        acc = Fraction(_model(row, "float16", "float64", 5, opts))
        assert means[i] == bp.cast(acc / 21, "float16", options=opts)
        terms = [Fraction(float(x[i, k])) * Fraction(float(y[k])) for k in range(21)]
        assert dots[i] == _model(terms, "float16", "float16", 5, opts)
        for j in range(4):
            terms = [Fraction(float(x[i, k])) * Fraction(float(w[j, k])) for k in range(21)]
            assert ein[i, j] == _model(terms, "float16", "float16", 5, opts)
    flat = [Fraction(float(v)) for v in x.reshape(-1)]
    assert total == _model(flat, "float16", "float16", 5, opts)
    acc = Fraction(_model(flat, "float16", "float64", 5, opts))
    assert isinstance(mean, np.float64) and mean == bp.cast(acc / 105, "float16", options=opts)


def test_einsum_with_two_contracted_letters_adds_one_chunked_sum_per_outer_value() -> None:
    x = _grid((2, 3, 10), 5, "bfloat16")
    y = _grid((2, 3, 10), 6, "bfloat16")
    t = bp.trace(lambda p, q: np.einsum("bij,bij->b", p, q), x, y, emulate="bfloat16", chunk=4)
    opts = CastOptions()
    for b in range(2):
        acc = Fraction(0)
        for i in range(3):
            terms = [Fraction(float(x[b, i, k])) * Fraction(float(y[b, i, k])) for k in range(10)]
            inner = Fraction(_model(terms, "bfloat16", "float64", 4, opts))
            acc = Fraction(bp.cast(acc + inner, "bfloat16"))
        assert t.result[b] == bp.cast(acc, "bfloat16")


def test_long_sums_to_few_outputs_take_the_scalar_path_and_agree() -> None:
    x = _grid((2, 300), 7, "bfloat16")
    t = bp.trace(lambda v: v.sum(axis=1), x, emulate="bfloat16", chunk=8)
    for i in range(2):
        terms = [Fraction(float(v)) for v in x[i]]
        assert t.result[i] == _model(terms, "bfloat16", "bfloat16", 8, CastOptions())


def test_float64_accumulator_rounds_only_the_result() -> None:
    a = _grid((4, 50), 8, "bfloat16")
    b = _grid((50, 3), 9, "bfloat16")
    t = bp.trace(lambda x, y: x @ y, a, b, emulate="bfloat16", accumulate="float64")
    assert _same(t.result, bp.cast(a @ b, "bfloat16"))


def test_inputs_and_constants_are_rounded_on_entry_ints_are_not() -> None:
    x = np.array([0.1, 1000.7, 3.0], np.float32)
    n = np.array([257, 3, 4])
    t = bp.trace(lambda v, k: (v * 1.0, v + 0.1, k + k, k * 0.5), x, n, emulate="bfloat16")
    same, plus, ints, halves = t.result
    assert _same(same, bp.cast(x, "bfloat16"))
    assert _same(plus, bp.cast(bp.cast(x, "bfloat16") + bp.cast(0.1, "bfloat16"), "bfloat16"))
    assert ints.dtype == n.dtype and ints.tolist() == [514, 6, 8]  # never emulated
    assert _same(halves, bp.cast(n * 0.5, "bfloat16"))
    assert [r.emulated for r in t.ops] == [True, True, False, True]


def test_counts_of_emulated_outputs_equal_the_scan() -> None:
    # emulated results hold bfloat16 values, which the trace counts as float32 (exactly)
    rng = np.random.default_rng(4)
    x = (rng.standard_normal(300_000) * np.exp2(rng.uniform(-60, 60, 300_000)))
    fmts = ["bfloat16", "float16", "float8_e4m3fn", "float8_e5m2"]
    t = bp.trace(lambda v: v * 3.0, x, emulate="bfloat16", formats=fmts)
    ref = bp.scan(t.result, fmts, quantiles=False, progress=False)
    rec = t.ops[0]
    for f in ref.formats:
        c = rec.count(f.name)
        assert (c.overflow, c.underflow, c.subnormal) == (f.overflow, f.underflow, f.subnormal)


# the compiled magic-constant pass (compiled_rounding) against its numpy twin and the cast: the
# formats whose Rounder takes the magic-constant rounding (roundTiesToEven, subnormals kept)
MAGIC = [n for n in SIGNED if Rounder(get_format(n), CastOptions(), None).magic]


def _twins(name: str) -> tuple[Rounder, Rounder]:
    fast = Rounder(get_format(name), CastOptions(), None)
    plain = Rounder(get_format(name), CastOptions(), None)
    plain.compiled = False
    return fast, plain


@pytest.mark.skipif(not compiled_rounding.usable(compiled_rounding.MIN_SIZE),
                    reason="numba not installed or turned off")
@pytest.mark.parametrize("name", MAGIC)
def test_compiled_rounding_equals_its_numpy_twin_and_the_cast(name: str) -> None:
    fast, plain = _twins(name)
    assert fast.compiled and fast.magic
    rng = np.random.default_rng(7)
    # every float32 exponent and sign with random low bits, plus every bfloat16 pattern padded
    # with the bits that decide ties, and the float64 values of the other tests
    codes = np.arange(1 << 16, dtype=np.uint32) << 16
    low = rng.integers(0, 1 << 16, 1 << 16, dtype=np.uint32)
    ties = np.array([0, 0x8000, 0x7FFF, 0x8001], np.uint32)[rng.integers(0, 4, 1 << 16)]
    x32 = np.concatenate([(codes | low).view(np.float32), (codes | ties).view(np.float32)])
    x64 = _values(50_000, seed=5)
    with np.errstate(invalid="ignore"):
        for x in (x32, x64):
            want = bp.cast(x, name)
            assert _same(fast(x), want) and _same(plain(x), want)
        # in place, as results are rounded where they are
        y = x64.copy()
        fast(y, out=y)
        assert _same(y, bp.cast(x64, name))
    # sums: the float64 sum rounded once (and in place into the running sum)
    a = bp.cast(_values(30_000, seed=8), name)
    b = _values(30_000, seed=9)
    with np.errstate(all="ignore"):
        want = bp.cast(a + b, name)
        assert _same(fast.sum(a, b), want) and _same(plain.sum(a, b), want)
        acc = a.copy()
        fast.sum(acc, b, out=acc)
    assert _same(acc, want)
