"""The members of a ``.npz`` archive, each read without holding its data in memory.

A stored (uncompressed) member is mapped in place, like a ``.npy`` file. A compressed member
cannot be mapped; it is decompressed once, in chunks of ``CHUNK`` bytes, into an unnamed
temporary file (``tempfile.TemporaryFile``, in ``tempfile.gettempdir()``: set ``TMPDIR`` to
choose the disk), and that file is mapped. So a member takes disk space, not memory, for its
decompressed size, and a scan reads it block by block as it reads any mapped file; the space is
returned when the last array using it is released.

Decompression is capped: a member that declares more than ``max_ratio`` times its compressed
size is refused before a byte is decompressed (``DEFAULT_MAX_RATIO`` = 1100). Deflate, the
method ``numpy.savez_compressed`` uses, cannot exceed about 1032:1 (zlib's technical details
page), so no archive numpy writes is refused; bzip2 or LZMA members can expand far more (a
bzip2 member of zeros about 850,000:1). ``max_ratio=None`` lifts the cap.
"""

from __future__ import annotations

import functools
import math
import os
import shutil
import struct
import tempfile
import zipfile
from typing import Any, Callable, Literal

import numpy as np

from ..errors import BitprismError
from .file_checks import PathLike, file_error, read_npy_header, regular_file_size, shape_text

__all__ = ["CHUNK", "DEFAULT_MAX_RATIO", "check_max_ratio", "npz_loaders"]

DEFAULT_MAX_RATIO = 1100
CHUNK = 1 << 22  # bytes decompressed at a time (4 MiB)
_ZIP_MAGIC = b"PK\x03\x04"


def check_max_ratio(max_ratio: Any) -> float | None:
    """``max_ratio`` as used: a number >= 1, or None (no cap)."""
    if max_ratio is None:
        return None
    if (
        isinstance(max_ratio, bool)
        or not isinstance(max_ratio, (int, float))
        or not max_ratio >= 1  # NaN fails this too
    ):
        raise BitprismError(
            f"max_ratio must be a number >= 1 (declared size over compressed size of a .npz "
            f"member) or None for no cap; got {max_ratio!r}"
        )
    return float(max_ratio)


def npz_loaders(path: PathLike, max_ratio: float | None) -> dict[str, Callable[[], np.ndarray]]:
    """name -> loader of each member, in archive order (the directory is read now, members
    when their loader is called)."""
    try:
        with zipfile.ZipFile(os.fspath(path)) as zf:
            infos = zf.infolist()
    except (zipfile.BadZipFile, OSError, ValueError, EOFError) as exc:
        raise file_error(path, f"is not a readable .npz (zip) archive ({exc})") from exc
    except NotImplementedError as exc:  # zipfile's word for a version or method it lacks
        raise file_error(path, f"is a .npz (zip) archive this reader cannot open ({exc})") from exc
    except Exception as exc:  # anything else zipfile raises on a damaged directory
        raise file_error(
            path, f"is not a readable .npz (zip) archive ({type(exc).__name__}: {exc})"
        ) from exc
    loaders: dict[str, Callable[[], np.ndarray]] = {}
    for info in infos:
        if info.is_dir():
            continue
        # numpy.savez names members '<key>.npy'; np.load shows them without the suffix.
        key = info.filename[:-4] if info.filename.endswith(".npy") else info.filename
        if key in loaders:
            raise file_error(path, f"holds two members named {key!r}")
        loaders[key] = functools.partial(_load_member, path, info, max_ratio)
    return loaders


def _load_member(path: PathLike, info: zipfile.ZipInfo, max_ratio: float | None) -> np.ndarray:
    where = f"member {info.filename!r} "
    if info.flag_bits & 0x1:
        raise file_error(path, f"{where}is encrypted")
    if info.compress_type == zipfile.ZIP_STORED:
        mapped = _map_stored(path, info, where)
        if mapped is not None:
            return mapped
    elif max_ratio is not None and info.file_size > max_ratio * max(info.compress_size, 1):
        raise file_error(
            path,
            f"{where}declares {info.file_size} bytes from {info.compress_size} compressed "
            f"(more than {max_ratio:g} times as many); refused as a likely decompression bomb. "
            "If you trust the file, pass max_ratio=None (command line: --max-ratio 0)",
        )
    try:
        return _decompress(path, info, where)
    except BitprismError:
        raise
    except (zipfile.BadZipFile, OSError, ValueError, EOFError, RuntimeError) as exc:
        raise file_error(path, f"{where}cannot be read ({exc})") from exc
    except Exception as exc:  # zlib.error and friends from a damaged stream
        raise file_error(path, f"{where}cannot be read ({type(exc).__name__}: {exc})") from exc


def _decompress(path: PathLike, info: zipfile.ZipInfo, where: str) -> np.ndarray:
    """Read the member's .npy header from its stream, then copy its data in chunks into a
    temporary file and map that file."""
    with zipfile.ZipFile(os.fspath(path)) as zf, zf.open(info) as stream:
        shape, fortran, dtype = read_npy_header(stream, where, path)
        header_len = stream.tell()
        need = math.prod(shape) * dtype.itemsize
        # The claimed shape must match the member's own size before anything is written for
        # it, so a forged header cannot ask for more than the member holds.
        if header_len + need != info.file_size:
            raise file_error(
                path,
                f"{where}has shape {shape_text(shape)} of {dtype} ({need} bytes) but "
                f"{info.file_size - header_len} bytes of data",
            )
        order: Literal["C", "F"] = "F" if fortran else "C"
        if need == 0:
            return np.zeros(shape, dtype=dtype, order=order)
        try:
            return _spill(stream, need, dtype, shape, order, path, where)
        except OSError as exc:  # no temporary directory, a full disk, ...
            raise file_error(
                path,
                f"{where}cannot be decompressed into a temporary file "
                f"({exc.strerror or exc}); set TMPDIR to a directory with room for {need} bytes",
            ) from exc


def _spill(
    stream: Any,
    need: int,
    dtype: np.dtype,
    shape: tuple[int, ...],
    order: Literal["C", "F"],
    path: PathLike,
    where: str,
) -> np.ndarray:
    """Copy ``need`` data bytes from ``stream`` into an unnamed temporary file, ``CHUNK`` at a
    time, and map it."""
    free = shutil.disk_usage(tempfile.gettempdir()).free
    if need > free:
        raise file_error(
            path,
            f"{where}needs {need} bytes of temporary space to be decompressed but the "
            f"temporary directory has {free} bytes free; set TMPDIR to a larger disk",
        )
    with tempfile.TemporaryFile(prefix="bitprism-npz-") as tmp:
        copied = 0
        while copied < need:
            chunk = stream.read(min(CHUNK, need - copied))
            if not chunk:
                raise file_error(path, f"{where}ends after {copied} of {need} data bytes")
            tmp.write(chunk)
            copied += len(chunk)
        if stream.read(1):  # also makes zipfile check the member's CRC-32
            raise file_error(path, f"{where}holds more than its {need} data bytes")
        tmp.flush()
        # the mapping keeps the (unnamed) file alive after ``tmp`` closes
        return np.memmap(tmp, dtype=dtype, mode="r", shape=shape, order=order)


def _map_stored(path: PathLike, info: zipfile.ZipInfo, where: str) -> np.ndarray | None:
    """Memory-map an uncompressed member in place; None when its layout is not plain enough."""
    size = regular_file_size(path)
    try:
        with open(os.fspath(path), "rb") as f:
            # Local file header (APPNOTE.TXT 4.3.7): 30 fixed bytes, then name and extra field,
            # whose lengths may differ from the central directory's copy, so read them here.
            f.seek(info.header_offset)
            local = f.read(30)
            if len(local) != 30 or local[:4] != _ZIP_MAGIC:
                return None
            name_len, extra_len = struct.unpack("<HH", local[26:30])
            start = info.header_offset + 30 + name_len + extra_len
            if start + info.file_size > size:
                raise file_error(path, f"{where}runs past the end of the file")
            f.seek(start)
            shape, fortran, dtype = read_npy_header(f, where, path)
            data_start = f.tell()
    except OSError as exc:
        raise file_error(path, f"{where}cannot be read ({exc.strerror or exc})") from exc
    need = math.prod(shape) * dtype.itemsize
    if data_start + need != start + info.file_size:
        raise file_error(
            path,
            f"{where}has shape {shape_text(shape)} of {dtype} ({need} bytes) but "
            f"{start + info.file_size - data_start} bytes of data",
        )
    if need == 0:
        return np.zeros(shape, dtype=dtype, order="F" if fortran else "C")
    try:
        return np.memmap(
            os.fspath(path),
            dtype=dtype,
            mode="r",
            offset=data_start,
            shape=shape,
            order="F" if fortran else "C",
        )
    except (ValueError, OSError):
        return None  # fall back to reading the member through zipfile
