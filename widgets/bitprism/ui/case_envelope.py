"""The versioned envelope of a case file, and reading one back.

A *case file* is versioned JSON that reloads the same view::

    {"bitprism_case": 1, "kind": "prism" | "tensor_prism", "created": "2025-01-31T12:00:00Z",
     "versions": {"bitprism": ..., "numpy": ..., "ml_dtypes": ..., "python": ...},
     "note": "what the person wants a teammate to see", "state": {...}}

``open_case(path)`` reads a ``.json`` case file or an exported ``.html`` page (whose case is in a
``<script type="application/json" id="bitprism-case">`` data block), migrates older schemas
through ``_MIGRATIONS``, validates field by field, and returns a live widget of the right kind.
Nothing in a file is ever executed: it is parsed as JSON and checked against allow-lists.
"""

from __future__ import annotations

import datetime as _dt
import importlib
import json
import os
import platform
import re
from pathlib import Path
from typing import Any, Callable, Mapping

from .._version import __version__
from ..errors import BitprismError
from ..render.case_page import CASE_ELEMENT_ID
from .case_codecs import MAX_NOTE_CHARS, CaseFieldError, want, want_int, want_object, want_str

__all__ = [
    "CASE_KINDS",
    "CASE_SCHEMA",
    "MAX_CASE_BYTES",
    "MAX_JSON_DEPTH",
    "library_versions",
    "open_case",
    "read_case",
    "utc_now",
]

CASE_SCHEMA = 2  # the schema this version writes and the newest it reads
MAX_CASE_BYTES = 8 * 1024 * 1024  # a case file or exported page larger than this is refused
MAX_JSON_DEPTH = 24  # nesting deeper than any case we write is refused before it is walked

# kind -> (module, class): a fixed allow-list; nothing read from a file names code to import.
CASE_KINDS: Mapping[str, tuple[str, str]] = {
    "prism": ("bitprism.ui.prism", "Prism"),
    "tensor_prism": ("bitprism.ui.tensor_prism", "TensorPrism"),
    "probe": ("bitprism.probes.cases", "ProbeCase"),  # a trace's or watch's first event
}


def library_versions() -> dict[str, str]:
    """Versions of bitprism and of the libraries its results depend on, stored in each case."""
    import ml_dtypes
    import numpy

    return {
        "bitprism": __version__,
        "numpy": numpy.__version__,
        "ml_dtypes": ml_dtypes.__version__,
        "python": platform.python_version(),
    }


def utc_now() -> str:
    """The time a case is saved: UTC to the second, ``2025-01-31T12:00:00Z``."""
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


def _migrate_1_to_2(case: dict[str, Any]) -> dict[str, Any]:
    """Schema 1: a TensorPrism's value view had a linear scale or, with ``log_scale`` true, a
    log-magnitude one; schema 2 names the scale (``value_scale``) and may record the summary
    and counts the author saw (absent here: a reopened schema-1 case computes them on its
    saved window and says so). Other fields, and every Prism case, are unchanged."""
    out = dict(case)
    state = case.get("state")
    if out.get("kind") == "tensor_prism" and isinstance(state, dict) and "log_scale" in state:
        state = {k: v for k, v in state.items() if k != "log_scale"}
        log_scale = case["state"]["log_scale"]
        # a value that is not a bool is left for the field check to name
        state["value_scale"] = ("log" if log_scale else "linear") if isinstance(
            log_scale, bool) else log_scale
        out["state"] = state
    out["bitprism_case"] = 2
    return out


# _MIGRATIONS[v] turns a schema-v case into a schema-(v+1) one; open_case applies them in turn.
_MIGRATIONS: dict[int, Callable[[dict[str, Any]], dict[str, Any]]] = {
    0: _migrate_0_to_1,
    1: _migrate_1_to_2,
}


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
    r'<script type="application/json" id="' + CASE_ELEMENT_ID + r'">(.*?)</script>',
    re.DOTALL,
)


def _case_text_from_html(page: str) -> str:
    found = _CASE_BLOCK_RE.findall(page)
    if len(found) != 1:
        raise CaseFieldError(
            "page",
            "no bitprism case block in this HTML page (expected one "
            f'<script type="application/json" id="{CASE_ELEMENT_ID}">)'
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
    if hasattr(cls, "from_case"):  # a headless record (ProbeCase) reads the whole case itself
        try:
            return cls.from_case(case)
        except BitprismError as exc:
            raise BitprismError(f"{Path(path).name}: {exc}") from None
    try:
        widget = cls._from_case_state(case["state"])
    except CaseFieldError as exc:
        what = exc.where if exc.where.startswith("state") else f"state.{exc.where}"
        raise BitprismError(f"{Path(path).name}: {what}: {exc.reason}") from None
    except (BitprismError, TraitError) as exc:  # checked by the widget's own validators
        raise BitprismError(f"{Path(path).name}: state: {exc}") from None
    widget._case_note = case.get("note", "")
    return widget
