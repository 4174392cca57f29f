"""One intercepted numpy call: compute it on plain arrays (emulated when asked), shadow it,
record it, and wrap the results so the trace follows them.

``run_ufunc`` serves ``TracedArray.__array_ufunc__`` (NEP 13), ``run_function``
``__array_function__`` (NEP 18), ``run_method`` the overridden ``astype``, ``assign`` item
assignment. Each reads the caller's location first (``location.caller``), then:

1. the inputs: arrays (traced or not) and Python numbers become ``session.Operand``s;
2. ``out=`` arrays that share memory with an input: the input is counted (and copied, when a
   capture might need it) before the operation overwrites it;
3. the computation: on plain ndarray views of the same memory, or, with an emulator, on float64
   values rounded to the format (``_emulated``; inputs from outside the trace and constants are
   rounded on entry);
4. with a shadow, the same call on the float64 shadows of the inputs;
5. the record (``Session.add``), and the results wrapped as ``TracedArray`` with their counts
   and shadows (an ``out=`` argument is returned as the very object passed, as numpy does).

To add an operation's special handling: a ufunc whose results are always among its inputs'
values goes in ``VALUE_UFUNCS``, such a function in ``VALUE_FUNCTIONS`` (no rounding needed when
emulating); a function whose Python-number arguments are data (``np.where(m, x, 0.1)``) in
``ROUND_SCALARS``; an accumulating one gets a branch in ``_emulated_function`` that calls an
``Emulator`` method; a name numpy spells differently from the one we show goes in ``NAMES``.
"""

from __future__ import annotations

import inspect
from functools import lru_cache
from typing import Any, Callable, Sequence

import numpy as np

from .arguments import real_dtype
from .location import caller
from .session import Operand, Session, shadow_error
from .stats import ArrayStats
from .traced_array import TracedArray, plain, unwrap

__all__ = [
    "NAMES",
    "ROUND_SCALARS",
    "VALUE_FUNCTIONS",
    "VALUE_UFUNCS",
    "assign",
    "run_function",
    "run_method",
    "run_ufunc",
    "wrap",
]

# ufuncs whose results are values of their inputs (or exact small integers): no rounding
VALUE_UFUNCS = frozenset({
    "maximum", "minimum", "fmax", "fmin", "negative", "positive", "absolute", "fabs", "sign",
    "copysign", "floor", "ceil", "trunc", "rint", "conjugate",
})
VALUE_FUNCTIONS = frozenset({
    "reshape", "transpose", "ravel", "squeeze", "expand_dims", "moveaxis", "swapaxes",
    "concatenate", "stack", "vstack", "hstack", "dstack", "column_stack", "split",
    "array_split", "hsplit", "vsplit", "where", "take", "take_along_axis", "broadcast_to",
    "broadcast_arrays", "flip", "fliplr", "flipud", "roll", "tile", "repeat", "sort", "max",
    "min", "nanmax", "nanmin", "clip", "copy", "atleast_1d", "atleast_2d", "atleast_3d",
    "diagonal", "diag", "triu", "tril", "zeros_like", "ones_like", "full_like", "pad",
    "partition", "compress", "extract", "unique", "append", "delete", "insert", "select",
    "choose", "rot90", "block",
})
ROUND_SCALARS = frozenset({"where", "clip", "full_like", "pad", "select", "insert", "append"})
ELEMENTWISE_FUNCTIONS = frozenset({"where", "clip"})
NAMES = {"amax": "max", "amin": "min", "true_divide": "divide", "concat": "concatenate",
         "around": "round", "round_": "round"}
_REDUCTIONS = {"add": "sum", "multiply": "prod", "maximum": "max", "minimum": "min"}


def _active(session: Session | None) -> bool:
    return session is not None and session.active


def _real(x: Any) -> bool:
    """An array (or numpy scalar) of real numbers a probe reads exactly."""
    return isinstance(x, np.ndarray | np.generic) and real_dtype(x.dtype)


def _floating(x: Any) -> bool:
    if isinstance(x, np.ndarray | np.generic):
        return x.dtype.kind == "f" or x.dtype.kind == "V" and real_dtype(x.dtype)
    return isinstance(x, float)


def _arrays(values: Any) -> list[Any]:
    """The array arguments of a call, in order (through lists and tuples)."""
    out: list[Any] = []

    def walk(v: Any) -> None:
        if isinstance(v, np.ndarray):
            out.append(v)
        elif isinstance(v, (list, tuple)) and type(v) in (list, tuple):
            for item in v:
                walk(item)

    walk(values)
    return out


def _operand(session: Session, x: Any) -> Operand | None:
    if isinstance(x, TracedArray):
        op = session.operand(plain(x), x._bp_stats)
        op.owner = x
        return op
    if isinstance(x, np.ndarray | np.generic):
        return session.operand(x) if _real(x) else None
    if isinstance(x, (bool, int, float)):
        return session.operand(x)
    return None


# ----- emulation and shadows ---------------------------------------------------------------------
def _emulated_value(session: Session, v: Any, round_floats: bool) -> Any:
    """A value as the emulated computation takes it: traced float64 arrays as they are (their
    values are the format's); other floating-point arrays rounded on entry; Python and numpy
    float numbers rounded when ``round_floats``; everything else untouched."""
    emu = session.emulator
    assert emu is not None
    if isinstance(v, TracedArray):
        p = plain(v)
        return emu.entry(p) if _floating(p) and p.dtype != np.float64 else p
    if isinstance(v, np.ndarray):
        return emu.entry(v) if _floating(v) else v
    if isinstance(v, (list, tuple)) and type(v) in (list, tuple):
        return type(v)(_emulated_value(session, item, round_floats) for item in v)
    if round_floats and isinstance(v, float):
        return emu.constant(v)
    if round_floats and isinstance(v, np.floating):
        return np.float64(emu.constant(float(v)))
    return v


def _shadow_value(v: Any) -> Any:
    """A value as the float64 shadow computation takes it."""
    if isinstance(v, TracedArray):
        if v._bp_shadow is not None:
            return v._bp_shadow
        p = plain(v)
        return p.astype(np.float64) if _floating(p) else p
    if isinstance(v, np.ndarray):
        return v.astype(np.float64) if _floating(v) else v
    if isinstance(v, (list, tuple)) and type(v) in (list, tuple):
        return type(v)(_shadow_value(item) for item in v)
    if isinstance(v, np.floating):
        return np.float64(v)
    return v


# ----- results -----------------------------------------------------------------------------------
def wrap(session: Session, value: Any, stats: ArrayStats | None, shadow: Any) -> Any:
    """A result array as a ``TracedArray`` of ``session`` with its counts and shadow."""
    if not isinstance(value, np.ndarray):
        return value
    out = value.view(TracedArray) if type(value) is np.ndarray else value
    if isinstance(out, TracedArray):
        out._bp_session = session
        out._bp_stats = stats
        out._bp_shadow = shadow if isinstance(shadow, np.ndarray) and _floating(value) else None
    return out


def _flat(result: Any) -> list[Any]:
    if isinstance(result, (tuple, list)):
        return [r for item in result for r in _flat(item)]
    return [result]


def _finish(session: Session, name: str, location: tuple[str, int, str], operands: list[Operand],
            result: Any, shadow: Any, *, elementwise: bool, in_place: bool,
            outs: Sequence[Any] = (), plain_outs: Sequence[Any] = ()) -> Any:
    """Record a computed call and wrap its results (see the module docstring, steps 5)."""
    results = _flat(result)
    shadows = _flat(shadow) if shadow is not None else [None] * len(results)
    if len(shadows) != len(results):
        shadows = [None] * len(results)
    readable = [r for r in results if isinstance(r, np.ndarray | np.generic) and _real(r)]
    if not readable:
        return result
    counter = session.counter
    narrow = session.emulator is not None and session.emulator.fits_float32
    each = [counter.stats(r, narrow) for r in readable]
    stats = each[0]
    for s in each[1:]:
        stats = stats + s
    error = None
    if session.shadow:
        pairs = [(r, s) for r, s in zip(results, shadows) if s is not None and _floating(r)]
        if pairs:
            errs = [shadow_error(np.asarray(r, np.float64), s) for r, s in pairs]
            error = (max(e[0] for e in errs), max(e[1] for e in errs))
    emulated = session.emulator is not None and any(_floating(r) for r in readable)
    session.add(name, location, operands, [np.asarray(r) for r in readable], stats,
                elementwise=elementwise, in_place=in_place, emulated=emulated, shadow=error)
    stat_of = {id(r): s for r, s in zip(readable, each)}
    wrapped = []
    for r, s in zip(results, shadows):
        original = next((o for o, p in zip(outs, plain_outs) if p is r), None)
        if isinstance(original, TracedArray):
            original._bp_stats = stat_of.get(id(r))
            original._bp_shadow = s if isinstance(s, np.ndarray) else None
            wrapped.append(original)
        elif original is not None:
            wrapped.append(original)
        else:
            wrapped.append(wrap(session, r, stat_of.get(id(r)), s))
    if isinstance(result, tuple):
        return type(result)(*wrapped) if hasattr(result, "_fields") else tuple(wrapped)
    if isinstance(result, list):
        return wrapped
    return wrapped[0]


def _protect(session: Session, operands: list[Operand], plain_outs: Sequence[Any]) -> None:
    """Before an ``out=`` overwrites an input: count it, and copy it when it holds NaN/Inf
    (to tell what the operation creates) or a capture may still want it."""
    room = session.captures.budget - session.captures.used
    for op in operands:
        if not isinstance(op.value, np.ndarray):
            continue
        if any(isinstance(o, np.ndarray) and np.may_share_memory(o, op.value) for o in plain_outs):
            stats = op.stats
            if stats.nan or stats.inf or op.value.nbytes <= room:
                op.value = op.value.copy()


# ----- ufuncs ------------------------------------------------------------------------------------
def _ufunc_name(ufunc: np.ufunc, method: str) -> str:
    name = NAMES.get(ufunc.__name__, ufunc.__name__)
    if method == "__call__":
        return name
    if method == "reduce" and ufunc.__name__ in _REDUCTIONS:
        return _REDUCTIONS[ufunc.__name__]
    return f"{name}.{method}"


def _emulated_ufunc(session: Session, ufunc: np.ufunc, method: str, inputs: Sequence[Any],
                    kwargs: dict[str, Any]) -> Any:
    emu = session.emulator
    assert emu is not None
    kw = {k: v for k, v in kwargs.items() if k not in ("out", "casting", "subok")}
    if "dtype" in kw and np.dtype(kw["dtype"]).kind == "f":
        del kw["dtype"]
    conv = [_emulated_value(session, v, True) for v in inputs]
    call = getattr(ufunc, method)
    if not any(_floating(v) for v in conv) or ufunc.__name__ in VALUE_UFUNCS:
        return call(*conv, **kw)
    if method == "reduce" and ufunc.__name__ == "add":
        return emu.sum(conv[0], axis=kw.get("axis", 0), keepdims=bool(kw.get("keepdims", False)),
                       where=kw.get("where", True), initial=kw.get("initial"))
    if method == "__call__" and ufunc.__name__ == "matmul" and len(conv) == 2 and not kw:
        return emu.contract(np.matmul, conv[0], conv[1])
    if method == "__call__":
        return emu.ufunc(ufunc, conv, kw)
    return emu.finish(call(*conv, **kw))


def _into_outs(result: Any, plain_outs: Sequence[Any], where: Any) -> Any:
    """Write an emulated result into the ``out=`` arrays; the plain outs as the result."""
    results = result if isinstance(result, tuple) else (result,)
    for r, o in zip(results, plain_outs):
        if o is not None:
            np.copyto(o, r, casting="unsafe", where=True if where is None else where)
    filled = tuple(o if o is not None else r for r, o in zip(results, plain_outs))
    return filled if isinstance(result, tuple) else filled[0]


def run_ufunc(session: Session | None, ufunc: np.ufunc, method: str, inputs: tuple[Any, ...],
              kwargs: dict[str, Any]) -> Any:
    """``TracedArray.__array_ufunc__``: one ufunc call, recorded."""
    if session is None or not session.active:
        return getattr(ufunc, method)(*unwrap(inputs), **unwrap(kwargs))
    location = caller()
    outs = tuple(kwargs.get("out") or ())
    if method == "at":
        outs = (inputs[0],)
    plain_outs = tuple(plain(o) for o in outs)
    in_place = any(o is not None for o in plain_outs)
    operands = [op for op in (_operand(session, x) for x in inputs) if op is not None]
    if in_place:
        _protect(session, operands, plain_outs)
    if method == "at":
        ufunc.at(plain_outs[0], *unwrap(inputs[1:]), **unwrap(kwargs))
        result = plain_outs[0]
        if session.emulator is not None and _floating(result):
            result[...] = session.emulator.round(result).reshape(result.shape)
    elif session.emulator is not None:
        result = _emulated_ufunc(session, ufunc, method, inputs, kwargs)
        if in_place:
            result = _into_outs(result, plain_outs, kwargs.get("where"))
    else:
        plain_kwargs = dict(kwargs)
        if in_place:
            plain_kwargs["out"] = plain_outs
        result = getattr(ufunc, method)(*unwrap(inputs), **plain_kwargs)
    shadow = None
    if session.shadow and method != "at":
        kw = {k: v for k, v in kwargs.items() if k not in ("out", "dtype", "casting", "subok")}
        with np.errstate(all="ignore"):
            shadow = getattr(ufunc, method)(*[_shadow_value(v) for v in inputs], **kw)
    elementwise = method == "__call__" and ufunc.signature is None
    final = _finish(session, _ufunc_name(ufunc, method), location, operands, result, shadow,
                    elementwise=elementwise, in_place=in_place,
                    outs=outs, plain_outs=plain_outs)
    return None if method == "at" else final


# ----- functions ---------------------------------------------------------------------------------
@lru_cache(maxsize=256)
def _signature(func: Callable[..., Any]) -> inspect.Signature | None:
    try:
        return inspect.signature(func)
    except (TypeError, ValueError):
        return None


def _bound(func: Callable[..., Any], args: Sequence[Any], kwargs: dict[str, Any]) -> dict[str, Any]:
    sig = _signature(func)
    if sig is None:
        return {}
    try:
        return dict(sig.bind(*args, **kwargs).arguments)
    except TypeError:
        return {}


def _emulated_function(session: Session, name: str, func: Callable[..., Any],
                       args: Sequence[Any], kwargs: dict[str, Any]) -> Any:
    emu = session.emulator
    assert emu is not None
    floats = name in ROUND_SCALARS
    conv_args = [_emulated_value(session, a, floats) for a in args]
    conv_kwargs = {k: _emulated_value(session, v, floats) for k, v in kwargs.items()}
    if not any(_floating(a) for a in _arrays(conv_args) + _arrays(list(conv_kwargs.values()))):
        return func(*conv_args, **conv_kwargs)
    if name in ("sum", "mean"):
        b = _bound(func, conv_args, conv_kwargs)
        if "a" in b and _floating(np.asarray(b["a"])):
            return emu.sum(b["a"], axis=b.get("axis"), keepdims=bool(b.get("keepdims", False)),
                           where=b.get("where", True), initial=b.get("initial"),
                           mean=name == "mean")
    if name == "dot" and len(conv_args) == 2 and not conv_kwargs:
        return emu.contract(np.dot, conv_args[0], conv_args[1])
    if name == "einsum" and conv_args and isinstance(conv_args[0], str):
        return emu.einsum(conv_args[0], conv_args[1:], conv_kwargs)
    if name in VALUE_FUNCTIONS:
        return func(*conv_args, **conv_kwargs)
    return emu.finish(func(*conv_args, **conv_kwargs))


def _call(session: Session, name: str, func: Callable[..., Any], args: Sequence[Any],
          kwargs: dict[str, Any], shadow_of: Callable[[], Any] | None = None) -> Any:
    location = caller()
    outs = tuple(_arrays([kwargs.get("out")])) if kwargs.get("out") is not None else ()
    plain_outs = tuple(plain(o) for o in outs)
    operands = [op for op in (_operand(session, x) for x in _arrays(list(args) +
                                                                      list(kwargs.values())))
                if op is not None and not any(op.value is p for p in plain_outs)]
    if plain_outs:
        _protect(session, operands, plain_outs)
    rest = {k: v for k, v in kwargs.items() if k != "out"}
    if session.emulator is not None:
        result = _emulated_function(session, name, func, args, rest)
        if plain_outs:
            result = _into_outs(result, plain_outs, None)
    else:
        result = func(*unwrap(tuple(args)), **unwrap(kwargs))
    if result is None:  # an in-place function (np.copyto, np.put, ...): counted again later
        for a in _arrays(list(args)):
            if isinstance(a, TracedArray):
                a._bp_stats = None
                a._bp_shadow = None
        return None
    shadow = None
    if session.shadow:
        with np.errstate(all="ignore"):
            shadow = shadow_of() if shadow_of is not None else func(
                *_shadow_value(list(args)), **{k: _shadow_value(v) for k, v in rest.items()})
    return _finish(session, name, location, operands, result, shadow,
                   elementwise=name in ELEMENTWISE_FUNCTIONS, in_place=bool(plain_outs),
                   outs=outs, plain_outs=plain_outs)


def run_function(session: Session | None, func: Any, args: tuple[Any, ...],
                 kwargs: dict[str, Any]) -> Any:
    """``TracedArray.__array_function__``: one numpy function call, recorded."""
    if session is None or not session.active:
        return func(*unwrap(args), **unwrap(kwargs))
    name = NAMES.get(func.__name__, func.__name__)
    return _call(session, name, func, args, kwargs)


def run_method(arr: TracedArray, name: str, method: Callable[..., Any], args: tuple[Any, ...],
               kwargs: dict[str, Any]) -> Any:
    """An overridden ndarray method (``astype``), recorded like a function."""
    session = arr._bp_session
    if not _active(session):
        return method(plain(arr), *unwrap(args), **unwrap(kwargs))
    assert session is not None
    target = np.dtype(args[0]) if args else None

    def shadow() -> Any:
        source = _shadow_value(arr)
        if target is not None and target.kind == "f":
            return np.array(source, np.float64, copy=True)
        return None

    return _call(session, name, lambda a, *rest, **kw: method(a, *rest, **kw), (arr,) + args,
                 kwargs, shadow)


def assign(arr: TracedArray, key: Any, value: Any) -> None:
    """``arr[key] = value`` (and ``arr.fill``): the value rounded when emulating, the shadow
    kept in step, the counts forgotten (counted again when needed)."""
    session = arr._bp_session
    base = plain(arr)
    if _active(session) and session is not None and session.emulator is not None and _floating(base):
        base[key] = _emulated_value(session, value, True)
    else:
        base[key] = unwrap(value)
    if arr._bp_shadow is not None:
        arr._bp_shadow[key] = _shadow_value(value)
    arr._bp_stats = None
