"""Case-file codecs: how formats, bit patterns and cast options are written to JSON and read
back, and the field checks every widget's ``_from_case_state`` uses.

Each ``want_*`` helper returns the value when it is of the right JSON type and within its
limits, and otherwise raises ``CaseFieldError`` naming the field (``state.formats[2]``), so a
bad file is refused before anything is built. Nothing read is ever executed.
"""

from __future__ import annotations

import json
import re
from typing import Any, Mapping, Sequence

from ..errors import BitprismError
from ..formats import FORMATS, SPECIALS, Format, get_format
from ..numerics.options import OVERFLOW_MODES, ROUNDING_MODES, SUBNORMAL_MODES

__all__ = [
    "CaseFieldError",
    "MAX_FORMATS",
    "MAX_NOTE_CHARS",
    "MAX_SEED",
    "MAX_TEXT_CHARS",
    "MAX_WINDOW_CELLS",
    "MAX_WINDOW_SIDE",
    "check_storable_format",
    "check_utf8",
    "check_window_size",
    "code_from_hex",
    "code_to_hex",
    "format_from_json",
    "format_to_json",
    "formats_from_json",
    "get_format_layout",
    "options_from_json",
    "options_to_json",
    "want",
    "want_bool",
    "want_int",
    "want_list",
    "want_object",
    "want_str",
]

MAX_NOTE_CHARS = 20_000
MAX_TEXT_CHARS = 4_000  # value and expression texts
MAX_FORMATS = 64
MAX_SEED = (1 << 63) - 1  # seeds are JSON integers within int64; numpy's generators take them
MAX_WINDOW_SIDE = 32  # a tensor window stored in a case is at most 32 x 32 cells
MAX_WINDOW_CELLS = MAX_WINDOW_SIDE * MAX_WINDOW_SIDE


class CaseFieldError(BitprismError):
    """One field of a case is wrong; ``where`` names it (``state.formats[2]``)."""

    def __init__(self, where: str, message: str) -> None:
        self.where = where
        self.reason = message
        super().__init__(f"{where}: {message}")


# ----- field helpers (shared by every widget's _case_state / _from_case_state) -----------------
_TYPE_NAMES = {
    bool: "true/false",
    int: "an integer",
    str: "a string",
    list: "a list",
    dict: "an object",
    float: "a number",
    type(None): "null",
}


def _type_text(types: tuple[type, ...]) -> str:
    return " or ".join(_TYPE_NAMES.get(t, t.__name__) for t in types)


def want(value: Any, where: str, *types: type) -> Any:
    """``value`` if it is one of ``types`` (JSON types; a bool is never taken for an int)."""
    ok = any(
        isinstance(value, t) and not (t is int and isinstance(value, bool)) for t in types
    )
    if not ok:
        raise CaseFieldError(where, f"expected {_type_text(types)}, got {_short(value)}")
    return value


def _short(value: Any) -> str:
    text = json.dumps(value) if _is_json_scalar(value) else type(value).__name__
    if isinstance(value, list):
        text = f"a list of {len(value)}"
    elif isinstance(value, dict):
        text = "an object"
    return text if len(text) <= 60 else text[:57] + "..."


def _is_json_scalar(value: Any) -> bool:
    return value is None or isinstance(value, (bool, int, float, str))


def want_object(
    value: Any, where: str, required: Sequence[str] = (), optional: Sequence[str] = ()
) -> dict[str, Any]:
    """A JSON object with the ``required`` keys, and no keys outside ``required + optional``."""
    want(value, where, dict)
    for key in required:
        if key not in value:
            raise CaseFieldError(f"{where}.{key}" if where else key, "missing")
    allowed = set(required) | set(optional)
    extra = sorted(k for k in value if k not in allowed)
    if extra:
        name = f"{where}.{extra[0]}" if where else extra[0]
        raise CaseFieldError(name, f"unknown field; allowed here: {', '.join(sorted(allowed))}")
    return value


def want_int(value: Any, where: str, lo: int | None = None, hi: int | None = None) -> int:
    want(value, where, int)
    if (lo is not None and value < lo) or (hi is not None and value > hi):
        raise CaseFieldError(where, f"must be in {lo}..{hi}, got {value!r}")
    return int(value)


def want_bool(value: Any, where: str) -> bool:
    return bool(want(value, where, bool))


def want_str(
    value: Any, where: str, choices: Sequence[str] | None = None, max_chars: int = MAX_TEXT_CHARS
) -> str:
    want(value, where, str)
    if len(value) > max_chars:
        raise CaseFieldError(where, f"text longer than {max_chars} characters ({len(value)})")
    check_utf8(value, where)
    if choices is not None and value not in choices:
        raise CaseFieldError(
            where, f"must be one of {', '.join(repr(c) for c in choices)}; got {value!r}"
        )
    return str(value)


def check_utf8(text: str, where: str) -> None:
    """Refuse text UTF-8 cannot encode (a lone surrogate such as JSON's ``"\\ud800"``): a case
    file is UTF-8, so such text could be read but never written again."""
    try:
        text.encode("utf-8")
    except UnicodeEncodeError as exc:
        raise CaseFieldError(
            where, f"text holds {text[exc.start]!r} at position {exc.start}, a lone surrogate "
            "that UTF-8 cannot encode") from None


def want_list(value: Any, where: str, max_len: int) -> list[Any]:
    want(value, where, list)
    if len(value) > max_len:
        raise CaseFieldError(where, f"at most {max_len} entries allowed, got {len(value)}")
    return list(value)


def check_window_size(rows: int, cols: int, where: str = "state.window") -> None:
    """Refuse a tensor window larger than a case may hold (saving and loading alike)."""
    if rows > MAX_WINDOW_SIDE or cols > MAX_WINDOW_SIDE or rows * cols > MAX_WINDOW_CELLS:
        raise CaseFieldError(
            where,
            f"a case stores at most {MAX_WINDOW_SIDE} x {MAX_WINDOW_SIDE} cells of tensor data; "
            f"this window is {rows} x {cols}. Narrow the window (or save the tensor itself "
            "with numpy) and save the case again",
        )


def format_to_json(fmt: Any) -> str | dict[str, Any]:
    """Canonical name for a built-in format, ``to_params()`` for a layout of one's own."""
    f = get_format(fmt)
    if FORMATS.get(f.name) == f:
        return f.name
    return f.to_params()


_PARAM_KEYS = (
    "name", "exponent_bits", "significand_bits", "bias", "specials", "signed", "has_zero",
    "storage_bits",
)


def format_from_json(value: Any, where: str) -> Format:
    """A format from a canonical name or a ``to_params()`` object, checked by ``Format``."""
    want(value, where, str, dict)
    if isinstance(value, str):
        if value not in FORMATS:  # files hold canonical names; aliases are for people typing
            known = ", ".join(FORMATS)
            raise CaseFieldError(where, f"unknown format {value!r}; known formats: {known}")
        return FORMATS[value]
    want_object(value, where, required=("name", "exponent_bits", "significand_bits"),
                optional=_PARAM_KEYS)
    name = want_str(value["name"], f"{where}.name", max_chars=64)
    if name in FORMATS:
        raise CaseFieldError(
            f"{where}.name", f"{name!r} is a built-in format; store it by name instead"
        )
    w = want_int(value["exponent_bits"], f"{where}.exponent_bits", 1, 11)
    t = want_int(value["significand_bits"], f"{where}.significand_bits", 0, 52)
    bias = value.get("bias")
    if bias is not None:
        bias = want_int(bias, f"{where}.bias", -(1 << 12), 1 << 12)
    specials = want_str(value.get("specials", "ieee"), f"{where}.specials", tuple(SPECIALS))
    signed = want_bool(value.get("signed", True), f"{where}.signed")
    has_zero = want_bool(value.get("has_zero", True), f"{where}.has_zero")
    storage = value.get("storage_bits")
    if storage is not None:
        storage = want_int(storage, f"{where}.storage_bits", 1, 64)
    try:
        return Format(name, w, t, bias, specials, signed, has_zero, storage)  # type: ignore[arg-type]
    except BitprismError as exc:
        raise CaseFieldError(where, str(exc)) from None


def formats_from_json(value: Any, widget: str, where: str = "state.formats") -> list[Format]:
    """A widget's list of formats: at least one, at most ``MAX_FORMATS``, no name twice."""
    raw = want_list(value, where, MAX_FORMATS)
    if not raw:
        raise CaseFieldError(where, f"a {widget} needs at least one format")
    fmts: list[Format] = []
    for i, spec in enumerate(raw):
        f = format_from_json(spec, f"{where}[{i}]")
        if any(g.name == f.name for g in fmts):
            raise CaseFieldError(f"{where}[{i}]", f"format {f.name!r} is listed twice")
        fmts.append(f)
    return fmts


def check_storable_format(fmt: Format, where: str) -> None:
    """Refuse a format a case file could not hold, with the checks ``format_from_json`` makes
    on reading (a widget checks its formats with this, so it never saves what it cannot read)."""
    if FORMATS.get(fmt.name) == fmt:
        return
    if fmt.name in FORMATS:
        raise CaseFieldError(
            f"{where}.name", f"{fmt.name!r} is a built-in format; a format of your own needs a "
            "name of its own")
    format_from_json(fmt.to_params(), where)


def code_to_hex(code: int, fmt: Any) -> str:
    """A bit pattern as ``0x`` hex padded to the format's width (``0x7e00`` for float16)."""
    f = get_format(fmt)
    return f"0x{int(code):0{(f.bits + 3) // 4}x}"


_HEX_RE = re.compile(r"0x[0-9a-f]{1,16}")


def code_from_hex(value: Any, fmt: Format, where: str) -> int:
    """The bit pattern written by ``code_to_hex``, checked to fit the format."""
    text = want_str(value, where, max_chars=18)
    if not _HEX_RE.fullmatch(text):
        raise CaseFieldError(
            where, f"bit pattern must be lower-case hex like '0x3c00', got {text!r}"
        )
    code = int(text, 16)
    if code >= 1 << fmt.bits:
        raise CaseFieldError(
            where,
            f"bit pattern {text} does not fit {fmt.name} ({fmt.bits} bits: "
            f"0x0..{code_to_hex((1 << fmt.bits) - 1, fmt)})",
        )
    return code


def options_to_json(rounding: str, overflow: str, subnormals: str, seed: int | None) -> dict[str, Any]:
    return {"rounding": rounding, "overflow": overflow, "subnormals": subnormals, "seed": seed}


def options_from_json(value: Any, where: str) -> dict[str, Any]:
    """Cast options checked against the allowed names; returns keyword arguments."""
    want_object(value, where, optional=("rounding", "overflow", "subnormals", "seed"))
    out: dict[str, Any] = {
        "rounding": want_str(value.get("rounding", "roundTiesToEven"), f"{where}.rounding",
                             tuple(ROUNDING_MODES)),
        "overflow": want_str(value.get("overflow", "standard"), f"{where}.overflow",
                             tuple(OVERFLOW_MODES)),
        "subnormals": want_str(value.get("subnormals", "keep"), f"{where}.subnormals",
                               tuple(SUBNORMAL_MODES)),
    }
    seed = value.get("seed")
    out["seed"] = None if seed is None else want_int(seed, f"{where}.seed", 0, MAX_SEED)
    return out


def get_format_layout(params: Mapping[str, Any]) -> str:
    """``sign-exponent-significand`` bit counts of a ``to_params()`` object (``1-3-3``)."""
    sign = 1 if params.get("signed", True) else 0
    return f"{sign}-{params.get('exponent_bits')}-{params.get('significand_bits')}"
