"""Small pieces of markup the widgets show around their views: the error message, the
TensorPrism's position line and summary note, and the static snapshot published in notebooks.

Kept here so that ``ui/`` holds no markup of its own.
"""

from __future__ import annotations

from html import escape
from typing import Any, Sequence

from ..tensors.window import Window
from .scan_html import scan_html

__all__ = [
    "message_html",
    "snapshot_error_html",
    "snapshot_html",
    "tensor_summary_html",
    "window_position_html",
]

_COUNTS_ONLY_NOTE = (
    "<div style='font-size:11px;color:#57606a'>counts only for a tensor this "
    "large; set summary_quantiles='histogram' for error figures</div>"
)


def message_html(text: str) -> str:
    """A widget's message (error or note) in bold red; nothing when there is none."""
    return f'<div style="color:#b00020;font-weight:bold">{escape(text)}</div>' if text else ""


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
    """The scan summary of a TensorPrism; ``counts_only`` adds a note on how to get errors."""
    return scan_html(result) + (_COUNTS_ONLY_NOTE if counts_only else "")


def window_position_html(
    dtype: object, shape: Sequence[int], w: Window, selected: Sequence[int]
) -> str:
    """Where the window is: dtype and shape, rows and columns shown, the selected index."""
    pos = (f"{dtype} {list(shape)} · rows {w.row0}..{w.row0 + w.rows - 1}"
           if w.row_axis is not None else f"{dtype} {list(shape)} · ")
    pos += f" cols {w.col0}..{w.col0 + w.cols - 1}"
    if selected:
        pos += f" · selected {list(selected)}"
    return f"<span style='font-size:12px'>{pos}</span>"
