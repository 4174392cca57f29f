"""The torch half of ``trace()``: every torch operation of one call, through torch's public
function-mode hook (``torch.overrides.TorchFunctionMode``), CPU tensors only.

Imported only when a torch tensor or module is among the arguments, so torch is loaded by then.
Inside the mode each torch function call (operators, methods and ``torch.*`` functions alike)
reaches ``_Mode.__torch_function__``; torch disables the mode while it runs, so the call
computes normally. The result's tensors are read bit-exactly through ``tensors.adapters``
(bfloat16 and float8 included) and counted like numpy outputs; names follow numpy's where it
has the operation (``sub`` and ``__sub__`` are ``subtract``, ``mm`` is ``matmul``), in-place
forms (``add_``) carry ``in_place``. Calls without a tensor input (``torch.zeros``) and
property reads (``x.T``) are not recorded.

With ``emulate``, floating-point tensors are held as float64 and each operation goes through
the numpy ``Emulator`` (values handed over as numpy arrays); emulation runs the forward values
only (the results do not carry autograd history).
"""

from __future__ import annotations

from typing import Any, Callable

import numpy as np
import torch
from torch.overrides import TorchFunctionMode

from ..errors import BitprismError, UnsupportedInputError
from ..tensors.adapters import as_array
from .arguments import map_items
from .location import caller, skip_library
from .memo import Memo
from .numpy_ops import VALUE_FUNCTIONS, VALUE_UFUNCS
from .session import Operand, Session, shadow_error
from .stats import ArrayStats

__all__ = ["NAMES", "run_torch"]

skip_library(torch.__file__)

NAMES = {
    "add": "add", "__add__": "add", "__radd__": "add", "__iadd__": "add",
    "sub": "subtract", "subtract": "subtract", "__sub__": "subtract", "__rsub__": "subtract",
    "rsub": "subtract", "__isub__": "subtract",
    "mul": "multiply", "multiply": "multiply", "__mul__": "multiply", "__rmul__": "multiply",
    "__imul__": "multiply",
    "div": "divide", "divide": "divide", "true_divide": "divide", "__truediv__": "divide",
    "__rtruediv__": "divide", "__itruediv__": "divide",
    "neg": "negative", "negative": "negative", "__neg__": "negative",
    "pow": "power", "__pow__": "power", "__rpow__": "power", "float_power": "power",
    "abs": "absolute", "absolute": "absolute", "__abs__": "absolute",
    "matmul": "matmul", "__matmul__": "matmul", "__rmatmul__": "matmul", "mm": "matmul",
    "bmm": "matmul", "mv": "matmul",
    "amax": "max", "amin": "min", "clamp": "clip", "clip": "clip",
    "cat": "concatenate", "concat": "concatenate", "concatenate": "concatenate",
    "eq": "equal", "__eq__": "equal", "ne": "not_equal", "__ne__": "not_equal",
    "gt": "greater", "__gt__": "greater", "ge": "greater_equal", "__ge__": "greater_equal",
    "lt": "less", "__lt__": "less", "le": "less_equal", "__le__": "less_equal",
    "permute": "transpose", "t": "transpose",
}
_NOT_RECORDED = frozenset({
    "__get__", "__set__", "__repr__", "__format__", "__str__", "__len__", "__iter__",
    "__hash__", "__bool__", "__index__", "__int__", "__float__", "item", "tolist", "numpy",
    "size", "dim", "numel", "stride", "data_ptr", "element_size", "is_floating_point",
    "is_complex", "is_contiguous", "__reduce_ex__", "__deepcopy__", "requires_grad_",
    "retain_grad", "backward", "register_hook", "storage_offset", "untyped_storage",
    "__array__", "__dlpack__", "__dlpack_device__", "__contains__", "dtype", "device", "type",
    "__torch_function__", "_make_subclass", "__reversed__",
})
# views of one tensor that are not recorded; its emulated mark and shadow follow it
_PASS = frozenset({"__get__", "detach", "cpu", "detach_"})
_VALUE = frozenset(VALUE_UFUNCS | VALUE_FUNCTIONS | {
    "view", "view_as", "reshape", "reshape_as", "contiguous", "clone", "unsqueeze", "flatten",
    "unflatten", "expand", "expand_as", "__getitem__", "narrow", "select", "index_select",
    "gather", "masked_fill", "relu", "relu_", "chunk", "topk", "max", "min", "unbind",
    "movedim", "zero_", "fill_", "masked_select", "nonzero", "argmax", "argmin", "argsort",
})
_CASTS = frozenset({"half", "float", "double", "bfloat16", "to", "type_as"})
_ACCUMULATE = frozenset({"matmul", "linear", "addmm", "sum", "mean", "einsum", "dot"})


class _State:
    def __init__(self, session: Session) -> None:
        self.session = session
        self.stats = Memo()  # tensor -> (version, ArrayStats)
        self.shadows = Memo()  # tensor -> float64 shadow tensor
        self.emulated = Memo()  # tensor -> version when its values were the format's
        self.entries = Memo()  # tensor -> (version, rounded float64 tensor)


def _tensors(value: Any) -> list[torch.Tensor]:
    out: list[torch.Tensor] = []

    def walk(v: Any) -> None:
        if isinstance(v, torch.Tensor):
            out.append(v)
        elif isinstance(v, (list, tuple)):
            for item in v:
                walk(item)
        elif isinstance(v, dict):
            for item in v.values():
                walk(item)

    walk(value)
    return out


def _map(value: Any, fn: Callable[[Any], Any]) -> Any:
    if isinstance(value, torch.Tensor):
        return fn(value)
    if isinstance(value, (list, tuple)) and type(value) in (list, tuple):
        return type(value)(_map(v, fn) for v in value)
    if isinstance(value, dict) and type(value) is dict:
        return {k: _map(v, fn) for k, v in value.items()}
    if isinstance(value, float):
        return fn(value)
    return value


def _numpy(t: torch.Tensor) -> np.ndarray:
    if t.device.type != "cpu":
        raise BitprismError(f"a torch trace reads CPU tensors; got one on {t.device} "
                            "(move the model and data to the CPU to trace them)")
    return as_array(t)


def _version(t: torch.Tensor) -> int:
    return int(t._version)


def _stats(state: _State, t: torch.Tensor) -> ArrayStats | None:
    known = state.stats.get(t)
    if known is not None and known[0] == _version(t):
        return known[1]  # type: ignore[no-any-return]
    return None


def _operand(state: _State, t: Any) -> Operand:
    if isinstance(t, torch.Tensor):
        op = state.session.operand(_numpy(t), _stats(state, t))
        op.dtype = str(t.dtype).removeprefix("torch.")
        return op
    return state.session.operand(t)


def _name(raw: str) -> tuple[str, bool]:
    in_place = raw.startswith("__i") and raw.endswith("__") or (
        raw.endswith("_") and not raw.endswith("__"))
    base = raw[:-1] if raw.endswith("_") and not raw.endswith("__") else raw
    return NAMES.get(base, NAMES.get(raw, base)), in_place


# ----- emulation ---------------------------------------------------------------------------------
def _to_tensor(arr: Any) -> torch.Tensor:
    values = np.asarray(arr, np.float64)
    return torch.from_numpy(np.ascontiguousarray(values).reshape(values.shape))


def _emulated_input(state: _State, t: torch.Tensor) -> torch.Tensor:
    """A floating-point tensor in the format, as float64: tensors the emulation made as they
    are, others rounded on entry (cached while the tensor is unchanged)."""
    if not (t.is_floating_point()):
        return t
    if t.dtype == torch.float64 and state.emulated.get(t) == _version(t):
        return t
    cached = state.entries.get(t)
    if cached is not None and cached[0] == _version(t):
        return cached[1]  # type: ignore[no-any-return]
    emu = state.session.emulator
    assert emu is not None
    rounded = _to_tensor(emu.entry(_numpy(t)).reshape(tuple(t.shape)))
    state.entries.set(t, (_version(t), rounded))
    return rounded


def _round_tensor(state: _State, t: torch.Tensor) -> torch.Tensor:
    emu = state.session.emulator
    assert emu is not None
    return _to_tensor(emu.round(_numpy(t)).reshape(tuple(t.shape)))


def _dims(value: Any) -> Any:
    if isinstance(value, (list, tuple)):
        return tuple(int(v) for v in value)
    return value


def _accumulate(state: _State, name: str, args: tuple[Any, ...], kwargs: dict[str, Any]) -> Any:
    """The accumulating operations through the numpy ``Emulator``; None when the call has a
    form this does not read (it is then computed in float64 and rounded once)."""
    emu = state.session.emulator
    assert emu is not None
    arrays = [_numpy(a) if isinstance(a, torch.Tensor) else a for a in args]
    if name in ("matmul", "dot") and len(arrays) == 2 and not kwargs:
        return _to_tensor(emu.contract(np.matmul, arrays[0], arrays[1]))
    if name == "linear" and 2 <= len(arrays) <= 3:
        bias = arrays[2] if len(arrays) == 3 else kwargs.get("bias")
        bias = _numpy(bias) if isinstance(bias, torch.Tensor) else bias
        return _to_tensor(emu.contract(np.matmul, arrays[0], np.swapaxes(arrays[1], -1, -2), bias))
    if name == "addmm" and len(arrays) == 3 and not kwargs:
        return _to_tensor(emu.contract(np.matmul, arrays[1], arrays[2], arrays[0]))
    if name in ("sum", "mean") and arrays and isinstance(arrays[0], np.ndarray):
        dim = kwargs.get("dim", arrays[1] if len(arrays) > 1 else None)
        keep = bool(kwargs.get("keepdim", arrays[2] if len(arrays) > 2 else False))
        out = emu.sum(arrays[0], axis=_dims(dim), keepdims=keep, mean=name == "mean")
        return _to_tensor(np.asarray(out))
    if name == "einsum" and arrays and isinstance(arrays[0], str):
        ops = arrays[1:]
        if len(ops) == 1 and isinstance(ops[0], (list, tuple)):
            ops = [_numpy(o) for o in ops[0]]
        return _to_tensor(np.asarray(emu.einsum(arrays[0], ops, {})))
    return None


def _emulated(state: _State, func: Callable[..., Any], name: str, in_place: bool,
              args: tuple[Any, ...], kwargs: dict[str, Any]) -> Any:
    emu = state.session.emulator
    assert emu is not None

    def convert(v: Any) -> Any:
        if isinstance(v, float):
            return emu.constant(v)
        return _emulated_input(state, v)

    if in_place and args and isinstance(args[0], torch.Tensor):
        conv_args = (args[0],) + tuple(_map(a, convert) for a in args[1:])
    else:
        conv_args = tuple(_map(a, convert) for a in args)
    conv_kwargs = {k: _map(v, convert) for k, v in kwargs.items()}
    floating = any(t.is_floating_point() for t in _tensors((conv_args, conv_kwargs)))
    if floating and name in _ACCUMULATE and not in_place:
        done = _accumulate(state, name, conv_args, conv_kwargs)
        if done is not None:
            return done
    with torch.no_grad():
        result = func(*conv_args, **conv_kwargs)
    if name in _VALUE or not any(t.is_floating_point() for t in _tensors(result)):
        return result
    if in_place and isinstance(result, torch.Tensor) and result is args[0]:
        rounded = _round_tensor(state, result)
        with torch.no_grad():
            result.copy_(rounded.to(result.dtype))
        return result
    return _map(result, lambda t: _round_tensor(state, t)
                if isinstance(t, torch.Tensor) and t.is_floating_point() else t)


# ----- shadows -----------------------------------------------------------------------------------
def _shadow_input(state: _State, v: Any) -> Any:
    if isinstance(v, torch.Tensor):
        s = state.shadows.get(v)
        if s is not None:
            return s
        return v.detach().double() if v.is_floating_point() else v.detach()
    return v


def _shadow(state: _State, func: Callable[..., Any], raw: str, args: tuple[Any, ...],
            kwargs: dict[str, Any]) -> Any:
    sargs = _map(args, lambda v: _shadow_input(state, v) if isinstance(v, torch.Tensor) else v)
    skw = {k: _map(v, lambda x: _shadow_input(state, x) if isinstance(x, torch.Tensor) else x)
           for k, v in kwargs.items()}
    if raw in _CASTS and sargs and isinstance(sargs[0], torch.Tensor):
        return sargs[0].clone()  # the shadow keeps float64: a cast is what it measures
    with torch.no_grad():
        out = func(*sargs, **skw)
    return _map(out, lambda t: t.double() if isinstance(t, torch.Tensor) and t.is_floating_point()
                else t)


# ----- one call ----------------------------------------------------------------------------------
def _assign(state: _State, func: Callable[..., Any], args: tuple[Any, ...],
            kwargs: dict[str, Any]) -> Any:
    """``t[key] = value``: the value rounded when emulating, the shadow kept in step."""
    session = state.session
    target = args[0]
    shadow = state.shadows.get(target) if isinstance(target, torch.Tensor) else None
    if session.emulator is not None and len(args) == 3:
        value = args[2]
        value = session.emulator.constant(value) if isinstance(value, float) else (
            _emulated_input(state, value) if isinstance(value, torch.Tensor) else value)
        args = (args[0], args[1], value)
    result = func(*args, **kwargs)
    if shadow is not None and len(args) == 3:
        shadow[args[1]] = _shadow_input(state, args[2])
    return result


def _remember(state: _State, outputs: list[torch.Tensor], each: list[ArrayStats],
              shadows: list[Any]) -> None:
    session = state.session
    for t, s, sh in zip(outputs, each, shadows):
        state.stats.set(t, (_version(t), s))
        if session.emulator is not None and t.dtype == torch.float64:
            state.emulated.set(t, _version(t))
        if isinstance(sh, torch.Tensor) and t.is_floating_point():
            state.shadows.set(t, sh)


def _call(state: _State, func: Callable[..., Any], args: tuple[Any, ...],
          kwargs: dict[str, Any]) -> Any:
    session = state.session
    raw = getattr(func, "__name__", "")
    if raw == "__setitem__":
        return _assign(state, func, args, kwargs)
    if raw in _PASS:
        result = func(*args, **kwargs)
        if isinstance(result, torch.Tensor) and args and isinstance(args[0], torch.Tensor):
            if state.emulated.get(args[0]) is not None and result.dtype == torch.float64:
                state.emulated.set(result, _version(result))
            shadow = state.shadows.get(args[0])
            if shadow is not None:
                state.shadows.set(result, func(shadow, *args[1:], **kwargs))
        return result
    inputs = _tensors((args, kwargs))
    if raw in _NOT_RECORDED or not inputs:
        result = func(*args, **kwargs)
        if session.emulator is not None and not inputs and raw not in _NOT_RECORDED:
            result = _map(result, lambda t: _round_tensor(state, t)
                          if isinstance(t, torch.Tensor) and t.is_floating_point() else t)
        return result
    location = caller()
    name, in_place = _name(raw)
    in_place = in_place or kwargs.get("inplace") is True  # F.relu(x, inplace=True)
    operands = [_operand(state, t) for t in inputs]
    operands += [session.operand(a) for a in args if isinstance(a, (bool, int, float))]
    if in_place and operands and isinstance(args[0], torch.Tensor):
        first = operands[0]
        if first.stats.nan or first.stats.inf or first.value.nbytes <= (
                session.captures.budget - session.captures.used):
            first.value = first.value.copy()
    shadow = _shadow(state, func, raw, args, kwargs) if session.shadow else None
    if session.emulator is not None:
        result = _emulated(state, func, name, in_place, args, kwargs)
    else:
        result = func(*args, **kwargs)
    outputs = _tensors(result)
    if not outputs:
        return result
    readable = [_numpy(t) for t in outputs]
    each = [session.counter.stats(r) for r in readable]
    stats = each[0]
    for s in each[1:]:
        stats = stats + s
    shadows: list[Any] = _tensors(shadow) if shadow is not None else []
    if len(shadows) != len(outputs):
        shadows = [None] * len(outputs)
    error = None
    if session.shadow:
        errs = [shadow_error(r.astype(np.float64), _numpy(s)) for r, s, t in
                zip(readable, shadows, outputs) if s is not None and t.is_floating_point()]
        if errs:
            error = (max(e[0] for e in errs), max(e[1] for e in errs))
    elementwise = isinstance(getattr(np, name, None), np.ufunc) and getattr(np, name).signature is None
    emulated = session.emulator is not None and any(t.is_floating_point() for t in outputs)
    session.add(name, location, operands, readable, stats, elementwise=elementwise,
                in_place=in_place, emulated=emulated, shadow=error)
    _remember(state, outputs, each, shadows)
    return result


class _Mode(TorchFunctionMode):
    def __init__(self, state: _State) -> None:
        super().__init__()
        self.state = state

    def __torch_function__(self, func: Any, types: Any, args: tuple[Any, ...] = (),
                           kwargs: dict[str, Any] | None = None) -> Any:
        kwargs = kwargs or {}
        if not self.state.session.active:
            return func(*args, **kwargs)
        return _call(self.state, func, args, kwargs)


def _prepare(state: _State, value: Any, where: str) -> Any:
    """An argument as the traced call gets it: tensors checked (CPU, real), rounded on entry
    when emulating, shadowed; lists, tuples and dicts walked; anything else untouched."""
    session = state.session

    def leaf(item: Any, name: str) -> Any:
        if isinstance(item, np.ndarray):
            raise UnsupportedInputError(
                f"{name}: a torch trace takes torch tensors; got a numpy array beside them "
                "(trace numpy and torch code separately, or pass torch.from_numpy(...))")
        if not isinstance(item, torch.Tensor):
            return item
        if item.device.type != "cpu":
            raise BitprismError(f"{name}: a torch trace reads CPU tensors; got one on "
                                f"{item.device}")
        if item.is_complex():
            raise UnsupportedInputError(f"{name}: a trace reads real numbers; got a complex "
                                        f"tensor ({item.dtype})")
        arr = _numpy(item)
        out = item
        if session.emulator is not None and item.is_floating_point():
            out = _to_tensor(session.emulator.entry(arr).reshape(tuple(item.shape)))
            state.emulated.set(out, _version(out))
        state.stats.set(out, (_version(out), session.counter.stats(_numpy(out))))
        if session.shadow and item.is_floating_point():
            state.shadows.set(out, item.detach().double())
        return out

    return map_items(value, leaf, where)


def run_torch(session: Session, fn: Callable[..., Any], args: tuple[Any, ...],
              kwargs: dict[str, Any], names: list[str]) -> tuple[Any, Any]:
    """(result, shadow result) of ``fn(*args, **kwargs)`` with every torch operation
    recorded in ``session``; the mode is gone when this returns or raises."""
    state = _State(session)
    prepared = tuple(_prepare(state, a, names[i]) for i, a in enumerate(args))
    prepared_kw = {k: _prepare(state, v, f"kwargs[{k!r}]") for k, v in kwargs.items()}
    try:
        with _Mode(state):
            result = fn(*prepared, **prepared_kw)
    finally:
        session.active = False
    shadow = None
    if session.shadow:
        shadow = _map(result, lambda t: state.shadows.get(t) if isinstance(t, torch.Tensor) and
                      state.shadows.get(t) is not None else t)
    return result, shadow
