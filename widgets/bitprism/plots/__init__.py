"""Plots: matplotlib figures of scan results. matplotlib is imported only when one is drawn."""

from __future__ import annotations

from .. import display
from ..tensors.scan import ScanResult
from .range_chart import range_chart

__all__ = ["range_chart"]

display.register("plot", ScanResult, range_chart)
