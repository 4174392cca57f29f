"""The grid of cell buttons of a ``TensorPrism``: built once per window shape, then reused.

Each cell is a standard ``Button``; a pan only changes its label, tooltip and shared style, and
only for cells whose paint changed, each with one short state message (``push_state``). The
styles are shared by all cells of one colour and have short model ids, so a cell's update
refers to its colour in a few bytes. A click on a cell calls ``on_click(k)`` with the cell's
position ``k = i * cols + j`` in the window.
"""

from __future__ import annotations

import functools
from typing import Any, Callable

import ipywidgets as W

from ..render.grid_html import PAINTS, GridPaint
from ..tensors.window import Window
from .widget_internals import has_class, push_state, short_model_id

__all__ = ["CellGrid"]


class CellGrid:
    """The ``GridBox`` of column heads, row heads and cell buttons of one window."""

    def __init__(self, on_click: Callable[..., Any]) -> None:
        self._on_click = on_click
        self.cells: list[W.Button] = []
        self.row_heads: list[W.Label] = []
        self.col_heads: list[W.Label] = []
        self.shape = (0, 0)
        self.selected_cell: tuple[int, int] | None = None
        self.styles = {
            k: W.ButtonStyle(button_color=p.background, text_color=p.text,
                             model_id=short_model_id())
            for k, p in PAINTS.items()
        }
        self.cell_layout = W.Layout(width="40px", height="24px", padding="0", margin="0")
        self.selected_layout = W.Layout(width="40px", height="24px", padding="0", margin="0",
                                        border="2px solid #1f1f1f")
        self._shown: list[tuple[str, str, str]] = []  # (label, tooltip, paint key) per cell
        self.box = W.GridBox(layout=W.Layout(grid_gap="1px", overflow="auto", max_width="100%"))
        self.box.add_class("bitprism-grid")

    def _ensure(self, rows: int, cols: int) -> None:
        """Cells and heads for a ``rows`` x ``cols`` window (buttons are kept for reuse)."""
        if self.shape == (rows, cols):
            return
        need = rows * cols
        while len(self.cells) < need:
            k = len(self.cells)
            b = W.Button(description="", layout=self.cell_layout, style=self.styles["rounded"])
            b.add_class("bitprism-cell")
            b.on_click(functools.partial(self._on_click, k))
            self.cells.append(b)
        while len(self.row_heads) < rows:
            self.row_heads.append(W.Label(layout=W.Layout(width="auto", margin="0 4px 0 0")))
        while len(self.col_heads) < cols:
            self.col_heads.append(W.Label(layout=W.Layout(width="40px", justify_content="center")))
        self.selected_cell = None
        for b in self.cells:
            if b.layout is not self.cell_layout:
                b.layout = self.cell_layout
            if has_class(b, "bitprism-cell-selected"):
                b.remove_class("bitprism-cell-selected")
        children: list[W.Widget] = [W.Label("")] + self.col_heads[:cols]
        for i in range(rows):
            children.append(self.row_heads[i])
            children.extend(self.cells[i * cols : (i + 1) * cols])
        self.box.layout.grid_template_columns = f"auto repeat({cols}, 40px)"
        self.box.children = children
        self.shape = (rows, cols)
        self._shown = [("", "", "")] * need

    def show(self, w: Window, paint: GridPaint, selected: tuple[int, int] | None) -> None:
        """Paint the window; ``selected`` is the (row, column) of the selected cell, if shown."""
        rows, cols = w.rows, w.cols
        self._ensure(rows, cols)
        shown = self._shown
        styles = self.styles
        for i in range(rows):
            keys, labels, tips = paint.keys[i], paint.labels[i], paint.tooltips[i]
            base = i * cols
            for j in range(cols):
                k = base + j
                new = (labels[j], tips[j], keys[j])
                old = shown[k]
                if new == old:
                    continue
                ch: dict[str, Any] = {}
                if new[0] != old[0]:
                    ch["description"] = new[0]
                if new[1] != old[1]:
                    ch["tooltip"] = new[1]
                if new[2] != old[2]:
                    ch["style"] = styles[new[2]]
                push_state(self.cells[k], ch)
                shown[k] = new
        for i in range(rows):
            text = str(w.row0 + i) if w.row_axis is not None else ""
            if self.row_heads[i].value != text:
                push_state(self.row_heads[i], {"value": text})
        for j in range(cols):
            text = str(w.col0 + j)
            if self.col_heads[j].value != text:
                push_state(self.col_heads[j], {"value": text})
        self._select(selected, cols)

    def _select(self, sel: tuple[int, int] | None, cols: int) -> None:
        """The selected cell: outlined, and a CSS class for the page."""
        if sel == self.selected_cell:
            return
        if self.selected_cell is not None:
            b = self.cells[self.selected_cell[0] * cols + self.selected_cell[1]]
            b.layout = self.cell_layout
            b.remove_class("bitprism-cell-selected")
        if sel is not None:
            b = self.cells[sel[0] * cols + sel[1]]
            b.layout = self.selected_layout
            b.add_class("bitprism-cell-selected")
        self.selected_cell = sel
