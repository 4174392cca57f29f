"""The arrays a probe keeps: copies of the outputs and inputs of the records where an event is
born first, within a byte budget (``capture_mib``) that is never exceeded.

A record is kept whole (its output and every input) or not at all; one that does not fit in
what is left of the budget is left out, and ``why_missing`` says so.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Callable, Sequence

import numpy as np

from ..errors import BitprismError

__all__ = ["Capture", "CaptureStore", "check_capture_mib"]


def check_capture_mib(capture_mib: Any) -> int:
    """The budget in bytes, or a ``BitprismError`` naming the argument."""
    if isinstance(capture_mib, bool) or not isinstance(capture_mib, (int, float)) or not (
        capture_mib >= 0
    ) or capture_mib == float("inf"):
        raise BitprismError(f"capture_mib must be a number of MiB >= 0; got {capture_mib!r}")
    return int(capture_mib * 2**20)


@dataclass(frozen=True)
class Capture:
    """Copies of one record's output and inputs (numpy arrays with the original bits)."""

    output: np.ndarray
    inputs: tuple[np.ndarray, ...]

    @property
    def nbytes(self) -> int:
        return int(self.output.nbytes + sum(a.nbytes for a in self.inputs))


@dataclass
class CaptureStore:
    """Captures by record index, their bytes never above ``budget``."""

    budget: int
    used: int = 0
    kept: dict[int, Capture] = field(default_factory=dict)
    refused: dict[int, int] = field(default_factory=dict)  # index -> bytes it needed

    def offer(self, index: int, output: Callable[[], np.ndarray | None],
              inputs: Callable[[], Sequence[np.ndarray]], nbytes: int) -> None:
        """Keep copies of a record's arrays if ``nbytes`` fits in what is left (the arrays are
        only made, by the callables, when they fit)."""
        if index in self.kept:
            return
        if self.used + nbytes > self.budget:
            self.refused[index] = nbytes
            return
        out = output()
        if out is None:
            return
        capture = Capture(np.array(out, copy=True), tuple(np.array(a, copy=True) for a in inputs()))
        if self.used + capture.nbytes > self.budget:
            self.refused[index] = capture.nbytes
            return
        self.kept[index] = capture
        self.used += capture.nbytes

    def get(self, index: int, what: str) -> Capture:
        capture = self.kept.get(index)
        if capture is not None:
            return capture
        raise BitprismError(self.why_missing(index, what))

    def why_missing(self, index: int, what: str) -> str:
        if index in self.refused:
            need = self.refused[index] / 2**20
            return (
                f"{what} was not kept: its arrays need {need:.3g} MiB and capture_mib allowed "
                f"{self.budget / 2**20:.3g} MiB in all ({self.used / 2**20:.3g} MiB used); "
                "run again with a larger capture_mib"
            )
        return (
            f"{what} was not kept: a probe keeps the arrays of the records where an event "
            "(NaN, Inf, overflow, underflow) is born first; "
            f"kept: {', '.join('#' + str(i) for i in sorted(self.kept)) or 'none'}"
        )
