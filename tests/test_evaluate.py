"""Per-format arithmetic, checked against hardware-style arithmetic in numpy and ml_dtypes.

Oracles: numpy float16/float32 scalar arithmetic, ml_dtypes bfloat16/float8 arithmetic (both
compute in float32 and round once to the narrow type; float32's 24 bits are >= 2p + 2 for these
formats, so that double rounding is harmless for + - * / and the result is the correctly rounded
one), Python float arithmetic (IEEE 754 binary64), ``fractions.Fraction`` for exact values.
"""

from __future__ import annotations

import math
import time
from fractions import Fraction

import ml_dtypes
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from bitprism.errors import BitprismError, ParseError
from bitprism.formats import get_format
from bitprism.numerics.evaluate import STEP_EVENTS, Evaluation, Step, evaluate
from bitprism.numerics.parse import parse


def bits(x: object, dtype: object) -> int:
    """The bit pattern of a numpy / ml_dtypes scalar (numpy view)."""
    arr = np.array(x, dtype=dtype)
    return int(arr.view(f"uint{arr.dtype.itemsize * 8}"))


def test_float16_absorbs_a_small_addend() -> None:
    ev = evaluate("2048 + 1", "float16")
    expected = np.float16(2048) + np.float16(1)  # numpy float16 arithmetic
    assert ev.code == bits(expected, np.float16)
    assert float(ev.result) == float(expected) == 2048
    assert ev.exact.value == Fraction(2049)  # fractions.Fraction
    assert [s.kind for s in ev.steps] == ["literal", "literal", "+"]
    assert [s.operation for s in ev.steps] == ["2048", "1", "2048 + 1"]
    last = ev.steps[-1]
    assert last.exact.value == 2049 and float(last.rounded) == 2048
    assert last.event == "absorbed" and last.inexact
    assert last.operands[0].value == 2048 and last.operands[1].value == 1


def test_float16_overflows_to_inf() -> None:
    ev = evaluate("1e4 * 10", "float16")
    with np.errstate(over="ignore"):
        expected = np.float16(1e4) * np.float16(10)  # numpy float16 arithmetic
    assert np.isinf(expected)
    assert ev.code == bits(expected, np.float16)
    assert ev.result.is_inf and not ev.result.negative
    assert ev.steps[-1].event == "overflow"
    assert ev.exact.value == 100000


def test_float32_point_one_plus_point_two() -> None:
    ev = evaluate("0.1 + 0.2", "float32")
    expected = np.float32(np.float32(0.1) + np.float32(0.2))  # numpy float32 arithmetic
    assert ev.code == bits(expected, np.float32)
    assert ev.exact.value == Fraction(3, 10)
    assert ev.result.value == Fraction(float(expected))
    assert ev.result.value != Fraction(3, 10)
    # the literals themselves were rounded (numpy float32 of each decimal)
    assert ev.steps[0].code == bits(np.float32(0.1), np.float32) and ev.steps[0].event == "rounded"


def test_float64_matches_python_float() -> None:
    ev = evaluate("0.1 + 0.2", "float64")
    assert float(ev.result) == 0.1 + 0.2  # Python float (IEEE binary64) arithmetic
    assert ev.exact_code is not None and float(ev.result) != 0.3


@pytest.mark.parametrize(
    ("text", "oracle"),
    [
        ("256 + 1", lambda b: b(256) + b(1)),
        ("1/3 * 3", lambda b: b(b(1) / b(3)) * b(3)),
        ("0x1.1ep127 * 10", lambda b: b(float.fromhex("0x1.1ep127")) * b(10)),
        ("0x1.8p-133 / 1024", lambda b: b(float.fromhex("0x1.8p-133")) / b(1024)),
        ("0x1.234p-140", lambda b: b(float.fromhex("0x1.234p-140"))),
        ("-(7/3) - 1/3", lambda b: -(b(b(7) / b(3))) - b(b(1) / b(3))),
    ],
)
def test_bfloat16_matches_ml_dtypes(text: str, oracle) -> None:
    bf16 = ml_dtypes.bfloat16
    with np.errstate(all="ignore"):
        expected = oracle(bf16)  # ml_dtypes bfloat16 arithmetic
    # every literal is exact in float64 (integers, hex floats), so bf16(float) is one rounding
    ev = evaluate(text, "bfloat16")
    assert ev.code == bits(expected, bf16)


def test_rounding_and_overflow_options() -> None:
    f16_max = bits(np.finfo(np.float16).max, np.float16)  # numpy finfo: 65504
    assert evaluate("1e4 * 10", "float16", overflow="saturate").code == f16_max
    rtz = evaluate("1e4 * 10", "float16", rounding="roundTowardZero")
    assert rtz.code == f16_max and rtz.steps[-1].event == "overflow"  # IEEE 754 §7.4
    # 65519 is below the overflow threshold 65520 = 2^15 (2 - 2^-11): rounds to max, no overflow
    below = evaluate("65519", "float16")
    assert below.code == bits(np.float16(65519), np.float16)  # numpy float16
    assert below.steps[-1].event == "rounded"
    # subnormals: 2^-20 is a float16 subnormal (numpy keeps it), flushed to +0 on request
    kept = evaluate("2**-20", "float16")
    assert kept.code == bits(np.float16(2.0**-20), np.float16) != 0
    assert evaluate("2**-20", "float16", subnormals="flush").code == 0
    assert evaluate("2**-30", "float16").steps[-1].event == "underflow"
    with pytest.raises(BitprismError, match="rounding must be one of"):
        evaluate("1", "float16", rounding="sideways")


def test_exact_zero_sum_sign_follows_rounding_direction() -> None:
    # IEEE 754-2008 §6.3: x - x is +0, except -0 under roundTowardNegative
    assert evaluate("1 - 1", "float16").code == 0x0000
    neg = evaluate("1 - 1", "float16", rounding="roundTowardNegative")
    assert neg.code == bits(np.float16(-0.0), np.float16)  # numpy: the -0 pattern


def test_stochastic_rounding_is_reproducible_with_a_seed() -> None:
    third = [evaluate("1/3", "float16", rounding="stochastic", seed=s).code for s in range(40)]
    again = [evaluate("1/3", "float16", rounding="stochastic", seed=s).code for s in range(40)]
    assert third == again
    # numpy: the float16 nearest 1/3 and its neighbour on the other side of 1/3
    near = np.float16(1 / 3)
    side = np.float16(1) if Fraction(float(near)) < Fraction(1, 3) else np.float16(0)
    other = np.nextafter(near, side)
    assert set(third) <= {bits(near, np.float16), bits(other, np.float16)}
    assert len(set(third)) == 2  # both neighbours occur over 40 seeds


def test_power_is_one_rounding_and_its_exponent_is_exact() -> None:
    x = np.float16(1 / 3)  # numpy: 1/3 rounded to float16 (the literal's rounding)
    ev = evaluate("(1/3)**2", "float16")
    assert ev.code == bits(x * x, np.float16)  # numpy float16 product: one rounding of x^2
    assert ev.steps[-1].kind == "**" and ev.steps[-1].operands[1].value == 2
    # the exponent is not rounded to the format: 2**10 in float8_e4m3fn is 1024 -> NaN
    # (ml_dtypes: float8_e4m3fn has no Inf; overflow gives NaN)
    ev8 = evaluate("2**10", "float8_e4m3fn")
    with np.errstate(all="ignore"):
        expected = ml_dtypes.float8_e4m3fn(1024.0)
    assert ev8.code == bits(expected, ml_dtypes.float8_e4m3fn)
    with pytest.raises(ParseError) as info:
        evaluate("2 ** (1/2)", "float16")
    assert info.value.column == 6


def test_special_operations_report_events() -> None:
    ev = evaluate("0/0", "float16")
    assert ev.result.is_nan and ev.steps[-1].event == "invalid"
    assert np.isnan(np.array(ev.code, dtype=np.uint16).view(np.float16))  # numpy view
    ev = evaluate("-1/0", "float16")
    assert ev.code == bits(np.float16(-np.inf), np.float16)
    assert ev.steps[-1].event == "divide by zero"
    ev = evaluate("-2", "float8_e8m0fnu")  # unsigned format: a negative has no code
    assert ev.result.is_nan and ev.steps[-1].event == "invalid"
    assert all(s.event in STEP_EVENTS for s in ev.steps)


def test_exact_value_may_be_unavailable() -> None:
    ev = evaluate("1e999999 - 1e999999", "float16")
    assert ev.result.is_nan  # inf - inf in the format (IEEE 754 §7.2)
    assert ev.exact is None and ev.exact_code is None
    assert ev.exact_error is not None and "cannot be evaluated exactly" in ev.exact_error
    assert [s.event for s in ev.steps] == ["overflow", "overflow", "invalid"]


def test_exact_and_single_rounding_are_reported() -> None:
    ev = evaluate("1/3 * 3", "float16")
    assert ev.exact.value == 1
    assert ev.exact_code == bits(np.float16(1), np.float16)
    # step-by-step: numpy float16 (1/3) * 3
    assert ev.code == bits(np.float16(1) / np.float16(3) * np.float16(3), np.float16)


def test_result_types_are_frozen_and_printable() -> None:
    ev = evaluate("2048 + 1", "fp16")
    assert isinstance(ev, Evaluation) and isinstance(ev.steps[0], Step)
    assert ev.format is get_format("float16")
    with pytest.raises(AttributeError):
        ev.code = 0  # type: ignore[misc]
    with pytest.raises(AttributeError):
        ev.steps[0].code = 0  # type: ignore[misc]
    text = str(ev)
    assert "2048 + 1" in text and "float16" in text and "0x6800" in text and "absorbed" in text
    assert text.count("\n") >= 5
    huge = str(evaluate("2**100000", "float32"))  # exact value too long to print in full
    assert "e+30102" in huge  # log10(2**100000) = 30102.99... (math.log10)
    assert math.floor(100000 * math.log10(2)) == 30102


def test_syntax_errors_propagate() -> None:
    with pytest.raises(ParseError) as info:
        evaluate("1 + * 2", "float16")
    assert info.value.column == 5


# ----- properties: one operation on two format values ------------------------------------------
OPS = {"+": np.add, "-": np.subtract, "*": np.multiply, "/": np.divide}
NARROW = {
    "float16": np.dtype(np.float16),  # numpy arithmetic
    "bfloat16": np.dtype(ml_dtypes.bfloat16),  # ml_dtypes arithmetic
    "float8_e5m2": np.dtype(ml_dtypes.float8_e5m2),
    "float8_e4m3fn": np.dtype(ml_dtypes.float8_e4m3fn),
}


@pytest.mark.parametrize("name", list(NARROW))
@given(data=st.data())
def test_one_operation_matches_library_arithmetic(name: str, data: st.DataObject) -> None:
    dtype = NARROW[name]
    width = dtype.itemsize * 8
    codes = st.integers(0, (1 << width) - 1)
    a_code, b_code = data.draw(codes), data.draw(codes)
    op = data.draw(st.sampled_from(sorted(OPS)))
    a = np.array(a_code, dtype=f"uint{width}").view(dtype)[()]
    b = np.array(b_code, dtype=f"uint{width}").view(dtype)[()]
    if np.isnan(a) or np.isnan(b):
        return  # NaN literals are covered elsewhere; payload propagation is not specified
    with np.errstate(all="ignore"):
        expected = OPS[op](a, b)  # library arithmetic (numpy / ml_dtypes)
    text = f"({float(a).hex()}) {op} ({float(b).hex()})"  # float.hex: exact literals
    ev = evaluate(text, name)
    if np.isnan(expected):
        assert ev.result.is_nan
    else:
        assert ev.code == bits(expected, dtype), text


@given(st.floats(allow_nan=False), st.floats(allow_nan=False), st.sampled_from("+-*/"))
def test_float64_operation_matches_python_float(a: float, b: float, op: str) -> None:
    if op == "/" and b == 0:
        return  # Python raises ZeroDivisionError instead of IEEE Inf
    expected = {"+": a + b, "-": a - b, "*": a * b, "/": a / b if b else 0.0}[op]  # Python float
    ev = evaluate(f"({a.hex() if math.isfinite(a) else repr(a)}) {op} "
                  f"({b.hex() if math.isfinite(b) else repr(b)})", "float64")
    if math.isnan(expected):
        assert ev.result.is_nan
    else:
        assert float(ev.result) == expected
        assert ev.result.negative == (math.copysign(1.0, expected) < 0)


# ----- hostile input: a result or a BitprismError, never another exception, in bounded time -----
_HOSTILE_FORMATS = ["float16", "float8_e4m3fn", "float64", "float8_e8m0fnu", "float4_e2m1fn"]


def _hostile(text: str, fmt: str) -> None:
    """Every reader of typed text on ``text``; only BitprismError may escape."""
    import bitprism  # noqa: F401  (installs the text and HTML views)
    from bitprism.numerics.compare import compare

    for step in (
        lambda: parse(text),
        lambda: str(parse(text)),
        lambda: evaluate(text, fmt).to_text(),
        lambda: evaluate(text, fmt).to_html(),
        lambda: compare(text).to_text(),
        lambda: compare(text, [fmt, "float32"]).to_html(),
        lambda: compare(text, [fmt], rounding="roundTowardNegative", via="bfloat16").to_text(),
    ):
        try:
            step()
        except BitprismError:
            pass


_NUMBER = st.one_of(
    st.integers(0, 10**30).map(str),
    st.builds(lambda m, e: f"{m}e{e}", st.integers(0, 999), st.integers(-10**7, 10**7)),
    st.builds(lambda m, e: f"0x1.{m:x}p{e}", st.integers(0, 4095), st.integers(-10**6, 10**6)),
    st.builds(lambda a, b: f"{a}.{b}", st.integers(0, 10**6), st.integers(0, 10**6)),
    st.sampled_from(["inf", "nan", "Infinity", "-0", "0", "1", "2", "0.1", "1e-999999",
                     "1e999999", "0b101", "0o17", "nan0", "e5", "1__0", "0x", "1e"]),
)
_OPERATOR = st.sampled_from(["+", "-", "*", "/", "**", "\u2212", "\u00d7", "\u00f7", "^", ","])


def _grammar_text() -> st.SearchStrategy[str]:
    def grow(children: st.SearchStrategy[str]) -> st.SearchStrategy[str]:
        return st.one_of(
            st.builds(lambda a, op, b: f"{a}{op}{b}", children, _OPERATOR, children),
            st.builds(lambda a: f"({a})", children),
            st.builds(lambda s, a: f"{s}{a}", st.sampled_from(["-", "+", "\u2212", "--"]), children),
            st.builds(lambda a, k: "(" * k + a + ")" * k, children, st.integers(0, 80)),
            st.builds(lambda a, b: f"({a})**({b})", children, children),
        )

    return st.recursive(_NUMBER, grow, max_leaves=16)


@settings(max_examples=150, deadline=2000)  # a per-example bound of 2 s (hypothesis deadline)
@given(text=_grammar_text(), fmt=st.sampled_from(_HOSTILE_FORMATS))
def test_hostile_expressions_give_a_value_or_a_bitprism_error(text: str, fmt: str) -> None:
    _hostile(text, fmt)


@settings(max_examples=150, deadline=2000)
@given(text=st.text(max_size=120), fmt=st.sampled_from(_HOSTILE_FORMATS))
def test_hostile_text_gives_a_value_or_a_bitprism_error(text: str, fmt: str) -> None:
    _hostile(text, fmt)


@pytest.mark.parametrize(
    "text",
    [
        "1+1e-999999",  # the sticky stand-in 2^-131073: a 131,074-digit exact decimal
        "(1+1e-999999)**2",
        "1e5000",
        "1/3**10000",
        "-1e-400 * 3",
        "(1+2**-70)**(2**62)",
        "9**9**9",
        "1e999999999 - 1e999999999",
        "(" * 64 + "1" + ")" * 64,
        "2**(2**20000)",
        "0x1p131071 * 2 - 0x1p131072",
    ],
)
def test_known_hostile_inputs(text: str) -> None:
    start = time.perf_counter()
    _hostile(text, "float16")
    print(f"{text[:30]}: {(time.perf_counter() - start) * 1e3:.1f} ms")  # informative only
