"""A ``Prism``'s side of the case-file protocol (see ``ui/case_file.py``).

State stored (schema 1)::

    {"value": "0.1",                      # the input as exact text (what was typed, read by
                                           #   the exact parser; numbers were converted exactly)
     "source": {"format": "float16", "code": "0x7e01"} | null,   # a band's pinned bit pattern
     "formats": ["float32", {...to_params()...}],
     "options": {"rounding": ..., "overflow": ..., "subnormals": ..., "seed": ...},
     "via": "" | "float32", "aligned": true, "expression": "",
     "codes": ["0x3dcccccd", ...],        # what each band showed, checked again on reopening
     "selected": "float16", "compact": false, "caption": ""}   # optional (issue 17)

The last three keys are optional: a file without them (written before they existed) opens
with the first band selected, the full view and no caption, so the schema stays 1.

When a band's bit pattern is the source (a NaN payload, a signed zero, a flipped bit), that
pattern is what reloads the view, so it comes back bit for bit.
"""

from __future__ import annotations

from typing import Any

from ..errors import ParseError
from ..formats import FORMATS, Format
from ..render.widget_html import snapshot_html
from .case_codecs import (
    MAX_TEXT_CHARS,
    CaseFieldError,
    code_from_hex,
    code_to_hex,
    format_to_json,
    formats_from_json,
    options_from_json,
    options_to_json,
    want_bool,
    want_list,
    want_object,
    want_str,
)

__all__ = ["prism_case_state", "prism_from_case_state", "prism_static_html"]

_KEYS = ("value", "source", "formats", "options", "via", "aligned", "expression", "codes",
         "selected", "compact", "caption")


def prism_case_state(prism: Any) -> dict[str, Any]:
    fmts = prism.format_objects
    source = None
    if prism.source_format and prism.source_code is not None:
        pin = next((f for f in fmts if f.name == prism.source_format), None)
        if pin is not None:
            source = {"format": pin.name, "code": code_to_hex(prism.source_code, pin)}
    c = prism.comparison
    codes = [code_to_hex(r.code, r.format) for r in c.rows] if c is not None else None
    return {
        "value": prism.value,
        "source": source,
        "formats": [format_to_json(f) for f in fmts],
        "options": options_to_json(prism.rounding, prism.overflow, prism.subnormals, prism.seed),
        "via": prism.via,
        "aligned": bool(prism.aligned),
        "expression": prism.expression,
        "codes": codes,
        "selected": prism.selected_row().format.name if c is not None else "",
        "compact": bool(prism.compact),
        "caption": prism.caption,
    }


def _check_state(state: Any) -> dict[str, Any]:
    """Every field checked before anything is built; returns what the widget needs."""
    from ..numerics.parse import parse

    want_object(state, "state", required=("value", "formats"), optional=_KEYS)
    value = want_str(state["value"], "state.value")
    try:
        parse(value)
    except ParseError as exc:
        raise CaseFieldError("state.value", f"not a number: {exc.reason} (column {exc.column})")
    fmts = formats_from_json(state["formats"], "Prism")
    options = options_from_json(state.get("options", {}), "state.options")
    via = want_str(state.get("via", ""), "state.via", ("",) + tuple(FORMATS))
    aligned = want_bool(state.get("aligned", True), "state.aligned")
    expression = want_str(state.get("expression", ""), "state.expression", max_chars=MAX_TEXT_CHARS)
    source = None
    raw_source = state.get("source")
    if raw_source is not None:
        want_object(raw_source, "state.source", required=("format", "code"))
        name = want_str(raw_source["format"], "state.source.format", [f.name for f in fmts])
        pin = next(f for f in fmts if f.name == name)
        source = (pin, code_from_hex(raw_source["code"], pin, "state.source.code"))
    codes = None
    raw_codes = state.get("codes")
    if raw_codes is not None:
        want_list(raw_codes, "state.codes", len(fmts))
        if len(raw_codes) != len(fmts):
            raise CaseFieldError(
                "state.codes", f"one bit pattern per format expected ({len(fmts)}), "
                f"got {len(raw_codes)}"
            )
        codes = [code_from_hex(h, f, f"state.codes[{i}]") for i, (h, f) in
                 enumerate(zip(raw_codes, fmts))]
    selected = want_str(state.get("selected", ""), "state.selected",
                        [""] + [f.name for f in fmts])
    compact = want_bool(state.get("compact", False), "state.compact")
    caption = want_str(state.get("caption", ""), "state.caption", max_chars=MAX_TEXT_CHARS)
    return {
        "value": value, "formats": fmts, "options": options, "via": via, "aligned": aligned,
        "expression": expression, "source": source, "codes": codes, "selected": selected,
        "compact": compact, "caption": caption,
    }


def prism_from_case_state(cls: Any, state: Any) -> Any:
    s = _check_state(state)
    fmts: list[Format] = s["formats"]
    prism = cls(value=s["value"], formats=[f.name if FORMATS.get(f.name) == f else f
                                           for f in fmts])
    with prism._bulk():
        for key, val in s["options"].items():
            setattr(prism, key, val)
        prism.via = s["via"]
        prism.aligned = s["aligned"]
        prism.expression = s["expression"]
        prism.selected = s["selected"]
        prism.compact = s["compact"]
        prism.caption = s["caption"]
    if s["source"] is not None:
        pin, code = s["source"]
        prism.set_source(pin, code)
    _report_drift(prism, fmts, s["codes"])
    return prism


def _report_drift(prism: Any, fmts: list[Format], codes: list[int] | None) -> None:
    """Say so when a band no longer shows the saved bit pattern (unseeded stochastic rounding,
    or a bitprism whose casts changed): the person sees both patterns, not a silent change."""
    c = prism.comparison
    if codes is None or c is None:
        return
    diffs = [
        f"{f.name}: saved {code_to_hex(saved, f)}, now {code_to_hex(row.code, f)}"
        for f, saved, row in zip(fmts, codes, c.rows)
        if row.code != saved
    ]
    if diffs:
        why = " (stochastic rounding without a seed)" if (
            prism.rounding == "stochastic" and prism.seed is None
        ) else ""
        prism.message = "reopened case differs from what was saved" + why + ": " + "; ".join(diffs)


def prism_static_html(prism: Any) -> str:
    if prism.comparison is None:
        return ""
    evaluation = prism.evaluation_html.value if prism.expression.strip() else ""
    return snapshot_html(prism.message, prism.to_html(), evaluation)
