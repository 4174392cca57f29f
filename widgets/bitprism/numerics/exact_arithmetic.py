"""Exact arithmetic on parsed values, with IEEE 754 special values and clamped magnitudes.

``reduce_exact`` computes the exact value of a tree from ``expression.parse_tree`` with
``Fraction`` arithmetic; ``apply_operation`` performs one operation the same way (what
per-format arithmetic in ``evaluate`` rounds). The size of every exact intermediate and the
total work of one expression are capped, so any input returns (a value or a ``ParseError``
with a column) in milliseconds.

Why a module of its own: the rules below are about values, not text; the scanner and parser in
``expression`` know nothing of them. This module imports the tree nodes and the shared clamping
helpers from ``expression`` (never the other way round), so ``evaluate``, which needs both the
tree and the arithmetic, imports each from where it is defined without a cycle.

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
  "cannot be evaluated exactly" names the operator's column;
- ``q ** n`` of an in-range base clamps only when the estimate n * log2(q) (``log2_fraction``,
  accurate near q = 1 too) lies beyond the limit with room for its error; otherwise q^n is
  built exactly or refused by the size budget (``(1 + 2**-70) ** 2**62`` is about 1.0039, whose
  exact rational would need ~2^68 bits: refused, not clamped).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from fractions import Fraction
from functools import lru_cache

from ..errors import ParseError
from .exact import MAGNITUDE_LIMIT, ExactValue
from .expression import (
    ESTIMATE_CAP,
    Node,
    Number,
    Unary,
    clamped_with_estimate,
    finite_with_estimate,
    log2_fraction,
)

__all__ = ["apply_operation", "reduce_exact"]

# Bits in the numerator or denominator of one exact intermediate: two limit-sized factors plus
# slack. Beyond it a single Fraction operation (gcd included) stops being instant.
_SIZE_LIMIT = 2 * MAGNITUDE_LIMIT + 4096
# Total bits of exact intermediates in one expression; bounds the time of adversarial inputs to
# a few limit-sized operations.
_WORK_LIMIT = 8 * _SIZE_LIMIT
# Relative error allowed to a log2 estimate before it may decide "beyond the limit": the
# estimates (``log2_fraction`` times an exponent) are good to about 1e-15.
_ESTIMATE_ERROR = 1e-9
_LN2 = math.log(2)


# ----- exact values with a magnitude estimate -------------------------------------------------
@dataclass(frozen=True)
class _Num:
    """An exact value with an estimate of log2|value| (the value alone says only "clamped")."""

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
                f"cannot be evaluated exactly: the exact result needs about {_bits_text(largest)} "
                f"bits; the limit is {_SIZE_LIMIT}"
            )
        self.work += int(numerator_bits + denominator_bits)
        if self.work > _WORK_LIMIT:
            raise _OpError(
                "cannot be evaluated exactly: the expression needs more than "
                f"{_WORK_LIMIT} bits of exact intermediate results"
            )


def _bits_text(bits: float) -> str:
    """A bit count for a message: the number, or 2**k once it is too long to read (or to
    convert: a count may have more digits than Python writes out)."""
    if bits < 10**15:
        return str(int(bits))
    return f"2**{math.log2(bits):.1f}"


@lru_cache(maxsize=1)
def _sticky() -> Fraction:
    """2^-(L+1): stands for a clamped tiny addend; below the limit, so cancellations re-clamp."""
    return Fraction(1, 1 << (MAGNITUDE_LIMIT + 1))


def _estimate(x: _Num) -> float:
    """log2|x| for finite nonzero x: the carried estimate if clamped, else computed."""
    return x.log2 if x.value.clamped else log2_fraction(x.value.magnitude)


def _clamped(negative: bool, estimate: float) -> _Num:
    return _Num(*clamped_with_estimate(negative, estimate))


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
    return _Num(*finite_with_estimate(q, negative))


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
    if a.clamped:  # |x| is known by its estimate only, and so is the result
        return _from_estimate(negative, _times(x.log2, math.log2(abs(x.log2)), n, x.log2))
    q = a.magnitude
    step = log2_fraction(q)  # accurate near 1 too; 0.0 only if |q - 1| < 2^-1074
    if step == 0.0:  # too close to 1 for a float: its size from q - 1 (ln q ~ q - 1)
        size = log2_fraction(abs(q - 1)) - math.log2(_LN2)
        estimate = _times(1.0 if q > 1 else -1.0, size, n)
    else:
        estimate = _times(step, math.log2(abs(step)), n, step)
    # beyond the limit only when the estimate says so with room for its error (about 1e-15
    # relative; 1e-9 allowed); anything else is computed exactly, or refused by the budget
    if abs(estimate) > (MAGNITUDE_LIMIT + 1) * (1 + _ESTIMATE_ERROR):
        return _clamped(negative, estimate)
    if n.bit_length() < 1000:
        budget.charge(abs(n) * math.log2(q.numerator), abs(n) * math.log2(q.denominator))
    else:  # float(n) would overflow: count in integers (bit lengths bound log2 from above)
        budget.charge(abs(n) * q.numerator.bit_length(), abs(n) * q.denominator.bit_length())
    return _finite(q**n, negative)


def _times(sign: float, log2_abs_step: float, n: int, step: float | None = None) -> float:
    """``step * n``, an estimate of log2|x^n| from step = log2|x| (given by its sign and
    log2 of its size; ``step`` itself when a float holds it), kept within ±ESTIMATE_CAP and
    computed without overflow for any size of ``n``: directly while both fit a float, else in
    the log domain."""
    sign = math.copysign(1.0, sign) * (1 if n > 0 else -1)
    log2_size = log2_abs_step + math.log2(abs(n))
    if log2_size >= 60:
        return sign * ESTIMATE_CAP
    if step is not None and n.bit_length() < 1000:
        return step * n
    return sign * 2.0**log2_size


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


# ----- a whole tree -----------------------------------------------------------------------------
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
