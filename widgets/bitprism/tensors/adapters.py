"""Whatever tensor a person holds -> a numpy array with the same bits, copied only when unavoidable.

``as_array`` is the one door into the tensor layer. It keeps bit patterns exactly: floating-point
data is never routed through another float type, so a NaN payload or a float8 code arrives as
it was stored. Data that cannot be inspected exactly (complex, text, Python objects, long
double, 64-bit integers beyond 2**53) is refused with a message that says what is accepted.

torch, JAX and dask are never imported here at module import time: their objects are recognised
by duck typing and ``type(obj).__module__``, and torch is imported only once the object in hand
already is a torch tensor (so torch is loaded anyway).
"""

from __future__ import annotations

import os
import sys
from collections.abc import Mapping
from functools import lru_cache
from typing import Any

import numpy as np

from .. import ml_types
from ..errors import BitprismError, UnsupportedInputError
from .file_checks import shown_path
from .files import open_tensor

__all__ = ["as_array", "is_dask_array"]

# float64 holds every integer of magnitude <= 2**53 exactly (53-bit significand, IEEE 754
# binary64); beyond that some integers are skipped, so larger values are refused.
_EXACT_INT_LIMIT = 1 << 53  # 9007199254740992

_ACCEPTED = (
    "bitprism accepts float arrays (numpy and ml_dtypes types), integer and bool arrays, "
    "torch and JAX tensors, array-likes, lists of numbers, and .npy/.npz/.safetensors paths"
)

# ml_dtypes' float types, by name (those present in the installed version are used).
_ML_FLOAT_NAMES = (
    "bfloat16",
    "float8_e3m4",
    "float8_e4m3",
    "float8_e4m3b11fnuz",
    "float8_e4m3fn",
    "float8_e4m3fnuz",
    "float8_e5m2",
    "float8_e5m2fnuz",
    "float8_e5m3fnu",
    "float8_e8m0fnu",
    "float6_e2m3fn",
    "float6_e3m2fn",
    "float4_e2m1fn",
)
# ml_dtypes' narrow integers (one value per byte) -> the numpy integer that holds them exactly.
_ML_INT_NAMES = {
    "int1": "int8",
    "int2": "int8",
    "int4": "int8",
    "uint1": "uint8",
    "uint2": "uint8",
    "uint4": "uint8",
}
_ML_COMPLEX_NAMES = ("complex32", "bcomplex32")

# torch float dtype name -> (integer dtype of the same width to reinterpret through, the
# numpy / ml_dtypes dtype with the same bit layout). torch's float8 names follow the same
# convention as ml_dtypes (fn: no Inf; fnuz: no Inf, no negative zero; e8m0fnu: OCP MX scale).
_TORCH_FLOATS: dict[str, tuple[str, str]] = {
    "float64": ("int64", "float64"),
    "float32": ("int32", "float32"),
    "float16": ("int16", "float16"),
    "bfloat16": ("int16", "bfloat16"),
    "float8_e4m3fn": ("uint8", "float8_e4m3fn"),
    "float8_e5m2": ("uint8", "float8_e5m2"),
    "float8_e4m3fnuz": ("uint8", "float8_e4m3fnuz"),
    "float8_e5m2fnuz": ("uint8", "float8_e5m2fnuz"),
    "float8_e8m0fnu": ("uint8", "float8_e8m0fnu"),
}
_TORCH_PLAIN = frozenset(
    ["bool", "int8", "int16", "int32", "int64", "uint8", "uint16", "uint32", "uint64"]
)


@lru_cache(maxsize=None)
def _ml_float_dtypes() -> frozenset[np.dtype]:
    ml = ml_types.module()
    return frozenset(
        np.dtype(getattr(ml, n)) for n in _ML_FLOAT_NAMES if hasattr(ml, n)
    )


@lru_cache(maxsize=None)
def _ml_int_dtypes() -> dict[np.dtype, np.dtype]:
    ml = ml_types.module()
    return {
        np.dtype(getattr(ml, n)): np.dtype(wide)
        for n, wide in _ML_INT_NAMES.items()
        if hasattr(ml, n)
    }


@lru_cache(maxsize=None)
def _ml_complex_dtypes() -> frozenset[np.dtype]:
    ml = ml_types.module()
    return frozenset(
        np.dtype(getattr(ml, n)) for n in _ML_COMPLEX_NAMES if hasattr(ml, n)
    )


def _ml_dtype(name: str) -> np.dtype:
    if hasattr(np, name) and name.startswith("float") and np.dtype(name).kind == "f":
        return np.dtype(name)
    return np.dtype(getattr(ml_types.module(), name))


def _type_name(obj: Any) -> str:
    cls = type(obj)
    module = cls.__module__
    return cls.__qualname__ if module == "builtins" else f"{module}.{cls.__qualname__}"


# ----- public ------------------------------------------------------------------------------


def is_dask_array(obj: Any) -> bool:
    """True for a dask array, recognised without importing dask.

    A dask array's class lives in ``dask.array`` and carries ``chunks`` and the dask collection
    protocol (``__dask_graph__``); both are checked so a lookalike attribute alone is not enough.
    """
    module = type(obj).__module__ or ""
    return (
        (module == "dask" or module.startswith("dask."))
        and hasattr(obj, "chunks")
        and hasattr(obj, "dtype")
        and callable(getattr(obj, "__dask_graph__", None))
    )


def as_array(obj: Any, *, name: str | None = None) -> np.ndarray:
    """Return ``obj`` as a numpy array with its bit patterns unchanged, without copying if possible.

    Args:
        obj: a numpy array (float, ml_dtypes float, integer or bool; a ``np.memmap`` stays one),
            a torch tensor (any device, any float dtype including bfloat16 and float8), a JAX
            array or anything with ``__array__`` / ``__dlpack__``, a list/tuple of numbers or a
            Python number (-> float64), a path to a ``.npy``, ``.npz`` or ``.safetensors``
            file, or a mapping of names to tensors (a ``state_dict``, an opened file).
        name: which tensor of a file or mapping; needed when it holds more than one.

    Raises:
        UnsupportedInputError: complex, text, bytes, Python objects, datetimes, structured or
            raw void data, and types not listed above; dask arrays (scan them instead).
        BitprismError: 64-bit integers beyond 2**53 in magnitude, long double, a bad file, a
            missing or ambiguous ``name``.
    """
    if isinstance(obj, (str, os.PathLike)):
        if isinstance(obj, str) and not os.path.exists(obj):
            raise BitprismError(
                f"{obj!r} is not an existing file; as_array reads a str as the path of a "
                ".npy, .npz or .safetensors file (to inspect a typed number, use compare())"
            )
        arr = open_tensor(obj, name)
        return _from_numpy(arr, f"{shown_path(obj)}: tensor {name!r}" if name else shown_path(obj))
    if isinstance(obj, Mapping):
        return _from_mapping(obj, name)
    if name is not None:
        raise BitprismError(
            f"name={name!r} chooses a tensor inside a file or a mapping of tensors; "
            f"got a {_type_name(obj)}, which holds one tensor"
        )
    return _convert(obj)


# ----- dispatch ----------------------------------------------------------------------------


def _from_mapping(tensors: Mapping[Any, Any], name: str | None) -> np.ndarray:
    keys = list(tensors.keys())
    shown = ", ".join(repr(k) for k in keys[:20]) + (
        f", ... and {len(keys) - 20} more" if len(keys) > 20 else ""
    )
    if name is None:
        if len(keys) != 1:
            raise BitprismError(
                f"the mapping holds {len(keys)} tensors; choose one with name=...: "
                f"{shown or 'none'}"
            )
        name = keys[0]
    elif name not in tensors:
        raise BitprismError(f"no tensor named {name!r} in the mapping; it holds: {shown or 'none'}")
    value = tensors[name]
    if isinstance(value, (Mapping, str, os.PathLike)):
        raise UnsupportedInputError(
            f"entry {name!r} of the mapping is a {_type_name(value)}, not a tensor"
        )
    return _convert(value, f"tensor {name!r}")


def _convert(obj: Any, what: str | None = None) -> np.ndarray:
    if isinstance(obj, np.ndarray):
        return _from_numpy(obj, what)
    if is_dask_array(obj):
        raise UnsupportedInputError(
            "as_array does not load dask arrays whole: pass the dask array to scan(), which "
            "reads it chunk by chunk, or inspect a piece with arr[...].compute()"
        )
    if _is_torch_tensor(obj):
        return _from_torch(obj)
    if isinstance(obj, (bytes, bytearray, memoryview)):
        raise UnsupportedInputError(
            f"got {type(obj).__name__}; bitprism does not guess what raw bytes hold. View them "
            "with np.frombuffer(data, dtype=...) and pass the array; " + _ACCEPTED
        )
    if isinstance(obj, (list, tuple, bool, int, float, complex)):
        return _from_python(obj)
    if isinstance(obj, np.generic):
        return _from_numpy(np.asarray(obj), what)
    if hasattr(obj, "__array__"):
        # JAX arrays come through here, keeping ml_dtypes types (JAX's bfloat16 and float8
        # are the ml_dtypes types), as do pandas, xarray and other array-likes.
        try:
            arr = np.asarray(obj)
        except Exception as exc:
            raise UnsupportedInputError(
                f"could not read a {_type_name(obj)} through __array__ ({exc})"
            ) from exc
        return _from_numpy(arr, what or f"a {_type_name(obj)}")
    if hasattr(obj, "__dlpack__"):
        try:
            arr = np.from_dlpack(obj)
        except Exception as exc:
            raise UnsupportedInputError(
                f"could not read a {_type_name(obj)} through DLPack ({exc})"
            ) from exc
        return _from_numpy(arr, what or f"a {_type_name(obj)}")
    raise UnsupportedInputError(f"cannot read a {_type_name(obj)}; {_ACCEPTED}")


def _from_python(obj: Any) -> np.ndarray:
    try:
        arr = np.asarray(obj)
    except ValueError as exc:  # numpy >= 1.24 refuses ragged nesting
        raise UnsupportedInputError(
            f"the {type(obj).__name__} is not a rectangular nesting of numbers ({exc})"
        ) from exc
    if arr.dtype.kind == "O":
        raise UnsupportedInputError(
            f"the {type(obj).__name__} holds items numpy can only keep as Python objects "
            "(ragged nesting, None, strings mixed with numbers, or integers beyond 64 bits); "
            "pass a rectangular nesting of numbers"
        )
    arr = _from_numpy(arr, f"the {type(obj).__name__}")
    # Lists and Python numbers become float64; every value accepted above converts exactly.
    return arr.astype(np.float64, copy=False)


# ----- numpy -------------------------------------------------------------------------------


def _describe(dtype: np.dtype) -> str:
    return f"{dtype.name} ({dtype.str!r})" if dtype.name != dtype.str else dtype.name


def _from_numpy(arr: np.ndarray, what: str | None = None) -> np.ndarray:
    """Validate a numpy array's dtype and return it (as is whenever its bits can be read as is)."""
    dtype = arr.dtype
    source = f"{what}: " if what else ""
    ml_loaded = ml_types.loaded()  # before ml_dtypes is imported, no dtype is one of its types
    if ml_loaded and dtype in _ml_float_dtypes():
        return _native(arr)
    if dtype.kind == "f":
        if dtype.itemsize > 8:
            raise BitprismError(
                f"{source}got {_describe(dtype)}: long double has more precision than float64 "
                "and no format of ours matches it. Convert deliberately, e.g. "
                "arr.astype(np.float64) (which rounds), and inspect that"
            )
        if dtype.itemsize == 8 and dtype.char == "g":  # long double that is plain binary64
            return _native(arr).view(np.float64)
        return _native(arr)
    if dtype.kind in "iub":
        arr = _native(arr)
        _check_exact_integers(arr, source)
        return arr
    if ml_loaded and dtype in _ml_int_dtypes():
        # int4/int2/... hold one value per byte; widening to int8/uint8 is exact.
        return arr.astype(_ml_int_dtypes()[dtype])
    if dtype.kind == "c" or ml_loaded and dtype in _ml_complex_dtypes():
        raise UnsupportedInputError(
            f"{source}got complex data ({_describe(dtype)}); bitprism inspects real values: "
            f"pass arr.real and arr.imag separately. {_ACCEPTED}"
        )
    if dtype.kind == "O":
        raise UnsupportedInputError(
            f"{source}got an object array; its items are Python objects, not stored numbers. "
            f"Convert to a numeric dtype first. {_ACCEPTED}"
        )
    if dtype.kind in "US":
        raise UnsupportedInputError(
            f"{source}got text ({_describe(dtype)}); bitprism does not parse strings inside "
            f"arrays. Convert to numbers first. {_ACCEPTED}"
        )
    if dtype.kind in "Mm":
        raise UnsupportedInputError(
            f"{source}got {_describe(dtype)}; dates and durations are not floating-point "
            f"values. {_ACCEPTED}"
        )
    if dtype.kind == "V":
        if dtype.fields is not None:
            raise UnsupportedInputError(
                f"{source}got a structured array ({dtype}); pass one field, e.g. "
                f"arr[{next(iter(dtype.fields))!r}]. {_ACCEPTED}"
            )
        raise UnsupportedInputError(
            f"{source}got raw {dtype.itemsize}-byte items ({dtype.str!r}), whose type is not "
            "known. numpy saves ml_dtypes arrays (bfloat16, float8_*, ...) this way; view them "
            "as the right type, e.g. arr.view(ml_dtypes.bfloat16), or read the file with "
            "open_tensor(path, raw_as='bfloat16')"
        )
    raise UnsupportedInputError(f"{source}got an array of {_describe(dtype)}; {_ACCEPTED}")


def _native(arr: np.ndarray) -> np.ndarray:
    """Arrays in the machine's byte order pass through untouched; others get an exact copy,
    so every later ``.view(uint...)`` of the array sees the bits in the expected order."""
    if arr.dtype.isnative:
        return arr
    return arr.astype(arr.dtype.newbyteorder("="))


def _check_exact_integers(arr: np.ndarray, source: str) -> None:
    """Refuse 64-bit integers beyond 2**53 in magnitude: float64 cannot hold them all exactly.

    Narrower integers always fit. The check is one min and one max; the index is looked up
    only when something fails.
    """
    if arr.dtype.itemsize < 8 or arr.size == 0 or arr.dtype.kind == "b":
        return
    low, high = int(arr.min()), int(arr.max())
    if -_EXACT_INT_LIMIT <= low and high <= _EXACT_INT_LIMIT:
        return
    flat = int(np.argmax(arr)) if high > _EXACT_INT_LIMIT else int(np.argmin(arr))
    index = tuple(int(i) for i in np.unravel_index(flat, arr.shape))
    value = high if high > _EXACT_INT_LIMIT else low
    where = f"index {index}" if arr.ndim != 1 else f"index {index[0]}"
    raise BitprismError(
        f"{source}{arr.dtype.name} element at {where} is {value}, beyond +-2**53 "
        f"(= {_EXACT_INT_LIMIT}), where float64 stops holding every integer exactly; convert "
        "deliberately (arr.astype(np.float64) rounds) or select the elements within range"
    )


# ----- torch -------------------------------------------------------------------------------


def _is_torch_tensor(obj: Any) -> bool:
    module = type(obj).__module__ or ""
    if (module == "torch" or module.startswith("torch.")) and hasattr(obj, "detach") and hasattr(
        obj, "dtype"
    ):
        return True
    torch = sys.modules.get("torch")  # already imported by whoever made the object
    tensor_cls = getattr(torch, "Tensor", None)
    return isinstance(tensor_cls, type) and isinstance(obj, tensor_cls)


def _from_torch(tensor: Any) -> np.ndarray:
    import torch  # the object is a torch tensor, so torch is already loaded

    dtype_name = str(tensor.dtype).removeprefix("torch.")
    if tensor.is_complex():
        raise UnsupportedInputError(
            f"got a complex torch tensor ({tensor.dtype}); bitprism inspects real values: pass "
            f"tensor.real and tensor.imag separately. {_ACCEPTED}"
        )
    if getattr(tensor, "is_quantized", False):
        raise UnsupportedInputError(
            f"got a quantized torch tensor ({tensor.dtype}); pass tensor.dequantize() for its "
            "values or tensor.int_repr() for its stored integers"
        )
    if tensor.layout != torch.strided:
        raise UnsupportedInputError(
            f"got a torch tensor with layout {tensor.layout}; pass tensor.to_dense()"
        )
    if tensor.device.type == "meta":
        raise UnsupportedInputError("got a torch tensor on the 'meta' device, which holds no data")
    t = tensor.detach().cpu()  # no copy for a CPU tensor
    t = t.resolve_conj().resolve_neg()  # materialise lazy sign views (no-op for plain tensors)
    if dtype_name in _TORCH_FLOATS:
        int_name, np_name = _TORCH_FLOATS[dtype_name]
        # Reinterpret, never convert: the bits go through an integer of the same width, and
        # numpy then views them as the dtype with the same layout, so NaN payloads, signed
        # zeros and float8 codes arrive unchanged.
        bits = t.view(getattr(torch, int_name)).numpy()
        return bits.view(_ml_dtype(np_name))
    if dtype_name in _TORCH_PLAIN:
        arr = t.numpy()
        _check_exact_integers(arr, "torch tensor: ")
        return arr
    raise UnsupportedInputError(
        f"got a torch tensor of {tensor.dtype}, which has no one-value-per-element numpy "
        "counterpart (packed sub-byte or bit types); unpack it to one value per byte first. "
        + _ACCEPTED
    )
