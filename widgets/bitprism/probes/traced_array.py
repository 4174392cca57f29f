"""``TracedArray``: the numpy array type a trace hands to the traced function.

It is an ``ndarray`` subclass that overrides numpy's two published dispatch protocols,
``__array_ufunc__`` (NEP 13: every ufunc call and ufunc method, so the operators ``+ - * / @``,
``np.exp``, ``x.sum()`` ...) and ``__array_function__`` (NEP 18: ``np.concatenate``,
``np.einsum``, ``np.where`` ...), and hands each call to ``numpy_ops``, which computes it on
plain arrays, records it and wraps the results again, so everything derived from an argument is
traced too. The rest of ``ndarray`` is kept; the methods that make views or copies are
overridden only to keep a float64 shadow in step, and the reductions to reach the same code as
the functions (``x.sum()`` is ``np.sum(x)``), so a method and a function give one record.

Attributes (set by the trace): ``_bp_session`` (the ``Session``, None outside a trace),
``_bp_stats`` (the counts the array was made with, None when unknown), ``_bp_shadow`` (the
float64 shadow of the values, or None).
"""

from __future__ import annotations

from typing import Any, Callable

import numpy as np

__all__ = ["TracedArray", "plain", "unwrap"]


def plain(x: Any) -> Any:
    """A traced array as a plain ndarray view of the same memory; anything else as it is."""
    if isinstance(x, TracedArray):
        return x.view(np.ndarray)
    return x


def unwrap(x: Any) -> Any:
    """``plain`` through lists, tuples and dicts (the arguments of numpy functions)."""
    if isinstance(x, TracedArray):
        return x.view(np.ndarray)
    if isinstance(x, (list, tuple)) and type(x) in (list, tuple):
        return type(x)(unwrap(v) for v in x)
    if isinstance(x, dict):
        return {k: unwrap(v) for k, v in x.items()}
    return x


def _view_method(name: str) -> Callable[..., Any]:
    base = getattr(np.ndarray, name)

    def method(self: TracedArray, *args: Any, **kwargs: Any) -> Any:
        out = base(self, *args, **kwargs)
        if isinstance(out, TracedArray):
            out._bp_stats = self._bp_stats
            shadow = self._bp_shadow
            out._bp_shadow = None if shadow is None else base(shadow, *args, **kwargs)
        return out

    method.__name__ = name
    method.__doc__ = base.__doc__
    return method


def _function_method(function: Callable[..., Any]) -> Callable[..., Any]:
    def method(self: TracedArray, *args: Any, **kwargs: Any) -> Any:
        return function(self, *args, **kwargs)

    method.__name__ = function.__name__
    method.__doc__ = function.__doc__
    return method


class TracedArray(np.ndarray):
    """An ndarray whose operations the trace that made it records (see the module docstring)."""

    _bp_session: Any = None
    _bp_stats: Any = None
    _bp_shadow: Any = None

    def __array_finalize__(self, obj: Any) -> None:
        if obj is None:
            return
        self._bp_session = getattr(obj, "_bp_session", None)
        stats: Any = getattr(obj, "_bp_stats", None)
        # a part of a clean array is clean; anything else is counted again when needed
        same = getattr(obj, "dtype", None) == self.dtype
        self._bp_stats = stats if stats is not None and same and stats.clean else None
        self._bp_shadow = None

    def __array_ufunc__(self, ufunc: np.ufunc, method: str, *inputs: Any, **kwargs: Any) -> Any:
        return numpy_ops.run_ufunc(self._bp_session, ufunc, method, inputs, kwargs)

    def __array_function__(self, func: Any, types: Any, args: Any, kwargs: Any) -> Any:
        return numpy_ops.run_function(self._bp_session, func, args, kwargs)

    def __getitem__(self, key: Any) -> Any:
        key = unwrap(key)
        out = np.ndarray.__getitem__(self, key)
        if isinstance(out, TracedArray):
            stats: Any = self._bp_stats
            out._bp_stats = stats if stats is not None and stats.clean else None
            shadow = self._bp_shadow
            out._bp_shadow = None if shadow is None else np.asarray(shadow[key])
        return out

    def __setitem__(self, key: Any, value: Any) -> None:
        numpy_ops.assign(self, unwrap(key), value)

    def astype(self, dtype: Any, *args: Any, **kwargs: Any) -> Any:  # type: ignore[override]
        return numpy_ops.run_method(self, "astype", np.ndarray.astype, (dtype,) + args, kwargs)

    def fill(self, value: Any) -> None:
        numpy_ops.assign(self, Ellipsis, value)

    reshape = _view_method("reshape")  # type: ignore[assignment]
    transpose = _view_method("transpose")  # type: ignore[assignment]
    swapaxes = _view_method("swapaxes")  # type: ignore[assignment]
    ravel = _view_method("ravel")  # type: ignore[assignment]
    flatten = _view_method("flatten")  # type: ignore[assignment]
    squeeze = _view_method("squeeze")  # type: ignore[assignment]
    copy = _view_method("copy")  # type: ignore[assignment]

    @property
    def T(self) -> Any:  # type: ignore[override]
        return self.transpose()

    sum = _function_method(np.sum)  # type: ignore[assignment]
    mean = _function_method(np.mean)  # type: ignore[assignment]
    max = _function_method(np.max)  # type: ignore[assignment]
    min = _function_method(np.min)  # type: ignore[assignment]
    prod = _function_method(np.prod)  # type: ignore[assignment]
    var = _function_method(np.var)  # type: ignore[assignment]
    std = _function_method(np.std)  # type: ignore[assignment]
    cumsum = _function_method(np.cumsum)  # type: ignore[assignment]
    dot = _function_method(np.dot)  # type: ignore[assignment]
    clip = _function_method(np.clip)  # type: ignore[assignment]


# numpy_ops imports this module for the class; imported here, after the class exists, and used
# by attribute at call time, so either module may be imported first.
from . import numpy_ops  # noqa: E402
