"""Reading the state of a probe case back: every field checked (type, size, allowed values)
before anything is built, each refusal naming the field (``state.windows[1].codes``)."""

from __future__ import annotations

import re
from typing import Any

from ..errors import BitprismError
from ..formats import get_format

__all__ = ["CASE_EVENTS", "INT_DTYPES", "MAX_NOTE", "MAX_SIDE", "MAX_TEXT", "read_state"]

INT_DTYPES = ("bool", "int8", "int16", "int32", "int64", "uint8", "uint16", "uint32", "uint64")
CASE_EVENTS = ("nan", "inf", "overflow", "underflow")
MAX_SIDE = 32  # a stored window is refused beyond this (as the widgets' case files)
MAX_TEXT = 4000
MAX_NOTE = 20_000
_MAX_ITEMS = 64
_HEX = re.compile(r"0x[0-9a-f]{1,16}")
_KEYS = ("source", "event", "format", "operation", "location", "facts", "formats", "windows")
_WINDOW_KEYS = ("label", "dtype", "shape", "row", "col", "mark", "codes")


class _Field(BitprismError):
    def __init__(self, where: str, message: str) -> None:
        super().__init__(f"{where}: {message}")


def _want(value: Any, where: str, kind: type, what: str) -> Any:
    if isinstance(value, bool) and kind is not bool or not isinstance(value, kind):
        raise _Field(where, f"expected {what}, got {type(value).__name__} {_short(value)}")
    return value


def _short(value: Any) -> str:
    text = repr(value)
    return text if len(text) <= 60 else text[:57] + "..."


def _text(value: Any, where: str, limit: int = MAX_TEXT) -> str:
    _want(value, where, str, "a string")
    if len(value) > limit:
        raise _Field(where, f"longer than {limit} characters")
    return str(value)


def _int(value: Any, where: str, lo: int = 0, hi: int = 2**62) -> int:
    _want(value, where, int, "an integer")
    if not lo <= value <= hi:
        raise _Field(where, f"{value} is outside {lo}..{hi}")
    return int(value)


def _list(value: Any, where: str, limit: int) -> list[Any]:
    _want(value, where, list, "a list")
    if len(value) > limit:
        raise _Field(where, f"more than {limit} items")
    return list(value)


def _object(value: Any, where: str, keys: tuple[str, ...]) -> dict[str, Any]:
    _want(value, where, dict, "an object")
    unknown = sorted(set(value) - set(keys))
    missing = [k for k in keys if k not in value]
    if unknown:
        raise _Field(where, f"unknown field {unknown[0]!r} (written by a newer bitprism?)")
    if missing:
        raise _Field(where, f"missing field {missing[0]!r}")
    return dict(value)


def _format_name(value: Any, where: str) -> str:
    name = _text(value, where, 64)
    try:
        return get_format(name).name
    except BitprismError as exc:
        raise _Field(where, str(exc)) from None


def _window(value: Any, where: str) -> dict[str, Any]:
    w = _object(value, where, _WINDOW_KEYS)
    dtype = _text(w["dtype"], f"{where}.dtype", 64)
    floating = dtype not in INT_DTYPES
    bits = get_format(_format_name(dtype, f"{where}.dtype")).container_bits if floating else 64
    shape = tuple(_int(s, f"{where}.shape[{i}]") for i, s in
                  enumerate(_list(w["shape"], f"{where}.shape", 32)))
    rows = _list(w["codes"], f"{where}.codes", MAX_SIDE)
    codes = []
    width = None
    for i, row in enumerate(rows):
        cells = _list(row, f"{where}.codes[{i}]", MAX_SIDE)
        if width is not None and len(cells) != width:
            raise _Field(f"{where}.codes[{i}]", "rows of a window must have one length")
        width = len(cells)
        codes.append(tuple(_cell(c, f"{where}.codes[{i}][{j}]", floating, bits)
                           for j, c in enumerate(cells)))
    mark = w["mark"]
    if mark is not None:
        pair = _list(mark, f"{where}.mark", 2)
        if len(pair) != 2:
            raise _Field(f"{where}.mark", "expected [row, column] or null")
        mark = (_int(pair[0], f"{where}.mark[0]", 0, MAX_SIDE),
                _int(pair[1], f"{where}.mark[1]", 0, MAX_SIDE))
    return {"label": _text(w["label"], f"{where}.label", 64), "dtype": dtype, "shape": shape,
            "row": _int(w["row"], f"{where}.row"), "col": _int(w["col"], f"{where}.col"),
            "codes": tuple(codes), "mark": mark}


def _cell(value: Any, where: str, floating: bool, bits: int) -> int:
    if not floating:
        return _int(value, where, -(2**63), 2**64 - 1)
    text = _text(value, where, 18)
    if not _HEX.fullmatch(text) or int(text, 16) >= 1 << bits:
        raise _Field(where, f"expected a {bits}-bit pattern in hex like '0x3c00'; got "
                     f"{_short(text)}")
    return int(text, 16)


def read_state(value: Any) -> dict[str, Any]:
    """The keyword arguments of ``ProbeCase`` from a case's ``state`` (checked)."""
    from .cases import CaseWindow

    s = _object(value, "state", _KEYS)
    source = _text(s["source"], "state.source", 16)
    if source not in ("trace", "watch"):
        raise _Field("state.source", f"expected 'trace' or 'watch'; got {_short(source)}")
    event = _text(s["event"], "state.event", 16)
    if event not in CASE_EVENTS:
        raise _Field("state.event", f"expected one of {', '.join(CASE_EVENTS)}; got "
                     f"{_short(event)}")
    fmt = None if s["format"] is None else _format_name(s["format"], "state.format")
    facts = []
    for i, pair in enumerate(_list(s["facts"], "state.facts", _MAX_ITEMS)):
        items = _list(pair, f"state.facts[{i}]", 2)
        if len(items) != 2:
            raise _Field(f"state.facts[{i}]", "expected [label, text]")
        facts.append((_text(items[0], f"state.facts[{i}][0]", 200),
                      _text(items[1], f"state.facts[{i}][1]")))
    formats = tuple(_format_name(f, f"state.formats[{i}]") for i, f in
                    enumerate(_list(s["formats"], "state.formats", _MAX_ITEMS)))
    windows = tuple(CaseWindow(**_window(w, f"state.windows[{i}]")) for i, w in
                    enumerate(_list(s["windows"], "state.windows", _MAX_ITEMS)))
    return {"source": source, "event": event, "format": fmt,
            "operation": _text(s["operation"], "state.operation", 400),
            "location": _text(s["location"], "state.location", 400), "facts": tuple(facts),
            "formats": formats, "windows": windows}
