"""Callback errors shown in a widget's message area instead of being raised into the notebook."""

from __future__ import annotations

import functools
from contextlib import contextmanager
from typing import Any, Callable, Iterator

from .refusal import message_for

__all__ = ["BatchedRefresh", "guarded", "message_for"]


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


class BatchedRefresh:
    """``_bulk()``: change several traits with one ``_refresh()`` at the end.

    The widget sets ``self._suspend = 0`` in ``__init__`` and skips work in its observers while
    ``self._suspend`` is non-zero.
    """

    _suspend: int

    def _refresh(self) -> None:  # pragma: no cover - every widget defines its own
        raise NotImplementedError

    @contextmanager
    def _bulk(self) -> Iterator[None]:
        self._suspend += 1
        try:
            with self.hold_trait_notifications():  # type: ignore[attr-defined]
                yield
        finally:
            self._suspend -= 1
        if not self._suspend:
            self._refresh()
