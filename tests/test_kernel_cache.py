"""The compiled kernels are compiled once per machine, not once per process.

numba keeps compiled kernels on disk; a process that finds a kernel there loads it in
milliseconds instead of compiling it for seconds. The cache key hashes the values a kernel's
closure holds, so a kernel that held another compiled kernel in its closure (which pickles
with an id drawn afresh in every process) missed the cache every time: each ``bitprism scan``
on the command line paid about two seconds, and every run added a file to the cache folder.
Here a second process must find every kernel that a first one compiled or loaded.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

import bitprism
from bitprism.tensors.scan.compiled.jit import available

needs_numba = pytest.mark.skipif(not available(), reason="numba not installed")

# Every compiled path of scan: counts only (float32 and float64 patterns, with and without the
# exponent histogram), histogram and exact quantiles (the error kernels and the fast casts),
# a read-only input (a memmapped file is one: numba types it apart from a writable array),
# the positions search, MX quantization, and the emulated rounding of a trace (float32 and
# float64 inputs, running sums). Prints the cache misses of every kernel.
CHILD = r"""
import json, numpy as np
from numba.core.dispatcher import Dispatcher
import bitprism as bp
from bitprism.probes import compiled_rounding
from bitprism.tensors.scan.compiled import error_kernels, fast_casts, pattern_counts

# kernels first built on worker threads (8M elements: two blocks), where they once raced
bp.scan(np.ones(1 << 23, np.float32), ["float16"], progress=False, quantiles=False)
x = np.resize(np.array([0.0, -0.0, 1e-45, 3e-39, 1.5, -2.75, 65520.0, 1e30, np.inf, -np.inf, np.nan],
                      np.float32), 1 << 16)  # above the size that stays on numpy
ro = x.copy()
ro.flags.writeable = False
formats = ["bfloat16", "float16", "float8_e4m3fn", "float6_e3m2fn"]
for data in (x, x.astype(np.float64), ro):
    for q in (False, "histogram", "exact"):
        r = bp.scan(data, formats, progress=False, quantiles=q, exponents=q is False)
        r.where("overflow", "float16")
bp.mx_quantize(x[np.isfinite(x)], "mxfp8_e4m3")
a = np.resize(x[np.isfinite(x)], (64, 128))
bp.trace(np.matmul, a, a.T.copy(), emulate="bfloat16")
bp.trace(np.add, a.astype(np.float64), 0.5, emulate="float16")
kernels = [k for ks in pattern_counts._kernels().values() for k in ks]
kernels += list(error_kernels._kernels()) + list(fast_casts._kernels())
kernels.append(compiled_rounding._kernels())
print(json.dumps({k.py_func.__qualname__ + str(i): sum(k.stats.cache_misses.values())
                  for i, k in enumerate(kernels) if isinstance(k, Dispatcher)}))
"""


def cache_misses(cache_dir: Path, user_wide: bool = False, cwd: Path | None = None) -> dict[str, int]:
    """Run CHILD with an empty cache folder: ``NUMBA_CACHE_DIR``, or (``user_wide``) the
    per-user folder bitprism chooses under ``XDG_CACHE_HOME``."""
    env = dict(os.environ, BITPRISM_NUMBA="1")
    env.pop("NUMBA_CACHE_DIR", None)
    if user_wide:
        env["XDG_CACHE_HOME"] = str(cache_dir)
    else:
        env["NUMBA_CACHE_DIR"] = str(cache_dir)
    done = subprocess.run([sys.executable, "-c", CHILD], env=env, capture_output=True, text=True,
                          timeout=900, cwd=cwd)
    assert done.returncode == 0, done.stderr
    return json.loads(done.stdout.strip().splitlines()[-1])


@needs_numba
def test_second_process_compiles_nothing(tmp_path: Path) -> None:
    first = cache_misses(tmp_path)
    assert sum(first.values()) > 0  # an empty cache folder: the first process compiles
    second = cache_misses(tmp_path)
    assert second.keys() == first.keys()
    assert {k: n for k, n in second.items() if n} == {}


def _package_cache_files() -> set[Path]:
    root = Path(bitprism.__file__).parent
    return {p for p in root.rglob("*") if p.suffix in (".nbi", ".nbc")}


@needs_numba
def test_cache_lives_outside_the_package(tmp_path: Path) -> None:
    """Without NUMBA_CACHE_DIR the compiled loops are cached in the per-user folder
    (XDG_CACHE_HOME/bitprism/numba here), never beside the package's source files, and a
    second process finds them there."""
    before = _package_cache_files()
    cwd = tmp_path / "cwd"
    cwd.mkdir()
    first = cache_misses(tmp_path, user_wide=True, cwd=cwd)
    assert sum(first.values()) > 0
    assert any((tmp_path / "bitprism" / "numba").rglob("*.nbi"))
    assert _package_cache_files() == before
    assert list(cwd.iterdir()) == []  # nothing in the folder the process ran in either
    second = cache_misses(tmp_path, user_wide=True)
    assert {k: n for k, n in second.items() if n} == {}
