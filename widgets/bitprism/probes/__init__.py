"""Probes: find where a NaN, an Inf or an overflow is born in running code.

``trace(fn, *args)`` intercepts every numpy operation (NEP 13 / NEP 18 on a wrapper array
type) or torch operation (``TorchFunctionMode``) of one call; ``watch(module)`` hooks every
submodule of a torch model. Both keep frozen records per operation or module call with the
counts of the counts-only scan, and can emulate a format with a float64 shadow beside.

This layer sits above tensors and below render: it is headless, imports torch only once torch
objects arrive, and reaches the widgets only through ``views.open_view``, which the package
root installs.
"""

from __future__ import annotations

from .records import EVENTS, FormatCounts, OpRecord, WatchRecord
from .trace import Trace, trace
from .watch import ModuleRow, Watch, watch

__all__ = [
    "EVENTS",
    "FormatCounts",
    "ModuleRow",
    "OpRecord",
    "Trace",
    "Watch",
    "WatchRecord",
    "trace",
    "watch",
]
