"""tensors.window: window extraction, per-cell cast classes, whole-tensor search, index text.

Cast classes are checked against an independent computation with ml_dtypes (its ``astype``
is the reference cast for the formats it has; the class words follow the scan definitions)."""

from __future__ import annotations

import ml_dtypes
import numpy as np
import pytest

from bitprism.errors import BitprismError, ParseError
from bitprism.numerics.options import CastOptions
from bitprism.tensors.window import (
    CAST_KINDS,
    CHUNK,
    count_kinds,
    find,
    largest_error,
    make_window,
    parse_index,
    read_flat,
)

ML = {"bfloat16": ml_dtypes.bfloat16, "float8_e4m3fn": ml_dtypes.float8_e4m3fn,
      "float8_e5m2": ml_dtypes.float8_e5m2, "float16": np.float16}


def _data(seed: int = 0) -> np.ndarray:
    rng = np.random.default_rng(seed)
    # invented data spanning every class of the 8-bit formats: 2^-30 .. 2^30, both signs
    mag = np.exp2(rng.uniform(-30, 30, size=(24, 32)))
    x = (mag * rng.choice([-1.0, 1.0], size=mag.shape)).astype(np.float32)
    x[0, :4] = [0.0, -0.0, 1.0, 0.5]  # exact in every format
    x[1, 0], x[1, 1], x[1, 2] = np.nan, np.inf, -np.inf
    # float32's largest finite and smallest subnormal: overflow / underflow even in bfloat16
    x[2, 0], x[2, 1] = np.finfo(np.float32).max, np.float32(2.0**-149)
    return x


def _oracle_kinds(x: np.ndarray, name: str) -> np.ndarray:
    """Class words from ml_dtypes' cast (roundTiesToEven, overflow to Inf/NaN)."""
    dt = ML[name]
    with np.errstate(over="ignore", invalid="ignore"):
        q = x.astype(dt).astype(np.float64)
    x64 = x.astype(np.float64)
    tiny = float(ml_dtypes.finfo(dt).smallest_normal)
    out = np.full(x.shape, "rounded", object)
    out[q == x64] = "exact"
    out[(q != 0) & (np.abs(q) < tiny)] = "subnormal"
    out[(x64 != 0) & (q == 0)] = "underflow"
    out[np.isfinite(x64) & ~np.isfinite(q)] = "overflow"
    out[np.isinf(x64)] = "inf"
    out[np.isnan(x64)] = "nan"
    return out


@pytest.mark.parametrize("name", sorted(ML))
def test_cast_classes_match_ml_dtypes(name: str) -> None:
    x = _data()
    w = make_window(x, 0, 1, (0, 0), 0, 0, 24, 32, [name], CastOptions())
    got = np.array([[CAST_KINDS[k] for k in row] for row in w.casts[0].kinds], object)
    want = _oracle_kinds(x, name)
    assert (got == want).all(), list(zip(x[got != want][:5], got[got != want][:5]))
    with np.errstate(over="ignore", invalid="ignore"):
        q = x.astype(ML[name]).astype(np.float64)
    ok = np.isfinite(q)
    assert np.array_equal(w.casts[0].values[ok], q[ok])  # same results as ml_dtypes
    assert {"exact", "rounded", "underflow", "overflow"} <= set(want.ravel())


def test_ulp_error_matches_independent_formula() -> None:
    x = _data(1)
    w = make_window(x, 0, 1, (0, 0), 0, 0, 24, 32, ["bfloat16"], CastOptions())
    q = x.astype(ml_dtypes.bfloat16).astype(np.float64)
    x64 = x.astype(np.float64)
    ok = np.isfinite(q) & np.isfinite(x64) & (q != 0)
    # ULP of bfloat16 at q: 2^(max(floor(log2|q|), -126) - 7) (t = 7, emin = -126)
    e = np.maximum(np.floor(np.log2(np.abs(q[ok]))), -126)
    want = np.abs(q[ok] - x64[ok]) / np.exp2(e - 7)
    assert np.allclose(w.casts[0].ulp_error[ok], want, rtol=0, atol=0)
    assert (w.casts[0].ulp_error[ok] <= 0.5).all()  # round to nearest: at most half an ULP


def test_window_axes_offsets_and_edges() -> None:
    a = np.arange(2 * 5 * 7, dtype=np.float32).reshape(2, 5, 7)
    w = make_window(a, 2, 1, (1, 0, 0), 3, 1, 16, 16, ["float16"], CastOptions())
    assert np.array_equal(w.raw, a[1, 1:, 3:].T)  # rows = axis 2, columns = axis 1
    assert w.index_of(0, 0) == (1, 1, 3) and w.cell_of((1, 2, 4)) == (1, 1)
    assert w.cell_of((0, 2, 4)) is None
    with pytest.raises(BitprismError, match="out of range for axis 0"):
        make_window(a, 2, 1, (5, 0, 0), 0, 0, 4, 4, ["float16"], CastOptions())
    one = make_window(np.arange(40.0), None, 0, (0,), 0, 30, 8, 8, ["float16"], CastOptions())
    assert one.raw.shape == (1, 8) and one.index_of(0, 2) == (32,)


def test_read_flat_on_strided_views() -> None:
    a = np.arange(6 * 7 * 5, dtype=np.float32).reshape(6, 7, 5).transpose(1, 0, 2)[:, ::2]
    flat = np.ascontiguousarray(a).reshape(-1)
    for s, e in ((0, 5), (3, 40), (14, flat.size), (0, flat.size), (29, 31)):
        assert np.array_equal(read_flat(a, s, e), flat[s:e])


def test_find_nan_row_major_with_wraparound() -> None:
    a = np.zeros((3, 40, 50), np.float32)
    planted = [(0, 39, 49), (1, 0, 0), (1, 0, 3), (2, 20, 7)]
    for p in planted:
        a[p] = np.nan
    flats = [int(np.ravel_multi_index(p, a.shape)) for p in planted]
    assert find(a, "nan") == (flats[0], False)
    assert find(a, "nan", after=flats[0]) == (flats[1], False)
    assert find(a, "nan", after=flats[1]) == (flats[2], False)
    assert find(a, "nan", after=flats[3]) == (flats[0], True)  # wraps to the start
    assert find(a, "nan", after=flats[0], backward=True) == (flats[3], True)
    assert find(a, "nan", after=flats[2], backward=True) == (flats[1], False)
    assert find(a, "inf") is None
    assert count_kinds(a, None, CastOptions(), ("nan", "inf")) == {"nan": 4, "inf": 0}


def test_find_and_count_across_chunks() -> None:
    n = 3 * CHUNK + 17
    a = np.ones(n, np.float32)
    a[[5, CHUNK + 1, 3 * CHUNK + 3]] = 1e6  # overflows float8_e4m3fn (max 448, OCP OFP8)
    a[2 * CHUNK] = 1e-12  # underflows to zero in float8_e4m3fn (smallest 2^-9)
    opts = CastOptions()
    assert count_kinds(a, "float8_e4m3fn", opts) == {"nan": 0, "inf": 0, "overflow": 3,
                                                     "underflow": 1}
    assert find(a, "overflow", "float8_e4m3fn", opts, after=5) == (CHUNK + 1, False)
    assert find(a, "overflow", "float8_e4m3fn", opts, after=3 * CHUNK + 3) == (5, True)
    assert find(a, "underflow", "float8_e4m3fn", opts, after=2 * CHUNK, backward=True) == (
        2 * CHUNK, True)
    saturate = CastOptions(overflow="saturate")  # saturated values still count as overflow
    assert count_kinds(a, "float8_e4m3fn", saturate, ("overflow",)) == {"overflow": 3}


def test_largest_error_count_and_search() -> None:
    # bfloat16 has t = 7: near 1 its ULP is 2^-7. 1 + 2^-8 is a tie, 0.5 ULP from both
    # neighbours (the largest error round-to-nearest allows); 1 + 2^-9 is 0.25 ULP away.
    tie, quarter = 1 + 2**-8, 1 + 2**-9
    a = np.array([[1.0, quarter, tie], [3.0, tie, quarter]], np.float32)
    best, n = largest_error(a, "bfloat16", CastOptions())
    assert (best, n) == (0.5, 2)
    assert find(a, "largest_error", "bfloat16", CastOptions(), target=best) == (2, False)
    assert find(a, "largest_error", "bfloat16", CastOptions(), after=2, target=best) == (4, False)
    assert find(a, "largest_error", "bfloat16", CastOptions(), after=4, target=best) == (2, True)
    rel_best, rel_n = largest_error(a, "bfloat16", CastOptions(), "relative")
    assert rel_best == 2**-8 / tie and rel_n == 2  # |q - x| / |x| with q = 1


@pytest.mark.parametrize("text,want", [
    ("3, 17", (3, 17)), ("[0, 3]", (0, 3)), ("(1, -1)", (1, 19)), (" 2 ,4 ", (2, 4)),
])
def test_parse_index_forms(text: str, want: tuple[int, ...]) -> None:
    assert parse_index(text, (4, 20)) == want


def test_parse_index_short_form_and_errors() -> None:
    assert parse_index("3, 17", (5, 4, 20), shown=(1, 2), fixed=(2, 0, 0)) == (2, 3, 17)
    assert parse_index("(7,)", (10,)) == (7,)
    with pytest.raises(ParseError) as e:
        parse_index("3, 1x", (4, 20))
    assert e.value.column == 5
    with pytest.raises(BitprismError, match="out of range for axis 1 with size 20"):
        parse_index("3, 20", (4, 20))
    with pytest.raises(BitprismError, match="3 axes"):
        parse_index("1", (2, 3, 4))
    with pytest.raises(ParseError):
        parse_index("__import__('os')", (4, 20))


@pytest.mark.parametrize("rounding", ["roundTiesToEven", "stochastic"])
def test_a_placed_block_reads_as_the_same_window_of_the_tensor(rounding: str) -> None:
    """Issue 18 item 5: a reopened case holds only its saved window, placed where it was; the
    window read from that block is the tensor's window: same indices, same shape, same bits,
    and the same stochastic draws (they derive from the window's place in the tensor)."""
    from bitprism.tensors.window import Placed

    x = _data(3)
    opts = CastOptions(rounding=rounding, seed=5)  # type: ignore[arg-type]
    whole = make_window(x, 0, 1, (0, 0), 7, 20, 5, 6, ["bfloat16", "float8_e4m3fn"], opts)
    block = np.ascontiguousarray(x[7:12, 20:26])
    part = make_window(block, 0, 1, (7, 20), 7, 20, 5, 6, ["bfloat16", "float8_e4m3fn"], opts,
                       offset=(7, 20), shape=x.shape)
    assert part.shape == whole.shape == x.shape and part.index_of(0, 0) == (7, 20)
    assert np.array_equal(part.bits, whole.bits)
    for a, b in zip(part.casts, whole.casts):
        assert np.array_equal(a.codes, b.codes)
    with pytest.raises(BitprismError, match=r"row 6 is outside the indices 7\.\.11 held of axis 0"):
        make_window(block, 0, 1, (7, 20), 6, 20, 5, 6, ["bfloat16"], opts, offset=(7, 20),
                    shape=x.shape)
    with pytest.raises(BitprismError, match="does not fit axis 1"):
        Placed(block, (7, 20), (24, 25))
