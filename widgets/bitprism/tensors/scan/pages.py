"""Memory-mapped input: hand back the pages of each block once the scan is done with it.

A scan reads a ``np.memmap`` (or a file opened as one) block by block, so it allocates little;
but every page it touches stays mapped into the process until the mapping closes, and the
resident set of a 2 GiB file grew to 2 GiB, which counts against a container's memory limit.
After each block, ``PageRelease`` tells the kernel the process no longer needs those pages
(``madvise(MADV_DONTNEED)`` on the block's byte range of the mapping): they leave the resident
set, and a later read maps them again from the file. Arrays that are not backed by an
``mmap.mmap`` get a release that does nothing.
"""

from __future__ import annotations

import mmap
from typing import Any

import numpy as np

__all__ = ["PageRelease"]


def _mapping_of(arr: Any) -> mmap.mmap | None:
    """The ``mmap.mmap`` an array's memory belongs to (through its ``base`` chain), if any."""
    seen = 0
    node = arr
    while node is not None and seen < 64:  # a base chain is short; the bound is a guard
        if isinstance(node, mmap.mmap):
            return node
        node = getattr(node, "base", None)
        seen += 1
    return None


class PageRelease:
    """Releases the pages of blocks of one memory-mapped array (no-op for other arrays)."""

    def __init__(self, arr: Any) -> None:
        self._map = _mapping_of(arr) if hasattr(mmap, "MADV_DONTNEED") else None
        self._start = 0
        self._size = 0
        if self._map is not None:
            view = np.frombuffer(self._map, np.uint8)  # no copy: the mapping's first byte
            self._start = int(view.ctypes.data)
            self._size = view.size

    @property
    def active(self) -> bool:
        return self._map is not None

    def release(self, block: np.ndarray) -> None:
        """Drop the whole pages that ``block`` (a view into the mapping) lies on; a block that
        is a copy (strided input) holds no mapped pages and is left alone."""
        if self._map is None or block.base is None:
            return
        lo = int(block.ctypes.data) - self._start
        hi = lo + block.nbytes
        if lo < 0 or hi > self._size:
            return  # not a view into this mapping
        page = mmap.PAGESIZE
        first = -(-lo // page) * page  # whole pages only: the neighbours may still be read
        last = hi // page * page
        if last > first:
            self._map.madvise(mmap.MADV_DONTNEED, first, last - first)
