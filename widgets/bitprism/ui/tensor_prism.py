"""``TensorPrism``: a 2-D window of any tensor, cells coloured by what a cast does to them,
linked to a ``Prism`` for the selected cell.

State lives in traits; every reaction goes through one ``_refresh()``; the window and its
classification come from ``tensors.window``, the colours, labels, tooltips and static markup
from ``render.grid_html``, the summary from ``scan`` / ``render.scan_html``. Standard ipywidgets
only: each cell is a ``Button`` (the same objects are reused across pans; only their label,
tooltip and shared style change). Only the window is read and sent, so a 4096 x 4096 tensor
(or a ``np.memmap`` far larger than memory) pans without delay; whole-tensor searches read one
chunk at a time.

This module holds the widget itself (traits, validation, the refresh path, navigation); the
cell buttons are in ``cell_grid``, the other controls in ``tensor_controls``, the cached
whole-tensor figures in ``tensor_stats`` and the case-file state in ``tensor_case``.

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

from .guarded import BatchedRefresh, guarded, message_for
from ..errors import BitprismError
from ..formats import Format, get_format
from ..numerics.options import CastOptions
from ..render.grid_html import VIEWS, GridPaint, grid_html, legend_html, paint_window
from ..render.scan_html import scan_html
from ..render.widget_html import message_html, tensor_summary_html, window_position_html
from ..tensors.scan import DEFAULT_FORMATS, ScanResult
from ..tensors.window import (
    ERROR_UNITS,
    FIND_KINDS,
    MAX_SIDE,
    Window,
    as_tensor,
    find,
    flat_index,
    make_window,
    parse_index,
)
from .case_file import CaseFileMixin
from .cast_settings import CastSettings, check_formats, formats_argument
from .cell_grid import CellGrid
from .refusal import BoolTrait, IntTrait, ListTrait, TextTrait, TupleTrait, ValueTrait
from .refusal import check_index, refusal
from .selected_prism import show_selected
from .tensor_case import SUMMARY_SCOPES, read_tensor_case, tensor_case_state
from .tensor_controls import (
    KIND_WORDS,
    build_controls,
    layout_rows,
    sync_controls,
    sync_sliders,
    trait_controls,
)
from .tensor_stats import TensorStats
from .widget_internals import IdentityTrait

__all__ = ["TensorPrism"]

_SUMMARY_QUANTILES = ("auto", "exact", "histogram", "none")


class TensorPrism(BatchedRefresh, CastSettings, CaseFileMixin, W.VBox):
    """A 2-D window (up to 32 x 32 cells) of any tensor, coloured by a chosen view.

    ``TensorPrism(data, formats=["bfloat16", "float8_e4m3fn"], view="cast")``. ``data`` is
    anything ``bitprism.as_array`` reads (numpy, ml_dtypes, torch incl. bfloat16/float8, JAX,
    memmaps, files). ``tp.selected`` is the selected index (observe it); ``tp.window`` the
    current ``Window``; ``tp.summary`` the current ``ScanResult``.
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
    log_scale = BoolTrait(False, help="value view: colour by log-magnitude instead of linearly")
    error_unit = TextTrait(
        "ulp", help="error view and largest-error search: 'ulp' or 'relative'")
    row_axis = IntTrait(0, allow_none=True, help="tensor axis shown as rows (None for 1-D data)")
    col_axis = IntTrait(1, help="tensor axis shown as columns")
    fixed = TupleTrait(help="one index per axis; those of the axes not shown pick the slice")
    row_offset = IntTrait(0, help="first row shown")
    col_offset = IntTrait(0, help="first column shown")
    rows = IntTrait(16, help=f"rows shown (1..{MAX_SIDE})")
    cols = IntTrait(16, help=f"columns shown (1..{MAX_SIDE})")
    selected = TupleTrait(help="tensor index of the selected cell; () when none")
    summary_scope = TextTrait(
        "tensor", help="scan summary of the whole 'tensor' or the 2-D 'slice'")
    summary_quantiles = TextTrait(
        "auto", help="error quantiles of the summary scan: auto, exact, histogram or none")
    message = TextTrait("", help="the last error or note shown to the person")
    window = AnyTrait(None, read_only=True, help="the current Window (read-only)")
    summary = AnyTrait(None, read_only=True, help="the current summary ScanResult (read-only)")

    _view_traits = ("data", "formats", "format_a", "format_b", "rounding", "overflow",
                    "subnormals", "seed", "view", "log_scale", "error_unit", "row_axis",
                    "col_axis", "fixed", "row_offset", "col_offset", "rows", "cols", "selected",
                    "summary_scope", "summary_quantiles")

    def __init__(self, data: Any, formats: Any = None, **kwargs: Any) -> None:
        for k in kwargs:
            if k not in self.class_trait_names() or k in ("data", "window", "summary"):
                raise BitprismError(f"TensorPrism has no option {k!r}; options: "
                                    f"{', '.join(self._view_traits[1:])}")
        format_list = formats_argument(formats)
        arr = as_tensor(data)  # raises BitprismError: there is no view to keep yet
        self._suspend = 1
        self._token = 0
        self._paint: GridPaint | None = None
        self._tips_key: Any = None
        self._tips: Any = None
        self._stats = TensorStats()
        self._prism_key: Any = None
        self._slider_axes: tuple[int, ...] = ()
        self._origin: tuple[int, ...] | None = None
        self._cell_grid = CellGrid(self._on_cell_click)
        self._build_controls()
        super().__init__()
        self.add_class("bitprism-tensorprism")
        try:
            try:
                with self.hold_trait_notifications():
                    self.data = arr
                    self._reset_axes(arr)
                    if format_list is not None:
                        self.formats = format_list
                    for k, v in kwargs.items():
                        setattr(self, k, v)
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
        self.prism: Any = None
        self.prism_box = W.VBox()
        for name, b in self.pan_buttons.items():
            b.on_click(functools.partial(self._on_pan, name))
        for kind in FIND_KINDS:
            self.nav_buttons[f"prev-{kind}"].on_click(functools.partial(self._on_find, kind, True))
            self.nav_buttons[f"next-{kind}"].on_click(
                functools.partial(self._on_find, kind, False))
        for widget, name in trait_controls(self):
            widget.observe(functools.partial(self._on_control, name), "value")
        self.goto_input.observe(self._on_goto, "value")
        self.chart_button.on_click(self._on_chart)

    def _layout_children(self) -> None:
        self.children = layout_rows(self)

    # ----- derived state ---------------------------------------------------------------------
    @property
    def array(self) -> np.ndarray:
        """The tensor as a numpy view (bits unchanged)."""
        return self.data  # type: ignore[no-any-return]

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
        self.row_axis = None if nd == 1 else nd - 2
        self.col_axis = 0 if nd == 1 else nd - 1
        self.fixed = (0,) * nd
        self.row_offset = 0
        self.col_offset = 0
        self.selected = ()

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

    @validate("view", "error_unit", "summary_scope", "summary_quantiles")
    def _valid_choice(self, proposal: Any) -> str:
        name = proposal["trait"].name
        allowed = {"view": VIEWS, "error_unit": ERROR_UNITS, "summary_scope": SUMMARY_SCOPES,
                   "summary_quantiles": _SUMMARY_QUANTILES}[name]
        v = proposal["value"]
        if v in allowed:
            return str(v)
        return self._reject(name, BitprismError(
            f"{name} must be one of {', '.join(allowed)}; got {v!r}"))

    @validate("rows", "cols")
    def _valid_size(self, proposal: Any) -> int:
        v = proposal["value"]
        if 1 <= v <= MAX_SIDE:
            return int(v)
        name = proposal["trait"].name
        return self._reject(name, BitprismError(
            f"{name} must be in 1..{MAX_SIDE}; got {v!r}"))

    @validate("row_offset", "col_offset")
    def _valid_offset(self, proposal: Any) -> int:
        name = proposal["trait"].name
        v = int(proposal["value"])
        arr = self.data
        if arr is None:
            return v
        ax = self.row_axis if name == "row_offset" else self.col_axis
        n = 1 if ax is None else int(arr.shape[ax])
        if not 0 <= v < n:
            return self._reject(name, BitprismError(
                f"{name.replace('_offset', '')} {v} is out of range for axis {ax} of size {n}"))
        return v

    @validate("selected")
    def _valid_selected(self, proposal: Any) -> tuple[int, ...]:
        v = tuple(proposal["value"])
        if not v or self.data is None:
            return ()
        shape = self.data.shape
        try:
            if len(v) != len(shape):
                raise BitprismError(
                    f"selected needs one index per axis of {tuple(shape)}; got {v!r}")
            out = []
            for ax, (i, n) in enumerate(zip(v, shape)):
                i = check_index(i, "selected")
                if not 0 <= i < n:
                    raise BitprismError(f"index {i} is out of range for axis {ax} with size {n}")
                out.append(i)
            return tuple(out)
        except Exception as exc:
            return self._reject("selected", exc)

    @validate("fixed")
    def _valid_fixed(self, proposal: Any) -> tuple[int, ...]:
        try:
            v = tuple(check_index(i, "fixed") for i in proposal["value"])
        except Exception as exc:
            return self._reject("fixed", exc)
        if self.data is None:
            return v
        shape = self.data.shape
        try:
            if len(v) != len(shape):
                raise BitprismError(f"fixed needs one index per axis of {tuple(shape)}; got {v!r}")
            for ax, (i, n) in enumerate(zip(v, shape)):
                if not 0 <= i < n:
                    raise BitprismError(f"index {i} is out of range for axis {ax} with size {n}")
            return v
        except Exception as exc:
            return self._reject("fixed", exc)

    # ----- reactions -------------------------------------------------------------------------
    @observe("data")
    def _on_data(self, change: Any) -> None:
        old, new = change["old"], change["new"]
        if old is new:
            return
        self._token += 1
        if self._restoring:  # back to the last good view: its traits are restored too
            return
        if old is not None and (old.ndim != new.ndim or old.shape != new.shape):
            with self._bulk():
                self._reset_axes(new)
        else:
            self._refresh()

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

    @observe("row_axis", "col_axis")
    def _on_axes(self, change: Any) -> None:
        # choosing the other shown axis swaps the two; a new pair starts at the slice's corner
        if self._restoring:
            return
        with self._bulk():
            other = "col_axis" if change["name"] == "row_axis" else "row_axis"
            if getattr(self, other) == change["new"] and change["old"] is not None:
                setattr(self, other, change["old"])
            self.row_offset = 0
            self.col_offset = 0

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
        "log_scale", "error_unit", "fixed", "row_offset", "col_offset", "rows", "cols",
        "summary_scope", "summary_quantiles",
    )
    def _on_trait(self, change: Any) -> None:
        self._refresh()

    @observe("message")
    def _on_message(self, change: Any) -> None:
        self.message_html.value = message_html(change["new"])

    def _bring_into_view(self, idx: tuple[int, ...]) -> None:
        """Fix the other axes at idx and move the window so that idx is visible."""
        fixed = list(self.fixed)
        for ax, v in enumerate(idx):
            if ax not in (self.row_axis, self.col_axis):
                fixed[ax] = v
        self.fixed = tuple(fixed)
        if self.row_axis is not None:
            r = idx[self.row_axis]
            if not self.row_offset <= r < self.row_offset + self.rows:
                self.row_offset = max(0, r - self.rows // 2)
        c = idx[self.col_axis]
        if not self.col_offset <= c < self.col_offset + self.cols:
            self.col_offset = max(0, c - self.cols // 2)

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
            nrows = 1 if self.row_axis is None else int(arr.shape[self.row_axis])
            ncols = int(arr.shape[self.col_axis])
            w = make_window(
                arr, self.row_axis, self.col_axis, self.fixed or (0,) * arr.ndim,
                min(self.row_offset, nrows - 1), min(self.col_offset, ncols - 1),
                min(self.rows, nrows), min(self.cols, ncols), casts, opts,
            )
            tips_key = (self._token, w.row_axis, w.col_axis, w.fixed, w.row0, w.col0,
                        w.raw.shape)
            tips = self._tips if tips_key == self._tips_key else None
            paint = paint_window(w, self.view, 0, len(casts) - 1, self.log_scale,
                                 self.error_unit, tips)
            summary = self._summary_for(arr, opts)
        except Exception as exc:  # the last good view stays, and so do its traits
            self._refuse_view(exc)
        self._tips_key, self._tips = tips_key, paint.tooltips
        self.set_trait("window", w)
        if summary is not None:
            self.set_trait("summary", summary)
        self.message = ""
        self._show_grid(w, paint)
        self._show_status(w, fa, fb, opts)
        self._show_prism()
        self._remember_good_view()
        self._snapshot_changed()

    # ----- summary and counts ----------------------------------------------------------------
    def _summary_for(self, arr: np.ndarray, opts: CastOptions) -> ScanResult | None:
        found = self._stats.summary(
            self._token, arr, list(self.formats), opts, self.summary_scope,
            self.summary_quantiles, self.row_axis, self.col_axis, self.fixed)
        if found is None:
            return None
        result, counts_only = found
        self.summary_html.value = tensor_summary_html(result, counts_only=counts_only)
        return result

    def count(self, kind: str) -> int:
        """How many cells of the whole tensor are of a kind (format A; cached)."""
        if kind == "largest_error":
            return self._largest()[1]
        if kind not in FIND_KINDS:
            raise BitprismError(f"kind must be one of {', '.join(FIND_KINDS)}; got {kind!r}")
        opts = self.options
        f = None if kind in ("nan", "inf") else self._fmt("a")
        return self._stats.count(self._token, self.data, kind, f, opts)

    def _largest(self) -> tuple[float | None, int]:
        return self._stats.largest(self._token, self.data, self._fmt("a"), self.options,
                                   self.error_unit)

    # ----- showing -----------------------------------------------------------------------------
    def _show_grid(self, w: Window, paint: GridPaint) -> None:
        self._cell_grid.show(w, paint, w.cell_of(self.selected) if self.selected else None)
        legend = legend_html(paint)
        if self.legend_html.value != legend:
            self.legend_html.value = legend
        self._paint = paint

    def _show_status(self, w: Window, fa: Format, fb: Format, opts: CastOptions) -> None:
        arr = self.data
        self._suspend += 1
        try:
            sync_controls(self, w, fa, fb)
            self._slider_axes = sync_sliders(self, w, self._slider_axes, self._on_slider)
        finally:
            self._suspend -= 1
        self.position_html.value = window_position_html(arr.dtype, arr.shape, w, self.selected)
        for kind, html in self.nav_counts.items():
            html.value = self._count_text(kind, fa, opts)

    def _count_text(self, kind: str, fa: Format, opts: CastOptions) -> str:
        word = KIND_WORDS[kind]
        if kind == "largest_error":
            known = self._stats.known_largest(self._token, fa, opts, self.error_unit)
            unit = "ULP" if self.error_unit == "ulp" else "relative"
            if known is None:
                return f"{word} ({fa.name}, {unit}): press ◀ ▶ to find"
            best, n = known
            if best is None:
                return f"{word} ({fa.name}): none"
            return f"{word} {best:.3g} {unit} in {fa.name}: {n:,} cells"
        where = "" if kind in ("nan", "inf") else f" in {fa.name}"
        f = None if kind in ("nan", "inf") else fa
        count = self._stats.cheap_count(self._token, self.data, kind, f, opts)
        if count is None:  # a whole pass over a large tensor waits for a press of ◀ or ▶
            return f"{word}{where}: press ◀ ▶ to find"
        return f"{word}{where}: {count:,}"

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

    def _sync_controls(self) -> None:
        w = self.window
        if w is None:
            return
        self._suspend += 1
        try:
            sync_controls(self, w, self._fmt("a"), self._fmt("b"))
            if self.seed is None and self.seed_input.value != 0:
                self.seed_input.value = 0
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
    def _on_cell_click(self, k: int, button: Any = None) -> None:
        w = self.window
        rows, cols = self._cell_grid.shape
        i, j = divmod(k, cols)
        if w is None or i >= w.rows or j >= w.cols:
            return
        self.select(w.index_of(i, j))

    def select(self, index: Any) -> None:
        """Select a cell by tensor index (a tuple, or text like '3, 17'); shows it in the Prism."""
        if isinstance(index, str):
            index = parse_index(index, self.data.shape, (self.row_axis, self.col_axis),
                                self.fixed)
        self.selected = tuple(int(i) for i in np.atleast_1d(index))

    @guarded
    def _on_goto(self, change: Any) -> None:
        text = change["new"]
        if self._suspend or not text.strip():
            return
        self.goto(text)

    def goto(self, text: str) -> None:
        """Go to and select an index typed as numpy-style coordinates; errors are shown."""
        try:
            idx = parse_index(text, self.data.shape, (self.row_axis, self.col_axis), self.fixed)
        except BitprismError as exc:
            self.message = message_for(exc)
            return
        self.selected = idx

    @guarded
    def _on_pan(self, name: str, button: Any = None) -> None:
        self.pan(name)

    def pan(self, direction: str) -> None:
        """Move the window: left/right/up/down by one, page-left/... by a page (clamped)."""
        arr = self.data
        nrows = 1 if self.row_axis is None else int(arr.shape[self.row_axis])
        ncols = int(arr.shape[self.col_axis])
        page = direction.startswith("page-")
        d = direction[5:] if page else direction
        if d not in ("left", "right", "up", "down"):
            raise BitprismError(f"direction must be left, right, up or down (optionally "
                                f"'page-...'); got {direction!r}")
        if d in ("left", "right"):
            step = self.cols if page else 1
            v = self.col_offset + (step if d == "right" else -step)
            self.col_offset = max(0, min(v, max(ncols - self.cols, 0)))
        else:
            step = self.rows if page else 1
            v = self.row_offset + (step if d == "down" else -step)
            self.row_offset = max(0, min(v, max(nrows - self.rows, 0)))

    @guarded
    def _on_find(self, kind: str, backward: bool, button: Any = None) -> None:
        self.find_next(kind, backward)

    def find_next(self, kind: str, backward: bool = False) -> tuple[int, ...] | None:
        """Select the next (or previous) cell of a kind in C order over the whole tensor,
        starting after the selection (or the window's first cell), wrapping around."""
        arr = self.data
        if kind not in FIND_KINDS:
            raise BitprismError(f"kind must be one of {', '.join(FIND_KINDS)}; got {kind!r}")
        fa = self._fmt("a")
        opts = self.options
        target = None
        if kind == "largest_error":
            target, n = self._largest()
            if target is None:
                self.message = f"no cell has a finite result in {fa.name}"
                self._refresh_counts()
                return None
        if self.selected:
            start = flat_index(self.selected, arr.shape)
        else:
            w = self.window
            start = flat_index(w.index_of(0, 0), arr.shape) - (0 if backward else 1)
        hit = find(arr, kind, None if kind in ("nan", "inf") else fa, opts, start, backward,
                   self.error_unit, target)
        if kind != "largest_error":
            self.count(kind)  # asked for: the count of this kind shows from now on
        where = "" if kind in ("nan", "inf") else f" in {fa.name}"
        if hit is None:
            self._refresh_counts()
            self.message = f"no {KIND_WORDS[kind]} cell{where} in the tensor"
            return None
        flat, wrapped = hit
        idx = tuple(int(i) for i in np.unravel_index(flat, arr.shape))
        self.selected = idx
        if wrapped:
            self.message = (f"{KIND_WORDS[kind]}: wrapped around to the "
                            f"{'end' if backward else 'start'} of the tensor")
        return idx

    def _refresh_counts(self) -> None:
        fa, opts = self._fmt("a"), self.options
        for kind, html in self.nav_counts.items():
            html.value = self._count_text(kind, fa, opts)

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

    # ----- headless output ---------------------------------------------------------------------
    def to_html(self) -> str:
        """A static HTML snapshot of the current view (grid, legend and summary)."""
        return self._static_html()

    def _static_html(self) -> str:
        w, paint = self.window, self._paint
        if w is None or paint is None:
            return ""
        sel = w.cell_of(self.selected) if self.selected else None
        summary = scan_html(self.summary) if self.summary is not None else ""
        title = ""
        if self._origin is not None:
            title = f"window saved at index {list(self._origin)} of the original tensor"
        return grid_html(w, paint, sel, summary, title)

    def _repr_mimebundle_(self, **kwargs: Any) -> dict[str, Any]:
        bundle = dict(super()._repr_mimebundle_(**kwargs) or {})
        bundle["text/html"] = self._static_html()
        return bundle

    # ----- case files ----------------------------------------------------------------------------
    def _case_state(self) -> dict[str, Any]:
        return tensor_case_state(self, self._fmt("a"), self._fmt("b"))

    @classmethod
    def _from_case_state(cls, state: dict[str, Any]) -> "TensorPrism":
        case = read_tensor_case(state)
        tp = cls(case.data, formats=case.formats, **case.settings)
        tp._origin = case.origin
        if case.selected:
            tp.selected = case.selected
        return tp

