"""Reused work buffers, so a probe's many passes over each output stay in the cache.

A probe makes a few passes over every output it counts or rounds. Done on whole arrays, each
pass allocates a temporary as large as the output, and on many machines the page faults of
fresh memory cost more than the pass itself. Done in blocks of ``BLOCK`` elements, into these
buffers (one set per thread), the passes allocate nothing and run in cache: the same practice
as the cast kernel's scratch buffers (``numerics/kernel.py``).
"""

from __future__ import annotations

import threading

import numpy as np

__all__ = ["BLOCK", "COUNT_BLOCK", "buffer"]

# Elements per block. Rounding keeps several float64 buffers at once (512 KiB each); counting
# one magnitude buffer and one of flags, and gains from fewer, longer passes (measured with
# tests/bench_trace.py: 2^16 and 2^18 against 2^14 .. 2^18).
BLOCK = 1 << 16
COUNT_BLOCK = 1 << 18


class _Buffers(threading.local):
    def __init__(self) -> None:
        self.arrays: dict[tuple[str, str], np.ndarray] = {}


_LOCAL = _Buffers()


def buffer(name: str, dtype: type | np.dtype, size: int = BLOCK) -> np.ndarray:
    """A work array of ``size`` elements of ``dtype`` (its contents are whatever was left in
    it), the same one every time this thread asks for ``name``."""
    dt = np.dtype(dtype)
    key = (name, dt.str)
    arr = _LOCAL.arrays.get(key)
    if arr is None or arr.size < size:
        arr = np.empty(max(size, BLOCK), dt)
        _LOCAL.arrays[key] = arr
    return arr[:size]

