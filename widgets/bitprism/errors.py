"""The few exceptions bitprism raises, each subclassing the matching built-in.

Messages name the argument, what is allowed and ``!r`` of what was received, so a person
reading a notebook cell's error can fix the call without reading our source.
"""

from __future__ import annotations

__all__ = ["BitprismError", "ParseError", "UnsupportedInputError"]


class BitprismError(ValueError):
    """A value or option bitprism cannot accept (unknown format, bad option, bad file...)."""


class UnsupportedInputError(BitprismError, TypeError):
    """Data of a kind bitprism refuses rather than convert inexactly (complex, object, text...)."""


class ParseError(BitprismError):
    """Typed text that is not a value; carries the 1-based column where reading stopped."""

    def __init__(self, message: str, text: str, column: int) -> None:
        self.text = text
        self.column = column
        self.reason = message
        pointer = " " * (column - 1) + "^"
        super().__init__(f"{message} (column {column})\n  {text}\n  {pointer}")
