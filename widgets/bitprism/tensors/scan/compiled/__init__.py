"""The scan's compiled loops (numba, optional), each beside its numpy twin.

* ``pattern_counts``: the counts-only scan's pass over bit patterns (twin: ``_numpy_counts``);
* ``error_kernels``: the error measures of casts into formats of up to 16 bits (twin: the
  numpy path of ``scan.measure``);
* ``fast_casts``: float32 -> float16 / bfloat16 casts with the default options (twin:
  ``numerics.codes.encode``);
* ``jit``: how they are compiled and cached.

Only the scan wing imports them. Results are the same with and without numba.
"""
