"""Moving around a ``TensorPrism``: selecting, going to an index, panning, finding the next
cell of a kind, and the counts beside the find buttons.

A mixin of ``TensorPrism`` (it reads and sets the widget's traits). Indices are the tensor's
own throughout, also in a reopened case, whose data is the saved window placed where it was
(``_index_offset``): ``_to_data`` and ``_from_data`` convert at the one place each search
reads the data.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from ..errors import BitprismError
from ..formats import Format
from ..numerics.options import CastOptions
from ..render.vocabulary import UNITS
from ..tensors.window import FIND_KINDS, Placed, find, flat_index, parse_index
from .guarded import guarded, message_for
from .tensor_controls import KIND_WORDS

__all__ = ["TensorNavigation", "plural"]


def plural(n: int, word: str) -> str:
    """``1 cell``, ``2 cells``, ``1,024 cells``."""
    return f"{n:,} {word}{'' if n == 1 else 's'}"


class TensorNavigation:
    """Selection, panning, searching and counts of a ``TensorPrism`` (see the module notes)."""

    # provided by TensorPrism
    data: Any
    selected: Any
    row_axis: Any
    col_axis: Any
    fixed: Any
    row_offset: Any
    col_offset: Any
    rows: Any
    cols: Any
    error_unit: Any
    message: Any
    info: Any
    window: Any
    _placement: Placed | None  # the data's place in a larger tensor (a reopened case)
    _token: int
    _stats: Any
    _cell_grid: Any
    nav_counts: Any
    nav_buttons: Any

    options: CastOptions  # CastSettings' property

    def _fmt(self, which: str) -> Format:  # pragma: no cover - TensorPrism's own
        raise NotImplementedError

    # ----- indices ---------------------------------------------------------------------------
    @property
    def _index_offset(self) -> tuple[int, ...]:
        """The tensor index of the data's first element (zeros but in a reopened case)."""
        p = self._placement
        if p is not None and p.array is self.data:
            return p.offset
        return (0,) * self.data.ndim

    @property
    def _full_shape(self) -> tuple[int, ...]:
        """The shape of the tensor the data is (a reopened case: was) part of."""
        p = self._placement
        if p is not None and p.array is self.data:
            return p.shape
        return tuple(int(s) for s in self.data.shape)

    @property
    def _is_block(self) -> bool:
        """Whether the data is a block of a larger tensor (a reopened case's saved window)."""
        return tuple(self.data.shape) != self._full_shape

    def _where_words(self) -> str:
        return "the saved window" if self._is_block else "the tensor"

    def _to_data(self, index: Any) -> tuple[int, ...]:
        return tuple(int(i) - o for i, o in zip(index, self._index_offset))

    def _from_data(self, index: Any) -> tuple[int, ...]:
        return tuple(int(i) + o for i, o in zip(index, self._index_offset))

    def _axis_span(self, ax: int | None) -> tuple[int, int]:
        """(first index, count) held of an axis (1 index for the row axis of 1-D data)."""
        if ax is None:
            return 0, 1
        return self._index_offset[ax], int(self.data.shape[ax])

    def _parse(self, text: str) -> tuple[int, ...]:
        return parse_index(text, self._full_shape, (self.row_axis, self.col_axis), self.fixed)

    # ----- selecting ---------------------------------------------------------------------------
    @guarded
    def _on_cell_click(self, i: int, j: int, button: Any = None) -> None:
        w = self.window
        if w is None or i >= w.rows or j >= w.cols:
            return
        self.select(w.index_of(i, j))

    def select(self, index: Any) -> None:
        """Select a cell by tensor index (a tuple, or text like '3, 17'); shows it in the Prism."""
        if isinstance(index, str):
            index = self._parse(index)
        self.selected = tuple(int(i) for i in np.atleast_1d(index))

    @guarded
    def _on_goto(self, change: Any) -> None:
        text = change["new"]
        if getattr(self, "_suspend", 0) or not text.strip():
            return
        self.goto(text)

    def goto(self, text: str) -> None:
        """Go to and select an index typed as numpy-style coordinates; errors are shown."""
        try:
            idx = self._parse(text)
            self.selected = idx
        except BitprismError as exc:  # the selection and its view stay
            self.message = message_for(exc)

    def _bring_into_view(self, idx: tuple[int, ...]) -> None:
        """Fix the other axes at idx and move the window so that idx is visible, keeping the
        window whole (its shape changes only when the tensor is smaller than the window)."""
        fixed = list(self.fixed)
        for ax, v in enumerate(idx):
            if ax not in (self.row_axis, self.col_axis):
                fixed[ax] = v
        self.fixed = tuple(fixed)
        if self.row_axis is not None:
            r = idx[self.row_axis]
            if not self.row_offset <= r < self.row_offset + self.rows:
                self.row_offset = self._centred(r, self.row_axis, self.rows)
        c = idx[self.col_axis]
        if not self.col_offset <= c < self.col_offset + self.cols:
            self.col_offset = self._centred(c, self.col_axis, self.cols)

    def _centred(self, i: int, ax: int, size: int) -> int:
        lo, n = self._axis_span(ax)
        return max(lo, min(i - size // 2, lo + n - size))

    # ----- panning ---------------------------------------------------------------------------
    @guarded
    def _on_pan(self, name: str, button: Any = None) -> None:
        self.pan(name)

    def pan(self, direction: str) -> None:
        """Move the window: left/right/up/down by one, page-left/... by a page (clamped)."""
        page = direction.startswith("page-")
        d = direction[5:] if page else direction
        if d not in ("left", "right", "up", "down"):
            raise BitprismError(f"direction must be left, right, up or down (optionally "
                                f"'page-...'); got {direction!r}")
        if d in ("left", "right"):
            lo, n = self._axis_span(self.col_axis)
            step = self.cols if page else 1
            v = self.col_offset + (step if d == "right" else -step)
            self.col_offset = max(lo, min(v, lo + max(n - self.cols, 0)))
        else:
            lo, n = self._axis_span(self.row_axis)
            step = self.rows if page else 1
            v = self.row_offset + (step if d == "down" else -step)
            self.row_offset = max(lo, min(v, lo + max(n - self.rows, 0)))

    # ----- finding -----------------------------------------------------------------------------
    @guarded
    def _on_find(self, kind: str, backward: bool, button: Any = None) -> None:
        self.find_next(kind, backward)

    def count(self, kind: str) -> int:
        """How many cells of the data are of a kind (format A; cached)."""
        if kind == "largest_error":
            return int(self._largest()[1])
        if kind not in FIND_KINDS:
            raise BitprismError(f"kind must be one of {', '.join(FIND_KINDS)}; got {kind!r}")
        f = None if kind in ("nan", "inf") else self._fmt("a")
        return int(self._stats.count(self._token, self.data, kind, f, self.options))

    def _largest(self) -> tuple[float | None, int]:
        return self._stats.largest(self._token, self.data, self._fmt("a"),  # type: ignore[no-any-return]
                                   self.options, self.error_unit)

    def find_next(self, kind: str, backward: bool = False) -> tuple[int, ...] | None:
        """Select the next (or previous) cell of a kind in C order over the whole tensor (a
        reopened case: its saved window), starting after the selection (or the window's first
        cell), wrapping around."""
        arr = self.data
        if kind not in FIND_KINDS:
            raise BitprismError(f"kind must be one of {', '.join(FIND_KINDS)}; got {kind!r}")
        fa = self._fmt("a")
        target = None
        where = "" if kind in ("nan", "inf") else f" in {fa.name}"
        if kind == "largest_error":
            target, n = self._largest()
            if target is None:
                self._refresh_counts()
                self.info = f"no cell of {self._where_words()} has a finite result in {fa.name}"
                return None
        if self.selected:
            start = flat_index(self._to_data(self.selected), arr.shape)
        else:
            first = self._to_data(self.window.index_of(0, 0))
            start = flat_index(first, arr.shape) - (0 if backward else 1)
        hit = find(arr, kind, None if kind in ("nan", "inf") else fa, self.options, start,
                   backward, self.error_unit, target)
        if kind != "largest_error":
            self.count(kind)  # asked for: the count of this kind shows from now on
        if hit is None:
            self._refresh_counts()
            self.info = f"no {KIND_WORDS[kind]} cell{where} in {self._where_words()}"
            return None
        flat, wrapped = hit
        idx = self._from_data(np.unravel_index(flat, arr.shape))
        self.selected = idx
        if wrapped:
            self.info = (f"{KIND_WORDS[kind]}: wrapped around to the "
                         f"{'end' if backward else 'start'} of {self._where_words()}")
        return idx

    # ----- counts beside the find buttons ------------------------------------------------------
    def _refresh_counts(self) -> None:
        fa, opts = self._fmt("a"), self.options
        for kind, html in self.nav_counts.items():
            text, n = self._count_text(kind, fa, opts)
            html.value = text
            off = n == 0
            for way in ("prev", "next"):
                b = self.nav_buttons[f"{way}-{kind}"]
                if b.disabled != off:
                    b.disabled = off

    def _count_text(self, kind: str, fa: Format, opts: CastOptions) -> tuple[str, int | None]:
        """The words beside a kind's find buttons, and the count (None: not counted yet)."""
        word = KIND_WORDS[kind]
        scope = " (saved window)" if self._is_block and not self._recorded_count(kind) else ""
        if kind == "largest_error":
            known = self._stats.known_largest(self._token, fa, opts, self.error_unit)
            unit = UNITS["ulp"] if self.error_unit == "ulp" else "relative"
            if known is None:
                return f"{word} ({fa.name}, {unit}): press ◀ ▶ to find", None
            best, n = known
            if best is None:
                return f"{word} ({fa.name}){scope}: none", 0
            return f"{word} {best:.3g} {unit} in {fa.name}{scope}: {plural(n, 'cell')}", n
        where = "" if kind in ("nan", "inf") else f" in {fa.name}"
        f = None if kind in ("nan", "inf") else fa
        count = self._stats.cheap_count(self._token, self.data, kind, f, opts)
        if count is None:  # a whole pass over a large tensor waits for a press of ◀ or ▶
            return f"{word}{where}: press ◀ ▶ to find", None
        return f"{word}{where}{scope}: {plural(count, 'cell')}", int(count)

    def _recorded_count(self, kind: str) -> bool:  # pragma: no cover - TensorPrism's own
        raise NotImplementedError
