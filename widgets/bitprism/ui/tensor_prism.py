"""``TensorPrism``: a 2-D window of any tensor, cells coloured by what a cast does to them,
linked to a ``Prism`` for the selected cell.

State lives in traits; every reaction goes through one ``_refresh()``; the window and its
classification come from ``tensors.window``, the colours, labels, tooltips and static markup
from ``render.grid_html``, the summary from ``scan`` / ``render.scan_html``. Standard ipywidgets
only: each cell is a ``Button``, made once and repainted (``cell_grid``). Only the window is
read and sent, so a 4096 x 4096 tensor (or a ``np.memmap`` far larger than memory) pans without
delay; whole-tensor searches read one chunk at a time.

This module holds the widget itself (traits, validation, the refresh path); selecting, panning
and finding are in ``tensor_navigation``, the cell buttons in ``cell_grid``, the other controls
in ``tensor_controls``, the cached whole-tensor figures in ``tensor_stats``, the selected
cell's value view in ``selected_prism`` and the case-file state in ``tensor_case``.

Nothing a person does in the widget raises: a bad value, index, option or tensor shows a
message and the last good view stays. The same values set from code raise ``WidgetValueError``
(a ``BitprismError``), with the same message shown and the same view kept; the constructor
raises ``BitprismError`` for anything it cannot show.
"""

from __future__ import annotations

import base64
import functools
import io
from typing import Any, NoReturn

import ipywidgets as W
import numpy as np
from traitlets import Any as AnyTrait
from traitlets import TraitError, observe, validate

from .guarded import BatchedRefresh, guarded
from ..errors import BitprismError
from ..formats import Format, get_format
from ..numerics.options import CastOptions
from ..render.grid_html import VALUE_SCALES, VIEWS, GridPaint, grid_html, legend_html
from ..render.grid_html import paint_window
from ..render.scan_html import scan_summary_html
from ..render.widget_html import (
    info_html,
    message_html,
    recorded_summary_html,
    tensor_summary_html,
    window_position_html,
)
from ..tensors.scan import DEFAULT_FORMATS, ScanResult
from ..tensors.window import (
    ERROR_UNITS,
    FIND_KINDS,
    MAX_SIDE,
    Placed,
    Window,
    as_tensor,
    make_window,
)
from .case_codecs import MAX_NOTE_CHARS, check_utf8
from .case_file import CaseFileMixin
from .cast_settings import CastSettings, check_formats, formats_argument
from .cell_grid import CellGrid
from .refusal import IntTrait, ListTrait, TextTrait, TupleTrait, ValueTrait
from .refusal import check_index, check_seed, refusal
from .selected_prism import show_selected
from .tensor_case import SUMMARY_SCOPES, read_tensor_case, tensor_case_state
from .tensor_controls import (
    build_controls,
    layout_rows,
    sync_controls,
    sync_sliders,
    trait_controls,
)
from .tensor_navigation import TensorNavigation
from .tensor_stats import TensorStats
from .widget_internals import IdentityTrait

__all__ = ["DEFAULT_COLS", "DEFAULT_ROWS", "TensorPrism"]

_SUMMARY_QUANTILES = ("auto", "exact", "histogram", "none")
# The default window: every row up to 16 (cells are 24 px tall), and at most 12 columns, as
# many as fit a 468-px output column at the narrowest cell width (34 px) with the row heads;
# never more than the tensor has.
DEFAULT_ROWS, DEFAULT_COLS = 16, 12


class TensorPrism(TensorNavigation, BatchedRefresh, CastSettings, CaseFileMixin, W.VBox):
    """A 2-D window (up to 32 x 32 cells) of any tensor, coloured by a chosen view.

    ``TensorPrism(data, formats=["bfloat16", "float8_e4m3fn"], view="cast")``. ``data`` is
    anything ``bitprism.as_array`` reads (numpy, ml_dtypes, torch incl. bfloat16/float8, JAX,
    memmaps, files). ``tp.selected`` is the selected index (observe it); ``tp.window`` the
    current ``Window``; ``tp.summary`` the current ``ScanResult``; ``tp.pin()`` writes the view
    into the notebook.
    """

    _case_kind = "tensor_prism"

    # identity, not ==, tells a new tensor: == would read all of it (widget_internals)
    data = IdentityTrait(None, help="the tensor, as the numpy view bitprism.as_array gives")
    formats = ListTrait(AnyTrait(), default_value=list[Any](DEFAULT_FORMATS),
                        help="formats cast to, by name, or Format objects for custom layouts")
    format_a = ValueTrait("", help="format A: cast, error and compare views, by name or Format "
                          "('' = first format)")
    format_b = ValueTrait("", help="format B of the compare view ('' = second format)")
    rounding = TextTrait("roundTiesToEven", help="IEEE 754 rounding direction or 'stochastic'")
    overflow = TextTrait(
        "standard", help="'standard' (Inf/NaN as the format defines) or 'saturate'")
    subnormals = TextTrait("keep", help="'keep' subnormal results or 'flush' them to zero")
    seed = IntTrait(None, allow_none=True,
                    help="seed of stochastic rounding, 0..2**63-1 (None: fresh draws)")
    view = TextTrait("cast", help="cell colours: value, class, cast, error or compare")
    value_scale = TextTrait(
        "auto", help="value and error views: where the two colour steps break: 'linear' (half "
        "the largest), 'log' (geometric middle), 'quantile' (median) or 'auto' (linear, or "
        "quantile when the window's magnitudes span more than 16x)")
    error_unit = TextTrait(
        "ulp", help="error view and largest-error search: 'ulp' or 'relative'")
    row_axis = IntTrait(0, allow_none=True, help="tensor axis shown as rows (None for 1-D data)")
    col_axis = IntTrait(1, help="tensor axis shown as columns")
    fixed = TupleTrait(help="one index per axis; those of the axes not shown pick the slice")
    row_offset = IntTrait(0, help="first row shown")
    col_offset = IntTrait(0, help="first column shown")
    rows = IntTrait(DEFAULT_ROWS, help=f"rows shown (1..{MAX_SIDE}, at most the tensor's)")
    cols = IntTrait(DEFAULT_COLS, help=f"columns shown (1..{MAX_SIDE}, at most the tensor's)")
    selected = TupleTrait(help="tensor index of the selected cell; () when none")
    summary_scope = TextTrait(
        "tensor", help="scan summary of the whole 'tensor' or the 2-D 'slice'")
    summary_quantiles = TextTrait(
        "auto", help="error quantiles of the summary scan: auto, exact, histogram or none")
    message = TextTrait("", help="the last error shown to the person")
    info = TextTrait("", help="the last note that is not an error (a search wrapped around)")
    note = TextTrait("", help="a note for a teammate, saved in case files and exported pages")
    window = AnyTrait(None, read_only=True, help="the current Window (read-only)")
    summary = AnyTrait(None, read_only=True, help="the current summary ScanResult (read-only)")

    _view_traits = ("data", "formats", "format_a", "format_b", "rounding", "overflow",
                    "subnormals", "seed", "view", "value_scale", "error_unit", "row_axis",
                    "col_axis", "fixed", "row_offset", "col_offset", "rows", "cols", "selected",
                    "summary_scope", "summary_quantiles")
    _not_options = ("data", "window", "summary", "message", "info")

    def __init__(self, data: Any, formats: Any = None, **kwargs: Any) -> None:
        for k in kwargs:
            if k not in self.class_trait_names() or k in self._not_options:
                raise BitprismError(f"TensorPrism has no option {k!r}; options: "
                                    f"{', '.join(self._view_traits[1:])}, note")
        format_list = formats_argument(formats)
        placed = data if isinstance(data, Placed) else None
        # raises BitprismError: there is no view to keep yet
        arr = as_tensor(placed.array if placed is not None else data)
        self._placement = None if placed is None else Placed(arr, placed.offset, placed.shape)
        self._suspend = 1
        self._token = 0
        self._paint: GridPaint | None = None
        self._tips_key: Any = None
        self._tips: Any = None
        self._stats = TensorStats()
        self._prism_key: Any = None
        self._slider_axes: tuple[int, ...] = ()
        self._cell_grid = CellGrid(self._on_cell_click)
        self._build_controls()
        super().__init__()
        self.add_class("bitprism")
        self.add_class("bitprism-tensorprism")
        try:
            try:
                with self.hold_trait_notifications():
                    self.data = arr
                    self._reset_axes(arr)
                    if format_list is not None:
                        self.formats = format_list
                for k in ("row_axis", "col_axis"):  # each: a swap, the corner, the default size
                    if k in kwargs:
                        setattr(self, k, kwargs[k])
                with self.hold_trait_notifications():
                    for k, v in kwargs.items():
                        if k not in ("row_axis", "col_axis"):
                            setattr(self, k, v)
                self._fit_window()  # after the batch: its values are validated at its end
            finally:
                self._suspend = 0
            self._refresh()  # raises WidgetValueError (a BitprismError) if no view can be built
        except TraitError as exc:
            raise refusal(exc) from None
        if self.window is None:  # pragma: no cover - _refresh raised
            raise BitprismError(self.message or "no view could be built")
        self._layout_children()

    # ----- controls --------------------------------------------------------------------------
    def _build_controls(self) -> None:
        build_controls(self)
        self.grid = self._cell_grid.box
        for name, b in self.pan_buttons.items():
            b.on_click(functools.partial(self._on_pan, name))
        for kind in FIND_KINDS:
            self.nav_buttons[f"prev-{kind}"].on_click(functools.partial(self._on_find, kind, True))
            self.nav_buttons[f"next-{kind}"].on_click(
                functools.partial(self._on_find, kind, False))
        for widget, name in trait_controls(self):
            widget.observe(functools.partial(self._on_control, name), "value")
        self.seed_input.observe(self._on_seed_text, "value")
        self.goto_input.observe(self._on_goto, "value")
        self.chart_button.on_click(self._on_chart)
        self.pin_button.on_click(self._on_pin)

    def _layout_children(self) -> None:
        self.children = layout_rows(self)

    # ----- derived state ---------------------------------------------------------------------
    @property
    def array(self) -> np.ndarray:
        """The tensor as a numpy view (bits unchanged; a reopened case: its saved window)."""
        return self.data  # type: ignore[no-any-return]

    @property
    def _case_note(self) -> str:  # type: ignore[override]
        return str(self.note)

    @_case_note.setter
    def _case_note(self, value: str) -> None:
        self.note = value

    def _fmt(self, which: str) -> Format:
        fmts = self.format_objects
        name = self.format_a if which == "a" else self.format_b
        for f in fmts:
            if f.name == name:
                return f
        if which == "a" or len(fmts) == 1:
            return fmts[0]
        a = self._fmt("a")
        return next((f for f in fmts if f != a), fmts[0])

    def _reset_axes(self, arr: np.ndarray) -> None:
        nd = arr.ndim
        off = self._index_offset
        self.row_axis = None if nd == 1 else nd - 2
        self.col_axis = 0 if nd == 1 else nd - 1
        self.fixed = off
        self.row_offset = 0 if nd == 1 else off[nd - 2]
        self.col_offset = off[self.col_axis]
        self.rows, self.cols = DEFAULT_ROWS, DEFAULT_COLS
        self._fit_window()
        self.selected = ()

    def _fit_window(self) -> None:
        """Rows and columns never more than the tensor has on the shown axes."""
        nrows = self._axis_span(self.row_axis)[1]
        ncols = self._axis_span(self.col_axis)[1]
        if self.rows > nrows:
            self.rows = nrows
        if self.cols > ncols:
            self.cols = ncols

    # ----- validation: a refused value raises WidgetValueError and is shown as the message ----
    def _reject(self, name: str, exc: BaseException) -> NoReturn:
        self._refuse_value(exc)

    @validate("data")
    def _valid_data(self, proposal: Any) -> Any:
        v = proposal["value"]
        if v is self.data:  # traitlets validates the value again after a batch of changes
            return v
        try:
            return as_tensor(v)
        except Exception as exc:
            return self._reject("data", exc)

    @validate("formats")
    def _valid_formats(self, proposal: Any) -> list[Any]:
        try:
            return check_formats(proposal["value"], "TensorPrism")
        except Exception as exc:
            return self._reject("formats", exc)

    @validate("format_a", "format_b")
    def _valid_ab(self, proposal: Any) -> str:
        v = proposal["value"]
        name = proposal["trait"].name
        if isinstance(v, str) and not v:
            return ""
        try:
            fmts = self.format_objects
            names = [f.name for f in fmts]
            if not isinstance(v, (str, Format)):
                raise BitprismError(
                    f"{name} must be a format name or Format among the formats; got {v!r}")
            if isinstance(v, str) and v in names:
                return v
            f = get_format(v)
            if f not in fmts:
                raise BitprismError(
                    f"{name}: {f.name!r} is not among the formats ({', '.join(names)}); "
                    "add it to formats first")
            return f.name
        except Exception as exc:
            return self._reject(name, exc)

    @validate("view", "value_scale", "error_unit", "summary_scope", "summary_quantiles")
    def _valid_choice(self, proposal: Any) -> str:
        name = proposal["trait"].name
        allowed = {"view": VIEWS, "value_scale": VALUE_SCALES, "error_unit": ERROR_UNITS,
                   "summary_scope": SUMMARY_SCOPES,
                   "summary_quantiles": _SUMMARY_QUANTILES}[name]
        v = proposal["value"]
        if v in allowed:
            return str(v)
        return self._reject(name, BitprismError(
            f"{name} must be one of {', '.join(allowed)}; got {v!r}"))

    @validate("note")
    def _valid_note(self, proposal: Any) -> str:
        v = proposal["value"]
        try:
            if len(v) > MAX_NOTE_CHARS:
                raise BitprismError(f"note is {len(v)} characters; at most {MAX_NOTE_CHARS}")
            check_utf8(v, "note")
        except Exception as exc:
            return self._reject("note", exc)
        return str(v)

    @validate("rows", "cols")
    def _valid_size(self, proposal: Any) -> int:
        v = proposal["value"]
        if 1 <= v <= MAX_SIDE:
            return int(v)
        name = proposal["trait"].name
        return self._reject(name, BitprismError(
            f"{name} must be in 1..{MAX_SIDE}; got {v!r}"))

    def _check_in(self, i: int, ax: int, name: str) -> int:
        """``i`` is an index held on axis ``ax`` (a reopened case holds its saved window)."""
        lo, n = self._axis_span(ax)
        if lo <= i < lo + n:
            return i
        size = self._full_shape[ax]
        if self._is_block:
            raise BitprismError(
                f"{name}: index {i} on axis {ax} is outside {lo}..{lo + n - 1}, the part of "
                f"axis {ax} (size {size}) this reopened case holds")
        raise BitprismError(f"index {i} is out of range for axis {ax} with size {size}")

    @validate("row_offset", "col_offset")
    def _valid_offset(self, proposal: Any) -> int:
        name = proposal["trait"].name
        v = int(proposal["value"])
        if self.data is None:
            return v
        ax = self.row_axis if name == "row_offset" else self.col_axis
        if ax is None:
            return v if v == 0 else self._reject(name, BitprismError(
                f"1-D data has one row; {name} must be 0, got {v!r}"))
        lo, n = self._axis_span(ax)
        if not lo <= v < lo + n:
            word = name.replace("_offset", "")
            held = "" if not self._is_block else f" (this reopened case holds {lo}..{lo + n - 1})"
            return self._reject(name, BitprismError(
                f"{word} {v} is out of range for axis {ax} of size {self._full_shape[ax]}{held}"))
        return v

    @validate("selected", "fixed")
    def _valid_index(self, proposal: Any) -> tuple[int, ...]:
        name = proposal["trait"].name
        v = tuple(proposal["value"])
        try:
            v = tuple(check_index(i, name) for i in v)
            if self.data is None or (name == "selected" and not v):
                return v
            shape = self._full_shape
            if len(v) != len(shape):
                raise BitprismError(
                    f"{name} needs one index per axis of {tuple(shape)}; got {v!r}")
            return tuple(self._check_in(i, ax, name) for ax, i in enumerate(v))
        except Exception as exc:
            return self._reject(name, exc)

    @validate("row_axis", "col_axis")
    def _valid_axis(self, proposal: Any) -> Any:
        name = proposal["trait"].name
        v = proposal["value"]
        arr = self.data
        if arr is None or (v is None and name == "row_axis" and arr.ndim == 1):
            return v
        if v is None or not 0 <= int(v) < arr.ndim or (arr.ndim == 1 and name == "row_axis"):
            return self._reject(name, BitprismError(
                f"{name} must be an axis in 0..{arr.ndim - 1}"
                f"{' (1-D data has only columns)' if arr.ndim == 1 else ''}; got {v!r}"))
        return int(v)

    # ----- reactions -------------------------------------------------------------------------
    @observe("data")
    def _on_data(self, change: Any) -> None:
        old, new = change["old"], change["new"]
        if old is new:
            return
        self._token += 1
        if self._restoring:  # back to the last good view: its traits are restored too
            return
        if old is not None and (old.ndim != new.ndim or old.shape != new.shape
                                or (self._placement is not None
                                    and self._placement.array is old)):
            with self._bulk():
                self._reset_axes(new)
        else:
            self._refresh()

    @observe("row_axis", "col_axis")
    def _on_axes(self, change: Any) -> None:
        # choosing the other shown axis swaps the two; a new pair starts at the slice's corner
        # with the default window (fitted to the new axes)
        if self._restoring:
            return
        with self._bulk():
            other = "col_axis" if change["name"] == "row_axis" else "row_axis"
            if getattr(self, other) == change["new"] and change["old"] is not None:
                setattr(self, other, change["old"])
            self.row_offset = self._axis_span(self.row_axis)[0]
            self.col_offset = self._axis_span(self.col_axis)[0]
            self.rows, self.cols = DEFAULT_ROWS, DEFAULT_COLS
            self._fit_window()

    @observe("rows", "cols")
    def _on_size(self, change: Any) -> None:
        # a larger window near the tensor's end moves back so that it is whole
        if self._restoring or self.data is None:
            return
        with self._bulk():
            for ax, size, name in ((self.row_axis, self.rows, "row_offset"),
                                   (self.col_axis, self.cols, "col_offset")):
                if ax is None:
                    continue
                lo, n = self._axis_span(ax)
                whole = max(lo, min(getattr(self, name), lo + n - size))
                if whole != getattr(self, name):
                    setattr(self, name, whole)

    @observe("selected")
    def _on_selected(self, change: Any) -> None:
        if self._restoring:
            return
        idx = change["new"]
        if not idx:
            self._refresh()
            return
        with self._bulk():
            self._bring_into_view(idx)

    @observe(
        "formats", "format_a", "format_b", "rounding", "overflow", "subnormals", "seed", "view",
        "value_scale", "error_unit", "fixed", "row_offset", "col_offset",
        "summary_scope", "summary_quantiles",
    )
    def _on_trait(self, change: Any) -> None:
        self._refresh()

    @observe("message", "info")
    def _on_message(self, change: Any) -> None:
        self.message_html.value = message_html(self.message) + info_html(self.info)

    @observe("note")
    def _on_note(self, change: Any) -> None:
        if self.note_input.value != change["new"]:
            self.note_input.value = change["new"]

    # ----- the one refresh path ----------------------------------------------------------------
    def _refresh(self) -> None:
        """The one path from traits to what is shown; on error the last good view stays."""
        if self._suspend or self.data is None:
            return
        try:
            arr = self.data
            opts = self.options
            fa, fb = self._fmt("a"), self._fmt("b")
            casts = [fa] if fb == fa else [fa, fb]
            (r0, nrows), (c0, ncols) = self._axis_span(self.row_axis), self._axis_span(
                self.col_axis)
            w = make_window(
                arr, self.row_axis, self.col_axis, self.fixed or self._index_offset,
                min(max(self.row_offset, r0), r0 + nrows - 1),
                min(max(self.col_offset, c0), c0 + ncols - 1),
                min(self.rows, nrows), min(self.cols, ncols), casts, opts,
                offset=self._index_offset, shape=self._full_shape,
            )
            tips_key = (self._token, w.row_axis, w.col_axis, w.fixed, w.row0, w.col0,
                        w.raw.shape)
            tips = self._tips if tips_key == self._tips_key else None
            paint = paint_window(w, self.view, 0, len(casts) - 1, self.value_scale,
                                 self.error_unit, tips)
            summary = self._summary_for(arr, opts)
        except Exception as exc:  # the last good view stays, and so do its traits
            self._refuse_view(exc)
        self._tips_key, self._tips = tips_key, paint.tooltips
        self.set_trait("window", w)
        if summary is not None:
            self.set_trait("summary", summary)
        self.message = ""
        self.info = ""
        self._show_grid(w, paint)
        self._show_status(w, fa, fb)
        self._show_prism()
        self._remember_good_view()
        self._snapshot_changed()

    # ----- summary -----------------------------------------------------------------------------
    def _summary_for(self, arr: np.ndarray, opts: CastOptions) -> ScanResult | None:
        fixed = self._to_data(self.fixed or self._index_offset)
        found = self._stats.summary(
            self._token, arr, list(self.formats), opts, self.summary_scope,
            self.summary_quantiles, self.row_axis, self.col_axis, fixed)
        if found is None:
            return None
        result, counts_only = found
        self.summary_html.value = self._summary_html(result, counts_only)
        return result

    def _summary_html(self, result: ScanResult, counts_only: bool) -> str:
        if self._stats.recorded(result):
            return recorded_summary_html(scan_summary_html(result), "whole tensor")
        return tensor_summary_html(result, counts_only=counts_only)

    def _recorded_count(self, kind: str) -> bool:
        fa, opts = self._fmt("a"), self.options
        if kind == "largest_error":
            return self._stats.is_recorded((self._token, fa, opts, self.error_unit))
        f = None if kind in ("nan", "inf") else fa
        return self._stats.is_recorded((self._token, kind, f, opts))

    # ----- showing -----------------------------------------------------------------------------
    def _show_grid(self, w: Window, paint: GridPaint) -> None:
        self._cell_grid.show(w, paint, w.cell_of(self.selected) if self.selected else None)
        legend = legend_html(paint)
        if self.legend_html.value != legend:
            self.legend_html.value = legend
        self._paint = paint

    def _show_status(self, w: Window, fa: Format, fb: Format) -> None:
        self._suspend += 1
        try:
            sync_controls(self, w, fa, fb)
            self._slider_axes = sync_sliders(self, w, self._slider_axes, self._on_slider)
        finally:
            self._suspend -= 1
        position = window_position_html(self.data.dtype, w.shape, w, self.selected)
        if self.position_html.value != position:
            self.position_html.value = position
        self._refresh_counts()

    def _show_prism(self) -> None:
        """The selected cell in the embedded Prism: its exact value, same formats/options."""
        if not self.selected:
            return
        key = (self._token, self.selected, tuple(self.format_objects), self.options)
        if key != self._prism_key and show_selected(self):
            self._prism_key = key

    # ----- callbacks ---------------------------------------------------------------------------
    @guarded
    def _on_control(self, name: str, change: Any) -> None:
        if self._suspend:
            return
        try:
            setattr(self, name, change["new"])
        except BitprismError:
            self._sync_controls()  # the control shows the setting in effect again
            raise

    @guarded
    def _on_seed_text(self, change: Any) -> None:
        if self._suspend:
            return
        text = str(change["new"]).strip()
        try:
            if text.lower() in ("", "none"):
                value = None
            elif text.isdigit():
                value = check_seed(int(text))
            else:
                raise BitprismError(f"seed must be 'none' or an integer 0..2**63-1; got {text!r}")
            self.seed = value
        except BitprismError:
            self._sync_controls()
            raise

    def _sync_controls(self) -> None:
        w = self.window
        if w is None:
            return
        self._suspend += 1
        try:
            sync_controls(self, w, self._fmt("a"), self._fmt("b"))
        finally:
            self._suspend -= 1

    @guarded
    def _on_slider(self, axis: int, change: Any) -> None:
        if self._suspend:
            return
        fixed = list(self.fixed)
        fixed[axis] = int(change["new"])
        self.fixed = tuple(fixed)

    @guarded
    def _on_chart(self, button: Any = None) -> None:
        self.show_range_chart()

    def show_range_chart(self) -> None:
        """Draw the summary's range chart into the chart area (matplotlib, imported now)."""
        result = self.summary
        if result is None:
            raise BitprismError("no summary to chart yet")
        fig = result.plot()  # a matplotlib Figure (not managed by pyplot: nothing to close)
        buf = io.BytesIO()
        fig.savefig(buf, format="png", dpi=90)
        png = base64.b64encode(buf.getvalue()).decode("ascii")
        self.chart_output.outputs = (
            {"output_type": "display_data",
             "data": {"image/png": png, "text/plain": "<range chart>"}, "metadata": {}},
        )

    @guarded
    def _on_pin(self, button: Any = None) -> None:
        self._pin_to_display()
        self.info = ("pinned: this view is now a static output under the widget; a saved "
                     "notebook shows it without a kernel")

    # ----- headless output ---------------------------------------------------------------------
    def to_html(self) -> str:
        """A static HTML snapshot of the current view (summary, grid, legend and the selected
        cell's bits)."""
        return self._static_html()

    def _static_html(self) -> str:
        w, paint = self.window, self._paint
        if w is None or paint is None:
            return ""
        sel = w.cell_of(self.selected) if self.selected else None
        summary = ""
        if self.summary is not None:
            summary = self._summary_html(self.summary, self.summary.quantiles == "none")
        title = "reopened case: the saved window, at its place in the tensor" \
            if self._is_block else ""
        detail = caption = ""
        if sel is not None and self.prism is not None:
            detail, caption = self.prism._static_html(), self.prism.caption
        return grid_html(w, paint, sel, summary, title, detail, caption)

    def _repr_mimebundle_(self, **kwargs: Any) -> dict[str, Any]:
        bundle = dict(super()._repr_mimebundle_(**kwargs) or {})
        bundle["text/html"] = self._static_html()
        return bundle

    # ----- case files ----------------------------------------------------------------------------
    def _case_state(self) -> dict[str, Any]:
        fa = self._fmt("a")
        summary = None
        if self.summary is not None:  # a reopened case's own figures are of its saved window
            recorded = self._stats.recorded(self.summary)
            summary = (self.summary, "window" if self._is_block and not recorded
                       else self.summary_scope)
        counts = self._stats.counts_seen(self._token, fa, self.options, self.error_unit)
        return tensor_case_state(self, fa, self._fmt("b"), summary, counts)

    @classmethod
    def _from_case_state(cls, state: dict[str, Any]) -> "TensorPrism":
        case = read_tensor_case(state)
        tp = cls(case.data, formats=case.formats, **case.settings)
        # the summary and counts the author saw, shown while their settings are in effect
        tp._stats.record_case(tp._token, tp.format_objects, case.summary, case.counts,
                              tp.options)
        tp._refresh()
        if case.selected:
            tp.selected = case.selected
        return tp
