"""Exact reading of what a person types: numbers, expressions and bit patterns.

``parse`` turns text such as ``0.1``, ``-0x1.8p-3``, ``2**-24`` or ``-(3 + 1/8)`` into an
``ExactValue`` without ever going through a binary float, so a later cast rounds exactly once.
``parse_bits`` reads a bit pattern (``0x3c00``, ``0b0_01111_0000000000``) for one format.

Why a parser of our own: the text comes from a notebook user, so it is read by a whitelist
tokenizer and a small recursive-descent parser into frozen AST nodes, then reduced with
``Fraction`` arithmetic. Nothing is handed to ``eval``/``exec``/``ast.literal_eval``. Input
length, nesting depth, operation count, literal size and the size of every exact intermediate
are capped, so any input returns (a value or a ``ParseError`` with a column) in milliseconds.

Reading rules (the grammar mirrors Python's precedence):

- decimals and scientific notation (``.5``, ``5.``, ``1_000``, ``1E+5``); C99 hex floats
  (``0x1.8p-3``; a hex fraction needs the ``p`` exponent); ``0x``/``0o``/``0b`` literals
  *without* ``p`` are INTEGERS like in Python: ``0x3c00`` is 15360, not a float16 pattern;
  bit patterns go through ``parse_bits``;
- names ``inf``, ``infinity``, ``nan`` (any case); ``+ - * / **``, unary ``+``/``-`` and
  parentheses; ``**`` is right-associative and binds tighter than unary minus (``-2**2 == -4``)
  and its exponent must be an integer (exact arithmetic only); U+2212, U+00D7 and U+00F7 are
  read as ``-``, ``*`` and ``/``;
- IEEE 754 semantics for signed zeros, Inf and NaN: ``x/0`` is ±Inf, ``0/0``, ``inf - inf``,
  ``0 * inf`` are NaN (a positive NaN: IEEE 754 leaves the sign of a new NaN unspecified),
  ``-0 + 0`` is +0 (-0 under roundTowardNegative), ``-0 * 5`` is -0; ``x ** 0`` is 1 for every x
  and ``0 ** -n`` is Inf (IEEE 754-2008 §9.2.1 ``pown``); a NaN operand passes through.

Magnitudes beyond 2^±MAGNITUDE_LIMIT are never built: a literal or ``**`` whose binary
magnitude is estimated (from digit count and exponent, or ``log2|base| * n``) past the limit
becomes a *clamped* ``ExactValue``; such values round the same way in every format. Arithmetic
on clamped values keeps an estimate of log2|x| and follows these rules:

- huge (beyond 2^L) ± anything smaller stays huge with its sign; tiny (below 2^-L) added to a
  nonzero in-range value acts as a sticky bit: it is replaced by ±2^-(L+1), which rounds like
  the true sum in every format and direction (the sum itself is in range, so not flagged);
- ``*``, ``/`` and ``**`` move the estimate; while it stays beyond the limit the result stays
  clamped in that direction; when it would land back inside the range (``1e999999 / 1e999990``,
  huge - huge of equal size, huge * tiny) the exact value is unknown and a ``ParseError``
  "cannot be evaluated exactly" names the operator's column.
"""

from __future__ import annotations

import difflib
import math
from dataclasses import dataclass, replace
from fractions import Fraction
from functools import lru_cache
from typing import Union

from ..errors import ParseError, UnsupportedInputError
from ..formats import FormatLike, get_format
from .exact import MAGNITUDE_LIMIT, ExactValue

__all__ = [
    "MAX_DEPTH",
    "MAX_LENGTH",
    "MAX_LITERAL_DIGITS",
    "MAX_OPERATIONS",
    "Binary",
    "Node",
    "Number",
    "Unary",
    "apply_operation",
    "parse",
    "parse_bits",
    "parse_tree",
    "reduce_exact",
]

# ----- caps (checked before any work that could grow with them) -------------------------------
MAX_LENGTH = 1000  # characters of input
MAX_DEPTH = 64  # nested parentheses, unary signs and '**' exponents
MAX_OPERATIONS = 256  # operators in one expression (keeps the tree shallow for recursion)
MAX_LITERAL_DIGITS = 800  # digits in one literal: enough for float64's exact decimal expansions
# Bits in the numerator or denominator of one exact intermediate: two limit-sized factors plus
# slack. Beyond it a single Fraction operation (gcd included) stops being instant.
_SIZE_LIMIT = 2 * MAGNITUDE_LIMIT + 4096
# Total bits of exact intermediates in one expression; bounds the time of adversarial inputs to
# a few limit-sized operations.
_WORK_LIMIT = 8 * _SIZE_LIMIT
# log2 estimates of clamped values are kept within ±2^60 so float arithmetic on them stays finite.
_ESTIMATE_CAP = float(1 << 60)
_LOG2_10 = math.log2(10)

_NAMES = {"inf": "inf", "infinity": "inf", "nan": "nan"}
_OPERATORS = {"+": "+", "-": "-", "*": "*", "/": "/", "(": "(", ")": ")"}
_OPERATORS.update({"\u2212": "-", "\u00d7": "*", "\u00f7": "/"})  # minus sign, times, divide
_RADIX_DIGITS = {"x": "0123456789abcdefABCDEF", "o": "01234567", "b": "01"}
_DEC = "0123456789"


# ----- AST --------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Number:
    """A literal or a name (inf, nan); ``start``/``end`` index the text, parentheses included."""

    value: ExactValue
    literal: str
    start: int
    end: int
    log2_estimate: float = 0.0  # estimated log2|value| when ``value.clamped``; else unused

    @property
    def column(self) -> int:
        return self.start + 1


@dataclass(frozen=True)
class Unary:
    """``-x`` or ``+x``; ``column`` is the sign's column."""

    op: str
    operand: "Node"
    column: int
    start: int
    end: int


@dataclass(frozen=True)
class Binary:
    """``left op right``; ``column`` is the operator's column (where arithmetic errors point)."""

    op: str
    left: "Node"
    right: "Node"
    column: int
    start: int
    end: int


Node = Union[Number, Unary, Binary]


# ----- exact values with a magnitude estimate -------------------------------------------------
@dataclass(frozen=True)
class _Num:
    value: ExactValue
    log2: float = 0.0  # estimated log2|value| for clamped values


class _OpError(Exception):
    """An arithmetic failure; the caller attaches the text and column."""

    def __init__(self, message: str, at_exponent: bool = False) -> None:
        super().__init__(message)
        self.message = message
        self.at_exponent = at_exponent


class _Budget:
    """Running total of exact-intermediate bits for one expression."""

    def __init__(self) -> None:
        self.work = 0

    def charge(self, numerator_bits: float, denominator_bits: float) -> None:
        largest = max(numerator_bits, denominator_bits)
        if largest > _SIZE_LIMIT:
            raise _OpError(
                f"cannot be evaluated exactly: the exact result needs about {int(largest)} bits; "
                f"the limit is {_SIZE_LIMIT}"
            )
        self.work += int(numerator_bits + denominator_bits)
        if self.work > _WORK_LIMIT:
            raise _OpError(
                "cannot be evaluated exactly: the expression needs more than "
                f"{_WORK_LIMIT} bits of exact intermediate results"
            )


@lru_cache(maxsize=2)
def _stand_in(direction: int) -> Fraction:
    """2^(±MAGNITUDE_LIMIT), the magnitude a clamped ExactValue carries (built on first use)."""
    return Fraction(2) ** (direction * MAGNITUDE_LIMIT)


@lru_cache(maxsize=1)
def _sticky() -> Fraction:
    """2^-(L+1): stands for a clamped tiny addend; below the limit, so cancellations re-clamp."""
    return Fraction(1, 1 << (MAGNITUDE_LIMIT + 1))


def _log2(q: Fraction) -> float:
    """log2(q) for q > 0 (math.log2 accepts ints of any size)."""
    return math.log2(q.numerator) - math.log2(q.denominator)


def _estimate(x: _Num) -> float:
    """log2|x| for finite nonzero x: the carried estimate if clamped, else computed."""
    return x.log2 if x.value.clamped else _log2(x.value.magnitude)


def _clamped(negative: bool, estimate: float) -> _Num:
    direction = 1 if estimate > 0 else -1
    est = max(-_ESTIMATE_CAP, min(_ESTIMATE_CAP, estimate))
    value = ExactValue("finite", negative, _stand_in(direction), clamped=direction)
    return _Num(value, est)


def _from_estimate(negative: bool, estimate: float) -> _Num:
    """A clamped result known only by its estimate; refused if it lands back inside the range."""
    if estimate > MAGNITUDE_LIMIT + 1 or estimate < -MAGNITUDE_LIMIT - 1:
        return _clamped(negative, estimate)
    raise _OpError(
        f"cannot be evaluated exactly: an operand lies beyond 2**±{MAGNITUDE_LIMIT}, and the "
        f"result (about 2**{estimate:.0f}) would fall back inside the range where exact values "
        "are kept"
    )


def _finite(q: Fraction, negative: bool | None = None) -> _Num:
    value = ExactValue.finite(q, negative)
    return _Num(value, _log2(abs(q)) if value.clamped else 0.0)


def _zero(negative: bool) -> _Num:
    return _Num(ExactValue.finite(0, negative))


def _signed_magnitude(x: _Num) -> Fraction:
    return -x.value.magnitude if x.value.negative else x.value.magnitude


_NAN = _Num(ExactValue.nan())  # the result of an invalid operation (IEEE 754 §7.2)


def _propagate_nan(x: _Num, y: _Num) -> _Num | None:
    if x.value.is_nan:
        return x
    if y.value.is_nan:
        return y
    return None


# ----- the five operations ----------------------------------------------------------------------
def _add(x: _Num, y: _Num, rounding: str, budget: _Budget) -> _Num:
    nan = _propagate_nan(x, y)
    if nan is not None:
        return nan
    a, b = x.value, y.value
    if a.is_inf or b.is_inf:
        if a.is_inf and b.is_inf and a.negative != b.negative:
            return _NAN  # inf - inf
        return x if a.is_inf else y
    if a.is_zero and b.is_zero:
        if a.negative == b.negative:
            return x
        # IEEE 754 §6.3: an exact zero sum of opposite signs is +0, except -0 under
        # roundTowardNegative.
        return _zero(rounding == "roundTowardNegative")
    if a.is_zero:
        return y
    if b.is_zero:
        return x
    if a.clamped == 1 or b.clamped == 1:
        if a.clamped == 1 and b.clamped == 1:
            return _larger_of_clamped(x, y)
        return x if a.clamped == 1 else y  # in-range addends cannot move a huge value back
    if a.clamped == -1 and b.clamped == -1:
        return _larger_of_clamped(x, y)
    # At most one tiny operand: it becomes the sticky stand-in ±2^-(L+1).
    qa = (-_sticky() if a.negative else _sticky()) if a.clamped else _signed_magnitude(x)
    qb = (-_sticky() if b.negative else _sticky()) if b.clamped else _signed_magnitude(y)
    na, da = qa.numerator.bit_length(), qa.denominator.bit_length()
    nb, db = qb.numerator.bit_length(), qb.denominator.bit_length()
    budget.charge(max(na + db, nb + da) + 1, da + db)
    total = qa + qb
    if total == 0:
        return _zero(rounding == "roundTowardNegative")
    return _finite(total)


def _larger_of_clamped(x: _Num, y: _Num) -> _Num:
    """Sum of two clamped values of the same side (both huge or both tiny)."""
    if x.value.negative == y.value.negative:
        return x if x.log2 >= y.log2 else y
    if abs(x.log2 - y.log2) > 1:
        return x if x.log2 > y.log2 else y
    raise _OpError(
        f"cannot be evaluated exactly: both operands lie beyond 2**±{MAGNITUDE_LIMIT} with "
        "opposite signs and similar size, so their difference is unknown"
    )


def _multiply(x: _Num, y: _Num, budget: _Budget) -> _Num:
    nan = _propagate_nan(x, y)
    if nan is not None:
        return nan
    a, b = x.value, y.value
    negative = a.negative != b.negative
    if a.is_inf or b.is_inf:
        if a.is_zero or b.is_zero:
            return _NAN  # 0 * inf
        return _Num(ExactValue.inf(negative))
    if a.is_zero or b.is_zero:
        return _zero(negative)
    if a.clamped or b.clamped:
        return _from_estimate(negative, _estimate(x) + _estimate(y))
    qa, qb = a.magnitude, b.magnitude
    budget.charge(
        qa.numerator.bit_length() + qb.numerator.bit_length(),
        qa.denominator.bit_length() + qb.denominator.bit_length(),
    )
    return _finite(qa * qb, negative)


def _divide(x: _Num, y: _Num, budget: _Budget) -> _Num:
    nan = _propagate_nan(x, y)
    if nan is not None:
        return nan
    a, b = x.value, y.value
    negative = a.negative != b.negative
    if a.is_inf:
        return _NAN if b.is_inf else _Num(ExactValue.inf(negative))
    if b.is_inf:
        return _zero(negative)
    if b.is_zero:
        return _NAN if a.is_zero else _Num(ExactValue.inf(negative))  # division by zero
    if a.is_zero:
        return _zero(negative)
    if a.clamped or b.clamped:
        return _from_estimate(negative, _estimate(x) - _estimate(y))
    qa, qb = a.magnitude, b.magnitude
    budget.charge(
        qa.numerator.bit_length() + qb.denominator.bit_length(),
        qa.denominator.bit_length() + qb.numerator.bit_length(),
    )
    return _finite(qa / qb, negative)


def _power(x: _Num, k: _Num, budget: _Budget) -> _Num:
    """x ** n for an integer n, as IEEE 754-2008 §9.2.1 pown (x ** 0 is 1, even for NaN)."""
    e = k.value
    if not e.is_finite:
        raise _OpError(f"the exponent of '**' must be an integer; got {e}", at_exponent=True)
    if e.clamped:
        raise _OpError(
            f"cannot be evaluated exactly: the exponent lies beyond 2**±{MAGNITUDE_LIMIT}",
            at_exponent=True,
        )
    if e.magnitude.denominator != 1:
        raise _OpError(
            f"the exponent of '**' must be an integer (exact arithmetic only); got {e}",
            at_exponent=True,
        )
    n = int(e.value)
    if n == 0:
        return _Num(ExactValue.finite(1))
    a = x.value
    if a.is_nan:
        return x
    negative = a.negative and n % 2 == 1
    if a.is_inf:
        return _Num(ExactValue.inf(negative)) if n > 0 else _zero(negative)
    if a.is_zero:
        return _zero(negative) if n > 0 else _Num(ExactValue.inf(negative))  # 0 ** -n: x/0
    if a.magnitude == 1 and not a.clamped:
        return _Num(ExactValue.finite(1, negative))
    step = _estimate(x)
    if n.bit_length() > 62:  # |n| >= 2^62: any base other than ±1 is far beyond the limit
        estimate = math.copysign(_ESTIMATE_CAP, step) * (1 if n > 0 else -1)
    else:
        estimate = step * n
    if a.clamped or abs(estimate) > MAGNITUDE_LIMIT + 1:
        return _from_estimate(negative, estimate)
    q = a.magnitude
    budget.charge(abs(n) * math.log2(q.numerator), abs(n) * math.log2(q.denominator))
    return _finite(q**n, negative)


def _apply(op: str, x: _Num, y: _Num | None, rounding: str, budget: _Budget) -> _Num:
    if y is None:
        if op == "-":
            return _Num(-x.value, x.log2)
        return x
    if op == "+":
        return _add(x, y, rounding, budget)
    if op == "-":
        return _add(x, _Num(-y.value, y.log2), rounding, budget)
    if op == "*":
        return _multiply(x, y, budget)
    if op == "/":
        return _divide(x, y, budget)
    if op == "**":
        return _power(x, y, budget)
    raise ValueError(f"unknown operator {op!r}")  # internal: the parser only builds the above


def apply_operation(
    op: str,
    left: ExactValue,
    right: ExactValue | None = None,
    *,
    rounding: str = "roundTiesToEven",
    text: str = "",
    column: int = 1,
    exponent_column: int | None = None,
) -> ExactValue:
    """One exact operation with IEEE 754 special-value rules (what per-format arithmetic rounds).

    ``op`` is '+', '-', '*', '/' or '**' (``right`` given), or unary '-'/'+' (``right`` None).
    ``rounding`` only decides the sign of an exact zero sum (IEEE 754 §6.3). Clamped operands
    are taken at the limit itself; failures raise ParseError at ``column`` of ``text`` (at
    ``exponent_column``, when given, for a bad exponent of '**').
    """
    if op not in ("+", "-", "*", "/", "**") or (op == "**" and right is None):
        raise ParseError(f"unknown operator {op!r}; expected + - * / or **", text, column)

    def wrap(v: ExactValue) -> _Num:
        return _Num(v, float(v.clamped * MAGNITUDE_LIMIT))

    try:
        result = _apply(op, wrap(left), None if right is None else wrap(right), rounding, _Budget())
    except _OpError as exc:
        at = exponent_column if exc.at_exponent and exponent_column is not None else column
        raise ParseError(exc.message, text, at) from None
    return result.value


# ----- tokenizer --------------------------------------------------------------------------------
@dataclass(frozen=True)
class _Token:
    kind: str  # 'num', 'op', 'end'
    text: str
    start: int
    end: int
    number: Number | None = None


def _describe(token: _Token) -> str:
    if token.kind == "end":
        return "the end of input"
    shown = token.text if len(token.text) <= 24 else token.text[:21] + "..."
    return f"'{shown}'"


def _check_text(text: object, what: str) -> str:
    if not isinstance(text, str):
        shown = repr(text)
        shown = shown if len(shown) <= 60 else shown[:57] + "..."
        raise UnsupportedInputError(
            f"{what} needs a str (the text a person typed), got {type(text).__name__} {shown}"
        )
    if len(text) > MAX_LENGTH:
        raise ParseError(
            f"input is {len(text)} characters long; the limit is {MAX_LENGTH}",
            text,
            MAX_LENGTH + 1,
        )
    return text


class _Scanner:
    def __init__(self, text: str) -> None:
        self.text = text

    def error(self, message: str, index: int) -> ParseError:
        return ParseError(message, self.text, index + 1)

    def digits(self, i: int, allowed: str, after_prefix: bool = False) -> tuple[int, str]:
        """Read digits with single '_' separators between them (Python rules).

        Returns (end index, the digits without separators)."""
        text = self.text
        out: list[str] = []
        previous_is_digit = after_prefix
        while i < len(text):
            c = text[i]
            if c in allowed:
                out.append(c)
                previous_is_digit = True
            elif c == "_":
                if not previous_is_digit or i + 1 >= len(text) or text[i + 1] not in allowed:
                    raise self.error("'_' must sit between two digits, as in 1_000", i)
                previous_is_digit = False
            else:
                break
            i += 1
        return i, "".join(out)

    def tokens(self) -> list[_Token]:
        text = self.text
        out: list[_Token] = []
        i = 0
        while i < len(text):
            c = text[i]
            if c.isspace():
                i += 1
            elif c == "*" and text.startswith("**", i):
                out.append(_Token("op", "**", i, i + 2))
                i += 2
            elif c in _OPERATORS:
                out.append(_Token("op", _OPERATORS[c], i, i + 1))
                i += 1
            elif c in _DEC or (c == "." and i + 1 < len(text) and text[i + 1] in _DEC):
                number = self.number(i)
                out.append(_Token("num", number.literal, number.start, number.end, number))
                i = number.end
            elif c.isascii() and (c.isalpha() or c == "_"):
                j = i
                while j < len(text) and text[j].isascii() and (text[j].isalnum() or text[j] == "_"):
                    j += 1
                number = self.name(i, j)
                out.append(_Token("num", number.literal, i, j, number))
                i = j
            else:
                hint = ""
                if c == "^":
                    hint = "; write '**' for powers, as in 2**-24"
                elif c == ",":
                    hint = "; group digits with '_' (1_000) and write decimals with '.'"
                raise self.error(f"unexpected character {c!r}{hint}", i)
        out.append(_Token("end", "", len(text), len(text)))
        return out

    def name(self, i: int, j: int) -> Number:
        word = self.text[i:j]
        kind = _NAMES.get(word.lower())
        if kind == "inf":
            return Number(ExactValue.inf(), word, i, j)
        if kind == "nan":
            return Number(ExactValue.nan(), word, i, j)
        close = difflib.get_close_matches(word.lower(), list(_NAMES), n=2, cutoff=0.6)
        if close:
            hint = "; did you mean " + " or ".join(f"'{c}'" for c in close) + "?"
        else:
            hint = "; the known names are inf, infinity and nan"
        raise self.error(f"unknown name {word!r}{hint}", i)

    def number(self, start: int) -> Number:
        text = self.text
        radix = text[start + 1 : start + 2].lower() if text[start] == "0" else ""
        if radix in _RADIX_DIGITS:
            end, value, log2 = self.radix_number(start, radix)
        else:
            end, value, log2 = self.decimal_number(start)
        if end < len(text) and (text[end].isalnum() or text[end] in "_."):
            shown = text[start:end]
            hint = " (hex numbers start with 0x)" if text[end] in "abcdefABCDEF" else ""
            raise self.error(f"unexpected {text[end]!r} after the number {shown!r}{hint}", end)
        return Number(value, text[start:end], start, end, log2)

    def check_digits(self, start: int, count: int) -> None:
        if count > MAX_LITERAL_DIGITS:
            raise self.error(
                f"the number has {count} digits; the limit is {MAX_LITERAL_DIGITS}", start
            )

    def exponent(self, i: int, letter: str) -> tuple[int, int, str]:
        """Read [+-]digits after an exponent letter at i-1; return (end, value, digits)."""
        text = self.text
        sign = 1
        if i < len(text) and text[i] in "+-":
            sign = -1 if text[i] == "-" else 1
            i += 1
        end, digits = self.digits(i, _DEC)
        if not digits:
            found = repr(text[i]) if i < len(text) else "the end of input"
            raise self.error(
                f"expected digits after {letter!r} in the exponent but found {found}", i
            )
        return end, sign * int(digits), digits

    def decimal_number(self, start: int) -> tuple[int, ExactValue, float]:
        text = self.text
        i, whole = self.digits(start, _DEC)
        fraction = ""
        if i < len(text) and text[i] == ".":
            i, fraction = self.digits(i + 1, _DEC)
        exp10, exp_digits = 0, ""
        if i < len(text) and text[i] in "eE":
            i, exp10, exp_digits = self.exponent(i + 1, text[i])
        self.check_digits(start, len(whole) + len(fraction) + len(exp_digits))
        mantissa = int(whole + fraction or "0")
        if mantissa == 0:
            return i, ExactValue.finite(0), 0.0
        exp10 -= len(fraction)
        # Estimate log2 before building 10**exp10, so 1e999999999 costs nothing.
        if len(exp_digits) > 15:
            estimate = math.copysign(_ESTIMATE_CAP, exp10)
        else:
            estimate = math.log2(mantissa) + exp10 * _LOG2_10
        if abs(estimate) > MAGNITUDE_LIMIT + 2:
            num = _clamped(False, estimate)
            return i, num.value, num.log2
        q = mantissa * Fraction(10) ** exp10
        num = _finite(q)
        return i, num.value, num.log2

    def radix_number(self, start: int, radix: str) -> tuple[int, ExactValue, float]:
        text = self.text
        allowed = _RADIX_DIGITS[radix]
        i, whole = self.digits(start + 2, allowed, after_prefix=True)
        fraction = ""
        has_point = radix == "x" and i < len(text) and text[i] == "."
        if has_point:
            i, fraction = self.digits(i + 1, allowed)
        if not whole and not fraction:
            found = repr(text[i]) if i < len(text) else "the end of input"
            prefix = text[start : start + 2]
            raise self.error(f"expected digits after {prefix!r} but found {found}", i)
        exp2, exp_digits, has_exponent = 0, "", False
        if radix == "x" and i < len(text) and text[i] in "pP":
            has_exponent = True
            i, exp2, exp_digits = self.exponent(i + 1, text[i])
        self.check_digits(start, len(whole) + len(fraction) + len(exp_digits))
        if has_point and not has_exponent:
            raise self.error(
                "a hex fraction needs a binary exponent, as in 0x1.8p0 (C99 hex float)", i
            )
        base = {"x": 16, "o": 8, "b": 2}[radix]
        mantissa = int(whole + fraction, base)
        if mantissa == 0:
            return i, ExactValue.finite(0), 0.0
        exp2 -= 4 * len(fraction)
        # floor(log2) exactly in integers; clamp before building 2**exp2.
        top = mantissa.bit_length() - 1 + exp2
        if top > MAGNITUDE_LIMIT + 1 or top < -MAGNITUDE_LIMIT - 1:
            estimate = float(max(-_ESTIMATE_CAP, min(_ESTIMATE_CAP, top)))
            num = _clamped(False, estimate)
            return i, num.value, num.log2
        num = _finite(mantissa * Fraction(2) ** exp2)
        return i, num.value, num.log2


# ----- parser -----------------------------------------------------------------------------------
class _Parser:
    """Recursive descent over: expr := term (('+'|'-') term)*; term := unary (('*'|'/') unary)*;
    unary := ('+'|'-') unary | power; power := primary ('**' unary)?;
    primary := number | name | '(' expr ')'."""

    def __init__(self, text: str, tokens: list[_Token]) -> None:
        self.text = text
        self.tokens = tokens
        self.pos = 0
        self.depth = 0
        self.operations = 0

    def peek(self) -> _Token:
        return self.tokens[self.pos]

    def advance(self) -> _Token:
        token = self.tokens[self.pos]
        self.pos += 1
        return token

    def error(self, message: str, token: _Token) -> ParseError:
        return ParseError(message, self.text, token.start + 1)

    def count_operation(self, token: _Token) -> None:
        self.operations += 1
        if self.operations > MAX_OPERATIONS:
            raise self.error(
                f"the expression has more than {MAX_OPERATIONS} operations; "
                f"the limit is {MAX_OPERATIONS}",
                token,
            )

    def enter(self, token: _Token) -> None:
        self.depth += 1
        if self.depth > MAX_DEPTH:
            raise self.error(
                f"the expression nests more than {MAX_DEPTH} levels deep "
                f"(parentheses, signs and '**'); the limit is {MAX_DEPTH}",
                token,
            )

    def parse(self) -> Node:
        if self.peek().kind == "end":
            raise ParseError(
                "empty input: expected a number, a name (inf, nan) or an expression", self.text, 1
            )
        node = self.expression()
        token = self.peek()
        if token.kind != "end":
            if token.text == ")":
                raise self.error("unmatched ')'", token)
            raise self.error(
                f"expected an operator or the end of input but found {_describe(token)}", token
            )
        return node

    def expression(self) -> Node:
        node = self.term()
        while self.peek().kind == "op" and self.peek().text in ("+", "-"):
            op = self.advance()
            self.count_operation(op)
            right = self.term()
            node = Binary(op.text, node, right, op.start + 1, node.start, right.end)
        return node

    def term(self) -> Node:
        node = self.unary()
        while self.peek().kind == "op" and self.peek().text in ("*", "/"):
            op = self.advance()
            self.count_operation(op)
            right = self.unary()
            node = Binary(op.text, node, right, op.start + 1, node.start, right.end)
        return node

    def unary(self) -> Node:
        token = self.peek()
        if token.kind == "op" and token.text in ("+", "-"):
            self.advance()
            self.count_operation(token)
            self.enter(token)
            operand = self.unary()
            self.depth -= 1
            return Unary(token.text, operand, token.start + 1, token.start, operand.end)
        return self.power()

    def power(self) -> Node:
        base = self.primary()
        token = self.peek()
        if token.kind == "op" and token.text == "**":
            self.advance()
            self.count_operation(token)
            self.enter(token)
            exponent = self.unary()  # right-associative, and 2**-1 is allowed as in Python
            self.depth -= 1
            return Binary("**", base, exponent, token.start + 1, base.start, exponent.end)
        return base

    def primary(self) -> Node:
        token = self.peek()
        if token.kind == "num":
            self.advance()
            assert token.number is not None
            return token.number
        if token.kind == "op" and token.text == "(":
            self.advance()
            self.enter(token)
            inner = self.expression()
            close = self.peek()
            if close.kind == "end":
                raise self.error(
                    f"unexpected end of input: expected ')' to close the '(' at column "
                    f"{token.start + 1}",
                    close,
                )
            if close.text != ")":
                raise self.error(f"expected ')' or an operator but found {_describe(close)}", close)
            self.advance()
            self.depth -= 1
            return replace(inner, start=token.start, end=close.end)
        if token.kind == "end":
            raise self.error("unexpected end of input: expected a number or '('", token)
        raise self.error(f"expected a number or '(' but found {_describe(token)}", token)


def parse_tree(text: str) -> Node:
    """Read ``text`` into a tree of frozen nodes (checks syntax and caps; no arithmetic yet)."""
    text = _check_text(text, "parse_tree()")
    tokens = _Scanner(text).tokens()
    return _Parser(text, tokens).parse()


def _start_column(node: Node) -> int:
    return node.start + 1


def _reduce(node: Node, text: str, rounding: str, budget: _Budget) -> _Num:
    if isinstance(node, Number):
        return _Num(node.value, node.log2_estimate)
    if isinstance(node, Unary):
        operand = _reduce(node.operand, text, rounding, budget)
        return _apply(node.op, operand, None, rounding, budget)
    left = _reduce(node.left, text, rounding, budget)
    right = _reduce(node.right, text, rounding, budget)
    try:
        return _apply(node.op, left, right, rounding, budget)
    except _OpError as exc:
        column = _start_column(node.right) if exc.at_exponent else node.column
        raise ParseError(exc.message, text, column) from None


def reduce_exact(node: Node, text: str, rounding: str = "roundTiesToEven") -> ExactValue:
    """The exact value of a parsed tree (``text`` is only used for error messages).

    ``rounding`` only decides the sign of an exact zero sum: -0 under roundTowardNegative.
    """
    return _reduce(node, text, rounding, _Budget()).value


def parse(text: str) -> ExactValue:
    """The exact value of what a person typed: a number, inf/nan, or an arithmetic expression."""
    text = _check_text(text, "parse()")
    return reduce_exact(parse_tree(text), text)


# ----- bit patterns -----------------------------------------------------------------------------
_BIT_SEPARATORS = "_ .|"


def parse_bits(text: str, fmt: FormatLike) -> int:
    """The code a typed bit pattern spells for ``fmt``; nothing is canonicalised (NaN payloads
    and signs are kept).

    Accepted: ``0x3c00`` (hex), ``0b0_01111_0000000000`` (binary), each with '_' or spaces
    anywhere after the prefix, judged by the bits the value needs; or a plain string of exactly
    ``fmt.bits`` binary digits, which may be grouped with spaces, '_', '.' or '|'.
    """
    fmt = get_format(fmt)
    text = _check_text(text, "parse_bits()")
    stripped = text.strip()
    if not stripped:
        raise ParseError(
            f"empty bit pattern: expected 0x..., 0b... or {fmt.bits} binary digits for {fmt.name}",
            text,
            1,
        )
    offset = len(text) - len(text.lstrip())
    prefix = stripped[:2].lower()
    if prefix in ("0x", "0b"):
        allowed = "0123456789abcdefABCDEF" if prefix == "0x" else "01"
        kind = "hex" if prefix == "0x" else "binary"
        digits: list[str] = []
        first_significant = -1
        for k in range(offset + 2, offset + len(stripped)):
            c = text[k]
            if c in allowed:
                if first_significant < 0 and c != "0":
                    first_significant = k
                digits.append(c)
            elif c not in "_" and not c.isspace():
                raise ParseError(
                    f"unexpected {c!r} in a {kind} bit pattern; expected {kind} digits, "
                    "'_' or spaces",
                    text,
                    k + 1,
                )
        if not digits:
            raise ParseError(
                f"expected {kind} digits after {stripped[:2]!r}", text, offset + len(stripped) + 1
            )
        code = int("".join(digits), 16 if prefix == "0x" else 2)
        if code.bit_length() > fmt.bits:
            shown = stripped[:2] + "".join(digits).lstrip("0")
            raise ParseError(
                f"{shown} needs {code.bit_length()} bits; {fmt.name} has {fmt.bits}",
                text,
                first_significant + 1,
            )
        return code
    if stripped[0] in "+-":
        raise ParseError(
            "a bit pattern has no sign in front; set the sign bit instead", text, offset + 1
        )
    bits: list[str] = []
    for k in range(offset, offset + len(stripped)):
        c = text[k]
        if c in "01":
            bits.append(c)
            if len(bits) == fmt.bits + 1:
                raise ParseError(
                    f"too many binary digits: {fmt.name} has {fmt.bits} bits", text, k + 1
                )
        elif c not in _BIT_SEPARATORS and not c.isspace():
            hint = " (write hex with 0x, as in 0x3c00)" if c in "23456789abcdefABCDEF" else ""
            raise ParseError(
                f"unexpected {c!r} in a binary bit pattern; expected 0 or 1{hint}", text, k + 1
            )
    if len(bits) != fmt.bits:
        raise ParseError(
            f"a plain binary pattern for {fmt.name} needs exactly {fmt.bits} digits, "
            f"got {len(bits)} (or write 0b... / 0x...)",
            text,
            offset + len(stripped) + 1,
        )
    return int("".join(bits), 2)
