"""How a scan's blocks are produced and run: numpy arrays on worker threads, dask arrays as a
dask reduction.

* ``numpy_blocks``: a numpy array (a memmap included) cut into blocks, read one at a time, so
  the array is never loaded whole; a strided array is copied a few rows at a time.
* ``run_numpy``: the blocks on up to ``tuning.worker_threads()`` threads (numpy and the
  compiled loops release the GIL), at most one block ahead, merged in order, so the
  "largest error" floors still come from lower positions and the result equals a one-thread
  scan. Block formats (user objects that may not be thread-safe) stay on the calling thread.
  A memory-mapped input's pages are released after each block (``pages``), so the resident
  set stays a few blocks however large the file.
* ``run_dask``: one partial per dask chunk (``to_delayed``), then a tree of merges, on whatever
  scheduler is active (a ``distributed`` cluster included).
"""

from __future__ import annotations

import os
import threading
from collections import deque
from concurrent.futures import Future, ThreadPoolExecutor, wait
from typing import Any, Iterator

import numpy as np

from . import counts_only
from .block import scan_block
from .pages import PageRelease
from .partials import BlockPartial, merge_blocks
from .plan import Locator, ScanPlan

__all__ = ["numpy_blocks", "progress_bar", "run_dask", "run_numpy"]


def numpy_blocks(arr: np.ndarray, plan: ScanPlan, block: int) -> Iterator[tuple[np.ndarray, Locator, int]]:
    """(values, locator, segment length) for each block of ``block`` elements (whole rows of
    axis 0 for a strided array) of a numpy array, in order."""
    n = arr.size
    if n == 0:
        return
    tuning = plan.tuning
    a = arr.reshape(1) if arr.ndim == 0 else arr
    last = a.shape[-1]
    row = n // a.shape[0] if a.ndim >= 2 else 1  # elements per index of axis 0
    if plan.hooks:
        bs = max(e.block_size for e in plan.entries if e.hook is not None)
        if last <= tuning.block:
            step = max(1, tuning.block // last) * last
            ranges = [(s, min(s + step, n), last) for s in range(0, n, step)]
        else:
            piece = max(bs, tuning.block // bs * bs)
            ranges = [
                (r * last + j, r * last + min(j + piece, last), min(piece, last - j))
                for r in range(n // last)
                for j in range(0, last, piece)
            ]
    else:
        ranges = [(s, min(s + block, n), tuning.piece) for s in range(0, n, block)]
    if a.flags.c_contiguous:
        flat = a.reshape(-1)
        for s, e, seg in ranges:
            yield flat[s:e], Locator(s), seg
        return
    if a.ndim == 1:
        for s, e, seg in ranges:
            yield np.ascontiguousarray(a[s:e]), Locator(s), seg
        return
    # not C-contiguous: read whole rows of axis 0 (copies bounded by the block, or one row)
    rows_per = max(1, min(block, tuning.copy_max) // row)
    for r in range(0, a.shape[0], rows_per):
        rows = np.ascontiguousarray(a[r : r + rows_per]).reshape(-1)
        yield rows, Locator(r * row), last if plan.hooks else tuning.piece


def progress_bar(size: int, work: int, enabled: bool, desc: str, plan: ScanPlan) -> Any:
    """A bar over the ``size`` elements of one pass, shown when the whole scan reads more
    than ``tuning.progress_min`` elements (``work``, over all passes)."""
    if not enabled or work <= plan.tuning.progress_min:
        return None
    from tqdm.auto import tqdm

    return tqdm(total=size, unit="el", unit_scale=True, desc=desc, leave=False)


def _floors(out: BlockPartial | None, plan: ScanPlan) -> tuple[float, ...] | None:
    """Per entry, the error the blocks merged so far (all at lower positions) already beat
    ``limit`` times: later blocks skip elements not above it (see ``scan_block``)."""
    if out is None or plan.collecting:
        return None
    return tuple(
        float(f.top_err[-1]) if f.top_err.size >= plan.limit and plan.limit else 0.0
        for f in out.formats
    )


def run_numpy(arr: np.ndarray, plan: ScanPlan, bar: Any) -> BlockPartial | None:
    """Scan the blocks of a numpy array in order (see the module docstring). A counts-only
    scan without the compiled kernel stays on one thread: numpy's counts hold the GIL too
    often (bincount) to gain from threads."""
    tuning = plan.tuning
    counting = counts_only.eligible(plan)
    workers = 1 if plan.hooks else tuning.worker_threads()
    if counting:
        block = min(tuning.count_block, max(tuning.count_block_min, -(-arr.size // workers)))
    else:
        block = tuning.block
    if (plan.mode is False and not counting) or arr.size <= block:
        workers = 1
    pages = PageRelease(arr)  # a memmap's pages leave the resident set after their block
    out: BlockPartial | None = None
    if workers == 1:
        for values, loc, seg in numpy_blocks(arr, plan, block):
            part = scan_block(values, loc, plan, seg, _floors(out, plan))
            out = part if out is None else out.merge(part)
            pages.release(values)
            if bar is not None:
                bar.update(values.size)
        return out
    pending: deque[tuple[Future[BlockPartial], np.ndarray]] = deque()

    def take() -> None:
        nonlocal out
        fut, values = pending.popleft()
        part = fut.result()
        out = part if out is None else out.merge(part)
        pages.release(values)
        if bar is not None:
            bar.update(values.size)

    pool = _pool(workers)
    try:
        for values, loc, seg in numpy_blocks(arr, plan, block):
            fut = pool.submit(scan_block, values, loc, plan, seg, _floors(out, plan))
            pending.append((fut, values))
            if len(pending) > workers:
                take()
        while pending:
            take()
    finally:
        for fut, _ in pending:  # an error or an interrupt: drop what has not started
            fut.cancel()
        for fut, _ in pending:
            if not fut.cancelled():
                wait([fut])
    return out


_pools: dict[tuple[int, int], ThreadPoolExecutor] = {}
_pools_lock = threading.Lock()


def _pool(workers: int) -> ThreadPoolExecutor:
    """A thread pool kept for the process (starting threads for every scan costs about as
    much as counting a million elements). Keyed by process id too: a forked child inherits
    the pool object but not its threads, so it gets a pool of its own."""
    key = (os.getpid(), workers)
    with _pools_lock:
        pool = _pools.get(key)
        if pool is None:
            pool = _pools[key] = ThreadPoolExecutor(workers, thread_name_prefix="bitprism-scan")
        return pool


def _merge_all(*parts: BlockPartial) -> BlockPartial:
    out = merge_blocks(parts)
    assert out is not None
    return out


def run_dask(darr: Any, plan: ScanPlan) -> BlockPartial | None:
    """Scan a dask array as a dask reduction (see the module docstring)."""
    import dask

    if darr.size == 0:
        return None
    if darr.ndim == 0:
        darr = darr.reshape(1)
    if plan.hooks:
        bs = max(e.block_size for e in plan.entries if e.hook is not None)
        last = darr.chunks[-1]
        starts = np.cumsum((0,) + last[:-1])
        if any(s % bs for s in starts):
            size = max(bs, -(-last[0] // bs) * bs)
            darr = darr.rechunk({darr.ndim - 1: size})
    shape = tuple(int(s) for s in darr.shape)
    starts_per_dim = [np.cumsum((0,) + c[:-1]) for c in darr.chunks]
    blocks = darr.to_delayed()
    delayed_block = dask.delayed(scan_block)
    parts = []
    for idx in np.ndindex(blocks.shape):
        bshape = tuple(int(darr.chunks[d][i]) for d, i in enumerate(idx))
        if 0 in bshape:
            continue
        offsets = tuple(int(starts_per_dim[d][i]) for d, i in enumerate(idx))
        loc = Locator(0, bshape, offsets, shape)
        parts.append(delayed_block(blocks[idx], loc, plan, bshape[-1]))
    merge = dask.delayed(_merge_all)
    while len(parts) > 1:
        parts = [merge(*parts[i : i + 8]) for i in range(0, len(parts), 8)]
    if not parts:
        return None
    (result,) = dask.compute(parts[0])
    return result
