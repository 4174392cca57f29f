"""Plots: matplotlib figures of results (matplotlib is imported only when one is drawn).
Importing this package registers each result type's figure with the display seam."""

from __future__ import annotations

from .. import display
from ..probes import Trace, Watch
from ..tensors.scan import ScanResult
from ..tensors.scaling import ScaleAdvice, ScaleSweep, ScalingReplay
from .heatmap import watch_heatmap
from .range_chart import range_chart
from .sweep import advice_plot, replay_plot, sweep_plot
from .timeline import trace_timeline

__all__ = ["advice_plot", "range_chart", "replay_plot", "sweep_plot", "trace_timeline", "watch_heatmap"]

display.register("plot", ScanResult, range_chart)
display.register("plot", Trace, trace_timeline)
display.register("plot", Watch, watch_heatmap)
display.register("plot", ScaleSweep, sweep_plot)
display.register("plot", ScaleAdvice, advice_plot)
display.register("plot", ScalingReplay, replay_plot)
