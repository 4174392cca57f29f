"""Static snapshots of a widget in notebook outputs, so a saved notebook shows the last view
even without a kernel.

A widget is displayed with its live view plus a static HTML snapshot under a display id;
later changes republish the snapshot under the same id, at most once per ``SNAPSHOT_INTERVAL``
seconds, with a final update when the interval passes or the cell ends (IPython's
``post_execute`` event). The widget provides ``_repr_mimebundle_()`` and ``_static_html()``.
"""

from __future__ import annotations

import functools
import threading
import time
import uuid
from typing import Any

from ..render.widget_html import snapshot_error_html

__all__ = [
    "SNAPSHOT_INTERVAL",
    "display_with_snapshot",
    "publish_snapshot",
    "snapshot_changed",
]

SNAPSHOT_INTERVAL = 0.5  # seconds between two republished snapshots of a view on screen


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
_STATE_KEY = "_bitprism_snapshots"  # where a widget's _SnapshotState lives in its __dict__


def _flush_pending() -> None:
    for widget in list(_PENDING):
        publish_snapshot(widget)


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


def _snapshots(widget: Any) -> _SnapshotState:
    state = widget.__dict__.get(_STATE_KEY)
    if state is None:
        state = _SnapshotState()
        widget.__dict__[_STATE_KEY] = state
    return state  # type: ignore[no-any-return]


def _display_bundle(widget: Any) -> dict[str, Any]:
    bundle = dict(widget._repr_mimebundle_() or {})
    try:
        bundle["text/html"] = widget._static_html()
    except Exception as exc:  # a snapshot must never break displaying the widget
        bundle["text/html"] = snapshot_error_html(exc)
    bundle.setdefault("text/plain", repr(widget))
    return bundle


def display_with_snapshot(widget: Any) -> None:
    """Publish the live widget view plus a static snapshot, under a display id that later
    changes update."""
    from IPython.display import display

    snaps = _snapshots(widget)
    display_id = uuid.uuid4().hex
    with snaps.lock:
        snaps.display_ids.append(display_id)
        snaps.last = time.monotonic()
    display(_display_bundle(widget), raw=True, display_id=display_id)
    _hook_post_execute()


def snapshot_changed(widget: Any) -> None:
    """The view changed: republish the snapshot, at most every ``SNAPSHOT_INTERVAL`` seconds,
    with a final update when a cell ends or the interval passes. Nothing when not displayed."""
    snaps = widget.__dict__.get(_STATE_KEY)
    if snaps is None or not snaps.display_ids:
        return
    with snaps.lock:
        wait = snaps.last + SNAPSHOT_INTERVAL - time.monotonic()
        if wait > 0:
            snaps.pending = True
            _PENDING.add(widget)
            if snaps.timer is None:
                snaps.timer = threading.Timer(wait, functools.partial(publish_snapshot, widget))
                snaps.timer.daemon = True
                snaps.timer.start()
            return
    publish_snapshot(widget)


def publish_snapshot(widget: Any) -> None:
    """Update every display of ``widget`` with its current snapshot now."""
    from IPython.display import update_display

    snaps = _snapshots(widget)
    with snaps.lock:
        if snaps.timer is not None:
            snaps.timer.cancel()
            snaps.timer = None
        snaps.pending = False
        _PENDING.discard(widget)
        snaps.last = time.monotonic()
        ids = list(snaps.display_ids)
    bundle = _display_bundle(widget)
    for display_id in ids:
        update_display(bundle, raw=True, display_id=display_id)
