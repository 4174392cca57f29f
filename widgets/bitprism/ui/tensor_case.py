"""A ``TensorPrism``'s side of the case-file protocol (see ``ui/case_file.py``).

State stored (schema 1)::

    {"formats": [...], "options": {...}, "format_a": ..., "format_b": ..., "view": ...,
     "log_scale": false, "error_unit": "ulp", "summary_scope": "tensor",
     "shape": [...], "axes": [row_axis, col_axis], "fixed": [...],
     "window": {"row": ..., "col": ..., "rows": ..., "cols": ...},
     "origin": [...],                       # tensor index of the window's first cell
     "selected": [...] | null,
     "data": {"dtype": "float32", "rows": r, "cols": c, "bits": ["0x3dcccccd", ...]}}

Only the window is stored (at most ``MAX_WINDOW_SIDE`` x ``MAX_WINDOW_SIDE`` cells), as exact
bit patterns of its dtype; reopening shows that window as a tensor of its own, with a title
saying where it came from.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..formats import FORMATS, Format
from ..render.grid_html import VIEWS
from ..tensors.window import ERROR_UNITS, MAX_SIDE
from .case_codecs import (
    MAX_FORMATS,
    CaseFieldError,
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

__all__ = [
    "SUMMARY_SCOPES",
    "TensorCase",
    "dtype_from_name",
    "dtype_name",
    "read_tensor_case",
    "tensor_case_state",
]

SUMMARY_SCOPES = ("tensor", "slice")  # what the summary scans: the whole tensor or the 2-D slice

_KEYS = ("formats", "options", "format_a", "format_b", "view", "log_scale", "error_unit",
         "summary_scope", "shape", "axes", "fixed", "window", "origin", "selected", "data")


@dataclass(frozen=True)
class TensorCase:
    """A checked case state: what to build the widget from."""

    data: np.ndarray  # the saved window, as a 2-D tensor of its own
    formats: list[Format]
    settings: dict[str, Any]  # keyword arguments of TensorPrism, in the order they are set
    origin: tuple[int, ...] | None  # where the window was in the original tensor
    selected: tuple[int, ...]  # the selected cell in the saved window; () when none


def tensor_case_state(tp: Any, format_a: Format, format_b: Format) -> dict[str, Any]:
    """The JSON-ready state of ``tp``'s current view (formats A and B as resolved)."""
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
        "log_scale": bool(tp.log_scale),
        "error_unit": tp.error_unit,
        "summary_scope": tp.summary_scope,
        "shape": [int(s) for s in tp.data.shape],
        "axes": [tp.row_axis, tp.col_axis],
        "fixed": [int(v) for v in w.fixed],
        "window": {"row": w.row0, "col": w.col0, "rows": w.rows, "cols": w.cols},
        "origin": [int(v) for v in origin],
        "selected": [int(v) for v in tp.selected] if tp.selected else None,
        "data": {"dtype": dtype_name(dt), "rows": w.rows, "cols": w.cols, "bits": bits},
    }


def read_tensor_case(state: Any) -> TensorCase:
    """Every field checked before anything is built (``CaseFieldError`` names a bad one)."""
    want_object(state, "state", required=("formats", "data"), optional=_KEYS)
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
    scope = want_str(state.get("summary_scope", "tensor"), "state.summary_scope", SUMMARY_SCOPES)
    d = want_object(state["data"], "state.data", required=("dtype", "rows", "cols", "bits"))
    rows = want_int(d["rows"], "state.data.rows", 1, MAX_SIDE)
    cols = want_int(d["cols"], "state.data.cols", 1, MAX_SIDE)
    check_window_size(rows, cols, "state.data")
    arr = _window_data(d, rows, cols)
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
    kwargs = {"view": view, "log_scale": log_scale, "error_unit": unit, "summary_scope": scope,
              "rows": rows, "cols": cols, **opts, **ab}
    return TensorCase(arr, fmts, kwargs, origin, selected)


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
