"""Plots: matplotlib figures of results (matplotlib is imported only when one is drawn).
Importing this package registers each result type's figure with the display seam."""

from __future__ import annotations

from .. import display
from ..probes import Trace, Watch
from ..tensors.scan import ScanResult
from .heatmap import watch_heatmap
from .range_chart import range_chart
from .timeline import trace_timeline

__all__ = ["range_chart", "trace_timeline", "watch_heatmap"]

display.register("plot", ScanResult, range_chart)
display.register("plot", Trace, trace_timeline)
display.register("plot", Watch, watch_heatmap)
