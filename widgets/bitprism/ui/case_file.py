"""Case files: the saved state of a widget, and the self-contained HTML page that carries one.

The pieces live in their own modules: the JSON codecs and field checks in ``case_codecs``, the
versioned envelope and ``open_case`` in ``case_envelope``, the page in ``render.case_page``, and
the notebook snapshots in ``snapshots``. ``CaseFileMixin`` puts them together for a widget.

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
  seconds, plus a final update), so nbconvert and static viewers show the last view.
* ``pin()`` writes the current view into the notebook as static HTML that shows without a
  kernel, in JupyterLab too (``ui/snapshots.py``).

The note is kept in ``_case_note`` (a widget may make it a property over a trait of its own):
``save_case``/``export_html`` without ``note=`` keep it, with ``note=`` replace it.
"""

from __future__ import annotations

import json
import os
from pathlib import Path
from typing import Any, ClassVar

from ..errors import BitprismError
from ..render.case_page import case_page
from ..render.widget_html import pinned_html
from .case_codecs import MAX_NOTE_CHARS, check_utf8, get_format_layout
from .case_envelope import (
    CASE_KINDS,
    CASE_SCHEMA,
    MAX_CASE_BYTES,
    library_versions,
    open_case,
    utc_now,
)
from .snapshots import (
    display_with_snapshot,
    pin_here,
    pin_to_slot,
    publish_snapshot,
    snapshot_changed,
)

__all__ = ["CaseFileMixin", "open_case"]


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
        check_utf8(note, "note")  # a case file is UTF-8: what it cannot encode is refused now
        state = self._case_state()
        return {
            "bitprism_case": CASE_SCHEMA,
            "kind": kind,
            "created": utc_now(),
            "versions": library_versions(),
            "note": note,
            "state": state,
        }

    def save_case(self, path: str | os.PathLike[str], note: str | None = None) -> Path:
        """Write the current view as a case file (JSON); ``bitprism.open_case`` reloads it.
        ``note`` replaces the widget's note; without it the note is kept (a reopened case's
        too)."""
        case = self.case(note)
        text = json.dumps(case, indent=1, ensure_ascii=False, allow_nan=False) + "\n"
        if len(text.encode("utf-8")) > MAX_CASE_BYTES:
            raise BitprismError(f"this case would exceed {MAX_CASE_BYTES} bytes; narrow the view")
        p = Path(path)
        p.write_text(text, encoding="utf-8")
        self._case_note = case["note"]
        return p

    def export_html(self, path: str | os.PathLike[str], note: str | None = None) -> Path:
        """Write one self-contained HTML page (no network, no external files) showing the
        current view, the note and the options, with the case embedded for ``open_case``.
        ``note`` as for ``save_case``."""
        case = self.case(note)
        page = case_page(case, self._static_html(), self._case_summary())
        p = Path(path)
        p.write_text(page, encoding="utf-8")
        self._case_note = case["note"]
        return p

    # -- pins (ui/snapshots.py) --
    def pin(self) -> None:
        """Write the current view into the notebook, as a static HTML output of the running
        cell: a saved notebook shows it without a kernel (JupyterLab, Notebook 7, nbconvert,
        static viewers), where a live widget shows "model not found"."""
        pin_here(self)

    def _pin_to_display(self) -> str:
        """Pin the current view under the widget's own output (for a pin button)."""
        return pin_to_slot(self)

    def _pinned_html(self) -> str:
        """The static view a pin writes: a line saying what and when, then the view."""
        when = utc_now().replace("T", " ").replace("Z", " UTC")
        return pinned_html(type(self).__name__, when, self._static_html())

    # -- static snapshots in notebook outputs (ui/snapshots.py) --
    def _ipython_display_(self) -> None:
        """Publish the live widget view plus a static snapshot, under a display id that later
        changes update, so a saved notebook shows the last view even without a kernel."""
        display_with_snapshot(self)

    def _snapshot_changed(self) -> None:
        """Call at the end of ``_refresh``: republish the snapshot, at most every
        ``SNAPSHOT_INTERVAL`` seconds, with a final update when a cell ends or the interval
        passes."""
        snapshot_changed(self)

    def _publish_snapshot(self) -> None:
        publish_snapshot(self)
