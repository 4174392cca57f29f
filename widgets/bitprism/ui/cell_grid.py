"""The grid of cell buttons of a ``TensorPrism``: built once, then only repainted.

The cells, the row and column heads and their order in the ``GridBox`` are made for the largest
window shown so far and kept: a smaller window (a shape change near the tensor's edge, fewer
rows or columns, other axes) hides the cells it does not use (a shared ``display: none``
layout) instead of rebuilding the box, and a larger one adds cells once. So the front end
makes each cell's view once, and a long session leaves nothing behind.

Each cell is a standard ``Button``; a repaint changes its label, tooltip and shared style, only
for cells whose paint changed, each with one short state message (``push_state``). The styles
are shared by all cells of one colour and have short model ids, so a cell's update refers to
its colour in a few bytes. A click on a cell calls ``on_click(i, j)`` with its row and column
in the window.
"""

from __future__ import annotations

import functools
from typing import Any, Callable

import ipywidgets as W

from ..render.grid_html import PAINTS, GridPaint
from ..tensors.window import Window
from .widget_internals import push_state, short_model_id

__all__ = ["CELL_MAX", "CELL_MIN", "CellGrid"]

CELL_MIN, CELL_MAX = 34, 40  # px: a cell shrinks to fit a narrow column, 5 label characters fit


class CellGrid:
    """The ``GridBox`` of column heads, row heads and cell buttons (see the module notes)."""

    def __init__(self, on_click: Callable[..., Any]) -> None:
        self._on_click = on_click
        self.cells: list[list[W.Button]] = []  # [row][column], capacity rows x columns
        self.row_heads: list[W.Label] = []
        self.col_heads: list[W.Label] = []
        self.corner = W.Label("")
        self.shape = (0, 0)  # the window shown
        self.capacity = (0, 0)  # the cells made
        self.selected_cell: tuple[int, int] | None = None
        self.styles = {
            k: W.ButtonStyle(button_color=p.fill, text_color=p.ink, model_id=short_model_id())
            for k, p in PAINTS.items()
        }
        self.cell_layout = W.Layout(width="auto", height="24px", padding="0", margin="0")
        self.head_layout = W.Layout(width="auto", margin="0 3px", justify_content="center")
        self.hidden_layout = W.Layout(display="none")
        self._shown: dict[tuple[int, int], tuple[str, str, str]] = {}
        self._visible: dict[int, bool] = {}  # id(cell or head) -> shown
        self.box = W.GridBox(layout=W.Layout(grid_gap="1px", padding="1px", width="fit-content",
                                             max_width="100%", overflow="auto"))
        self.box.add_class("bitprism-grid")

    def _cell(self, i: int, j: int, visible: bool) -> W.Button:
        b = W.Button(description="", style=self.styles["page"],
                     layout=self.cell_layout if visible else self.hidden_layout)
        b.add_class("bitprism-cell")
        b.on_click(functools.partial(self._on_click, i, j))
        self._visible[id(b)] = visible
        return b

    def _head(self, visible: bool) -> W.Label:
        h = W.Label(layout=self.head_layout if visible else self.hidden_layout)
        h.add_class("bitprism-head")
        self._visible[id(h)] = visible
        return h

    def _grow(self, rows: int, cols: int) -> None:
        """Make cells for a ``rows`` x ``cols`` window (never fewer than made already); new
        ones start shown when that window uses them."""
        R, C = max(rows, self.capacity[0]), max(cols, self.capacity[1])
        if (R, C) == self.capacity:
            return
        for i in range(R):
            if i == len(self.cells):
                self.cells.append([])
            while len(self.cells[i]) < C:
                j = len(self.cells[i])
                self.cells[i].append(self._cell(i, j, i < rows and j < cols))
        while len(self.row_heads) < R:
            self.row_heads.append(self._head(len(self.row_heads) < rows))
        while len(self.col_heads) < C:
            self.col_heads.append(self._head(len(self.col_heads) < cols))
        children: list[W.Widget] = [self.corner, *self.col_heads]
        for i in range(R):
            children.append(self.row_heads[i])
            children.extend(self.cells[i])
        self.box.children = children  # the only time the front end makes these views
        self.capacity = (R, C)

    def _set_visible(self, w: W.DOMWidget, shown: W.Layout, visible: bool) -> None:
        if self._visible[id(w)] != visible:
            push_state(w, {"layout": shown if visible else self.hidden_layout})
            self._visible[id(w)] = visible

    def _reshape(self, rows: int, cols: int) -> None:
        """Show the first ``rows`` x ``cols`` cells; hide the others (kept for later)."""
        if (rows, cols) == self.shape:
            return
        self._select(None)
        R, C = self.capacity
        for i in range(R):
            self._set_visible(self.row_heads[i], self.head_layout, i < rows)
            for j in range(C):
                self._set_visible(self.cells[i][j], self.cell_layout, i < rows and j < cols)
        for j in range(C):
            self._set_visible(self.col_heads[j], self.head_layout, j < cols)
        track = f"repeat({cols}, minmax({CELL_MIN}px, {CELL_MAX}px))"
        self.box.layout.grid_template_columns = f"max-content {track}"
        self.shape = (rows, cols)

    def show(self, w: Window, paint: GridPaint, selected: tuple[int, int] | None) -> None:
        """Paint the window; ``selected`` is the (row, column) of the selected cell, if shown."""
        rows, cols = w.rows, w.cols
        self._grow(rows, cols)
        self._reshape(rows, cols)
        shown = self._shown
        styles = self.styles
        blank = ("", "", "")
        for i in range(rows):
            keys, labels, tips = paint.keys[i], paint.labels[i], paint.tooltips[i]
            row = self.cells[i]
            for j in range(cols):
                new = (labels[j], tips[j], keys[j])
                old = shown.get((i, j), blank)
                if new == old:
                    continue
                ch: dict[str, Any] = {}
                if new[0] != old[0]:
                    ch["description"] = new[0]
                if new[1] != old[1]:
                    ch["tooltip"] = new[1]
                if new[2] != old[2]:
                    ch["style"] = styles[new[2]]
                push_state(row[j], ch)
                shown[(i, j)] = new
        for i in range(rows):
            text = str(w.row0 + i) if w.row_axis is not None else ""
            if self.row_heads[i].value != text:
                push_state(self.row_heads[i], {"value": text})
        for j in range(cols):
            text = str(w.col0 + j)
            if self.col_heads[j].value != text:
                push_state(self.col_heads[j], {"value": text})
        self._select(selected)

    def cell(self, i: int, j: int) -> W.Button:
        """The button of window cell (i, j)."""
        return self.cells[i][j]

    def _select(self, sel: tuple[int, int] | None) -> None:
        """The selected cell carries the CSS class that outlines it."""
        if sel == self.selected_cell:
            return
        if self.selected_cell is not None:
            self.cell(*self.selected_cell).remove_class("bitprism-cell-selected")
        if sel is not None:
            self.cell(*sel).add_class("bitprism-cell-selected")
        self.selected_cell = sel

    def widgets(self) -> list[W.Widget]:
        """Every widget this grid made (for closing)."""
        out: list[W.Widget] = [self.box, self.corner, *self.row_heads, *self.col_heads,
                               self.cell_layout, self.head_layout, self.hidden_layout,
                               *self.styles.values()]
        for row in self.cells:
            out.extend(row)
        return out
