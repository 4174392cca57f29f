"""Render layer: pure functions from result objects to HTML strings and plain text.

May import numerics and tensors; never ipywidgets, so every view is also available headless.
Importing this package registers each result type's text and HTML views with the display seam
(``bitprism.display``), which is how ``result.to_text()`` / ``to_html()`` find them.
"""

from __future__ import annotations

from .. import display
from ..numerics.compare import Comparison
from ..numerics.evaluate import Evaluation
from ..probes import Trace, Watch
from ..probes.cases import ProbeCase
from ..tensors.advisor import ScaleAdvice
from ..tensors.mx import MXResult
from ..tensors.scan import ScanResult
from ..tensors.scaling import ScaleSweep, ScalingComparison, ScalingReplay
from .compare_html import comparison_html, evaluations_html
from .compare_text import comparison_text
from .evaluation_text import evaluation_text
from .probes_html import probe_case_html, trace_html, watch_html
from .probes_text import probe_case_text, trace_text, watch_text
from .records import advice_html, advice_text, mx_html, mx_text
from .scan_html import scan_html
from .scan_text import scan_text
from .scaling_html import replay_html, scaling_comparison_html, sweep_html
from .scaling_text import replay_text, scaling_comparison_text, sweep_text

__all__: list[str] = []

display.register("text", Comparison, comparison_text)
display.register("html", Comparison, comparison_html)
display.register("text", MXResult, mx_text)
display.register("html", MXResult, mx_html)
display.register("text", ScaleAdvice, advice_text)
display.register("html", ScaleAdvice, advice_html)
display.register("text", Evaluation, evaluation_text)
display.register("html", Evaluation, lambda ev: evaluations_html([ev]))
display.register("text", ScanResult, scan_text)
display.register("html", ScanResult, scan_html)
display.register("text", Trace, trace_text)
display.register("html", Trace, trace_html)
display.register("text", Watch, watch_text)
display.register("html", Watch, watch_html)
display.register("text", ProbeCase, probe_case_text)
display.register("html", ProbeCase, probe_case_html)
display.register("text", ScaleSweep, sweep_text)
display.register("html", ScaleSweep, sweep_html)
display.register("text", ScalingComparison, scaling_comparison_text)
display.register("html", ScalingComparison, scaling_comparison_html)
display.register("text", ScalingReplay, replay_text)
display.register("html", ScalingReplay, replay_html)
