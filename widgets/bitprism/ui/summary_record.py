"""A scan summary and the find buttons' counts as a case records them: what the author saw of
the whole tensor, kept in the case because the case holds only a window of it.

``summary_to_json`` / ``summary_from_json`` write and read a ``ScanResult``'s figures (counts as
integers, every other number as a hex float string, exact and with ``inf``/``nan`` spelled out,
since a case file is strict JSON); ``counts_to_json`` / ``counts_from_json`` the counts beside
the find buttons. Reading checks every field with the ``want_*`` helpers (``CaseFieldError``
names a bad one) before anything is built.
"""

from __future__ import annotations

import re
from types import MappingProxyType
from typing import Any

import numpy as np

from ..formats import Format
from ..numerics.options import CastOptions
from ..tensors.scan import ScanResult
from ..tensors.scan.results import ExponentHistogram, FormatScan
from .case_codecs import (
    MAX_FORMATS,
    CaseFieldError,
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
    "COUNT_KINDS",
    "RecordedCounts",
    "counts_from_json",
    "counts_to_json",
    "summary_from_json",
    "summary_to_json",
]

COUNT_KINDS = ("nan", "inf", "overflow", "underflow")
_MAX_COUNT = (1 << 63) - 1
_MAX_EXPONENTS = 4096  # populated binary exponents of a histogram (float64 has about 2100)
_HEX_FLOAT = re.compile(r"-?(0x[0-9a-f]+(\.[0-9a-f]*)?p[+-]\d{1,5}|0x0\.0p\+0|inf|nan)")
_INT_FIELDS = ("size", "nan", "inf", "overflow", "underflow", "subnormal", "invalid", "exact",
               "compared", "block_nan")
_FLOAT_FIELDS = ("max_abs_error", "rel_error_p50", "rel_error_p99", "rel_error_max",
                 "ulp_error_mean", "ulp_error_max", "sqnr_db", "overflow_from",
                 "underflow_below", "normal_from")
_OPTIONAL_INTS = ("subnormal", "exact", "compared", "block_nan")
_QUANTILE_MODES = ("exact", "histogram", "none")


def _float_to_json(v: float | None) -> str | None:
    return None if v is None else float(v).hex()


def _float_from_json(v: Any, where: str) -> float | None:
    if v is None:
        return None
    text = want_str(v, where, max_chars=40)
    if not _HEX_FLOAT.fullmatch(text):
        raise CaseFieldError(where, f"expected a hex float like '0x1.8p+1', 'inf' or 'nan'; "
                                    f"got {text!r}")
    return float.fromhex(text)


def summary_to_json(result: ScanResult, scope: str) -> dict[str, Any]:
    """A ``ScanResult`` (of plain formats) as JSON-ready figures; ``scope`` says what it
    scanned: 'tensor' or 'slice' (of the original tensor) or 'window' (the saved block)."""
    h = result.histogram
    rows = []
    for f in result.formats:
        row: dict[str, Any] = {"format": format_to_json(f.format)}
        for name in _INT_FIELDS:
            value = getattr(f, name)
            row[name] = None if value is None else int(value)
        for name in _FLOAT_FIELDS:
            row[name] = _float_to_json(getattr(f, name))
        row["quantiles"] = f.quantiles
        rows.append(row)
    return {
        "scope": scope,
        "dtype": result.dtype,
        "shape": [int(s) for s in result.shape],
        "size": int(result.size),
        "min": _float_to_json(result.min),
        "max": _float_to_json(result.max),
        "absmax": _float_to_json(result.absmax),
        "options": options_to_json(result.options.rounding, result.options.overflow,
                                   result.options.subnormals, result.options.seed),
        "quantiles": result.quantiles,
        "histogram": {"exponents": list(h.exponents), "counts": list(h.counts), "zero": h.zero,
                      "subnormal": h.subnormal, "inf": h.inf, "nan": h.nan,
                      "collected": h.collected},
        "formats": rows,
    }


_SUMMARY_KEYS = ("scope", "dtype", "shape", "size", "min", "max", "absmax", "options",
                 "quantiles", "histogram", "formats")
SCOPES = ("tensor", "slice", "window")


def _count(v: Any, where: str, optional: bool = False) -> int | None:
    if v is None and optional:
        return None
    return want_int(v, where, 0, _MAX_COUNT)


def _format_row(v: Any, where: str) -> FormatScan:
    want_object(v, where, required=("format", *_INT_FIELDS, *_FLOAT_FIELDS, "quantiles"))
    fmt: Format = format_from_json(v["format"], f"{where}.format")
    ints = {k: _count(v[k], f"{where}.{k}", k in _OPTIONAL_INTS) for k in _INT_FIELDS}
    floats = {k: _float_from_json(v[k], f"{where}.{k}") for k in _FLOAT_FIELDS}
    q = want_str(v["quantiles"], f"{where}.quantiles", _QUANTILE_MODES)
    return FormatScan(
        fmt, ints["size"], ints["nan"], ints["inf"], ints["overflow"], ints["underflow"],  # type: ignore[arg-type]
        ints["subnormal"], ints["invalid"], ints["exact"], ints["compared"],  # type: ignore[arg-type]
        floats["max_abs_error"], floats["rel_error_p50"], floats["rel_error_p99"],
        floats["rel_error_max"], floats["ulp_error_mean"], floats["ulp_error_max"],
        floats["sqnr_db"], q, floats["overflow_from"], floats["underflow_below"],
        floats["normal_from"], ints["block_nan"],
    )


def _histogram(v: Any, where: str) -> ExponentHistogram:
    want_object(v, where, required=("exponents", "counts", "zero", "subnormal", "inf", "nan",
                                    "collected"))
    exps = [want_int(e, f"{where}.exponents[{i}]", -4096, 4096)
            for i, e in enumerate(want_list(v["exponents"], f"{where}.exponents",
                                            _MAX_EXPONENTS))]
    counts = [want_int(c, f"{where}.counts[{i}]", 0, _MAX_COUNT)
              for i, c in enumerate(want_list(v["counts"], f"{where}.counts", _MAX_EXPONENTS))]
    if len(exps) != len(counts):
        raise CaseFieldError(where, f"{len(exps)} exponents but {len(counts)} counts")
    if exps != sorted(set(exps)):
        raise CaseFieldError(f"{where}.exponents", "must be distinct and ascending")
    zero, sub, inf, nan = (want_int(v[k], f"{where}.{k}", 0, _MAX_COUNT)
                           for k in ("zero", "subnormal", "inf", "nan"))
    return ExponentHistogram(tuple(exps), tuple(counts), zero, sub, inf, nan,
                             collected=want_bool(v["collected"], f"{where}.collected"))


def summary_from_json(value: Any, where: str = "state.summary") -> tuple[ScanResult, str]:
    """A recorded summary and its scope, every field checked."""
    want_object(value, where, required=_SUMMARY_KEYS)
    scope = want_str(value["scope"], f"{where}.scope", SCOPES)
    dtype = want_str(value["dtype"], f"{where}.dtype", max_chars=32)
    shape = tuple(want_int(s, f"{where}.shape[{i}]", 0, _MAX_COUNT)
                  for i, s in enumerate(want_list(value["shape"], f"{where}.shape", 64)))
    size = want_int(value["size"], f"{where}.size", 0, _MAX_COUNT)
    extrema = [_float_from_json(value[k], f"{where}.{k}") for k in ("min", "max", "absmax")]
    opts = CastOptions(**options_from_json(value["options"], f"{where}.options"))
    quantiles = want_str(value["quantiles"], f"{where}.quantiles", _QUANTILE_MODES)
    hist = _histogram(value["histogram"], f"{where}.histogram")
    rows = [_format_row(v, f"{where}.formats[{i}]")
            for i, v in enumerate(want_list(value["formats"], f"{where}.formats", MAX_FORMATS))]
    none: tuple[np.ndarray, ...] = (np.zeros(0, np.intp),) * max(1, len(shape))
    where_map = {(k, ""): none for k in ("nan", "inf")}
    for r in rows:
        for k in ("overflow", "underflow", "subnormal", "largest_error"):
            where_map[(k, r.name)] = none
    result = ScanResult(dtype, shape, size, extrema[0], extrema[1], extrema[2], None, opts,
                        quantiles, 0, hist, tuple(rows), MappingProxyType(where_map))
    return result, scope


class RecordedCounts:
    """The counts beside the find buttons as the author saw them (``None``: not counted)."""

    def __init__(self, fmt: str, options: CastOptions, counts: dict[str, int | None],
                 largest: tuple[str, float | None, int] | None) -> None:
        self.format = fmt  # format A's name
        self.options = options
        self.counts = counts
        self.largest = largest  # (unit, largest error or None, cells), when found


def counts_to_json(counts: RecordedCounts) -> dict[str, Any]:
    out: dict[str, Any] = {"format": counts.format,
                           "options": options_to_json(counts.options.rounding,
                                                      counts.options.overflow,
                                                      counts.options.subnormals,
                                                      counts.options.seed)}
    for k in COUNT_KINDS:
        out[k] = counts.counts.get(k)
    if counts.largest is not None:
        unit, best, n = counts.largest
        out["largest_error"] = {"unit": unit, "value": _float_to_json(best), "cells": n}
    else:
        out["largest_error"] = None
    return out


def counts_from_json(value: Any, names: list[str], units: tuple[str, ...],
                     where: str = "state.counts") -> RecordedCounts:
    want_object(value, where, required=("format", "options", *COUNT_KINDS, "largest_error"))
    fmt = want_str(value["format"], f"{where}.format", names)
    opts = CastOptions(**options_from_json(value["options"], f"{where}.options"))
    counts = {k: _count(value[k], f"{where}.{k}", True) for k in COUNT_KINDS}
    largest = None
    if value["largest_error"] is not None:
        le = want_object(value["largest_error"], f"{where}.largest_error",
                         required=("unit", "value", "cells"))
        unit = want_str(le["unit"], f"{where}.largest_error.unit", units)
        best = _float_from_json(le["value"], f"{where}.largest_error.value")
        largest = (unit, best, want_int(le["cells"], f"{where}.largest_error.cells", 0,
                                        _MAX_COUNT))
    return RecordedCounts(fmt, opts, counts, largest)
