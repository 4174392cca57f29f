"""compare(), shortest/exact decimal text, and the text/HTML renderings of a Comparison.

Each check names its source. The cross-format error tables (x = 1/10, 1/3, π) and the IEEE 754
binary16/binary32 worked encodings are "from library": the codes are recomputed here with
ml_dtypes / numpy and the errors with fractions.
"""

from __future__ import annotations

import math
import random
import subprocess
import sys
from decimal import Decimal, localcontext
from fractions import Fraction

import ml_dtypes
import numpy as np
import pytest

import oracle
from bitprism.formats import FORMATS, Format, get_format
from bitprism.numerics.compare import Comparison, compare
from bitprism.numerics.inspect import code_fields, neighbour_codes
from bitprism.numerics.decimal_text import (
    abbreviate_decimal,
    exact_decimal,
    exact_text,
    shortest_decimal,
)
from bitprism.numerics.exact import MAGNITUDE_LIMIT, ExactValue
from bitprism.numerics.inspect import CodeClass, fields
from bitprism.numerics.parse import parse

ML_FORMATS = ("float32", "float16", "bfloat16", "float8_e4m3fn", "float8_e5m2",
              "float6_e2m3fn", "float6_e3m2fn", "float4_e2m1fn")


def _library_code(x: float, name: str) -> int:
    """The code numpy / ml_dtypes give for float64 ``x`` (round to nearest even)."""
    fmt = FORMATS[name]
    arr = np.array([x], dtype=np.float64).astype(fmt.dtype)
    if fmt.bits < 8:
        return int(arr.view(np.uint8)[0])
    return int(arr.view(fmt.code_dtype)[0])


def _library_ulp(value: Fraction, name: str) -> Fraction:
    """ULP at a value from ml_dtypes.finfo (Goldberg / Handbook of Floating-Point Arithmetic
    definition: ulp = 2^(max(e, emin) - p + 1))."""
    fi = ml_dtypes.finfo(FORMATS[name].dtype)
    e = max(int(np.floor(np.log2(float(abs(value))))) if value else fi.minexp, fi.minexp)
    return Fraction(2) ** (e - int(fi.nmant))


# cross-format error tables for x = 1/10 and x = 1/3 (from library: ml_dtypes / numpy RNE,
# exact fractions): error in ulps (ULP at the rounded value)
TABLE_1_10 = {
    "float64": Fraction(2, 5), "float32": Fraction(1, 5), "float16": Fraction(-2, 5),
    "bfloat16": Fraction(1, 5), "float8_e4m3fn": Fraction(1, 5), "float8_e5m2": Fraction(-2, 5),
    "float6_e2m3fn": Fraction(1, 5), "float6_e3m2fn": Fraction(2, 5),
    "float4_e2m1fn": Fraction(-1, 5),
}
TABLE_1_3 = {
    "float64": Fraction(-1, 3), "float32": Fraction(1, 3), "float16": Fraction(-1, 3),
    "bfloat16": Fraction(1, 3), "float8_e4m3fn": Fraction(1, 3), "float8_e5m2": Fraction(-1, 3),
    "float6_e2m3fn": Fraction(1, 3), "float6_e3m2fn": Fraction(-1, 3),
    "float4_e2m1fn": Fraction(1, 3),
}


@pytest.mark.parametrize("text,x,table", [("1/10", Fraction(1, 10), TABLE_1_10),
                                           ("1/3", Fraction(1, 3), TABLE_1_3)], ids=["1/10", "1/3"])
def test_cross_format_error_tables(text: str, x: Fraction, table: dict) -> None:
    c = compare(text, formats=tuple(table))
    for row in c.rows:
        name = row.format.name
        if name != "float64":  # library code (float64 -> format is exact-input here: no double
            assert row.code == _library_code(float(x), name), name  # rounding for 1/10, 1/3)
        stored = row.stored.value
        assert row.abs_error == stored - x
        assert row.rel_error == (stored - x) / x
        assert row.ulp_error == table[name], name  # from library (tables above)
        if name != "float64":
            assert row.ulp == _library_ulp(stored, name) or stored == 0
    if text == "1/10":
        assert c.row("float4_e2m1fn").underflowed  # FP4 1/10 -> 0, -0.2 ulp (ulp 1/2)
        # binary32 RNE(1/10) = 0x3DCCCCCD has relative error exactly 2^-26 (from library)
        assert c.row("float32").rel_error == Fraction(2) ** -26


def test_pi_row_against_float64_pi() -> None:
    # cross-format error table for x = π (float64 0x400921FB54442D18; from library): the
    # reference is float64 π, ulps to 6 digits
    c = compare(np.pi, formats=("float32", "float16", "bfloat16", "float8_e4m3fn", "float8_e5m2"))
    expect = {"float32": 0.366678, "float16": -0.495439, "bfloat16": -0.061930,
              "float8_e4m3fn": 0.433629, "float8_e5m2": -0.283185}
    for row in c.rows:
        assert row.code == _library_code(np.pi, row.format.name)
        assert float(row.ulp_error) == pytest.approx(expect[row.format.name], abs=1e-6)
    assert c.input.value == Fraction(np.pi)


def test_worked_encodings_section_1_4() -> None:
    # binary32 0x3DCCCCCD = RNE(1/10), exact 0.100000001490116119384765625 (from library)
    r = compare("0.1", formats=("float32",)).rows[0]
    assert r.code == 0x3DCCCCCD and r.exact == "0.100000001490116119384765625"
    # binary16 0x0001 = 2^-24, exact decimal 0.000000059604644775390625 (from library)
    r = compare("2**-24", formats=("float16",)).rows[0]
    assert r.code == 0x0001 and Decimal(r.exact) == Decimal("0.000000059604644775390625")
    assert r.subnormal and r.fields.kind == CodeClass.SUBNORMAL
    # binary16 0x7BFF = 65504; its Handbook ULP is 32 (np.spacing gives inf; from library)
    r = compare("65504", formats=("float16",)).rows[0]
    assert r.code == 0x7BFF and r.ulp == 32 and r.next_up is not None and r.next_up.code == 0x7C00
    # integer gaps (from library, numpy): float16(2049) -> 2048 (tie to even), 2051 -> 2052
    assert compare("2049", formats=("float16",)).rows[0].shortest == "2048.0"
    assert compare("2051", formats=("float16",)).rows[0].shortest == "2052.0"


def test_double_rounding_via_float32() -> None:
    # ml_dtypes 0.7 (from library): 1 + 2^-8 + 2^-30 -> bf16 directly 1.0078125, through
    # float32 first 1.0
    direct = compare("1 + 2**-8 + 2**-30", formats=("bfloat16",))
    via = compare("1 + 2**-8 + 2**-30", formats=("bfloat16",), via="float32")
    assert direct.rows[0].stored.value == Fraction(129, 128)
    assert via.rows[0].stored.value == 1
    assert via.via is FORMATS["float32"] and via.source.value == 1 + Fraction(1, 256)
    assert via.rows[0].abs_error == -(Fraction(1, 256) + Fraction(1, 2**30))  # vs exact input


def test_flags() -> None:
    c = compare("nan", formats=("float4_e2m1fn", "float16"))
    fp4, f16 = c.rows
    assert fp4.stored.is_zero and fp4.not_representable and fp4.abs_error is None
    assert f16.stored.is_nan and not f16.not_representable and f16.ulp is None
    c = compare("1e10", formats=("float16", "float8_e4m3fn"), overflow="saturate")
    assert all(r.overflowed for r in c.rows)
    assert c.row("float16").code == 0x7BFF
    c = compare("1e-10", formats=("float16",))
    assert c.rows[0].underflowed and c.rows[0].stored.is_zero and c.rows[0].ulp_error is not None
    c = compare("65519", formats=("float16",))  # below max + ulp/2: rounds to 65504, no overflow
    assert not c.rows[0].overflowed
    c = compare("65520", formats=("float16",))  # the tie rounds up past max: IEEE overflow
    assert c.rows[0].overflowed and c.rows[0].stored.is_inf
    c = compare("-inf", formats=("float8_e4m3fn",))
    assert c.rows[0].stored.is_nan and c.rows[0].not_representable


def test_rounding_options_and_stochastic_seed() -> None:
    rz = compare("0.1", formats=("bfloat16",), rounding="roundTowardZero").rows[0]
    assert rz.code == 0x3DCC  # truncation of 0x3DCCCCCD (common practice: truncation = RTZ)
    a = compare("0.1", formats=("float8_e4m3fn", "float16"), rounding="stochastic", seed=7)
    b = compare("0.1", formats=("float16",), rounding="stochastic", seed=7)
    assert a.row("float16").code == b.row("float16").code  # independent of the other formats


@pytest.mark.parametrize("name", sorted(FORMATS), ids=str)
def test_neighbours_and_fields_consistent(name: str) -> None:
    fmt = FORMATS[name]
    rng = random.Random(name)
    codes = range(1 << fmt.bits) if fmt.bits <= 8 else [rng.getrandbits(fmt.bits) for _ in range(300)]
    for code in codes:
        assert code_fields(code, fmt) == fields(code, fmt)
        down, up = neighbour_codes(code, fmt)
        if fmt.classify(code) == "nan":
            assert down is None and up is None
            continue
        v = fmt.code_value(code) if fmt.classify(code) == "finite" else None
        for n, bigger in ((down, False), (up, True)):
            if n is None or v is None or fmt.classify(n) != "finite":
                continue
            w = fmt.code_value(n)
            assert (w > v) if bigger else (w < v)


@pytest.mark.parametrize("name", sorted(n for n, f in FORMATS.items() if f.bits <= 16), ids=str)
def test_scalar_fields_equal_vectorized_on_every_code(name: str) -> None:
    """The integer twin (one code at a time) and the array path agree on every code."""
    fmt = FORMATS[name]
    codes = np.arange(1 << fmt.bits, dtype=np.uint64)
    vec = fields(codes, fmt)
    for code in range(1 << fmt.bits):
        one = code_fields(code, fmt)
        got = (one.sign, one.exponent, one.significand, int(one.kind), one.payload)
        want = tuple(int(a[code]) for a in (vec.sign, vec.exponent, vec.significand, vec.kind, vec.payload))
        assert got == want, (name, hex(code))


def test_neighbours_match_numpy_nextafter_float16() -> None:
    for code in range(0, 1 << 16, 7):
        x = np.uint16(code).view(np.float16)
        if not np.isfinite(x):
            continue
        down, up = neighbour_codes(code, FORMATS["float16"])
        if up is not None:
            assert np.uint16(up).view(np.float16) == np.nextafter(x, np.float16(np.inf))
        if down is not None:
            assert np.uint16(down).view(np.float16) == np.nextafter(x, np.float16(-np.inf))


# ----- shortest and exact decimal ---------------------------------------------------------------
def _digits(text: str) -> int:
    return len(text.lstrip("-").split("e")[0].replace(".", "").strip("0"))


def test_shortest_float16_matches_numpy_everywhere() -> None:
    for code in range(1 << 16):
        x = np.uint16(code).view(np.float16)
        if not np.isfinite(x):
            continue
        mine = shortest_decimal(code, "float16")
        ref = np.format_float_positional(x, unique=True)
        assert Decimal(mine) == Decimal(ref) and _digits(mine) == _digits(ref), (code, mine, ref)


def test_shortest_float32_matches_numpy() -> None:
    rng = random.Random(32)
    codes = [rng.getrandbits(32) for _ in range(3000)] + [1, 0x7F7FFFFF, 0x00800000, 0x3DCCCCCD]
    for code in codes:
        x = np.uint32(code).view(np.float32)
        if not np.isfinite(x):
            continue
        mine = shortest_decimal(code, "float32")
        ref = np.format_float_positional(x, unique=True)
        assert Decimal(mine) == Decimal(ref), (hex(code), mine, ref)


def test_shortest_float64_equals_repr() -> None:
    rng = random.Random(64)
    codes = [rng.getrandbits(64) for _ in range(2000)] + [1, 0x3FB999999999999A, 0x7FEFFFFFFFFFFFFF]
    for code in codes:
        x = float(np.uint64(code).view(np.float64))
        if x != x or x in (float("inf"), float("-inf")):
            continue
        assert shortest_decimal(code, "float64") == repr(x)


@pytest.mark.parametrize("name", ["bfloat16", "float8_e4m3fn", "float8_e8m0fnu", "float4_e2m1fn"])
def test_shortest_is_unique_and_minimal(name: str) -> None:
    """Property check against the independent oracle: the text reads back to the code, and no
    decimal with one digit fewer (either neighbour of the value on that grid) does."""
    fmt = FORMATS[name]
    layout = oracle.Layout.of(fmt)
    step = 3 if fmt.bits == 16 else 1
    for code in range(0, 1 << fmt.bits, step):
        if fmt.classify(code) != "finite" or fmt.code_value(code) == 0:
            continue
        text = shortest_decimal(code, fmt)
        value = Fraction(Decimal(text))
        assert oracle.encode(value, layout) == code, (code, text)
        n = _digits(text)
        if n > 1:
            exact = abs(fmt.code_value(code))
            with localcontext() as ctx:
                ctx.prec = 60
                lead = Decimal(exact.numerator) / Decimal(exact.denominator)
            shift = (n - 2) - lead.adjusted()
            scaled = exact * Fraction(10) ** shift
            lo = scaled.numerator // scaled.denominator
            sign = -1 if code & fmt.sign_mask else 1
            for m in (lo, lo + 1):
                cand = sign * Fraction(m) / Fraction(10) ** shift
                assert m == 0 or oracle.encode(cand, layout) != code, (code, text, cand)


def test_exact_decimal() -> None:
    # binary32 0x00000001 = 2^-149, 105 significant digits (from library)
    full = exact_decimal(Fraction(1, 2**149))
    assert full.startswith("1.40129846432481707092372958328991613128026194187651577175706828")
    assert full.endswith("e-45")
    with localcontext() as ctx:
        ctx.prec = 200
        assert Decimal(full) == Decimal(1) / Decimal(2**149)
    short = abbreviate_decimal(full, 12)
    assert short == "1.40129846432…e-45 (105 digits)"
    assert exact_decimal(Fraction(1, 2**149), max_digits=12) == short
    assert exact_decimal(Fraction(819, 8192)) == "0.0999755859375"  # binary16 0x2E66, from library
    assert exact_decimal(Fraction(-2)) == "-2.0"
    assert exact_decimal(Fraction(1, 3)).endswith("…")


@pytest.mark.parametrize("x", [Fraction(1, 3), Fraction(1, 10), np.float32(0.1), 2**-1074,
                               -0.0, float("-inf"), 10**400, Fraction(1, 2**200000)])
def test_exact_text_parses_back(x: object) -> None:
    from bitprism.numerics.exact import as_exact

    ev = as_exact(x) if not isinstance(x, float) or x == x else ExactValue.nan()
    assert parse(exact_text(ev)) == ev


# ----- renderings -------------------------------------------------------------------------------
def test_text_table_exact_at_fixed_width() -> None:
    """Verdicts first, in words, then the table; stored values as the shortest decimal that
    reads back and the exact one: E4M3 0x1D = 13/128 = 0.1015625 (from library: ml_dtypes)."""
    import ml_dtypes

    c = compare("0.1", formats=("float8_e4m3fn", "float4_e2m1fn"))
    e4m3 = float(np.array(0.1).astype(ml_dtypes.float8_e4m3fn))
    assert Fraction(e4m3) == Fraction(13, 128)
    expected = "\n".join([
        "input 0.1 = 0.1 exactly (1/10)",
        "roundTiesToEven · overflow standard · subnormals keep · one rounding",
        "float8_e4m3fn: 0.1015625, rounded up by 0.0015625 (+0.2 ULP)",
        "float4_e2m1fn: 0.1 → 0 (underflow to zero; smallest subnormal 0.5)",
        "",
        "format         class      shortest  exact       ULP err  relative err  "
        "bits (sign biased-exponent trailing-significand)",
        "float8_e4m3fn  normal     0.1       0.1015625      +0.2      +0.01562  0 0011 101",
        "float4_e2m1fn  zero       0         =              -0.2            -1  0 00 0",
    ])
    assert c.to_text(width=120) == expected
    assert c.to_text(width=40).splitlines()[5] == "format         class      shortest  exa…"
    assert all(len(line) <= 40 for line in c.to_text(width=40).splitlines())


def test_mimebundle_and_html_escaping() -> None:
    evil = Format("<b>&evil</b>", 4, 3, specials="fn")
    c = compare("0.1", formats=(evil, "float16"))
    bundle = c._repr_mimebundle_()
    assert set(bundle) == {"text/plain", "text/html"}
    html = bundle["text/html"]
    assert "<b>&evil</b>" not in html and "&lt;b&gt;&amp;evil&lt;/b&gt;" in html
    # one <style> element only: the outcome colours of JupyterLab's dark theme, scoped to .bitprism
    from bitprism.render.palette import theme_css

    assert html.count("<style") == 1 and theme_css() in html
    rest = html.replace(theme_css(), "")
    assert "<script" not in rest and "http" not in rest and "<style" not in rest
    assert html.count('class="bitprism-band"') == 2
    assert "<b>&evil</b>" in bundle["text/plain"]


def test_html_size_for_eight_formats_with_float64() -> None:
    names = ("float64", "float32", "tf32", "bfloat16", "float16", "float8_e4m3fn", "float8_e5m2",
             "float4_e2m1fn")
    for value in ("0.1", "1/3", "2**-1074", "1e300", "nan", "-65504.5"):
        html = compare(value, formats=names).to_html()
        assert len(html.encode()) < 64 * 1024, value


def test_ruler_marks_dropped_bits() -> None:
    """1 + 2^-8 + 2^-30 in bfloat16 (8 significant bits): 1.0078125, the input's bits 2^-8 and
    2^-30 beyond its last kept bit 2^-7 are drawn struck through; float32 keeps 2^-8 and drops
    2^-30 (from library: ml_dtypes bfloat16 and numpy float32 of the same sum)."""
    import ml_dtypes

    x = 1 + 2.0**-8 + 2.0**-30
    assert float(np.array(x).astype(ml_dtypes.bfloat16)) == 1 + 2**-7
    assert float(np.float32(x)) == 1 + 2**-8
    c = compare("1 + 2**-8 + 2**-30", formats=("float32", "bfloat16"))
    html = c.to_html(aligned=True)
    assert "bitprism-ruler-band" in html and "line-through" in html
    assert "bits the cast drops" in html  # the legend names the struck-through bits in words
    assert html.count("bit of the exact input this format drops") >= 2
    assert "bitprism-ruler-band" not in c.to_html(aligned=False)


def test_core_and_render_import_no_ui_libraries() -> None:
    code = ("import sys, bitprism.numerics.compare, bitprism.render.compare_html, "
            "bitprism.numerics.decimal_text; "
            "bad = [m for m in ('ipywidgets', 'matplotlib', 'IPython') if m in sys.modules]; "
            "print(bad); sys.exit(1 if bad else 0)")
    subprocess.run([sys.executable, "-c", code], check=True)


def test_compare_accepts_numbers_and_names() -> None:
    c = compare(np.float32(0.1), formats=["fp16"])
    assert c.input.value == Fraction(np.float32(0.1).item()) and c.rows[0].format.name == "float16"
    assert isinstance(c, Comparison) and get_format("bf16") not in [r.format for r in c.rows]


# ----- values and errors beyond float64 and beyond Python's int-to-str limit --------------------
def _decimal_g(q: Fraction, digits: int, signed: bool) -> str:
    """Python's decimal module: q to 60 digits, then format(..., 'g') (round half even), with
    trailing zeros dropped as float's 'g' drops them (Decimal's keeps significant zeros)."""
    with localcontext() as ctx:
        ctx.prec = 60
        d = Decimal(q.numerator) / Decimal(q.denominator)
        text = format(d, f"{'+' if signed else ''}.{digits}g")
    mantissa, _, exponent = text.partition("e")
    if "." in mantissa:
        mantissa = mantissa.rstrip("0").rstrip(".")
    return mantissa + ("e" + exponent if exponent else "")


def test_errors_beyond_float64_are_rendered_from_the_exact_value() -> None:
    from bitprism.render.compare_text import format_error, format_number

    c = compare("1e400", ["float4_e2m1fn"])  # overflows to FP4's largest, 6 (OCP MX v1.0)
    row = c.rows[0]
    assert row.stored.value == 6 and row.rel_error == Fraction(6, 10**400) - 1
    text = c.to_text()
    assert format_error(row.ulp_error) == _decimal_g(row.ulp_error, 6, True) == "-5e+399"
    assert "-5e+399" in text
    assert format_number(row.abs_error, 4, True) == _decimal_g(row.abs_error, 4, True)
    assert "abs -1e+400" in c.to_html()
    c = compare("1e-400", ["float8_e8m0fnu"])  # below E8M0's smallest, 2^-127: becomes it
    row = c.rows[0]
    assert row.stored.value == Fraction(1, 2**127)
    assert format_number(row.rel_error, 4, True) == _decimal_g(row.rel_error, 4, True)
    assert _decimal_g(row.rel_error, 4, True) == "+5.877e+361"
    assert "+5.877e+361" in c.to_text() and "+5.877e+361" in c.to_html()
    # an error too small for float64 is not shown as 0 (float() would flush it)
    tiny = Fraction(-1, 10**400)
    assert format_number(tiny, 4, True) == _decimal_g(tiny, 4, True) == "-1e-400"


def test_format_number_in_float64_range_is_python_formatting() -> None:
    from bitprism.render.compare_text import format_error, format_number

    rng = random.Random(7)
    for _ in range(2000):
        q = Fraction(rng.getrandbits(60) + 1, rng.getrandbits(60) + 1) * Fraction(2) ** rng.randint(-1000, 1000)
        q = -q if rng.random() < 0.5 else q
        assert format_number(q, 4, True) == f"{float(q):+.4g}"  # Python's float formatting
        assert format_number(q) == f"{float(q):.4g}"
    assert format_error(Fraction(-1, 3)) == "-1/3" and format_error(Fraction(5, 2)) == "+2.5"
    assert format_error(Fraction(10**400 + 1, 3)).startswith("+3.333e+399")


@pytest.mark.parametrize("text", ["1e5000", "-1e5000", "1/3**10000", "2**100000", "1e4321 + 1"])
def test_values_beyond_the_int_to_str_limit_render(text: str) -> None:
    assert sys.get_int_max_str_digits() == 4300  # Python's default limit (sys docs)
    c = compare(text, ["float32", "float16", "float4_e2m1fn", "float8_e8m0fnu"])
    out, page = c.to_text(), c.to_html()
    assert len(out) < 2000 and len(page) < 64 * 1024
    head = out.splitlines()[0]
    if text == "1e4321 + 1":
        assert "(4322 digits)" in head and "(4322 digits)" in page
    if text == "2**100000":  # 30103 digits: floor(100000 log10 2) + 1 (math.log10)
        assert f"({math.floor(100000 * math.log10(2)) + 1} digits)" in head


def test_values_render_with_a_lowered_int_to_str_limit() -> None:
    previous = sys.get_int_max_str_digits()
    try:
        sys.set_int_max_str_digits(640)  # the smallest limit Python allows (sys docs)
        for text in ("2**-1074", "1e700", "1/3**700"):
            c = compare(text, ["float64", "float16"])
            assert c.to_text() and c.to_html()
    finally:
        sys.set_int_max_str_digits(previous)


def _lines_run(call) -> int:
    """Python lines executed by ``call()`` (sys.settrace): a count of work, not a clock."""
    count = 0

    def trace(frame, event, arg):  # noqa: ANN001
        nonlocal count
        if event == "line":
            count += 1
        return trace

    sys.settrace(trace)
    try:
        call()
    finally:
        sys.settrace(None)
    return count


def test_sticky_bit_sum_renders_with_little_work() -> None:
    """1 + 1e-999999 carries the sticky stand-in 2^-131073 (exact_arithmetic): its exact decimal
    has 131,074 digits. Peeling one factor of 2 per step of a loop (the old code) ran about
    half a million lines and took seconds; the display writes a few dozen digits."""
    c = compare("1+1e-999999")
    assert c.input.value == 1 + Fraction(1, 2 ** (MAGNITUDE_LIMIT + 1))
    text, html = c.to_text(), c.to_html()  # warm the caches
    lines = _lines_run(c.to_text) + _lines_run(c.to_html)
    assert lines < 50_000, lines
    assert "(131074 digits)" in text and "(131074 digits)" in html  # 131073 + 1 (exact)
    assert len(text) < 2000 and len(html) < 64 * 1024
    digits = sum(ch.isdigit() for ch in text)
    assert digits < 1500, digits


# ----- issue 17: verdicts, the shortest/exact pair, -0, NaN payloads -----------------------------
def _ulp_at(x: float, dtype: type) -> Fraction:
    """ULP at x in ``dtype`` (from library: numpy.spacing for numpy types, ml_dtypes' finfo)."""
    import ml_dtypes

    info = ml_dtypes.finfo(dtype)
    e = max(math.frexp(abs(x))[1] - 1, int(info.minexp))
    return Fraction(2) ** (e - int(info.nmant))


def test_verdicts_for_the_issue_examples() -> None:
    """Each verdict's numbers are computed here independently (numpy float16, ml_dtypes casts,
    Fractions), never pasted."""
    import ml_dtypes

    from bitprism.render.verdicts import verdict

    c = compare("65504*2", ["float16", "bfloat16", "float8_e4m3fn", "float32"])
    x = Fraction(65504 * 2)
    with np.errstate(over="ignore"):
        assert np.isinf(np.float16(65504 * 2))  # numpy: binary16 overflows to +Inf
    f16_max = int(np.finfo(np.float16).max)
    key, words = verdict(c, c.row("float16"))
    assert key == "overflow" and words == f"{x} → +Inf (overflow; largest finite {f16_max})"
    bf = Fraction(float(np.array(65504 * 2.0).astype(ml_dtypes.bfloat16)))
    up = bf - x
    ulps = up / _ulp_at(float(bf), ml_dtypes.bfloat16)
    key, words = verdict(c, c.row("bfloat16"))
    assert key == "rounded"
    assert words == f"{bf}, rounded up by {up} (+{float(ulps):g} ULP)"  # 131072, 64, 0.0625
    assert np.isnan(np.array(65504 * 2.0).astype(ml_dtypes.float8_e4m3fn).astype(float))
    e4_max = int(ml_dtypes.finfo(ml_dtypes.float8_e4m3fn).max)
    key, words = verdict(c, c.row("float8_e4m3fn"))
    assert key == "overflow"
    assert words == f"{x} → NaN (overflow; no Inf in this format; largest finite {e4_max})"
    assert verdict(c, c.row("float32")) == ("exact", f"{x}, exact")

    c = compare("448", ["float8_e4m3fn"])  # E4M3FN's largest finite (ml_dtypes finfo)
    assert verdict(c, c.rows[0]) == ("exact", f"{e4_max}, exact")
    c = compare("2**-24", ["float16"])  # binary16's smallest subnormal (numpy finfo)
    assert Fraction(float(np.finfo(np.float16).smallest_subnormal)) == Fraction(1, 2**24)
    assert verdict(c, c.rows[0]) == ("subnormal", "2^-24, exact; subnormal: 1 significant bit")
    c = compare("1e-8", ["float16"])
    assert np.float16(1e-8) == 0  # numpy: below half the smallest subnormal, rounds to 0
    key, words = verdict(c, c.rows[0])
    assert key == "underflow" and words.startswith("1e-08 → 0 (underflow to zero;")


def test_stored_value_is_the_shortest_and_the_exact_decimal() -> None:
    """float32's 0x3dcccccd: shortest text 0.1 (repr of numpy's float32), exact value
    0.100000001490116119384765625 (decimal.Decimal of the same float): never a shortened value
    labelled exact."""
    from bitprism.render.verdicts import stored_text

    f = np.float32(0.1)
    exact = str(Decimal(float(f)))
    c = compare("0.1", ["float32", "float64"])
    assert stored_text(c.row("float32")) == f"shortest {repr(f.item())[:3]} · exact {exact}"
    assert "shortest <b" in c.to_html() and exact in c.to_html() and exact in c.to_text()
    long = str(Decimal(0.1))  # float64's exact 0.1: 55 significant digits
    text = stored_text(c.row("float64"))
    assert long not in text and "(55 digits)" in text and "…" in text


def test_negative_zero_is_minus_zero_everywhere() -> None:
    c = compare("-0", ["float32", "float16", "float8_e4m3fnuz"])
    text, html = c.to_text(), c.to_html()
    assert "float32:         -0, exact" in text and "0.0" not in text
    assert "<b>-0</b>" in html
    from bitprism.render.verdicts import verdict

    # E4M3FNUZ has no -0 (its pattern is the NaN): -0 becomes +0 (from library: ml_dtypes)
    import ml_dtypes

    z = np.array(-0.0).astype(ml_dtypes.float8_e4m3fnuz)
    assert not np.signbit(z.astype(float))
    assert verdict(c, c.row("float8_e4m3fnuz"))[1] == "-0 → 0 (no -0 in this format)"


def test_nan_payload_carried_and_labelled() -> None:
    """A float16 signaling NaN 0x7d01 as the source: float32 and bfloat16 get what bp.encode of
    the same float16 array gives (quieted, top payload bits kept; IEEE 754-2019 §6.2.3), and
    the verdicts say quiet or signaling, the payload, and kept/quieted/cut/lost."""
    import bitprism as bp
    from bitprism.render.verdicts import payload_fate, verdict

    src = np.array([0x7D01], dtype=np.uint16).view(np.float16)
    c = compare("0", ["float16", "float32", "bfloat16", "float8_e4m3fn"],
                pinned=("float16", 0x7D01))
    c = compare_exact_of_source(c)
    for name in ("float32", "bfloat16"):
        assert c.row(name).code == int(bp.encode(src, name)[0]), name
    assert verdict(c, c.row("float16"))[1] == "signaling NaN, payload 0x101"
    assert payload_fate(c, c.row("float16")) is None  # the source itself
    assert verdict(c, c.row("float32"))[1] == (
        f"quiet NaN, payload {c.row('float32').fields.payload:#x} (quieted, payload kept)")
    assert payload_fate(c, c.row("bfloat16")).word == "cut"  # 9 payload bits, room for 6
    assert payload_fate(c, c.row("float8_e4m3fn")).word == "lost"  # one NaN in E4M3FN
    assert "signaling NaN, payload 0x101" in c.to_text()


def compare_exact_of_source(c):
    """The comparison a Prism makes when a band's NaN pattern is the source: every row from
    the pinned row's exact value (its payload included)."""
    from bitprism.numerics.compare import compare_exact

    pin = c.rows[0]
    return compare_exact(pin.stored, "nan", [r.format for r in c.rows], c.options,
                         pinned=(pin.format, pin.code))
