"""The exact input parser and bit-pattern reader, checked against Python's own number readers.

Oracles: ``fractions.Fraction`` (its string parser and exact arithmetic), ``float.fromhex`` /
``float.hex`` / ``repr`` (C99 hex floats and shortest decimal round trip), ``decimal.Decimal``,
``int(text, 0)`` (Python integer literals), numpy float64 arithmetic (IEEE 754 special values),
``struct`` and numpy/ml_dtypes views (bit patterns). Facts without a library oracle are marked
"common practice" or cite IEEE 754.
"""

from __future__ import annotations

import math
import struct
import time
from decimal import Decimal
from fractions import Fraction

import ml_dtypes
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from bitprism.errors import BitprismError, ParseError, UnsupportedInputError
from bitprism.formats import FORMATS, get_format
from bitprism.numerics.exact import MAGNITUDE_LIMIT, ExactValue
from bitprism.numerics.exact_arithmetic import apply_operation
from bitprism.numerics.expression import (
    MAX_DEPTH,
    MAX_LENGTH,
    MAX_LITERAL_DIGITS,
    MAX_OPERATIONS,
    Binary,
    Number,
    Unary,
    parse_tree,
)
from bitprism.numerics.parse import parse, parse_bits


def exact(text: str) -> Fraction:
    v = parse(text)
    assert v.kind == "finite" and not v.clamped, v
    return v.value


def is_negative(x: float) -> bool:
    return math.copysign(1.0, x) < 0


# ----- literals ---------------------------------------------------------------------------------
@pytest.mark.parametrize(
    "text", ["0.1", "-1.5e-3", "1E+5", ".5", "5.", "1_000", "1_000.000_5e-1_0", "007", "2.5e0"]
)
def test_decimal_literals_match_fraction_string_parser(text: str) -> None:
    assert exact(text) == Fraction(text)  # fractions.Fraction(str)


@pytest.mark.parametrize(
    "text", ["0x1.8p-3", "-0x1p+0", "0x.8p1", "0X1P-1074", "0x1.fffffffffffffp+1023", "0x1p-1022"]
)
def test_hex_floats_match_float_fromhex(text: str) -> None:
    assert exact(text) == Fraction(float.fromhex(text))  # float.fromhex (C99 hex float)


@pytest.mark.parametrize("text", ["0x3c00", "0X7F_FF", "0b1010", "0o17", "0x_ff", "123456789" * 9])
def test_radix_literals_without_p_are_python_integers(text: str) -> None:
    # Documented choice: 0x3c00 is the integer 15360, not a float16 bit pattern.
    assert exact(text) == int(text, 0)  # Python int literal rules


def test_hex_literal_is_not_a_bit_pattern() -> None:
    one_f16 = struct.unpack("<H", struct.pack("<e", 1.0))[0]  # struct: float16 bits of 1.0
    assert exact(f"{one_f16:#x}") == one_f16  # read as the integer 15360 ...
    assert parse_bits(f"{one_f16:#x}", "float16") == one_f16  # ... parse_bits reads patterns


def test_long_exact_decimal_expansion() -> None:
    # The exact decimal value of the smallest float64 subnormal (decimal.Decimal(float)).
    text = format(Decimal(5e-324), "e")
    assert len(text) < MAX_LENGTH
    assert exact(text) == Fraction(5e-324)  # fractions.Fraction(float), exact


@pytest.mark.parametrize(
    ("text", "kind", "negative"),
    [
        ("inf", "inf", False),
        ("INF", "inf", False),
        ("Infinity", "inf", False),
        ("-inf", "inf", True),
        ("+infinity", "inf", False),
        ("nan", "nan", False),
        ("NaN", "nan", False),
        ("-nan", "nan", True),
        ("-0", "finite", True),
        ("-0.0", "finite", True),
        ("-0x0p0", "finite", True),
        ("0", "finite", False),
        ("+0.0", "finite", False),
    ],
)
def test_special_values_keep_their_sign(text: str, kind: str, negative: bool) -> None:
    v = parse(text)
    assert (v.kind, v.negative) == (kind, negative)
    if kind == "finite":
        # float(text) / float.fromhex(text) give the same signed zero (Python float parsers)
        reader = float.fromhex if "x" in text else float
        assert is_negative(reader(text)) == negative


# ----- arithmetic -------------------------------------------------------------------------------
@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("1/3", Fraction(1, 3)),  # fractions.Fraction
        ("2**-24", Fraction(2) ** -24),
        ("-(3 + 1/8)", -(3 + Fraction(1, 8))),
        ("2**10 * 3", Fraction(2) ** 10 * 3),
        ("-2**2", -(2**2)),  # Python precedence: ** binds tighter than unary minus
        ("2**3**2", 2 ** (3**2)),  # ** is right-associative (Python)
        ("2**-1", Fraction(2) ** -1),
        ("(-2)**3", Fraction(-2) ** 3),
        ("-2**-2", -(Fraction(2) ** -2)),
        ("10 - 4 - 3", (10 - 4) - 3),  # left-associative (Python)
        ("2 * 3 / 4 * 5", Fraction(2) * 3 / 4 * 5),
        ("1 + 2 * 3", 1 + 2 * 3),
        ("--1", Fraction(1)),
        ("0**0", Fraction(0**0)),  # Python 0**0 == 1; IEEE 754 §9.2.1 pown(x, 0) = 1
        ("0.1 + 0.2", Fraction("0.1") + Fraction("0.2")),
        ("3 \u2212 1 \u00d7 4 \u00f7 8", 3 - Fraction(1 * 4, 8)),  # minus sign, times, divide
        ("2**100000 / 2**99999", Fraction(2)),
        ("2**-100000", Fraction(1, 2**100000)),  # within 2^-131072: built exactly
    ],
)
def test_arithmetic_is_exact(text: str, expected: Fraction) -> None:
    assert exact(text) == expected


SPECIAL_CASES = [
    # text, the same operation on numpy float64 (IEEE 754 arithmetic)
    ("1/0", lambda: np.float64(1) / np.float64(0)),
    ("-1/0", lambda: np.float64(-1) / np.float64(0)),
    ("1/-0", lambda: np.float64(1) / np.float64(-0.0)),
    ("0/0", lambda: np.float64(0) / np.float64(0)),
    ("inf - inf", lambda: np.float64(np.inf) - np.float64(np.inf)),
    ("inf + inf", lambda: np.float64(np.inf) + np.float64(np.inf)),
    ("0 * inf", lambda: np.float64(0) * np.float64(np.inf)),
    ("inf / inf", lambda: np.float64(np.inf) / np.float64(np.inf)),
    ("-0 + 0", lambda: np.float64(-0.0) + np.float64(0.0)),
    ("-0 + -0", lambda: np.float64(-0.0) + np.float64(-0.0)),
    ("0 - 0", lambda: np.float64(0.0) - np.float64(0.0)),
    ("-0 - 0", lambda: np.float64(-0.0) - np.float64(0.0)),
    ("-0 * 5", lambda: np.float64(-0.0) * np.float64(5)),
    ("-0 * -5", lambda: np.float64(-0.0) * np.float64(-5)),
    ("1/-inf", lambda: np.float64(1) / np.float64(-np.inf)),
    ("-inf * -2", lambda: np.float64(-np.inf) * np.float64(-2)),
    ("3 - 3", lambda: np.float64(3) - np.float64(3)),
    ("-3 + 3", lambda: np.float64(-3) + np.float64(3)),
    ("-5 / inf", lambda: np.float64(-5) / np.float64(np.inf)),
    ("inf * 0.5", lambda: np.float64(np.inf) * np.float64(0.5)),
    ("nan + 1", lambda: np.float64(np.nan) + np.float64(1)),
    ("0**-1", lambda: np.power(np.float64(0), -1.0)),
    ("(-0)**-1", lambda: np.power(np.float64(-0.0), -1.0)),
    ("(-0)**-2", lambda: np.power(np.float64(-0.0), -2.0)),
    ("(-0)**3", lambda: np.power(np.float64(-0.0), 3.0)),
    ("(-inf)**3", lambda: np.power(np.float64(-np.inf), 3.0)),
    ("(-inf)**-3", lambda: np.power(np.float64(-np.inf), -3.0)),
    ("(-inf)**2", lambda: np.power(np.float64(-np.inf), 2.0)),
    ("nan**0", lambda: np.power(np.float64(np.nan), 0.0)),
    ("inf**0", lambda: np.power(np.float64(np.inf), 0.0)),
    ("(-2)**-1", lambda: np.power(np.float64(-2), -1.0)),
]


@pytest.mark.parametrize(("text", "oracle"), SPECIAL_CASES, ids=[c[0] for c in SPECIAL_CASES])
def test_ieee_special_values_match_numpy_float64(text: str, oracle) -> None:
    with np.errstate(all="ignore"):
        expected = float(oracle())
    v = parse(text)
    if math.isnan(expected):
        assert v.is_nan  # NaN sign is unspecified by IEEE 754 (x86 sets it), so not compared
        return
    assert float(v) == expected
    assert v.negative == is_negative(expected)


def test_zero_sum_sign_under_round_toward_negative() -> None:
    # IEEE 754-2008 §6.3: an exact zero sum of opposite signs is -0 under roundTowardNegative.
    plus, minus = ExactValue.finite(3), ExactValue.finite(-3)
    assert apply_operation("+", plus, minus).negative is False
    assert apply_operation("+", plus, minus, rounding="roundTowardNegative").negative is True
    assert apply_operation("-", plus, plus, rounding="roundTowardNegative").negative is True
    zero = ExactValue.finite(0)
    # x + x keeps the sign of x even under roundTowardNegative (same clause)
    assert apply_operation("+", zero, zero, rounding="roundTowardNegative").negative is False


def test_tree_shape_and_columns() -> None:
    tree = parse_tree("-(3 + 1/8) * 2")
    assert isinstance(tree, Binary) and tree.op == "*" and tree.column == 12
    assert isinstance(tree.left, Unary) and tree.left.column == 1
    inner = tree.left.operand
    assert isinstance(inner, Binary) and inner.op == "+" and (inner.start, inner.end) == (1, 10)
    assert isinstance(tree.right, Number) and tree.right.literal == "2"
    # exponent: right-associative and unary minus allowed after **
    tree = parse_tree("2**-3**2")
    assert isinstance(tree, Binary) and tree.op == "**"
    assert isinstance(tree.right, Unary) and isinstance(tree.right.operand, Binary)


# ----- properties -------------------------------------------------------------------------------
finite_floats = st.floats(allow_nan=False, allow_infinity=False)


@given(finite_floats)
def test_repr_of_any_float64_parses_exactly(x: float) -> None:
    # repr is the shortest decimal that reads back as x, not x's exact value: parse must give
    # that decimal exactly (fractions.Fraction(str)), and it must round back to x (Python float).
    v = parse(repr(x))
    assert v.value == Fraction(repr(x))
    assert float(v) == x
    assert v.negative == is_negative(x)


@given(finite_floats)
def test_exact_decimal_of_any_float64_parses_exactly(x: float) -> None:
    text = str(Decimal(x))  # decimal.Decimal(float): the exact decimal expansion of x
    v = parse(text)
    assert v.value == Fraction(x)  # fractions.Fraction(float) is exact
    assert v.negative == is_negative(x)


@given(finite_floats)
def test_hex_of_any_float64_parses_exactly(x: float) -> None:
    v = parse(x.hex())  # float.hex: C99 hex float
    assert v.value == Fraction(x)
    assert v.negative == is_negative(x)


@given(st.integers(-(10**60), 10**60), st.integers(1, 10**60))
def test_any_fraction_parses_exactly(n: int, d: int) -> None:
    assert exact(f"{n}/{d}") == Fraction(n, d)  # fractions.Fraction


@given(st.decimals(allow_nan=False, allow_infinity=False, places=None))
def test_decimal_str_parses_exactly(d: Decimal) -> None:
    v = parse(str(d))
    assert v.value == Fraction(d)  # fractions.Fraction(Decimal) is exact
    assert v.negative == d.is_signed()


def _leaf() -> st.SearchStrategy[tuple[str, Fraction]]:
    ints = st.integers(-1000, 1000).map(lambda n: (f"({n})" if n < 0 else str(n), Fraction(n)))
    fracs = st.tuples(st.integers(-50, 50), st.integers(1, 50)).map(
        lambda nd: (f"({nd[0]}/{nd[1]})", Fraction(nd[0], nd[1]))
    )
    decimals = st.decimals(-100, 100, places=3).map(lambda d: (f"({d})", Fraction(d)))
    return st.one_of(ints, fracs, decimals)


def _combine(children):
    def build(pair):
        (ta, a), (tb, b) = pair
        return st.sampled_from("+-*/").map(lambda op: (op, ta, a, tb, b))

    binary = st.tuples(children, children).flatmap(build)
    power = st.tuples(children, st.integers(-3, 3)).map(lambda p: ("**", p[0][0], p[0][1], p[1]))
    return st.one_of(binary, power)


def _finish(item):
    """Text and Fraction value built from the same tree; None where Fraction would divide by 0."""
    if item[0] == "**":
        _, ta, a, k = item
        if a is None or (a == 0 and k < 0):
            return (None, None)
        return (f"({ta})**{k}" if k >= 0 else f"({ta})**({k})", a**k)
    op, ta, a, tb, b = item
    if a is None or b is None or (op == "/" and b == 0):
        return (None, None)
    value = {"+": a + b, "-": a - b, "*": a * b, "/": a / b if b else None}[op]
    return (f"({ta} {op} {tb})", value)


expression_trees = st.recursive(
    _leaf(), lambda children: _combine(children).map(_finish), max_leaves=12
)


@settings(max_examples=300)
@given(expression_trees)
def test_random_expression_trees_match_fraction_arithmetic(
    tree: tuple[str | None, Fraction],
) -> None:
    text, expected = tree
    if text is None:
        return  # the tree divides by an exact zero somewhere; Fraction cannot say what it is
    assert exact(text) == expected  # Fraction arithmetic on the same tree


# ----- errors and their columns -----------------------------------------------------------------
@pytest.mark.parametrize(
    ("text", "column", "fragment"),
    [
        ("1 + * 2", 5, "expected a number or '(' but found '*'"),
        ("(1 + 2", 7, "unexpected end of input: expected ')'"),
        ("1 +", 4, "unexpected end of input: expected a number or '('"),
        ("1 2", 3, "expected an operator or the end of input but found '2'"),
        ("(1 2)", 4, "expected ')' or an operator but found '2'"),
        ("1)", 2, "unmatched ')'"),
        (")", 1, "expected a number or '(' but found ')'"),
        ("", 1, "empty input"),
        ("   ", 1, "empty input"),
        ("foo", 1, "unknown name 'foo'"),
        ("1 + infinty", 5, "did you mean 'infinity'"),
        ("2 * nam", 5, "did you mean 'nan'?"),
        ("1 $ 2", 3, "unexpected character '$'"),
        ("2^3", 2, "write '**' for powers"),
        ("1,5", 2, "unexpected character ','"),
        ("1__0", 2, "'_' must sit between two digits"),
        ("1_", 2, "'_' must sit between two digits"),
        ("0x1.8", 6, "a hex fraction needs a binary exponent"),
        ("0x", 3, "expected digits after '0x'"),
        ("1e", 3, "expected digits after 'e' in the exponent"),
        ("0x1p+", 6, "expected digits after 'p' in the exponent"),
        ("1.2.3", 4, "unexpected '.' after the number '1.2'"),
        ("3c00", 2, "hex numbers start with 0x"),
        ("2**(1/2)", 4, "must be an integer"),
        ("2 ** 0.5", 6, "must be an integer"),
        ("2**inf", 4, "must be an integer"),
        ("1e999999 / 1e999999", 10, "cannot be evaluated exactly"),
        ("1e999999 - 1e999999", 10, "cannot be evaluated exactly"),
        ("1e999999 * 1e-999999", 10, "cannot be evaluated exactly"),
        ("-1e-999999 + 1e-999999", 12, "cannot be evaluated exactly"),
        ("(1 + 2**-60)**(10**9)", 13, "cannot be evaluated exactly"),
    ],
)
def test_errors_name_what_was_expected_and_the_column(
    text: str, column: int, fragment: str
) -> None:
    with pytest.raises(ParseError) as info:
        parse(text)
    assert info.value.column == column
    assert fragment in info.value.reason
    assert info.value.text == text
    assert isinstance(info.value, ValueError)  # BitprismError subclasses ValueError


def test_length_cap() -> None:
    text = "1+" * 600 + "1"
    with pytest.raises(ParseError) as info:
        parse(text)
    assert info.value.reason == f"input is {len(text)} characters long; the limit is {MAX_LENGTH}"
    assert info.value.column == MAX_LENGTH + 1


def test_depth_cap_for_parentheses_and_signs() -> None:
    ok = "(" * MAX_DEPTH + "1" + ")" * MAX_DEPTH
    assert exact(ok) == 1
    with pytest.raises(ParseError) as info:
        parse("(" * (MAX_DEPTH + 1) + "1" + ")" * (MAX_DEPTH + 1))
    assert info.value.column == MAX_DEPTH + 1 and "nests more than" in info.value.reason
    assert exact("-" * MAX_DEPTH + "1") == (-1) ** MAX_DEPTH
    with pytest.raises(ParseError) as info:
        parse("-" * (MAX_DEPTH + 1) + "1")
    assert info.value.column == MAX_DEPTH + 1


def test_operation_cap() -> None:
    assert exact("+".join(["1"] * (MAX_OPERATIONS + 1))) == MAX_OPERATIONS + 1
    text = "+".join(["1"] * (MAX_OPERATIONS + 2))
    with pytest.raises(ParseError) as info:
        parse(text)
    # the (MAX_OPERATIONS + 1)-th '+' sits at column 2 * (MAX_OPERATIONS + 1)
    assert info.value.column == 2 * (MAX_OPERATIONS + 1)
    assert "operations" in info.value.reason


def test_digit_cap() -> None:
    assert exact("9" * MAX_LITERAL_DIGITS) == int("9" * MAX_LITERAL_DIGITS)
    with pytest.raises(ParseError) as info:
        parse("1 + " + "9" * (MAX_LITERAL_DIGITS + 1))
    assert info.value.column == 5 and f"{MAX_LITERAL_DIGITS + 1} digits" in info.value.reason


@pytest.mark.parametrize("value", [1.5, 3, b"1", None, Fraction(1, 3)])
def test_non_text_input_names_the_type(value: object) -> None:
    with pytest.raises(BitprismError, match=type(value).__name__):
        parse(value)  # type: ignore[arg-type]
    with pytest.raises(UnsupportedInputError):
        parse_bits(value, "float16")  # type: ignore[arg-type]


# ----- huge and tiny magnitudes (clamped, instant) ----------------------------------------------
LIMIT = Decimal(2) ** MAGNITUDE_LIMIT  # decimal.Decimal (28 significant digits are plenty)


@pytest.mark.parametrize(
    "text", ["1e999999999", "-1e999999999", "1e-999999999", "-1e-999999999", "1e39500", "1e-39500"]
)
def test_huge_decimal_literals_clamp_in_the_right_direction(text: str) -> None:
    start = time.perf_counter()
    v = parse(text)
    print(f"{text}: {(time.perf_counter() - start) * 1e3:.2f} ms")  # informative only
    d = Decimal(text)  # decimal.Decimal reads any exponent exactly
    assert v.negative == d.is_signed()
    assert v.clamped == (1 if d.copy_abs() > LIMIT else -1)  # compared without rounding


@pytest.mark.parametrize(
    ("text", "direction", "negative"),
    [
        ("10**100000000", 1, False),
        ("(-10)**100000001", 1, True),  # odd power keeps the sign (Python int arithmetic)
        ("10**-100000000", -1, False),
        ("2**(10**30)", 1, False),
        ("0.5**(10**30)", -1, False),
        ("1e999999999 * 2", 1, False),
        ("1e999999999 * -1e-9", 1, True),  # still far beyond the limit
        ("1e999999999 + 1", 1, False),
        ("1 - 1e999999999", 1, True),
        ("1e999999999 / 1e-999999999", 1, False),
        ("1e-999999999 / 1e999999999", -1, False),
        ("1e999999999 ** 2", 1, False),
        ("1e999999999 ** -1", -1, False),
        ("(1 + 1e-999999) - 1", -1, False),  # the tiny addend survives as a sticky bit
        ("0x1p999999999", 1, False),
        ("-0x1p-999999999", -1, True),
    ],
)
def test_clamped_arithmetic(text: str, direction: int, negative: bool) -> None:
    start = time.perf_counter()
    v = parse(text)
    print(f"{text}: {(time.perf_counter() - start) * 1e3:.2f} ms")  # informative only
    assert v.kind == "finite"
    assert (v.clamped, v.negative) == (direction, negative)


def test_zero_times_clamped_is_an_exact_zero() -> None:
    v = parse("-0 * 1e999999999")  # 0 * x = 0 for every finite x (common practice)
    assert v.is_zero and v.negative and not v.clamped
    assert parse("1e999999999 * inf").is_inf
    assert parse("1e999999999 - inf").negative is True


def test_tiny_addend_rounds_like_the_true_sum() -> None:
    from bitprism.numerics.options import CastOptions
    from bitprism.numerics.scalar import decode_exact, encode_exact

    fmt = get_format("float16")
    v = parse("1 + 1e-999999")
    assert not v.clamped and v.value > 1
    up = encode_exact(v, fmt, CastOptions("roundTowardPositive"))
    nearest = encode_exact(v, fmt, CastOptions())
    # numpy: the float16 neighbour above 1, and 1 itself
    above = np.nextafter(np.float16(1), np.float16(2))
    assert float(decode_exact(up, fmt)) == float(above)
    assert float(decode_exact(nearest, fmt)) == 1.0


# ----- bit patterns -----------------------------------------------------------------------------
ONE_F16 = struct.unpack("<H", struct.pack("<e", 1.0))[0]  # struct: binary16 bits of 1.0


@pytest.mark.parametrize(
    "text",
    [
        "0x3c00",
        "0X3C00",
        "0x3c_00",
        "  0x 3c 00 ",
        "0x00003c00",
        "0b0_01111_0000000000",
        "0b0 01111 0000000000",
        "0b11110000000000",
        "0011110000000000",
        "0 01111 0000000000",
        "0.01111.0000000000",
        "0|01111|0000000000",
        "0_01111_0000000000",
    ],
)
def test_bit_pattern_spellings(text: str) -> None:
    assert parse_bits(text, "float16") == ONE_F16


def test_bit_patterns_keep_nan_payloads_and_signs() -> None:
    for code in (0x7E01, 0xFE00, 0x7C01, 0xFFFF):  # NaNs with payloads, signaling, signed
        assert np.isnan(np.array(code, dtype=np.uint16).view(np.float16))  # numpy view
        assert parse_bits(f"{code:#x}", np.dtype(np.float16)) == code
        assert parse_bits(format(code, "016b"), "fp16") == code
    assert parse_bits("0x8000", "float16") == 0x8000  # -0 (common practice)


def test_bit_patterns_for_other_formats() -> None:
    bf16_one = int(np.array(1, dtype=ml_dtypes.bfloat16).view(np.uint16))  # ml_dtypes view
    assert parse_bits(f"{bf16_one:#06x}", ml_dtypes.bfloat16) == bf16_one
    f32 = struct.unpack("<I", struct.pack("<f", -2.5))[0]  # struct: binary32 bits of -2.5
    assert parse_bits(f"{f32:#010x}", "float32") == f32
    assert parse_bits(format(f32, "032b"), "float32") == f32
    assert parse_bits("0111", "float4_e2m1fn") == 0b0111


@pytest.mark.parametrize("name", [n for n, f in FORMATS.items() if f.bits <= 8])
def test_every_code_of_small_formats_reads_back(name: str) -> None:
    fmt = FORMATS[name]
    for code in range(1 << fmt.bits):
        assert parse_bits(hex(code), fmt) == code
        assert parse_bits(bin(code), fmt) == code
        assert parse_bits(format(code, f"0{fmt.bits}b"), fmt) == code


@given(st.integers(0, 0xFFFF))
def test_any_float16_code_reads_back(code: int) -> None:
    assert parse_bits(f"{code:#06x}", "float16") == code
    b = format(code, "016b")
    assert parse_bits(f"{b[0]} {b[1:6]} {b[6:]}", "float16") == code


@pytest.mark.parametrize(
    ("text", "fmt", "column", "fragment"),
    [
        ("0x1ffff", "float16", 3, "0x1ffff needs 17 bits; float16 has 16"),
        ("0x0001ffff", "float16", 6, "0x1ffff needs 17 bits; float16 has 16"),
        ("0x100", "float8_e4m3fn", 3, "0x100 needs 9 bits; float8_e4m3fn has 8"),
        ("0b1_0000_0000", "float8_e5m2", 3, "0b100000000 needs 9 bits; float8_e5m2 has 8"),
        ("0x3g00", "float16", 4, "unexpected 'g' in a hex bit pattern"),
        ("0b012", "float16", 5, "unexpected '2' in a binary bit pattern"),
        ("0x", "float16", 3, "expected hex digits after '0x'"),
        ("", "float16", 1, "empty bit pattern"),
        ("   ", "float16", 1, "empty bit pattern"),
        ("001111000000000", "float16", 16, "needs exactly 16 digits, got 15"),
        ("00111100000000000", "float16", 17, "too many binary digits: float16 has 16 bits"),
        ("3c00", "float16", 1, "write hex with 0x"),
        ("-0x3c00", "float16", 1, "has no sign"),
        ("01112", "float4_e2m1fn", 5, "unexpected '2'"),
    ],
)
def test_bit_pattern_errors(text: str, fmt: str, column: int, fragment: str) -> None:
    with pytest.raises(ParseError) as info:
        parse_bits(text, fmt)
    assert info.value.column == column
    assert fragment in info.value.reason


def test_bit_pattern_unknown_format() -> None:
    with pytest.raises(BitprismError, match="unknown format"):
        parse_bits("0x3c00", "float17")


# ----- powers of bases near 1: the estimate never decides what it cannot tell -------------------
def test_power_of_a_base_near_one_is_refused_not_clamped() -> None:
    # (1 ± 2^-70)^(2^62) = exp(±2^62 * log1p(±2^-70)) ~ 1.0039 and 0.9961 (math.log1p, math.exp):
    # far inside every format, but its exact rational needs ~2^68 bits, so it is refused
    assert 1.0038 < math.exp(2**62 * math.log1p(2**-70)) < 1.0040
    assert 0.9960 < math.exp(2**62 * math.log1p(-(2**-70))) < 0.9962
    for text in ("(1+2**-70)**(2**62)", "(1-2**-70)**(2**62)", "(1+2**-70)**(-2**62)"):
        with pytest.raises(ParseError, match="cannot be evaluated exactly") as info:
            parse(text)
        assert info.value.column == text.index(")**") + 2  # at the operator


@pytest.mark.parametrize(
    ("text", "direction"),
    [
        ("(1+2**-70)**(2**90)", 1),  # log2 = 2^90 * log2(1 + 2^-70) ~ 1.5e6 (math.log1p)
        ("(1-2**-70)**(2**90)", -1),
        ("(1+2**-70)**(-2**90)", -1),
        ("(1-2**-70)**(-2**90)", 1),
        ("(1+2**-1100)**(2**1200)", 1),  # log2 of the base underflows float64: sign from q - 1
        ("(1-2**-1100)**(2**1200)", -1),
    ],
)
def test_power_of_a_base_near_one_clamps_in_the_right_direction(text: str, direction: int) -> None:
    v = parse(text)
    assert v.clamped == direction and not v.negative


def test_log2_estimate_is_accurate_near_one() -> None:
    from decimal import localcontext

    from bitprism.numerics.expression import log2_fraction

    with localcontext() as ctx:
        ctx.prec = 80
        for q in (Fraction(2**70 + 1, 2**70), Fraction(2**70 - 1, 2**70), Fraction(3, 2),
                  Fraction(1, 3), Fraction(10**30 + 7, 10**30), Fraction(2**200, 3)):
            ref = (Decimal(q.numerator) / Decimal(q.denominator)).ln() / Decimal(2).ln()
            got = log2_fraction(q)  # decimal.Decimal.ln at 80 digits is the reference
            assert abs(Decimal(got) - ref) <= abs(ref) * Decimal("1e-14"), (q, got, ref)


@settings(max_examples=200, deadline=None)
@given(
    k=st.integers(1, 60),
    delta=st.integers(-1000, 1000).filter(lambda d: d != 0),
    n=st.integers(-4000, 4000),
)
def test_power_near_one_never_contradicts_the_exact_value(k: int, delta: int, n: int) -> None:
    p, q = 2**k + delta, 2**k
    if p <= 0:
        return
    _check_power(p, q, n)


@settings(max_examples=60, deadline=None)
@given(
    base=st.sampled_from([(3, 2), (2, 3), (7, 4), (5, 8), (1023, 512), (9, 1), (1, 10)]),
    offset=st.integers(-40, 40),
    sign=st.sampled_from([1, -1]),
)
def test_power_at_the_limit_never_contradicts_the_exact_value(
    base: tuple[int, int], offset: int, sign: int
) -> None:
    p, q = base
    n = round((MAGNITUDE_LIMIT + 1) / abs(math.log2(p / q))) + offset  # result near 2^±131073
    _check_power(p, q, sign * n)


@settings(max_examples=200, deadline=None)
@given(
    k=st.integers(20, 120),
    delta=st.integers(-(2**20), 2**20).filter(lambda d: d != 0),
    log2_n=st.integers(0, 200),
    negative_n=st.booleans(),
)
def test_power_near_one_with_huge_exponent_matches_a_decimal_reference(
    k: int, delta: int, log2_n: int, negative_n: bool
) -> None:
    """Exponents far too large for the exact power: the reference is log2|x^n| = n ln(p/q) /
    ln 2 in decimal.Decimal at 100 digits. A clamp must point where the reference does and
    lie beyond the limit; a value must be exact (only small results can be built)."""
    from decimal import localcontext

    p, q = 2**k + delta, 2**k
    n = (1 << log2_n) + 3
    n = -n if negative_n else n
    try:
        v = parse(f"({p}/{q})**({n})")
    except ParseError as exc:
        assert "cannot be evaluated exactly" in exc.reason
        return
    with localcontext() as ctx:
        ctx.prec = 100
        log2_result = Decimal(n) * (Decimal(p) / Decimal(q)).ln() / Decimal(2).ln()
    if v.clamped:
        assert log2_result * v.clamped > MAGNITUDE_LIMIT, (p, q, n, log2_result)
    else:
        assert v.value == Fraction(p, q) ** n


def _check_power(p: int, q: int, n: int) -> None:
    """parse of (p/q)**n against Fraction's exact power: clamped exactly when the exact value
    lies beyond 2^±MAGNITUDE_LIMIT, equal to it otherwise; or refused as too large to build."""
    from bitprism.numerics.exact import floor_log2

    text = f"({p}/{q})**({n})"
    exact_value = Fraction(p, q) ** n  # fractions.Fraction: exact
    try:
        v = parse(text)
    except ParseError as exc:
        assert "cannot be evaluated exactly" in exc.reason
        return
    e = floor_log2(exact_value)
    if e >= MAGNITUDE_LIMIT:
        assert v.clamped == 1, text
    elif e < -MAGNITUDE_LIMIT:
        assert v.clamped == -1, text
    else:
        assert not v.clamped and v.value == exact_value, text
