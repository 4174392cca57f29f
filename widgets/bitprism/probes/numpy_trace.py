"""Running a function under a numpy trace: its array arguments wrapped as ``TracedArray``,
its results unwrapped again.

Arguments are walked through lists, tuples and dicts; every numpy array among them (an
ml_dtypes array included) is checked (``arguments.check_array``: complex, object and text
arrays are refused, naming the argument), rounded to the emulated format when there is one,
given its float64 shadow, and wrapped (it is counted when an operation on it needs to know what
it holds). Everything else (Python numbers, strings, other
objects) is passed through untouched.
"""

from __future__ import annotations

from typing import Any, Callable

import numpy as np

from .arguments import check_array
from .numpy_ops import wrap
from .session import Session
from .traced_array import TracedArray

__all__ = ["run_numpy", "shadow_result", "unwrap_result"]


def _prepare(session: Session, value: Any, where: str) -> Any:
    if isinstance(value, np.ndarray):
        check_array(value, where)
        arr = value.view(np.ndarray) if isinstance(value, TracedArray) else value
        shadow = arr.astype(np.float64) if session.shadow and arr.dtype.kind in "fV" else None
        if session.emulator is not None and arr.dtype.kind in "fV":
            arr = session.emulator.entry(arr).reshape(arr.shape)
        return wrap(session, arr, None, shadow)  # counted when an operation needs to know
    if isinstance(value, list) and type(value) is list:
        return [_prepare(session, v, f"{where}[{i}]") for i, v in enumerate(value)]
    if isinstance(value, tuple) and type(value) is tuple:
        return tuple(_prepare(session, v, f"{where}[{i}]") for i, v in enumerate(value))
    if isinstance(value, dict) and type(value) is dict:
        return {k: _prepare(session, v, f"{where}[{k!r}]") for k, v in value.items()}
    return value


def unwrap_result(value: Any) -> Any:
    """A result with every traced array made a plain numpy array (lists, tuples, dicts
    walked)."""
    if isinstance(value, TracedArray):
        return value.view(np.ndarray)
    if isinstance(value, list) and type(value) is list:
        return [unwrap_result(v) for v in value]
    if isinstance(value, tuple):
        items = [unwrap_result(v) for v in value]
        return type(value)(*items) if hasattr(value, "_fields") else tuple(items)
    if isinstance(value, dict) and type(value) is dict:
        return {k: unwrap_result(v) for k, v in value.items()}
    return value


def shadow_result(value: Any) -> Any:
    """The float64 shadow of a result, in the same structure (values without a shadow as
    they are)."""
    if isinstance(value, TracedArray):
        if value._bp_shadow is not None:
            return np.asarray(value._bp_shadow)
        return value.view(np.ndarray)
    if isinstance(value, list) and type(value) is list:
        return [shadow_result(v) for v in value]
    if isinstance(value, tuple):
        items = [shadow_result(v) for v in value]
        return type(value)(*items) if hasattr(value, "_fields") else tuple(items)
    if isinstance(value, dict) and type(value) is dict:
        return {k: shadow_result(v) for k, v in value.items()}
    return value


def run_numpy(session: Session, fn: Callable[..., Any], args: tuple[Any, ...],
              kwargs: dict[str, Any], names: list[str]) -> tuple[Any, Any]:
    """(result, shadow result) of ``fn(*args, **kwargs)`` traced by ``session``; ``names``
    name the positional arguments in messages."""
    wrapped_args = tuple(_prepare(session, a, names[i]) for i, a in enumerate(args))
    wrapped_kwargs = {k: _prepare(session, v, f"kwargs[{k!r}]") for k, v in kwargs.items()}
    # numpy's "warn" floating-point warnings would point into this package, not at the
    # person's line: the records say where instead; "raise" and "call" settings stay
    quiet = {k: "ignore" if v == "warn" else v for k, v in np.geterr().items()}
    try:
        with np.errstate(**quiet):  # type: ignore[arg-type]
            result = fn(*wrapped_args, **wrapped_kwargs)
    finally:
        session.active = False
    shadow = shadow_result(result) if session.shadow else None
    return unwrap_result(result), shadow
