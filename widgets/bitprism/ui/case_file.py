"""Case files: the saved state of a widget, and the self-contained HTML page that carries one.

A *case file* is versioned JSON that reloads the same view::

    {"bitprism_case": 1, "kind": "prism" | "tensor_prism", "created": "2025-01-31T12:00:00Z",
     "versions": {"bitprism": ..., "numpy": ..., "ml_dtypes": ..., "python": ...},
     "note": "what the person wants a teammate to see", "state": {...}}

Values are stored as exact bit patterns (hex strings of codes, each with its format), never as
decimals; formats by canonical name, or by ``Format.to_params()`` for a layout of one's own.

Protocol for a widget class (``Prism``, ``TensorPrism``) that inherits ``CaseFileMixin``
(put the mixin first: ``class Prism(CaseFileMixin, W.VBox)``):

* ``_case_kind = "prism"`` (class attribute; one of ``CASE_KINDS``).
* ``_case_state(self) -> dict``: JSON-ready state. Use ``format_to_json``, ``code_to_hex`` and
  ``options_to_json`` so every widget stores formats, codes and options the same way.
* ``_from_case_state(cls, state) -> widget`` (classmethod): validate *everything* first with the
  ``want_*`` helpers, ``format_from_json``, ``code_from_hex`` and ``options_from_json`` (each
  raises ``CaseFieldError`` naming the field, e.g. ``state.formats[2]``), and only then build the
  widget, so a bad file never yields a half-loaded one. Tensor windows must respect
  ``MAX_WINDOW_CELLS`` / ``MAX_WINDOW_SIDE`` (``check_window_size``).
* ``_static_html(self) -> str``: static markup of the current view, from the render layer.
* At the end of ``_refresh()`` call ``self._snapshot_changed()``: when the widget is on screen
  this republishes the static snapshot (throttled to one update per ``SNAPSHOT_INTERVAL``
  seconds, plus a final update), so a saved notebook shows the last view without a kernel.

``open_case(path)`` reads a ``.json`` case file or an exported ``.html`` page (whose case is in a
``<script type="application/json" id="bitprism-case">`` data block), migrates older schemas
through ``_MIGRATIONS``, validates field by field, and returns a live widget of the right kind.
Nothing in a file is ever executed: it is parsed as JSON and checked against allow-lists.
"""

from __future__ import annotations

import datetime as _dt
import html as _html
import importlib
import json
import os
import platform
import re
import threading
import time
import uuid
from pathlib import Path
from typing import Any, Callable, ClassVar, Mapping, Sequence

from .._version import __version__
from ..errors import BitprismError
from ..formats import FORMATS, SPECIALS, Format, get_format
from ..numerics.options import OVERFLOW_MODES, ROUNDING_MODES, SUBNORMAL_MODES

__all__ = [
    "CASE_KINDS",
    "CASE_SCHEMA",
    "CaseFieldError",
    "CaseFileMixin",
    "MAX_CASE_BYTES",
    "MAX_WINDOW_CELLS",
    "MAX_WINDOW_SIDE",
    "check_window_size",
    "code_from_hex",
    "code_to_hex",
    "format_from_json",
    "format_to_json",
    "open_case",
    "options_from_json",
    "options_to_json",
    "want",
    "want_bool",
    "want_int",
    "want_list",
    "want_object",
    "want_str",
]

CASE_SCHEMA = 1  # the schema this version writes and the newest it reads
MAX_CASE_BYTES = 8 * 1024 * 1024  # a case file or exported page larger than this is refused
MAX_JSON_DEPTH = 24  # nesting deeper than any case we write is refused before it is walked
MAX_NOTE_CHARS = 20_000
MAX_TEXT_CHARS = 4_000  # value and expression texts
MAX_FORMATS = 64
MAX_WINDOW_SIDE = 32  # a tensor window stored in a case is at most 32 x 32 cells
MAX_WINDOW_CELLS = MAX_WINDOW_SIDE * MAX_WINDOW_SIDE
SNAPSHOT_INTERVAL = 0.5  # seconds between two republished snapshots of a view on screen

# kind -> (module, class): a fixed allow-list; nothing read from a file names code to import.
CASE_KINDS: Mapping[str, tuple[str, str]] = {
    "prism": ("bitprism.ui.prism", "Prism"),
    "tensor_prism": ("bitprism.ui.tensor_prism", "TensorPrism"),
}

_CASE_ELEMENT_ID = "bitprism-case"
_WIDGET_VIEW = "application/vnd.jupyter.widget-view+json"


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
    if choices is not None and value not in choices:
        raise CaseFieldError(
            where, f"must be one of {', '.join(repr(c) for c in choices)}; got {value!r}"
        )
    return str(value)


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
    out["seed"] = None if seed is None else want_int(seed, f"{where}.seed", 0, (1 << 63) - 1)
    return out


# ----- the envelope -----------------------------------------------------------------------------
def _versions() -> dict[str, str]:
    import ml_dtypes
    import numpy

    return {
        "bitprism": __version__,
        "numpy": numpy.__version__,
        "ml_dtypes": ml_dtypes.__version__,
        "python": platform.python_version(),
    }


def _utc_now() -> str:
    return _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0).isoformat().replace(
        "+00:00", "Z"
    )


def _migrate_0_to_1(case: dict[str, Any]) -> dict[str, Any]:
    """Schema 0 (the pre-release draft): ``comment`` instead of ``note``, one
    ``bitprism_version`` string instead of ``versions``, and a Prism's cast options flat in its
    state with the rounding under ``rounding_mode``."""
    out = {k: v for k, v in case.items() if k not in ("comment", "bitprism_version")}
    out["note"] = case.get("comment", "")
    out["versions"] = {"bitprism": case.get("bitprism_version", "unknown")}
    state = case.get("state")
    if out.get("kind") == "prism" and isinstance(state, dict):
        state = dict(state)
        opts = {}
        for old, new in (("rounding_mode", "rounding"), ("overflow", "overflow"),
                         ("subnormals", "subnormals"), ("seed", "seed")):
            if old in state:
                opts[new] = state.pop(old)
        state["options"] = opts
        out["state"] = state
    out["bitprism_case"] = 1
    return out


# _MIGRATIONS[v] turns a schema-v case into a schema-(v+1) one; open_case applies them in turn.
_MIGRATIONS: dict[int, Callable[[dict[str, Any]], dict[str, Any]]] = {0: _migrate_0_to_1}


def _json_depth_ok(text: str, limit: int) -> bool:
    """Bracket nesting of JSON text within ``limit`` (strings skipped), checked before parsing."""
    depth = 0
    in_string = False
    escaped = False
    for ch in text:
        if in_string:
            if escaped:
                escaped = False
            elif ch == "\\":
                escaped = True
            elif ch == '"':
                in_string = False
        elif ch == '"':
            in_string = True
        elif ch in "[{":
            depth += 1
            if depth > limit:
                return False
        elif ch in "]}":
            depth -= 1
    return True


def _reject_constant(name: str) -> Any:
    raise CaseFieldError("case", f"{name} is not allowed in a case file (not standard JSON)")


def _parse_case_text(text: str) -> Any:
    if not _json_depth_ok(text, MAX_JSON_DEPTH):
        raise CaseFieldError("case", f"JSON nested deeper than {MAX_JSON_DEPTH} levels")
    try:
        return json.loads(text, parse_constant=_reject_constant)
    except json.JSONDecodeError as exc:
        raise CaseFieldError(
            "case", f"not valid JSON ({exc.msg} at line {exc.lineno} column {exc.colno}); "
            "the file may be truncated or hand-edited"
        ) from None
    except ValueError as exc:  # e.g. an integer with more digits than Python converts
        raise CaseFieldError("case", f"not readable as a case ({exc})") from None


_CASE_BLOCK_RE = re.compile(
    r'<script type="application/json" id="' + _CASE_ELEMENT_ID + r'">(.*?)</script>',
    re.DOTALL,
)


def _case_text_from_html(page: str) -> str:
    found = _CASE_BLOCK_RE.findall(page)
    if len(found) != 1:
        raise CaseFieldError(
            "page",
            "no bitprism case block in this HTML page (expected one "
            f'<script type="application/json" id="{_CASE_ELEMENT_ID}">)'
            if not found else "more than one bitprism case block in this HTML page",
        )
    return str(found[0])


def _check_envelope(case: Any) -> dict[str, Any]:
    want(case, "case", dict)
    if "bitprism_case" not in case:
        raise CaseFieldError("bitprism_case", "missing: this JSON is not a bitprism case file")
    version = want_int(case["bitprism_case"], "bitprism_case", 0)
    if version > CASE_SCHEMA:
        raise CaseFieldError(
            "bitprism_case",
            f"written by a newer bitprism (schema {version}); this version reads up to "
            f"{CASE_SCHEMA}; upgrade bitprism",
        )
    while version < CASE_SCHEMA:
        case = _MIGRATIONS[version](case)
        version += 1
    want_object(case, "", required=("bitprism_case", "kind", "state"),
                optional=("created", "versions", "note"))
    want_str(case["kind"], "kind", tuple(CASE_KINDS))
    want_str(case.get("created", ""), "created", max_chars=64)
    versions = want(case.get("versions", {}), "versions", dict)
    for key, val in versions.items():
        want_str(val, f"versions.{key}", max_chars=64)
    want_str(case.get("note", ""), "note", max_chars=MAX_NOTE_CHARS)
    want(case["state"], "state", dict)
    return case


def _widget_class(kind: str) -> Any:
    module, name = CASE_KINDS[kind]
    try:
        return getattr(importlib.import_module(module), name)
    except ImportError as exc:
        raise BitprismError(f"this bitprism cannot show a {kind!r} case ({exc})") from None


def read_case(path: str | os.PathLike[str]) -> dict[str, Any]:
    """The validated envelope of a case file or exported page (state checked by the widget)."""
    p = Path(path)
    label = p.name
    try:
        size = p.stat().st_size
        if size > MAX_CASE_BYTES:
            raise BitprismError(
                f"{label}: {size} bytes; a case file may be at most {MAX_CASE_BYTES} bytes"
            )
        with p.open("rb") as fh:
            raw = fh.read(MAX_CASE_BYTES + 1)
    except OSError as exc:
        raise BitprismError(f"{label}: cannot read the case file ({exc.strerror})") from None
    if len(raw) > MAX_CASE_BYTES:
        raise BitprismError(f"{label}: a case file may be at most {MAX_CASE_BYTES} bytes")
    try:
        text = raw.decode("utf-8")
        if text.lstrip().startswith("<") or p.suffix.lower() in (".html", ".htm"):
            text = _case_text_from_html(text)
        return _check_envelope(_parse_case_text(text))
    except UnicodeDecodeError:
        raise BitprismError(f"{label}: not UTF-8 text; a case file is JSON") from None
    except CaseFieldError as exc:
        raise BitprismError(f"{label}: {exc}") from None


def open_case(path: str | os.PathLike[str]) -> Any:
    """A live widget showing the view saved in a case file (``.json``) or exported page
    (``.html``). A wrong field raises ``BitprismError`` naming it; nothing is half-loaded."""
    case = read_case(path)
    from traitlets import TraitError

    cls = _widget_class(case["kind"])
    try:
        widget = cls._from_case_state(case["state"])
    except CaseFieldError as exc:
        what = exc.where if exc.where.startswith("state") else f"state.{exc.where}"
        raise BitprismError(f"{Path(path).name}: {what}: {exc.reason}") from None
    except (BitprismError, TraitError) as exc:  # checked by the widget's own validators
        raise BitprismError(f"{Path(path).name}: state: {exc}") from None
    widget._case_note = case.get("note", "")
    return widget


# ----- HTML page --------------------------------------------------------------------------------
_PAGE_CSS = """
body{font-family:system-ui,-apple-system,'Segoe UI',sans-serif;margin:2em auto;max-width:70em;
color:#1d1d24;background:#fff;padding:0 1em}
h1{font-size:1.3em;margin:0 0 .4em}
.bitprism-note{white-space:pre-wrap;border-left:4px solid #6f51b4;padding:.5em 1em;
background:#f6f3fc;margin:1em 0}
.bitprism-meta{border-collapse:collapse;font-size:.9em;margin:1em 0}
.bitprism-meta th{text-align:left;padding:.15em 1em .15em 0;color:#555;font-weight:600}
.bitprism-meta td{padding:.15em 0;font-family:ui-monospace,Menlo,Consolas,monospace}
.bitprism-view{overflow-x:auto;margin:1em 0}
footer{color:#666;font-size:.8em;margin-top:2em}
"""


def _script_safe_json(case: Mapping[str, Any]) -> str:
    """Case JSON for a ``<script type="application/json">`` block: ``</`` and ``<!--`` cannot
    end or comment the block because every ``<`` (and ``>``, ``&``) is a JSON unicode escape."""
    text = json.dumps(case, indent=1, ensure_ascii=False, allow_nan=False)
    return text.replace("<", "\\u003c").replace(">", "\\u003e").replace("&", "\\u0026")


def case_page(case: Mapping[str, Any], view_html: str, summary: Sequence[tuple[str, str]]) -> str:
    """One self-contained page: the view, the note, a summary, and the case as a data block."""
    note = str(case.get("note", ""))
    versions = case.get("versions", {})
    rows = list(summary) + [
        ("bitprism", str(versions.get("bitprism", ""))),
        ("saved (UTC)", str(case.get("created", ""))),
    ]
    meta = "".join(
        f"<tr><th>{_html.escape(k)}</th><td>{_html.escape(v)}</td></tr>" for k, v in rows
    )
    note_html = (
        f'<div class="bitprism-note">{_html.escape(note)}</div>' if note.strip() else ""
    )
    title = f"bitprism {case.get('kind', '')} case"
    return (
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
        f"<title>{_html.escape(title)}</title>\n<style>{_PAGE_CSS}</style>\n</head>\n<body>\n"
        f"<h1>{_html.escape(title)}</h1>\n{note_html}\n"
        f'<table class="bitprism-meta">{meta}</table>\n'
        f'<div class="bitprism-view">{view_html}</div>\n'
        "<footer>Reopen this view with <code>bitprism.open_case(&quot;this-page.html&quot;)"
        "</code>; the case is stored in this page as JSON data.</footer>\n"
        f'<script type="application/json" id="{_CASE_ELEMENT_ID}">\n'
        f"{_script_safe_json(case)}\n</script>\n</body>\n</html>\n"
    )


# ----- the mixin --------------------------------------------------------------------------------
class _SnapshotState:
    """Displays of one widget and the throttle of their static snapshots."""

    def __init__(self) -> None:
        self.display_ids: list[str] = []
        self.last = 0.0
        self.pending = False
        self.timer: threading.Timer | None = None
        self.lock = threading.Lock()


_PENDING: "set[Any]" = set()  # widgets with a snapshot waiting for the end of the cell
_HOOKED = False


def _flush_pending() -> None:
    for widget in list(_PENDING):
        widget._publish_snapshot()


def _hook_post_execute() -> None:
    """Flush waiting snapshots when a cell finishes (in its own output context)."""
    global _HOOKED
    if _HOOKED:
        return
    try:
        from IPython import get_ipython
    except ImportError:  # pragma: no cover - IPython comes with ipywidgets
        return
    ip = get_ipython()
    if ip is not None:
        ip.events.register("post_execute", _flush_pending)
        _HOOKED = True


class CaseFileMixin:
    """Save/export/reopen and static snapshots for a widget (see the module docstring)."""

    _case_kind: ClassVar[str] = ""
    _case_note: str = ""

    # -- provided by the widget --
    def _case_state(self) -> dict[str, Any]:  # pragma: no cover - protocol
        raise NotImplementedError

    @classmethod
    def _from_case_state(cls, state: dict[str, Any]) -> Any:  # pragma: no cover - protocol
        raise NotImplementedError

    def _static_html(self) -> str:  # pragma: no cover - protocol
        raise NotImplementedError

    def _case_summary(self) -> list[tuple[str, str]]:
        """(label, text) rows for the exported page; widgets may override."""
        state = self._case_state()
        rows: list[tuple[str, str]] = []
        fmts = state.get("formats")
        if isinstance(fmts, list):
            rows.append(("formats", ", ".join(
                f if isinstance(f, str) else f"{f['name']} (custom {get_format_layout(f)})"
                for f in fmts
            )))
        opts = state.get("options")
        if isinstance(opts, dict):
            rows.append(("options", ", ".join(f"{k}={v}" for k, v in opts.items())))
        return rows

    # -- case files --
    def case(self, note: str | None = None) -> dict[str, Any]:
        """The case of the current view, as a JSON-ready dict."""
        kind = type(self)._case_kind
        if kind not in CASE_KINDS:
            raise BitprismError(f"{type(self).__name__} has no case kind (got {kind!r})")
        note = self._case_note if note is None else note
        if not isinstance(note, str):
            raise BitprismError(f"note must be text, got {type(note).__name__}")
        if len(note) > MAX_NOTE_CHARS:
            raise BitprismError(f"note is {len(note)} characters; at most {MAX_NOTE_CHARS}")
        state = self._case_state()
        return {
            "bitprism_case": CASE_SCHEMA,
            "kind": kind,
            "created": _utc_now(),
            "versions": _versions(),
            "note": note,
            "state": state,
        }

    def save_case(self, path: str | os.PathLike[str], note: str = "") -> Path:
        """Write the current view as a case file (JSON); ``bitprism.open_case`` reloads it."""
        case = self.case(note)
        text = json.dumps(case, indent=1, ensure_ascii=False, allow_nan=False) + "\n"
        if len(text.encode("utf-8")) > MAX_CASE_BYTES:
            raise BitprismError(f"this case would exceed {MAX_CASE_BYTES} bytes; narrow the view")
        p = Path(path)
        p.write_text(text, encoding="utf-8")
        self._case_note = note
        return p

    def export_html(self, path: str | os.PathLike[str], note: str | None = None) -> Path:
        """Write one self-contained HTML page (no network, no external files) showing the
        current view, the note and the options, with the case embedded for ``open_case``."""
        case = self.case(note)
        page = case_page(case, self._static_html(), self._case_summary())
        p = Path(path)
        p.write_text(page, encoding="utf-8")
        return p

    # -- static snapshots in notebook outputs --
    def _snapshots(self) -> _SnapshotState:
        state = self.__dict__.get("_bitprism_snapshots")
        if state is None:
            state = _SnapshotState()
            self.__dict__["_bitprism_snapshots"] = state
        return state

    def _display_bundle(self) -> dict[str, Any]:
        bundle = dict(self._repr_mimebundle_() or {})  # type: ignore[attr-defined]
        try:
            bundle["text/html"] = self._static_html()
        except Exception as exc:  # a snapshot must never break displaying the widget
            bundle["text/html"] = f"<pre>{_html.escape(f'no snapshot: {exc}')}</pre>"
        bundle.setdefault("text/plain", repr(self))
        return bundle

    def _ipython_display_(self) -> None:
        """Publish the live widget view plus a static snapshot, under a display id that later
        changes update, so a saved notebook shows the last view even without a kernel."""
        from IPython.display import display

        snaps = self._snapshots()
        display_id = uuid.uuid4().hex
        with snaps.lock:
            snaps.display_ids.append(display_id)
            snaps.last = time.monotonic()
        display(self._display_bundle(), raw=True, display_id=display_id)
        _hook_post_execute()

    def _snapshot_changed(self) -> None:
        """Call at the end of ``_refresh``: republish the snapshot, at most every
        ``SNAPSHOT_INTERVAL`` seconds, with a final update when a cell ends or the interval
        passes."""
        snaps = self.__dict__.get("_bitprism_snapshots")
        if snaps is None or not snaps.display_ids:
            return
        with snaps.lock:
            wait = snaps.last + SNAPSHOT_INTERVAL - time.monotonic()
            if wait > 0:
                snaps.pending = True
                _PENDING.add(self)
                if snaps.timer is None:
                    snaps.timer = threading.Timer(wait, self._publish_snapshot)
                    snaps.timer.daemon = True
                    snaps.timer.start()
                return
        self._publish_snapshot()

    def _publish_snapshot(self) -> None:
        from IPython.display import update_display

        snaps = self._snapshots()
        with snaps.lock:
            if snaps.timer is not None:
                snaps.timer.cancel()
                snaps.timer = None
            snaps.pending = False
            _PENDING.discard(self)
            snaps.last = time.monotonic()
            ids = list(snaps.display_ids)
        bundle = self._display_bundle()
        for display_id in ids:
            update_display(bundle, raw=True, display_id=display_id)


def get_format_layout(params: Mapping[str, Any]) -> str:
    sign = 1 if params.get("signed", True) else 0
    return f"{sign}-{params.get('exponent_bits')}-{params.get('significand_bits')}"
