"""The controls of a ``TensorPrism`` (menus, inputs, pan and find buttons) and their arrangement.

``build_controls`` creates them as attributes of the widget (``tp.view_menu``,
``tp.pan_buttons["page-right"]``, ...); the widget connects them to its callbacks, and
``layout_rows`` gives its children in display order. ``sync_controls`` and ``sync_sliders``
show the widget's traits in them; the widget calls them with its control callbacks suspended.
"""

from __future__ import annotations

import functools
from typing import Any, Callable

import ipywidgets as W

from ..formats import Format
from ..numerics.options import OVERFLOW_MODES, ROUNDING_MODES, SUBNORMAL_MODES
from ..render.grid_html import VIEWS
from ..tensors.window import ERROR_UNITS, FIND_KINDS, MAX_SIDE, Window
from .tensor_case import SUMMARY_SCOPES

__all__ = [
    "KIND_WORDS",
    "PANS",
    "build_controls",
    "layout_rows",
    "sync_controls",
    "sync_sliders",
    "trait_controls",
]

# what a kind of cell is called in tooltips and messages
KIND_WORDS = {"nan": "NaN", "inf": "Inf", "overflow": "overflow", "underflow": "underflow",
              "largest_error": "largest error"}

# pan buttons: (direction for TensorPrism.pan, label, tooltip)
PANS = (("page-left", "⇇", "left by a page"), ("left", "←", "left by one column"),
        ("right", "→", "right by one column"), ("page-right", "⇉", "right by a page"),
        ("page-up", "⇈", "up by a page"), ("up", "↑", "up by one row"),
        ("down", "↓", "down by one row"), ("page-down", "⇊", "down by a page"))


def build_controls(tp: Any) -> None:
    """Create the control widgets of ``tp`` (not yet connected to anything)."""
    lay = W.Layout
    tp.message_html = W.HTML()
    tp.message_html.add_class("bitprism-message")
    tp.summary_html = W.HTML()
    tp.summary_html.add_class("bitprism-summary")
    tp.scope_menu = W.Dropdown(options=list(SUMMARY_SCOPES), description="summary of",
                               layout=lay(width="200px"))
    tp.chart_button = W.Button(description="range chart", tooltip=(
        "draw the range chart of the summary (exponent histogram over each format's range)"),
        layout=lay(width="auto"))
    tp.chart_button.add_class("bitprism-range-chart")
    tp.chart_output = W.Output()
    tp.view_menu = W.Dropdown(options=list(VIEWS), description="view",
                              layout=lay(width="200px"))
    tp.log_box = W.Checkbox(description="log-magnitude", indent=False,
                            layout=lay(width="130px"))
    tp.unit_menu = W.Dropdown(options=list(ERROR_UNITS), description="error",
                              layout=lay(width="170px"))
    tp.a_menu = W.Dropdown(options=[], description="format A", layout=lay(width="240px"))
    tp.b_menu = W.Dropdown(options=[], description="format B", layout=lay(width="240px"))
    tp.rounding_menu = W.Dropdown(options=list(ROUNDING_MODES), description="rounding")
    tp.overflow_menu = W.Dropdown(options=list(OVERFLOW_MODES), description="overflow")
    tp.subnormals_menu = W.Dropdown(options=list(SUBNORMAL_MODES), description="subnormals")
    tp.seed_input = W.IntText(value=0, description="seed", layout=lay(width="160px"))
    tp.row_axis_menu = W.Dropdown(options=[], description="rows: axis",
                                  layout=lay(width="170px"))
    tp.col_axis_menu = W.Dropdown(options=[], description="columns: axis",
                                  layout=lay(width="190px"))
    tp.sliders_box = W.VBox()
    tp.row_input = W.IntText(description="row", layout=lay(width="160px"))
    tp.col_input = W.IntText(description="column", layout=lay(width="160px"))
    tp.rows_input = W.BoundedIntText(min=1, max=MAX_SIDE, description="rows",
                                     layout=lay(width="130px"))
    tp.cols_input = W.BoundedIntText(min=1, max=MAX_SIDE, description="cols",
                                     layout=lay(width="130px"))
    for widget in (tp.row_input, tp.col_input, tp.rows_input, tp.cols_input, tp.seed_input):
        widget.continuous_update = False
    tp.goto_input = W.Text(placeholder="go to index, e.g. 3, 17 or [0, 3, 17]",
                           continuous_update=False, layout=lay(width="300px"))
    tp.goto_input.add_class("bitprism-goto")
    tp.pan_buttons = {}
    for name, label, tip in PANS:
        b = W.Button(description=label, tooltip=tip, layout=lay(width="34px"))
        b.add_class(f"bitprism-pan-{name}")
        tp.pan_buttons[name] = b
    tp.nav_buttons = {}
    tp.nav_counts = {}
    rows = []
    for kind in FIND_KINDS:
        slug = kind.replace("_", "-")
        prev = W.Button(description="◀", tooltip=f"previous {KIND_WORDS[kind]} cell",
                        layout=lay(width="34px"))
        nxt = W.Button(description="▶", tooltip=f"next {KIND_WORDS[kind]} cell",
                       layout=lay(width="34px"))
        prev.add_class(f"bitprism-prev-{slug}")
        nxt.add_class(f"bitprism-next-{slug}")
        tp.nav_buttons[f"prev-{kind}"] = prev
        tp.nav_buttons[f"next-{kind}"] = nxt
        count = W.HTML(layout=lay(width="230px"))
        tp.nav_counts[kind] = count
        rows.append(W.HBox([prev, nxt, count]))
    tp.nav_box = W.VBox(rows)
    tp.position_html = W.HTML()
    tp.legend_html = W.HTML()


def trait_controls(tp: Any) -> tuple[tuple[W.ValueWidget, str], ...]:
    """(control, trait) pairs: each control's value sets that trait of ``tp``."""
    return (
        (tp.view_menu, "view"), (tp.log_box, "log_scale"), (tp.unit_menu, "error_unit"),
        (tp.a_menu, "format_a"), (tp.b_menu, "format_b"),
        (tp.rounding_menu, "rounding"), (tp.overflow_menu, "overflow"),
        (tp.subnormals_menu, "subnormals"), (tp.seed_input, "seed"),
        (tp.row_axis_menu, "row_axis"), (tp.col_axis_menu, "col_axis"),
        (tp.row_input, "row_offset"), (tp.col_input, "col_offset"),
        (tp.rows_input, "rows"), (tp.cols_input, "cols"),
        (tp.scope_menu, "summary_scope"),
    )


def layout_rows(tp: Any) -> list[W.Widget]:
    """The children of ``tp``, top to bottom."""
    p = tp.pan_buttons
    return [
        W.HBox([tp.summary_html]),
        W.HBox([tp.scope_menu, tp.chart_button]),
        tp.chart_output,
        W.HBox([tp.view_menu, tp.a_menu, tp.b_menu, tp.log_box, tp.unit_menu]),
        W.HBox([tp.rounding_menu, tp.overflow_menu, tp.subnormals_menu, tp.seed_input]),
        W.HBox([tp.row_axis_menu, tp.col_axis_menu, tp.rows_input, tp.cols_input]),
        tp.sliders_box,
        W.HBox([p["page-left"], p["left"], p["right"], p["page-right"], p["page-up"],
                p["up"], p["down"], p["page-down"], tp.row_input, tp.col_input]),
        W.HBox([tp.goto_input, tp.position_html]),
        tp.message_html,
        tp.legend_html,
        W.HBox([tp.grid, tp.nav_box]),
        tp.prism_box,
    ]


def sync_controls(tp: Any, w: Window, fa: Format, fb: Format) -> None:
    """Show ``tp``'s traits (and formats A and B as resolved) in its controls."""
    arr = tp.data
    names = [f.name for f in tp.format_objects]
    if list(tp.a_menu.options) != names:
        tp.a_menu.options = names
        tp.b_menu.options = names
    tp.a_menu.value = fa.name
    tp.b_menu.value = fb.name
    tp.view_menu.value = tp.view
    tp.log_box.value = tp.log_scale
    tp.unit_menu.value = tp.error_unit
    tp.rounding_menu.value = tp.rounding
    tp.overflow_menu.value = tp.overflow
    tp.subnormals_menu.value = tp.subnormals
    if tp.seed is not None:
        tp.seed_input.value = tp.seed
    tp.scope_menu.value = tp.summary_scope
    axes = list(range(arr.ndim))
    if arr.ndim >= 2:
        if list(tp.row_axis_menu.options) != axes:
            tp.row_axis_menu.options = axes
            tp.col_axis_menu.options = axes
        tp.row_axis_menu.value = tp.row_axis
        tp.col_axis_menu.value = tp.col_axis
    tp.row_axis_menu.disabled = tp.col_axis_menu.disabled = arr.ndim < 2
    tp.row_input.value = w.row0
    tp.col_input.value = w.col0
    tp.rows_input.value = tp.rows
    tp.cols_input.value = tp.cols


def sync_sliders(
    tp: Any, w: Window, shown: tuple[int, ...], on_slider: Callable[..., Any]
) -> tuple[int, ...]:
    """One slider per axis not shown, set to the window's index on it; ``shown`` is the axes
    the current sliders are for (rebuilt when that changes). Returns the axes now shown."""
    arr = tp.data
    axes = tuple(ax for ax in range(arr.ndim) if ax not in (tp.row_axis, tp.col_axis))
    if axes != shown or len(tp.sliders_box.children) != len(axes):
        sliders = []
        for ax in axes:
            s = W.IntSlider(min=0, max=int(arr.shape[ax]) - 1, description=f"axis {ax}",
                            continuous_update=False, layout=W.Layout(width="420px"))
            s.add_class("bitprism-axis-slider")
            s.observe(functools.partial(on_slider, ax), "value")
            sliders.append(s)
        tp.sliders_box.children = sliders
    for ax, s in zip(axes, tp.sliders_box.children):
        s.max = int(arr.shape[ax]) - 1
        s.value = w.fixed[ax]
    return axes
