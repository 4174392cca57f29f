"""Exact reading of what a person types: numbers, expressions and bit patterns.

``parse`` turns text such as ``0.1``, ``-0x1.8p-3``, ``2**-24`` or ``-(3 + 1/8)`` into an
``ExactValue`` without ever going through a binary float, so a later cast rounds exactly once.
``parse_bits`` reads a bit pattern (``0x3c00``, ``0b0_01111_0000000000``) for one format.

This is the public entry point; the work is done in two modules below it: ``expression``
(tokens, grammar, the tree and the input caps; the reading rules are documented there) and
``exact_arithmetic`` (the exact reduction with IEEE 754 special values and clamped magnitudes).
"""

from __future__ import annotations

from ..errors import ParseError
from ..formats import FormatLike, get_format
from .exact import ExactValue
from .exact_arithmetic import reduce_exact
from .expression import check_text, parse_tree

__all__ = ["parse", "parse_bits"]


def parse(text: str) -> ExactValue:
    """The exact value of what a person typed: a number, inf/nan, or an arithmetic expression."""
    text = check_text(text, "parse()")
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
    text = check_text(text, "parse_bits()")
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
