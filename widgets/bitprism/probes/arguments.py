"""The arguments a probe accepts, checked once with messages that name the argument."""

from __future__ import annotations

from typing import Any, Callable, Iterator

import numpy as np

from ..errors import BitprismError, UnsupportedInputError
from ..formats import Format, format_of_dtype, get_format
from ..numerics.options import CastOptions, resolve_options
from .capture import check_capture_mib
from .emulate import Emulator
from .stats import check_formats

__all__ = [
    "DEFAULT_FORMATS",
    "Settings",
    "check_array",
    "check_callable",
    "holds_torch",
    "map_items",
    "probe_settings",
    "real_dtype",
    "walk",
]

DEFAULT_FORMATS = ("bfloat16", "float16", "float8_e4m3fn", "float8_e5m2")


class Settings:
    """The checked settings of one trace or watch."""

    def __init__(self, formats: tuple[Format, ...], options: CastOptions,
                 emulate: Format | None, accumulate: Format | None, chunk: int | None,
                 shadow: bool, capture_bytes: int) -> None:
        self.formats = formats
        self.options = options
        self.emulate = emulate
        self.accumulate = accumulate
        self.chunk = chunk
        self.shadow = shadow
        self.capture_bytes = capture_bytes

    def emulator(self) -> Emulator | None:
        if self.emulate is None:
            return None
        assert self.accumulate is not None
        return Emulator(self.emulate, self.options, self.accumulate, self.chunk)


def probe_settings(formats: Any, rounding: Any, overflow: Any, subnormals: Any, seed: Any,
                   emulate: Any = None, accumulate: Any = None, chunk: Any = 32,
                   shadow: Any = None, capture_mib: Any = 64) -> Settings:
    """Check every setting of a probe; a ``BitprismError`` names the first bad one."""
    options = resolve_options(None, rounding, overflow, subnormals, seed)
    fmts = check_formats(DEFAULT_FORMATS if formats is None else formats)
    emu = None if emulate is None else _format("emulate", emulate)
    if accumulate is not None and emu is None:
        raise BitprismError(f"accumulate applies to an emulated run; pass emulate=... as well "
                            f"(got accumulate={accumulate!r}, emulate=None)")
    acc = None if emu is None else emu if accumulate is None else _format("accumulate", accumulate)
    if chunk is not None and (isinstance(chunk, bool) or not isinstance(chunk, int) or chunk < 1):
        raise BitprismError(f"chunk must be a positive int (terms per rounding of the "
                            f"accumulator) or None (round once at the end); got {chunk!r}")
    if shadow not in (None, "float64"):
        raise BitprismError(f"shadow must be None or 'float64'; got {shadow!r}")
    if emu is not None and emu not in fmts:
        fmts = fmts + (emu,)
    return Settings(fmts, options, emu, acc, chunk, shadow == "float64",
                    check_capture_mib(capture_mib))


def _format(arg: str, spec: Any) -> Format:
    try:
        fmt = get_format(spec)
    except BitprismError as exc:
        raise BitprismError(f"{arg}: {exc}") from None
    if not fmt.signed or not fmt.has_zero:
        raise BitprismError(f"{arg} must be a signed format with a zero; got {spec!r}")
    return fmt


def walk(value: Any, where: str) -> Iterator[tuple[str, Any]]:
    """(name, item) for ``value`` and every item of its lists, tuples and dicts."""
    yield where, value
    if isinstance(value, (list, tuple)):
        for i, item in enumerate(value):
            yield from walk(item, f"{where}[{i}]")
    elif isinstance(value, dict):
        for key, item in value.items():
            yield from walk(item, f"{where}[{key!r}]")


def map_items(value: Any, leaf: Callable[[Any, str], Any], where: str,
              any_tuple: bool = False) -> Any:
    """``value`` with ``leaf(item, name)`` in place of every item that is not a plain list,
    tuple or dict (those are rebuilt around their mapped items; ``any_tuple``: every tuple
    is, a named tuple keeping its type, another subclass becoming a plain tuple)."""
    kind = type(value)
    if kind is list:
        return [map_items(v, leaf, f"{where}[{i}]", any_tuple) for i, v in enumerate(value)]
    if kind is tuple or any_tuple and isinstance(value, tuple):
        items = [map_items(v, leaf, f"{where}[{i}]", any_tuple) for i, v in enumerate(value)]
        return kind(*items) if hasattr(value, "_fields") else tuple(items)
    if kind is dict:
        return {k: map_items(v, leaf, f"{where}[{k!r}]", any_tuple) for k, v in value.items()}
    return leaf(value, where)


def holds_torch(args: tuple[Any, ...], kwargs: dict[str, Any]) -> bool:
    """Whether any argument (or an item of one) is a torch tensor or module, told by the
    class's module name so torch is not imported to ask."""
    for root, name in ((args, "args"), (kwargs, "kwargs")):
        for _, item in walk(root, name):
            module = type(item).__module__ or ""
            if module == "torch" or module.startswith("torch."):
                return True
    return False


def real_dtype(dtype: np.dtype) -> bool:
    """Whether a probe reads this dtype exactly: float (up to 64 bits), ml_dtypes float,
    integer or bool."""
    kind = dtype.kind
    if kind in "iub" or kind == "f" and dtype.itemsize <= 8:
        return True
    return kind == "V" and dtype.names is None and format_of_dtype(dtype) is not None


def check_array(arr: np.ndarray, where: str) -> None:
    """Refuse the arrays a probe cannot read exactly: complex, object, text and the like."""
    if real_dtype(arr.dtype):
        return
    what = {"c": "complex", "O": "object", "U": "text", "S": "bytes", "M": "datetime",
            "m": "timedelta"}.get(arr.dtype.kind, f"{arr.dtype}")
    raise UnsupportedInputError(
        f"{where}: a probe traces real numbers (float, ml_dtypes float, int or bool arrays); "
        f"got a {what} array of dtype {arr.dtype!r}"
    )


def check_callable(fn: Any, what: str = "fn") -> Callable[..., Any]:
    if not callable(fn):
        raise BitprismError(f"{what} must be a callable (the function to trace); got {fn!r}")
    return fn  # type: ignore[no-any-return]
