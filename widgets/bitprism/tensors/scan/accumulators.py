"""Mutable per-entry accumulators of one block scan, frozen into a ``FormatPartial`` at its end.

Kept apart from the steps that fill them so that each step reads as what it measures: class
counts, the first positions of each kind, error sums and maxima, the relative-error histogram
(or the kept values of a small input), and the block's largest errors.
"""

from __future__ import annotations

from typing import Callable

import numpy as np

from .partials import REL_BINS, ExactSum, FormatPartial, compress_values
from .plan import Locator, ScanPlan

__all__ = ["EntryAcc", "update_top"]


class EntryAcc:
    """What one block has found so far about one format."""

    def __init__(self, plan: ScanPlan, floor: float = 0.0) -> None:
        self.overflow = self.underflow = self.subnormal = self.invalid = self.block_nan = 0
        self.exact = self.compared = 0
        self.max_abs = self.max_rel = self.max_ulp = 0.0
        self.sum_x2 = self.sum_err2 = self.sum_ulp = 0.0
        histogram = plan.mode in ("exact", "histogram")
        self.hist = np.zeros(REL_BINS, np.int64) if histogram else None
        self.values: list[np.ndarray] | None = (
            [] if plan.mode == "exact" and plan.keep_values else None
        )
        self.where: dict[str, list[np.ndarray]] = {"overflow": [], "underflow": [], "subnormal": []}
        self.found = {"overflow": 0, "underflow": 0, "subnormal": 0}
        self.top_err = np.zeros(0)
        self.top_idx = np.zeros(0, np.int64)
        # an error that blocks at lower positions already beat ``limit`` times: elements with
        # errors not above it cannot make the final "largest error" list
        self.floor = floor
        self.collected: list[list[np.ndarray]] = []  # refinement pass, per target range
        self.ones = 0  # compared elements whose relative error is exactly 1 (flushed to zero)

    def note(
        self, kind: str, limit: int, mask_fn: Callable[[], np.ndarray], loc: Locator, at: int
    ) -> None:
        """Keep the first positions of ``kind`` in this piece, up to ``limit`` in all (the
        mask is built only while positions are still wanted)."""
        need = limit - self.found[kind]
        if need <= 0:
            return
        idx = np.flatnonzero(mask_fn())[:need]
        if idx.size:
            self.where[kind].append(loc.to_global(idx + at))
            self.found[kind] += idx.size

    def note_indices(self, kind: str, limit: int, idx: np.ndarray, loc: Locator, at: int) -> None:
        """``note`` for positions already at hand (ascending)."""
        need = limit - self.found[kind]
        if need <= 0:
            return
        idx = idx[:need]
        if idx.size:
            self.where[kind].append(loc.to_global(idx + at))
            self.found[kind] += idx.size

    def freeze(self, subnormal_known: bool) -> FormatPartial:
        def cat(kind: str) -> np.ndarray:
            parts = self.where[kind]
            return np.concatenate(parts) if parts else np.zeros(0, np.int64)

        values = compress_values(self.values) if self.values is not None else None
        return FormatPartial(
            self.overflow,
            self.underflow,
            self.subnormal if subnormal_known else -1,
            self.invalid,
            self.exact,
            self.compared,
            self.max_abs,
            self.max_rel,
            self.max_ulp,
            ExactSum.of(self.sum_x2),
            ExactSum.of(self.sum_err2),
            ExactSum.of(self.sum_ulp),
            self.hist,
            values,
            cat("overflow"),
            cat("underflow"),
            cat("subnormal"),
            self.top_err,
            self.top_idx,
            self.ones,
            block_nan=self.block_nan,
        )


def update_top(acc: EntryAcc, err: np.ndarray, limit: int, loc: Locator, at: int) -> None:
    """Fold a piece's largest errors into the block's list: (error desc, index asc)."""
    floor = acc.top_err[-1] if acc.top_err.size >= limit else acc.floor
    cand = np.flatnonzero(err > floor)  # ties at the floor sit at later positions: never enter
    if cand.size > 4 * limit + 16:
        vals = err[cand]
        cut = vals[np.argpartition(vals, vals.size - limit)[vals.size - limit :]].min()
        above = cand[vals > cut]
        ties = cand[vals == cut][:limit]
        cand = np.concatenate((above, ties))
    if not cand.size:
        return
    v_all = np.concatenate((acc.top_err, err[cand]))
    i_all = np.concatenate((acc.top_idx, loc.to_global(cand + at)))
    order = np.lexsort((i_all, -v_all))[:limit]
    acc.top_err, acc.top_idx = v_all[order], i_all[order]
