"""The controls of a ``TensorPrism`` (menus, inputs, pan, find and pin buttons, the note) and
their arrangement.

``build_controls`` creates them as attributes of the widget (``tp.view_menu``,
``tp.pan_buttons["page-right"]``, ...); the widget connects them to its callbacks, and
``layout_rows`` gives its children in display order: the summary, the controls used at every
step, the grid with its find buttons, the selected cell's value view, the note, and an
``options`` section (folded) with the rarely used ones. Every row wraps, so nothing is cut off
in a narrow output column. ``sync_controls`` and ``sync_sliders`` show the widget's traits in
them; the widget calls them with its control callbacks suspended.
"""

from __future__ import annotations

import functools
from typing import Any, Callable

import ipywidgets as W

from ..formats import Format
from ..numerics.options import OVERFLOW_MODES, ROUNDING_MODES, SUBNORMAL_MODES
from ..render.grid_html import VALUE_SCALES, VIEWS, grid_css
from ..tensors.window import ERROR_UNITS, FIND_KINDS, MAX_SIDE, Window
from .tensor_case import SUMMARY_SCOPES

__all__ = [
    "KIND_WORDS",
    "PANS",
    "build_controls",
    "close_replaced",
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

_WRAP = {"flex_flow": "row wrap", "align_items": "center"}
_LABEL = {"description_width": "initial"}  # a description is never cut to "columns: ..."


def _row(children: list[W.Widget]) -> W.HBox:
    return W.HBox(children, layout=W.Layout(**_WRAP))


def _menu(options: Any, description: str, width: str) -> W.Dropdown:
    return W.Dropdown(options=options, description=description, style=_LABEL,
                      layout=W.Layout(width=width))


def _int_box(cls: Any, description: str, width: str, **kw: Any) -> Any:
    return cls(description=description, style=_LABEL, continuous_update=False,
               layout=W.Layout(width=width), **kw)


def build_controls(tp: Any) -> None:
    """Create the control widgets of ``tp`` (not yet connected to anything)."""
    lay = W.Layout
    tp.style_html = W.HTML(grid_css(), layout=lay(height="0px", margin="0", overflow="hidden"))
    tp.message_html = W.HTML(layout=lay(max_width="100%"))
    tp.message_html.add_class("bitprism-message")
    tp.summary_html = W.HTML(layout=lay(max_width="100%"))
    tp.summary_html.add_class("bitprism-summary")
    tp.view_menu = _menu(list(VIEWS), "view", "140px")
    tp.a_menu = _menu([], "format A", "210px")
    tp.b_menu = _menu([], "format B", "210px")
    tp.scale_menu = _menu(list(VALUE_SCALES), "scale", "140px")
    tp.unit_menu = _menu(list(ERROR_UNITS), "error", "140px")
    tp.pan_buttons = {}
    for name, label, tip in PANS:
        b = W.Button(description=label, tooltip=tip, layout=lay(width="34px"))
        b.add_class(f"bitprism-pan-{name}")
        tp.pan_buttons[name] = b
    tp.goto_input = W.Text(placeholder="go to index, e.g. 3, 17", continuous_update=False,
                           layout=lay(width="190px"))
    tp.goto_input.add_class("bitprism-goto")
    tp.position_html = W.HTML(layout=lay(max_width="100%"))
    tp.position_html.add_class("bitprism-position")
    tp.sliders_box = W.VBox()
    tp.legend_html = W.HTML(layout=lay(max_width="100%"))
    tp.legend_html.add_class("bitprism-legend-box")
    tp.nav_buttons = {}
    tp.nav_counts = {}
    nav_rows = []
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
        count = W.HTML(layout=lay(width="auto", max_width="210px"))
        count.add_class(f"bitprism-count-{slug}")
        tp.nav_counts[kind] = count
        nav_rows.append(_row([prev, nxt, count]))
    tp.nav_box = W.VBox(nav_rows, layout=lay(margin="0 0 0 8px"))
    tp.prism = None
    tp.prism_box = W.VBox(layout=lay(max_width="100%"))
    tp.note_input = W.Textarea(placeholder="note for a teammate (saved with the case file)",
                               continuous_update=False, rows=2,
                               layout=lay(width="calc(100% - 8px)"))
    tp.note_input.add_class("bitprism-note")
    tp.pin_button = W.Button(description="pin this view", icon="thumb-tack",
                             tooltip="write this view into the notebook as a static output "
                             "(a saved notebook shows it without a kernel)",
                             layout=lay(width="auto"))
    tp.pin_button.add_class("bitprism-pin")
    # ----- the options section (folded) -----
    tp.rounding_menu = _menu(list(ROUNDING_MODES), "rounding", "240px")
    tp.overflow_menu = _menu(list(OVERFLOW_MODES), "overflow", "180px")
    tp.subnormals_menu = _menu(list(SUBNORMAL_MODES), "subnormals", "170px")
    tp.seed_input = W.Text(description="seed", placeholder="none", style=_LABEL,
                           continuous_update=False, layout=lay(width="190px"))
    tp.row_axis_menu = _menu([], "rows: axis", "140px")
    tp.col_axis_menu = _menu([], "columns: axis", "160px")
    tp.rows_input = _int_box(W.BoundedIntText, "rows", "110px", min=1, max=MAX_SIDE)
    tp.cols_input = _int_box(W.BoundedIntText, "cols", "110px", min=1, max=MAX_SIDE)
    tp.rows_input.add_class("bitprism-rows")
    tp.cols_input.add_class("bitprism-cols")
    tp.row_input = _int_box(W.IntText, "first row", "150px")
    tp.col_input = _int_box(W.IntText, "first column", "170px")
    tp.scope_menu = _menu(list(SUMMARY_SCOPES), "summary of", "180px")
    tp.chart_button = W.Button(description="range chart", tooltip=(
        "draw the range chart of the summary (exponent histogram over each format's range)"),
        layout=lay(width="auto"))
    tp.chart_button.add_class("bitprism-range-chart")
    tp.chart_output = W.Output()


def trait_controls(tp: Any) -> tuple[tuple[W.ValueWidget, str], ...]:
    """(control, trait) pairs: each control's value sets that trait of ``tp``."""
    return (
        (tp.view_menu, "view"), (tp.scale_menu, "value_scale"), (tp.unit_menu, "error_unit"),
        (tp.a_menu, "format_a"), (tp.b_menu, "format_b"),
        (tp.rounding_menu, "rounding"), (tp.overflow_menu, "overflow"),
        (tp.subnormals_menu, "subnormals"),
        (tp.row_axis_menu, "row_axis"), (tp.col_axis_menu, "col_axis"),
        (tp.row_input, "row_offset"), (tp.col_input, "col_offset"),
        (tp.rows_input, "rows"), (tp.cols_input, "cols"),
        (tp.scope_menu, "summary_scope"), (tp.note_input, "note"),
    )


def layout_rows(tp: Any) -> list[W.Widget]:
    """The children of ``tp``, top to bottom."""
    p = tp.pan_buttons
    options = W.VBox([
        _row([tp.rounding_menu, tp.overflow_menu, tp.subnormals_menu, tp.seed_input]),
        _row([tp.row_axis_menu, tp.col_axis_menu, tp.rows_input, tp.cols_input]),
        _row([tp.row_input, tp.col_input]),
        _row([tp.scope_menu, tp.chart_button]),
        tp.chart_output,
    ])
    tp.options_section = W.Accordion(children=[options], titles=("options",),
                                     selected_index=None)
    tp.options_section.add_class("bitprism-options")
    return [
        tp.style_html,
        tp.summary_html,
        _row([tp.view_menu, tp.a_menu, tp.b_menu, tp.scale_menu, tp.unit_menu]),
        _row([p["page-left"], p["left"], p["right"], p["page-right"], p["page-up"], p["up"],
              p["down"], p["page-down"], tp.goto_input]),
        tp.sliders_box,
        tp.position_html,
        tp.message_html,
        tp.legend_html,
        W.HBox([tp.grid, tp.nav_box], layout=W.Layout(flex_flow="row wrap",
                                                       align_items="flex-start")),
        tp.prism_box,
        _row([tp.pin_button]),
        tp.note_input,
        tp.options_section,
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
    tp.scale_menu.value = tp.value_scale
    tp.unit_menu.value = tp.error_unit
    tp.rounding_menu.value = tp.rounding
    tp.overflow_menu.value = tp.overflow
    tp.subnormals_menu.value = tp.subnormals
    tp.seed_input.value = "" if tp.seed is None else str(tp.seed)
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
    if tp.note_input.value != tp.note:
        tp.note_input.value = tp.note


def close_replaced(widgets: Any) -> None:
    """Close widgets that were replaced, with the layout and style widgets each one made
    (their front-end views and comms go with them)."""
    for w in widgets:
        for part in (getattr(w, "layout", None), getattr(w, "style", None)):
            if isinstance(part, W.Widget):
                part.close()
        w.close()


def sync_sliders(
    tp: Any, w: Window, shown: tuple[int, ...], on_slider: Callable[..., Any]
) -> tuple[int, ...]:
    """One slider per axis not shown, set to the window's index on it; ``shown`` is the axes
    the current sliders are for (replaced, and the old ones closed, when that changes).
    Returns the axes now shown. Indices are the tensor's own (a reopened case's too)."""
    arr = tp.data
    off = tp._index_offset
    axes = tuple(ax for ax in range(arr.ndim) if ax not in (tp.row_axis, tp.col_axis))
    if axes != shown or len(tp.sliders_box.children) != len(axes):
        old = list(tp.sliders_box.children)
        sliders = []
        for ax in axes:
            s = W.IntSlider(min=off[ax], max=off[ax] + int(arr.shape[ax]) - 1,
                            description=f"axis {ax}", continuous_update=False,
                            style=_LABEL, layout=W.Layout(width="100%", max_width="420px"))
            s.add_class("bitprism-axis-slider")
            s.observe(functools.partial(on_slider, ax), "value")
            sliders.append(s)
        tp.sliders_box.children = sliders
        close_replaced(old)
    for ax, s in zip(axes, tp.sliders_box.children):
        s.value = w.fixed[ax]
    return axes
