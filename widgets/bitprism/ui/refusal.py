"""How a widget refuses a value: one exception that both ``except bitprism.BitprismError`` and
traitlets understand, trait types that raise it, and the last good view a widget falls back to.

A value set from code that a widget cannot take raises ``WidgetValueError``; the same value
typed into a box shows its message in the widget instead (``guarded``). Either way nothing of
the refused value stays: the traits keep the values of the last view that could be built.
"""

from __future__ import annotations

import operator
from typing import Any, ClassVar, NoReturn

from traitlets import Any as AnyTrait
from traitlets import Bool, Int, List, TraitError, Tuple, Unicode

from ..errors import BitprismError, ParseError
from .case_codecs import MAX_SEED

__all__ = [
    "BoolTrait",
    "IntTrait",
    "LastGoodView",
    "ListTrait",
    "TextTrait",
    "TupleTrait",
    "ValueTrait",
    "WidgetValueError",
    "check_index",
    "check_seed",
    "message_for",
    "refusal",
]


class WidgetValueError(BitprismError, TraitError):
    """A value a widget's trait cannot take.

    A ``BitprismError`` (so the ``except bitprism.BitprismError`` of the example notebooks
    catches it) and a ``traitlets.TraitError`` (so traitlets rolls back a batch of changes that
    holds it, as it does for its own errors). ``shown`` is the one line the widget shows.
    """

    def __init__(self, message: str, shown: str | None = None) -> None:
        super().__init__(message)
        self.shown = message if shown is None else shown


def message_for(exc: BaseException) -> str:
    """One line a person can act on: parse errors say the column, others their kind."""
    if isinstance(exc, WidgetValueError):
        return exc.shown
    if isinstance(exc, ParseError):
        return f"{exc.reason} (column {exc.column})"
    return f"{type(exc).__name__}: {exc}"


def refusal(exc: BaseException) -> WidgetValueError:
    """``exc`` (raised while checking a value) as the error a widget raises."""
    if isinstance(exc, WidgetValueError):
        return exc
    return WidgetValueError(str(exc), shown=message_for(exc))


def check_index(value: Any, name: str) -> int:
    """An index given for ``name``: an integer (numpy's too), never a bool or a float."""
    if isinstance(value, bool) or not hasattr(type(value), "__index__"):
        raise BitprismError(f"{name} holds integer indices; got {value!r}")
    return operator.index(value)


def check_seed(value: Any) -> int | None:
    """A seed a case file can hold: None, or an integer in 0 .. 2**63 - 1 (not a bool)."""
    if value is None:
        return None
    if isinstance(value, bool) or not hasattr(type(value), "__index__"):
        raise BitprismError(f"seed must be None or an integer in 0..{MAX_SEED}; got {value!r}")
    seed = operator.index(value)
    if not 0 <= seed <= MAX_SEED:
        raise BitprismError(f"seed must be in 0..{MAX_SEED} (2**63 - 1); got {seed!r}")
    return seed


class _Refusing:
    """Trait types whose own type check raises ``WidgetValueError`` (traitlets' wording),
    shown in the widget's message as its other refusals are."""

    def error(self, obj: Any, value: Any, error: Any = None, info: Any = None) -> NoReturn:
        try:
            super().error(obj, value, error, info)  # type: ignore[misc]
        except TraitError as exc:
            refused = refusal(exc)
        else:  # pragma: no cover - traitlets' error() always raises
            refused = WidgetValueError(f"{value!r} is not accepted")
        if isinstance(obj, LastGoodView):
            obj._refuse_value(refused)
        raise refused


class ValueTrait(_Refusing, AnyTrait):  # type: ignore[misc]
    """``Any`` that passes None to the validators like any other value (traitlets' ``Any``
    allows None by default, which skips them)."""

    allow_none = False


class TextTrait(_Refusing, Unicode):  # type: ignore[misc]
    """``Unicode`` that refuses with ``WidgetValueError``."""


class IntTrait(_Refusing, Int):  # type: ignore[misc]
    """``Int`` that refuses with ``WidgetValueError``."""


class BoolTrait(_Refusing, Bool):  # type: ignore[misc]
    """``Bool`` that refuses with ``WidgetValueError``."""


class ListTrait(_Refusing, List):  # type: ignore[misc]
    """``List`` that refuses with ``WidgetValueError``."""


class TupleTrait(_Refusing, Tuple):  # type: ignore[misc]
    """``Tuple`` that refuses with ``WidgetValueError``."""


def _same(a: Any, b: Any) -> bool:
    """Whether a trait holds ``b`` already; arrays by identity (never element by element)."""
    if a is b:
        return True
    simple = (str, int, float, tuple, list, type(None))
    return isinstance(a, simple) and isinstance(b, simple) and bool(a == b)


class LastGoodView:
    """The traits of the last view a widget could build, and the way back to them.

    The widget lists its view traits in ``_view_traits``, calls ``_remember_good_view()`` when a
    refresh succeeded and ``_refuse_view(exc)`` when it failed: the traits go back to the last
    good values (observers see ``_restoring`` and do no work of their own), the message says
    why, and ``WidgetValueError`` is raised to the code that asked for the change (a callback
    shows it instead).
    """

    _view_traits: ClassVar[tuple[str, ...]] = ()
    _good_view: dict[str, Any] | None = None
    _restoring: bool = False
    _suspend: int
    message: Any

    def _remember_good_view(self) -> None:
        self._good_view = {name: getattr(self, name) for name in self._view_traits}

    def _restore_good_view(self) -> None:
        good = self._good_view
        if good is None:
            return
        self._suspend += 1
        self._restoring = True
        try:
            with self.hold_trait_notifications():  # type: ignore[attr-defined]
                for name, value in good.items():
                    if not _same(getattr(self, name), value):
                        setattr(self, name, value)
        finally:
            self._restoring = False
            self._suspend -= 1

    def _refuse_value(self, exc: BaseException) -> NoReturn:
        """Refuse a value a validator found wrong: say why, raise ``WidgetValueError``."""
        error = refusal(exc)
        self.message = error.shown
        if error is exc:
            raise error
        raise error from exc

    def _refuse_view(self, exc: BaseException) -> NoReturn:
        """The view of the traits as they are could not be built: back to the last good traits
        (whose view is still shown), say why, raise ``WidgetValueError``."""
        if isinstance(exc, BitprismError):
            error = refusal(exc)
        else:  # not a refusal of ours: say that the view, not the value, failed
            error = WidgetValueError(
                f"this view could not be built ({message_for(exc)}); the last view is kept")
        self._restore_good_view()
        self.message = error.shown
        if error is exc:
            raise error
        raise error from exc
