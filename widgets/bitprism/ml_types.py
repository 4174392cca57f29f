"""ml_dtypes, imported on first use.

Importing ml_dtypes takes several times as long as importing numpy (docs/benchmarks.md), and
much of bitprism never needs it: values typed on the command line, float16/32/64 arrays and
files. No array can hold one of its types before something imports it, so until then a dtype
is known not to be one of them without importing it.
"""

from __future__ import annotations

import sys
from types import ModuleType

__all__ = ["loaded", "module"]


def module() -> ModuleType:
    """The ml_dtypes module, imported now if it was not."""
    import ml_dtypes

    return ml_dtypes


def loaded() -> bool:
    """Whether anything has imported ml_dtypes (before that, no dtype is one of its types)."""
    return "ml_dtypes" in sys.modules
