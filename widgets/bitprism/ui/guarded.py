"""Callback errors shown in a widget's message area instead of being raised into the notebook."""

from __future__ import annotations

import functools
from typing import Any, Callable

from ..errors import ParseError

__all__ = ["guarded", "message_for"]


def message_for(exc: BaseException) -> str:
    """One line a person can act on: parse errors say the column, others their kind."""
    if isinstance(exc, ParseError):
        return f"{exc.reason} (column {exc.column})"
    return f"{type(exc).__name__}: {exc}"


def guarded(method: Callable[..., Any]) -> Callable[..., Any]:
    """Run a widget callback; show any error in the widget's ``message`` trait, keep the view."""

    @functools.wraps(method)
    def wrapper(self: Any, *args: Any, **kwargs: Any) -> Any:
        try:
            return method(self, *args, **kwargs)
        except Exception as exc:  # shown to the person, who can act on it
            self.message = message_for(exc)
            return None

    return wrapper
