"""Plain text of the probes: a trace's timeline, a watch's module table, a probe case.

The timeline has one row per operation (long traces keep the first rows, the last rows and the
rows around each first event, and say how many are left out between), the first events listed
above it and marked on their rows. Per format a cell shows what the output would suffer there,
in the outcome marks of ``render.vocabulary`` (``↑3``: three values overflow; ``→0 5``: five
underflow to zero). ``probes_html`` reuses these rows.
"""

from __future__ import annotations

import math
from typing import Any, Sequence

from .scan_text import fmt_float
from .vocabulary import OUTCOMES

__all__ = [
    "EVENT_WORDS",
    "MAX_ROWS",
    "case_lines",
    "firsts_lines",
    "format_cell",
    "probe_case_text",
    "timeline_rows",
    "trace_header",
    "trace_text",
    "watch_header",
    "watch_rows",
    "watch_text",
    "window_value",
]

MAX_ROWS = 40  # a longer timeline is cut down to the rows around its first events
_CONTEXT = 2
EVENT_WORDS = {"nan": "NaN born", "inf": "Inf born", "overflow": "overflow",
               "underflow": "underflow to zero"}
_DOT = "·"


def format_cell(c: Any) -> str:
    """What one output suffers in one format: ``↑3 →0 5``, or a dot for nothing."""
    parts = []
    if c.overflow:
        parts.append(f"{OUTCOMES['overflow'].mark}{c.overflow:,}")
    if c.underflow:
        parts.append(f"{OUTCOMES['underflow'].mark} {c.underflow:,}")
    return " ".join(parts) or _DOT


def _event_label(event: str, fmt: str | None) -> str:
    return f"first {EVENT_WORDS[event]}" + (f" in {fmt}" if fmt else "")


def _marks(index: int, firsts: Sequence[tuple[str, str | None, Any]]) -> list[tuple[str, str | None]]:
    return [(e, f) for e, f, r in firsts if r.index == index]


def trace_header(t: Any) -> list[str]:
    """The lines above a trace's timeline."""
    fmts = ", ".join(f.name for f in t.formats)
    lines = [f"trace of {t.function} ({t.backend}): {len(t.ops)} operation"
             f"{'' if len(t.ops) == 1 else 's'}; formats {fmts}"]
    if t.emulate is not None:
        every = "once at the end" if t.chunk is None else f"every {t.chunk} terms"
        lines.append(f"emulated in {t.emulate.name} ({t.options.rounding}, overflow "
                     f"{t.options.overflow}, subnormals {t.options.subnormals}); sums accumulate "
                     f"in {t.accumulate.name}, rounded {every}")
    if t.shadow:
        lines.append("a float64 shadow ran beside it; 'shadow' is the largest relative error "
                     "of each output against it")
    return lines


def firsts_lines(firsts: Sequence[tuple[str, str | None, Any]], what: str) -> list[str]:
    """``first NaN born: #2 divide at f.py:8 in softmax`` for each event found."""
    if not firsts:
        return [f"no NaN, Inf, overflow or underflow is born in this {what}"]
    return [f"{_event_label(e, f)}: {r.label}" for e, f, r in firsts]


def _kept(count: int, firsts: Sequence[tuple[str, str | None, Any]]) -> list[int | None]:
    """Row indices shown (None: a gap), all of them when there are few."""
    if count <= MAX_ROWS:
        return list(range(count))
    keep = set(range(min(5, count))) | set(range(max(count - 3, 0), count))
    for _, _, r in firsts:
        keep |= set(range(max(r.index - _CONTEXT, 0), min(r.index + _CONTEXT + 1, count)))
    out: list[int | None] = []
    last = -1
    for i in sorted(keep):
        if i != last + 1:
            out.append(None)
        out.append(i)
        last = i
    if last != count - 1:
        out.append(None)
    return out


def _shape(shapes: Sequence[tuple[int, ...]], dtypes: Sequence[str]) -> str:
    if not shapes:
        return "-"
    text = f"{shapes[0]} {dtypes[0]}"
    return text + (f" +{len(shapes) - 1}" if len(shapes) > 1 else "")


def timeline_rows(t: Any) -> tuple[list[str], list[list[str] | int]]:
    """(column names, rows): a row is a list of cells, or the count of left-out operations."""
    firsts = t.first_events()
    cols = ["#", "operation", "location", "output", "NaN", "Inf", "amax"]
    cols += [f.name for f in t.formats]
    if t.shadow:
        cols.append("shadow")
    cols.append("first")
    rows: list[list[str] | int] = []
    kept = _kept(len(t.ops), firsts)
    for k, i in enumerate(kept):
        if i is None:
            nxt = next((j for j in kept[k + 1:] if j is not None), len(t.ops))
            prev = next((j for j in reversed(kept[:k]) if j is not None), -1)
            rows.append(nxt - prev - 1)
            continue
        r = t.ops[i]
        row = [str(r.index), r.name + (" (in place)" if r.in_place else ""), r.location,
               _shape(r.output_shapes, r.output_dtypes), _count(r.nan, r.created_nan),
               _count(r.inf, r.created_inf), fmt_float(r.amax)]
        row += [format_cell(c) for c in r.counts]
        if t.shadow:
            row.append(_DOT if r.shadow_max_rel is None else fmt_float(r.shadow_max_rel, 2))
        row.append(", ".join(_event_label(e, f) for e, f in _marks(r.index, firsts)))
        rows.append(row)
    return cols, rows


def _count(n: int, born: int) -> str:
    if not n:
        return _DOT
    return f"{n:,}" + (f" ({born:,} born)" if born and born != n else " born" if born else "")


def _table(cols: Sequence[str], rows: Sequence[list[str] | int], what: str) -> list[str]:
    widths = [len(c) for c in cols]
    for row in rows:
        if isinstance(row, list):
            widths = [max(w, len(c)) for w, c in zip(widths, row)]
    out = ["  ".join(c.ljust(w) for c, w in zip(cols, widths)).rstrip()]
    for row in rows:
        if isinstance(row, int):
            out.append(f"... {row} {what}{'' if row == 1 else 's'} left out ...")
        else:
            out.append("  ".join(c.ljust(w) for c, w in zip(row, widths)).rstrip())
    return out


def trace_text(t: Any) -> str:
    """A trace as text: header, first events, timeline."""
    lines = trace_header(t) + firsts_lines(t.first_events(), "trace")
    if t.ops:
        cols, rows = timeline_rows(t)
        lines += [""] + _table(cols, rows, "operation")
    return "\n".join(lines)


def watch_header(w: Any) -> list[str]:
    fmts = ", ".join(f.name for f in w.formats)
    state = "on" if w.active else "off"
    name = type(w.module).__name__
    return [f"watch of {name} ({state}): {len(w.records)} records; formats {fmts}"]


def _watch_firsts(w: Any) -> list[tuple[str, str | None, Any]]:
    out: list[tuple[str, str | None, Any]] = []
    for event in ("nan", "inf"):
        rec = w.first(event)
        if rec is not None:
            out.append((event, None, rec))
    for event in ("overflow", "underflow"):
        for f in w.formats:
            rec = w.first(event, f.name)
            if rec is not None:
                out.append((event, f.name, rec))
    return out


def watch_rows(w: Any) -> tuple[list[str], list[list[str] | int]]:
    """(column names, rows) of a watch's table: one row per module and kind."""
    firsts = _watch_firsts(w)
    cols = ["module", "type", "kind", "calls", "NaN", "Inf", "amax"]
    cols += [f.name for f in w.formats] + ["first"]
    rows: list[list[str] | int] = []
    for m in w.table():
        marks = [_event_label(e, f) for e, f, r in firsts if r.module == m.module and
                 r.kind == m.kind]
        row = [m.module or "(watched module)", m.module_type, m.kind, str(m.calls),
               _DOT if not m.nan else f"{m.nan:,}", _DOT if not m.inf else f"{m.inf:,}",
               fmt_float(m.amax)]
        row += [format_cell(c) for c in m.counts]
        row.append(", ".join(marks))
        rows.append(row)
    return cols, rows


def watch_text(w: Any) -> str:
    """A watch as text: header, first events, one row per module and kind."""
    lines = watch_header(w) + firsts_lines(_watch_firsts(w), "watch")
    if w.records:
        cols, rows = watch_rows(w)
        lines += [""] + _table(cols, rows, "row")
    return "\n".join(lines)


def window_value(v: float) -> str:
    """One value of a case window: six significant digits, NaN, Inf, -Inf."""
    if math.isnan(v):
        return "NaN"
    if math.isinf(v):
        return "Inf" if v > 0 else "-Inf"
    return f"{v:.6g}"


def case_lines(case: Any) -> list[str]:
    """A probe case's facts and note as lines (the windows follow in ``probe_case_text``)."""
    lines = [f"bitprism probe case: {case.title}"]
    lines += [f"  {k}: {v}" for k, v in case.facts]
    if case.note.strip():
        lines += ["note:"] + [f"  {line}" for line in case.note.splitlines()]
    return lines


def probe_case_text(case: Any) -> str:
    """A probe case as text: title, facts, note, and each window as a grid (the event's cell
    starred)."""
    lines = case_lines(case)
    for w in case.windows:
        vals = w.values()
        nrows, ncols = vals.shape if vals.size else (0, 0)
        lines.append("")
        lines.append(f"{w.label}: {w.shape} {w.dtype}, rows {w.row}..{w.row + nrows - 1}, "
                     f"columns {w.col}..{w.col + ncols - 1}")
        cells = [[window_value(float(v)) + ("*" if w.mark == (i, j) else "") for j, v in
                  enumerate(row)] for i, row in enumerate(vals)]
        width = max([len(c) for row in cells for c in row] + [len(str(w.col + ncols))])
        head = " " * 6 + " ".join(str(w.col + j).rjust(width) for j in range(ncols))
        lines.append(head)
        for i, row in enumerate(cells):
            lines.append(f"{w.row + i:>5} " + " ".join(c.rjust(width) for c in row))
    if any(w.mark is not None for w in case.windows):
        lines.append("(* the first element where the event is)")
    return "\n".join(lines)

