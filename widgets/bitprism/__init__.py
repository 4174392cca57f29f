"""bitprism: see any value or tensor split into sign, exponent and significand across formats.

The numeric core is importable without ipywidgets, IPython or matplotlib; the widgets
(``Prism``, ``TensorPrism``) are loaded on first use.
"""

from __future__ import annotations

from typing import Any

from . import display as _display
from ._version import __version__
from .errors import BitprismError, ParseError, UnsupportedInputError
from .formats import FORMATS, Format, get_format
from .numerics.codes import cast, decode, encode
from .numerics.exact import ExactValue, floor_log2
from .numerics.inspect import CodeClass, Fields, fields, next_down, next_up, ulp, ulp_distance
from .numerics.compare import Comparison, FormatRow, compare
from .numerics.decimal_text import exact_decimal, shortest_decimal
from .numerics.evaluate import Evaluation, evaluate
from .numerics.options import OVERFLOW_MODES, ROUNDING_MODES, SUBNORMAL_MODES, CastOptions
from .numerics.parse import parse, parse_bits
from .probes import FormatCounts, ModuleRow, OpRecord, Trace, Watch, WatchRecord, trace, watch
from .probes import views as _probe_views
from .tensors.adapters import as_array
from .tensors.advisor import ScaleAdvice, suggest_scale
from .tensors.files import open_tensor, open_tensors
from .tensors.mx import MX_FORMATS, MXFormat, MXResult, decode_mx, get_mx_format, mx_quantize
from .tensors.scan import ExponentHistogram, FormatScan, ScanQuantizer, ScanResult, ScanTuning, scan
from .tensors.scaling import ScaleSweep, ScalingComparison, ScalingReplay, compare_scaling, replay_scaling

__all__ = [
    "BitprismError",
    "CastOptions",
    "CodeClass",
    "Comparison",
    "Evaluation",
    "ExactValue",
    "ExponentHistogram",
    "FORMATS",
    "Fields",
    "Format",
    "FormatCounts",
    "FormatRow",
    "FormatScan",
    "MXFormat",
    "MXResult",
    "MX_FORMATS",
    "ModuleRow",
    "OVERFLOW_MODES",
    "OpRecord",
    "ParseError",
    "ROUNDING_MODES",
    "SUBNORMAL_MODES",
    "ScaleAdvice",
    "ScaleSweep",
    "ScalingComparison",
    "ScalingReplay",
    "ScanQuantizer",
    "ScanResult",
    "ScanTuning",
    "Trace",
    "UnsupportedInputError",
    "Watch",
    "WatchRecord",
    "__version__",
    "as_array",
    "cast",
    "compare",
    "compare_scaling",
    "decode",
    "decode_mx",
    "encode",
    "evaluate",
    "exact_decimal",
    "fields",
    "floor_log2",
    "get_format",
    "get_mx_format",
    "mx_quantize",
    "next_down",
    "next_up",
    "open_tensor",
    "open_tensors",
    "parse",
    "parse_bits",
    "replay_scaling",
    "scan",
    "shortest_decimal",
    "suggest_scale",
    "trace",
    "ulp",
    "ulp_distance",
    "watch",
]

# Names loaded on first access, so that `import bitprism` stays free of UI and plotting
# libraries and of modules still being imported lazily by their own layer.
_LAZY: dict[str, str] = {
    "Prism": ".ui.prism",
    "TensorPrism": ".ui.tensor_prism",
    "open_case": ".ui.case_file",
    "WidgetValueError": ".ui.refusal",
    "range_chart": ".plots",
}


def _load_views(view: str) -> None:
    """Import the layer that registers ``view`` functions with the display seam: results
    know nothing of render or plots, and only the package root may import every layer."""
    import importlib

    importlib.import_module(".plots" if view == "plot" else ".render", __name__)


_display.install_loader(_load_views)


def _open_tensor_prism(data: Any, formats: Any, selected: Any) -> Any:
    """A ``TensorPrism`` of a probe's captured array (probes may not import the widgets, so
    the package root hands them this opener)."""
    from .ui.tensor_prism import TensorPrism

    widget = TensorPrism(data, formats=list(formats))
    if selected is not None:
        widget.select(selected)
    return widget


_probe_views.install_opener(_open_tensor_prism)


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
