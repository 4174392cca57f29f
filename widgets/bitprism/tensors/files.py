"""Tensors stored in files: ``.npy``, ``.npz`` and ``.safetensors``, opened without copying.

Every reader maps the file into memory (``numpy.memmap``) where the layout allows it, so opening
a multi-gigabyte checkpoint reads only its header, and a later slice reads only the pages it
touches. Compressed ``.npz`` members cannot be mapped; each is decompressed in chunks into a
temporary file when it is first asked for, and that file is mapped (``npz_members``), with a cap
on how far a member may expand.

Files are untrusted input. Nothing here unpickles (``allow_pickle`` stays ``False`` and object
arrays are refused before numpy sees them), nothing reads outside the file, and no allocation is
sized from a length the file claims before that length is checked against the file's real size.
Only regular files are opened (a FIFO would block); every shape is checked before numpy sees it
(``file_checks``). Every problem becomes a :class:`~bitprism.errors.BitprismError` that names
the file and what is wrong with it.

numpy and ml_dtypes types
-------------------------
``numpy.save`` writes ml_dtypes arrays (bfloat16, float8_*, ...) with a raw void descriptor
(``'<V2'``, ``'|V1'``): the type is lost and only the bytes remain (checked with numpy 2.x and
ml_dtypes 0.5+). Reading such a file therefore needs to be told what the bytes are:
``open_tensor(path, raw_as="bfloat16")``. Without ``raw_as`` the read stops with an error that
says so. (A sidecar file naming the type was considered and left out: an explicit argument is
simpler and cannot go stale.) Safetensors files carry their types and need no help.
"""

from __future__ import annotations

import difflib
import json
import math
import os
import sys
from collections.abc import Iterator, Mapping
from typing import Any, Callable

import numpy as np

from .. import ml_types
from ..errors import BitprismError, UnsupportedInputError
from ..formats import get_format
from .file_checks import PathLike, check_shape, read_npy_header, regular_file_size, shown_path
from .file_checks import file_error as _fail
from .file_checks import names_text as _names_text
from .file_checks import shape_text as _shape_text
from .npz_members import DEFAULT_MAX_RATIO, check_max_ratio, npz_loaders

__all__ = ["DEFAULT_MAX_RATIO", "TensorFile", "open_tensor", "open_tensors"]

# The reference reader refuses headers above 100 MB (MAX_HEADER_SIZE in the safetensors
# project's safetensors/src/tensor.rs); we use the same cap, before reading a byte of it.
_MAX_SAFETENSORS_HEADER = 100_000_000
# A header integer (a dimension or an offset) needs at most 20 digits (2**64); longer ones are
# refused while parsing, before Python's int() meets its 4,300-digit limit (sys.int_info).
_MAX_INT_DIGITS = 100
_NPY_MAGIC = b"\x93NUMPY"
_ZIP_MAGIC = b"PK\x03\x04"
_SUFFIXES = (".npy", ".npz", ".safetensors")

# safetensors dtype names (the Dtype enum of the safetensors format documentation and its
# reference implementation) -> numpy / ml_dtypes dtype. Multi-byte values are little-endian.
# F8_E4M3 is the OCP E4M3 with no Inf and one NaN per sign (ml_dtypes float8_e4m3fn), F8_E5M2
# the IEEE-like E5M2, F8_E8M0 the unsigned OCP Microscaling scale (ml_dtypes float8_e8m0fnu).
_SAFETENSORS_DTYPES: dict[str, Callable[[], np.dtype]] = {
    "F64": lambda: np.dtype("<f8"),
    "F32": lambda: np.dtype("<f4"),
    "F16": lambda: np.dtype("<f2"),
    "BF16": lambda: np.dtype(ml_types.module().bfloat16),
    "F8_E4M3": lambda: np.dtype(ml_types.module().float8_e4m3fn),
    "F8_E5M2": lambda: np.dtype(ml_types.module().float8_e5m2),
    "F8_E8M0": lambda: np.dtype(ml_types.module().float8_e8m0fnu),
    "F8_E4M3FNUZ": lambda: np.dtype(ml_types.module().float8_e4m3fnuz),
    "F8_E5M2FNUZ": lambda: np.dtype(ml_types.module().float8_e5m2fnuz),
    "I8": lambda: np.dtype("i1"),
    "I16": lambda: np.dtype("<i2"),
    "I32": lambda: np.dtype("<i4"),
    "I64": lambda: np.dtype("<i8"),
    "U8": lambda: np.dtype("u1"),
    "U16": lambda: np.dtype("<u2"),
    "U32": lambda: np.dtype("<u4"),
    "U64": lambda: np.dtype("<u8"),
    "BOOL": lambda: np.dtype("?"),
}
# Types the format defines that we refuse, with the reason. F4 and F6_* are packed below byte
# boundaries (4 and 6 bits per element); the format fixes their width but not the order of
# elements inside a byte, so reading them would be a guess.
_SAFETENSORS_REFUSED = {
    "F4": "packs 4-bit floats two to a byte, and the safetensors format does not say in which "
    "order",
    "F6_E2M3": "packs 6-bit floats across byte boundaries, and the safetensors format does not "
    "say in which order",
    "F6_E3M2": "packs 6-bit floats across byte boundaries, and the safetensors format does not "
    "say in which order",
    "C64": "holds complex numbers; bitprism inspects real floating-point values",
}


class TensorFile(Mapping[str, np.ndarray]):
    """The tensors of one file, in file order, read on first access (then kept).

    Behaves as a read-only ``dict`` of name -> ``numpy.ndarray``. Arrays are memory-mapped
    (``numpy.memmap``, read-only) wherever the file's layout allows; compressed ``.npz`` members
    are decompressed into a temporary file when first asked for, and mapped from there.
    ``release()`` drops the kept arrays. A ``.npy`` file holds one tensor, named after the
    file's stem.

    Attributes:
        path: the path as given.
        kind: ``"npy"``, ``"npz"`` or ``"safetensors"``.
        metadata: the safetensors ``__metadata__`` object (``{}`` when absent or not safetensors).
    """

    def __init__(
        self,
        path: PathLike,
        kind: str,
        loaders: dict[str, Callable[[], np.ndarray]],
        metadata: dict[str, Any] | None = None,
        raw_as: Any = None,
    ) -> None:
        self.path = path
        self.kind = kind
        self.metadata: dict[str, Any] = dict(metadata or {})
        self._loaders = loaders
        self._cache: dict[str, np.ndarray] = {}
        self._raw_as = raw_as

    def __getitem__(self, name: str) -> np.ndarray:
        if name not in self._loaders:
            raise KeyError(name)
        if name not in self._cache:
            arr = self._loaders[name]()
            self._cache[name] = _apply_raw_as(arr, self._raw_as, self.path, name)
        return self._cache[name]

    def __iter__(self) -> Iterator[str]:
        return iter(self._loaders)

    def __len__(self) -> int:
        return len(self._loaders)

    def __contains__(self, name: object) -> bool:
        return name in self._loaders

    def release(self, name: str | None = None) -> None:
        """Forget the array read for ``name`` (every array when None): the next access reads
        it again. A decompressed member's temporary file is deleted once no array uses it."""
        if name is None:
            self._cache.clear()
        else:
            self._cache.pop(name, None)

    def __repr__(self) -> str:
        return (
            f"TensorFile({os.fspath(self.path)!r}, {self.kind}, "
            f"{len(self)} tensor{'s' if len(self) != 1 else ''}: {_names_text(list(self), 8)})"
        )


def open_tensors(
    path: PathLike, *, raw_as: Any = None, max_ratio: float | None = DEFAULT_MAX_RATIO
) -> TensorFile:
    """Open a ``.npy``, ``.npz`` or ``.safetensors`` file as a mapping of name -> array.

    Args:
        path: a ``str`` or ``os.PathLike``; the kind is taken from the suffix, or from the
            file's first bytes when the suffix is none of the three.
        raw_as: a format name, ``Format`` or dtype that says what raw void items are
            (numpy writes ml_dtypes arrays such as bfloat16 that way); only void-typed tensors
            are affected, and their item size must match.
        max_ratio: a compressed ``.npz`` member that declares more than this many times its
            compressed size is refused (default 1100: above deflate's limit of about 1032, so
            every file ``numpy.savez_compressed`` writes passes); None lifts the cap.

    Raises:
        BitprismError: the file is missing, unreadable, malformed or of another kind; the
            message names the file and the problem.
    """
    if isinstance(path, bytes) or not isinstance(path, (str, os.PathLike)):
        raise UnsupportedInputError(
            f"path must be a str or os.PathLike, got {type(path).__name__} {path!r}"
        )
    ratio = check_max_ratio(max_ratio)
    if raw_as is not None:
        _raw_dtype(raw_as)  # fail early on a bad raw_as
    kind = _file_kind(path)
    if kind == "npy":
        stem = os.path.splitext(os.path.basename(os.fspath(path)))[0]
        _npy_layout(path)  # validate now, so open_tensors reports a bad file at once
        return TensorFile(path, kind, {stem: lambda: _load_npy(path)}, raw_as=raw_as)
    if kind == "npz":
        return TensorFile(path, kind, npz_loaders(path, ratio), raw_as=raw_as)
    loaders, metadata = _safetensors_loaders(path)
    return TensorFile(path, kind, loaders, metadata, raw_as=raw_as)


def open_tensor(
    path: PathLike,
    name: str | None = None,
    *,
    raw_as: Any = None,
    max_ratio: float | None = DEFAULT_MAX_RATIO,
) -> np.ndarray:
    """One tensor from a file: the only one, or the one called ``name``.

    A file holding several tensors needs ``name``; the error lists the names it holds.
    See :func:`open_tensors` for ``raw_as`` and ``max_ratio``.
    """
    tensors = open_tensors(path, raw_as=raw_as, max_ratio=max_ratio)
    names = list(tensors)
    if name is None:
        if len(names) == 1:
            return tensors[names[0]]
        if not names:
            raise _fail(path, "holds no tensors")
        raise _fail(
            path,
            f"holds {len(names)} tensors; choose one with name=...: {_names_text(names)}",
        )
    if name not in tensors:
        close = difflib.get_close_matches(str(name), names, n=3, cutoff=0.6)
        hint = f" (did you mean {', '.join(repr(c) for c in close)}?)" if close else ""
        raise _fail(
            path, f"no tensor named {name!r}{hint}; it holds: {_names_text(names) or 'nothing'}"
        )
    return tensors[name]


# ----- helpers shared by the readers ------------------------------------------------------


def _file_kind(path: PathLike) -> str:
    """"npy", "npz" or "safetensors", from the suffix or else from the first bytes. Only a
    regular file is opened (``regular_file_size``): reading a FIFO would block."""
    text = os.fspath(path)
    suffix = os.path.splitext(text)[1].lower()
    regular_file_size(path)
    if suffix in _SUFFIXES:
        return suffix[1:]
    try:
        with open(text, "rb") as f:
            head = f.read(8)
    except OSError as exc:
        raise _fail(path, f"cannot be read ({exc.strerror or exc})") from exc
    if head.startswith(_NPY_MAGIC):
        return "npy"
    if head.startswith(_ZIP_MAGIC):
        return "npz"
    raise _fail(
        path,
        f"unknown file kind {suffix or '(no suffix)'!r}; bitprism reads "
        f"{', '.join(_SUFFIXES)} files",
    )


def _raw_dtype(raw_as: Any) -> np.dtype:
    if isinstance(raw_as, str):
        dtype = get_format(raw_as).dtype
        if dtype is None:
            raise BitprismError(
                f"raw_as={raw_as!r} names a format with no numpy/ml_dtypes dtype to view bytes as"
            )
        return dtype
    try:
        return np.dtype(getattr(raw_as, "dtype", None) or raw_as)
    except TypeError as exc:
        raise BitprismError(
            f"raw_as must be a format name, a Format with a dtype, or a numpy/ml_dtypes dtype; "
            f"got {raw_as!r}"
        ) from exc


def _is_raw_void(dtype: np.dtype) -> bool:
    """A void dtype with no fields that is not an ml_dtypes type: bytes with the type lost."""
    return dtype.type is np.void and dtype.fields is None and dtype.subdtype is None


def _apply_raw_as(arr: np.ndarray, raw_as: Any, path: PathLike, name: str) -> np.ndarray:
    if not _is_raw_void(arr.dtype):
        return arr
    if raw_as is None:
        raise _fail(
            path,
            f"tensor {name!r} is stored as raw {arr.dtype.itemsize}-byte items "
            f"({arr.dtype.str!r}): numpy writes ml_dtypes arrays such as bfloat16 or float8 "
            "this way and drops their type. Say what the bytes are, e.g. "
            "open_tensor(path, raw_as='bfloat16')",
        )
    target = _raw_dtype(raw_as)
    if target.itemsize != arr.dtype.itemsize:
        raise _fail(
            path,
            f"tensor {name!r} has {arr.dtype.itemsize}-byte items but raw_as={raw_as!r} is "
            f"{target.itemsize} byte(s) wide",
        )
    return arr.view(target)


def _nbytes(shape: tuple[int, ...] | list[int], itemsize: int) -> int:
    return math.prod(shape) * itemsize


# ----- .npy --------------------------------------------------------------------------------


def _npy_layout(path: PathLike) -> tuple[tuple[int, ...], bool, np.dtype, int]:
    size = regular_file_size(path)
    try:
        with open(os.fspath(path), "rb") as f:
            shape, fortran, dtype = read_npy_header(f, "", path)
            start = f.tell()
    except OSError as exc:
        raise _fail(path, f"cannot be read ({exc.strerror or exc})") from exc
    need = _nbytes(shape, dtype.itemsize)
    if start + need > size:
        raise _fail(
            path,
            f"is truncated: shape {_shape_text(shape)} of {dtype} needs {need} bytes after the "
            f"{start}-byte header, but only {size - start} follow",
        )
    return shape, fortran, dtype, start


def _load_npy(path: PathLike) -> np.ndarray:
    _npy_layout(path)
    try:
        return np.load(os.fspath(path), mmap_mode="r", allow_pickle=False)
    except (ValueError, OSError) as exc:
        raise _fail(path, f"cannot be memory-mapped ({exc})") from exc


# ----- .safetensors -------------------------------------------------------------------------


def _reject_duplicate_keys(pairs: list[tuple[str, Any]]) -> dict[str, Any]:
    out: dict[str, Any] = {}
    for key, value in pairs:
        if key in out:
            raise _DuplicateKey(key)
        out[key] = value
    return out


class _DuplicateKey(ValueError):
    pass


class _HugeInteger(ValueError):
    pass


def _header_int(text: str) -> int:
    """json's ``parse_int`` hook: refuse an integer longer than ``_MAX_INT_DIGITS`` before
    ``int()`` converts it (a 4,301-digit one would raise a bare ValueError there)."""
    if len(text) > _MAX_INT_DIGITS:
        raise _HugeInteger(len(text.lstrip("-")))
    return int(text)


def _is_count(value: Any) -> bool:
    return isinstance(value, int) and not isinstance(value, bool) and value >= 0


def _safetensors_header(path: PathLike) -> tuple[dict[str, Any], int, int]:
    """Return (parsed header, start of the data buffer, length of the data buffer)."""
    size = regular_file_size(path)
    try:
        with open(os.fspath(path), "rb") as f:
            head = f.read(8)
            if len(head) < 8:
                raise _fail(
                    path,
                    f"is {size} bytes long, too short for the 8-byte header length that "
                    "starts a safetensors file",
                )
            # Header length: unsigned 64-bit little-endian (safetensors format documentation).
            n = int.from_bytes(head, "little")
            if n > _MAX_SAFETENSORS_HEADER:
                raise _fail(
                    path,
                    f"header length {n} is larger than the {_MAX_SAFETENSORS_HEADER}-byte "
                    "limit; this is not a safetensors file or it is damaged",
                )
            if 8 + n > size:
                raise _fail(
                    path,
                    f"header length {n} runs past the end of the file ({size} bytes); the "
                    "file is truncated or not a safetensors file",
                )
            raw = f.read(n)
    except OSError as exc:
        raise _fail(path, f"cannot be read ({exc.strerror or exc})") from exc
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise _fail(path, f"header is not valid UTF-8 (byte {exc.start} of the header)") from exc
    try:
        header = json.loads(text, object_pairs_hook=_reject_duplicate_keys, parse_int=_header_int)
    except _DuplicateKey as exc:
        raise _fail(path, f"header names {exc.args[0]!r} twice") from exc
    except _HugeInteger as exc:
        raise _fail(
            path,
            f"header holds an integer of {exc.args[0]} digits; no shape or offset needs more "
            f"than 20 (integers of more than {_MAX_INT_DIGITS} characters are refused)",
        ) from exc
    except json.JSONDecodeError as exc:
        raise _fail(
            path, f"header is not valid JSON ({exc.msg} at character {exc.pos + 1})"
        ) from exc
    except RecursionError as exc:
        raise _fail(path, "header JSON is nested too deeply") from exc
    if not isinstance(header, dict):
        raise _fail(path, f"header is a JSON {type(header).__name__}, not an object")
    return header, 8 + n, size - 8 - n


def _safetensors_loaders(
    path: PathLike,
) -> tuple[dict[str, Callable[[], np.ndarray]], dict[str, Any]]:
    header, data_start, data_len = _safetensors_header(path)
    metadata = header.pop("__metadata__", None)
    if metadata is not None and not isinstance(metadata, dict):
        raise _fail(path, f"'__metadata__' is a JSON {type(metadata).__name__}, not an object")
    entries: list[tuple[int, int, str, np.dtype, tuple[int, ...]]] = []
    for position, (name, entry) in enumerate(header.items()):
        what = f"tensor {name!r}"
        if not isinstance(entry, dict):
            raise _fail(
                path, f"{what} is described by a JSON {type(entry).__name__}, not an object"
            )
        missing = [k for k in ("dtype", "shape", "data_offsets") if k not in entry]
        if missing:
            raise _fail(path, f"{what} lacks {', '.join(repr(m) for m in missing)}")
        code, shape, offsets = entry["dtype"], entry["shape"], entry["data_offsets"]
        if not isinstance(code, str):
            raise _fail(path, f"{what} has dtype {code!r}, not a string")
        if code in _SAFETENSORS_REFUSED:
            raise UnsupportedInputError(
                f"{shown_path(path)}: {what} has dtype {code!r}, which "
                f"{_SAFETENSORS_REFUSED[code]}; bitprism cannot read it without guessing"
            )
        if code not in _SAFETENSORS_DTYPES:
            raise _fail(
                path,
                f"{what} has unknown dtype {code!r}; known: {', '.join(_SAFETENSORS_DTYPES)}",
            )
        if not isinstance(shape, list) or not all(_is_count(d) for d in shape):
            raise _fail(path, f"{what} has shape {shape!r}; expected a list of integers >= 0")
        if (
            not isinstance(offsets, list)
            or len(offsets) != 2
            or not all(_is_count(o) for o in offsets)
        ):
            raise _fail(
                path,
                f"{what} has data_offsets {offsets!r}; expected [begin, end], integers >= 0",
            )
        begin, end = offsets
        if begin > end:
            raise _fail(path, f"{what} has data_offsets {offsets!r} with begin after end")
        if end > data_len:
            raise _fail(
                path,
                f"{what} has data_offsets {offsets!r} outside the {data_len}-byte data buffer",
            )
        dtype = _SAFETENSORS_DTYPES[code]()
        need = _nbytes(shape, dtype.itemsize)
        if end - begin != need:
            raise _fail(
                path,
                f"{what} has data_offsets {offsets!r} ({end - begin} bytes) but shape "
                f"{_shape_text(shape)} of {code} needs {need} bytes",
            )
        # the sizes agree, but a zero dimension hides the others from that check
        checked = check_shape(path, f"{what} ", shape, dtype.itemsize)
        entries.append((begin, position, name, dtype, checked))
    # File order is data order; tensors at the same offset keep header order. Overlapping
    # regions are allowed: each tensor is an independent view.
    entries.sort(key=lambda e: (e[0], e[1]))
    buffer: list[np.ndarray] = []

    def data() -> np.ndarray:
        if not buffer:
            buffer.append(
                np.memmap(
                    os.fspath(path),
                    dtype=np.uint8,
                    mode="r",
                    offset=data_start,
                    shape=(data_len,),
                )
            )
        return buffer[0]

    def loader(begin: int, dtype: np.dtype, shape: tuple[int, ...]) -> Callable[[], np.ndarray]:
        def load() -> np.ndarray:
            if math.prod(shape) == 0:
                return np.zeros(shape, dtype=dtype)
            try:
                raw = data()[begin : begin + _nbytes(shape, dtype.itemsize)]
            except (ValueError, OSError) as exc:
                raise _fail(path, f"cannot be memory-mapped ({exc})") from exc
            return _little_endian_view(raw, dtype).reshape(shape)

        return load

    loaders = {name: loader(begin, dtype, shape) for begin, _, name, dtype, shape in entries}
    return loaders, metadata or {}


def _little_endian_view(raw: np.ndarray, dtype: np.dtype) -> np.ndarray:
    """View little-endian bytes as ``dtype``. numpy's own types carry '<' in the dtype; the
    ml_dtypes types are native-order only, so on a big-endian host their bytes are swapped
    through an unsigned integer of the same width (a copy, only there)."""
    if dtype.itemsize == 1 or sys.byteorder == "little" or dtype.byteorder in "<>|":
        return raw.view(dtype)
    code = np.dtype(f"<u{dtype.itemsize}")
    return raw.view(code).astype(code.newbyteorder("=")).view(dtype)
