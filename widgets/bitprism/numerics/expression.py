"""Tokens and grammar of what a person types: the scanner, the parser and the tree they build.

``parse_tree`` turns text such as ``0.1``, ``-0x1.8p-3``, ``2**-24`` or ``-(3 + 1/8)`` into a
tree of frozen nodes (``Number``, ``Unary``, ``Binary``) without any arithmetic; literals are
read exactly (``Fraction``, never a binary float). ``exact_arithmetic`` reduces the tree and
``parse`` puts the two together.

Why a parser of our own: the text comes from a notebook user, so it is read by a whitelist
tokenizer and a small recursive-descent parser; nothing is handed to ``eval``/``exec``/
``ast.literal_eval``. Input length, nesting depth, operation count and literal size are capped
here (``MAX_*``) before any work that could grow with them; ``check_text`` is the entry check
every public reader shares.

Why the clamping helpers live here: a literal whose binary magnitude is estimated (from digit
count and exponent) beyond 2^±MAGNITUDE_LIMIT is never built; the scanner makes it a *clamped*
``ExactValue`` with a log2 estimate. The arithmetic clamps its results the same way, so it
imports these helpers (and the tree nodes) from this module; this module imports nothing from
the arithmetic, which keeps the dependency one way.

Reading rules (the grammar mirrors Python's precedence):

- decimals and scientific notation (``.5``, ``5.``, ``1_000``, ``1E+5``); C99 hex floats
  (``0x1.8p-3``; a hex fraction needs the ``p`` exponent); ``0x``/``0o``/``0b`` literals
  *without* ``p`` are INTEGERS like in Python: ``0x3c00`` is 15360, not a float16 pattern;
  bit patterns go through ``parse_bits``;
- names ``inf``, ``infinity``, ``nan`` (any case); ``+ - * / **``, unary ``+``/``-`` and
  parentheses; ``**`` is right-associative and binds tighter than unary minus (``-2**2 == -4``)
  and its exponent must be an integer (exact arithmetic only); U+2212, U+00D7 and U+00F7 are
  read as ``-``, ``*`` and ``/``.
"""

from __future__ import annotations

import difflib
import math
from dataclasses import dataclass, replace
from fractions import Fraction
from functools import lru_cache
from typing import Union

from ..errors import ParseError, UnsupportedInputError
from .exact import MAGNITUDE_LIMIT, ExactValue, floor_log2

__all__ = [
    "ESTIMATE_CAP",
    "MAX_DEPTH",
    "MAX_LENGTH",
    "MAX_LITERAL_DIGITS",
    "MAX_OPERATIONS",
    "Binary",
    "Node",
    "Number",
    "Unary",
    "check_text",
    "clamped_with_estimate",
    "finite_with_estimate",
    "log2_fraction",
    "parse_tree",
]

# ----- caps (checked before any work that could grow with them) -------------------------------
MAX_LENGTH = 1000  # characters of input
MAX_DEPTH = 64  # nested parentheses, unary signs and '**' exponents
MAX_OPERATIONS = 256  # operators in one expression (keeps the tree shallow for recursion)
MAX_LITERAL_DIGITS = 800  # digits in one literal: enough for float64's exact decimal expansions
# log2 estimates of clamped values are kept within ±2^60 so float arithmetic on them stays finite.
ESTIMATE_CAP = float(1 << 60)
_LOG2_10 = math.log2(10)
_LN2 = math.log(2)

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


# ----- exact values with a magnitude estimate (shared with the arithmetic) ----------------------
@lru_cache(maxsize=2)
def _stand_in(direction: int) -> Fraction:
    """2^(±MAGNITUDE_LIMIT), the magnitude a clamped ExactValue carries (built on first use)."""
    return Fraction(2) ** (direction * MAGNITUDE_LIMIT)


def log2_fraction(q: Fraction) -> float:
    """log2(q) for q > 0, with a small relative error everywhere, 1 included.

    log2(n) - log2(d) would cancel for q near 1 (1 + 2^-70 gives 0.0, and with it the sign is
    lost); instead: in [1/2, 2], log1p of the exactly computed (n - d) / d; elsewhere
    e + log2(q / 2^e) with e = floor(log2 q) exact, which cannot cancel. The result is 0.0
    only for q == 1 or where |log2 q| is below float64's range (|q - 1| < 2^-1074)."""
    n, d = q.numerator, q.denominator
    e = floor_log2(q)
    if e in (-1, 0):
        return math.log1p((n - d) / d) / _LN2  # int / int: correctly rounded at any size
    # m = q / 2^e in [1, 2): its log2 is in [0, 1), added to an integer of magnitude >= 1
    m_num, m_den = (n, d << e) if e >= 0 else (n << -e, d)
    return e + math.log1p((m_num - m_den) / m_den) / _LN2


def clamped_with_estimate(negative: bool, estimate: float) -> tuple[ExactValue, float]:
    """A clamped ExactValue on the side ``estimate`` (log2|x|) points to, and the estimate kept
    within ±ESTIMATE_CAP."""
    direction = 1 if estimate > 0 else -1
    est = max(-ESTIMATE_CAP, min(ESTIMATE_CAP, estimate))
    value = ExactValue("finite", negative, _stand_in(direction), clamped=direction)
    return value, est


def finite_with_estimate(q: Fraction, negative: bool | None = None) -> tuple[ExactValue, float]:
    """``ExactValue.finite(q)`` and, when it clamps, log2|q| (0.0 otherwise, as unused)."""
    value = ExactValue.finite(q, negative)
    return value, log2_fraction(abs(q)) if value.clamped else 0.0


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


def check_text(text: object, what: str) -> str:
    """``text`` itself if it is a str within MAX_LENGTH; ``what`` names the caller in errors."""
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
            estimate = math.copysign(ESTIMATE_CAP, exp10)
        else:
            estimate = math.log2(mantissa) + exp10 * _LOG2_10
        if abs(estimate) > MAGNITUDE_LIMIT + 2:
            value, log2 = clamped_with_estimate(False, estimate)
            return i, value, log2
        q = mantissa * Fraction(10) ** exp10
        value, log2 = finite_with_estimate(q)
        return i, value, log2

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
            estimate = float(max(-ESTIMATE_CAP, min(ESTIMATE_CAP, top)))
            value, log2 = clamped_with_estimate(False, estimate)
            return i, value, log2
        value, log2 = finite_with_estimate(mantissa * Fraction(2) ** exp2)
        return i, value, log2


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
    text = check_text(text, "parse_tree()")
    tokens = _Scanner(text).tokens()
    return _Parser(text, tokens).parse()
