"""Case files of a probe: the view of the first event a trace or watch found, saved as JSON (and
as an offline page), reopened by ``bitprism.open_case``.

A ``ProbeCase`` holds the operation (or module), its source location, facts about it, and small
windows (at most 8 x 8 of the 2-D view of each array, rows over every axis but the last) of its
output around the first element where the event is born and of its inputs (the same place when
the shapes agree, else around the input's first NaN or Inf, else the corner), values as exact
bit patterns. The file has the envelope every case has (``"bitprism_case"``, ``"kind":
"probe"``, ``"created"``, ``"versions"``, ``"note"``, ``"state"``; ``ui/case_envelope.py``
describes it, reads it back and hands the state to ``ProbeCase.from_case``, which checks every
field before building anything). Nothing read is ever executed.
"""

from __future__ import annotations

import datetime as _dt
import json
import os
import platform
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Sequence

import numpy as np

from .. import ml_types
from .._version import __version__
from ..display import Displayable, render
from ..errors import BitprismError
from ..formats import Format, get_format
from ..numerics.thresholds import cast_thresholds
from .case_reader import INT_DTYPES, MAX_NOTE
from .records import OpRecord, RecordCounts, WatchRecord
from .views import open_view

__all__ = [
    "CASE_KIND",
    "CASE_SCHEMA",
    "CaseWindow",
    "ProbeCase",
    "SharesCases",
    "first_position",
    "trace_case",
    "watch_case",
]

CASE_SCHEMA = 2  # the envelope schema of ui/case_envelope.py (a test holds the two equal)
CASE_KIND = "probe"
WINDOW_SIDE = 8


# ----- positions -----------------------------------------------------------------------------
def _mask(arr: np.ndarray, event: str, fmt: Format | None, options: Any) -> np.ndarray:
    x = np.asarray(arr)
    if x.dtype.kind not in "fV":
        return np.zeros(x.shape, bool)
    v = x.astype(np.float64)
    if event == "nan":
        return np.isnan(v)
    if event == "inf":
        return np.isinf(v)
    assert fmt is not None
    out = np.zeros(v.shape, bool)
    with np.errstate(invalid="ignore"):
        for negative, part in ((False, v >= 0), (True, v < 0)):
            t = cast_thresholds(fmt, options, negative)
            mag = np.abs(v)
            if event == "overflow":
                out |= part & np.isfinite(v) & (mag >= t.overflow_from)
            else:
                out |= part & (mag > 0) & (mag < t.nonzero_from)
    return out


def _event_of(rec: RecordCounts) -> tuple[str, str | None] | None:
    if rec.created_nan:
        return "nan", None
    if rec.created_inf:
        return "inf", None
    for c in rec.counts:
        if c.overflow_born:
            return "overflow", c.format
    for c in rec.counts:
        if c.underflow_born:
            return "underflow", c.format
    return None


def first_position(arr: np.ndarray, rec: RecordCounts | None, formats: Sequence[Format],
                   event: tuple[str, str | None] | None = None, options: Any = None
                   ) -> tuple[int, ...] | None:
    """The index of the first element (C order) of ``arr`` where the record's event is."""
    chosen = event if event is not None else (None if rec is None else _event_of(rec))
    if chosen is None or np.ndim(arr) == 0:
        return None
    from ..numerics.options import CastOptions

    fmt = get_format(chosen[1]) if chosen[1] is not None else None
    hits = np.flatnonzero(_mask(arr, chosen[0], fmt, options or CastOptions()))
    if hits.size == 0:
        return None
    return tuple(int(i) for i in np.unravel_index(int(hits[0]), np.shape(arr)))


# ----- windows -------------------------------------------------------------------------------
def _dtype_name(dtype: np.dtype) -> str:
    if dtype.kind in "biu":
        return dtype.name
    return get_format(dtype).name


def _codes(arr: np.ndarray) -> np.ndarray:
    if arr.dtype.kind in "biu":
        return arr.astype(np.int64) if arr.dtype != np.uint64 else arr
    return arr.view(np.dtype(f"u{arr.dtype.itemsize}"))


@dataclass(frozen=True)
class CaseWindow:
    """A window of one array: ``codes[i][j]`` is the bit pattern (float dtypes) or the
    integer (integer and bool dtypes) at row ``row + i``, column ``col + j`` of the array's
    2-D view; ``mark`` the window cell of the event, if any."""

    label: str
    dtype: str
    shape: tuple[int, ...]
    row: int
    col: int
    codes: tuple[tuple[int, ...], ...]
    mark: tuple[int, int] | None = None

    @property
    def floating(self) -> bool:
        return self.dtype not in INT_DTYPES

    def values(self) -> np.ndarray:
        """The window's values as float64 (exact for every format but float64 itself)."""
        arr = np.array(self.codes, dtype=np.uint64 if self.floating else np.float64)
        if not self.floating:
            return arr.reshape(len(self.codes), -1)
        from ..numerics.codes import decode

        return np.asarray(decode(arr, self.dtype), np.float64).reshape(len(self.codes), -1)

    def array(self) -> np.ndarray:
        """The window as an array of its own dtype (for a ``TensorPrism``)."""
        if not self.floating:
            return np.array(self.codes, dtype=self.dtype)
        fmt = get_format(self.dtype)
        if fmt.dtype is None:
            return self.values()
        raw = np.array(self.codes, dtype=np.dtype(f"u{fmt.dtype.itemsize}"))
        return raw.view(fmt.dtype)


def make_window(arr: np.ndarray, label: str, at: tuple[int, ...] | None) -> CaseWindow:
    """The window of ``arr`` around the element ``at`` (None: the corner)."""
    a = np.asarray(arr)
    if a.ndim == 0:
        view = a.reshape(1, 1)
    elif a.ndim == 1:
        view = a.reshape(1, -1)
    else:
        view = a.reshape(-1, a.shape[-1])
    nrows, ncols = view.shape
    r = c = 0
    if at is not None and a.ndim and a.size:
        flat = int(np.ravel_multi_index(at, a.shape))
        r, c = divmod(flat, max(ncols, 1))
    rows, cols = min(WINDOW_SIDE, nrows), min(WINDOW_SIDE, ncols)
    r0 = max(0, min(r - rows // 2, nrows - rows))
    c0 = max(0, min(c - cols // 2, ncols - cols))
    part = np.ascontiguousarray(view[r0:r0 + rows, c0:c0 + cols])
    codes = tuple(tuple(int(v) for v in row) for row in _codes(part).tolist())
    mark = (r - r0, c - c0) if at is not None and a.size else None
    return CaseWindow(label, _dtype_name(a.dtype), tuple(int(s) for s in a.shape), r0, c0,
                      codes, mark)


# ----- the case ------------------------------------------------------------------------------
def _versions() -> tuple[tuple[str, str], ...]:
    return (("bitprism", __version__), ("numpy", np.__version__),
            ("ml_dtypes", str(ml_types.module().__version__)),
            ("python", platform.python_version()))


def _now() -> str:
    return _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0).isoformat().replace(
        "+00:00", "Z")


@dataclass(frozen=True)
class ProbeCase(Displayable):
    """The first-event view of a trace or a watch (see the module docstring); ``save`` and
    ``export_html`` write it, ``open`` shows a window in a ``TensorPrism``."""

    source: str
    event: str
    format: str | None
    operation: str
    location: str
    facts: tuple[tuple[str, str], ...]
    formats: tuple[str, ...]
    windows: tuple[CaseWindow, ...]
    note: str = ""
    created: str = ""
    versions: tuple[tuple[str, str], ...] = ()

    @property
    def title(self) -> str:
        what = {"nan": "NaN born", "inf": "Inf born", "overflow": "overflow",
                "underflow": "underflow to zero"}[self.event]
        where = f" in {self.format}" if self.format else ""
        joint = ", " if self.source == "watch" else " at "
        return f"{what}{where}: {self.operation}" + (joint + self.location if self.location else "")

    def state(self) -> dict[str, Any]:
        return {
            "source": self.source, "event": self.event, "format": self.format,
            "operation": self.operation, "location": self.location,
            "facts": [list(f) for f in self.facts], "formats": list(self.formats),
            "windows": [
                {"label": w.label, "dtype": w.dtype, "shape": list(w.shape), "row": w.row,
                 "col": w.col, "mark": None if w.mark is None else list(w.mark),
                 "codes": [[_code_text(v, w) for v in row] for row in w.codes]}
                for w in self.windows],
        }

    def envelope(self) -> dict[str, Any]:
        """The case as a JSON-ready dict (the envelope of every case file)."""
        return {"bitprism_case": CASE_SCHEMA, "kind": CASE_KIND, "created": self.created,
                "versions": dict(self.versions), "note": self.note, "state": self.state()}

    def save(self, path: str | os.PathLike[str]) -> Path:
        """Write the case file (JSON)."""
        p = Path(path)
        p.write_text(json.dumps(self.envelope(), indent=1, ensure_ascii=False, allow_nan=False)
                     + "\n", encoding="utf-8")
        return p

    def export_html(self, path: str | os.PathLike[str]) -> Path:
        """Write one self-contained page: the view, the note, the facts, the case inside."""
        p = Path(path)
        p.write_text(str(render("html", self, page=True)), encoding="utf-8")
        return p

    def open(self, label: str = "output") -> Any:
        """A ``TensorPrism`` of one window (``"output"``, ``"input 0"``, ...)."""
        for w in self.windows:
            if w.label == label:
                return open_view(w.array(), [get_format(f) for f in self.formats], None)
        raise BitprismError(f"label must be one of {', '.join(w.label for w in self.windows)}; "
                            f"got {label!r}")

    @classmethod
    def from_case(cls, case: dict[str, Any]) -> ProbeCase:
        """A case read back (the envelope already checked by ``ui/case_envelope``); every
        field of the state is checked here, naming it."""
        from .case_reader import read_state

        state = read_state(case.get("state"))
        return cls(note=str(case.get("note", "")), created=str(case.get("created", "")),
                   versions=tuple((str(k), str(v)) for k, v in
                                  dict(case.get("versions", {})).items()), **state)


def _code_text(value: int, w: CaseWindow) -> Any:
    if not w.floating:
        return int(value)
    fmt = get_format(w.dtype)
    return f"0x{int(value):0{(fmt.container_bits + 3) // 4}x}"


def _check_note(note: Any) -> str:
    if not isinstance(note, str) or len(note) > MAX_NOTE:
        raise BitprismError(f"note must be text of at most {MAX_NOTE} characters; got "
                            f"{type(note).__name__}")
    return note


def _windows(output: np.ndarray, inputs: Sequence[np.ndarray], at: tuple[int, ...] | None
             ) -> tuple[CaseWindow, ...]:
    out = [make_window(output, "output", at)]
    for i, arr in enumerate(inputs):
        a = np.asarray(arr)
        here = at if a.shape == np.shape(output) else None
        if here is None and a.dtype.kind in "fV" and a.size:
            bad = np.flatnonzero(~np.isfinite(a.astype(np.float64)))
            if bad.size:
                here = tuple(int(j) for j in np.unravel_index(int(bad[0]), a.shape))
        out.append(make_window(a, f"input {i}", here))
    return tuple(out)


def _pick(found: Any, event: str | None, fmt: Any, first: Any, what: str) -> tuple[str, Any, Any]:
    if event is None:
        if found is None:
            raise BitprismError(f"nothing to save: no NaN, Inf, overflow or underflow was born "
                                f"in this {what}")
        return found  # type: ignore[no-any-return]
    rec = first(event, fmt)
    if rec is None:
        where = f" in {get_format(fmt).name}" if fmt is not None else ""
        raise BitprismError(f"no {event}{where} was born in this {what}; nothing to save")
    if event == "nonfinite":
        event = "nan" if rec.created_nan else "inf"
    name = get_format(fmt).name if fmt is not None else next(
        (c.format for c in rec.counts if (c.overflow_born if event == "overflow"
                                          else c.underflow_born)), None)
    return event, (name if event in ("overflow", "underflow") else None), rec


def _counts_facts(rec: RecordCounts) -> list[tuple[str, str]]:
    facts = [("NaN / Inf in the output", f"{rec.nan} / {rec.inf} "
              f"({rec.created_nan} / {rec.created_inf} born here)"),
             ("largest finite magnitude", f"{rec.amax:.6g}")]
    for c in rec.counts:
        facts.append((c.format, f"overflow {c.overflow}, underflow {c.underflow}, "
                      f"subnormal {c.subnormal}"))
    return facts


class SharesCases:
    """``save_case`` and ``export_html`` of a probe result (``Trace``, ``Watch``) whose
    ``case()`` builds its first-event ``ProbeCase``."""

    def case(self, event: str | None = None, fmt: Any = None, note: str = "") -> ProbeCase:
        raise NotImplementedError

    def save_case(self, path: str | os.PathLike[str], event: str | None = None, fmt: Any = None,
                  note: str = "") -> Path:
        """Write the first-event view as a case file (JSON); ``bitprism.open_case`` reads it."""
        return self.case(event, fmt, note).save(path)

    def export_html(self, path: str | os.PathLike[str], event: str | None = None,
                    fmt: Any = None, note: str = "") -> Path:
        """Write the first-event view as one self-contained HTML page (the case inside)."""
        return self.case(event, fmt, note).export_html(path)


def _event_windows(probe: Any, rec: OpRecord | WatchRecord, event: str, fmt: str | None
                   ) -> tuple[CaseWindow, ...]:
    """The windows of a record's kept arrays around its first ``event`` element (none when
    the arrays were not kept)."""
    cap = probe.captures.kept.get(rec.index)
    if cap is None:
        return ()
    at = first_position(cap.output, rec, probe.formats, (event, fmt), probe.options)
    return _windows(cap.output, cap.inputs, at)


def trace_case(trace: Any, event: str | None, fmt: Any, note: str) -> ProbeCase:
    """The case of a trace's first event (``event`` None: the earliest one)."""
    ev, name, rec = _pick(trace.first_bad(), event, fmt, trace.first, "trace")
    assert isinstance(rec, OpRecord)
    windows = _event_windows(trace, rec, ev, name)
    facts = [("traced function", f"{trace.function} ({trace.backend})"),
             ("operation", f"#{rec.index} {rec.name}"),
             ("inputs", ", ".join(f"{s} {d}" for s, d in zip(rec.input_shapes, rec.input_dtypes))
              or "none"),
             ("output", ", ".join(f"{s} {d}" for s, d in zip(rec.output_shapes,
                                                               rec.output_dtypes)))]
    if trace.emulate is not None:
        facts.append(("emulated", f"{trace.emulate.name}, accumulating in "
                      f"{trace.accumulate.name} every {trace.chunk} terms"))
    facts += _counts_facts(rec)
    if not windows:
        facts.append(("arrays", trace.captures.why_missing(rec.index, "this operation")))
    return ProbeCase("trace", ev, name, rec.name,
                     f"{rec.location} in {rec.function}", tuple(facts),
                     tuple(f.name for f in trace.formats), windows, _check_note(note), _now(),
                     _versions())


def watch_case(w: Any, event: str | None, fmt: Any, note: str) -> ProbeCase:
    """The case of a watch's first event (``event`` None: the earliest one)."""
    ev, name, rec = _pick(w.first_bad(), event, fmt, w.first, "watch")
    assert isinstance(rec, WatchRecord)
    windows = _event_windows(w, rec, ev, name)
    facts = [("module", f"{rec.module or '(the watched module)'} ({rec.module_type})"),
             ("tensor", f"{rec.kind}, call {rec.call}, {rec.shape} {rec.dtype}")]
    facts += _counts_facts(rec)
    if not windows:
        facts.append(("arrays", w.captures.why_missing(rec.index, "this tensor")))
    operation = f"{rec.module or '(the watched module)'} ({rec.module_type})"
    return ProbeCase("watch", ev, name, operation, f"{rec.kind}, call {rec.call}", tuple(facts),
                     tuple(f.name for f in w.formats), windows, _check_note(note), _now(),
                     _versions())
