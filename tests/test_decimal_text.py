"""Decimal text of big exact values without Python's int-to-str limit (numerics.digits and the
long-value paths of numerics.decimal_text).

References: ``str(int)`` and ``len(str(n))`` with the limit lifted (``sys.set_int_max_str_digits(0)``,
sys docs), ``decimal.Decimal`` formatting, and Python's float ``%g`` formatting.
"""

from __future__ import annotations

import random
import sys
from contextlib import contextmanager
from decimal import Decimal, localcontext
from fractions import Fraction
from typing import Iterator

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from bitprism.numerics.decimal_text import (
    DEFAULT_MAX_DIGITS,
    abbreviate_decimal,
    decimal_digit_count,
    exact_decimal,
    exact_text,
    scientific,
)
from bitprism.numerics.digits import (
    FULL_DIGITS,
    count_digits,
    fraction_text,
    int_text,
    leading_digits,
    valuation,
)
from bitprism.numerics.exact import ExactValue
from bitprism.numerics.parse import parse


@contextmanager
def no_str_limit() -> Iterator[None]:
    """Python's int-to-str limit lifted, for reference values only (sys docs: 0 = no limit)."""
    previous = sys.get_int_max_str_digits()
    sys.set_int_max_str_digits(0)
    try:
        yield
    finally:
        sys.set_int_max_str_digits(previous)


# ----- integers -----------------------------------------------------------------------------------
def test_count_and_leading_digits_at_powers_of_ten() -> None:
    with no_str_limit():
        for k in list(range(0, 60)) + [307, 308, 4299, 4300, 4301, 39457, 80000]:
            for n in (10**k - 1, 10**k, 10**k + 1, 2 * 10**k):
                if n <= 0:
                    continue
                text = str(n)  # reference: Python's own conversion
                assert count_digits(n) == len(text), k
                assert count_digits(-n) == len(text)
                assert leading_digits(n, 20) == text[:20]


@settings(max_examples=300, deadline=None)
@given(st.integers(1, 2**20000))
def test_count_digits_matches_str(n: int) -> None:
    with no_str_limit():
        text = str(n)
    assert count_digits(n) == len(text) and leading_digits(n, 7) == text[:7]


@pytest.mark.parametrize("p", [2, 5, 10, 3])
def test_valuation_matches_repeated_division(p: int) -> None:
    rng = random.Random(p)
    for _ in range(200):
        v = rng.randrange(0, 300)
        rest = rng.randrange(1, 10**12)
        while rest % p == 0:
            rest //= p
        assert valuation(rest * p**v, p) == (v, rest)
    assert valuation(5**100000 * 7, 5) == (100000, 7)  # O(log v) divisions, not 100000


def test_int_text() -> None:
    assert int_text(12345) == "12345" and int_text(-7) == "-7"
    with no_str_limit():
        n = 3**10000  # 4772 digits (len(str(n)))
        digits = str(n)
    assert int_text(n) == f"{digits[0]}.{digits[1:20]}…e+{len(digits) - 1} ({len(digits)} digits)"
    assert int_text(-n).startswith("-" + digits[0])
    assert int_text(2**131073) == "2**131073"
    assert int_text(10**(FULL_DIGITS - 1)) == "1" + "0" * (FULL_DIGITS - 1)  # at the cap: in full
    assert fraction_text(Fraction(1, 3**10000)).startswith("1/1.6313501853")
    assert fraction_text(Fraction(-3, 4)) == str(Fraction(-3, 4))


# ----- long exact decimals ----------------------------------------------------------------------
@pytest.mark.parametrize(
    "value",
    [
        1 + Fraction(1, 2**131073),  # the sticky stand-in of 1 + 1e-999999
        Fraction(10**5000 + 1),
        Fraction(-(3**9000), 2**20000),
        Fraction(1, 2**14000),
        Fraction(7, 5**20000),
        Fraction(10**4500) * 123 + 1,
    ],
    ids=["sticky", "1e5000+1", "3^9000/2^20000", "2^-14000", "7/5^20000", "123e4500+1"],
)
def test_long_expansions_equal_the_full_text_abbreviated(value: Fraction) -> None:
    d = value.denominator
    a = (d & -d).bit_length() - 1  # trailing zero bits: the power of 2 in d
    b = 0
    for step in (5**64, 5):  # the power of 5, in big steps then single ones
        while d % step == 0:
            d //= step
            b += 64 if step > 5 else 1
    assert d == 1 << a  # a terminating expansion: d = 2^a 5^b
    with no_str_limit():  # the reference: every digit, written by Python
        digits = str((abs(value) * 10 ** max(a, b)).numerator)
    digits = digits.rstrip("0")  # an integer's trailing zeros are not significant
    count = len(digits)
    assert count > FULL_DIGITS
    assert decimal_digit_count(value) == count
    for n in (DEFAULT_MAX_DIGITS, 24, 5):
        got = exact_decimal(value, max_digits=n)
        assert f"({count} digits)" in got
        mantissa = got.split("…")[0].lstrip("-").replace(".", "")
        assert mantissa == digits[:n]  # truncated, as abbreviate_decimal cuts
        assert got.startswith("-") == (value < 0)
    assert exact_decimal(value) == exact_decimal(value, max_digits=DEFAULT_MAX_DIGITS)


def test_short_expansions_are_unchanged() -> None:
    full = exact_decimal(Fraction(1, 2**149))  # 105 digits: written in full as before
    with localcontext() as ctx:
        ctx.prec = 200
        assert Decimal(full) == Decimal(1) / Decimal(2**149)
    assert abbreviate_decimal(full, 12) == exact_decimal(Fraction(1, 2**149), max_digits=12)
    assert exact_decimal(10**400) == "1e+400" and exact_decimal(-(10**5000)) == "-1e+5000"
    assert exact_decimal(Fraction(123) * 10**4500) == "1.23e+4502"
    assert decimal_digit_count(Fraction(1, 3)) is None and decimal_digit_count(0) == 0
    assert decimal_digit_count(Fraction(65504)) == 5 and decimal_digit_count(Fraction(1, 8)) == 3


def test_exact_text_of_long_values() -> None:
    assert parse(exact_text(parse("1e5000"))) == parse("1e5000")  # "1e+5000" reads back
    text = exact_text(ExactValue.finite(Fraction(1, 3**10000)))  # too long to read back
    assert "(4772 digits)" in text and len(text) < 100
    assert exact_text(parse("1+1e-999999")).startswith("1.000") is False  # no false decimal
    assert "digits)" in exact_text(parse("1+1e-999999"))


# ----- scientific: %g of an exact value at any magnitude ------------------------------------------
@settings(max_examples=500, deadline=None)
@given(
    st.floats(allow_nan=False, allow_infinity=False).filter(lambda x: x != 0),
    st.integers(1, 17),
)
def test_scientific_is_python_g_formatting(x: float, digits: int) -> None:
    want = f"{x:+.{digits - 1}e}"  # Python's correctly rounded float formatting
    mantissa, exponent = want.split("e")
    if "." in mantissa:
        mantissa = mantissa.rstrip("0").rstrip(".")
    exp = int(exponent)
    want = f"{mantissa}e{'-' if exp < 0 else '+'}{abs(exp):02d}"
    assert scientific(Fraction(x), digits, signed=True) == want


@pytest.mark.parametrize("exp10", [400, -400, 5000, -39457])
def test_scientific_beyond_float64(exp10: int) -> None:
    q = Fraction(987654321, 10**8) * Fraction(10) ** exp10
    with localcontext() as ctx:
        ctx.prec = 40
        want = format(Decimal(987654321) / Decimal(10**8) * Decimal(10) ** exp10, ".3e")
    assert scientific(q, 4) == want  # decimal.Decimal formatting (4 significant digits)
    assert scientific(-q, 1) == f"-1e{'+' if exp10 >= 0 else '-'}{abs(exp10 + 1):02d}"


# ----- values beyond Python's int-to-str limit --------------------------------------------------
def test_huge_exact_values_print_shortened_with_their_digit_count() -> None:
    assert sys.get_int_max_str_digits() == 4300  # Python's default limit (sys docs)
    v = parse("1e5000")
    assert not v.clamped and v.value == 10**5000
    text = str(v)
    assert "(5001 digits)" in text and text.startswith("1.000") and len(text) < 100
    small = str(parse("1/3**10000"))
    assert small.startswith("1/1.6313501853426258743") and "(4772 digits)" in small
    assert str(parse("2**100000")) == "2**100000"  # a power of two says so
    assert str(parse("-1e5000")).startswith("-1.000")
    assert str(parse("2**-1074")) == f"1/{2**1074}"  # short values unchanged (Fraction's str)
    previous = sys.get_int_max_str_digits()
    try:
        sys.set_int_max_str_digits(640)  # a program may lower the limit (sys docs: minimum 640)
        assert "(701 digits)" in str(parse("1e700"))
    finally:
        sys.set_int_max_str_digits(previous)
