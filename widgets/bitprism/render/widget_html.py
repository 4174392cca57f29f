"""Small pieces of markup the widgets show around their views: the error message and the
info line, the TensorPrism's position line, summary note and case note, the static snapshot
published in notebooks and the views pinned into them.

Kept here so that ``ui/`` holds no markup of its own.
"""

from __future__ import annotations

from html import escape
from typing import Any, Sequence

from ..tensors.window import Window
from .scan_html import scan_summary_html

__all__ = [
    "info_html",
    "message_html",
    "pinned_html",
    "pins_html",
    "snapshot_error_html",
    "snapshot_html",
    "recorded_summary_html",
    "tensor_summary_html",
    "window_position_html",
]

_QUIET = "font-size:11px;color:var(--jp-ui-font-color2,#57606a)"
_COUNTS_ONLY_NOTE = (
    f"<div style='{_QUIET}'>counts only for a tensor this "
    "large; set summary_quantiles='histogram' for error figures</div>"
)


def message_html(text: str) -> str:
    """A widget's error message in bold, in the theme's error colour; nothing when none."""
    if not text:
        return ""
    return (f'<div class="bitprism-error" style="color:var(--jp-error-color1,#b00020);'
            f'font-weight:bold;overflow-wrap:anywhere">{escape(text)}</div>')


def info_html(text: str) -> str:
    """A note that is not an error ("wrapped around to the start"), in the page's quiet text
    colour with an info mark; nothing when none."""
    if not text:
        return ""
    return (f'<div class="bitprism-info" style="color:var(--jp-ui-font-color1,#1f2328);'
            f'overflow-wrap:anywhere"><span aria-hidden="true" style="color:var('
            f'--jp-info-color1,#0969da)">ⓘ</span> {escape(text)}</div>')


def pinned_html(kind: str, when: str, view_html: str) -> str:
    """One pinned view: a line saying what and when, then the static view."""
    head = f"pinned {kind} view · {when}"
    return (f'<div class="bitprism bitprism-pinned" style="margin:4px 0">'
            f'<div style="{_QUIET};margin-bottom:2px">{escape(head)}</div>{view_html}</div>')


def pins_html(pins: Sequence[str]) -> str:
    """The views pinned into one notebook output, oldest first."""
    return "".join(pins)


def recorded_summary_html(summary_html: str, saved: str) -> str:
    """The whole-tensor summary a reopened case recorded, marked as recorded."""
    note = (f"<div style='{_QUIET}'>recorded when the case was saved ({escape(saved)}): "
            "the case holds only the saved window of the tensor</div>")
    return summary_html + note


def snapshot_html(message: str, view_html: str, extra_html: str = "") -> str:
    """A static snapshot of a view: its message (if any) above the view, then ``extra_html``."""
    parts = []
    if message:
        parts.append(message_html(message))
    parts.append(view_html)
    if extra_html:
        parts.append(extra_html)
    return "".join(parts)


def snapshot_error_html(error: object) -> str:
    """What a notebook output shows when the static snapshot could not be made."""
    return f"<pre>{escape(f'no snapshot: {error}')}</pre>"


def tensor_summary_html(result: Any, counts_only: bool) -> str:
    """The scan summary of a TensorPrism (wrapping to the column); ``counts_only`` adds a note
    on how to get errors."""
    return scan_summary_html(result) + (_COUNTS_ONLY_NOTE if counts_only else "")


def window_position_html(
    dtype: object, shape: Sequence[int], w: Window, selected: Sequence[int]
) -> str:
    """Where the window is: dtype and shape, rows and columns shown, the selected index."""
    pos = (f"{dtype} {list(shape)} · rows {w.row0}..{w.row0 + w.rows - 1} ·"
           if w.row_axis is not None else f"{dtype} {list(shape)} ·")
    pos += f" cols {w.col0}..{w.col0 + w.cols - 1}"
    if selected:
        pos += f" · selected {list(selected)}"
    return f"<span style='font-size:12px;overflow-wrap:anywhere'>{escape(pos)}</span>"
