"""Per-format arithmetic: an expression computed the way the format's hardware would.

``evaluate("2048 + 1", "float16")`` rounds every literal to the format, then performs each
operation exactly on the already-rounded operands and rounds its result once (IEEE 754 §5.1:
every operation is correctly rounded), so absorbed addends, overflow to Inf and double
rounding show up where they happen. Each operation is recorded as a ``Step``; the exact value
of the whole expression (``parse``) is reported beside the format's answer.

Choices: unary minus is an operation of its own (exact except in formats without negative
zero or without a sign); ``x ** n`` is one operation (exact x^n rounded once) and its integer
exponent ``n`` is taken exactly, not rounded to the format, because it counts multiplications
rather than being a value of the format.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np

from ..display import Displayable
from ..errors import ParseError
from ..formats import Format, FormatLike, get_format
from .exact import ExactValue
from .exact_arithmetic import apply_operation, reduce_exact
from .expression import Binary, Node, Number, Unary, parse_tree
from .options import CastOptions, resolve_options
from .rounding import exceeds_largest
from .scalar import decode_exact, encode_exact

__all__ = ["STEP_EVENTS", "Evaluation", "Step", "evaluate"]

# What happened in one step, for a UI badge (names are ours, in IEEE 754 §7 terms).
STEP_EVENTS = ("exact", "rounded", "absorbed", "overflow", "underflow", "invalid", "divide by zero")


@dataclass(frozen=True)
class Step:
    """One rounded operation.

    Attributes:
        operation: the source text of the operation, e.g. ``"2048 + 1"`` or ``"0.1"``.
        kind: 'literal', 'negate', '+', '-', '*', '/' or '**'.
        operands: the inputs as the format holds them (the exponent of '**' exact).
        exact: the exact result of this one operation on those operands.
        rounded: ``exact`` rounded to the format; ``code`` is its bit pattern.
        column: 1-based column of the literal or operator in the text.
        event: 'exact', 'rounded', 'absorbed' (a sum equal to one nonzero addend while the other
            was nonzero), 'overflow', 'underflow' (nonzero to zero), 'invalid' (a NaN from
            non-NaN operands) or 'divide by zero'.
    """

    operation: str
    kind: str
    operands: tuple[ExactValue, ...]
    exact: ExactValue
    rounded: ExactValue
    code: int
    column: int
    event: str

    @property
    def inexact(self) -> bool:
        """Whether rounding changed the value (sign of zero and NaN sign included)."""
        return not _same(self.exact, self.rounded)


@dataclass(frozen=True)
class Evaluation(Displayable):
    """An expression evaluated in one format, with the exact value beside it.

    Attributes:
        text: what was typed.
        format: the Format every literal and intermediate result was rounded to.
        options: rounding direction, overflow and subnormal handling used.
        result: the value after per-format arithmetic; ``code`` is its bit pattern.
        exact: the whole expression evaluated exactly (``parse``), or None when it cannot be
            (``exact_error`` says why, e.g. both operands of a subtraction beyond 2^131072).
        exact_code: ``exact`` rounded once to the format (None with ``exact``), to compare one
            rounding with step-by-step rounding (stochastic rounding draws it from the same
            generator, after the steps).
        steps: every rounded operation, in evaluation order.
    """

    text: str
    format: Format
    options: CastOptions
    result: ExactValue
    code: int
    exact: ExactValue | None
    exact_code: int | None
    steps: tuple[Step, ...]
    exact_error: str | None = field(default=None)


def _same(a: ExactValue, b: ExactValue) -> bool:
    return (a.kind, a.negative, a.magnitude, a.clamped) == (
        b.kind,
        b.negative,
        b.magnitude,
        b.clamped,
    )


class _Walker:
    """Evaluates a tree in one format, recording a Step per rounded operation."""

    def __init__(self, text: str, fmt: Format, options: CastOptions, rng: Any) -> None:
        self.text = text
        self.fmt = fmt
        self.options = options
        self.rng = rng
        self.steps: list[Step] = []

    def round(self, x: ExactValue) -> tuple[ExactValue, int]:
        code = encode_exact(x, self.fmt, self.options, self.rng)
        return decode_exact(code, self.fmt), code

    def record(
        self, node: Node, kind: str, operands: tuple[ExactValue, ...], exact: ExactValue
    ) -> tuple[ExactValue, int]:
        rounded, code = self.round(exact)
        operation = node.literal if isinstance(node, Number) else self.text[node.start : node.end]
        event = _event(self.fmt, self.options.rounding, kind, operands, exact, rounded)
        self.steps.append(Step(operation, kind, operands, exact, rounded, code, node.column, event))
        return rounded, code

    def walk(self, node: Node) -> tuple[ExactValue, int]:
        if isinstance(node, Number):
            return self.record(node, "literal", (), node.value)
        if isinstance(node, Unary):
            value, code = self.walk(node.operand)
            if node.op == "+":
                return value, code
            return self.record(node, "negate", (value,), -value)
        assert isinstance(node, Binary)
        left, _ = self.walk(node.left)
        if node.op == "**":
            right = reduce_exact(node.right, self.text, self.options.rounding)
        else:
            right, _ = self.walk(node.right)
        exact = apply_operation(
            node.op,
            left,
            right,
            rounding=self.options.rounding,
            text=self.text,
            column=node.column,
            exponent_column=node.right.start + 1,
        )
        return self.record(node, node.op, (left, right), exact)


def _event(
    fmt: Format,
    rounding: str,
    kind: str,
    operands: tuple[ExactValue, ...],
    exact: ExactValue,
    rounded: ExactValue,
) -> str:
    if kind != "literal" and exact.is_nan and not any(o.is_nan for o in operands):
        return "invalid"  # 0/0, inf - inf, 0 * inf (IEEE 754 §7.2)
    if (exact.negative and not exact.is_zero and not exact.is_nan and not fmt.signed) or (
        exact.is_zero and not fmt.has_zero
    ):
        return "invalid"  # no code for a negative number, or for zero, in this format
    if kind in ("/", "**") and exact.is_inf and all(o.is_finite for o in operands):
        return "divide by zero"  # x/0 and 0**-n (IEEE 754 §7.3)
    if exact.is_finite and not exact.is_zero:
        if not rounded.is_finite:
            return "overflow"  # to Inf, or to NaN in a format without Inf
        beyond = exceeds_largest(exact, fmt, rounding)
        if beyond is None:  # stochastic: the draw decided; judge by the saturated result
            beyond = exact.magnitude > fmt.max_finite and rounded.magnitude == fmt.max_finite
        if beyond:
            return "overflow"  # saturated, or rounded toward zero from beyond the range
        if rounded.is_zero:
            return "underflow"  # a nonzero result rounded (or flushed) to zero
    if _same(exact, rounded):
        return "exact"
    if kind in ("+", "-") and len(operands) == 2 and rounded.is_finite:
        a, b = operands
        if a.is_finite and b.is_finite and not a.is_zero and not b.is_zero:
            b_signed = -b.value if kind == "-" else b.value
            if rounded.value in (a.value, b_signed):
                return "absorbed"  # the sum equals one addend: the other vanished
    return "rounded"


def evaluate(
    text: str,
    fmt: FormatLike,
    rounding: str | None = None,
    overflow: str | None = None,
    subnormals: str | None = None,
    seed: int | None = None,
    *,
    options: CastOptions | None = None,
) -> Evaluation:
    """Evaluate ``text`` with every literal and every intermediate result rounded to ``fmt``.

    Options are those of a cast: ``options`` (a ``CastOptions``) with the keyword shorthands
    replacing its fields (IEEE 754 rounding-direction names or 'stochastic' with ``seed``;
    ``overflow`` 'standard' or 'saturate'; ``subnormals`` 'keep' or 'flush'). Syntax and
    arithmetic errors raise ParseError with the column.
    """
    fmt = get_format(fmt)
    options = resolve_options(options, rounding, overflow, subnormals, seed)
    root = parse_tree(text)
    rng = np.random.default_rng(options.seed) if options.rounding == "stochastic" else None
    walker = _Walker(text, fmt, options, rng)
    result, code = walker.walk(root)
    exact: ExactValue | None
    exact_code: int | None
    exact_error: str | None = None
    try:
        exact = reduce_exact(root, text, options.rounding)
        exact_code = encode_exact(exact, fmt, options, rng)
    except ParseError as exc:  # e.g. huge - huge: the format's answer stands, the exact one cannot
        exact, exact_code, exact_error = None, None, exc.reason
    return Evaluation(
        text=text,
        format=fmt,
        options=options,
        result=result,
        code=code,
        exact=exact,
        exact_code=exact_code,
        steps=tuple(walker.steps),
        exact_error=exact_error,
    )
