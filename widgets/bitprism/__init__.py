"""bitprism: see any value or tensor split into sign, exponent and significand across formats.

The numeric core is importable without ipywidgets, IPython or matplotlib; the widgets
(``Prism``, ``TensorPrism``) are loaded on first use.
"""

from __future__ import annotations

from typing import Any

from ._version import __version__
from .errors import BitprismError, ParseError, UnsupportedInputError
from .formats import FORMATS, Format, get_format
from .numerics.codes import cast, decode, encode
from .numerics.exact import ExactValue
from .numerics.inspect import CodeClass, Fields, fields, next_down, next_up, ulp, ulp_distance
from .numerics.options import OVERFLOW_MODES, ROUNDING_MODES, SUBNORMAL_MODES, CastOptions

__all__ = [
    "FORMATS",
    "OVERFLOW_MODES",
    "ROUNDING_MODES",
    "SUBNORMAL_MODES",
    "BitprismError",
    "CastOptions",
    "CodeClass",
    "ExactValue",
    "Fields",
    "Format",
    "ParseError",
    "UnsupportedInputError",
    "__version__",
    "cast",
    "decode",
    "encode",
    "fields",
    "get_format",
    "next_down",
    "next_up",
    "ulp",
    "ulp_distance",
]

# Names loaded on first access, so that `import bitprism` stays free of UI and plotting
# libraries and of modules still being imported lazily by their own layer.
_LAZY: dict[str, str] = {}


def __getattr__(name: str) -> Any:
    module = _LAZY.get(name)
    if module is None:
        raise AttributeError(f"module 'bitprism' has no attribute {name!r}")
    import importlib

    value = getattr(importlib.import_module(module, __name__), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted(set(__all__) | set(_LAZY))
