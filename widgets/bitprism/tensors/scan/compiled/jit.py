"""How every compiled loop is made (the scan's, and the probes' rounding): numba's ``njit``,
optional, cached on disk.

* ``available()``: numba is importable and not turned off (``BITPRISM_NUMBA=0``); without it
  every loop has a numpy twin that gives the same numbers.
* ``make_jit()``: ``njit`` without the GIL and bounds checks, cached on disk in a per-user
  folder (``$XDG_CACHE_HOME/bitprism/numba``, else ``~/.cache/bitprism/numba``, else the
  temporary folder), never in the package folder, unless ``NUMBA_CACHE_DIR`` says where; when
  no folder is writable, compiled in every process.
* ``with_kernels()``: how a kernel reaches the kernels it calls (see its docstring: a closure
  would make numba's disk cache miss in every process).
* ``built_once()``: a module's kernels are built by the first caller while the others wait
  (scans run blocks on worker threads, which may all ask at once).
"""

from __future__ import annotations

import os
import tempfile
import threading
import types
from functools import lru_cache, wraps
from pathlib import Path
from typing import Any, Callable, TypeVar

__all__ = ["available", "built_once", "cache_folder", "make_jit", "with_kernels"]

T = TypeVar("T")
# Held while numba's cache folder setting is switched to ours and a function is decorated, and
# while a module's kernels are built: the setting is process-wide, and a worker thread that
# restored it between numba's two reads of it sent a cache into the current folder.
_LOCK = threading.RLock()


@lru_cache(maxsize=1)
def available() -> bool:
    """True when the compiled loops are used: numba importable, not disabled by
    ``BITPRISM_NUMBA=0`` (read once per process)."""
    if os.environ.get("BITPRISM_NUMBA", "1").strip().lower() in ("0", "false", "no", "off"):
        return False
    try:
        import numba  # noqa: F401
    except ImportError:
        return False
    return True


def cache_folder() -> Path | None:
    """The per-user folder bitprism's compiled loops are cached in (created if needed), or None
    when none is writable."""
    base = os.environ.get("XDG_CACHE_HOME") or os.path.join(os.path.expanduser("~"), ".cache")
    for root in (base, tempfile.gettempdir()):
        folder = Path(root) / "bitprism" / "numba"
        try:
            folder.mkdir(parents=True, exist_ok=True)
        except OSError:
            continue
        if os.access(folder, os.W_OK):
            return folder
    return None


def make_jit(**options: Any) -> Callable[[Callable[..., Any]], Any]:
    """A decorator: numba's ``njit`` as every bitprism kernel uses it (see the module
    docstring); ``options`` go to ``njit`` too. Only call it when ``available()``."""
    from numba import njit
    from numba.core import config

    settings: Any = config  # numba's settings module (its attributes are set at run time)
    folder = None if settings.CACHE_DIR else cache_folder()
    cached = njit(nogil=True, cache=True, boundscheck=False, **options)
    uncached = njit(nogil=True, cache=False, boundscheck=False, **options)

    def jit(fn: Callable[..., Any]) -> Any:
        # numba picks a function's cache folder when it is decorated: point it at ours for
        # that moment only, so a user's own numba code keeps its settings
        with _LOCK:
            return _decorate(fn)

    def _decorate(fn: Callable[..., Any]) -> Any:
        saved = settings.CACHE_DIR
        if folder is not None:
            settings.CACHE_DIR = str(folder)
        try:
            return cached(fn)
        except RuntimeError:  # nowhere writable
            return uncached(fn)
        finally:
            settings.CACHE_DIR = saved

    return jit


def with_kernels(fn: Callable[..., Any], **kernels: Callable[..., Any]) -> Callable[..., Any]:
    """``fn`` (before ``jit``) with ``kernels`` among its global names. A kernel must reach the
    compiled kernels it calls there, not in a closure: numba's on-disk cache key hashes the
    closure's values, and a compiled kernel pickles with an id drawn afresh in every process,
    so a closure over one missed the cache in every process (seconds of compiling, and one
    more cache file each time)."""
    names = dict(fn.__globals__)
    names.update(kernels)
    out = types.FunctionType(fn.__code__, names, fn.__name__, fn.__defaults__, fn.__closure__)
    out.__qualname__ = fn.__qualname__
    out.__module__ = fn.__module__
    out.__doc__ = fn.__doc__
    return out


def built_once(build: Callable[[], T]) -> Callable[[], T]:
    """``build()`` run by the first caller only, the result kept; concurrent callers wait for
    it instead of compiling the same kernels twice."""
    done: list[T] = []

    @wraps(build)
    def get() -> T:
        if not done:
            with _LOCK:
                if not done:
                    done.append(build())
        return done[0]

    return get
