"""``TensorPrism``: a 2-D window of any tensor, cells coloured by what a cast does to them,
linked to a ``Prism`` for the selected cell.

State lives in traits; every reaction goes through one ``_refresh()``; the window and its
classification come from ``tensors.window``, the colours, labels, tooltips and static markup
from ``render.grid_html``, the summary from ``scan`` / ``render.scan_html``. Standard ipywidgets
only: each cell is a ``Button`` (the same objects are reused across pans; only their label,
tooltip and shared style change). Only the window is read and sent, so a 4096 x 4096 tensor
(or a ``np.memmap`` far larger than memory) pans without delay; whole-tensor searches read one
chunk at a time.

After construction nothing a person does raises: a bad value, index, option or tensor shows a
message in the widget and the last good view stays.
"""

from __future__ import annotations

import base64
import functools
import io
import itertools
import re
import uuid
from typing import Any

import ipywidgets as W
import numpy as np
from traitlets import Any as AnyTrait
from traitlets import Bool, Int, List, Tuple, Unicode, observe, validate

from .guarded import BatchedRefresh, guarded, message_for
from ..errors import BitprismError
from ..formats import FORMATS, Format, get_format
from ..numerics.options import OVERFLOW_MODES, ROUNDING_MODES, SUBNORMAL_MODES, CastOptions
from ..render.grid_html import PAINTS, VIEWS, GridPaint, grid_html, legend_html, paint_window
from ..render.scan_html import scan_html
from ..tensors.scan import DEFAULT_FORMATS, KEEP_VALUES, PROGRESS_MIN, ScanResult, scan
from ..tensors.window import (
    ERROR_UNITS,
    FIND_KINDS,
    MAX_SIDE,
    Window,
    as_tensor,
    count_kinds,
    find,
    flat_index,
    largest_error,
    make_window,
    parse_index,
)
from .case_file import (
    MAX_FORMATS,
    CaseFieldError,
    CaseFileMixin,
    check_window_size,
    format_from_json,
    format_to_json,
    options_from_json,
    options_to_json,
    want_bool,
    want_int,
    want_list,
    want_object,
    want_str,
)

__all__ = ["TensorPrism"]

_KIND_WORDS = {"nan": "NaN", "inf": "Inf", "overflow": "overflow", "underflow": "underflow",
               "largest_error": "largest error"}
_SCOPES = ("tensor", "slice")
_SUMMARY_QUANTILES = ("auto", "exact", "histogram", "none")

# Model ids of the shared cell styles: a random prefix per process, then a counter.
_STYLE_ID_PREFIX = uuid.uuid4().hex[:10]
_style_ids = itertools.count()


def _style_model_id() -> str:
    """A short model id for a shared cell style (passed as ipywidgets' ``model_id``).

    Every cell whose colour changes is sent ``"IPY_MODEL_<id>"``: with ipywidgets' default
    32-hex-digit ids that reference was about a third of a cell's update. The counter keeps
    these ids unique in this kernel; the 40 random bits keep them apart from other kernels' ids
    (widget state saved in a notebook); ordinary widgets' 32-digit ids cannot equal them.
    """
    return f"{_STYLE_ID_PREFIX}{next(_style_ids):x}"


def _model_ref(w: W.Widget) -> str:
    return f"IPY_MODEL_{w.model_id}"


def _push(widget: W.Widget, changes: dict[str, Any]) -> None:
    """Set traits of a grid widget (cell, header) with one state message.

    A 32 x 32 window has 1024 cells; the public path (``hold_sync`` and one ``setattr`` per
    trait) costs several times the whole refresh budget in trait machinery. Cells have no
    observers of their own, so their new values are stored directly and one update message is
    sent. The message leaves out ``buffer_paths`` (``send_state`` always adds an empty one, 20
    bytes a cell): these values are text and model references, never binary, and both the
    front-end (``@jupyter-widgets/base``) and ipywidgets read a missing ``buffer_paths`` as
    empty. Falls back to the public path if ipywidgets' internals ever differ.
    """
    values = getattr(widget, "_trait_values", None)
    send = getattr(widget, "_send", None)
    if values is None or send is None:  # pragma: no cover - other ipywidgets versions
        with widget.hold_sync():
            for k, v in changes.items():
                setattr(widget, k, v)
        return
    state: dict[str, Any] = {}
    for k, v in changes.items():
        values[k] = v
        state[k] = _model_ref(v) if isinstance(v, W.Widget) else v
    send({"method": "update", "state": state})


class TensorPrism(BatchedRefresh, CaseFileMixin, W.VBox):
    """A 2-D window (up to 32 x 32 cells) of any tensor, coloured by a chosen view.

    ``TensorPrism(data, formats=["bfloat16", "float8_e4m3fn"], view="cast")``. ``data`` is
    anything ``bitprism.as_array`` reads (numpy, ml_dtypes, torch incl. bfloat16/float8, JAX,
    memmaps, files). ``tp.selected`` is the selected index (observe it); ``tp.window`` the
    current ``Window``; ``tp.summary`` the current ``ScanResult``.
    """

    _case_kind = "tensor_prism"

    data = AnyTrait(None, help="the tensor, as the numpy view bitprism.as_array gives")
    formats = List(AnyTrait(), default_value=list[Any](DEFAULT_FORMATS),
                   help="formats cast to, by name, or Format objects for custom layouts")
    format_a = Unicode("", help="format A: cast, error and compare views ('' = first format)")
    format_b = Unicode("", help="format B of the compare view ('' = second format)")
    rounding = Unicode("roundTiesToEven", help="IEEE 754 rounding direction or 'stochastic'")
    overflow = Unicode("standard", help="'standard' (Inf/NaN as the format defines) or 'saturate'")
    subnormals = Unicode("keep", help="'keep' subnormal results or 'flush' them to zero")
    seed = Int(None, allow_none=True, help="seed of stochastic rounding (None: fresh draws)")
    view = Unicode("cast", help="cell colours: value, class, cast, error or compare")
    log_scale = Bool(False, help="value view: colour by log-magnitude instead of linearly")
    error_unit = Unicode("ulp", help="error view and largest-error search: 'ulp' or 'relative'")
    row_axis = Int(0, allow_none=True, help="tensor axis shown as rows (None for 1-D data)")
    col_axis = Int(1, help="tensor axis shown as columns")
    fixed = Tuple(help="one index per axis; those of the axes not shown pick the slice")
    row_offset = Int(0, help="first row shown")
    col_offset = Int(0, help="first column shown")
    rows = Int(16, help=f"rows shown (1..{MAX_SIDE})")
    cols = Int(16, help=f"columns shown (1..{MAX_SIDE})")
    selected = Tuple(help="tensor index of the selected cell; () when none")
    summary_scope = Unicode("tensor", help="scan summary of the whole 'tensor' or the 2-D 'slice'")
    summary_quantiles = Unicode(
        "auto", help="error quantiles of the summary scan: auto, exact, histogram or none")
    message = Unicode("", help="the last error or note shown to the person")
    window = AnyTrait(None, read_only=True, help="the current Window (read-only)")
    summary = AnyTrait(None, read_only=True, help="the current summary ScanResult (read-only)")

    def __init__(self, data: Any, formats: Any = None, **kwargs: Any) -> None:
        arr = as_tensor(data)  # raises BitprismError: there is no view to keep yet
        self._constructing = True
        self._suspend = 1
        self._token = 0
        self._cells: list[W.Button] = []
        self._row_heads: list[W.Label] = []
        self._col_heads: list[W.Label] = []
        self._grid_shape = (0, 0)
        self._sel_cell: tuple[int, int] | None = None
        self._paint: GridPaint | None = None
        self._tips_key: Any = None
        self._tips: Any = None
        self._summary_cache: dict[Any, ScanResult] = {}
        self._summary_key: Any = None
        self._count_cache: dict[Any, int] = {}
        self._largest_cache: dict[Any, tuple[float | None, int]] = {}
        self._prism_key: Any = None
        self._slider_axes: tuple[int, ...] = ()
        self._origin: tuple[int, ...] | None = None
        self._styles = {
            k: W.ButtonStyle(button_color=p.background, text_color=p.text,
                             model_id=_style_model_id())
            for k, p in PAINTS.items()
        }
        self._cell_layout = W.Layout(width="40px", height="24px", padding="0", margin="0")
        self._sel_layout = W.Layout(width="40px", height="24px", padding="0", margin="0",
                                    border="2px solid #1f1f1f")
        self._build_controls()
        super().__init__()
        self.add_class("bitprism-tensorprism")
        try:
            with self.hold_trait_notifications():
                self.data = arr
                self._reset_axes(arr)
                if formats is not None:
                    self.formats = list(formats)
                for k, v in kwargs.items():
                    if k not in self.class_trait_names() or k in ("window", "summary"):
                        raise BitprismError(f"TensorPrism has no option {k!r}")
                    setattr(self, k, v)
        finally:
            self._suspend = 0
        self._refresh()
        if self.window is None:
            raise BitprismError(self.message or "no view could be built")
        self._constructing = False
        self._layout_children()

    # ----- controls --------------------------------------------------------------------------
    def _build_controls(self) -> None:
        lay = W.Layout
        self.message_html = W.HTML()
        self.message_html.add_class("bitprism-message")
        self.summary_html = W.HTML()
        self.summary_html.add_class("bitprism-summary")
        self.scope_menu = W.Dropdown(options=list(_SCOPES), description="summary of",
                                     layout=lay(width="200px"))
        self.chart_button = W.Button(description="range chart", tooltip=(
            "draw the range chart of the summary (exponent histogram over each format's range)"),
            layout=lay(width="auto"))
        self.chart_button.add_class("bitprism-range-chart")
        self.chart_output = W.Output()
        self.view_menu = W.Dropdown(options=list(VIEWS), description="view",
                                    layout=lay(width="200px"))
        self.log_box = W.Checkbox(description="log-magnitude", indent=False,
                                  layout=lay(width="130px"))
        self.unit_menu = W.Dropdown(options=list(ERROR_UNITS), description="error",
                                    layout=lay(width="170px"))
        self.a_menu = W.Dropdown(options=[], description="format A", layout=lay(width="240px"))
        self.b_menu = W.Dropdown(options=[], description="format B", layout=lay(width="240px"))
        self.rounding_menu = W.Dropdown(options=list(ROUNDING_MODES), description="rounding")
        self.overflow_menu = W.Dropdown(options=list(OVERFLOW_MODES), description="overflow")
        self.subnormals_menu = W.Dropdown(options=list(SUBNORMAL_MODES), description="subnormals")
        self.seed_input = W.IntText(value=0, description="seed", layout=lay(width="160px"))
        self.row_axis_menu = W.Dropdown(options=[], description="rows: axis",
                                        layout=lay(width="170px"))
        self.col_axis_menu = W.Dropdown(options=[], description="columns: axis",
                                        layout=lay(width="190px"))
        self.sliders_box = W.VBox()
        self.row_input = W.IntText(description="row", layout=lay(width="160px"))
        self.col_input = W.IntText(description="column", layout=lay(width="160px"))
        self.rows_input = W.BoundedIntText(min=1, max=MAX_SIDE, description="rows",
                                           layout=lay(width="130px"))
        self.cols_input = W.BoundedIntText(min=1, max=MAX_SIDE, description="cols",
                                           layout=lay(width="130px"))
        for widget in (self.row_input, self.col_input, self.rows_input, self.cols_input,
                       self.seed_input):
            widget.continuous_update = False
        self.goto_input = W.Text(placeholder="go to index, e.g. 3, 17 or [0, 3, 17]",
                                 continuous_update=False, layout=lay(width="300px"))
        self.goto_input.add_class("bitprism-goto")
        self.pan_buttons: dict[str, W.Button] = {}
        pans = (("page-left", "⇇", "left by a page"), ("left", "←", "left by one column"),
                ("right", "→", "right by one column"), ("page-right", "⇉", "right by a page"),
                ("page-up", "⇈", "up by a page"), ("up", "↑", "up by one row"),
                ("down", "↓", "down by one row"), ("page-down", "⇊", "down by a page"))
        for name, label, tip in pans:
            b = W.Button(description=label, tooltip=tip, layout=lay(width="34px"))
            b.add_class(f"bitprism-pan-{name}")
            b.on_click(functools.partial(self._on_pan, name))
            self.pan_buttons[name] = b
        self.nav_buttons: dict[str, W.Button] = {}
        self.nav_counts: dict[str, W.HTML] = {}
        rows = []
        for kind in FIND_KINDS:
            slug = kind.replace("_", "-")
            prev = W.Button(description="◀", tooltip=f"previous {_KIND_WORDS[kind]} cell",
                            layout=lay(width="34px"))
            nxt = W.Button(description="▶", tooltip=f"next {_KIND_WORDS[kind]} cell",
                           layout=lay(width="34px"))
            prev.add_class(f"bitprism-prev-{slug}")
            nxt.add_class(f"bitprism-next-{slug}")
            prev.on_click(functools.partial(self._on_find, kind, True))
            nxt.on_click(functools.partial(self._on_find, kind, False))
            self.nav_buttons[f"prev-{kind}"] = prev
            self.nav_buttons[f"next-{kind}"] = nxt
            count = W.HTML(layout=lay(width="230px"))
            self.nav_counts[kind] = count
            rows.append(W.HBox([prev, nxt, count]))
        self.nav_box = W.VBox(rows)
        self.position_html = W.HTML()
        self.legend_html = W.HTML()
        self.grid = W.GridBox(layout=W.Layout(grid_gap="1px", overflow="auto", max_width="100%"))
        self.grid.add_class("bitprism-grid")
        self.prism: Any = None
        self.prism_box = W.VBox()

        for widget, name in (
            (self.view_menu, "view"), (self.log_box, "log_scale"), (self.unit_menu, "error_unit"),
            (self.a_menu, "format_a"), (self.b_menu, "format_b"),
            (self.rounding_menu, "rounding"), (self.overflow_menu, "overflow"),
            (self.subnormals_menu, "subnormals"), (self.seed_input, "seed"),
            (self.row_axis_menu, "row_axis"), (self.col_axis_menu, "col_axis"),
            (self.row_input, "row_offset"), (self.col_input, "col_offset"),
            (self.rows_input, "rows"), (self.cols_input, "cols"),
            (self.scope_menu, "summary_scope"),
        ):
            widget.observe(functools.partial(self._on_control, name), "value")
        self.goto_input.observe(self._on_goto, "value")
        self.chart_button.on_click(self._on_chart)

    def _layout_children(self) -> None:
        p = self.pan_buttons
        self.children = [
            W.HBox([self.summary_html]),
            W.HBox([self.scope_menu, self.chart_button]),
            self.chart_output,
            W.HBox([self.view_menu, self.a_menu, self.b_menu, self.log_box, self.unit_menu]),
            W.HBox([self.rounding_menu, self.overflow_menu, self.subnormals_menu,
                    self.seed_input]),
            W.HBox([self.row_axis_menu, self.col_axis_menu, self.rows_input, self.cols_input]),
            self.sliders_box,
            W.HBox([p["page-left"], p["left"], p["right"], p["page-right"], p["page-up"],
                    p["up"], p["down"], p["page-down"], self.row_input, self.col_input]),
            W.HBox([self.goto_input, self.position_html]),
            self.message_html,
            self.legend_html,
            W.HBox([self.grid, self.nav_box]),
            self.prism_box,
        ]

    # ----- derived state ---------------------------------------------------------------------
    @property
    def array(self) -> np.ndarray:
        """The tensor as a numpy view (bits unchanged)."""
        return self.data  # type: ignore[no-any-return]

    @property
    def format_objects(self) -> list[Format]:
        return [get_format(f) for f in self.formats]

    @property
    def options(self) -> CastOptions:
        return CastOptions(self.rounding, self.overflow, self.subnormals, self.seed)  # type: ignore[arg-type]

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

    # ----- validation: before construction ends, errors raise; afterwards they are shown ------
    def _reject(self, name: str, exc: BaseException) -> Any:
        if getattr(self, "_constructing", True):
            raise BitprismError(str(exc)) from exc
        self.message = message_for(exc)
        return getattr(self, name)

    @validate("data")
    def _valid_data(self, proposal: Any) -> Any:
        try:
            return as_tensor(proposal["value"])
        except Exception as exc:
            return self._reject("data", exc)

    @validate("formats")
    def _valid_formats(self, proposal: Any) -> list[Any]:
        try:
            out: list[Any] = []
            seen = set()
            for spec in proposal["value"]:
                f = get_format(spec)
                if f not in seen:
                    seen.add(f)
                    out.append(f.name if FORMATS.get(f.name) == f else f)
            if not out:
                raise BitprismError("a TensorPrism needs at least one format")
            if len(out) > MAX_FORMATS:
                raise BitprismError(f"at most {MAX_FORMATS} formats; got {len(out)}")
            return out
        except Exception as exc:
            return self._reject("formats", exc)  # type: ignore[no-any-return]

    @validate("format_a", "format_b")
    def _valid_ab(self, proposal: Any) -> str:
        v = proposal["value"]
        name = proposal["trait"].name
        if not v:
            return ""
        try:
            names = [f.name for f in self.format_objects]
            if v in names:
                return str(v)
            f = get_format(v)
            if f.name not in names:
                raise BitprismError(
                    f"{name}: {f.name!r} is not among the formats ({', '.join(names)}); "
                    "add it to formats first")
            return f.name
        except Exception as exc:
            return self._reject(name, exc)  # type: ignore[no-any-return]

    @validate("rounding", "overflow", "subnormals")
    def _valid_option(self, proposal: Any) -> str:
        name = proposal["trait"].name
        try:
            return str(getattr(CastOptions(**{name: proposal["value"]}), name))
        except Exception as exc:
            return self._reject(name, exc)  # type: ignore[no-any-return]

    @validate("view", "error_unit", "summary_scope", "summary_quantiles")
    def _valid_choice(self, proposal: Any) -> str:
        name = proposal["trait"].name
        allowed = {"view": VIEWS, "error_unit": ERROR_UNITS, "summary_scope": _SCOPES,
                   "summary_quantiles": _SUMMARY_QUANTILES}[name]
        v = proposal["value"]
        if v in allowed:
            return str(v)
        return self._reject(name, BitprismError(  # type: ignore[no-any-return]
            f"{name} must be one of {', '.join(allowed)}; got {v!r}"))

    @validate("rows", "cols")
    def _valid_size(self, proposal: Any) -> int:
        v = proposal["value"]
        if 1 <= v <= MAX_SIDE:
            return int(v)
        name = proposal["trait"].name
        return self._reject(name, BitprismError(  # type: ignore[no-any-return]
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
            return self._reject(name, BitprismError(  # type: ignore[no-any-return]
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
                i = int(i)
                if not 0 <= i < n:
                    raise BitprismError(f"index {i} is out of range for axis {ax} with size {n}")
                out.append(i)
            return tuple(out)
        except Exception as exc:
            return self._reject("selected", exc)  # type: ignore[no-any-return]

    @validate("fixed")
    def _valid_fixed(self, proposal: Any) -> tuple[int, ...]:
        v = tuple(int(i) for i in proposal["value"])
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
            return self._reject("fixed", exc)  # type: ignore[no-any-return]

    # ----- reactions -------------------------------------------------------------------------
    @observe("data")
    def _on_data(self, change: Any) -> None:
        old, new = change["old"], change["new"]
        if old is new:  # a refused tensor: the validator kept the old one
            return
        self._token += 1
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
        with self._bulk():
            other = "col_axis" if change["name"] == "row_axis" else "row_axis"
            if getattr(self, other) == change["new"] and change["old"] is not None:
                setattr(self, other, change["old"])
            self.row_offset = 0
            self.col_offset = 0

    @observe("selected")
    def _on_selected(self, change: Any) -> None:
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
        from html import escape

        text = change["new"]
        self.message_html.value = (
            f'<div style="color:#b00020;font-weight:bold">{escape(text)}</div>' if text else ""
        )

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
        except Exception as exc:  # keep the last good view, say what went wrong
            self.message = message_for(exc)
            return
        self._tips_key, self._tips = tips_key, paint.tooltips
        self.set_trait("window", w)
        if summary is not None:
            self.set_trait("summary", summary)
        self.message = ""
        self._show_grid(w, paint)
        self._show_status(w, fa, fb, opts)
        self._show_prism()
        self._snapshot_changed()

    # ----- summary and counts ----------------------------------------------------------------
    def _summary_target(self, arr: np.ndarray) -> Any:
        if self.summary_scope == "tensor" or arr.ndim <= 2:
            return arr, ()
        key = []
        fixed = self.fixed or (0,) * arr.ndim
        for ax in range(arr.ndim):
            key.append(slice(None) if ax in (self.row_axis, self.col_axis) else fixed[ax])
        return arr[tuple(key)], tuple(
            (ax, fixed[ax]) for ax in range(arr.ndim) if ax not in (self.row_axis, self.col_axis))

    def _summary_for(self, arr: np.ndarray, opts: CastOptions) -> ScanResult | None:
        target, where = self._summary_target(arr)
        q = self.summary_quantiles
        if q == "auto":
            n = target.size
            q = "exact" if n <= KEEP_VALUES else ("histogram" if n <= PROGRESS_MIN else "none")
        if opts.rounding == "stochastic" and q == "none":
            q = "histogram"
        key = (self._token, tuple(f.name if isinstance(f, Format) else f for f in self.formats),
               tuple(self.format_objects), opts, where, q)
        if key == self._summary_key:
            return None
        if key not in self._summary_cache:
            self._summary_cache.clear()  # one summary kept: tensors can be large
            self._summary_cache[key] = scan(
                target, self.format_objects, opts.rounding, opts.overflow, opts.subnormals,
                progress=False, quantiles=False if q == "none" else q, seed=opts.seed,
                exponents=True)  # the range chart draws the exponent histogram
        self._summary_key = key
        result = self._summary_cache[key]
        note = ""
        if q == "none":
            note = ("<div style='font-size:11px;color:#57606a'>counts only for a tensor this "
                    "large; set summary_quantiles='histogram' for error figures</div>")
        self.summary_html.value = scan_html(result) + note
        if self.summary_scope == "tensor" or arr.ndim <= 2:
            for fs in result.formats:  # the scan's counts serve the navigation too
                f = get_format(fs.format)
                for kind in ("nan", "inf", "overflow", "underflow"):
                    ck = (self._token, kind, None if kind in ("nan", "inf") else f, opts)
                    self._count_cache.setdefault(ck, getattr(fs, kind))
        return result

    def count(self, kind: str) -> int:
        """How many cells of the whole tensor are of a kind (format A; cached)."""
        if kind == "largest_error":
            return self._largest()[1]
        if kind not in FIND_KINDS:
            raise BitprismError(f"kind must be one of {', '.join(FIND_KINDS)}; got {kind!r}")
        opts = self.options
        f = None if kind in ("nan", "inf") else self._fmt("a")
        key = (self._token, kind, f, opts)
        if key not in self._count_cache:
            self._count_cache[key] = count_kinds(self.data, f, opts, (kind,))[kind]
        return self._count_cache[key]

    def _largest(self) -> tuple[float | None, int]:
        key = (self._token, self._fmt("a"), self.options, self.error_unit)
        if key not in self._largest_cache:
            self._largest_cache[key] = largest_error(self.data, key[1], key[2], key[3])
        return self._largest_cache[key]

    # ----- showing -----------------------------------------------------------------------------
    def _ensure_grid(self, rows: int, cols: int) -> None:
        if self._grid_shape == (rows, cols):
            return
        need = rows * cols
        while len(self._cells) < need:
            k = len(self._cells)
            b = W.Button(description="", layout=self._cell_layout, style=self._styles["rounded"])
            b.add_class("bitprism-cell")
            b.on_click(functools.partial(self._on_cell_click, k))
            self._cells.append(b)
        while len(self._row_heads) < rows:
            self._row_heads.append(W.Label(layout=W.Layout(width="auto", margin="0 4px 0 0")))
        while len(self._col_heads) < cols:
            self._col_heads.append(W.Label(layout=W.Layout(width="40px", justify_content="center")))
        self._sel_cell = None
        for b in self._cells:
            if b.layout is not self._cell_layout:
                b.layout = self._cell_layout
            if "bitprism-cell-selected" in b._dom_classes:
                b.remove_class("bitprism-cell-selected")
        children: list[W.Widget] = [W.Label("")] + self._col_heads[:cols]
        for i in range(rows):
            children.append(self._row_heads[i])
            children.extend(self._cells[i * cols : (i + 1) * cols])
        self.grid.layout.grid_template_columns = f"auto repeat({cols}, 40px)"
        self.grid.children = children
        self._grid_shape = (rows, cols)
        self._shown: list[tuple[str, str, str]] = [("", "", "")] * need

    def _show_grid(self, w: Window, paint: GridPaint) -> None:
        rows, cols = w.rows, w.cols
        self._ensure_grid(rows, cols)
        shown = self._shown
        styles = self._styles
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
                _push(self._cells[k], ch)
                shown[k] = new
        for i in range(rows):
            text = str(w.row0 + i) if w.row_axis is not None else ""
            if self._row_heads[i].value != text:
                _push(self._row_heads[i], {"value": text})
        for j in range(cols):
            text = str(w.col0 + j)
            if self._col_heads[j].value != text:
                _push(self._col_heads[j], {"value": text})
        # the selected cell: outlined, and a CSS class for the page
        sel = w.cell_of(self.selected) if self.selected else None
        if sel != self._sel_cell:
            if self._sel_cell is not None:
                b = self._cells[self._sel_cell[0] * cols + self._sel_cell[1]]
                b.layout = self._cell_layout
                b.remove_class("bitprism-cell-selected")
            if sel is not None:
                b = self._cells[sel[0] * cols + sel[1]]
                b.layout = self._sel_layout
                b.add_class("bitprism-cell-selected")
            self._sel_cell = sel
        legend = legend_html(paint)
        if self.legend_html.value != legend:
            self.legend_html.value = legend
        self._paint = paint

    def _show_status(self, w: Window, fa: Format, fb: Format, opts: CastOptions) -> None:
        arr = self.data
        self._suspend += 1
        try:
            names = [f.name for f in self.format_objects]
            if list(self.a_menu.options) != names:
                self.a_menu.options = names
                self.b_menu.options = names
            self.a_menu.value = fa.name
            self.b_menu.value = fb.name
            self.view_menu.value = self.view
            self.log_box.value = self.log_scale
            self.unit_menu.value = self.error_unit
            self.rounding_menu.value = self.rounding
            self.overflow_menu.value = self.overflow
            self.subnormals_menu.value = self.subnormals
            if self.seed is not None:
                self.seed_input.value = self.seed
            self.scope_menu.value = self.summary_scope
            axes = list(range(arr.ndim))
            if arr.ndim >= 2:
                if list(self.row_axis_menu.options) != axes:
                    self.row_axis_menu.options = axes
                    self.col_axis_menu.options = axes
                self.row_axis_menu.value = self.row_axis
                self.col_axis_menu.value = self.col_axis
            self.row_axis_menu.disabled = self.col_axis_menu.disabled = arr.ndim < 2
            self.row_input.value = w.row0
            self.col_input.value = w.col0
            self.rows_input.value = self.rows
            self.cols_input.value = self.cols
            self._sync_sliders(w)
        finally:
            self._suspend -= 1
        pos = (f"{arr.dtype} {list(arr.shape)} · rows {w.row0}..{w.row0 + w.rows - 1}"
               if w.row_axis is not None else f"{arr.dtype} {list(arr.shape)} · ")
        pos += f" cols {w.col0}..{w.col0 + w.cols - 1}"
        if self.selected:
            pos += f" · selected {list(self.selected)}"
        self.position_html.value = f"<span style='font-size:12px'>{pos}</span>"
        for kind, html in self.nav_counts.items():
            html.value = self._count_text(kind, fa, opts)

    def _count_text(self, kind: str, fa: Format, opts: CastOptions) -> str:
        word = _KIND_WORDS[kind]
        if kind == "largest_error":
            key = (self._token, fa, opts, self.error_unit)
            unit = "ULP" if self.error_unit == "ulp" else "relative"
            if key not in self._largest_cache:
                return f"{word} ({fa.name}, {unit}): press ◀ ▶ to find"
            best, n = self._largest_cache[key]
            if best is None:
                return f"{word} ({fa.name}): none"
            return f"{word} {best:.3g} {unit} in {fa.name}: {n:,} cells"
        where = "" if kind in ("nan", "inf") else f" in {fa.name}"
        return f"{word}{where}: {self.count(kind):,}"

    def _sync_sliders(self, w: Window) -> None:
        arr = self.data
        axes = tuple(ax for ax in range(arr.ndim) if ax not in (self.row_axis, self.col_axis))
        if axes != self._slider_axes or len(self.sliders_box.children) != len(axes):
            sliders = []
            for ax in axes:
                s = W.IntSlider(min=0, max=int(arr.shape[ax]) - 1, description=f"axis {ax}",
                                continuous_update=False, layout=W.Layout(width="420px"))
                s.add_class("bitprism-axis-slider")
                s.observe(functools.partial(self._on_slider, ax), "value")
                sliders.append(s)
            self.sliders_box.children = sliders
            self._slider_axes = axes
        for ax, s in zip(axes, self.sliders_box.children):
            s.max = int(arr.shape[ax]) - 1
            s.value = w.fixed[ax]

    def _show_prism(self) -> None:
        """The selected cell in the embedded Prism: its exact value, same formats/options."""
        if not self.selected:
            return
        arr = self.data
        opts = self.options
        key = (self._token, self.selected, tuple(self.format_objects), opts)
        if key == self._prism_key:
            return
        from .prism import Prism

        raw = np.asarray(arr[self.selected])
        fmts = list(self.formats)
        try:
            if self.prism is None:
                self.prism = Prism("0", formats=fmts)
                self.prism_box.children = [self.prism]
            p = self.prism
            in_fmt = None if raw.dtype.kind in "iub" else get_format(raw.dtype)
            with p._bulk():
                p.formats = fmts
                p.rounding, p.overflow, p.subnormals, p.seed = (
                    opts.rounding, opts.overflow, opts.subnormals, opts.seed)
                p.via = ""
                if in_fmt is not None and in_fmt in p.format_objects:
                    bits = int(raw.reshape(1).view(np.dtype(f"uint{raw.dtype.itemsize * 8}"))[0])
                    p.set_source(in_fmt, bits)  # bit for bit: NaN payloads, signed zeros
                else:
                    p.source_format = ""
                    p.source_code = None
                    p.value = int(raw) if in_fmt is None else float(raw.astype(np.float64))
        except Exception as exc:
            self.message = message_for(exc)
            return
        self._prism_key = key

    # ----- callbacks ---------------------------------------------------------------------------
    @guarded
    def _on_control(self, name: str, change: Any) -> None:
        if self._suspend:
            return
        setattr(self, name, change["new"])

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
        rows, cols = self._grid_shape
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
        where = "" if kind in ("nan", "inf") else f" in {fa.name}"
        if hit is None:
            self._refresh_counts()
            self.message = f"no {_KIND_WORDS[kind]} cell{where} in the tensor"
            return None
        flat, wrapped = hit
        idx = tuple(int(i) for i in np.unravel_index(flat, arr.shape))
        self.selected = idx
        if wrapped:
            self.message = (f"{_KIND_WORDS[kind]}: wrapped around to the "
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
        w = self.window
        check_window_size(w.rows, w.cols)
        dt = w.raw.dtype
        width = dt.itemsize * 2
        bits = [f"0x{int(b):0{width}x}" for b in w.bits.reshape(-1).tolist()]
        origin = list(w.index_of(0, 0))
        return {
            "formats": [format_to_json(f) for f in self.format_objects],
            "options": options_to_json(self.rounding, self.overflow, self.subnormals, self.seed),
            "format_a": self._fmt("a").name,
            "format_b": self._fmt("b").name,
            "view": self.view,
            "log_scale": bool(self.log_scale),
            "error_unit": self.error_unit,
            "summary_scope": self.summary_scope,
            "shape": [int(s) for s in self.data.shape],
            "axes": [self.row_axis, self.col_axis],
            "fixed": [int(v) for v in w.fixed],
            "window": {"row": w.row0, "col": w.col0, "rows": w.rows, "cols": w.cols},
            "origin": [int(v) for v in origin],
            "selected": [int(v) for v in self.selected] if self.selected else None,
            "data": {"dtype": _dtype_name(dt), "rows": w.rows, "cols": w.cols, "bits": bits},
        }

    @classmethod
    def _from_case_state(cls, state: dict[str, Any]) -> "TensorPrism":
        keys = ("formats", "options", "format_a", "format_b", "view", "log_scale", "error_unit",
                "summary_scope", "shape", "axes", "fixed", "window", "origin", "selected", "data")
        want_object(state, "state", required=("formats", "data"), optional=keys)
        fl = want_list(state["formats"], "state.formats", MAX_FORMATS)
        if not fl:
            raise CaseFieldError("state.formats", "at least one format is needed")
        fmts = [format_from_json(v, f"state.formats[{i}]") for i, v in enumerate(fl)]
        opts = options_from_json(state.get("options", {}), "state.options")
        names = [f.name for f in fmts]
        ab = {}
        for k in ("format_a", "format_b"):
            if k in state:
                ab[k] = want_str(state[k], f"state.{k}", names)
        view = want_str(state.get("view", "cast"), "state.view", VIEWS)
        log_scale = want_bool(state.get("log_scale", False), "state.log_scale")
        unit = want_str(state.get("error_unit", "ulp"), "state.error_unit", ERROR_UNITS)
        scope = want_str(state.get("summary_scope", "tensor"), "state.summary_scope", _SCOPES)
        d = want_object(state["data"], "state.data", required=("dtype", "rows", "cols", "bits"))
        rows = want_int(d["rows"], "state.data.rows", 1, MAX_SIDE)
        cols = want_int(d["cols"], "state.data.cols", 1, MAX_SIDE)
        check_window_size(rows, cols, "state.data")
        dt = _dtype_from_name(want_str(d["dtype"], "state.data.dtype", max_chars=32))
        bl = want_list(d["bits"], "state.data.bits", rows * cols)
        if len(bl) != rows * cols:
            raise CaseFieldError("state.data.bits",
                                 f"expected {rows * cols} bit patterns, got {len(bl)}")
        width = dt.itemsize * 2
        pattern = re.compile(f"0x[0-9a-f]{{{width}}}")
        codes = []
        for i, text in enumerate(bl):
            t = want_str(text, f"state.data.bits[{i}]", max_chars=2 + width)
            if not pattern.fullmatch(t):
                raise CaseFieldError(f"state.data.bits[{i}]",
                                     f"expected {width} lower-case hex digits after 0x, got {t!r}")
            codes.append(int(t, 16))
        udt = np.dtype(f"uint{dt.itemsize * 8}")
        arr = np.array(codes, dtype=udt).view(dt).reshape(rows, cols)
        origin = None
        if state.get("origin") is not None:
            ol = want_list(state["origin"], "state.origin", 64)
            origin = tuple(want_int(v, f"state.origin[{i}]", 0) for i, v in enumerate(ol))
        selected: tuple[int, ...] = ()
        if state.get("selected") is not None:
            sl = want_list(state["selected"], "state.selected", 64)
            sel = [want_int(v, f"state.selected[{i}]", 0) for i, v in enumerate(sl)]
            if origin is not None and len(sel) == len(origin):
                axes = state.get("axes") or [None, len(sel) - 1]
                ra, ca = axes[0], axes[1]
                r = sel[ra] - origin[ra] if isinstance(ra, int) else 0
                c = sel[ca] - origin[ca] if isinstance(ca, int) else 0
                if 0 <= r < rows and 0 <= c < cols:
                    selected = (r, c)
        tp = cls(arr, formats=fmts, view=view, log_scale=log_scale, error_unit=unit,
                 summary_scope=scope, rows=rows, cols=cols, **opts, **ab)
        tp._origin = origin
        if selected:
            tp.selected = selected
        return tp


def _dtype_name(dt: np.dtype) -> str:
    return str(dt.name)


def _dtype_from_name(name: str) -> np.dtype:
    """A dtype from an allow-list: numpy bool/int/uint/float names and bitprism's formats."""
    if name in FORMATS and FORMATS[name].dtype is not None:
        return FORMATS[name].dtype  # type: ignore[return-value]
    allowed = {"bool", "int8", "int16", "int32", "int64", "uint8", "uint16", "uint32", "uint64",
               "float16", "float32", "float64"}
    if name not in allowed:
        raise CaseFieldError("state.data.dtype", f"unsupported dtype {name!r}")
    return np.dtype(name)
