"""A ``TensorPrism``'s side of the case-file protocol (see ``ui/case_file.py``).

State stored (schema 2)::

    {"formats": [...], "options": {...}, "format_a": ..., "format_b": ..., "view": ...,
     "value_scale": "auto", "error_unit": "ulp", "summary_scope": "tensor",
     "shape": [...], "axes": [row_axis, col_axis], "fixed": [...],
     "window": {"row": ..., "col": ..., "rows": ..., "cols": ...},
     "origin": [...],                       # tensor index of the window's first cell
     "selected": [...] | null,              # a tensor index
     "data": {"dtype": "float32", "rows": r, "cols": c, "bits": ["0x3dcccccd", ...]},
     "summary": {...} | null,               # the summary the author saw (summary_record)
     "counts": {...} | null}                # the find buttons' counts the author saw

Only the window is stored (at most ``MAX_WINDOW_SIDE`` x ``MAX_WINDOW_SIDE`` cells), as exact
bit patterns of its dtype. Reopening places it where it was in the tensor (``Placed``): the
indices, the shape, the selection and the stochastic draws are the original tensor's, and the
summary and counts are the ones recorded, not figures of the window alone. Schema 1 wrote
``log_scale`` (a bool) where schema 2 writes ``value_scale``; ``case_envelope`` migrates.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..formats import FORMATS, Format
from ..render.grid_html import VALUE_SCALES, VIEWS
from ..tensors.scan import ScanResult
from ..tensors.window import ERROR_UNITS, MAX_SIDE, Placed
from .case_codecs import (
    CaseFieldError,
    check_window_size,
    format_to_json,
    formats_from_json,
    options_from_json,
    options_to_json,
    want_int,
    want_list,
    want_object,
    want_str,
)
from .summary_record import (
    RecordedCounts,
    counts_from_json,
    counts_to_json,
    summary_from_json,
    summary_to_json,
)

__all__ = [
    "SUMMARY_SCOPES",
    "TensorCase",
    "dtype_from_name",
    "dtype_name",
    "read_tensor_case",
    "tensor_case_state",
]

SUMMARY_SCOPES = ("tensor", "slice")  # what the summary scans: the whole tensor or the 2-D slice

_KEYS = ("formats", "options", "format_a", "format_b", "view", "value_scale", "error_unit",
         "summary_scope", "shape", "axes", "fixed", "window", "origin", "selected", "data",
         "summary", "counts")


@dataclass(frozen=True)
class TensorCase:
    """A checked case state: what to build the widget from."""

    data: Any  # the saved window: a Placed block of the original tensor, or a 2-D array
    formats: list[Format]
    settings: dict[str, Any]  # keyword arguments of TensorPrism, in the order they are set
    origin: tuple[int, ...] | None  # where the window was in the original tensor
    selected: tuple[int, ...]  # the selected tensor index, () when none or not saved
    summary: tuple[ScanResult, str] | None  # the summary the author saw, and its scope
    counts: RecordedCounts | None  # the find buttons' counts the author saw


def tensor_case_state(tp: Any, format_a: Format, format_b: Format,
                      summary: tuple[ScanResult, str] | None,
                      counts: RecordedCounts | None) -> dict[str, Any]:
    """The JSON-ready state of ``tp``'s current view (formats A and B as resolved), with the
    summary and counts it shows."""
    w = tp.window
    check_window_size(w.rows, w.cols)
    dt = w.raw.dtype
    width = dt.itemsize * 2
    bits = [f"0x{int(b):0{width}x}" for b in w.bits.reshape(-1).tolist()]
    origin = list(w.index_of(0, 0))
    return {
        "formats": [format_to_json(f) for f in tp.format_objects],
        "options": options_to_json(tp.rounding, tp.overflow, tp.subnormals, tp.seed),
        "format_a": format_a.name,
        "format_b": format_b.name,
        "view": tp.view,
        "value_scale": tp.value_scale,
        "error_unit": tp.error_unit,
        "summary_scope": tp.summary_scope,
        "shape": [int(s) for s in w.shape],
        "axes": [tp.row_axis, tp.col_axis],
        "fixed": [int(v) for v in w.fixed],
        "window": {"row": w.row0, "col": w.col0, "rows": w.rows, "cols": w.cols},
        "origin": [int(v) for v in origin],
        "selected": [int(v) for v in tp.selected] if tp.selected else None,
        "data": {"dtype": dtype_name(dt), "rows": w.rows, "cols": w.cols, "bits": bits},
        "summary": None if summary is None else summary_to_json(*summary),
        "counts": None if counts is None else counts_to_json(counts),
    }


def read_tensor_case(state: Any) -> TensorCase:
    """Every field checked before anything is built (``CaseFieldError`` names a bad one)."""
    want_object(state, "state", required=("formats", "data"), optional=_KEYS)
    fmts = formats_from_json(state["formats"], "TensorPrism")
    opts = options_from_json(state.get("options", {}), "state.options")
    names = [f.name for f in fmts]
    ab = {}
    for k in ("format_a", "format_b"):
        if k in state:
            ab[k] = want_str(state[k], f"state.{k}", names)
    view = want_str(state.get("view", "cast"), "state.view", VIEWS)
    value_scale = want_str(state.get("value_scale", "auto"), "state.value_scale", VALUE_SCALES)
    unit = want_str(state.get("error_unit", "ulp"), "state.error_unit", ERROR_UNITS)
    scope = want_str(state.get("summary_scope", "tensor"), "state.summary_scope", SUMMARY_SCOPES)
    d = want_object(state["data"], "state.data", required=("dtype", "rows", "cols", "bits"))
    rows = want_int(d["rows"], "state.data.rows", 1, MAX_SIDE)
    cols = want_int(d["cols"], "state.data.cols", 1, MAX_SIDE)
    check_window_size(rows, cols, "state.data")
    arr = _window_data(d, rows, cols)
    place = _read_place(state, rows, cols)
    summary = None
    if state.get("summary") is not None:
        summary = summary_from_json(state["summary"])
    counts = None
    if state.get("counts") is not None:
        counts = counts_from_json(state["counts"], names, ERROR_UNITS)
    kwargs: dict[str, Any] = {"view": view, "value_scale": value_scale, "error_unit": unit,
                              "summary_scope": scope, **opts, **ab}
    data, more, selected = place.placed(arr)
    kwargs.update(more)
    return TensorCase(data, fmts, kwargs, place.origin, selected, summary, counts)


@dataclass(frozen=True)
class _Place:
    """Where the saved window sat in the original tensor (each part optional in a file)."""

    shape: tuple[int, ...] | None
    axes: tuple[int | None, int] | None
    origin: tuple[int, ...] | None
    selected: tuple[int, ...] | None
    rows: int
    cols: int

    def placed(self, window: np.ndarray) -> tuple[Any, dict[str, Any], tuple[int, ...]]:
        """The saved window placed where it was in the tensor (when the case says where),
        the TensorPrism settings that show it there, and the selection (a tensor index, ``()``
        when none or outside the saved window). A case that does not say where (a hand-made
        one: shape, axes and origin are optional) shows the window as a 2-D tensor."""
        shape, axes, origin = self.shape, self.axes, self.origin
        if shape is None or axes is None or origin is None:
            sel = self.selected if self.selected is not None and len(self.selected) == 2 else None
            inside = sel is not None and sel[0] < self.rows and sel[1] < self.cols
            return window, {"rows": self.rows, "cols": self.cols}, (sel if inside else ()) or ()
        ra, ca = axes
        nd = len(shape)
        block: np.ndarray
        if ra is None and self.rows != 1:
            raise CaseFieldError("state.data.rows", "1-D data is saved as one row")
        sizes = [1] * nd
        if ra is not None:
            sizes[ra] = self.rows
        sizes[ca] = self.cols
        for ax in range(nd):
            if origin[ax] + sizes[ax] > shape[ax]:
                raise CaseFieldError("state.origin", f"a window of {self.rows} x {self.cols} "
                                     f"from {list(origin)} passes the end of axis {ax} "
                                     f"({shape[ax]})")
        if ra is None:
            block = window.reshape(self.cols)
        else:
            rest = [1] * (nd - 2)
            block = np.moveaxis(window.reshape(self.rows, self.cols, *rest), [0, 1], [ra, ca])
        chosen = self.selected
        inside = chosen is not None and all(
            origin[ax] <= chosen[ax] < origin[ax] + sizes[ax] for ax in range(nd))
        settings: dict[str, Any] = {"row_axis": ra, "col_axis": ca, "fixed": origin,
                                    "rows": self.rows, "cols": self.cols}
        if ra is not None:
            settings["row_offset"] = origin[ra]
        settings["col_offset"] = origin[ca]
        return Placed(np.ascontiguousarray(block), origin, shape), settings, (
            chosen if inside and chosen is not None else ())


_MAX_NDIM = 64  # numpy's limit on the number of axes
_MAX_DIM = (1 << 63) - 1  # an axis length numpy can index


def _read_index(value: Any, where: str, shape: tuple[int, ...] | None) -> tuple[int, ...]:
    """A tensor index: one integer per axis of ``shape`` (when known), each within it."""
    items = want_list(value, where, _MAX_NDIM)
    if shape is not None and len(items) != len(shape):
        raise CaseFieldError(where, f"one index per axis of {list(shape)} expected, "
                                    f"got {len(items)}")
    if not items:
        raise CaseFieldError(where, "an index needs at least one axis")
    return tuple(want_int(v, f"{where}[{i}]", 0, _MAX_DIM if shape is None else shape[i] - 1)
                 for i, v in enumerate(items))


def _read_axes(value: Any, ndim: int | None) -> tuple[int | None, int]:
    """``[row_axis, col_axis]``: distinct axes; the row axis is null for 1-D data only."""
    items = want_list(value, "state.axes", 2)
    if len(items) != 2:
        raise CaseFieldError("state.axes", f"[row axis, column axis] expected, got {len(items)} "
                                           "entries")
    top = (ndim if ndim is not None else _MAX_NDIM) - 1
    col = want_int(items[1], "state.axes[1]", 0, top)
    if items[0] is None:
        if ndim not in (None, 1):
            raise CaseFieldError("state.axes[0]", f"a {ndim}-D tensor needs a row axis")
        return None, col
    row = want_int(items[0], "state.axes[0]", 0, top)
    if ndim == 1:
        raise CaseFieldError("state.axes[0]", "1-D data has no row axis (null)")
    if row == col:
        raise CaseFieldError("state.axes", f"row and column axes must differ; both are {row}")
    return row, col


def _read_place(state: dict[str, Any], rows: int, cols: int) -> _Place:
    """``shape``, ``axes``, ``fixed``, ``window``, ``origin`` and ``selected``: each checked,
    and against each other as the widget writes them (origin = fixed with the window's first
    row and column on the shown axes)."""
    shape = None
    if "shape" in state:
        items = want_list(state["shape"], "state.shape", _MAX_NDIM)
        if not items:
            raise CaseFieldError("state.shape", "a tensor has at least one axis")
        shape = tuple(want_int(v, f"state.shape[{i}]", 1, _MAX_DIM) for i, v in enumerate(items))
    ndim = None if shape is None else len(shape)
    axes = _read_axes(state["axes"], ndim) if "axes" in state else None
    fixed = _read_index(state["fixed"], "state.fixed", shape) if "fixed" in state else None
    origin = None
    if state.get("origin") is not None:
        origin = _read_index(state["origin"], "state.origin", shape)
    selected = None
    if state.get("selected") is not None:
        selected = _read_index(state["selected"], "state.selected", shape)
    top = max(a for a in axes if a is not None) if axes is not None else -1
    for name, index in (("fixed", fixed), ("origin", origin), ("selected", selected)):
        if index is not None and top >= len(index):
            raise CaseFieldError(f"state.{name}", f"one index per axis expected; state.axes "
                                                  f"names axis {top}")
    if origin is not None and selected is not None and len(origin) != len(selected):
        raise CaseFieldError("state.selected", f"one index per axis expected ({len(origin)}), "
                                               f"got {len(selected)}")
    if "window" in state:
        corner = _check_window(state["window"], rows, cols, shape, axes, fixed, origin)
        if origin is None and fixed is not None and axes is not None:
            origin = _corner(fixed, axes, *corner)
    return _Place(shape, axes, origin, selected, rows, cols)


def _corner(fixed: tuple[int, ...], axes: tuple[int | None, int], row: int,
            col: int) -> tuple[int, ...]:
    """The tensor index of a window's first cell: ``fixed`` with its first row and column."""
    out = list(fixed)
    if axes[0] is not None:
        out[axes[0]] = row
    out[axes[1]] = col
    return tuple(out)


def _check_window(value: Any, rows: int, cols: int, shape: tuple[int, ...] | None,
                  axes: tuple[int | None, int] | None, fixed: tuple[int, ...] | None,
                  origin: tuple[int, ...] | None) -> tuple[int, int]:
    """``state.window``: the first row and column shown and the saved window's size; returns
    the first row and column."""
    w = want_object(value, "state.window", required=("row", "col", "rows", "cols"))
    row = want_int(w["row"], "state.window.row", 0, _MAX_DIM)
    col = want_int(w["col"], "state.window.col", 0, _MAX_DIM)
    for key, saved in (("rows", rows), ("cols", cols)):
        if want_int(w[key], f"state.window.{key}", 1, MAX_SIDE) != saved:
            raise CaseFieldError(f"state.window.{key}", f"{w[key]} differs from state.data."
                                                        f"{key} ({saved})")
    if axes is None:
        return row, col
    ra, ca = axes
    if ra is None and (row != 0 or rows != 1):
        raise CaseFieldError("state.window", "1-D data is shown as one row from row 0")
    if shape is not None:
        for where, ax, start, size in (("row", ra, row, rows), ("col", ca, col, cols)):
            if ax is not None and start + size > shape[ax]:
                raise CaseFieldError(f"state.window.{where}", f"{start} + {size} cells pass the "
                                                              f"end of axis {ax} ({shape[ax]})")
    if fixed is not None and origin is not None:
        want = list(_corner(fixed, axes, row, col))
        if list(origin) != want:
            raise CaseFieldError("state.origin", f"{list(origin)} is not where state.fixed and "
                                                 f"state.window put the window ({want})")
    return row, col


def _window_data(d: dict[str, Any], rows: int, cols: int) -> np.ndarray:
    """The saved window's cells from their bit patterns (``state.data``)."""
    dt = dtype_from_name(want_str(d["dtype"], "state.data.dtype", max_chars=32))
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
    return np.array(codes, dtype=udt).view(dt).reshape(rows, cols)


def dtype_name(dt: np.dtype) -> str:
    """The name a case stores for a window's dtype (read back by ``dtype_from_name``)."""
    return str(dt.name)


def dtype_from_name(name: str) -> np.dtype:
    """A dtype from an allow-list: numpy bool/int/uint/float names and bitprism's formats."""
    if name in FORMATS and FORMATS[name].dtype is not None:
        return FORMATS[name].dtype  # type: ignore[return-value]
    allowed = {"bool", "int8", "int16", "int32", "int64", "uint8", "uint16", "uint32", "uint64",
               "float16", "float32", "float64"}
    if name not in allowed:
        raise CaseFieldError("state.data.dtype", f"unsupported dtype {name!r}")
    return np.dtype(name)
