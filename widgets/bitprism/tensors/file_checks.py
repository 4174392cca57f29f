"""What every file reader checks before numpy sees a number the file claims.

A file is untrusted input: its path may name a FIFO or a device, its header may hold shapes
numpy cannot build (a dimension of 2**63 beside a zero passes a product check), its names may
hold terminal escape sequences. These helpers turn each such case into a
:class:`~bitprism.errors.BitprismError` that names the file, and make file and tensor names
safe to print.
"""

from __future__ import annotations

import os
import stat
import tokenize
import zipfile
from functools import lru_cache
from typing import Any, Union

import numpy as np

from ..errors import BitprismError, UnsupportedInputError

__all__ = [
    "PathLike",
    "check_shape",
    "file_error",
    "names_text",
    "printable",
    "read_npy_header",
    "regular_file_size",
    "shape_text",
    "shown_path",
]

PathLike = Union[str, "os.PathLike[str]"]

# numpy's own default cap on a .npy header (numpy.lib.format, max_header_size).
MAX_NPY_HEADER = 10_000
# numpy refuses an array whose non-zero dimensions multiply, times the item size, to more than
# the largest npy_intp (``array is too big`` in numpy/_core/src/multiarray/ctors.c); a
# dimension itself must fit in npy_intp too.
_MAX_BYTES = int(np.iinfo(np.intp).max)
_KINDS = (
    (stat.S_ISDIR, "a directory"),
    (stat.S_ISFIFO, "a FIFO (named pipe)"),
    (stat.S_ISCHR, "a character device"),
    (stat.S_ISBLK, "a block device"),
    (stat.S_ISSOCK, "a socket"),
)  # what a path that is not a regular file is, for the message


def printable(text: str) -> str:
    """``text`` with every non-printable character (controls, escape sequences, line breaks,
    lone surrogates) written as its Python escape (``\\x1b``, ``\\n``, ``\\ud800``), so a name
    can neither drive the terminal, forge a line nor fail to encode; printable text, non-ASCII
    letters included, is left as it is."""
    if text.isprintable():
        return text
    return "".join(c if c.isprintable() else c.encode("unicode_escape").decode("ascii") for c in text)


def shown_path(path: PathLike) -> str:
    """The path as messages show it (``printable``)."""
    return printable(os.fspath(path))


def file_error(path: PathLike, problem: str) -> BitprismError:
    """The error of a bad file: its (printable) path, then what is wrong with it."""
    return BitprismError(f"{shown_path(path)}: {problem}")


def shape_text(shape: tuple[int, ...] | list[int]) -> str:
    return "[" + ", ".join(str(d) for d in shape) + "]"


def names_text(names: list[str], limit: int = 20) -> str:
    shown = ", ".join(repr(n) for n in names[:limit])
    more = len(names) - limit
    return shown + (f", ... and {more} more" if more > 0 else "")


_EXPECTED = "expected a list of integers >= 0 and below 2**63"


def _clip(text: str, limit: int = 120) -> str:
    return text if len(text) <= limit else f"{text[: limit - 20]}... ({len(text)} characters)"


@lru_cache(maxsize=1)
def _max_dims() -> int:
    """numpy's largest number of dimensions: 64 from numpy 2.0, 32 before."""
    return 64 if np.lib.NumpyVersion(np.__version__) >= "2.0.0" else 32


def check_shape(path: PathLike, what: str, shape: Any, itemsize: int) -> tuple[int, ...]:
    """``shape`` as a tuple once numpy can build an array of it: a list or tuple of at most
    numpy's number of dimensions, each an int (not a bool) in ``0..2**63-1``, whose non-zero
    ones multiply (times ``itemsize``) to at most 2**63-1 bytes. A zero dimension does not
    excuse the others: numpy checks every one before it sees the product is 0. ``what`` starts
    the message (e.g. ``"tensor 'w' "`` or ``""``)."""
    if not isinstance(shape, (list, tuple)):
        raise file_error(path, f"{what}has shape {_clip(repr(shape))}; {_EXPECTED}")
    if len(shape) > _max_dims():
        raise file_error(
            path, f"{what}has {len(shape)} dimensions; numpy allows at most {_max_dims()}"
        )
    count = 1
    for d in shape:
        if isinstance(d, bool) or not isinstance(d, int) or not 0 <= d <= _MAX_BYTES:
            raise file_error(
                path, f"{what}has shape {_clip(shape_text(shape))}; {_EXPECTED}, got {_clip(repr(d))}"
            )
        count *= d or 1
    if count * max(itemsize, 1) > _MAX_BYTES:
        raise file_error(
            path,
            f"{what}has shape {_clip(shape_text(shape))}: {count} items of {itemsize} bytes (the "
            "zero dimensions left out) exceed numpy's limit of 2**63-1 bytes per array",
        )
    return tuple(shape)


def regular_file_size(path: PathLike) -> int:
    """The size of a regular file (symbolic links followed); a missing path, a directory, a
    FIFO, a device or a socket is refused before anything opens it (opening a FIFO blocks)."""
    text = os.fspath(path)
    try:
        info = os.stat(text)
    except FileNotFoundError as exc:
        dangling = os.path.islink(text)
        raise file_error(
            path, "no such file" + (" (a symbolic link to a missing file)" if dangling else "")
        ) from exc
    except (OSError, ValueError) as exc:  # ValueError: a NUL byte in the path
        raise file_error(path, f"cannot be read ({getattr(exc, 'strerror', None) or exc})") from exc
    if not stat.S_ISREG(info.st_mode):
        kind = next((name for test, name in _KINDS if test(info.st_mode)), "not a regular file")
        raise file_error(path, f"not a file: it is {kind}; bitprism reads regular files only")
    return int(info.st_size)


def read_npy_header(f: Any, where: str, path: PathLike) -> tuple[tuple[int, ...], bool, np.dtype]:
    """Read a .npy header (magic, version, dict) from ``f`` with numpy's safe literal parser,
    then check its shape (``check_shape``) and refuse Python objects."""
    try:
        version = np.lib.format.read_magic(f)
        if version == (1, 0):
            shape, fortran, dtype = np.lib.format.read_array_header_1_0(
                f, max_header_size=MAX_NPY_HEADER
            )
        elif version == (2, 0):
            shape, fortran, dtype = np.lib.format.read_array_header_2_0(
                f, max_header_size=MAX_NPY_HEADER
            )
        else:
            raise ValueError(f"unsupported .npy format version {version[0]}.{version[1]}")
    except (ValueError, OSError, EOFError, SyntaxError, zipfile.BadZipFile) as exc:
        # numpy quotes the whole header (up to 10,000 characters) when it cannot parse it
        raise file_error(path, f"{where}is not a readable .npy array ({_clip(str(exc))})") from exc
    except tokenize.TokenError as exc:  # numpy tokenizes the header dictionary's text
        raise file_error(
            path, f"{where}is not a readable .npy array (its header dictionary is cut short "
            "or has unbalanced brackets or quotes)"
        ) from exc
    except Exception as exc:  # anything else numpy's header reader raises on damaged bytes
        raise file_error(
            path, f"{where}is not a readable .npy array ({type(exc).__name__}: {_clip(str(exc))})"
        ) from exc
    if dtype.hasobject:
        raise UnsupportedInputError(
            f"{shown_path(path)}: {where}holds Python objects (dtype {dtype.str!r}); bitprism "
            "never unpickles file contents (unpickling can run code). Save numbers instead."
        )
    return check_shape(path, where, shape, dtype.itemsize), bool(fortran), dtype
