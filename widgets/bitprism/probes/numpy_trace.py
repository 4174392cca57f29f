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

from .arguments import check_array, map_items
from .numpy_ops import wrap
from .session import Session
from .traced_array import TracedArray

__all__ = ["run_numpy", "shadow_result", "unwrap_result"]


def _prepare(session: Session, value: Any, where: str) -> Any:
    """An argument as the traced call gets it: arrays checked, rounded on entry when
    emulating, shadowed and wrapped; lists, tuples and dicts walked; anything else untouched."""

    def leaf(item: Any, name: str) -> Any:
        if not isinstance(item, np.ndarray):
            return item
        check_array(item, name)
        arr = item.view(np.ndarray) if isinstance(item, TracedArray) else item
        shadow = arr.astype(np.float64) if session.shadow and arr.dtype.kind in "fV" else None
        if session.emulator is not None and arr.dtype.kind in "fV":
            arr = session.emulator.entry(arr).reshape(arr.shape)
        return wrap(session, arr, None, shadow)  # counted when an operation needs to know

    return map_items(value, leaf, where)


def unwrap_result(value: Any) -> Any:
    """A result with every traced array made a plain numpy array (lists, tuples, dicts
    walked)."""
    return map_items(value, lambda v, _: v.view(np.ndarray) if isinstance(v, TracedArray) else v,
                     "result", any_tuple=True)


def shadow_result(value: Any) -> Any:
    """The float64 shadow of a result, in the same structure (values without a shadow as
    they are)."""

    def leaf(v: Any, _: str) -> Any:
        if not isinstance(v, TracedArray):
            return v
        return v.view(np.ndarray) if v._bp_shadow is None else np.asarray(v._bp_shadow)

    return map_items(value, leaf, "result", any_tuple=True)


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
