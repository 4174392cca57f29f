"""Plain text of the scale-choice results: a sweep, a granularity comparison, a replay.

Pure functions of the records (``tensors.scaling``); the HTML twins are in ``scaling_html``.
Each table is a header line and rows of right-aligned cells; the cells themselves come from the
``*_cells`` functions, which the HTML uses too, so both show the same words and figures.
"""

from __future__ import annotations

from typing import Any, Sequence

import numpy as np

from .scan_text import fmt_count, fmt_float
from .vocabulary import OUTCOMES

__all__ = [
    "COMPARISON_COLUMNS",
    "REPLAY_COLUMNS",
    "SWEEP_COLUMNS",
    "comparison_cells",
    "comparison_header",
    "replay_cells",
    "replay_header",
    "replay_steps",
    "replay_text",
    "scaling_comparison_text",
    "sweep_cells",
    "sweep_header",
    "sweep_marks",
    "sweep_text",
    "sweep_window",
    "table_text",
]

SWEEP_COLUMNS = (
    "scale",
    OUTCOMES["overflow"].name,
    OUTCOMES["underflow"].name,
    OUTCOMES["subnormal"].name,
    "NaN/Inf made",
    "rel p99",
    "SQNR dB",
    "",
)
COMPARISON_COLUMNS = (
    "scaling",
    "scales",
    "bits/element",
    "SQNR dB",
    "rel p99",
    OUTCOMES["overflow"].name,
    OUTCOMES["underflow"].name,
    OUTCOMES["subnormal"].name,
    "NaN/Inf made",
    "scale exponents",
)
REPLAY_COLUMNS = ("step", "amax", "scale", OUTCOMES["overflow"].name, OUTCOMES["underflow"].name,
                  "NaN/Inf made")


def table_text(columns: Sequence[str], rows: Sequence[Sequence[str]], left: int = 1) -> str:
    """Columns padded to their widest cell; the first ``left`` columns flush left."""
    widths = [max(len(c), *(len(r[i]) for r in rows)) if rows else len(c) for i, c in enumerate(columns)]

    def line(cells: Sequence[str]) -> str:
        return "  ".join(
            c.ljust(w) if i < left else c.rjust(w) for i, (c, w) in enumerate(zip(cells, widths))
        ).rstrip()

    return "\n".join([line(columns)] + [line(r) for r in rows])


# ----- ScaleSweep -----------------------------------------------------------------------------


def _pow(k: int, relative: bool) -> str:
    if relative:
        return "base" if k == 0 else f"base x 2^{k}"
    return f"2^{k}"


def sweep_header(sweep: Any) -> str:
    ks = sweep.exponents
    rel = sweep.relative_to != "none"
    span = f"{_pow(int(ks[0]), rel)} .. {_pow(int(ks[-1]), rel)}" if ks.size else "none"
    what = "candidate scales" if sweep.relative_to == "none" else (
        f"offsets from each group's base ({sweep.relative_to})")
    return (
        f"sweep of {sweep.format.name}: {len(sweep)} {what}, {span}; SQNR and p99 over the "
        f"values whose result is finite; p99 within 2^-7 p + 2^-{sweep.fine_bits} (1 + 2p)"
    )


def sweep_window(sweep: Any, marks: dict[int, str], around: int = 6) -> list[int]:
    """Candidates worth a row: every marked one, the ``around`` either side of the first
    mark, and (without marks) those where not every value overflows or underflows."""
    ks = [int(k) for k in sweep.exponents]
    if not marks:
        live = (sweep.underflow < sweep.finite) & (sweep.overflow < sweep.finite)
        keep = [k for k, ok in zip(ks, live) if ok]
        return keep or ks
    centre = next(iter(marks))
    near = {k for k in ks if abs(k - centre) <= around}
    return [k for k in ks if k in near or k in marks]


def sweep_marks(advice: Any) -> dict[int, str]:
    """Row notes of an advice's sweep: the choice first, then the amax rule and no scaling
    (for per-group scales the sweep's 0 is each group's base rule)."""
    if advice.scale is None:
        return {0: f"each group's base ({advice.sweep.relative_to})"}
    marks: dict[int, str] = {}
    if advice.exponent is not None:
        marks[advice.exponent] = "chosen"
    if advice.amax_exponent is not None:
        rule = advice.amax_exponent
        marks[rule] = (marks.get(rule, "") + ", amax rule").lstrip(", ")
    marks.setdefault(0, "no scaling")
    return marks


def sweep_cells(sweep: Any, ks: Sequence[int], marks: dict[int, str]) -> list[list[str]]:
    relative = sweep.relative_to != "none"
    rows = []
    for k in ks:
        i = sweep.index(k)
        rows.append([
            _pow(k, relative),
            fmt_count(int(sweep.overflow[i]), sweep.size),
            fmt_count(int(sweep.underflow[i]), sweep.size),
            fmt_count(int(sweep.subnormal[i]), sweep.size),
            fmt_count(int(sweep.nonfinite[i]), sweep.size),
            fmt_float(None if np.isnan(sweep.rel_error_p99[i]) else float(sweep.rel_error_p99[i])),
            fmt_float(None if np.isnan(sweep.sqnr_db[i]) else float(sweep.sqnr_db[i]), 4),
            marks.get(k, ""),
        ])
    return rows


def _gaps(ks: Sequence[int], rows: list[list[str]]) -> list[list[str]]:
    out: list[list[str]] = []
    for i, (k, row) in enumerate(zip(ks, rows)):
        if i and k != ks[i - 1] + 1:
            out.append(["..."] + [""] * (len(row) - 1))
        out.append(row)
    return out


def sweep_text(sweep: Any, marks: dict[int, str] | None = None) -> str:
    """The sweep as a table: around the first mark when given, else every candidate where not
    every value overflows or underflows."""
    marks = {k: v for k, v in (marks or {}).items() if k in set(int(e) for e in sweep.exponents)}
    ks = sweep_window(sweep, marks)
    body = table_text(SWEEP_COLUMNS, _gaps(ks, sweep_cells(sweep, ks, marks)))
    return sweep_header(sweep) + "\n" + body


# ----- ScalingComparison ----------------------------------------------------------------------


def comparison_header(c: Any) -> list[str]:
    shape = "x".join(str(s) for s in c.shape) or "scalar"
    return [
        f"scaling compared in {c.format.name}: tensor [{shape}], {c.size:,} elements, "
        f"objective {c.objective}, channels along axis {c.axis}, blocks of {c.block_size}",
        f"{c.options.rounding}, overflow={c.options.overflow}, subnormals={c.options.subnormals}; "
        "figures on the values as they come back (scales divided out)",
    ]


def comparison_cells(c: Any) -> list[list[str]]:
    rows = []
    for r in c.rows:
        span = "-" if r.exponent_range is None else (
            f"2^{r.exponent_range[0]}" if r.exponent_range[0] == r.exponent_range[1]
            else f"2^{r.exponent_range[0]} .. 2^{r.exponent_range[1]}")
        rows.append([
            r.granularity + (" (MX)" if r.granularity == "block" else ""),
            f"{r.scales:,}",
            f"{r.bits_per_element:.3g}",
            fmt_float(r.sqnr_db, 4),
            fmt_float(r.rel_error_p99),
            fmt_count(r.overflow, c.size),
            fmt_count(r.underflow, c.size),
            fmt_count(r.subnormal, c.size),
            fmt_count(r.nonfinite, c.size),
            span,
        ])
    return rows


def scaling_comparison_text(c: Any) -> str:
    lines = comparison_header(c) + [table_text(COMPARISON_COLUMNS, comparison_cells(c))]
    lines += [f"{r.granularity}: {r.rule}" for r in c.rows if r.granularity != "none"]
    lines += [f"note: {n}" for n in c.notes]
    return "\n".join(lines)


# ----- ScalingReplay --------------------------------------------------------------------------


def replay_header(r: Any) -> str:
    where = "no step overflows" if r.first_overflow is None else (
        f"first overflow at step {r.first_overflow}")
    return (
        f"delayed scaling replayed in {r.format.name}: {r.steps} steps, scale from the largest "
        f"amax of the {r.history} steps before, margin {r.margin}: {where}"
    )


def replay_steps(r: Any, limit: int = 40) -> list[int]:
    """Steps worth a row: the first and last, each change of scale and each step that
    overflows or underflows (at most ``limit``, the earliest first)."""
    n = r.steps
    keep = {0, n - 1}
    changed = np.flatnonzero(np.diff(r.exponents)) + 1
    keep.update(int(i) for i in changed)
    keep.update(int(i) for i in np.flatnonzero(r.overflow + r.underflow + r.nonfinite))
    return sorted(keep)[:limit]


def replay_cells(r: Any, steps: Sequence[int]) -> list[list[str]]:
    return [
        [str(i), fmt_float(float(r.amax[i]), 4), f"2^{int(r.exponents[i])}",
         fmt_count(int(r.overflow[i]), int(r.size[i])), fmt_count(int(r.underflow[i]), int(r.size[i])),
         fmt_count(int(r.nonfinite[i]), int(r.size[i]))]
        for i in steps
    ]


def replay_text(r: Any) -> str:
    steps = replay_steps(r)
    body = table_text(REPLAY_COLUMNS, _gaps(steps, replay_cells(r, steps)))
    return replay_header(r) + "\n" + body
